//! Self-intersection test for triangle meshes.
//!
//! In: a [`TriMesh`]. Out: the pairs of faces `(f, g)`, `f < g`, that
//! intersect, sorted. Pairs that share a vertex index are skipped: they
//! always meet at that vertex, and in a manifold mesh their crossing
//! elsewhere would show up as a crossing of some pair that shares nothing.
//! Invariant: the result does not depend on the number of threads.
//!
//! Broad phase: a uniform grid over the mesh bounding box; every face is
//! listed in the cells its bounding box overlaps, and a pair is tested only
//! in the one cell that holds the lower corner of the overlap of the two
//! boxes, so each pair is tested once. Narrow phase: the interval-overlap
//! test of Moeller ("A fast triangle-triangle intersection test", J.
//! Graphics Tools 2(2), 1997, 25-30), with his treatment of coplanar
//! triangles (edge-edge and point-in-triangle tests in the plane of largest
//! projection). Signed distances below a relative epsilon count as zero, so
//! touching counts as intersecting.

use super::{cross, dot, sub, TriMesh, Vec3};
use rayon::prelude::*;

/// Relative tolerance under which a signed distance counts as zero.
const EPS: f64 = 1e-12;

/// Do triangles `t1` and `t2` intersect (touching included)? Moeller (1997).
pub fn triangles_intersect(t1: &[Vec3; 3], t2: &[Vec3; 3]) -> bool {
    let scale = {
        let mut s = 0.0f64;
        for p in t1.iter().chain(t2.iter()) {
            for c in p {
                s = s.max(c.abs());
            }
        }
        s.max(1e-300)
    };
    // Plane of t2; distances of t1's corners to it.
    let n2 = cross(sub(t2[1], t2[0]), sub(t2[2], t2[0]));
    let d2 = -dot(n2, t2[0]);
    let tol2 = EPS * scale * super::norm(n2);
    let mut du = [0.0; 3];
    for k in 0..3 {
        du[k] = dot(n2, t1[k]) + d2;
        if du[k].abs() < tol2 {
            du[k] = 0.0;
        }
    }
    if same_side(du) {
        return false;
    }
    let n1 = cross(sub(t1[1], t1[0]), sub(t1[2], t1[0]));
    let d1 = -dot(n1, t1[0]);
    let tol1 = EPS * scale * super::norm(n1);
    let mut dv = [0.0; 3];
    for k in 0..3 {
        dv[k] = dot(n1, t2[k]) + d1;
        if dv[k].abs() < tol1 {
            dv[k] = 0.0;
        }
    }
    if same_side(dv) {
        return false;
    }
    let dir = cross(n1, n2);
    // Project onto the largest axis of the intersection line's direction.
    let axis = largest_axis(dir);
    let vp = [t1[0][axis], t1[1][axis], t1[2][axis]];
    let up = [t2[0][axis], t2[1][axis], t2[2][axis]];
    let (Some(i1), Some(i2)) = (interval(vp, du), interval(up, dv)) else {
        return coplanar(n1, t1, t2);
    };
    let (a0, a1) = (i1.0.min(i1.1), i1.0.max(i1.1));
    let (b0, b1) = (i2.0.min(i2.1), i2.0.max(i2.1));
    !(a1 < b0 || b1 < a0)
}

/// All three distances non-zero and of one sign.
fn same_side(d: [f64; 3]) -> bool {
    (d[0] > 0.0 && d[1] > 0.0 && d[2] > 0.0) || (d[0] < 0.0 && d[1] < 0.0 && d[2] < 0.0)
}

fn largest_axis(v: Vec3) -> usize {
    let a = [v[0].abs(), v[1].abs(), v[2].abs()];
    if a[0] >= a[1] && a[0] >= a[2] {
        0
    } else if a[1] >= a[2] {
        1
    } else {
        2
    }
}

/// The interval that a triangle (projected corners `p`, signed distances
/// `d` to the other plane) cuts on the intersection line; `None` when the
/// triangle lies in the plane (all distances zero).
fn interval(p: [f64; 3], d: [f64; 3]) -> Option<(f64, f64)> {
    // The lone corner: the one on its own side of the plane.
    let lone = if d[0] * d[1] > 0.0 {
        2
    } else if d[0] * d[2] > 0.0 {
        1
    } else if d[1] * d[2] > 0.0 || d[0] != 0.0 {
        0
    } else if d[1] != 0.0 {
        1
    } else if d[2] != 0.0 {
        2
    } else {
        return None;
    };
    let (o1, o2) = ((lone + 1) % 3, (lone + 2) % 3);
    let cut = |a: usize, b: usize| -> f64 {
        let den = d[a] - d[b];
        if den == 0.0 {
            p[a]
        } else {
            p[a] + (p[b] - p[a]) * d[a] / den
        }
    };
    Some((cut(lone, o1), cut(lone, o2)))
}

