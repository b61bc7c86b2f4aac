//! Point location on a subject sphere: for each target point, the subject
//! triangle that contains it and its barycentric weights.
//!
//! In: the subject's sphere points (checked with
//! [`super::target::check_sphere`]), optionally precomputed hull triangles
//! (for instance the mapper's), and target points. Out: a [`Locator`]
//! (built once per subject) and, per target point, a [`Located`]: the hull
//! triangle, its three subject vertices and weights `w >= 0` summing to 1.
//! What stays true: results do not depend on the thread count (each target
//! is located by its own deterministic walk); a target point that equals a
//! subject vertex gets that vertex with weight exactly 1.
//!
//! Geometry: points are compared by direction (central projection to the
//! unit sphere). A direction `t` lies in the spherical triangle `(a, b, c)`
//! (counter-clockwise from outside) when the three triple products
//! `(a x b).t`, `(b x c).t`, `(c x a).t` are all `>= 0`; these are also,
//! up to a common factor, the barycentric coordinates (of `c`, `a` and `b`)
//! of the point where the ray through `t` meets the plane of the flat
//! triangle, which are the weights used. The walk decides each sign
//! exactly ([`super::predicates::orient`] with the origin, after a float
//! filter), so a direction is never outside both triangles of an edge and
//! a walk cannot circle a vertex that the target sits on.
//!
//! Search: a coarse grid of cells uniform in `z` and longitude (equal-area
//! cells), each holding a triangle near its centre, gives the start of a
//! visibility walk (Devillers, Pion, Teillaud, "Walking in a
//! triangulation", International Journal of Foundations of Computer
//! Science 13 (2002) 181-199), which steps across an edge that separates
//! the current triangle from the target; on a Delaunay triangulation such
//! walks terminate (Edelsbrunner, "An acyclicity theorem for cell
//! complexes in d dimensions", Combinatorica 10 (1990) 251-260). A walk
//! longer than a step limit (never seen on hull triangulations; possible on
//! a precomputed triangulation that is not Delaunay) falls back to a scan
//! of all triangles and is counted.

use super::hull::{convex_hull, Excluded, Hull};
use super::predicates::orient;
use super::target::{check_sphere, directions};
use crate::error::{Error, Result};
use crate::mesh::{cross, dot, Vec3};
use rayon::prelude::*;
use std::collections::HashMap;

/// One located target point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Located {
    /// Index of the hull triangle.
    pub triangle: u32,
    /// Its three subject vertices, counter-clockwise from outside.
    pub vertices: [u32; 3],
    /// Barycentric weights of the three vertices (`>= 0`, sum 1).
    pub weights: [f64; 3],
}

impl Located {
    /// The corner with the largest weight (ties: the lowest vertex index).
    pub fn nearest(&self) -> usize {
        let mut best = 0;
        for k in 1..3 {
            let (w, wb) = (self.weights[k], self.weights[best]);
            if w > wb || (w == wb && self.vertices[k] < self.vertices[best]) {
                best = k;
            }
        }
        best
    }
}

/// Every target point located, with search statistics.
#[derive(Debug, Clone, PartialEq)]
pub struct Location {
    /// One entry per target point, in target order.
    pub points: Vec<Located>,
    /// Walks that hit the step limit and were finished by a full scan.
    pub n_fallback: usize,
}

/// The subject's triangulation with its search structures, built once and
/// used for every map of the subject.
#[derive(Debug, Clone)]
pub struct Locator {
    dirs: Vec<Vec3>,
    hull: Hull,
    grid_nz: usize,
    grid_nphi: usize,
    grid: Vec<u32>,
    max_steps: usize,
}

