//! Tests of the volume module: the case table on all 256 cube
//! configurations and on random small volumes (closed, manifold, oriented,
//! Euler characteristic from an independent voxel count), the ball against
//! its analytic area and volume, cavity filling, piece selection, affine
//! rules, sampling of linear functions, bad input.

use super::affine::{Affine, AffineSource, XformFields};
use super::mask::{solidify, Solid};
use super::mc::march;
use super::sample::{nearest, sample, trilinear, Method};
use super::table::{face_diagonals, table};
use super::*;
use crate::mesh::halfedge::Halfedges;
use crate::mesh::topology::EdgeTable;
use std::collections::HashMap;

/// Closed, edge-manifold, consistently oriented, vertex-manifold checks;
/// returns (Euler characteristic, number of face components).
fn check_closed_manifold(pos: &[[f64; 3]], faces: &[[u32; 3]]) -> (i64, usize) {
    // Every directed edge exactly once, its reverse exactly once.
    let mut dir: HashMap<(u32, u32), usize> = HashMap::new();
    for t in faces {
        assert!(
            t[0] != t[1] && t[1] != t[2] && t[0] != t[2],
            "repeated vertex in {t:?}"
        );
        for k in 0..3 {
            *dir.entry((t[k], t[(k + 1) % 3])).or_default() += 1;
        }
    }
    for (&(a, b), &c) in &dir {
        assert_eq!(c, 1, "directed edge {a}->{b} used {c} times");
        assert_eq!(dir.get(&(b, a)), Some(&1), "edge {a}->{b} has no opposite");
    }
    // Every vertex used; the halfedge structure accepts the faces (it
    // refuses non-manifold input) and each vertex's faces form one fan.
    let mut used = vec![false; pos.len()];
    for t in faces {
        for &v in t {
            used[v as usize] = true;
        }
    }
    assert!(used.iter().all(|&u| u), "unreferenced vertex");
    let he = Halfedges::from_faces(pos.len(), faces).expect("halfedges");
    let mut deg = vec![0usize; pos.len()];
    for t in faces {
        for &v in t {
            deg[v as usize] += 1;
        }
    }
    for v in 0..pos.len() {
        assert_eq!(
            he.degree(v as u32),
            deg[v],
            "vertex {v} is not a single fan"
        );
    }
    let e = dir.len() / 2;
    let chi = pos.len() as i64 - e as i64 + faces.len() as i64;
    let m = TriMesh {
        positions: pos.to_vec(),
        faces: faces.to_vec(),
    };
    let (_, comps) = crate::mesh::topology::face_components(&m);
    let _ = EdgeTable::new(&m);
    (chi, comps)
}

/// 6-connected foreground pieces and 18-connected background pieces (with
/// the outside) of a small binary volume, by plain flood fill.
fn pieces(dims: [usize; 3], fg: &[bool]) -> (usize, usize) {
    let [nx, ny, nz] = dims;
    // Padded by one background layer.
    let (px, py, pz) = (nx + 2, ny + 2, nz + 2);
    let inside = |x: usize, y: usize, z: usize| {
        x >= 1
            && y >= 1
            && z >= 1
            && x <= nx
            && y <= ny
            && z <= nz
            && fg[(x - 1) + nx * ((y - 1) + ny * (z - 1))]
    };
    let count = |want: bool, conn: usize| {
        let mut seen = vec![false; px * py * pz];
        let mut n = 0;
        for z in 0..pz {
            for y in 0..py {
                for x in 0..px {
                    let i = x + px * (y + py * z);
                    if seen[i] || inside(x, y, z) != want {
                        continue;
                    }
                    n += 1;
                    seen[i] = true;
                    let mut st = vec![(x, y, z)];
                    while let Some((a, b, c)) = st.pop() {
                        for dz in -1i64..=1 {
                            for dy in -1i64..=1 {
                                for dx in -1i64..=1 {
                                    let k = (dx != 0) as usize
                                        + (dy != 0) as usize
                                        + (dz != 0) as usize;
                                    if k == 0 || k > conn {
                                        continue;
                                    }
                                    let (u, v, w) = (a as i64 + dx, b as i64 + dy, c as i64 + dz);
                                    if u < 0
                                        || v < 0
                                        || w < 0
                                        || u >= px as i64
                                        || v >= py as i64
                                        || w >= pz as i64
                                    {
                                        continue;
                                    }
                                    let (u, v, w) = (u as usize, v as usize, w as usize);
                                    let j = u + px * (v + py * w);
                                    if !seen[j] && inside(u, v, w) == want {
                                        seen[j] = true;
                                        st.push((u, v, w));
                                    }
                                }
                            }
                        }
                    }
                }
            }
        }
        n
    };
    (count(true, 1), count(false, 2))
}

