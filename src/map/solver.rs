//! The bounds-constrained minimisation: projected Newton with continuation
//! in the pole's log factor `T`.
//!
//! In: the input's intrinsic Delaunay triangulation, the pole `p` and the
//! horocyclic distances `d_i` ([`super::horocycle`]). Unknowns: slacks
//! `s_i = u_i + d_i >= 0` for `i != p`; the pole's factor is `T`. Out: the
//! minimiser of `E(s)` ([`super::energy`] with targets `2 pi`) and the
//! Delaunay triangulation there. At the solution the vertices on their
//! bounds (`s_i = 0`) are the boundary of a flat convex disk (angle sum in
//! the disk `< pi`), the others are flat interior vertices (angle sum `2 pi`)
//! (Springborn, "Ideal hyperbolic polyhedra and discrete uniformization",
//! Discrete Comput. Geom. 64 (2020) 63-108; Gillespie, Springborn, Crane,
//! "Discrete conformal equivalence of polyhedral surfaces", ACM Trans.
//! Graph. 40(4) (2021) 103).
//!
//! Start: by default the input metric (`u = 0`, clamped to the bounds);
//! see [`Start`].
//!
//! Method: the projected Newton method of D. Bertsekas, "Projected Newton
//! methods for optimization problems with simple constraints", SIAM J.
//! Control Optim. 20(2) (1982) 221-246: active set `s_i <= min(1e-3, |pg|)`
//! with `g_i > 0`; Newton step on the free set with the cotangent Laplacian
//! (weights clipped, the gradient stays exact); steepest descent on the
//! active set; projected Armijo line search in which every trial point is
//! flipped to Delaunay first. Continuation `T = 6, 12, 24, 48, 80`: a finite
//! `T` is exact as long as the active gradients stay positive. When a flip
//! creates an edge to the pole whose log length is within `1e-9` of the
//! bound, it is snapped to the bound, which keeps exact ties exact.

use super::energy::{evaluate, gradient, hessian_entries, Evaluation, FIXED};
use super::intrinsic::{FlipWork, Intrinsic, Scaling};
use super::sparse::SparseSpd;
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// Starting point of the minimisation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Start {
    /// `u = 0` away from the pole (`s_i = max(d_i, 0)`): the input metric
    /// with the pole pushed away. Measured on our test families: 5-12
    /// Newton iterations where `Bounds` needs 20-60, and it converges on
    /// slivers where `Bounds` stalls (the all-on-bounds configuration is
    /// full of degenerate triangles).
    InputMetric,
    /// `s = 0`: every vertex on its bound.
    Bounds,
}

/// Solver settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SolverOptions {
    /// Stop a stage when the largest projected gradient is below this (rad).
    pub tol: f64,
    /// The continuation values of `T`.
    pub t_stages: Vec<f64>,
    /// Clip of the cotangent weights in the Newton matrix.
    pub weight_clip: f64,
    /// Newton iterations allowed per stage.
    pub max_iter_per_stage: usize,
    /// Snap a new pole edge to its bound when within this distance.
    pub snap: f64,
    /// Starting point.
    pub start: Start,
}

impl Default for SolverOptions {
    fn default() -> Self {
        SolverOptions {
            tol: 1e-10,
            t_stages: vec![6.0, 12.0, 24.0, 48.0, 80.0],
            weight_clip: 1e3,
            max_iter_per_stage: 200,
            snap: 1e-9,
            start: Start::InputMetric,
        }
    }
}

/// One Newton iteration, for the report.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct IterationRecord {
    /// The stage's `T`.
    pub t: f64,
    /// Iteration number within the stage.
    pub iter: usize,
    /// Energy before the step.
    pub energy: f64,
    /// Largest projected gradient before the step.
    pub max_projected_gradient: f64,
    /// Vertices in the active set.
    pub active: usize,
    /// Accepted step length.
    pub step: f64,
    /// Flips during the line search.
    pub flips: u64,
}