impl Locator {
    /// Build the locator for the subject sphere `points` (checked with
    /// [`check_sphere`] at `tolerance`). With `hull_faces`, those triangles
    /// are used after checks (a closed surface, every triangle facing
    /// outwards, spherical areas summing to 4 pi); otherwise the convex hull
    /// is computed ([`convex_hull`]).
    pub fn new(points: &[Vec3], hull_faces: Option<&[[u32; 3]]>, tolerance: f64) -> Result<Self> {
        check_sphere(points, tolerance)?;
        let dirs = directions(points);
        let hull = match hull_faces {
            None => convex_hull(&dirs)?,
            Some(faces) => hull_from_faces(&dirs, faces)?,
        };
        let nf = hull.faces.len();
        let grid_nz = ((nf as f64 / 8.0).sqrt().ceil() as usize).max(1);
        let grid_nphi = 2 * grid_nz;
        let max_steps = 100 + 10 * (nf as f64).sqrt() as usize;
        let mut loc = Locator {
            dirs,
            hull,
            grid_nz,
            grid_nphi,
            grid: Vec::new(),
            max_steps,
        };
        let mut grid = Vec::with_capacity(grid_nz * grid_nphi);
        let mut start = loc.scan(loc.cell_centre(0, 0)).0;
        for i in 0..grid_nz {
            let row_start = grid.len();
            for j in 0..grid_nphi {
                let c = loc.cell_centre(i, j);
                let f = match loc.walk(c, start) {
                    Some(r) => r.0,
                    None => loc.scan(c).0,
                };
                grid.push(f);
                start = f;
            }
            start = grid.get(row_start).copied().unwrap_or(0);
        }
        loc.grid = grid;
        Ok(loc)
    }

    /// The hull triangulation in use.
    pub fn hull(&self) -> &Hull {
        &self.hull
    }

    /// Number of subject points.
    pub fn n_points(&self) -> usize {
        self.dirs.len()
    }

    /// Subject points that are not vertices of the triangulation.
    pub fn excluded(&self) -> &[(u32, Excluded)] {
        &self.hull.excluded
    }

    fn cell_centre(&self, i: usize, j: usize) -> Vec3 {
        let z = -1.0 + 2.0 * (i as f64 + 0.5) / self.grid_nz as f64;
        let phi = std::f64::consts::TAU * (j as f64 + 0.5) / self.grid_nphi as f64;
        let r = (1.0 - z * z).max(0.0).sqrt();
        [r * phi.cos(), r * phi.sin(), z]
    }

    fn cell_of(&self, t: Vec3) -> usize {
        let z = t[2].clamp(-1.0, 1.0);
        let i = (((z + 1.0) / 2.0 * self.grid_nz as f64) as usize).min(self.grid_nz - 1);
        let mut phi = t[1].atan2(t[0]);
        if phi < 0.0 {
            phi += std::f64::consts::TAU;
        }
        let j = ((phi / std::f64::consts::TAU * self.grid_nphi as f64) as usize)
            .min(self.grid_nphi - 1);
        i * self.grid_nphi + j
    }

    /// Triple products of the three edges of `f` with `t`.
    fn edge_tests(&self, f: u32, t: Vec3) -> [f64; 3] {
        let [a, b, c] = self.hull.faces[f as usize];
        let (pa, pb, pc) = (
            self.dirs[a as usize],
            self.dirs[b as usize],
            self.dirs[c as usize],
        );
        [
            dot(cross(pa, pb), t),
            dot(cross(pb, pc), t),
            dot(cross(pc, pa), t),
        ]
    }

    /// Walk from `start` towards `t`; `None` when the step limit is hit.
    fn walk(&self, t: Vec3, start: u32) -> Option<(u32, [f64; 3])> {
        let mut f = start;
        for step in 0..self.max_steps {
            let d = self.edge_tests(f, t);
            // Rotate the first edge tried, so that no fixed preference can
            // make the walk go round in a circle. The side of an edge is
            // decided exactly when the float test is near zero (a target on
            // or next to a subject vertex would otherwise circle it).
            let r = step % 3;
            let [a, b, c] = self.hull.faces[f as usize];
            let ends = [(a, b), (b, c), (c, a)];
            let outside = |k: usize| {
                let (p, q) = ends[k];
                orient([0.0; 3], self.dirs[p as usize], self.dirs[q as usize], t) < 0
            };
            match (0..3).map(|k| (k + r) % 3).find(|&k| outside(k)) {
                Some(k) => f = self.hull.neighbours[f as usize][k],
                None => return Some((f, d)),
            }
        }
        None
    }

