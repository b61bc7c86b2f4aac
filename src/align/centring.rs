//! Weighted Moebius centring of a point set on the sphere.
//!
//! In: unit vectors `v_j` (the vertices of a mapped sphere) and weights
//! `w_j >= 0` (the native surface's vertex areas, or all ones). Out: the
//! boost `C` (a [`Moebius`] map) after which the weighted centroid
//! `sum_j w_j C(v_j) / sum_j w_j` is the origin. `C` is unique up to a
//! rotation applied after it; we return the pure boost (no rotation part).
//!
//! # Method (Springborn 2005)
//!
//! Springborn, "A unique representation of polyhedral types. Centering via
//! Moebius transformations", Math. Z. 249 (2005) 513-517. Work in the
//! hyperboloid model `H = {X : <X, X> = -1, T > 0}` of hyperbolic space with
//! the Minkowski product `<X, Y> = X1 Y1 + X2 Y2 + X3 Y3 - T S`. Each point
//! `v_j` of the sphere (the ideal boundary) is the light-like vector
//! `V_j = (v_j, 1)`. For a point `X` of `H` let
//!
//! ```text
//!     F(X) = sum_j w_j log(-<X, V_j>).
//! ```
//!
//! `log(-<X, V_j>)` is the signed distance from `X` to a horosphere centred
//! at `v_j` (a Busemann function), which is convex along geodesics; for at
//! least three distinct points, none of which carries half of the total
//! weight or more, `F` is strictly convex and proper, so it has exactly one
//! minimiser `X*`. Along the geodesic `X(s) = (sinh s u, cosh s)` from the
//! centre `O = (0, 0, 0, 1)` (`u` a unit vector) we have
//! `-<X(s), V_j> = cosh s - sinh s (u . v_j)`, hence at `O`
//!
//! ```text
//!     grad F = -sum_j w_j v_j,        Hess F = sum_j w_j (I - v_j v_j^T).
//! ```
//!
//! A Moebius map `M` changes each term by the constant `log t_j` (where
//! `M V_j = t_j (M v_j, 1)`), so `F` is equivariant: the boost taking `X*`
//! to `O` makes the gradient at `O`, i.e. the weighted centroid, vanish.
//! We minimise `F` by Riemannian Newton steps, always re-centring at `O`:
//! solve `Hess F d = sum_j w_j v_j`, then backtrack (Armijo) along the
//! geodesic in direction `d`, where
//! `F(exp_O(tau d)) = sum_j w_j log(((1 + a_j) e^{-r} + (1 - a_j) e^{r}) / 2)`
//! with `r = tau |d|` and `a_j = (d / |d|) . v_j` (a form without
//! cancellation), and move the points by the boost of rapidity `r` towards
//! `-d`. The map is kept as the current centre estimate `X` (in the
//! original coordinates) and rebuilt at every step as the pure boost taking
//! `X` to `O`, so rounding does not accumulate in a product of boosts.
//! Quadratic convergence ends the iteration in a handful of steps.
//!
//! Invariants: the result is the same whatever the thread count (the sums
//! run over fixed chunks in a fixed order).

use crate::error::{Error, Result};
use crate::mesh::{norm, scale, Vec3};
use crate::moebius::Moebius;
use rayon::prelude::*;

/// Fixed chunk size of the deterministic parallel sums.
const CHUNK: usize = 4096;

/// Stopping rules of [`centre`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CentringOptions {
    /// Stop when the norm of the weighted centroid (of unit vectors,
    /// divided by the total weight) is at most this, or earlier when a
    /// Newton step no longer halves a norm below `1e-6` (the rounding floor
    /// of extremely crowded inputs; the norm reached is in
    /// [`Centring::centroid_norm`]).
    pub tolerance: f64,
    /// Give up (with [`Error::Algorithm`]) after this many Newton steps.
    pub max_iterations: usize,
}

impl Default for CentringOptions {
    fn default() -> Self {
        CentringOptions {
            tolerance: 1e-13,
            max_iterations: 100,
        }
    }
}

