//! Tests of the volume module: the case table on all 256 cube
//! configurations and on random small volumes (closed, manifold, oriented,
//! Euler characteristic from an independent voxel count), the ball against
//! its analytic area and volume, cavity filling, piece selection, affine
//! rules, sampling of linear functions, bad input.

#![allow(clippy::needless_range_loop)]

use super::affine::{Affine, AffineSource, XformFields};
use super::mask::{solidify, Solid};
use super::mc::march;
use super::sample::{nearest, sample, trilinear, Method};
use super::table::{face_diagonals, table};
use super::*;
use crate::mesh::halfedge::Halfedges;
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
                        chi += if dim.is_multiple_of(2) { 1 } else { -1 };
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

/// A volume on an `n^3` grid with `affine`, values `f(mm position)`.
fn field_volume(n: usize, affine: Affine, f: impl Fn([f64; 3]) -> f64) -> Volume {
    let mut values = Vec::with_capacity(n * n * n);
    for k in 0..n {
        for j in 0..n {
            for i in 0..n {
                values.push(f(affine.apply([i as f64, j as f64, k as f64])));
            }
        }
    }
    Volume {
        dims: [n, n, n],
        values,
        affine,
        affine_source: AffineSource::Sform,
        space: "NIFTI_XFORM_SCANNER_ANAT".into(),
    }
}

/// An oblique affine with spacing `h` mm: a rotation about (1, 2, 2)/3 by
/// 0.3 rad, the x axis reversed when `mirror` (negative determinant).
fn oblique(h: f64, mirror: bool, offset: [f64; 3]) -> Affine {
    let (ax, th) = ([1.0 / 3.0, 2.0 / 3.0, 2.0 / 3.0], 0.3f64);
    let (c, s) = (th.cos(), th.sin());
    let mut m = [[0.0; 4]; 3];
    for r in 0..3 {
        for col in 0..3 {
            let k = [
                [0.0, -ax[2], ax[1]],
                [ax[2], 0.0, -ax[0]],
                [-ax[1], ax[0], 0.0],
            ];
            let id = if r == col { 1.0 } else { 0.0 };
            let rot = c * id + s * k[r][col] + (1.0 - c) * ax[r] * ax[col];
            let sign = if mirror && col == 0 { -1.0 } else { 1.0 };
            m[r][col] = rot * h * sign;
        }
        m[r][3] = offset[r];
    }
    Affine { m }
}

/// Voxelised ball of radius `r_vox` voxels (centre of a 2r+5 grid) in mm.
fn ball(r_vox: f64, h: f64, mirror: bool, smooth_field: bool) -> (Volume, [f64; 3], f64) {
    let n = (2.0 * r_vox).ceil() as usize + 5;
    let c = (n - 1) as f64 / 2.0 + 0.137; // off-grid centre
    let a0 = oblique(h, mirror, [-40.0, 12.5, 7.0]);
    let centre = a0.apply([c, c + 0.071, c - 0.043]);
    let r = r_vox * h;
    let v = field_volume(n, a0, |p| {
        let d =
            ((p[0] - centre[0]).powi(2) + (p[1] - centre[1]).powi(2) + (p[2] - centre[2]).powi(2))
                .sqrt();
        if smooth_field {
            (r - d) / h
        } else if d <= r {
            1.0
        } else {
            0.0
        }
    });
    (v, centre, r)
}

