//! Meshes built from formulas: icosahedral spheres, tori and a double torus.
//!
//! The icosahedral sphere of level `k` has `10 * 4^k + 2` vertices,
//! `30 * 4^k` edges and `20 * 4^k` faces (Kenner, "Geodesic math and how to
//! use it", 1976). Its vertex order is deterministic and documented: the 12
//! icosahedron vertices first, then at each subdivision level the new edge
//! midpoints in the order their edges are first met when walking the faces of
//! the previous level in order, each face's edges in the order (v0,v1),
//! (v1,v2), (v2,v0). Every level therefore starts with the vertices of the
//! level before it.

use super::{add, norm, scale, TriMesh, Vec3};
use std::collections::HashMap;

/// Icosahedral sphere of subdivision level `level` (0 = icosahedron) and
/// radius `radius`, centred at the origin, faces counter-clockwise seen from
/// outside.
pub fn icosphere(level: u32, radius: f64) -> TriMesh {
    let t = (1.0 + 5f64.sqrt()) / 2.0;
    let mut positions: Vec<Vec3> = vec![
        [-1.0, t, 0.0],
        [1.0, t, 0.0],
        [-1.0, -t, 0.0],
        [1.0, -t, 0.0],
        [0.0, -1.0, t],
        [0.0, 1.0, t],
        [0.0, -1.0, -t],
        [0.0, 1.0, -t],
        [t, 0.0, -1.0],
        [t, 0.0, 1.0],
        [-t, 0.0, -1.0],
        [-t, 0.0, 1.0],
    ];
    for p in &mut positions {
        *p = scale(*p, 1.0 / norm(*p));
    }
    let mut faces: Vec<[u32; 3]> = vec![
        [0, 11, 5],
        [0, 5, 1],
        [0, 1, 7],
        [0, 7, 10],
        [0, 10, 11],
        [1, 5, 9],
        [5, 11, 4],
        [11, 10, 2],
        [10, 7, 6],
        [7, 1, 8],
        [3, 9, 4],
        [3, 4, 2],
        [3, 2, 6],
        [3, 6, 8],
        [3, 8, 9],
        [4, 9, 5],
        [2, 4, 11],
        [6, 2, 10],
        [8, 6, 7],
        [9, 8, 1],
    ];
    for _ in 0..level {
        let mut mid: HashMap<(u32, u32), u32> = HashMap::with_capacity(faces.len() * 3 / 2);
        let mut next = Vec::with_capacity(faces.len() * 4);
        for f in &faces {
            let mut m = [0u32; 3];
            for k in 0..3 {
                let (a, b) = (f[k], f[(k + 1) % 3]);
                let key = (a.min(b), a.max(b));
                m[k] = *mid.entry(key).or_insert_with(|| {
                    let p = add(positions[a as usize], positions[b as usize]);
                    positions.push(scale(p, 1.0 / norm(p)));
                    (positions.len() - 1) as u32
                });
            }
            next.push([f[0], m[0], m[2]]);
            next.push([m[0], f[1], m[1]]);
            next.push([m[2], m[1], f[2]]);
            next.push([m[0], m[1], m[2]]);
        }
        faces = next;
    }
    for p in &mut positions {
        *p = scale(*p, radius);
    }
    TriMesh { positions, faces }
}

/// Torus around the z axis with tube centre radius `major` and tube radius
/// `minor`, `n_major` segments around the axis and `n_minor` around the tube;
/// outward orientation.
pub fn torus(major: f64, minor: f64, n_major: usize, n_minor: usize) -> TriMesh {
    use std::f64::consts::TAU;
    let mut positions = Vec::with_capacity(n_major * n_minor);
    for i in 0..n_major {
        let u = TAU * i as f64 / n_major as f64;
        for j in 0..n_minor {
            let v = TAU * j as f64 / n_minor as f64;
            let r = major + minor * v.cos();
            positions.push([r * u.cos(), r * u.sin(), minor * v.sin()]);
        }
    }
    let id = |i: usize, j: usize| ((i % n_major) * n_minor + (j % n_minor)) as u32;
    let mut faces = Vec::with_capacity(2 * n_major * n_minor);
    for i in 0..n_major {
        for j in 0..n_minor {
            let (a, b, c, d) = (id(i, j), id(i + 1, j), id(i + 1, j + 1), id(i, j + 1));
            faces.push([a, b, c]);
            faces.push([a, c, d]);
        }
    }
    TriMesh { positions, faces }
}