/// Result of [`centre`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Centring {
    /// The centring boost `C`.
    pub transform: Moebius,
    /// Newton steps taken.
    pub iterations: usize,
    /// Norm of the weighted centroid of `C(v_j)` (divided by the total weight).
    pub centroid_norm: f64,
}

/// The weighted centroid `sum_j w_j v_j / sum_j w_j` (zero if the weights sum to zero).
pub fn weighted_centroid(points: &[Vec3], weights: &[f64]) -> Vec3 {
    let (c, _, wsum) = moments(points, weights);
    if wsum > 0.0 {
        scale(c, 1.0 / wsum)
    } else {
        [0.0; 3]
    }
}

/// Find the boost that puts the weighted centroid of the unit vectors
/// `points` at the origin (Springborn 2005; see the module doc).
///
/// Errors: lengths differ, fewer than three points, a point that is not a
/// unit vector (tolerance `1e-6`), a negative or non-finite weight, a zero
/// total weight, one point carrying half of the total weight or more (no
/// centring exists), all points on one line through the centre, or no
/// convergence within `opts.max_iterations`.
pub fn centre(points: &[Vec3], weights: &[f64], opts: &CentringOptions) -> Result<Centring> {
    validate(points, weights)?;
    let wsum: f64 = weights.iter().sum();
    // State: the spatial part `x` of the current centre estimate
    // X = (x, sqrt(1 + |x|^2)) in the original coordinates; the current map
    // is the pure boost taking X to O. Rebuilding that boost from X at every
    // step (instead of multiplying step boosts) keeps it a Lorentz matrix to
    // rounding, however far the line search travels.
    let mut m = Moebius::identity();
    let mut previous = f64::INFINITY;
    let mut cur = vec![[0.0; 3]; points.len()];
    let mut iterations = 0;
    loop {
        map_into(&m, points, &mut cur);
        let (c, s, _) = moments(&cur, weights);
        // Hess F = W I - S at the centre. At the solution it is singular
        // exactly when all weight sits on one line through the centre (then
        // boosts along that line keep the centroid: the centring is not
        // unique). Far from the solution it may be nearly singular because
        // the points crowd together; then a gradient step is taken instead.
        let h = nalgebra::Matrix3::from_fn(|a, b| (if a == b { wsum } else { 0.0 }) - s[a][b]);
        let cn = norm(c) / wsum;
        // Rounding floor: tiny Newton steps that no longer halve the
        // centroid (points crowded by a boost of large rapidity are known
        // only to about e^{2 rapidity} ulp after un-crowding).
        let stalled = cn >= 0.5 * previous && cn < 1e-6;
        previous = cn;
        if cn <= opts.tolerance || stalled {
            if h.symmetric_eigenvalues().min() <= 1e-9 * wsum {
                return Err(Error::Algorithm {
                    stage: "centring",
                    message: "the centring is not unique: all weight sits on one line through the centre (two antipodal clusters)".into(),
                });
            }
            break;
        }
        if iterations >= opts.max_iterations {
            return Err(Error::Algorithm {
                stage: "centring",
                message: format!(
                    "weighted centroid norm {cn:e} after {iterations} Newton steps, tolerance {:e} (a sphere whose vertices crowd into a tiny cap holds too few digits to be centred)",
                    opts.tolerance
                ),
            });
        }
        iterations += 1;
        // Newton direction d solves Hess d = c (gradient direction c / W
        // when the Hessian is numerically singular).
        let d = match h.cholesky() {
            Some(ch) => {
                let d = ch.solve(&nalgebra::Vector3::new(c[0], c[1], c[2]));
                [d[0], d[1], d[2]]
            }
            None => scale(c, 1.0 / wsum),
        };
        let r = norm(d);
        if !(r.is_finite() && r > 0.0) {
            return Err(Error::Algorithm {
                stage: "centring",
                message: format!("Newton step of length {r} at centroid norm {cn:e}"),
            });
        }
        let dir = scale(d, 1.0 / r);
        let decrement = c[0] * d[0] + c[1] * d[1] + c[2] * d[2];
        let mut tau = 1.0;
        // Below this decrement the change of F is lost in rounding and the
        // full Newton step (quadratic convergence) is taken as it is.
        if decrement > 1e-9 * wsum * r {
            loop {
                let f = geodesic_value(&cur, weights, dir, tau * r);
                if f <= -1e-4 * tau * decrement {
                    break;
                }
                tau *= 0.5;
                if tau < 1e-12 {
                    return Err(Error::Algorithm {
                        stage: "centring",
                        message: format!(
                            "line search failed at centroid norm {cn:e} after {iterations} steps"
                        ),
                    });
                }
            }
        }
        // New centre exp_O(tau d) in the current frame, mapped back to the
        // original coordinates by m^{-1}.
        let (sh, ch) = ((tau * r).sinh(), (tau * r).cosh());
        let l = m.inverse();
        let l = l.lorentz();
        let y = [sh * dir[0], sh * dir[1], sh * dir[2], ch];
        let x: Vec3 = std::array::from_fn(|a| (0..4).map(|k| l[a][k] * y[k]).sum());
        m = centring_boost(x);
    }
    let transform = m;
    map_into(&transform, points, &mut cur);
    let (c, _, _) = moments(&cur, weights);
    Ok(Centring {
        transform,
        iterations,
        centroid_norm: norm(c) / wsum,
    })
}

