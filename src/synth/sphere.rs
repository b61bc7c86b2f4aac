//! The base sphere: a well-distributed triangulation of the unit sphere with
//! exactly the requested number of vertices.
//!
//! In: a vertex count `n` (at least [`MIN_VERTICES`]) and a random
//! generator. Out: a [`TriMesh`] on the unit sphere, faces counter-clockwise
//! seen from outside. Invariants: closed, genus 0, every face positively
//! oriented about the origin (`det(a, b, c) > 0`), so the faces tile the
//! sphere as spherical triangles and any radial displacement with positive
//! radius stays free of self-intersections.
//!
//! Construction: the class-I geodesic subdivision of the icosahedron of
//! frequency `k` (each face cut into `k^2` triangles, `10 k^2 + 2` vertices;
//! Kenner, "Geodesic math and how to use it", 1976) with the largest `k`
//! that does not exceed `n`; then `n - (10 k^2 + 2)` randomly chosen edges,
//! no two in one triangle, are split at their midpoint; then every vertex is
//! moved tangentially by a small random amount (a move that would turn a
//! face over is undone). Most triangles stay near-equilateral; the split
//! ones and some jittered ones are thinner, as in meshes from real data.

use super::rng::Rng;
use crate::error::{Error, Result};
use crate::mesh::shapes::icosphere;
use crate::mesh::topology::EdgeTable;
use crate::mesh::{add, cross, dot, norm, scale, sub, TriMesh, Vec3};
use std::collections::HashMap;

/// Fewest vertices the base sphere supports.
pub const MIN_VERTICES: usize = 500;
/// Most vertices the base sphere supports.
pub const MAX_VERTICES: usize = 4_000_000;

/// Unit vector along `v` (`v` must be non-zero).
#[inline]
pub(crate) fn unit(v: Vec3) -> Vec3 {
    scale(v, 1.0 / norm(v))
}

/// Class-I geodesic sphere of frequency `k >= 1`: `10 k^2 + 2` vertices,
/// `20 k^2` faces. Vertex order: the 12 icosahedron vertices, then the
/// interior points of the 30 edges (edge by edge, from the lower-numbered
/// end), then the interior points of the 20 faces (face by face, row by row).
pub fn geodesic_sphere(k: usize) -> TriMesh {
    let ico = icosphere(0, 1.0);
    let k = k.max(1);
    let kf = k as f64;
    let mut edge_id: HashMap<(u32, u32), usize> = HashMap::with_capacity(30);
    let mut edges: Vec<(u32, u32)> = Vec::with_capacity(30);
    for t in &ico.faces {
        for s in 0..3 {
            let (a, b) = (t[s], t[(s + 1) % 3]);
            let key = (a.min(b), a.max(b));
            edge_id.entry(key).or_insert_with(|| {
                edges.push(key);
                edges.len() - 1
            });
        }
    }
    let n_edge_pts = k - 1;
    let n_face_pts = if k >= 2 { (k - 1) * (k - 2) / 2 } else { 0 };
    let n_vertices = 12 + 30 * n_edge_pts + 20 * n_face_pts;
    let mut positions: Vec<Vec3> = Vec::with_capacity(n_vertices);
    positions.extend_from_slice(&ico.positions);
    for &(a, b) in &edges {
        let (pa, pb) = (ico.positions[a as usize], ico.positions[b as usize]);
        for i in 1..k {
            let t = i as f64 / kf;
            positions.push(unit(add(scale(pa, 1.0 - t), scale(pb, t))));
        }
    }
    // Interior row offsets: row i (1..=k-2) holds j = 1..=k-1-i.
    let mut row_start = vec![0usize; k.max(2)];
    for i in 2..k.saturating_sub(1) {
        row_start[i] = row_start[i - 1] + (k - 1 - (i - 1));
    }
    let face_base = 12 + 30 * n_edge_pts;
    for t in &ico.faces {
        let [pa, pb, pc] = t.map(|v| ico.positions[v as usize]);
        for i in 1..k.saturating_sub(1) {
            for j in 1..(k - i) {
                let (u, v) = (i as f64 / kf, j as f64 / kf);
                let p = add(add(scale(pa, 1.0 - u - v), scale(pb, u)), scale(pc, v));
                positions.push(unit(p));
            }
        }
    }
    let edge_point = |from: u32, to: u32, pos: usize| -> u32 {
        let key = (from.min(to), from.max(to));
        let e = edge_id.get(&key).copied().unwrap_or(0);
        let along = if from < to { pos } else { k - pos };
        (12 + e * n_edge_pts + along - 1) as u32
    };
    let mut faces = Vec::with_capacity(20 * k * k);
    for (f, t) in ico.faces.iter().enumerate() {
        let [a, b, c] = *t;
        let id = |i: usize, j: usize| -> u32 {
            if i == 0 && j == 0 {
                a
            } else if i == k {
                b
            } else if j == k {
                c
            } else if j == 0 {
                edge_point(a, b, i)
            } else if i == 0 {
                edge_point(a, c, j)
            } else if i + j == k {
                edge_point(b, c, j)
            } else {
                (face_base + f * n_face_pts + row_start[i] + (j - 1)) as u32
            }
        };
        for i in 0..k {
            for j in 0..(k - i) {
                faces.push([id(i, j), id(i + 1, j), id(i, j + 1)]);
                if i + j + 1 < k {
                    faces.push([id(i + 1, j), id(i + 1, j + 1), id(i, j + 1)]);
                }
            }
        }
    }
    TriMesh { positions, faces }
}

