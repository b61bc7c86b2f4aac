//! The convex energy of discrete conformal maps, its gradient (angle
//! defects) and Hessian (cotangent Laplacian).
//!
//! In: an intrinsic triangulation ([`Intrinsic`]), Delaunay for the scaled
//! lengths, a scaling ([`Scaling`]: log factors `u`, optionally a pole with
//! log factor `T`) and target angle sums `Theta_i`. Out:
//!
//! `E(u) = sum_t sum_k (a_k r_k + 2 L(a_k)) - pi sum_e r_e + sum_{i != p} Theta_i u_i - T * (angle sum at p)`
//!
//! where `a_k` is the angle opposite side `k`, `r_k` its reduced scaled log
//! length (without the pole's `T`; see [`super::intrinsic`]) and `L` the
//! Milnor-Lobachevsky function. Without a pole this is the energy of
//! Bobenko, Pinkall, Springborn, "Discrete conformal maps and ideal
//! hyperbolic polyhedra", Geom. Topol. 19 (2015) 2155-2215 (up to a constant
//! and the factor convention); with a pole it is the same energy with the
//! `T`-terms collected, which keeps full precision at large `T` (Springborn,
//! "Ideal hyperbolic polyhedra and discrete uniformization", Discrete Comput.
//! Geom. 64 (2020) 63-108). Gradient: `dE/du_i = Theta_i - (angle sum at i)`.
//! Hessian: the cotangent Laplacian `H_ij = -(cot a + cot b)/2` summed over
//! the edges joining `i` and `j`, `H_ii = -sum_j H_ij` (Springborn, Schröder,
//! Pinkall, "Conformal equivalence of triangle meshes", ACM Trans. Graph.
//! 27(3) (2008) 77). What stays true: `E` is convex and `C^2` in `u` when
//! every evaluation first flips to Delaunay (Gillespie, Springborn, Crane,
//! "Discrete conformal equivalence of polyhedral surfaces", ACM Trans.
//! Graph. 40(4) (2021) 103); the caller does the flipping.

use super::intrinsic::{Intrinsic, Scaling};
use super::milnor::lobachevsky;
use std::f64::consts::PI;

/// Marks a vertex that is not an unknown of the Newton system.
pub const FIXED: u32 = u32::MAX;

/// Angles, cotangents, angle sums and energy at one scaling.
#[derive(Debug, Clone, Default)]
pub struct Evaluation {
    /// Angle opposite each halfedge.
    pub angle: Vec<f64>,
    /// Cotangent of that angle.
    pub cot: Vec<f64>,
    /// Angle sum per vertex.
    pub sums: Vec<f64>,
    /// The energy (see the module documentation).
    pub energy: f64,
    /// Faces whose lengths violate the triangle inequality (zero on a
    /// Delaunay triangulation).
    pub n_invalid: usize,
}

/// Evaluate angles, angle sums and the energy. `theta[v]` is the target
/// angle sum of vertex `v` (the pole's entry is ignored).
pub fn evaluate(intr: &Intrinsic, s: &Scaling, theta: &[f64], ev: &mut Evaluation) {
    ev.n_invalid = intr.angles(s, &mut ev.angle, &mut ev.cot);
    intr.angle_sums(&ev.angle, &mut ev.sums);
    ev.energy = energy_from_angles(intr, s, theta, &ev.angle, &ev.sums);
}

/// The energy given the angles (per halfedge) and angle sums.
pub fn energy_from_angles(
    intr: &Intrinsic,
    s: &Scaling,
    theta: &[f64],
    angle: &[f64],
    sums: &[f64],
) -> f64 {
    use rayon::prelude::*;
    let he = &intr.he;
    // Per halfedge: a r + 2 L(a), and -pi r / 2 (each edge has two
    // halfedges). Partial sums over fixed chunks, added in chunk order: the
    // result does not depend on the thread count.
    const CHUNK: usize = 4096;
    let partial: Vec<f64> = angle
        .par_chunks(CHUNK)
        .enumerate()
        .map(|(c, chunk)| {
            let mut acc = 0.0;
            for (k, &a) in chunk.iter().enumerate() {
                let (r, _) = intr.reduced((c * CHUNK + k) as u32, s);
                acc += a * r + 2.0 * lobachevsky(a) - 0.5 * PI * r;
            }
            acc
        })
        .collect();
    let e_faces: f64 = partial.iter().sum();
    let mut e_vert = 0.0;
    for v in 0..he.n_vertices() {
        if v as u32 == s.pole {
            e_vert -= s.t * sums[v];
        } else {
            e_vert += theta[v] * s.u[v];
        }
    }
    e_faces + e_vert
}