/// Coplanar triangles: edge-edge crossings, then containment either way,
/// in the coordinate plane where the common normal `n` projects largest.
fn coplanar(n: Vec3, t1: &[Vec3; 3], t2: &[Vec3; 3]) -> bool {
    let drop = largest_axis(n);
    let (i0, i1) = match drop {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    };
    let p = |v: Vec3| [v[i0], v[i1]];
    let a = [p(t1[0]), p(t1[1]), p(t1[2])];
    let b = [p(t2[0]), p(t2[1]), p(t2[2])];
    for i in 0..3 {
        for j in 0..3 {
            if segments_cross(a[i], a[(i + 1) % 3], b[j], b[(j + 1) % 3]) {
                return true;
            }
        }
    }
    point_in_triangle(a[0], &b) || point_in_triangle(b[0], &a)
}

fn orient2(a: [f64; 2], b: [f64; 2], c: [f64; 2]) -> f64 {
    (b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0])
}

fn segments_cross(p1: [f64; 2], p2: [f64; 2], q1: [f64; 2], q2: [f64; 2]) -> bool {
    let d1 = orient2(q1, q2, p1);
    let d2 = orient2(q1, q2, p2);
    let d3 = orient2(p1, p2, q1);
    let d4 = orient2(p1, p2, q2);
    let on = |a: [f64; 2], b: [f64; 2], c: [f64; 2]| {
        c[0] >= a[0].min(b[0])
            && c[0] <= a[0].max(b[0])
            && c[1] >= a[1].min(b[1])
            && c[1] <= a[1].max(b[1])
    };
    if ((d1 > 0.0 && d2 < 0.0) || (d1 < 0.0 && d2 > 0.0))
        && ((d3 > 0.0 && d4 < 0.0) || (d3 < 0.0 && d4 > 0.0))
    {
        return true;
    }
    (d1 == 0.0 && on(q1, q2, p1))
        || (d2 == 0.0 && on(q1, q2, p2))
        || (d3 == 0.0 && on(p1, p2, q1))
        || (d4 == 0.0 && on(p1, p2, q2))
}

fn point_in_triangle(p: [f64; 2], t: &[[f64; 2]; 3]) -> bool {
    let d0 = orient2(t[0], t[1], p);
    let d1 = orient2(t[1], t[2], p);
    let d2 = orient2(t[2], t[0], p);
    (d0 >= 0.0 && d1 >= 0.0 && d2 >= 0.0) || (d0 <= 0.0 && d1 <= 0.0 && d2 <= 0.0)
}

/// Axis-aligned box of a face.
fn face_box(c: &[Vec3; 3]) -> (Vec3, Vec3) {
    let mut lo = c[0];
    let mut hi = c[0];
    for p in &c[1..] {
        for k in 0..3 {
            lo[k] = lo[k].min(p[k]);
            hi[k] = hi[k].max(p[k]);
        }
    }
    (lo, hi)
}

/// A uniform grid of face boxes (CSR layout: the faces of cell `c` are
/// `items[start[c]..start[c + 1]]`).
struct Grid {
    origin: Vec3,
    cell: f64,
    dims: [usize; 3],
    start: Vec<u32>,
    items: Vec<u32>,
}

impl Grid {
    fn cell_of(&self, p: Vec3) -> [usize; 3] {
        let mut c = [0usize; 3];
        for k in 0..3 {
            let x = ((p[k] - self.origin[k]) / self.cell).floor();
            c[k] = if x.is_finite() && x > 0.0 {
                (x as usize).min(self.dims[k] - 1)
            } else {
                0
            };
        }
        c
    }

    fn index(&self, c: [usize; 3]) -> usize {
        (c[2] * self.dims[1] + c[1]) * self.dims[0] + c[0]
    }