/// Closed genus-2 surface: two copies of [`torus`] side by side along x, each
/// with the two triangles of one grid cell removed where it faces the other,
/// joined by a ring of four quads (eight triangles) between the two square
/// holes. The second torus is the mirror image of the first in the plane
/// `x = major + 1.5 minor` (its faces reversed so that both stay outward), so
/// the gap between the tori is `minor` and the ring is a straight prism.
///
/// Vertices: the first torus's `n_major * n_minor`, then the second's in the
/// same order. Euler characteristic `2 (0 - 1) + 0 = -2`: each hole removes
/// two faces and one edge, the ring adds eight faces and eight edges (Massey,
/// "A basic course in algebraic topology", 1991: `V - E + F = 2 - 2g`, so
/// `g = 2`). Needs `n_major >= 3` and `n_minor >= 3`.
pub fn double_torus(major: f64, minor: f64, n_major: usize, n_minor: usize) -> TriMesh {
    let a = torus(major, minor, n_major, n_minor);
    let n = a.n_vertices() as u32;
    let mirror = 2.0 * major + 3.0 * minor;
    let mut positions = a.positions.clone();
    positions.extend(a.positions.iter().map(|p| [mirror - p[0], p[1], p[2]]));
    // Cell (0, 0) sits at u in [0, du], v in [0, dv]: on the outer equator at
    // x ~ major + minor, facing +x. Its two triangles are faces 0 and 1.
    let mut faces: Vec<[u32; 3]> = a.faces[2..].to_vec();
    faces.extend(a.faces[2..].iter().map(|t| [t[0] + n, t[2] + n, t[1] + n]));
    // Boundary of the hole in the first torus, in its faces' own direction:
    // the cell's quad a -> b -> c -> d (see `torus`) is bounded by its faces
    // traversing a->b, b->c, c->d, d->a; the hole boundary as seen by the
    // remaining faces is the reverse, d -> c -> b -> a.
    let id = |i: usize, j: usize| ((i % n_major) * n_minor + (j % n_minor)) as u32;
    let hole = [id(0, 1), id(1, 1), id(1, 0), id(0, 0)];
    // Remaining faces traverse hole[k] -> hole[k+1] in torus A; the mirrored
    // copy traverses hole[k+1] + n -> hole[k] + n. The ring traverses both
    // the other way: quad hole[k+1] -> hole[k] -> hole[k]+n -> hole[k+1]+n.
    for k in 0..4 {
        let (p, q) = (hole[k], hole[(k + 1) % 4]);
        faces.push([q, p, p + n]);
        faces.push([q, p + n, q + n]);
    }
    TriMesh { positions, faces }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn icosphere_counts_follow_kenner() {
        // V = 10*4^k + 2, F = 20*4^k (Kenner 1976; Euler's formula).
        for k in 0..5u32 {
            let m = icosphere(k, 1.0);
            assert_eq!(m.n_vertices(), 10 * 4usize.pow(k) + 2);
            assert_eq!(m.n_faces(), 20 * 4usize.pow(k));
            assert!(m.positions.iter().all(|p| (norm(*p) - 1.0).abs() < 1e-15));
            // Outward: positive enclosed volume approaching 4/3 pi.
            assert!(m.signed_volume() > 0.0);
        }
        let prev = icosphere(2, 1.0);
        let next = icosphere(3, 1.0);
        assert_eq!(&next.positions[..prev.n_vertices()], &prev.positions[..]);
    }

    #[test]
    fn torus_area_and_volume() {
        // Area 4 pi^2 R r, volume 2 pi^2 R r^2 (limits of the polyhedral values).
        let m = torus(3.0, 1.0, 200, 100);
        let pi2 = std::f64::consts::PI.powi(2);
        assert!((m.area() / (4.0 * pi2 * 3.0) - 1.0).abs() < 2e-3);
        assert!((m.signed_volume() / (2.0 * pi2 * 3.0) - 1.0).abs() < 2e-3);
    }
}
