//! Intrinsic triangulations with Penner coordinates: scaling, Ptolemy flips,
//! the Delaunay test and triangle angles.
//!
//! In: a [`Halfedges`] Delta-complex and one log length `lam_e = 2 ln l_e`
//! per edge id (Penner coordinates: R. Penner, "The decorated Teichmüller
//! space of punctured surfaces", Comm. Math. Phys. 113 (1987) 299-339).
//! Out: the same surface flipped to the intrinsic Delaunay triangulation of
//! the scaled lengths, and cancellation-free angles and cotangents.
//!
//! What stays true:
//! - `lam` holds *unscaled* coordinates. A vertex scaling `u` (log factors)
//!   is applied only when evaluating: `lam_ij + u_i + u_j`. The Ptolemy flip
//!   `lam_jl = 2 logaddexp((lam_ij + lam_kl)/2, (lam_jk + lam_li)/2) - lam_ik`
//!   commutes with scaling exactly, so flips decided on scaled lengths may be
//!   applied to unscaled ones (Bobenko, Pinkall, Springborn, "Discrete
//!   conformal maps and ideal hyperbolic polyhedra", Geom. Topol. 19 (2015);
//!   Gillespie, Springborn, Crane, "Discrete conformal equivalence of
//!   polyhedral surfaces", ACM Trans. Graph. 40(4) (2021) 103).
//! - One vertex may be the *pole*, whose log factor `T` stands in for a huge
//!   value. Each edge's scaled value is split into its reduced part `r_e`
//!   (no `T`) and its count `k_e` of pole ends; a triangle uses
//!   `r_e + (k_e - k_min) T`, because only differences of log lengths matter
//!   inside a triangle (Springborn, "Ideal hyperbolic polyhedra and discrete
//!   uniformization", Discrete Comput. Geom. 64 (2020) 63-108).
//! - Nothing identifies an edge by its end vertices: loops, multi-edges and
//!   folded triangles are allowed; an edge with both sides in one face is
//!   never flipped (it is always Delaunay).
//! - The Delaunay test
//!   `D(e) = (l_jk^2 + l_ki^2 - l_ij^2)/(l_jk l_ki) + (l_il^2 + l_lj^2 - l_ij^2)/(l_il l_lj) >= 0`
//!   is valid for any positive lengths, even ones violating the triangle
//!   inequality; after flipping to Delaunay every triangle satisfies the
//!   triangle inequality.
//! - Angles use the half-angle formula `tan(a/2) = sqrt(D_B D_C / (P D_A))`
//!   with the slacks `D_A = B + C - A` formed from `expm1` of log-length
//!   differences, so needles and caps keep full relative precision
//!   (cotangent weights as in Springborn, Schröder, Pinkall, "Conformal
//!   equivalence of triangle meshes", ACM Trans. Graph. 27(3) (2008) 77).

use crate::error::{Error, Result};
use crate::mesh::halfedge::{face, next, prev, Halfedges};
use std::f64::consts::PI;

/// Relative tolerance of the Delaunay test (scaled by the size of its terms).
pub const DELAUNAY_TOL: f64 = 1e-12;

/// No pole.
pub const NO_POLE: u32 = u32::MAX;

/// A vertex scaling: log factor `u[v]` per vertex, except that the pole (if
/// any) has log factor `t` and `u[pole]` is ignored.
#[derive(Debug, Clone, Copy)]
pub struct Scaling<'a> {
    /// Log scale factor per vertex (the pole's entry is ignored).
    pub u: &'a [f64],
    /// The pole vertex, or [`NO_POLE`].
    pub pole: u32,
    /// The pole's log factor.
    pub t: f64,
}

impl<'a> Scaling<'a> {
    /// Scaling by `u`, no pole.
    pub fn plain(u: &'a [f64]) -> Self {
        Scaling {
            u,
            pole: NO_POLE,
            t: 0.0,
        }
    }

    /// Reduced value and pole count of vertex `v`'s factor.
    #[inline(always)]
    fn factor(&self, v: u32) -> (f64, i32) {
        if v == self.pole {
            (0.0, 1)
        } else {
            (self.u[v as usize], 0)
        }
    }
}

/// An intrinsic triangulation: the Delta-complex and unscaled Penner
/// coordinates per edge id.
#[derive(Debug, Clone, PartialEq)]
pub struct Intrinsic {
    /// Connectivity.
    pub he: Halfedges,
    /// Unscaled log lengths `2 ln l_e`, one per edge id.
    pub lam: Vec<f64>,
}