    /// The triangle whose smallest edge test is largest (full scan).
    fn scan(&self, t: Vec3) -> (u32, [f64; 3]) {
        let mut best = (0u32, [f64::NEG_INFINITY; 3]);
        let mut best_min = f64::NEG_INFINITY;
        for f in 0..self.hull.faces.len() as u32 {
            let d = self.edge_tests(f, t);
            let m = d[0].min(d[1]).min(d[2]);
            if m > best_min {
                best_min = m;
                best = (f, d);
            }
        }
        best
    }

    /// Locate one direction (unit vector) `t`; the flag is true when the
    /// walk fell back to a full scan.
    pub fn locate_direction(&self, t: Vec3) -> (Located, bool) {
        let start = self.grid.get(self.cell_of(t)).copied().unwrap_or(0);
        let ((f, d), fallback) = match self.walk(t, start) {
            Some(r) => (r, false),
            None => (self.scan(t), true),
        };
        let vertices = self.hull.faces[f as usize];
        (self.weights(vertices, d, t, f), fallback)
    }

    fn weights(&self, vertices: [u32; 3], d: [f64; 3], t: Vec3, f: u32) -> Located {
        // Exact hit on a vertex: weight 1.
        for k in 0..3 {
            if self.dirs[vertices[k] as usize] == t {
                let mut weights = [0.0; 3];
                weights[k] = 1.0;
                return Located {
                    triangle: f,
                    vertices,
                    weights,
                };
            }
        }
        // Weight of a is (b x c).t, of b is (c x a).t, of c is (a x b).t.
        let raw = [d[1].max(0.0), d[2].max(0.0), d[0].max(0.0)];
        let s = raw[0] + raw[1] + raw[2];
        let weights = if s > 0.0 && s.is_finite() {
            [raw[0] / s, raw[1] / s, raw[2] / s]
        } else {
            // Degenerate (numerically flat) triangle: the closest corner.
            let mut k = 0;
            for j in 1..3 {
                if dot(self.dirs[vertices[j] as usize], t) > dot(self.dirs[vertices[k] as usize], t)
                {
                    k = j;
                }
            }
            let mut w = [0.0; 3];
            w[k] = 1.0;
            w
        };
        Located {
            triangle: f,
            vertices,
            weights,
        }
    }

    /// Locate every target point (any radius; compared by direction). The
    /// targets must not include the origin.
    pub fn locate(&self, targets: &[Vec3]) -> Result<Location> {
        if let Some(i) = targets
            .iter()
            .position(|p| !p.iter().all(|c| c.is_finite()) || *p == [0.0; 3])
        {
            return Err(Error::Invalid(format!(
                "target vertex {i} is at the origin or not finite; expected points on a sphere"
            )));
        }
        let dirs = directions(targets);
        let out: Vec<(Located, bool)> = dirs
            .par_iter()
            .with_min_len(1024)
            .map(|&t| self.locate_direction(t))
            .collect();
        let n_fallback = out.iter().filter(|r| r.1).count();
        Ok(Location {
            points: out.into_iter().map(|r| r.0).collect(),
            n_fallback,
        })
    }
}