    fn build(boxes: &[(Vec3, Vec3)], lo: Vec3, hi: Vec3) -> Grid {
        let n = boxes.len().max(1);
        let mean_extent = boxes
            .iter()
            .map(|(a, b)| (b[0] - a[0]).max(b[1] - a[1]).max(b[2] - a[2]))
            .sum::<f64>()
            / n as f64;
        let span = [hi[0] - lo[0], hi[1] - lo[1], hi[2] - lo[2]];
        let biggest = span[0].max(span[1]).max(span[2]).max(1e-9);
        // Cells about twice the mean face size, but no more than ~2 per face.
        let mut cell = (2.0 * mean_extent).max(biggest / 1024.0).max(1e-9);
        loop {
            let cells: f64 = span.iter().map(|s| (s / cell).floor() + 1.0).product();
            if cells <= 2.0 * n as f64 + 64.0 {
                break;
            }
            cell *= 1.25;
        }
        let dims = span.map(|s| ((s / cell).floor() as usize + 1).max(1));
        let mut grid = Grid {
            origin: lo,
            cell,
            dims,
            start: Vec::new(),
            items: Vec::new(),
        };
        let n_cells = dims[0] * dims[1] * dims[2];
        let mut count = vec![0u32; n_cells + 1];
        let ranges: Vec<([usize; 3], [usize; 3])> = boxes
            .iter()
            .map(|(a, b)| (grid.cell_of(*a), grid.cell_of(*b)))
            .collect();
        for (a, b) in &ranges {
            for z in a[2]..=b[2] {
                for y in a[1]..=b[1] {
                    for x in a[0]..=b[0] {
                        count[grid.index([x, y, z]) + 1] += 1;
                    }
                }
            }
        }
        for c in 0..n_cells {
            count[c + 1] += count[c];
        }
        let mut fill = count.clone();
        let mut items = vec![0u32; count[n_cells] as usize];
        for (f, (a, b)) in ranges.iter().enumerate() {
            for z in a[2]..=b[2] {
                for y in a[1]..=b[1] {
                    for x in a[0]..=b[0] {
                        let c = grid.index([x, y, z]);
                        items[fill[c] as usize] = f as u32;
                        fill[c] += 1;
                    }
                }
            }
        }
        grid.start = count;
        grid.items = items;
        grid
    }
}

/// Faces share a vertex index.
#[inline]
fn share_vertex(a: &[u32; 3], b: &[u32; 3]) -> bool {
    a.iter().any(|v| b.contains(v))
}

/// Intersecting face pairs `(f, g)` with `f < g`, sorted; pairs sharing a
/// vertex index are skipped (see the module documentation). Degenerate
/// faces (a repeated index) are skipped too.
pub fn self_intersections(mesh: &TriMesh) -> Vec<(u32, u32)> {
    let nf = mesh.n_faces();
    if nf < 2 {
        return Vec::new();
    }
    let corners: Vec<[Vec3; 3]> = (0..nf).map(|f| mesh.corners(f)).collect();
    let boxes: Vec<(Vec3, Vec3)> = corners.iter().map(face_box).collect();
    let (mut lo, mut hi) = boxes[0];
    for (a, b) in &boxes {
        for k in 0..3 {
            lo[k] = lo[k].min(a[k]);
            hi[k] = hi[k].max(b[k]);
        }
    }
    let grid = Grid::build(&boxes, lo, hi);
    let n_cells = grid.start.len() - 1;
    let degenerate = |t: &[u32; 3]| t[0] == t[1] || t[1] == t[2] || t[0] == t[2];
    let mut pairs: Vec<(u32, u32)> = (0..n_cells)
        .into_par_iter()
        .with_min_len(256)
        .flat_map_iter(|c| {
            let cell = &grid.items[grid.start[c] as usize..grid.start[c + 1] as usize];
            let mut found = Vec::new();
            for (i, &f) in cell.iter().enumerate() {
                let tf = &mesh.faces[f as usize];
                if degenerate(tf) {
                    continue;
                }
                let (af, bf) = boxes[f as usize];
                for &g in &cell[i + 1..] {
                    let tg = &mesh.faces[g as usize];
                    let (ag, bg) = boxes[g as usize];
                    if (0..3).any(|k| af[k] > bg[k] || ag[k] > bf[k]) {
                        continue;
                    }
                    // Test the pair only in the cell of the overlap's lower corner.
                    let corner = [af[0].max(ag[0]), af[1].max(ag[1]), af[2].max(ag[2])];
                    if grid.index(grid.cell_of(corner)) != c {
                        continue;
                    }
                    if degenerate(tg) || share_vertex(tf, tg) {
                        continue;
                    }
                    if triangles_intersect(&corners[f as usize], &corners[g as usize]) {
                        found.push((f.min(g), f.max(g)));
                    }
                }
            }
            found.into_iter()
        })
        .collect();
    pairs.sort_unstable();
    pairs.dedup();
    pairs
}

