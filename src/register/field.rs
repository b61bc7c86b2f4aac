//! Stationary tangent velocity fields on the unit sphere and their flows.
//!
//! In: one tangent 3-vector per vertex of an icosphere level (the *control
//! grid*, [`super::grid::IcoGrid`]). Out: the field anywhere (barycentric
//! interpolation, projected on the tangent plane), its exponential
//! `exp(v)` (the time-1 flow of `x' = v(x)`) applied to any set of points,
//! and the inverse warp `exp(-v)`.
//!
//! What stays true: the flow is integrated by the classical fourth-order
//! Runge-Kutta scheme with `n` equal steps, every step followed by the
//! central projection back to the sphere, and `n` is chosen so that
//! `h * Lip(v) <= 1/2` (`h = 1/n`; [`VelocityField::steps`]). A step map
//! `x -> x + h k(x)` with `h Lip(k) < 1` is injective (a perturbation of the
//! identity by a contraction), so every step, and the composition of all of
//! them, is a bijection of the sphere; the same steps with `-v` give the
//! inverse up to the integration error. The warp's triangles are checked
//! anyway ([`jacobian`]). The velocity field of a stationary flow is its
//! logarithm in the sense of Arsigny, Commowick, Pennec, Ayache, "A
//! Log-Euclidean framework for statistics on diffeomorphisms", MICCAI 2006
//! (LNCS 4190, 924-931), which lets warps be averaged and inverted through
//! their velocity fields.

use super::grid::{tangent, unit, IcoGrid};
use crate::mesh::{cross, dot, norm, sub, Vec3};
use rayon::prelude::*;
use serde::Serialize;

/// A tangent velocity field on the vertices of one icosphere level.
#[derive(Debug, Clone, PartialEq)]
pub struct VelocityField {
    /// The control grid level.
    pub level: u32,
    /// One tangent vector per control vertex (radians per unit time).
    pub vectors: Vec<Vec3>,
}

/// Largest number of Runge-Kutta steps.
pub const MAX_STEPS: usize = 512;

impl VelocityField {
    /// The zero field on level `level` of `grid`.
    pub fn zero(grid: &IcoGrid, level: u32) -> Self {
        VelocityField {
            level,
            vectors: vec![[0.0; 3]; grid.level_points(level).len()],
        }
    }

    /// The field at direction `x` (unit).
    pub fn eval(&self, grid: &IcoGrid, x: Vec3) -> Vec3 {
        self.eval_hint(grid, x, &mut None)
    }

    /// [`VelocityField::eval`], trying the control face in `hint` first
    /// and leaving the face used there.
    pub fn eval_hint(&self, grid: &IcoGrid, x: Vec3, hint: &mut Option<u32>) -> Vec3 {
        let h = grid.locate_hint(x, self.level, *hint);
        *hint = Some(h.face);
        let mut v = [0.0; 3];
        for j in 0..3 {
            let vj = self.vectors[h.vertices[j] as usize];
            for d in 0..3 {
                v[d] += h.weights[j] * vj[d];
            }
        }
        tangent(v, x)
    }

    /// An upper estimate of the Lipschitz constant: twice the largest
    /// difference quotient `|v_i - v_j| / |p_i - p_j|` over the control
    /// grid's edges (the gradient of a linear interpolant on a triangle is
    /// bounded by its edge quotients over the sine of the smallest angle,
    /// at least 0.5 on these grids), plus the largest speed (the tangent
    /// projection's own variation).
    pub fn lipschitz(&self, grid: &IcoGrid) -> f64 {
        let pts = grid.level_points(self.level);
        let mut l: f64 = 0.0;
        let mut vmax: f64 = 0.0;
        for (i, p) in pts.iter().enumerate() {
            vmax = vmax.max(norm(self.vectors[i]));
            for &j in grid.neighbours(self.level, i) {
                let j = j as usize;
                if j > i {
                    let q = norm(sub(self.vectors[i], self.vectors[j])) / norm(sub(*p, pts[j]));
                    l = l.max(q);
                }
            }
        }
        2.0 * l + vmax
    }