/// Euler characteristic of the foreground under (6, 18) connectivity,
/// counted on the voxels alone: the cubical complex of foreground voxel
/// centres (vertices, unit edges, unit squares, unit cubes: the standard
/// count for 6-connected foreground, e.g. Kong and Rosenfeld 1989), plus
/// one for every 2x2x2 block whose background is exactly two opposite
/// corners (those corners are not 18-adjacent, so the ring of six voxels
/// around them is a disk, not an annulus).
fn euler_6_18(dims: [usize; 3], fg: &[bool]) -> i64 {
    let [nx, ny, nz] = dims;
    let at = |x: i64, y: i64, z: i64| -> bool {
        x >= 0
            && y >= 0
            && z >= 0
            && (x as usize) < nx
            && (y as usize) < ny
            && (z as usize) < nz
            && fg[x as usize + nx * (y as usize + ny * z as usize)]
    };
    let mut chi = 0i64;
    // Every cell is indexed by its lowest voxel and its extent (0/1 per axis).
    for z in -1..nz as i64 {
        for y in -1..ny as i64 {
            for x in -1..nx as i64 {
                for ext in 0..8usize {
                    let e = [ext & 1, (ext >> 1) & 1, (ext >> 2) & 1];
                    let dim = e.iter().sum::<usize>() as u32;
                    let mut all = true;
                    for c in 0..8usize {
                        let o = [c & 1, (c >> 1) & 1, (c >> 2) & 1];
                        if (0..3).any(|a| o[a] > e[a]) {
                            continue;
                        }
                        if !at(x + o[0] as i64, y + o[1] as i64, z + o[2] as i64) {
                            all = false;
                        }
                    }
                    if all {
                        chi += if dim % 2 == 0 { 1 } else { -1 };
                    }
                }
                // The ring correction on the 2x2x2 block at (x, y, z).
                let mut bg = Vec::new();
                for c in 0..8usize {
                    if !at(
                        x + (c & 1) as i64,
                        y + ((c >> 1) & 1) as i64,
                        z + ((c >> 2) & 1) as i64,
                    ) {
                        bg.push(c);
                    }
                }
                if bg.len() == 2 && bg[0] ^ bg[1] == 7 {
                    chi += 1;
                }
            }
        }
    }
    chi
}

/// Check a binary volume's raw surface (no filling, no piece removal).
fn check_bits(dims: [usize; 3], fg: &[bool]) {
    let solid = Solid::from_bits(dims, fg);
    let (pos, faces) = march(&solid, None);
    if !fg.iter().any(|&b| b) {
        assert!(faces.is_empty());
        return;
    }
    let (chi, comps) = check_closed_manifold(&pos, &faces);
    let (f6, b18) = pieces(dims, fg);
    // Adjacent foreground and background pieces form a tree; each tree edge
    // is one surface component.
    assert_eq!(comps, f6 + b18 - 1, "components, volume {fg:?}");
    assert_eq!(
        chi,
        2 * euler_6_18(dims, fg),
        "Euler characteristic, volume {fg:?}"
    );
    // Each surface component encloses a positive volume on its foreground side.
    let m = TriMesh {
        positions: pos,
        faces,
    };
    assert!(m.signed_volume() > 0.0, "orientation, volume {fg:?}");
}

#[test]
fn table_needs_no_face_diagonal() {
    assert_eq!(face_diagonals(), 0);
    assert!(table()[0].is_empty() && table()[255].is_empty());
    // One corner: one triangle; a face's four corners: a quadrilateral.
    assert_eq!(table()[1].len(), 1);
    assert_eq!(table()[0b0000_1111].len(), 2);
}

#[test]
fn all_256_cube_configurations_are_closed_manifolds() {
    for config in 0..256usize {
        let fg: Vec<bool> = (0..8).map(|c| (config >> c) & 1 == 1).collect();
        check_bits([2, 2, 2], &fg);
        if config != 0 {
            let (f6, _) = pieces([2, 2, 2], &fg);
            let (pos, faces) = march(&Solid::from_bits([2, 2, 2], &fg), None);
            let (chi, _) = check_closed_manifold(&pos, &faces);
            assert_eq!(chi, 2 * f6 as i64, "config {config:#010b}");
        }
    }
}

#[test]
fn random_4x4x4_volumes_are_closed_manifolds() {
    let mut s: u64 = 0x9E37_79B9_7F4A_7C15;
    for round in 0..1000 {
        let mut fg = vec![false; 64];
        let p = 0.2 + 0.6 * (round as f64 / 1000.0);
        for b in &mut fg {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            *b = ((s >> 11) as f64 / (1u64 << 53) as f64) < p;
        }
        check_bits([4, 4, 4], &fg);
    }
}