/// `det(a, b, c) = a . (b x c)`: positive when the spherical triangle
/// `a, b, c` is counter-clockwise seen from outside.
#[inline]
pub(crate) fn det3(a: Vec3, b: Vec3, c: Vec3) -> f64 {
    dot(a, cross(b, c))
}

/// A triangulated unit sphere with exactly `n` vertices (see the module
/// documentation), randomised by `rng`: which edges are split, the
/// tangential jitter (standard deviation `jitter` times the mean edge
/// length) and a uniformly random rotation.
pub fn base_sphere(n: usize, jitter: f64, rng: &mut Rng) -> Result<TriMesh> {
    if !(MIN_VERTICES..=MAX_VERTICES).contains(&n) {
        return Err(Error::Invalid(format!(
            "vertex count {n} is out of range; expected {MIN_VERTICES} to {MAX_VERTICES}"
        )));
    }
    if !(0.0..=0.3).contains(&jitter) {
        return Err(Error::Invalid(format!(
            "sphere jitter {jitter} is out of range; expected 0 to 0.3 edge lengths"
        )));
    }
    let mut k = (((n - 2) as f64 / 10.0).sqrt()).floor() as usize;
    while 10 * (k + 1) * (k + 1) + 2 <= n {
        k += 1;
    }
    while k > 1 && 10 * k * k + 2 > n {
        k -= 1;
    }
    let mut mesh = geodesic_sphere(k);
    let missing = n - mesh.n_vertices();
    split_edges(&mut mesh, missing, rng)?;
    jitter_tangentially(&mut mesh, jitter, rng);
    let rot = rng.rotation();
    for p in &mut mesh.positions {
        *p = unit(super::rng::mat_vec(&rot, *p));
    }
    Ok(mesh)
}

/// Split `count` random edges at their (normalised) midpoints, no two in one
/// face. Each split adds one vertex and two faces.
fn split_edges(mesh: &mut TriMesh, count: usize, rng: &mut Rng) -> Result<()> {
    if count == 0 {
        return Ok(());
    }
    let table = EdgeTable::new(mesh);
    let mut order: Vec<usize> = (0..table.len()).collect();
    rng.shuffle(&mut order);
    let mut used = vec![false; mesh.n_faces()];
    let mut chosen = Vec::with_capacity(count);
    for e in order {
        if chosen.len() == count {
            break;
        }
        let inc = table.faces_of(e);
        if inc.len() != 2 {
            continue;
        }
        let (f1, f2) = (inc[0].face as usize, inc[1].face as usize);
        if used[f1] || used[f2] {
            continue;
        }
        used[f1] = true;
        used[f2] = true;
        chosen.push((e, inc[0], inc[1]));
    }
    if chosen.len() < count {
        return Err(Error::Algorithm {
            stage: "synth",
            message: format!(
                "could split only {} of {count} edges of the base sphere",
                chosen.len()
            ),
        });
    }
    for (e, i1, i2) in chosen {
        let [a, b] = table.edges[e];
        let m = mesh.positions.len() as u32;
        let pm = unit(add(mesh.positions[a as usize], mesh.positions[b as usize]));
        mesh.positions.push(pm);
        for inc in [i1, i2] {
            let t = mesh.faces[inc.face as usize];
            let s = inc.slot as usize;
            // The face rotated so that the split edge is its first side.
            let (p, q, r) = (t[s], t[(s + 1) % 3], t[(s + 2) % 3]);
            mesh.faces[inc.face as usize] = [p, m, r];
            mesh.faces.push([m, q, r]);
        }
    }
    Ok(())
}