/// Faces of `mesh` that intersect the triangle `tri` and share no vertex
/// index with `tri_ids`. A brute-force helper (bounding boxes first) for
/// local checks, e.g. after adding a few faces.
pub fn faces_hitting(mesh: &TriMesh, tri: &[Vec3; 3], tri_ids: &[u32; 3]) -> Vec<u32> {
    let (a, b) = face_box(tri);
    let mut out = Vec::new();
    for (f, t) in mesh.faces.iter().enumerate() {
        if share_vertex(t, tri_ids) {
            continue;
        }
        let c = mesh.corners(f);
        let (ca, cb) = face_box(&c);
        if (0..3).any(|k| ca[k] > b[k] || a[k] > cb[k]) {
            continue;
        }
        if triangles_intersect(tri, &c) {
            out.push(f as u32);
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::super::shapes::{icosphere, torus};
    use super::*;

    #[test]
    fn crossing_and_separate_triangles() {
        let t1 = [[0., 0., 0.], [1., 0., 0.], [0., 1., 0.]];
        // Pierces t1 through its interior.
        let t2 = [[0.2, 0.2, -1.], [0.3, 0.2, 1.], [0.2, 0.3, 1.]];
        assert!(triangles_intersect(&t1, &t2));
        assert!(triangles_intersect(&t2, &t1));
        // Same, shifted beyond t1's hypotenuse: no contact.
        let t3 = t2.map(|p| [p[0] + 0.5, p[1] + 0.5, p[2]]);
        assert!(!triangles_intersect(&t1, &t3));
        // Parallel planes.
        let t4 = t1.map(|p| [p[0], p[1], 0.1]);
        assert!(!triangles_intersect(&t1, &t4));
        // Coplanar overlap and coplanar separation.
        let t5 = t1.map(|p| [p[0] + 0.3, p[1] + 0.3, 0.0]);
        assert!(triangles_intersect(&t1, &t5));
        let t6 = t1.map(|p| [p[0] + 2.0, p[1], 0.0]);
        assert!(!triangles_intersect(&t1, &t6));
        // Planes cross but the triangles' intervals on the line do not meet.
        let t7 = [[2., 0., -1.], [2., 0., 1.], [3., 1., 0.]];
        assert!(!triangles_intersect(&t1, &t7));
    }

    #[test]
    fn closed_shapes_are_clean() {
        assert!(self_intersections(&icosphere(4, 1.0)).is_empty());
        assert!(self_intersections(&torus(3.0, 1.0, 48, 24)).is_empty());
    }

    #[test]
    fn two_interpenetrating_spheres_are_found() {
        // Two unit spheres 1.5 apart cross along a circle of radius
        // sqrt(1 - 0.75^2) = 0.661; every face pair found must straddle it.
        let a = icosphere(3, 1.0);
        let off = a.n_vertices() as u32;
        let mut m = a.clone();
        m.positions
            .extend(a.positions.iter().map(|p| [p[0] + 1.5, p[1], p[2]]));
        m.faces
            .extend(a.faces.iter().map(|t| [t[0] + off, t[1] + off, t[2] + off]));
        let pairs = self_intersections(&m);
        assert!(pairs.len() > 40, "{}", pairs.len());
        let nf = a.n_faces() as u32;
        for &(f, g) in &pairs {
            assert!(
                f < nf && g >= nf,
                "pair ({f}, {g}) is not across the spheres"
            );
            let xs: Vec<f64> = m.corners(f as usize).iter().map(|p| p[0]).collect();
            assert!(xs.iter().any(|&x| x > 0.6) && xs.iter().any(|&x| x < 0.9));
        }
        // Brute force over all pairs agrees with the grid.
        let mut brute = Vec::new();
        for f in 0..m.n_faces() {
            for g in f + 1..m.n_faces() {
                if !share_vertex(&m.faces[f], &m.faces[g])
                    && triangles_intersect(&m.corners(f), &m.corners(g))
                {
                    brute.push((f as u32, g as u32));
                }
            }
        }
        assert_eq!(pairs, brute);
    }

    #[test]
    fn a_pushed_in_vertex_is_found() {
        // Push one vertex of a sphere through to the far side: its faces
        // must now cross faces of the opposite side.
        let mut m = icosphere(2, 1.0);
        m.positions[0] = [
            -m.positions[0][0] * 1.2,
            -m.positions[0][1] * 1.2,
            -m.positions[0][2] * 1.2,
        ];
        let pairs = self_intersections(&m);
        assert!(!pairs.is_empty());
        assert!(pairs
            .iter()
            .all(|&(f, g)| m.faces[f as usize].contains(&0) || m.faces[g as usize].contains(&0)));
    }
}