#[test]
fn binary_ball_area_and_volume_within_voxel_tolerance() {
    for &mirror in &[false, true] {
        let (v, _, r) = ball(10.0, 0.8, mirror, false);
        let (mesh, rep) = extract(&v, &ExtractOptions::default()).expect("extract");
        let (chi, comps) = check_closed_manifold(&mesh.positions, &mesh.faces);
        assert_eq!((chi, comps), (2, 1));
        assert_eq!(rep.flipped_for_negative_determinant, mirror);
        let (a_true, v_true) = (
            4.0 * std::f64::consts::PI * r * r,
            4.0 / 3.0 * std::f64::consts::PI * r.powi(3),
        );
        let h = 0.8;
        // Vertices are midpoints between a centre inside (distance <= R)
        // and one outside (> R) h apart, so they lie within h/2 of the
        // sphere: |V - V_true| <= 4 pi R^2 h / 2 (first order) = 1.5 h/R
        // relative.
        let vol = mesh.signed_volume();
        assert!(
            (vol - v_true).abs() <= 1.5 * h / r * v_true,
            "volume {vol} vs {v_true}"
        );
        // Area of a digitised sphere by binary marching cubes: within 10%
        // (the facets of a binary surface tilt by up to ~35 degrees from
        // the true normal; measured +7.8% here, and
        // scikit-image agrees, see tests/reference/test_volume_nibabel.py).
        let area = mesh.area();
        assert!(
            (area - a_true).abs() <= 0.10 * a_true,
            "area {area} vs {a_true}"
        );
        eprintln!(
            "binary ball mirror={mirror}: area/true {:.4}, volume/true {:.4}",
            area / a_true,
            vol / v_true
        );
    }
}

#[test]
fn smooth_ball_area_and_volume_second_order() {
    let (v, centre, r) = ball(10.0, 0.8, true, true);
    let opts = ExtractOptions {
        level: 0.0,
        smooth_iterations: 0,
    };
    let (mesh, _) = extract(&v, &opts).expect("extract");
    let (chi, _) = check_closed_manifold(&mesh.positions, &mesh.faces);
    assert_eq!(chi, 2);
    let (a_true, v_true) = (
        4.0 * std::f64::consts::PI * r * r,
        4.0 / 3.0 * std::f64::consts::PI * r.powi(3),
    );
    // A signed-distance field interpolated linearly: vertices on the sphere
    // up to O(h^2 / R); flat triangles with edges up to sqrt(2) h cut below
    // the sphere by at most (sqrt(2) h)^2 / (8 R)... relative (h/R)^2 bound.
    let h = 0.8;
    let tol = (h / r).powi(2);
    let (area, vol) = (mesh.area(), mesh.signed_volume());
    assert!(
        (area / a_true - 1.0).abs() <= tol,
        "area {area} vs {a_true}"
    );
    assert!(
        (vol / v_true - 1.0).abs() <= tol,
        "volume {vol} vs {v_true}"
    );
    for p in &mesh.positions {
        let d =
            ((p[0] - centre[0]).powi(2) + (p[1] - centre[1]).powi(2) + (p[2] - centre[2]).powi(2))
                .sqrt();
        assert!(
            (d - r).abs() <= h * h / r,
            "vertex at distance {d}, R = {r}"
        );
    }
    eprintln!(
        "smooth ball: area/true {:.5}, volume/true {:.5}",
        area / a_true,
        vol / v_true
    );
}

#[test]
fn taubin_smoothing_keeps_closed_ball_and_volume() {
    let (v, _, r) = ball(8.0, 1.0, false, false);
    let (raw, _) = extract(&v, &ExtractOptions::default()).expect("extract");
    let opts = ExtractOptions {
        level: 0.5,
        smooth_iterations: 10,
    };
    let (m, rep) = extract(&v, &opts).expect("extract");
    assert_eq!(rep.smooth_iterations, 10);
    assert_eq!(m.faces, raw.faces);
    let (chi, _) = check_closed_manifold(&m.positions, &m.faces);
    assert_eq!(chi, 2);
    let a_true = 4.0 * std::f64::consts::PI * r * r;
    // Smoothing removes the staircase: the area comes closer to the sphere's,
    // and the lambda|mu pair keeps the volume within 2%.
    assert!((m.area() - a_true).abs() < (raw.area() - a_true).abs());
    assert!((m.signed_volume() / raw.signed_volume() - 1.0).abs() < 0.02);
    // Plain Laplacian smoothing (mu = 0 stand-in: lambda twice) shrinks more.
    let mut lap = raw.clone();
    smooth::taubin(&mut lap, 10, 0.5, 0.5);
    assert!(lap.signed_volume() < 0.95 * raw.signed_volume());
}

