//! The icosahedral grids the registration works on: every subdivision level
//! of [`crate::mesh::shapes::icosphere`] on the unit sphere, with exact
//! hierarchical point location and per-vertex gradients.
//!
//! In: the finest level. Out: an [`IcoGrid`] holding the points (a level's
//! points are the first `10 * 4^k + 2` of the finest), the faces of every
//! level and, per level, the vertex neighbours. What stays true: face `f` of
//! level `k - 1` is split into faces `4f .. 4f + 3` of level `k` (the
//! subdivision order of `icosphere`), and its four children tile it exactly
//! as spherical triangles (great-arc edges through the arc midpoints), so a
//! direction is located by descending from the 20 icosahedron faces,
//! keeping at each level the child whose least edge test is largest. The
//! answer is the same for any thread count (no search state is shared).
//!
//! Interpolation weights are those of [`crate::resample::locate`]: the
//! barycentric coordinates of the point where the ray meets the flat
//! triangle; on a shared edge they depend only on the edge's ends, so
//! interpolated fields are continuous.

use crate::mesh::shapes::icosphere;
use crate::mesh::topology::vertex_neighbours;
use crate::mesh::{cross, dot, norm, scale, sub, Vec3};

/// Number of vertices of the icosphere of level `k`.
pub fn n_vertices(level: u32) -> usize {
    10 * 4usize.pow(level) + 2
}

/// Icosphere levels with their face hierarchy.
#[derive(Debug, Clone)]
pub struct IcoGrid {
    /// Unit points of the finest level (coarser levels are prefixes).
    pub points: Vec<Vec3>,
    /// Faces of every level `0..=finest`.
    pub faces: Vec<Vec<[u32; 3]>>,
    /// Per level, the neighbours of each vertex (sorted, CSR: offsets, list).
    neighbours: Vec<(Vec<usize>, Vec<u32>)>,
}

/// A located direction: the face of the requested level, its corners and
/// the barycentric weights (`>= 0`, sum 1).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Hit {
    pub face: u32,
    pub vertices: [u32; 3],
    pub weights: [f64; 3],
}

impl IcoGrid {
    /// All levels `0..=finest` (finest at most 8).
    pub fn new(finest: u32) -> Self {
        let mut faces = Vec::with_capacity(finest as usize + 1);
        let mut points = Vec::new();
        for k in 0..=finest {
            let m = icosphere(k, 1.0);
            faces.push(m.faces);
            if k == finest {
                points = m.positions;
            }
        }
        let neighbours = faces
            .iter()
            .enumerate()
            .map(|(k, f)| vertex_neighbours(n_vertices(k as u32), f))
            .collect();
        IcoGrid {
            points,
            faces,
            neighbours,
        }
    }

    /// The finest level.
    pub fn finest(&self) -> u32 {
        (self.faces.len() - 1) as u32
    }

    /// Points of level `k`.
    pub fn level_points(&self, k: u32) -> &[Vec3] {
        &self.points[..n_vertices(k)]
    }

    /// Neighbours of vertex `i` at level `k`.
    pub fn neighbours(&self, k: u32, i: usize) -> &[u32] {
        let (off, list) = &self.neighbours[k as usize];
        &list[off[i]..off[i + 1]]
    }

    /// Mean edge length (radians, approximately the arc) at level `k`.
    pub fn spacing(&self, k: u32) -> f64 {
        let f = &self.faces[k as usize];
        let mut s = 0.0;
        for t in f {
            let p = |i: u32| self.points[i as usize];
            s += norm(sub(p(t[0]), p(t[1])));
        }
        s / f.len() as f64
    }

    fn tests(&self, t: [u32; 3], x: Vec3) -> [f64; 3] {
        let p = |i: u32| self.points[i as usize];
        let (a, b, c) = (p(t[0]), p(t[1]), p(t[2]));
        // Weight of a is the test of the opposite edge (b, c), etc.
        [
            dot(cross(b, c), x),
            dot(cross(c, a), x),
            dot(cross(a, b), x),
        ]
    }

    /// Locate direction `x` (any non-zero vector) in level `k`.
    pub fn locate(&self, x: Vec3, k: u32) -> Hit {
        let mut best = 0usize;
        let mut best_min = f64::NEG_INFINITY;
        for (f, t) in self.faces[0].iter().enumerate() {
            let w = self.tests(*t, x);
            let m = w[0].min(w[1]).min(w[2]);
            if m > best_min {
                best_min = m;
                best = f;
            }
        }
        for level in 1..=k as usize {
            let base = 4 * best;
            best_min = f64::NEG_INFINITY;
            for c in base..base + 4 {
                let w = self.tests(self.faces[level][c], x);
                let m = w[0].min(w[1]).min(w[2]);
                if m > best_min {
                    best_min = m;
                    best = c;
                }
            }
        }
        let t = self.faces[k as usize][best];
        let w = self.tests(t, x);
        let w = [w[0].max(0.0), w[1].max(0.0), w[2].max(0.0)];
        let s = w[0] + w[1] + w[2];
        let weights = if s > 0.0 {
            [w[0] / s, w[1] / s, w[2] / s]
        } else {
            [1.0 / 3.0; 3]
        };
        Hit {
            face: best as u32,
            vertices: t,
            weights,
        }
    }