/// The pure boost taking `(x, sqrt(1 + |x|^2))` to `O = (0, 0, 0, 1)`.
fn centring_boost(x: Vec3) -> Moebius {
    let nx = norm(x);
    if nx > 0.0 {
        Moebius::boost(scale(x, -nx.asinh() / nx))
    } else {
        Moebius::identity()
    }
}

fn validate(points: &[Vec3], weights: &[f64]) -> Result<()> {
    if points.len() != weights.len() {
        return Err(Error::Invalid(format!(
            "centring: {} points but {} weights",
            points.len(),
            weights.len()
        )));
    }
    if points.len() < 3 {
        return Err(Error::Invalid(format!(
            "centring needs at least 3 points, got {}",
            points.len()
        )));
    }
    if let Some((i, p)) = points.iter().enumerate().find(|(_, p)| {
        let unit = (norm(**p) - 1.0).abs() <= 1e-6;
        !unit
    }) {
        return Err(Error::Invalid(format!(
            "centring: point {i} = ({}, {}, {}) is not a unit vector",
            p[0], p[1], p[2]
        )));
    }
    if let Some((i, w)) = weights
        .iter()
        .enumerate()
        .find(|(_, w)| !(w.is_finite() && **w >= 0.0))
    {
        return Err(Error::Invalid(format!(
            "centring: weight {i} is {w}; expected a finite non-negative number"
        )));
    }
    let wsum: f64 = weights.iter().sum();
    if !(wsum > 0.0 && wsum.is_finite()) {
        return Err(Error::Invalid(format!(
            "centring: the weights sum to {wsum}; expected a positive finite total"
        )));
    }
    if let Some((i, w)) = weights.iter().enumerate().find(|(_, w)| **w >= 0.5 * wsum) {
        return Err(Error::Invalid(format!(
            "centring: point {i} carries weight {w} of the total {wsum}; no centring exists when one point has half the weight or more (Springborn 2005)"
        )));
    }
    Ok(())
}

/// `out[j] = m(points[j])`, in parallel (each entry is independent).
fn map_into(m: &Moebius, points: &[Vec3], out: &mut [Vec3]) {
    out.par_chunks_mut(CHUNK)
        .zip(points.par_chunks(CHUNK))
        .for_each(|(o, p)| {
            for (o, p) in o.iter_mut().zip(p) {
                *o = m.apply(*p);
            }
        });
}