    /// Largest speed over the control vertices (radians per unit time).
    pub fn max_speed(&self) -> f64 {
        self.vectors.iter().map(|v| norm(*v)).fold(0.0, f64::max)
    }

    /// Runge-Kutta steps for the flow: `h * Lip(v) <= 1/2`, no step longer
    /// than half the control spacing, at least 4, at most [`MAX_STEPS`].
    pub fn steps(&self, grid: &IcoGrid) -> usize {
        let l = self.lipschitz(grid);
        let by_lip = (2.0 * l).ceil();
        let by_len = (2.0 * self.max_speed() / grid.spacing(self.level)).ceil();
        (by_lip.max(by_len) as usize).clamp(4, MAX_STEPS)
    }

    /// `exp(sign * v)` applied to the unit directions `points`, with `n`
    /// Runge-Kutta steps.
    pub fn flow(&self, grid: &IcoGrid, points: &[Vec3], sign: f64, n: usize) -> Vec<Vec3> {
        if self.vectors.iter().all(|v| *v == [0.0; 3]) {
            return points.iter().map(|p| unit(*p)).collect();
        }
        let h = sign / n as f64;
        points
            .par_iter()
            .with_min_len(256)
            .map(|&p| {
                let mut x = unit(p);
                let mut hint = None;
                for _ in 0..n {
                    let mut f = |y: Vec3| self.eval_hint(grid, unit(y), &mut hint);
                    let k1 = f(x);
                    let k2 = f(axpy(x, 0.5 * h, k1));
                    let k3 = f(axpy(x, 0.5 * h, k2));
                    let k4 = f(axpy(x, h, k3));
                    let mut s = [0.0; 3];
                    for d in 0..3 {
                        s[d] = (k1[d] + 2.0 * k2[d] + 2.0 * k3[d] + k4[d]) / 6.0;
                    }
                    x = unit(axpy(x, h, s));
                }
                x
            })
            .collect()
    }

    /// The same field on a finer control level (interpolated at the new
    /// vertices; the old vertices keep their vectors).
    pub fn refine(&self, grid: &IcoGrid, level: u32) -> VelocityField {
        if level == self.level {
            return self.clone();
        }
        let vectors = grid
            .level_points(level)
            .par_iter()
            .map(|&p| self.eval(grid, p))
            .collect();
        VelocityField { level, vectors }
    }

    /// `sweeps` Jacobi sweeps of `v_i <- (v_i + mean of neighbours) / 2`,
    /// projected on each tangent plane: explicit diffusion on the control
    /// grid, the discrete counterpart of a Gaussian (diffusion-like)
    /// regulariser.
    pub fn smooth(&mut self, grid: &IcoGrid, sweeps: usize) {
        smooth_vectors(grid, self.level, &mut self.vectors, sweeps);
    }

    /// The mean field of several on the same level, projected per vertex.
    pub fn mean(grid: &IcoGrid, fields: &[&VelocityField]) -> Option<VelocityField> {
        let first = fields.first()?;
        let pts = grid.level_points(first.level);
        let mut m = vec![[0.0; 3]; pts.len()];
        for f in fields {
            for (a, b) in m.iter_mut().zip(&f.vectors) {
                for d in 0..3 {
                    a[d] += b[d] / fields.len() as f64;
                }
            }
        }
        for (a, p) in m.iter_mut().zip(pts) {
            *a = tangent(*a, *p);
        }
        Some(VelocityField {
            level: first.level,
            vectors: m,
        })
    }
}

/// Jacobi smoothing of tangent vectors on level `level`.
pub fn smooth_vectors(grid: &IcoGrid, level: u32, v: &mut [Vec3], sweeps: usize) {
    let pts = grid.level_points(level);
    for _ in 0..sweeps {
        let next: Vec<Vec3> = (0..pts.len())
            .into_par_iter()
            .with_min_len(512)
            .map(|i| {
                let nb = grid.neighbours(level, i);
                let mut s = [0.0; 3];
                for &j in nb {
                    for d in 0..3 {
                        s[d] += v[j as usize][d];
                    }
                }
                let k = nb.len().max(1) as f64;
                let mut out = [0.0; 3];
                for d in 0..3 {
                    out[d] = 0.5 * v[i][d] + 0.5 * s[d] / k;
                }
                tangent(out, pts[i])
            })
            .collect();
        v.copy_from_slice(&next);
    }
}