    /// [`IcoGrid::locate`], trying face `hint` of level `k` first: when it
    /// contains `x` (all edge tests `>= 0`) its weights are returned
    /// directly, otherwise the hierarchy is descended. Both give a face
    /// containing `x`; on a shared edge or vertex the interpolated values
    /// agree, since the weights there depend only on the shared corners.
    pub fn locate_hint(&self, x: Vec3, k: u32, hint: Option<u32>) -> Hit {
        if let Some(f) = hint {
            let t = self.faces[k as usize][f as usize];
            let w = self.tests(t, x);
            if w[0] >= 0.0 && w[1] >= 0.0 && w[2] >= 0.0 {
                let s = w[0] + w[1] + w[2];
                if s > 0.0 {
                    return Hit {
                        face: f,
                        vertices: t,
                        weights: [w[0] / s, w[1] / s, w[2] / s],
                    };
                }
            }
        }
        self.locate(x, k)
    }

    /// Interpolate the scalar field `f` (one value per vertex of level `k`)
    /// at direction `x`.
    pub fn interpolate(&self, f: &[f64], k: u32, x: Vec3) -> f64 {
        let h = self.locate(x, k);
        (0..3)
            .map(|j| h.weights[j] * f[h.vertices[j] as usize])
            .sum()
    }

    /// Tangent gradient of the piecewise-linear field `f` at every vertex of
    /// level `k`: the area-weighted mean of the flat gradients of the
    /// incident faces, projected on the tangent plane.
    pub fn gradient(&self, f: &[f64], k: u32) -> Vec<Vec3> {
        let n = n_vertices(k);
        let mut g = vec![[0.0; 3]; n];
        let mut area = vec![0.0; n];
        for t in &self.faces[k as usize] {
            let p = |i: u32| self.points[i as usize];
            let (a, b, c) = (p(t[0]), p(t[1]), p(t[2]));
            let nrm = cross(sub(b, a), sub(c, a));
            let a2 = norm(nrm);
            if a2 <= 0.0 {
                continue;
            }
            let nu = scale(nrm, 1.0 / a2);
            // grad = sum_i f_i (nu x e_i) / (2A), e_i the edge opposite i.
            let e = [sub(c, b), sub(a, c), sub(b, a)];
            let mut gf = [0.0; 3];
            for j in 0..3 {
                let r = cross(nu, e[j]);
                let fj = f[t[j] as usize];
                for d in 0..3 {
                    gf[d] += fj * r[d] / a2;
                }
            }
            for &v in t {
                let v = v as usize;
                for d in 0..3 {
                    g[v][d] += gf[d] * a2;
                }
                area[v] += a2;
            }
        }
        for i in 0..n {
            if area[i] > 0.0 {
                g[i] = tangent(scale(g[i], 1.0 / area[i]), self.points[i]);
            }
        }
        g
    }

    /// Vertex areas (a third of each incident flat face) at level `k`.
    pub fn vertex_areas(&self, k: u32) -> Vec<f64> {
        let mut a = vec![0.0; n_vertices(k)];
        for t in &self.faces[k as usize] {
            let p = |i: u32| self.points[i as usize];
            let ar = 0.5 * norm(cross(sub(p(t[1]), p(t[0])), sub(p(t[2]), p(t[0]))));
            for &v in t {
                a[v as usize] += ar / 3.0;
            }
        }
        a
    }
}

/// `v` minus its component along the unit vector `x`.
pub fn tangent(v: Vec3, x: Vec3) -> Vec3 {
    let d = dot(v, x);
    [v[0] - d * x[0], v[1] - d * x[1], v[2] - d * x[2]]
}

/// `x / |x|` (the zero vector stays zero).
pub fn unit(x: Vec3) -> Vec3 {
    let n = norm(x);
    if n > 0.0 {
        scale(x, 1.0 / n)
    } else {
        x
    }
}

/// Angle between two directions (radians), stable for small angles.
pub fn angle(a: Vec3, b: Vec3) -> f64 {
    norm(cross(a, b)).atan2(dot(a, b))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn located_points_interpolate_linear_functions_exactly_at_vertices() {
        let g = IcoGrid::new(4);
        // Every vertex of level 4 is found with weight 1 on itself.
        for (i, p) in g.level_points(4).iter().enumerate().step_by(37) {
            let h = g.locate(*p, 4);
            let j = (0..3).max_by(|&a, &b| h.weights[a].total_cmp(&h.weights[b]));
            let j = j.unwrap_or(0);
            assert_eq!(h.vertices[j] as usize, i);
            assert!((h.weights[j] - 1.0).abs() < 1e-12);
        }
        // A random direction: its triangle contains it (all tests >= 0).
        let x = unit([0.3, -0.7, 0.2]);
        let h = g.locate(x, 3);
        let t = g.tests(h.vertices, x);
        assert!(t.iter().all(|&v| v >= -1e-15), "{t:?}");
        assert!((h.weights.iter().sum::<f64>() - 1.0).abs() < 1e-12);
    }

    #[test]
    fn gradient_of_a_linear_function_is_its_tangent_part() {
        let g = IcoGrid::new(5);
        let a = [0.3, -0.5, 0.8];
        let f: Vec<f64> = g.level_points(5).iter().map(|p| dot(*p, a)).collect();
        let gr = g.gradient(&f, 5);
        let mut worst: f64 = 0.0;
        for (i, p) in g.level_points(5).iter().enumerate() {
            let want = tangent(a, *p);
            worst = worst.max(norm(sub(gr[i], want)));
        }
        // Flat faces of spacing ~0.038 rad: error of order spacing^2.
        assert!(worst < 5e-3, "worst gradient error {worst}");
    }
}