#[test]
fn cavities_are_filled_and_the_largest_piece_kept() {
    // A hollow cube shell (7^3 with a 3^3 hole), a separate 2-voxel piece,
    // in a 14 x 9 x 9 grid.
    let dims = [14usize, 9, 9];
    let mut vals = vec![0.0; dims[0] * dims[1] * dims[2]];
    let idx = |i: usize, j: usize, k: usize| i + dims[0] * (j + dims[1] * k);
    for k in 1..8 {
        for j in 1..8 {
            for i in 1..8 {
                let hole = (3..6).contains(&i) && (3..6).contains(&j) && (3..6).contains(&k);
                if !hole {
                    vals[idx(i, j, k)] = 1.0;
                }
            }
        }
    }
    vals[idx(11, 4, 4)] = 1.0;
    vals[idx(12, 4, 4)] = 1.0;
    // A voxel touching the shell only along an edge (18-adjacent): its own
    // 6-connected piece, dropped.
    vals[idx(8, 8, 4)] = 1.0;
    let (solid, rep) = solidify(&vals, dims, 0.5).expect("solidify");
    assert_eq!(rep.cavity_voxels_filled, 27);
    assert_eq!(rep.cavities_filled, 1);
    assert_eq!(rep.pieces, 3);
    assert_eq!(rep.kept_voxels, 343);
    assert_eq!(rep.dropped_voxels, 3);
    let (pos, faces) = march(&solid, None);
    let (chi, comps) = check_closed_manifold(&pos, &faces);
    assert_eq!((chi, comps), (2, 1));
    // The solid 7^3 cube: a binary-cube surface with volume 7^3 minus the
    // cut corners and edges (midpoint surface): between 6^3 and 7^3.
    let m = TriMesh {
        positions: pos,
        faces,
    };
    assert!(m.signed_volume() > 216.0 && m.signed_volume() < 343.0);
    // A diagonal cavity pair: background voxels 18-adjacent to the outside
    // through an edge are not a cavity.
    let mut v2 = vec![1.0; 27];
    v2[0] = 0.0; // corner voxel: on the border, not a cavity
    let (_, r2) = solidify(&v2, [3, 3, 3], 0.5).expect("solidify");
    assert_eq!(r2.cavity_voxels_filled, 0);
}

#[test]
fn ring_keeps_its_handle() {
    // A square ring of voxels (a digital torus): genus 1, chi 0.
    let dims = [5usize, 5, 1];
    let mut fg = [true; 25];
    fg[12] = false;
    let vals: Vec<f64> = fg.iter().map(|&b| f64::from(u8::from(b))).collect();
    let (solid, rep) = solidify(&vals, dims, 0.5).expect("solidify");
    assert_eq!(
        rep.cavity_voxels_filled, 0,
        "the hole is open to the border"
    );
    let (pos, faces) = march(&solid, None);
    let (chi, comps) = check_closed_manifold(&pos, &faces);
    assert_eq!((chi, comps), (0, 1));
}

#[test]
fn bad_masks_are_refused() {
    let e = solidify(&[0.0; 8], [2, 2, 2], 0.5).unwrap_err().to_string();
    assert!(e.contains("empty"), "{e}");
    let mut v = vec![1.0; 8];
    v[5] = f64::NAN;
    let e = solidify(&v, [2, 2, 2], 0.5).unwrap_err().to_string();
    assert!(e.contains("(1, 0, 1)") && e.contains("NaN"), "{e}");
    let e = solidify(&[1.0; 8], [2, 2, 2], f64::NAN)
        .unwrap_err()
        .to_string();
    assert!(e.contains("level"), "{e}");
}