/// Gradient `g[var[v]] = Theta_v - sums[v]` over the unknowns.
pub fn gradient(theta: &[f64], sums: &[f64], var: &[u32], g: &mut [f64]) {
    for (v, &i) in var.iter().enumerate() {
        if i != FIXED {
            g[i as usize] = theta[v] - sums[v];
        }
    }
}

/// Cotangent weight `(cot a + cot b)/2` of the edge of halfedge `h`. With a
/// finite `clip`, each cotangent *in a triangle with a corner at `pole`* is
/// first clipped to `[-clip, clip]` (the pole triangles are extremely thin
/// and their weights explode; the input's own thin triangles keep their
/// exact weights), and the weight is clipped to `>= 0`, so near-degenerate
/// Delaunay triangles (angles `pi` and `0` across an edge) give a zero
/// weight instead of `-inf + inf` and the Newton matrix stays positive
/// semi-definite. `clip = inf` gives the exact weight.
#[inline]
pub fn edge_weight(intr: &Intrinsic, cot: &[f64], h: u32, clip: f64, pole: u32) -> f64 {
    let t = intr.he.twin[h as usize];
    let (c1, c2) = (cot[h as usize], cot[t as usize]);
    if clip.is_finite() {
        let touches = |x: u32| {
            let f = 3 * (x / 3) as usize;
            intr.he.tail[f] == pole || intr.he.tail[f + 1] == pole || intr.he.tail[f + 2] == pole
        };
        let c1 = if touches(h) {
            c1.clamp(-clip, clip)
        } else {
            c1.clamp(-1e6, 1e6)
        };
        let c2 = if touches(t) {
            c2.clamp(-clip, clip)
        } else {
            c2.clamp(-1e6, 1e6)
        };
        (0.5 * (c1 + c2)).max(0.0)
    } else {
        0.5 * (c1 + c2)
    }
}