/// `(sum w v, sum w v v^T, sum w)` over fixed chunks, added in chunk order.
fn moments(points: &[Vec3], weights: &[f64]) -> (Vec3, [[f64; 3]; 3], f64) {
    let parts: Vec<(Vec3, [[f64; 3]; 3], f64)> = points
        .par_chunks(CHUNK)
        .zip(weights.par_chunks(CHUNK))
        .map(|(p, w)| {
            let mut c = [0.0; 3];
            let mut s = [[0.0; 3]; 3];
            let mut t = 0.0;
            for (v, &w) in p.iter().zip(w) {
                t += w;
                for a in 0..3 {
                    c[a] += w * v[a];
                    for b in a..3 {
                        s[a][b] += w * v[a] * v[b];
                    }
                }
            }
            (c, s, t)
        })
        .collect();
    let mut c = [0.0; 3];
    let mut s = [[0.0; 3]; 3];
    let mut t = 0.0;
    for (pc, ps, pt) in parts {
        t += pt;
        for a in 0..3 {
            c[a] += pc[a];
            for b in a..3 {
                s[a][b] += ps[a][b];
            }
        }
    }
    (s[1][0], s[2][0], s[2][1]) = (s[0][1], s[0][2], s[1][2]);
    (c, s, t)
}

/// `F(exp_O(r dir)) - F(O)` for the current points (see the module doc).
fn geodesic_value(points: &[Vec3], weights: &[f64], dir: Vec3, r: f64) -> f64 {
    let (em, ep) = ((-r).exp(), r.exp());
    let parts: Vec<f64> = points
        .par_chunks(CHUNK)
        .zip(weights.par_chunks(CHUNK))
        .map(|(p, w)| {
            p.iter()
                .zip(w)
                .map(|(v, &w)| {
                    let a = (dir[0] * v[0] + dir[1] * v[1] + dir[2] * v[2]).clamp(-1.0, 1.0);
                    w * (0.5 * ((1.0 + a) * em + (1.0 - a) * ep)).ln()
                })
                .sum::<f64>()
        })
        .collect();
    parts.iter().sum()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::align::landmarks::fit_rotation;
    use crate::mesh::shapes::icosphere;
    use crate::mesh::sub;
    use crate::moebius::{mat3_apply, SeededRng};

    fn random_cloud(seed: u64, n: usize) -> (Vec<Vec3>, Vec<f64>) {
        let mut rng = SeededRng::new(seed);
        // Lopsided: points crowd towards +z so the start is far from centred.
        let pts = (0..n)
            .map(|_| {
                let v = rng.unit_vector();
                Moebius::boost([0.0, 0.0, 1.5]).apply(v)
            })
            .collect();
        let w = (0..n).map(|_| 0.1 + rng.uniform()).collect();
        (pts, w)
    }

    #[test]
    fn centroid_vanishes_after_centring() {
        // Springborn 2005: the centring boost makes the weighted centroid zero.
        for seed in 0..5 {
            let (p, w) = random_cloud(seed, 500);
            let before = norm(weighted_centroid(&p, &w));
            assert!(before > 0.3, "test set should start off-centre: {before}");
            let c = centre(&p, &w, &CentringOptions::default()).unwrap();
            let moved = c.transform.apply_all(&p);
            let after = norm(weighted_centroid(&moved, &w));
            assert!(after < 1e-10, "seed {seed}: {after}");
            assert!(c.iterations >= 2 && c.iterations < 30, "{}", c.iterations);
            // A pure boost: symmetric Lorentz matrix.
            let l = c.transform.lorentz();
            for (a, row) in l.iter().enumerate() {
                for (b, v) in row.iter().enumerate() {
                    assert!((v - l[b][a]).abs() < 1e-12);
                }
            }
        }
    }

    #[test]
    fn centring_is_moebius_invariant_up_to_rotation() {
        // Springborn 2005: the centred representative is unique up to a
        // rotation, so centring M(P) for a random Moebius map M must give the
        // centred P up to a rotation; the rotation is found by a Kabsch fit
        // (Kabsch, Acta Cryst. A32 (1976) 922).
        for seed in 0..4u64 {
            let (p, w) = random_cloud(10 + seed, 300);
            let m = Moebius::random(50 + seed, 2.0);
            let q = m.apply_all(&p);
            let opts = CentringOptions::default();
            let cp = centre(&p, &w, &opts).unwrap().transform.apply_all(&p);
            let cq = centre(&q, &w, &opts).unwrap().transform.apply_all(&q);
            let r = fit_rotation(&cq, &cp, &w).unwrap();
            let worst = cq
                .iter()
                .zip(&cp)
                .map(|(a, b)| norm(sub(mat3_apply(&r, *a), *b)))
                .fold(0.0, f64::max);
            assert!(worst < 1e-9, "seed {seed}: {worst}");
        }
    }

    #[test]
    fn moved_icosphere_is_recentred() {
        // The icosahedral sphere with its own vertex areas is centred by
        // symmetry; after a random Moebius map, centring must bring every
        // vertex back up to a rotation.
        let ico = icosphere(3, 1.0);
        let w = ico.vertex_areas();
        assert!(norm(weighted_centroid(&ico.positions, &w)) < 1e-14);
        let m = Moebius::random(3, 2.5);
        let moved = m.apply_all(&ico.positions);
        let c = centre(&moved, &w, &CentringOptions::default()).unwrap();
        let back = c.transform.apply_all(&moved);
        let r = fit_rotation(&back, &ico.positions, &w).unwrap();
        let worst = back
            .iter()
            .zip(&ico.positions)
            .map(|(a, b)| norm(sub(mat3_apply(&r, *a), *b)))
            .fold(0.0, f64::max);
        assert!(worst < 1e-9, "{worst}");
    }

    #[test]
    fn strongly_crowded_spheres_are_centred() {
        // Boosts of rapidity up to 8 crowd almost all vertices into a cap of
        // angular radius about e^-8 rad; the line search must still reach the
        // centre (Springborn 2005: the minimiser exists for any such input),
        // to the precision the crowded input still holds.
        let ico = icosphere(2, 1.0);
        let w = ico.vertex_areas();
        for (s, tol) in [(4.0, 1e-10), (6.0, 1e-10), (8.0, 1e-8)] {
            let moved = Moebius::boost([0.3 * s, -0.5 * s, 0.81 * s]).apply_all(&ico.positions);
            let c = centre(&moved, &w, &CentringOptions::default()).unwrap();
            let back = c.transform.apply_all(&moved);
            let cn = norm(weighted_centroid(&back, &w));
            assert!(cn < tol, "rapidity {s}: {cn:e}");
            assert!((cn - c.centroid_norm).abs() < 1e-15);
            let r = fit_rotation(&back, &ico.positions, &w).unwrap();
            let worst = back
                .iter()
                .zip(&ico.positions)
                .map(|(a, b)| norm(sub(mat3_apply(&r, *a), *b)))
                .fold(0.0, f64::max);
            // Crowding costs digits: a vertex is known to about e^(2s) ulp.
            assert!(worst < 1e3 * tol, "rapidity {s}: {worst}");
        }
    }

    #[test]
    fn thread_count_does_not_change_the_result() {
        let (p, w) = random_cloud(77, 20_000);
        let run = |threads: usize| {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            pool.install(|| centre(&p, &w, &CentringOptions::default()).unwrap())
        };
        let a = run(1);
        let b = run(3);
        assert_eq!(a.transform.lorentz(), b.transform.lorentz());
    }

    #[test]
    fn bad_input_is_refused() {
        let (p, w) = random_cloud(1, 10);
        let opts = CentringOptions::default();
        assert!(centre(&p, &w[..9], &opts).is_err());
        assert!(centre(&p[..2], &w[..2], &opts).is_err());
        let mut heavy = w.clone();
        heavy[4] = 1000.0;
        let e = centre(&p, &heavy, &opts).unwrap_err().to_string();
        assert!(e.contains("point 4") && e.contains("half"), "{e}");
        let mut bad = p.clone();
        bad[2] = [2.0, 0.0, 0.0];
        assert!(centre(&bad, &w, &opts)
            .unwrap_err()
            .to_string()
            .contains("point 2"));
        let mut neg = w.clone();
        neg[3] = -1.0;
        assert!(centre(&p, &neg, &opts)
            .unwrap_err()
            .to_string()
            .contains("weight 3"));
        // All points on one line: two antipodal clusters.
        let line: Vec<Vec3> = (0..6)
            .map(|i| {
                if i % 2 == 0 {
                    [0.0, 0.0, 1.0]
                } else {
                    [0.0, 0.0, -1.0]
                }
            })
            .collect();
        assert!(centre(&line, &[1.0; 6], &opts).is_err());
    }
}