#[test]
fn output_is_the_same_for_any_thread_count() {
    let (v, _, _) = ball(6.0, 1.0, false, true);
    let opts = ExtractOptions {
        level: 0.0,
        smooth_iterations: 2,
    };
    let one = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .expect("pool");
    let three = rayon::ThreadPoolBuilder::new()
        .num_threads(3)
        .build()
        .expect("pool");
    let (a, _) = one.install(|| extract(&v, &opts)).expect("extract");
    let (b, _) = three.install(|| extract(&v, &opts)).expect("extract");
    assert_eq!(a, b);
}

/// Header fields with only the sform set.
fn sform_fields(m: [[f64; 4]; 3]) -> XformFields {
    XformFields {
        pixdim: [1.0, 1.0, 1.0, 1.0],
        qform_code: 0,
        sform_code: 1,
        quatern: [0.0; 3],
        qoffset: [0.0; 3],
        srow: m,
    }
}

#[test]
fn affine_rule_sform_then_qform_then_pixdim() {
    let a = oblique(1.3, true, [1.0, -2.0, 3.0]);
    let (got, src) = Affine::from_header(&sform_fields(a.m)).expect("sform");
    assert_eq!((got, src), (a, AffineSource::Sform));
    // qform: a rotation of pi/2 about z (quaternion (cos 45, 0, 0, sin 45)),
    // spacings 2, 3, 4, qfac -1, offset (10, 20, 30):
    // i -> (0, 2, 0), j -> (-3, 0, 0), k -> (0, 0, -4).
    let s = std::f64::consts::FRAC_1_SQRT_2;
    let q = XformFields {
        pixdim: [-1.0, 2.0, 3.0, 4.0],
        qform_code: 1,
        sform_code: 0,
        quatern: [0.0, 0.0, s],
        qoffset: [10.0, 20.0, 30.0],
        srow: [[0.0; 4]; 3],
    };
    let (got, src) = Affine::from_header(&q).expect("qform");
    assert_eq!(src, AffineSource::Qform);
    let want = [
        [0.0, -3.0, 0.0, 10.0],
        [2.0, 0.0, 0.0, 20.0],
        [0.0, 0.0, -4.0, 30.0],
    ];
    for r in 0..3 {
        for c in 0..4 {
            assert!((got.m[r][c] - want[r][c]).abs() < 1e-12, "{:?}", got.m);
        }
    }
    let p = XformFields { qform_code: 0, ..q };
    let (got, src) = Affine::from_header(&p).expect("pixdim");
    assert_eq!(
        (got, src),
        (Affine::scaling([2.0, 3.0, 4.0]), AffineSource::Pixdim)
    );
    // Inverse.
    let inv = a.inverse();
    let x = [3.5, -1.25, 7.0];
    let back = inv.apply(a.apply(x));
    for k in 0..3 {
        assert!((back[k] - x[k]).abs() < 1e-12);
    }
}

#[test]
fn singular_and_bad_affines_are_refused() {
    let mut m = [
        [1.0, 0.0, 0.0, 0.0],
        [0.0, 1.0, 0.0, 0.0],
        [1.0, 0.0, 0.0, 0.0],
    ];
    let e = Affine::from_header(&sform_fields(m))
        .unwrap_err()
        .to_string();
    assert!(e.contains("singular"), "{e}");
    m[2] = [0.0, 0.0, f64::NAN, 0.0];
    let e = Affine::from_header(&sform_fields(m))
        .unwrap_err()
        .to_string();
    assert!(e.contains("non-finite"), "{e}");
    let f = XformFields {
        pixdim: [1.0, 1.0, 0.0, 1.0],
        qform_code: 0,
        sform_code: 0,
        quatern: [0.0; 3],
        qoffset: [0.0; 3],
        srow: [[0.0; 4]; 3],
    };
    let e = Affine::from_header(&f).unwrap_err().to_string();
    assert!(e.contains("pixdim"), "{e}");
}