/// Lower-triangle triplets of the Hessian restricted to the unknowns
/// (`var[v]` is the unknown's index or [`FIXED`]), with cotangent weights
/// clipped at `clip` in the triangles at `pole` (see [`edge_weight`]) and
/// `shift` added to the diagonal.
pub fn hessian_entries(
    intr: &Intrinsic,
    cot: &[f64],
    var: &[u32],
    clip: f64,
    shift: f64,
    pole: u32,
    out: &mut Vec<(u32, u32, f64)>,
) {
    let he = &intr.he;
    out.clear();
    for &i in var {
        if i != FIXED {
            out.push((i, i, shift));
        }
    }
    for &h in &he.edge_half {
        let a = he.tail[h as usize];
        let b = he.head(h);
        if a == b {
            continue;
        }
        let w = edge_weight(intr, cot, h, clip, pole);
        let (ia, ib) = (var[a as usize], var[b as usize]);
        if ia != FIXED {
            out.push((ia, ia, w));
        }
        if ib != FIXED {
            out.push((ib, ib, w));
        }
        if ia != FIXED && ib != FIXED {
            out.push((ia.max(ib), ia.min(ib), -w));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::map::intrinsic::{FlipWork, NO_POLE};
    use crate::map::sparse::SparseSpd;
    use crate::mesh::shapes::icosphere;

    struct Rng(u64);
    impl Rng {
        fn f(&mut self) -> f64 {
            self.0 ^= self.0 << 13;
            self.0 ^= self.0 >> 7;
            self.0 ^= self.0 << 17;
            (self.0 >> 11) as f64 / (1u64 << 53) as f64
        }
    }

    fn surface(seed: u64) -> Intrinsic {
        let m = icosphere(2, 1.0);
        let mut rng = Rng(seed);
        let pos: Vec<[f64; 3]> = m
            .positions
            .iter()
            .map(|p| {
                let r = 1.0 + 0.5 * (rng.f() - 0.5);
                [p[0] * r, p[1] * r * 1.5, p[2] * r]
            })
            .collect();
        let mut x = Intrinsic::from_mesh(&pos, &m.faces).unwrap();
        let z = vec![0.0; x.he.n_vertices()];
        x.flip_to_delaunay(&Scaling::plain(&z), &mut FlipWork::default())
            .unwrap();
        x
    }

    /// Energy at `u` after flipping (a copy of) `base` to Delaunay there.
    fn energy_at(
        base: &Intrinsic,
        u: &[f64],
        pole: u32,
        t: f64,
        theta: &[f64],
    ) -> (f64, Evaluation, Intrinsic) {
        let mut x = base.clone();
        let s = Scaling { u, pole, t };
        x.flip_to_delaunay(&s, &mut FlipWork::default()).unwrap();
        let mut ev = Evaluation::default();
        evaluate(&x, &s, theta, &mut ev);
        (ev.energy, ev, x)
    }

    fn check_derivatives(pole: u32, t: f64, seed: u64) {
        let base = surface(seed);
        let n = base.he.n_vertices();
        let mut rng = Rng(seed + 100);
        let theta: Vec<f64> = (0..n).map(|_| 2.0 * PI * (0.8 + 0.4 * rng.f())).collect();
        let u: Vec<f64> = (0..n).map(|_| 1.5 * (rng.f() - 0.5)).collect();
        let (_, ev, x) = energy_at(&base, &u, pole, t, &theta);
        let var: Vec<u32> = (0..n as u32)
            .map(|v| if v == pole { FIXED } else { v })
            .collect();
        let mut g = vec![0.0; n];
        gradient(&theta, &ev.sums, &var, &mut g);
        // Gradient against central differences of the energy.
        let h = 1e-5;
        let mut worst_g: f64 = 0.0;
        for i in (0..n).step_by(7) {
            if i as u32 == pole {
                continue;
            }
            let mut up = u.clone();
            up[i] += h;
            let mut um = u.clone();
            um[i] -= h;
            let fd = (energy_at(&base, &up, pole, t, &theta).0
                - energy_at(&base, &um, pole, t, &theta).0)
                / (2.0 * h);
            worst_g = worst_g.max((fd - g[i]).abs());
        }
        assert!(worst_g < 1e-6, "gradient vs finite differences: {worst_g}");
        // Hessian times a random direction against differences of the gradient.
        let mut entries = Vec::new();
        hessian_entries(&x, &ev.cot, &var, f64::INFINITY, 0.0, pole, &mut entries);
        let mut spd = SparseSpd::default();
        let dir: Vec<f64> = (0..n)
            .map(|v| if v as u32 == pole { 0.0 } else { rng.f() - 0.5 })
            .collect();
        // Assemble via the solver's matrix product (the pole row is empty:
        // give it a unit diagonal so the factorisation goes through).
        if pole != NO_POLE {
            entries.push((pole, pole, 1.0));
        } else {
            entries.push((0, 0, 1.0)); // the closed surface's Hessian is singular along constants
        }
        let e0 = if pole != NO_POLE { None } else { Some(0usize) };
        spd.factorize(n, &mut entries).unwrap();
        let mut hv = vec![0.0; n];
        spd.mul(&dir, &mut hv);
        if let Some(i0) = e0 {
            hv[i0] -= dir[i0];
        }
        let eps = 1e-6;
        let up: Vec<f64> = u.iter().zip(&dir).map(|(a, b)| a + eps * b).collect();
        let um: Vec<f64> = u.iter().zip(&dir).map(|(a, b)| a - eps * b).collect();
        let (_, evp, _) = energy_at(&base, &up, pole, t, &theta);
        let (_, evm, _) = energy_at(&base, &um, pole, t, &theta);
        let mut worst_h: f64 = 0.0;
        let mut scale: f64 = 0.0;
        for (i, &hvi) in hv.iter().enumerate() {
            if i as u32 == pole {
                continue;
            }
            // g = Theta - sums, so H dir = -(d sums / d dir).
            let fd = -(evp.sums[i] - evm.sums[i]) / (2.0 * eps);
            worst_h = worst_h.max((fd - hvi).abs());
            scale = scale.max(hvi.abs());
        }
        assert!(scale > 1e-3, "the test direction should move the angles");
        assert!(
            worst_h < 1e-6 * scale.max(1.0),
            "Hessian vs finite differences: {worst_h} (scale {scale})"
        );
        // Convexity along the direction: second difference of E is >= 0.
        let e0v = energy_at(&base, &u, pole, t, &theta).0;
        let ep = energy_at(
            &base,
            &u.iter()
                .zip(&dir)
                .map(|(a, b)| a + 1e-3 * b)
                .collect::<Vec<_>>(),
            pole,
            t,
            &theta,
        )
        .0;
        let em = energy_at(
            &base,
            &u.iter()
                .zip(&dir)
                .map(|(a, b)| a - 1e-3 * b)
                .collect::<Vec<_>>(),
            pole,
            t,
            &theta,
        )
        .0;
        assert!(ep + em - 2.0 * e0v > -1e-10);
    }

    #[test]
    fn derivatives_without_pole() {
        check_derivatives(NO_POLE, 0.0, 1);
        check_derivatives(NO_POLE, 0.0, 2);
    }

    #[test]
    fn derivatives_with_pole() {
        // Reduced form with the pole's factor T collected.
        check_derivatives(5, 3.0, 3);
        check_derivatives(17, -2.0, 4);
    }
}