/// A [`Hull`] from given triangles, after the checks of [`Locator::new`].
fn hull_from_faces(dirs: &[Vec3], faces: &[[u32; 3]]) -> Result<Hull> {
    let n = dirs.len();
    if faces.len() < 4 {
        return Err(Error::Invalid(format!(
            "{} hull triangles; expected at least 4",
            faces.len()
        )));
    }
    let mut edge: HashMap<(u32, u32), (u32, usize)> = HashMap::with_capacity(faces.len() * 3);
    let mut used = vec![false; n];
    for (f, v) in faces.iter().enumerate() {
        for k in 0..3 {
            let (a, b) = (v[k], v[(k + 1) % 3]);
            if a as usize >= n || a == b {
                return Err(Error::Invalid(format!(
                    "hull triangle {f} has vertex {a} (of {n} sphere points) or a repeated corner; expected a triangle of three distinct sphere points"
                )));
            }
            used[a as usize] = true;
            if edge.insert((a, b), (f as u32, k)).is_some() {
                return Err(Error::Invalid(format!(
                    "hull triangles use the edge {a}->{b} twice (triangle {f}); expected a closed consistently oriented surface"
                )));
            }
        }
    }
    let mut neighbours = vec![[0u32; 3]; faces.len()];
    let mut area = 0.0;
    for (f, v) in faces.iter().enumerate() {
        for k in 0..3 {
            let (a, b) = (v[k], v[(k + 1) % 3]);
            let (g, _) = edge.get(&(b, a)).copied().ok_or_else(|| {
                Error::Invalid(format!(
                    "hull triangle {f}: edge {a}->{b} has no opposite triangle; expected a closed surface"
                ))
            })?;
            neighbours[f][k] = g;
        }
        let (pa, pb, pc) = (
            dirs[v[0] as usize],
            dirs[v[1] as usize],
            dirs[v[2] as usize],
        );
        if orient(pa, pb, pc, [0.0; 3]) >= 0 {
            return Err(Error::Invalid(format!(
                "hull triangle {f} does not face outwards; expected triangles counter-clockwise seen from outside"
            )));
        }
        // Spherical triangle area (Van Oosterom and Strackee, "The solid
        // angle of a plane triangle", IEEE Trans. Biomed. Eng. 30 (1983) 125).
        let num = dot(pa, cross(pb, pc));
        let den = 1.0 + dot(pa, pb) + dot(pb, pc) + dot(pc, pa);
        area += 2.0 * num.atan2(den);
    }
    let four_pi = 4.0 * std::f64::consts::PI;
    if ((area - four_pi) / four_pi).abs() > 1e-6 {
        return Err(Error::Invalid(format!(
            "hull triangles cover a solid angle of {area:.6} sr, not 4 pi; expected a triangulation that covers the sphere once"
        )));
    }
    let excluded = (0..n as u32)
        .filter(|&i| !used[i as usize])
        .map(|i| (i, Excluded::Interior))
        .collect();
    Ok(Hull {
        faces: faces.to_vec(),
        neighbours,
        excluded,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::shapes::icosphere;

    #[test]
    fn every_target_is_inside_its_triangle() {
        let subject = icosphere(3, 100.0);
        let loc = Locator::new(&subject.positions, None, 1e-6).unwrap();
        let targets = icosphere(4, 50.0).positions;
        let l = loc.locate(&targets).unwrap();
        assert_eq!(l.n_fallback, 0);
        for (p, t) in l.points.iter().zip(directions(&targets)) {
            let s: f64 = p.weights.iter().sum();
            assert!((s - 1.0).abs() < 1e-12);
            assert!(p.weights.iter().all(|&w| w >= 0.0));
            // The weighted corners reproduce the direction of t (central
            // projection onto the flat triangle).
            let mut q = [0.0; 3];
            for k in 0..3 {
                let d = loc.dirs[p.vertices[k] as usize];
                for c in 0..3 {
                    q[c] += p.weights[k] * d[c];
                }
            }
            let qn = crate::mesh::norm(q);
            for c in 0..3 {
                assert!((q[c] / qn - t[c]).abs() < 1e-12);
            }
            // Brute force agrees on the containing triangle (or a tie on an
            // edge: the minimum test is then 0 in both).
            let (f, d) = loc.scan(t);
            if f != p.triangle {
                assert!(d.iter().cloned().fold(f64::INFINITY, f64::min) <= 1e-15);
            }
        }
        // Level-3 vertices are level-4 vertices: exact weight 1.
        for (i, p) in l.points.iter().take(subject.n_vertices()).enumerate() {
            let k = p.nearest();
            assert_eq!(p.vertices[k], i as u32);
            assert!(p.weights[k] > 1.0 - 1e-12);
        }
    }

    #[test]
    fn targets_inside_a_tight_cluster() {
        // 400 subject points within 1e-5 rad of +x (as a conformal map may
        // produce), stored as 32-bit floats, plus a coarse sphere; targets
        // on and around the cluster.
        let mut pts = icosphere(2, 100.0).positions;
        let mut s = 5u64;
        let mut unit = || {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        for _ in 0..400 {
            let p = [1.0, 1e-5 * unit(), 1e-5 * unit()];
            let l = crate::mesh::norm(p);
            pts.push(
                [100.0 * p[0] / l, 100.0 * p[1] / l, 100.0 * p[2] / l].map(|c| f64::from(c as f32)),
            );
        }
        let loc = Locator::new(&pts, None, 1e-6).unwrap();
        let targets: Vec<Vec3> = (0..2000)
            .map(|i| {
                let sc = if i % 2 == 0 { 1e-5 } else { 1e-2 };
                [1.0, sc * unit(), sc * unit()]
            })
            .collect();
        let l = loc.locate(&targets).unwrap();
        assert_eq!(l.n_fallback, 0);
        for (p, t) in l.points.iter().zip(directions(&targets)) {
            assert!((p.weights.iter().sum::<f64>() - 1.0).abs() < 1e-12);
            assert!(p.weights.iter().all(|&w| w >= 0.0));
            let mut q = [0.0; 3];
            for k in 0..3 {
                let d = loc.dirs[p.vertices[k] as usize];
                for c in 0..3 {
                    q[c] += p.weights[k] * d[c];
                }
            }
            let qn = crate::mesh::norm(q);
            assert!((0..3).all(|c| (q[c] / qn - t[c]).abs() < 1e-9));
        }
    }

    #[test]
    fn precomputed_faces_are_checked_and_used() {
        let m = icosphere(2, 100.0);
        let loc = Locator::new(&m.positions, Some(&m.faces), 1e-6).unwrap();
        assert_eq!(loc.hull().faces, m.faces);
        let t = icosphere(3, 1.0).positions;
        let a = loc.locate(&t).unwrap();
        // Every target is reproduced by its weighted corners (central
        // projection), whichever diagonal a co-circular quadrilateral has.
        for (p, d) in a.points.iter().zip(directions(&t)) {
            let mut q = [0.0; 3];
            for k in 0..3 {
                let c = loc.dirs[p.vertices[k] as usize];
                for j in 0..3 {
                    q[j] += p.weights[k] * c[j];
                }
            }
            let qn = crate::mesh::norm(q);
            assert!((0..3).all(|j| (q[j] / qn - d[j]).abs() < 1e-12));
        }
        for (i, p) in a.points.iter().take(m.n_vertices()).enumerate() {
            assert_eq!(p.vertices[p.nearest()], i as u32);
            assert!(p.weights[p.nearest()] > 1.0 - 1e-12);
        }
        // Reversed faces, a missing face, an out-of-range index.
        let rev: Vec<[u32; 3]> = m.faces.iter().map(|f| [f[0], f[2], f[1]]).collect();
        assert!(Locator::new(&m.positions, Some(&rev), 1e-6).is_err());
        assert!(Locator::new(&m.positions, Some(&m.faces[1..]), 1e-6).is_err());
        let mut oob = m.faces.clone();
        oob[0][0] = 10_000;
        assert!(Locator::new(&m.positions, Some(&oob), 1e-6).is_err());
    }
}