/// Move each vertex tangentially by a Gaussian step (standard deviation
/// `amount` mean edge lengths), then undo the moves around any face that
/// would lose its positive orientation.
fn jitter_tangentially(mesh: &mut TriMesh, amount: f64, rng: &mut Rng) {
    if amount <= 0.0 {
        return;
    }
    let n = mesh.n_vertices() as f64;
    // Mean edge of a near-equilateral triangulation with 2n - 4 faces.
    let edge = (8.0 * std::f64::consts::PI / (3f64.sqrt() * n)).sqrt();
    let original = mesh.positions.clone();
    for p in &mut mesh.positions {
        let g = [rng.normal(), rng.normal(), rng.normal()];
        let tangential = sub(g, scale(*p, dot(g, *p)));
        *p = unit(add(*p, scale(tangential, amount * edge)));
    }
    // Undo around bad faces until none is left (the original is valid, so
    // this ends within as many rounds as there are vertices; usually one).
    let min_det = 0.05 * edge * edge;
    loop {
        let mut changed = false;
        for t in &mesh.faces {
            let [a, b, c] = t.map(|v| mesh.positions[v as usize]);
            if det3(a, b, c) < min_det {
                for &v in t {
                    if mesh.positions[v as usize] != original[v as usize] {
                        mesh.positions[v as usize] = original[v as usize];
                        changed = true;
                    }
                }
            }
        }
        if !changed {
            break;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::topology::face_components;

    fn euler(m: &TriMesh) -> i64 {
        m.n_vertices() as i64 - EdgeTable::new(m).len() as i64 + m.n_faces() as i64
    }

    #[test]
    fn geodesic_counts_follow_kenner() {
        // V = 10 k^2 + 2, F = 20 k^2 (Kenner 1976); Euler characteristic 2.
        for k in [1usize, 2, 3, 7, 16] {
            let m = geodesic_sphere(k);
            assert_eq!(m.n_vertices(), 10 * k * k + 2, "k = {k}");
            assert_eq!(m.n_faces(), 20 * k * k);
            assert_eq!(euler(&m), 2);
            let table = EdgeTable::new(&m);
            assert!((0..table.len()).all(|e| table.valence(e) == 2));
            for t in &m.faces {
                let [a, b, c] = t.map(|v| m.positions[v as usize]);
                assert!(det3(a, b, c) > 0.0);
            }
        }
        // Frequency 2 equals the icosphere of level 1, as a point set (higher
        // levels differ: the icosphere normalises at every halving).
        let g = geodesic_sphere(2);
        let ico = icosphere(1, 1.0);
        assert_eq!(g.n_vertices(), ico.n_vertices());
        for p in &ico.positions {
            let best = g
                .positions
                .iter()
                .map(|q| norm(sub(*p, *q)))
                .fold(f64::INFINITY, f64::min);
            assert!(best < 1e-12);
        }
    }

    #[test]
    fn exact_counts_closed_and_positive() {
        let mut rng = Rng::new(11);
        for n in [500usize, 2_000, 2_345, 9_999, 20_000] {
            let m = base_sphere(n, 0.15, &mut rng).unwrap();
            assert_eq!(m.n_vertices(), n);
            assert_eq!(m.n_faces(), 2 * n - 4);
            assert_eq!(euler(&m), 2);
            assert_eq!(face_components(&m).1, 1);
            let table = EdgeTable::new(&m);
            assert!((0..table.len()).all(|e| table.valence(e) == 2));
            let total: f64 = m
                .faces
                .iter()
                .map(|t| {
                    let [a, b, c] = t.map(|v| m.positions[v as usize]);
                    assert!(det3(a, b, c) > 0.0);
                    // Spherical triangle area (Van Oosterom and Strackee,
                    // IEEE Trans. Biomed. Eng. 30, 1983).
                    let d = 1.0 + dot(a, b) + dot(b, c) + dot(c, a);
                    2.0 * det3(a, b, c).atan2(d)
                })
                .sum();
            // The spherical triangles tile the sphere exactly once: 4 pi.
            assert!((total - 4.0 * std::f64::consts::PI).abs() < 1e-9, "{total}");
        }
        assert!(base_sphere(100, 0.1, &mut rng).is_err());
        assert!(base_sphere(1000, 0.9, &mut rng).is_err());
    }
}