#[test]
fn sampling_a_linear_function_is_exact() {
    let a = oblique(1.7, true, [5.0, -3.0, 11.0]);
    let lin = |p: [f64; 3]| 2.5 * p[0] - 1.25 * p[1] + 0.5 * p[2] + 7.0;
    let v = field_volume(9, a, lin);
    // Points anywhere inside the grid of voxel centres, including faces.
    let mut s: u64 = 42;
    let mut rnd = move || {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (s >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut pos = Vec::new();
    for _ in 0..200 {
        pos.push(a.apply([8.0 * rnd(), 8.0 * rnd(), 8.0 * rnd()]));
    }
    pos.push(a.apply([0.0, 0.0, 0.0]));
    pos.push(a.apply([8.0, 8.0, 8.0]));
    pos.push(a.apply([8.0, 3.3, 0.0]));
    pos.push(a.apply([8.7, 3.3, 0.0])); // outside
    let n = pos.len();
    let mesh = TriMesh {
        positions: pos.clone(),
        faces: vec![[0, 1, 2]],
    };
    let got = sample(&v, &mesh, 0.0, Method::Trilinear);
    assert_eq!(got.outside, 1);
    assert!(got.values[n - 1].is_nan());
    for (p, g) in pos.iter().zip(&got.values).take(n - 1) {
        let want = lin(*p);
        assert!(
            (g - want).abs() <= 1e-12 * (1.0 + want.abs()) * 100.0,
            "{g} vs {want}"
        );
    }
    // Nearest: the value at the nearest voxel centre.
    let near = sample(&v, &mesh, 0.0, Method::Nearest);
    assert_eq!(near.outside, 1, "8.7 rounds to 9, outside");
    let w = nearest(&v, [2.4, 2.6, 0.49]).expect("inside");
    assert!((w - lin(a.apply([2.0, 3.0, 0.0]))).abs() < 1e-9);
    assert!(trilinear(&v, [-0.1, 0.0, 0.0]).is_none());
    assert!(nearest(&v, [-0.6, 0.0, 0.0]).is_none());
}

#[test]
fn sampling_along_normals_reaches_the_offset_surface() {
    // Values = distance from a centre; the extracted ball surface sampled
    // 1.5 mm out gives R + 1.5 (to the interpolation error of the sphere).
    let (v, centre, r) = ball(8.0, 1.0, true, true);
    let dist = field_volume(v.dims[0], v.affine, |p| {
        ((p[0] - centre[0]).powi(2) + (p[1] - centre[1]).powi(2) + (p[2] - centre[2]).powi(2))
            .sqrt()
    });
    let (mesh, _) = extract(
        &v,
        &ExtractOptions {
            level: 0.0,
            smooth_iterations: 0,
        },
    )
    .expect("extract");
    let out = sample(&dist, &mesh, 1.5, Method::Trilinear);
    assert_eq!(out.outside, 0);
    let mean = out.values.iter().sum::<f64>() / out.values.len() as f64;
    assert!(
        (mean - (r + 1.5)).abs() < 0.05,
        "mean {mean}, want {}",
        r + 1.5
    );
}

/// A scratch file path unique to this test process.
fn scratch(name: &str) -> std::path::PathBuf {
    let d = std::env::temp_dir().join(format!("horosphere-volume-{}", std::process::id()));
    std::fs::create_dir_all(&d).expect("scratch dir");
    d.join(name)
}

#[test]
fn nifti_round_trip_and_refusals() {
    use super::nifti::{encode_nifti1, read_volume, StoreType};
    let a = oblique(1.5, true, [3.0, 4.0, 5.0]);
    let dims = [3usize, 4, 5];
    let vals: Vec<f64> = (0..60).map(|i| i as f64 * 0.5 - 7.0).collect();
    for (store, name) in [
        (StoreType::F64, "f64.nii"),
        (StoreType::F32, "f32.nii"),
        (StoreType::I16, "i16.nii"),
    ] {
        let p = scratch(name);
        let mut v = vals.clone();
        if store == StoreType::I16 {
            v.iter_mut().for_each(|x| *x = x.round());
        }
        std::fs::write(&p, encode_nifti1(&dims, &v, &a, store)).expect("write");
        let got = read_volume(&p).expect("read");
        assert_eq!(got.dims, dims);
        assert_eq!(got.values, v, "{name}");
        assert_eq!(got.affine_source, AffineSource::Sform);
        assert_eq!(got.space, "NIFTI_XFORM_SCANNER_ANAT");
        for r in 0..3 {
            for c in 0..4 {
                assert_eq!(got.affine.m[r][c], f64::from(a.m[r][c] as f32));
            }
        }
    }
    // Gzip: the same volume read back.
    let raw = encode_nifti1(&dims, &vals, &a, StoreType::F64);
    let gz = scratch("f64.nii.gz");
    let mut enc = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::fast());
    std::io::Write::write_all(&mut enc, &raw).expect("gzip");
    std::fs::write(&gz, enc.finish().expect("gzip")).expect("write");
    assert_eq!(read_volume(&gz).expect("read gz").values, vals);
    // One volume in a 4-D file: accepted; two: refused.
    let p = scratch("one4d.nii");
    std::fs::write(&p, encode_nifti1(&[3, 4, 5, 1], &vals, &a, StoreType::F32)).expect("write");
    assert_eq!(read_volume(&p).expect("4-D, one volume").dims, dims);
    let p = scratch("two4d.nii");
    let two: Vec<f64> = vals.iter().chain(&vals).copied().collect();
    std::fs::write(&p, encode_nifti1(&[3, 4, 5, 2], &two, &a, StoreType::F32)).expect("write");
    let e = read_volume(&p).unwrap_err().to_string();
    assert!(
        e.contains("two4d.nii") && e.contains("header dim") && e.contains("3-D"),
        "{e}"
    );
    // 2-D: refused.
    let p = scratch("flat.nii");
    std::fs::write(&p, encode_nifti1(&[3, 4], &vals[..12], &a, StoreType::F32)).expect("write");
    let e = read_volume(&p).unwrap_err().to_string();
    assert!(e.contains("2 dimensions"), "{e}");
    // Complex data (datatype 32, 8 bytes per voxel): refused.
    let mut bytes = encode_nifti1(&dims, &vals, &a, StoreType::F64);
    bytes[70..72].copy_from_slice(&32i16.to_le_bytes());
    let p = scratch("complex.nii");
    std::fs::write(&p, &bytes).expect("write");
    let e = read_volume(&p).unwrap_err().to_string();
    assert!(
        e.contains("header datatype") && e.contains("not supported"),
        "{e}"
    );
    // Truncated data: refused by the reader.
    let bytes = encode_nifti1(&dims, &vals, &a, StoreType::F64);
    let p = scratch("short.nii");
    std::fs::write(&p, &bytes[..bytes.len() - 16]).expect("write");
    let e = read_volume(&p).unwrap_err().to_string();
    assert!(e.contains("short.nii"), "{e}");
    // Singular sform.
    let sing = Affine {
        m: [
            [1.0, 0.0, 0.0, 0.0],
            [2.0, 0.0, 0.0, 0.0],
            [0.0, 0.0, 1.0, 0.0],
        ],
    };
    let p = scratch("singular.nii");
    std::fs::write(&p, encode_nifti1(&dims, &vals, &sing, StoreType::F32)).expect("write");
    let e = read_volume(&p).unwrap_err().to_string();
    assert!(e.contains("singular.nii") && e.contains("singular"), "{e}");
    // Missing file.
    assert!(read_volume(&scratch("absent.nii")).is_err());
}

#[test]
fn surface_gifti_carries_the_coordinate_system() {
    let (v, _, _) = ball(3.0, 1.0, false, false);
    let (mesh, _) = extract(&v, &ExtractOptions::default()).expect("extract");
    let p = scratch("ball.surf.gii");
    write_surface(&p, &mesh, &v, std::path::Path::new("mask.nii.gz"), true).expect("write");
    let g = crate::io::gifti::read(&p).expect("read");
    let pa = &g.arrays[0];
    assert_eq!(pa.transforms.len(), 1);
    assert_eq!(pa.transforms[0].data_space, "NIFTI_XFORM_SCANNER_ANAT");
    assert_eq!(pa.meta.get("SourceVolume"), Some("mask.nii.gz"));
    let back = g.to_mesh(&p).expect("mesh");
    assert_eq!(back, mesh, "FLOAT64 coordinates are exact");
}

#[test]
fn nifti_in_memory_layout_and_refusals() {
    use super::nifti::{encode_nifti1, parse_volume, StoreType};
    use std::path::Path;
    let a = oblique(1.5, false, [1.0, 2.0, 3.0]);
    let dims = [3usize, 4, 5];
    let vals: Vec<f64> = (0..60).map(|i| i as f64 - 20.0).collect();
    let base = encode_nifti1(&dims, &vals, &a, StoreType::I16);
    let p = Path::new("mem.nii");
    let msg = |b: &[u8]| parse_volume(b, p).unwrap_err().to_string();
    assert_eq!(parse_volume(&base, p).expect("plain").values, vals);
    // vox_offset 368: 16 bytes of padding before the data are skipped
    // (nifti1.h: the data start at vox_offset).
    let mut padded = base[..352].to_vec();
    padded[108..112].copy_from_slice(&368f32.to_le_bytes());
    padded.extend_from_slice(&[0x7f; 16]);
    padded.extend_from_slice(&base[352..]);
    assert_eq!(parse_volume(&padded, p).expect("padded").values, vals);
    // A fractional or negative vox_offset is refused.
    for bad in [352.5f32, -16.0, f32::NAN] {
        let mut b = base.clone();
        b[108..112].copy_from_slice(&bad.to_le_bytes());
        let e = msg(&b);
        assert!(e.contains("mem.nii") && e.contains("vox_offset"), "{e}");
    }
    // Short header, wrong sizeof_hdr, header-only magic.
    let e = msg(&base[..100]);
    assert!(e.contains("100 bytes") && e.contains("348"), "{e}");
    let mut b = base.clone();
    b[0..4].copy_from_slice(&540i32.to_le_bytes());
    assert!(msg(&b).contains("sizeof_hdr = 540"), "{}", msg(&b));
    let mut b = base.clone();
    b[344..348].copy_from_slice(b"ni1\0");
    assert!(msg(&b).contains(".hdr/.img pair"), "{}", msg(&b));
    // Data shorter than declared: the counts are named.
    let e = msg(&base[..base.len() - 2]);
    assert!(
        e.contains("118 bytes after vox_offset 352") && e.contains("expected 120"),
        "{e}"
    );
    // Gzip: the same volume; trailing data beyond the declared size is
    // refused (a plain file may carry it).
    let gz = |raw: &[u8]| {
        let mut e = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::fast());
        std::io::Write::write_all(&mut e, raw).expect("gzip");
        e.finish().expect("gzip")
    };
    assert_eq!(parse_volume(&gz(&base), p).expect("gzip").values, vals);
    let mut long = base.clone();
    long.push(0);
    assert_eq!(
        parse_volume(&long, p).expect("plain, trailing").values,
        vals
    );
    let e = msg(&gz(&long));
    assert!(e.contains("larger than the 472 bytes"), "{e}");
    // A corrupt gzip stream names the stream.
    let mut z = gz(&base);
    let n = z.len();
    z[n - 6] ^= 0xff;
    let e = msg(&z);
    assert!(e.contains("mem.nii") && e.contains("gzip"), "{e}");
}