/// Reusable memory of the flip loop: the stack of suspect edges and the flags.
#[derive(Debug, Clone, Default)]
pub struct FlipWork {
    stack: Vec<u32>,
    queued: Vec<bool>,
    flags: Vec<bool>,
}

/// `ln(e^a + e^b)` without overflow.
#[inline(always)]
pub fn logaddexp(a: f64, b: f64) -> f64 {
    let (hi, lo) = if a >= b { (a, b) } else { (b, a) };
    hi + (lo - hi).exp().ln_1p()
}

/// Angles and cotangents of one triangle.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TriangleAngles {
    /// Angle opposite side `k`.
    pub angle: [f64; 3],
    /// Cotangent of that angle (finite; a degenerate triangle gives
    /// `+-f64::MAX`-free large values).
    pub cot: [f64; 3],
    /// False if the lengths violate the triangle inequality (the angles are
    /// then the limit values `pi, 0, 0`).
    pub valid: bool,
}

/// Angles and cotangents of a triangle from the log lengths `lam[k] = 2 ln l_k`
/// of its sides, angle `k` opposite side `k`. Only differences of the `lam`
/// matter. Cancellation-free: see the module documentation.
pub fn triangle_angles(lam: [f64; 3]) -> TriangleAngles {
    // Order sides: a = longest.
    let (ia, ib, ic) = if lam[0] >= lam[1] && lam[0] >= lam[2] {
        (0, 1, 2)
    } else if lam[1] >= lam[2] {
        (1, 2, 0)
    } else {
        (2, 0, 1)
    };
    let la = lam[ia];
    // Sides relative to the longest: A = 1.
    let xb = 0.5 * (lam[ib] - la);
    let xc = 0.5 * (lam[ic] - la);
    let b = xb.exp();
    let c = xc.exp();
    let a_minus_b = -xb.exp_m1(); // A - B >= 0
    let a_minus_c = -xc.exp_m1(); // A - C >= 0
                                  // Slacks D_X = (sum of the other two) - X, without cancellation.
    let d_a = if b >= c { c - a_minus_b } else { b - a_minus_c };
    let d_b = a_minus_b + c;
    let d_c = a_minus_c + b;
    let p = 1.0 + b + c;
    let mut out = TriangleAngles {
        angle: [0.0; 3],
        cot: [0.0; 3],
        valid: true,
    };
    if d_a.is_nan() || d_a <= 0.0 {
        // Degenerate or violated: the limit of a flattened triangle.
        out.valid = d_a == 0.0;
        out.angle[ia] = PI;
        out.cot[ia] = -1e300;
        out.cot[ib] = 1e300;
        out.cot[ic] = 1e300;
        return out;
    }
    let d = [d_a, d_b, d_c];
    let idx = [ia, ib, ic];
    for k in 0..3 {
        let (dx, dy, dz) = (d[k], d[(k + 1) % 3], d[(k + 2) % 3]);
        let num = (dy * dz).sqrt();
        let den = (p * dx).sqrt();
        out.angle[idx[k]] = 2.0 * num.atan2(den);
        // cot = (P D_X - D_Y D_Z) / (2 sqrt(P D_X D_Y D_Z)).
        let denom = 2.0 * num * den;
        out.cot[idx[k]] = if denom > 0.0 {
            (p * dx - dy * dz) / denom
        } else {
            1e300
        };
    }
    out
}

/// `(B^2 + C^2 - A^2) / (B C)` (twice the cosine of the angle opposite `A`)
/// from log lengths, and the size of its terms for a relative tolerance.
///
/// Written as `D_A P / (B C) - 2` with the slack `D_A = B + C - A` and
/// `P = A + B + C`: the slack is formed from `expm1` of a log-length
/// difference, so caps and needles keep full precision and the only
/// subtraction is the final `- 2` (absolute error of a few ulps of 2).
#[inline(always)]
fn two_cos(lam_a: f64, lam_b: f64, lam_c: f64) -> (f64, f64) {
    let m = lam_a.max(lam_b).max(lam_c);
    let a = (0.5 * (lam_a - m)).exp();
    let b = (0.5 * (lam_b - m)).exp();
    let c = (0.5 * (lam_c - m)).exp();
    // D_A = (X - A) + Y with X the larger of B and C.
    let (lx, y) = if lam_b >= lam_c {
        (lam_b, c)
    } else {
        (lam_c, b)
    };
    let d_a = a * (0.5 * (lx - lam_a)).exp_m1() + y;
    let q = d_a * (a + b + c) / (b * c);
    (q - 2.0, q.abs() + 2.0)
}