/// Result of the minimisation.
#[derive(Debug)]
pub struct Solution {
    /// Slack per vertex (`0` at the pole).
    pub s: Vec<f64>,
    /// The final `T`.
    pub t: f64,
    /// The Delaunay triangulation at the solution (unscaled coordinates).
    pub tri: Intrinsic,
    /// Evaluation at the solution.
    pub eval: Evaluation,
    /// Newton iterations in all.
    pub iterations: usize,
    /// Flips in all.
    pub flips: u64,
    /// Numeric factorisations / symbolic analyses.
    pub factorizations: usize,
    /// Symbolic analyses.
    pub symbolic_analyses: usize,
    /// Where the time went.
    pub profile: SolveProfile,
    /// The last Newton matrix's factorisation and its numbering of the free
    /// vertices (`FIXED` for the others), reused by the layout.
    pub newton: Option<(SparseSpd<f64>, Vec<u32>)>,
}

/// Seconds per part of the solve.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct SolveProfile {
    /// Number of evaluations (flip to Delaunay, angles, energy).
    pub evaluations: usize,
    /// Flipping to Delaunay, angles and energy (all evaluations).
    pub evaluate: f64,
    /// Assembling the Newton matrices.
    pub assemble: f64,
    /// Symbolic analyses (ordering).
    pub symbolic: f64,
    /// Numeric factorisations.
    pub numeric: f64,
    /// Triangular solves.
    pub solve: f64,
}

/// Scaled state: `u_i = s_i - d_i`.
fn log_factors(s: &[f64], d: &[f64], u: &mut [f64]) {
    for ((ui, si), di) in u.iter_mut().zip(s).zip(d) {
        *ui = si - di;
    }
}

/// Flip `tri` to Delaunay at slacks `s` (snapping new pole edges to their
/// bounds) and evaluate. Returns the flips.
#[allow(clippy::too_many_arguments)]
fn evaluate_at(
    tri: &mut Intrinsic,
    s: &[f64],
    d: &[f64],
    pole: u32,
    t: f64,
    snap: f64,
    u: &mut [f64],
    theta: &[f64],
    work: &mut FlipWork,
    ev: &mut Evaluation,
) -> Result<u64> {
    log_factors(s, d, u);
    let sc = Scaling { u, pole, t };
    tri.queue_non_delaunay(&sc, work);
    let flips = tri.run_flips(&sc, work, |x, e| {
        let h = x.he.edge_half[e as usize];
        let (a, b) = (x.he.tail[h as usize], x.he.head(h));
        let other = if a == pole && b != pole {
            b
        } else if b == pole && a != pole {
            a
        } else {
            return;
        };
        let bound = d[other as usize];
        if (x.lam[e as usize] - bound).abs() < snap {
            x.lam[e as usize] = bound;
        }
    })?;
    evaluate(tri, &sc, theta, ev);
    Ok(flips)
}

/// Solve the bounds-constrained problem from the start in `opts`.
/// The iteration log is appended to `log` whether or not the solve succeeds.
pub fn solve(
    input: &Intrinsic,
    pole: u32,
    d: &[f64],
    opts: &SolverOptions,
    log: &mut Vec<IterationRecord>,
) -> Result<Solution> {
    let n = input.he.n_vertices();
    let s0 = match opts.start {
        Start::InputMetric => d.to_vec(),
        Start::Bounds => vec![0.0; n],
    };
    solve_from(input, pole, d, s0, opts, log)
}

/// Solve from a given start `s0` (clamped to `s >= 0`), appending to `log`.
pub fn solve_from(
    input: &Intrinsic,
    pole: u32,
    d: &[f64],
    s0: Vec<f64>,
    opts: &SolverOptions,
    log: &mut Vec<IterationRecord>,
) -> Result<Solution> {
    solve_general(input, pole, d, s0, None, opts, log)
}

/// The fast path's problem: the vertices with `fixed[v]` are held on their
/// bounds (`s = 0`), all others are free and unbounded (their `d` is
/// ignored; pass 0): an ordinary flattening of a disk with fixed boundary
/// log factors. Its result is an answer only if it passes the verification
/// (see [`super::map_to_sphere`]).
pub fn solve_fixed_boundary(
    input: &Intrinsic,
    pole: u32,
    d: &[f64],
    fixed: &[bool],
    opts: &SolverOptions,
    log: &mut Vec<IterationRecord>,
) -> Result<Solution> {
    let s0: Vec<f64> = (0..d.len())
        .map(|v| if fixed[v] { 0.0 } else { d[v] })
        .collect();
    solve_general(input, pole, d, s0, Some(fixed), opts, log)
}