fn axpy(x: Vec3, a: f64, y: Vec3) -> Vec3 {
    [x[0] + a * y[0], x[1] + a * y[1], x[2] + a * y[2]]
}

/// Area ratios of a warp over a triangulation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct JacobianSummary {
    /// Smallest ratio of signed areas (warped / original).
    pub min: f64,
    /// Largest ratio.
    pub max: f64,
    /// Triangles whose warped signed area is `<= 0`.
    pub folded: usize,
    /// `folded` over the number of triangles.
    pub fraction_folded: f64,
    /// Number of triangles measured (those of non-zero area before).
    pub triangles: usize,
}

/// Signed area of triangle `t` of `p`, the sign taken from the outward
/// direction (the triangle's centroid).
fn signed_area(p: &[Vec3], t: &[u32; 3]) -> f64 {
    let (a, b, c) = (p[t[0] as usize], p[t[1] as usize], p[t[2] as usize]);
    let n = cross(sub(b, a), sub(c, a));
    let centroid = [a[0] + b[0] + c[0], a[1] + b[1] + c[1], a[2] + b[2] + c[2]];
    let s = dot(n, centroid);
    0.5 * norm(n) * s.signum()
}

/// Indices of the triangles of `faces` whose signed area ratio
/// (`after` over `before`) is at most `min_ratio` (triangles of zero area
/// before are left out, as in [`jacobian`]).
pub fn collapsed_faces(
    faces: &[[u32; 3]],
    before: &[Vec3],
    after: &[Vec3],
    min_ratio: f64,
) -> Vec<usize> {
    faces
        .par_iter()
        .enumerate()
        .with_min_len(1024)
        .filter_map(|(i, t)| {
            let a0 = signed_area(before, t);
            (a0 != 0.0 && signed_area(after, t) / a0 <= min_ratio).then_some(i)
        })
        .collect()
}

/// Per triangle of `faces`, the ratio of the signed area of the warped
/// triangle (points `after`) to that of the original (points `before`), the
/// sign taken from the outward direction (the triangle's centroid).
pub fn jacobian(faces: &[[u32; 3]], before: &[Vec3], after: &[Vec3]) -> JacobianSummary {
    let signed = signed_area;
    // Triangles of zero area before the warp have no ratio and are left out.
    let ratios: Vec<f64> = faces
        .par_iter()
        .with_min_len(1024)
        .filter_map(|t| {
            let a0 = signed(before, t);
            (a0 != 0.0).then(|| signed(after, t) / a0)
        })
        .collect();
    let folded = ratios.iter().filter(|&&r| r <= 0.0).count();
    JacobianSummary {
        min: ratios.iter().copied().fold(f64::INFINITY, f64::min),
        max: ratios.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        folded,
        fraction_folded: folded as f64 / ratios.len().max(1) as f64,
        triangles: ratios.len(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flow_of_a_rotation_field_is_the_rotation() {
        // v(x) = w x x is a rotation about w by |w| per unit time.
        let grid = IcoGrid::new(4);
        let w = [0.0, 0.0, 0.4];
        let v = VelocityField {
            level: 4,
            vectors: grid.level_points(4).iter().map(|p| cross(w, *p)).collect(),
        };
        let pts = [unit([1.0, 0.2, 0.3]), unit([0.3, -0.9, -0.2])];
        let n = v.steps(&grid);
        let out = v.flow(&grid, &pts, 1.0, n);
        for (p, q) in pts.iter().zip(&out) {
            let (c, s) = (0.4f64.cos(), 0.4f64.sin());
            let want = [c * p[0] - s * p[1], s * p[0] + c * p[1], p[2]];
            // Interpolation on level 4 (spacing ~0.075) errs by O(h^2).
            assert!(super::super::grid::angle(*q, want) < 2e-3, "{q:?} {want:?}");
        }
        let back = v.flow(&grid, &out, -1.0, n);
        for (p, q) in pts.iter().zip(&back) {
            assert!(super::super::grid::angle(*p, *q) < 1e-6);
        }
    }
}