impl Intrinsic {
    /// The Delta-complex of `faces` with Penner coordinates from 3D positions.
    /// Errors name the first zero-length or non-finite edge.
    pub fn from_mesh(positions: &[[f64; 3]], faces: &[[u32; 3]]) -> Result<Self> {
        let he = Halfedges::from_faces(positions.len(), faces)?;
        let mut lam = vec![0.0; he.n_edges()];
        for (e, &h) in he.edge_half.iter().enumerate() {
            let a = positions[he.tail[h as usize] as usize];
            let b = positions[he.head(h) as usize];
            let d2 = (a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2);
            if d2.is_nan() || d2 <= 0.0 || !d2.is_finite() {
                return Err(Error::Invalid(format!(
                    "edge ({}, {}) has length {}: expected a positive finite length",
                    he.tail[h as usize],
                    he.head(h),
                    d2.sqrt()
                )));
            }
            lam[e] = d2.ln();
        }
        Ok(Intrinsic { he, lam })
    }

    /// Scaled log length of the edge of halfedge `h`, split into the reduced
    /// value and the number of pole ends.
    #[inline(always)]
    pub fn reduced(&self, h: u32, s: &Scaling) -> (f64, i32) {
        let (ua, ka) = s.factor(self.he.tail[h as usize]);
        let (ub, kb) = s.factor(self.he.tail[next(h) as usize]);
        (
            self.lam[self.he.edge[h as usize] as usize] + ua + ub,
            ka + kb,
        )
    }

    /// Effective log lengths of the triangle of halfedge `h0 = 3f`, sides in
    /// the order of its halfedges `3f, 3f+1, 3f+2` (side of halfedge `h` is
    /// opposite the corner at `tail[prev h]`), shifted so the least pole
    /// count is zero.
    #[inline(always)]
    pub fn face_lams(&self, f: u32, s: &Scaling) -> [f64; 3] {
        let h = 3 * f;
        let (r0, k0) = self.reduced(h, s);
        let (r1, k1) = self.reduced(h + 1, s);
        let (r2, k2) = self.reduced(h + 2, s);
        let km = k0.min(k1).min(k2);
        [
            r0 + (k0 - km) as f64 * s.t,
            r1 + (k1 - km) as f64 * s.t,
            r2 + (k2 - km) as f64 * s.t,
        ]
    }

    /// Value of the Delaunay test of edge `e` under scaling `s`, and the size
    /// of its terms. Non-negative (up to the tolerance) means Delaunay.
    pub fn delaunay_value(&self, e: u32, s: &Scaling) -> (f64, f64) {
        let h0 = self.he.edge_half[e as usize];
        let h1 = self.he.twin[h0 as usize];
        let side = |h: u32| -> (f64, i32) { self.reduced(h, s) };
        let (re, ke) = side(h0);
        let (r0n, k0n) = side(next(h0));
        let (r0p, k0p) = side(prev(h0));
        let (r1n, k1n) = side(next(h1));
        let (r1p, k1p) = side(prev(h1));
        let m0 = ke.min(k0n).min(k0p);
        let m1 = ke.min(k1n).min(k1p);
        let t = s.t;
        let (v0, s0) = two_cos(
            re + (ke - m0) as f64 * t,
            r0n + (k0n - m0) as f64 * t,
            r0p + (k0p - m0) as f64 * t,
        );
        let (v1, s1) = two_cos(
            re + (ke - m1) as f64 * t,
            r1n + (k1n - m1) as f64 * t,
            r1p + (k1p - m1) as f64 * t,
        );
        (v0 + v1, s0 + s1)
    }