fn solve_general(
    input: &Intrinsic,
    pole: u32,
    d: &[f64],
    s0: Vec<f64>,
    fixed: Option<&[bool]>,
    opts: &SolverOptions,
    log: &mut Vec<IterationRecord>,
) -> Result<Solution> {
    let n = input.he.n_vertices();
    if fixed.is_some_and(|f| f.len() != n) {
        return Err(Error::Invalid(
            "fixed-boundary mask of the wrong length".into(),
        ));
    }
    let is_fixed = |v: usize| fixed.is_some_and(|f| f[v]);
    let bounded = fixed.is_none();
    let mut theta = vec![2.0 * PI; n];
    theta[pole as usize] = 0.0;
    let mut s: Vec<f64> = s0
        .iter()
        .map(|x| if bounded { x.max(0.0) } else { *x })
        .collect();
    s[pole as usize] = 0.0;
    let var: Vec<u32> = (0..n as u32)
        .map(|v| if v == pole { FIXED } else { v })
        .collect();
    let mut tri = input.clone();
    let mut work = FlipWork::default();
    let mut u = vec![0.0; n];
    let mut ev = Evaluation::default();
    let mut ev_trial = Evaluation::default();
    let mut g = vec![0.0; n];
    let mut fvar = vec![FIXED; n];
    let mut entries = Vec::new();
    let mut spd = SparseSpd::default();
    let mut flips = 0u64;
    let mut iterations = 0usize;
    let mut dir = vec![0.0; n];
    let mut s_trial = vec![0.0; n];
    let mut rhs = Vec::new();
    let snap = if bounded { opts.snap } else { -1.0 };
    let mut time_eval = 0.0;
    let mut n_eval = 0usize;
    let mut t = opts.t_stages.first().copied().unwrap_or(80.0);
    let n_stages = opts.t_stages.len();
    let mut stage = 0;
    while stage < n_stages {
        t = opts.t_stages[stage];
        stage += 1;
        let te = std::time::Instant::now();
        flips += evaluate_at(
            &mut tri, &s, d, pole, t, snap, &mut u, &theta, &mut work, &mut ev,
        )?;
        time_eval += te.elapsed().as_secs_f64();
        n_eval += 1;
        let mut converged = false;
        for iter in 0..opts.max_iter_per_stage {
            gradient(&theta, &ev.sums, &var, &mut g);
            g[pole as usize] = 0.0;
            let mut pg_max: f64 = 0.0;
            for v in 0..n {
                if v as u32 != pole {
                    let pg = if is_fixed(v) {
                        0.0
                    } else if bounded {
                        s[v] - (s[v] - g[v]).max(0.0)
                    } else {
                        g[v]
                    };
                    pg_max = pg_max.max(pg.abs());
                }
            }
            if !pg_max.is_finite() {
                return Err(Error::Algorithm {
                    stage: "map: projected Newton",
                    message: format!("non-finite gradient at T = {t}, iteration {iter}"),
                });
            }
            let mut record = IterationRecord {
                t,
                iter,
                energy: ev.energy,
                max_projected_gradient: pg_max,
                active: 0,
                step: 0.0,
                flips: 0,
            };
            if pg_max < opts.tol {
                log.push(record);
                converged = true;
                break;
            }
            // Active set and free numbering.
            let eps = pg_max.min(1e-3);
            let mut nf = 0u32;
            let mut n_active = 0;
            for v in 0..n {
                if v as u32 == pole {
                    fvar[v] = FIXED;
                } else if is_fixed(v) || (bounded && s[v] <= eps && g[v] > 0.0) {
                    fvar[v] = FIXED;
                    n_active += 1;
                } else {
                    fvar[v] = nf;
                    nf += 1;
                }
            }
            record.active = n_active;
            // Newton step on the free set.
            dir.iter_mut().for_each(|x| *x = 0.0);
            if nf > 0 {
                rhs.clear();
                rhs.resize(nf as usize, 0.0);
                for v in 0..n {
                    if fvar[v] != FIXED {
                        rhs[fvar[v] as usize] = -g[v];
                    }
                }
                let mut shift = 0.0;
                let mut solved = false;
                for _attempt in 0..6 {
                    hessian_entries(
                        &tri,
                        &ev.cot,
                        &fvar,
                        opts.weight_clip,
                        shift,
                        pole,
                        &mut entries,
                    );
                    if spd.factorize(nf as usize, &mut entries).is_ok() {
                        solved = true;
                        break;
                    }
                    shift = if shift == 0.0 { 1e-10 } else { shift * 100.0 };
                }
                if !solved {
                    return Err(Error::Algorithm {
                        stage: "map: projected Newton",
                        message: format!(
                            "Newton matrix not positive definite at T = {t}, iteration {iter}"
                        ),
                    });
                }
                spd.solve(&mut rhs)?;
                for v in 0..n {
                    if fvar[v] != FIXED {
                        dir[v] = rhs[fvar[v] as usize];
                    }
                }
            }
            for v in 0..n {
                if fvar[v] == FIXED && v as u32 != pole {
                    dir[v] = -g[v];
                }
            }
            // Projected Armijo line search.
            let e0 = ev.energy;
            let roundoff = 1e-13 * (e0.abs() + n as f64);
            let mut alpha = 1.0;
            let mut accepted = false;
            let mut ls_flips = 0;
            for _ in 0..60 {
                for v in 0..n {
                    s_trial[v] = if v as u32 == pole || is_fixed(v) {
                        s[v]
                    } else if bounded {
                        (s[v] + alpha * dir[v]).max(0.0)
                    } else {
                        s[v] + alpha * dir[v]
                    };
                }
                let te = std::time::Instant::now();
                ls_flips += evaluate_at(
                    &mut tri,
                    &s_trial,
                    d,
                    pole,
                    t,
                    snap,
                    &mut u,
                    &theta,
                    &mut work,
                    &mut ev_trial,
                )?;
                time_eval += te.elapsed().as_secs_f64();
                n_eval += 1;
                let decrease: f64 = (0..n).map(|v| g[v] * (s_trial[v] - s[v])).sum();
                if ev_trial.energy.is_finite() && ev_trial.energy <= e0 + 1e-4 * decrease + roundoff
                {
                    accepted = true;
                    break;
                }
                alpha *= 0.5;
            }
            flips += ls_flips;
            record.flips = ls_flips;
            iterations += 1;
            if !accepted {
                log.push(record);
                return Err(Error::Algorithm {
                    stage: "map: projected Newton",
                    message: format!(
                        "line search failed at T = {t}, iteration {iter}, projected gradient {pg_max:.3e}"
                    ),
                });
            }
            record.step = alpha;
            log.push(record);
            std::mem::swap(&mut s, &mut s_trial);
            std::mem::swap(&mut ev, &mut ev_trial);
        }
        if !converged {
            let last = log
                .last()
                .map(|r| r.max_projected_gradient)
                .unwrap_or(f64::NAN);
            return Err(Error::Algorithm {
                stage: "map: projected Newton",
                message: format!(
                    "no convergence at T = {t} after {} iterations (projected gradient {last:.3e}, tolerance {:.1e})",
                    opts.max_iter_per_stage, opts.tol
                ),
            });
        }
        // With the boundary held (no bounds), T only enters through free
        // vertices joined to the pole; without any, the solution does not
        // depend on T and the intermediate stages are skipped.
        if !bounded && stage < n_stages.saturating_sub(1) {
            let touches = tri
                .he
                .outgoing(pole)
                .any(|h| !is_fixed(tri.he.head(h) as usize));
            if !touches {
                stage = n_stages - 1;
            }
        }
    }
    let profile = SolveProfile {
        evaluations: n_eval,
        evaluate: time_eval,
        assemble: spd.time_assemble,
        symbolic: spd.time_symbolic,
        numeric: spd.time_numeric,
        solve: spd.time_solve,
    };
    let (factorizations, symbolic_analyses) = (spd.n_numeric, spd.n_symbolic);
    let newton = if factorizations > 0 {
        Some((spd, fvar))
    } else {
        None
    };
    Ok(Solution {
        newton,
        s,
        t,
        tri,
        eval: ev,
        iterations,
        flips,
        factorizations,
        symbolic_analyses,
        profile,
    })
}