    /// True if edge `e` is Delaunay under scaling `s` (always true for an
    /// edge with both sides in one face).
    pub fn is_delaunay(&self, e: u32, s: &Scaling) -> bool {
        if !self.he.is_flippable(e) {
            return true;
        }
        let (v, size) = self.delaunay_value(e, s);
        // Ties go to edges at the pole. Vertices on the pole's horocycle make
        // exact ties: in the quad (p, h, i, j) with all legs to p equal,
        // Ptolemy gives l_hj = l_hi + l_ij, so both diagonals pass the test.
        // The right one is the edge (p, i): an edge (h, j) with the pole
        // as one opposite corner (and not at its ends) must pass strictly.
        if s.pole != NO_POLE {
            let h0 = self.he.edge_half[e as usize];
            let h1 = self.he.twin[h0 as usize];
            let (a, b) = (self.he.tail[h0 as usize], self.he.tail[h1 as usize]);
            let (c, d) = (
                self.he.tail[prev(h0) as usize],
                self.he.tail[prev(h1) as usize],
            );
            if a != s.pole && b != s.pole && ((c == s.pole) != (d == s.pole)) {
                return v > DELAUNAY_TOL * size;
            }
        }
        // NaN counts as Delaunay so that a broken value cannot loop forever;
        // the verification of the result catches any harm.
        v >= -DELAUNAY_TOL * size || v.is_nan()
    }

    /// Ptolemy flip of edge `e` in the unscaled coordinates. Returns false
    /// if the edge cannot be flipped.
    pub fn flip(&mut self, e: u32) -> bool {
        let h0 = self.he.edge_half[e as usize];
        let h1 = self.he.twin[h0 as usize];
        if face(h0) == face(h1) {
            return false;
        }
        let l = |h: u32| self.lam[self.he.edge[h as usize] as usize];
        // Quad a, b, c, d with h0 = a->b in (a, b, c) and h1 in (b, a, d):
        // l_cd l_ab = l_bc l_ad + l_ca l_db.
        let x = 0.5 * (l(next(h0)) + l(next(h1)));
        let y = 0.5 * (l(prev(h0)) + l(prev(h1)));
        let new = 2.0 * logaddexp(x, y) - self.lam[e as usize];
        self.he.flip(e);
        self.lam[e as usize] = new;
        true
    }

    /// Flip to the intrinsic Delaunay triangulation of the lengths scaled by
    /// `s`, testing every edge first. Returns the number of flips.
    pub fn flip_to_delaunay(&mut self, s: &Scaling, work: &mut FlipWork) -> Result<u64> {
        self.queue_non_delaunay(s, work);
        self.run_flips(s, work, |_, _| {})
    }

    /// Test every edge (in parallel) and queue the non-Delaunay ones in
    /// ascending order of edge id. The order does not depend on the thread
    /// count, so neither do the flips that follow.
    pub fn queue_non_delaunay(&self, s: &Scaling, work: &mut FlipWork) {
        use rayon::prelude::*;
        let ne = self.he.n_edges();
        work.stack.clear();
        work.queued.clear();
        work.queued.resize(ne, false);
        work.flags.clear();
        work.flags.resize(ne, false);
        work.flags
            .par_chunks_mut(4096)
            .enumerate()
            .for_each(|(c, chunk)| {
                for (k, flag) in chunk.iter_mut().enumerate() {
                    *flag = !self.is_delaunay((c * 4096 + k) as u32, s);
                }
            });
        for (e, &bad) in work.flags.iter().enumerate() {
            if bad {
                work.queued[e] = true;
                work.stack.push(e as u32);
            }
        }
    }

    /// Flip to Delaunay starting from the suspect edges already queued in
    /// `work` (see [`FlipWork::push`]); `on_flip(self, e)` runs after every
    /// flip. Returns the number of flips.
    pub fn run_flips<F>(&mut self, s: &Scaling, work: &mut FlipWork, mut on_flip: F) -> Result<u64>
    where
        F: FnMut(&mut Intrinsic, u32),
    {
        let ne = self.he.n_edges();
        if work.queued.len() != ne {
            work.queued.resize(ne, false);
        }
        // A generous cap: flip counts grow roughly like n^1.5 in the worst
        // cases we measured; hitting it means the lengths are broken.
        let cap: u64 = 1000 + 200 * (ne as u64) * ((ne as f64).sqrt() as u64 + 1);
        let mut flips = 0u64;
        while let Some(e) = work.stack.pop() {
            work.queued[e as usize] = false;
            if self.is_delaunay(e, s) {
                continue;
            }
            let h0 = self.he.edge_half[e as usize];
            let h1 = self.he.twin[h0 as usize];
            let outer = [
                self.he.edge[next(h0) as usize],
                self.he.edge[prev(h0) as usize],
                self.he.edge[next(h1) as usize],
                self.he.edge[prev(h1) as usize],
            ];
            if !self.flip(e) {
                continue;
            }
            on_flip(self, e);
            flips += 1;
            if flips > cap {
                return Err(Error::Algorithm {
                    stage: "map: flip to Delaunay",
                    message: format!("more than {cap} flips on {ne} edges: the lengths are not finite or not consistent"),
                });
            }
            for o in outer {
                if !work.queued[o as usize] {
                    work.queued[o as usize] = true;
                    work.stack.push(o);
                }
            }
        }
        Ok(flips)
    }

    /// Angles and cotangents of every face under scaling `s`, per halfedge:
    /// `angle[h]` is the angle opposite halfedge `h` (at `tail[prev h]`).
    /// Returns the number of faces violating the triangle inequality.
    pub fn angles(&self, s: &Scaling, angle: &mut Vec<f64>, cot: &mut Vec<f64>) -> usize {
        use rayon::prelude::*;
        let nf = self.he.n_faces();
        angle.resize(3 * nf, 0.0);
        cot.resize(3 * nf, 0.0);
        // Faces in fixed chunks; each result depends on its face only.
        const CHUNK: usize = 2048;
        angle
            .par_chunks_mut(3 * CHUNK)
            .zip(cot.par_chunks_mut(3 * CHUNK))
            .enumerate()
            .map(|(c, (ang, ct))| {
                let mut bad = 0usize;
                for k in 0..ang.len() / 3 {
                    let f = (c * CHUNK + k) as u32;
                    let t = triangle_angles(self.face_lams(f, s));
                    if !t.valid {
                        bad += 1;
                    }
                    ang[3 * k..3 * k + 3].copy_from_slice(&t.angle);
                    ct[3 * k..3 * k + 3].copy_from_slice(&t.cot);
                }
                bad
            })
            .sum()
    }

    /// Sum of the angles at each vertex given per-halfedge angles.
    pub fn angle_sums(&self, angle: &[f64], sums: &mut Vec<f64>) {
        sums.clear();
        sums.resize(self.he.n_vertices(), 0.0);
        for (h, &a) in angle.iter().enumerate() {
            let v = self.he.tail[prev(h as u32) as usize];
            sums[v as usize] += a;
        }
    }
}

impl FlipWork {
    /// Queue edge `e` as suspect (once).
    pub fn push(&mut self, e: u32) {
        let i = e as usize;
        if self.queued.len() <= i {
            self.queued.resize(i + 1, false);
        }
        if !self.queued[i] {
            self.queued[i] = true;
            self.stack.push(e);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::shapes::icosphere;

    /// Deterministic xorshift generator for the tests.
    pub(crate) struct Rng(pub u64);
    impl Rng {
        pub fn next_f64(&mut self) -> f64 {
            self.0 ^= self.0 << 13;
            self.0 ^= self.0 >> 7;
            self.0 ^= self.0 << 17;
            (self.0 >> 11) as f64 / (1u64 << 53) as f64
        }
    }

    fn bumpy(level: u32, amp: f64, seed: u64) -> Intrinsic {
        let m = icosphere(level, 1.0);
        let mut rng = Rng(seed);
        let pos: Vec<[f64; 3]> = m
            .positions
            .iter()
            .map(|p| {
                let r = 1.0 + amp * (rng.next_f64() - 0.5);
                [p[0] * r, p[1] * r, p[2] * r]
            })
            .collect();
        Intrinsic::from_mesh(&pos, &m.faces).unwrap()
    }

    #[test]
    fn angles_of_known_triangles() {
        // Equilateral: pi/3 each, cot = 1/sqrt(3).
        let t = triangle_angles([0.3, 0.3, 0.3]);
        for k in 0..3 {
            assert!((t.angle[k] - PI / 3.0).abs() < 1e-15);
            assert!((t.cot[k] - 1.0 / 3f64.sqrt()).abs() < 1e-15);
        }
        // 3-4-5 right triangle: angle opposite 5 is pi/2.
        let l = |x: f64| 2.0 * x.ln();
        let t = triangle_angles([l(3.0), l(4.0), l(5.0)]);
        assert!((t.angle[2] - PI / 2.0).abs() < 1e-15);
        assert!((t.angle[0] - (3.0f64 / 5.0).asin()).abs() < 1e-15);
        assert!(t.cot[2].abs() < 1e-15);
        assert!((t.cot[0] - 4.0 / 3.0).abs() < 1e-14);
        // A needle with sides 1, 1, 1e-9: the small angle is 1e-9 to full
        // relative precision (law of sines: 2 asin(0.5e-9)).
        let t = triangle_angles([0.0, 0.0, l(1e-9)]);
        let exact = 2.0 * (0.5e-9f64).asin();
        assert!(((t.angle[2] - exact) / exact).abs() < 1e-14);
        // A cap with sides 1, 1, 2 - 1e-12: angle near pi.
        let t = triangle_angles([0.0, 0.0, l(2.0 - 1e-12)]);
        assert!(t.valid && t.angle[2] > PI - 1e-5 && t.angle[2] < PI);
        // Violated triangle inequality: limit angles.
        let t = triangle_angles([0.0, 0.0, l(2.5)]);
        assert!(!t.valid && t.angle[2] == PI);
    }

    #[test]
    fn angle_sums_of_triangles_are_pi() {
        let mut rng = Rng(7);
        for _ in 0..1000 {
            // Random valid triangle from three random points in the plane,
            // with scales up to 1e6 apart.
            let s = (20.0 * rng.next_f64()).exp();
            let p = [
                [rng.next_f64(), rng.next_f64()],
                [rng.next_f64() * s, rng.next_f64()],
                [rng.next_f64(), rng.next_f64() / s],
            ];
            let d = |a: [f64; 2], b: [f64; 2]| ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)).ln();
            let t = triangle_angles([d(p[1], p[2]), d(p[2], p[0]), d(p[0], p[1])]);
            let sum: f64 = t.angle.iter().sum();
            assert!((sum - PI).abs() < 4e-15, "{sum}");
        }
    }

    #[test]
    fn flips_commute_with_scaling() {
        let base = bumpy(2, 0.4, 11);
        let mut rng = Rng(3);
        let u: Vec<f64> = (0..base.he.n_vertices())
            .map(|_| 4.0 * (rng.next_f64() - 0.5))
            .collect();
        let scale = |x: &Intrinsic| -> Vec<f64> {
            (0..x.he.n_edges())
                .map(|e| {
                    let h = x.he.edge_half[e];
                    x.lam[e] + u[x.he.tail[h as usize] as usize] + u[x.he.head(h) as usize]
                })
                .collect()
        };
        // Flip-then-scale versus scale-then-flip on the same edge sequence.
        let mut a = base.clone();
        let mut b = base.clone();
        b.lam = scale(&b);
        let mut worst: f64 = 0.0;
        for _ in 0..3000 {
            let e = (rng.next_f64() * base.he.n_edges() as f64) as u32;
            assert_eq!(a.flip(e), b.flip(e));
        }
        let sa = scale(&a);
        for (x, y) in sa.iter().zip(&b.lam) {
            worst = worst.max((x - y).abs());
        }
        assert_eq!(a.he, b.he);
        assert!(worst < 1e-12, "{worst}");
    }

    #[test]
    fn delaunay_flipping_is_idempotent_and_valid() {
        let mut x = bumpy(3, 0.9, 5);
        let zero = vec![0.0; x.he.n_vertices()];
        let s = Scaling::plain(&zero);
        let mut w = FlipWork::default();
        let n1 = x.flip_to_delaunay(&s, &mut w).unwrap();
        assert!(n1 > 0, "the bumpy sphere should not start Delaunay");
        let before = x.clone();
        let n2 = x.flip_to_delaunay(&s, &mut w).unwrap();
        assert_eq!(n2, 0);
        assert_eq!(before, x);
        let (mut ang, mut cot) = (Vec::new(), Vec::new());
        assert_eq!(x.angles(&s, &mut ang, &mut cot), 0);
        // Delaunay: cot a + cot b >= 0 on every edge; angle sums total
        // pi per face.
        for e in 0..x.he.n_edges() {
            let h = x.he.edge_half[e];
            let w = cot[h as usize] + cot[x.he.twin[h as usize] as usize];
            assert!(w > -1e-12, "edge {e}: {w}");
        }
        let total: f64 = ang.iter().sum();
        assert!((total - PI * x.he.n_faces() as f64).abs() < 1e-10);
        // Strong scaling: still valid triangles after flipping.
        let mut rng = Rng(9);
        let u: Vec<f64> = (0..x.he.n_vertices())
            .map(|_| 12.0 * (rng.next_f64() - 0.5))
            .collect();
        let s = Scaling::plain(&u);
        x.flip_to_delaunay(&s, &mut w).unwrap();
        x.he.check().unwrap();
        assert_eq!(x.angles(&s, &mut ang, &mut cot), 0);
        for e in 0..x.he.n_edges() as u32 {
            assert!(x.is_delaunay(e, &s));
        }
    }
}
