//! Folding-pattern registration on the sphere: a smooth, invertible warp of
//! a subject sphere that lines up its feature maps (sulcal depth,
//! curvature, ...) with a template's.
//!
//! In: a subject sphere (any vertex count, centred at the origin, e.g. the
//! output of `align`), its per-vertex feature maps in the template's order,
//! a [`Template`] (feature maps on the vertices of an icosphere of level
//! `L`, [`template`]) and [`RegisterOptions`]. Out: a [`Registration`]: the
//! warped subject sphere (same vertex order, faces and radius), the
//! stationary velocity field `v` of the warp, the subject point matched to
//! every template vertex, the subject's features on the template vertices
//! after the warp, and a serde [`RegisterReport`] (feature correlations
//! before and after, Jacobian range, iterations per stage, seconds).
//!
//! What stays true:
//! - the warp template -> subject is `phi = exp(v)` and the warped subject
//!   sphere is `exp(-v)` applied to the subject's points; `v` is tangent,
//!   piecewise linear on a coarse icosphere ([`field`]), so `phi` is a
//!   diffeomorphism; the integration rule keeps every step injective, and
//!   the Jacobian (signed area ratio per template triangle) is reported and
//!   must show no folded triangle; where the subject's own (coarse)
//!   triangles could not follow the warp, it is softened until none turns
//!   over ([`embed`]);
//! - features are z-scored per subject (area-weighted on the template
//!   grid); a feature map of the wrong length, with a non-finite value, or
//!   constant is refused with an error naming it;
//! - a subject registered to a template made from itself alone is left in
//!   place (the residual is zero, so no update is ever made);
//! - results do not depend on the thread count (every parallel loop
//!   computes each element on its own; sums run in a fixed order).
//!
//! Method: log-domain diffeomorphic demons (Vercauteren, Pennec, Perchant,
//! Ayache, "Diffeomorphic demons: efficient non-parametric image
//! registration", NeuroImage 45 (2009) S61-S72; the stationary-velocity
//! form of Vercauteren, Pennec, Perchant, Ayache, "Symmetric log-domain
//! diffeomorphic registration: a demons-based approach", MICCAI 2008, LNCS
//! 5241, 754-761), carried to the sphere: with `W = S o phi` the subject's
//! features pulled back to the template vertices and `r = T - W`, the
//! update at each template vertex is
//!
//! ```text
//! u = sum_f r_f g_f / (sum_f |g_f|^2 + sum_f r_f^2 / sigma^2),
//!     g_f = (grad T_f + grad W_f) / 2   (efficient second-order form),
//! ```
//!
//! whose length is at most `sigma / 2`; `u` is averaged onto the control
//! grid (barycentric weights), smoothed (fluid-like regularisation), added
//! to `v` (first term of the Baker-Campbell-Hausdorff series, as in the
//! log-domain demons) and `v` is smoothed again (diffusion-like
//! regularisation: Jacobi sweeps of the graph Laplacian). Coarse to fine:
//! each [`Stage`] sets the control level and a heat-kernel smoothing of
//! both feature sets ([`crate::resample::smooth`], on the template
//! icosphere); a stage stops after its iterations, or when the mean squared
//! residual falls by less than the tolerance (the last step is undone when
//! it rises). Surface-based registration with spherical warps driven by
//! folding features follows Fischl, Sereno, Tootell, Dale, "High-resolution
//! intersubject averaging and a coordinate system for the cortical
//! surface", Human Brain Mapping 8 (1999) 272-284, and Yeo, Sabuncu,
//! Vercauteren, Ayache, Fischl, Golland, "Spherical demons: fast
//! diffeomorphic landmark-free surface registration", IEEE TMI 29 (2010)
//! 650-668; the design and names here are ours.

pub mod embed;
pub mod field;
pub mod grid;
pub mod template;

use crate::error::{Error, Result};
use crate::mesh::{dot, scale, TriMesh, Vec3};
use crate::resample::locate::Locator;
use crate::resample::smooth::{smooth_maps, SmoothOptions};
use crate::resample::target::directions;
use embed::{embed_subject, EmbedReport};
use field::{jacobian, smooth_vectors, JacobianSummary, VelocityField};
use grid::{n_vertices, tangent, IcoGrid};
use rayon::prelude::*;
use serde::Serialize;
pub use template::Template;

/// One coarse-to-fine stage.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Stage {
    /// Icosphere level of the velocity field.
    pub control_level: u32,
    /// FWHM of the feature smoothing, degrees of arc (0: none).
    pub fwhm_deg: f64,
    /// Most demons iterations.
    pub iterations: usize,
}

/// Options of [`register`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RegisterOptions {
    /// Stages, coarse to fine (empty: [`default_stages`] of the template).
    pub stages: Vec<Stage>,
    /// Longest update per iteration as a fraction of the control spacing
    /// (`sigma` of the update bound is twice this).
    pub step: f64,
    /// Jacobi sweeps on each update (fluid-like regularisation).
    pub update_sweeps: usize,
    /// Jacobi sweeps on the velocity field after each update
    /// (diffusion-like regularisation).
    pub field_sweeps: usize,
    /// A stage stops when the mean squared residual falls by less than this
    /// fraction in one iteration.
    pub tolerance: f64,
    /// Relative tolerance of the subject sphere check.
    pub sphere_tolerance: f64,
    /// Implicit steps of the feature smoothing.
    pub smooth_steps: usize,
}

impl Default for RegisterOptions {
    fn default() -> Self {
        RegisterOptions {
            stages: Vec::new(),
            step: 0.25,
            update_sweeps: 2,
            field_sweeps: 1,
            tolerance: 1e-4,
            sphere_tolerance: crate::resample::target::DEFAULT_SPHERE_TOLERANCE,
            smooth_steps: 16,
        }
    }
}

impl RegisterOptions {
    /// The stages a registration to a template of level `level` runs:
    /// [`RegisterOptions::stages`], or [`default_stages`] when empty.
    pub fn stages_for(&self, level: u32) -> Vec<Stage> {
        if self.stages.is_empty() {
            default_stages(level)
        } else {
            self.stages.clone()
        }
    }
}

/// Default stages for a template of level `level` (at least 2): control
/// levels up to `min(level - 1, 5)`, three stages with feature smoothing of
/// 16, 8 and 4 degrees FWHM.
pub fn default_stages(level: u32) -> Vec<Stage> {
    let top = level.saturating_sub(1).clamp(1, 5);
    let levels = [
        top.saturating_sub(2).max(1),
        top.saturating_sub(1).max(1),
        top,
    ];
    let fwhm = [16.0, 8.0, 4.0];
    let iters = [40, 40, 30];
    (0..3)
        .map(|i| Stage {
            control_level: levels[i],
            fwhm_deg: fwhm[i],
            iterations: iters[i],
        })
        .collect()
}

/// Correlation of one feature with the template, before and after.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FeatureCorrelation {
    pub name: String,
    /// Pearson correlation on the template vertices (area-weighted), before
    /// the warp (the subject as given).
    pub before: f64,
    /// The same after the warp.
    pub after: f64,
}

/// What one stage did.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StageReport {
    pub control_level: u32,
    pub fwhm_deg: f64,
    /// Iterations kept.
    pub iterations: usize,
    /// Runge-Kutta steps of the flow at the end of the stage.
    pub flow_steps: usize,
    /// Mean squared residual (smoothed, z-scored features) at the start.
    pub residual_start: f64,
    /// The same at the end.
    pub residual_end: f64,
}

/// The report of one registration (serde).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RegisterReport {
    pub subject_vertices: usize,
    pub template_level: u32,
    pub features: Vec<FeatureCorrelation>,
    /// Signed area ratios of the template triangles under `phi`.
    pub jacobian: JacobianSummary,
    /// Subject sphere triangles turned over by the warp (0: the warp is
    /// softened where they would be, see `embed`).
    pub subject_folded: usize,
    /// How the warp was softened to keep the subject mesh embedded.
    pub embed: EmbedReport,
    /// Mean and largest displacement of the subject's vertices, degrees.
    pub mean_displacement_deg: f64,
    pub max_displacement_deg: f64,
    pub stages: Vec<StageReport>,
    pub seconds: f64,
}

/// Result of [`register`].
#[derive(Debug, Clone)]
pub struct Registration {
    /// The subject sphere after the warp: same faces, vertex order and
    /// radius; vertex `i` moved to `exp(-v)` of its direction.
    pub warped: TriMesh,
    /// The velocity field (finest stage's control level).
    pub velocity: VelocityField,
    /// `phi(x)` for every template vertex `x` (unit directions on the
    /// subject sphere).
    pub correspondence: Vec<Vec3>,
    /// The subject's z-scored features at `phi(x)`, per feature, on the
    /// template vertices (unsmoothed).
    pub warped_features: Vec<Vec<f64>>,
    pub report: RegisterReport,
}

/// Check the feature maps of a subject with `n` vertices: the count against
/// the template's, each map's length, finiteness and spread.
pub fn check_features(features: &[Vec<f64>], n: usize, names: &[String]) -> Result<()> {
    if features.len() != names.len() {
        return Err(Error::Invalid(format!(
            "{} feature maps given; the template has {} ({}); expected one map per template feature, in its order",
            features.len(),
            names.len(),
            names.join(", ")
        )));
    }
    for (k, (f, name)) in features.iter().zip(names).enumerate() {
        if f.len() != n {
            return Err(Error::Invalid(format!(
                "feature map {} ({name}) has {} values; expected one per vertex of the subject sphere ({n})",
                k + 1,
                f.len()
            )));
        }
        if let Some(i) = f.iter().position(|x| !x.is_finite()) {
            return Err(Error::Invalid(format!(
                "feature map {} ({name}): value at vertex {i} is {}; expected finite values",
                k + 1,
                f[i]
            )));
        }
        let (lo, hi) = f.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |a, &x| {
            (a.0.min(x), a.1.max(x))
        });
        if hi - lo <= 1e-12 * (1.0 + lo.abs().max(hi.abs())) {
            return Err(Error::Invalid(format!(
                "feature map {} ({name}) is constant ({lo}); expected a map that varies over the sphere",
                k + 1
            )));
        }
    }
    Ok(())
}

/// Area-weighted z-score of `f` with vertex weights `w`; `None` when the
/// spread is zero.
pub fn zscore(f: &[f64], w: &[f64]) -> Option<Vec<f64>> {
    let sw: f64 = w.iter().sum();
    let mean = f.iter().zip(w).map(|(x, a)| x * a).sum::<f64>() / sw;
    let var = f
        .iter()
        .zip(w)
        .map(|(x, a)| a * (x - mean) * (x - mean))
        .sum::<f64>()
        / sw;
    let sd = var.sqrt();
    if sd.is_nan() || sd <= 1e-12 * (1.0 + mean.abs()) {
        return None;
    }
    Some(f.iter().map(|x| (x - mean) / sd).collect())
}

/// Area-weighted Pearson correlation.
pub fn correlation(a: &[f64], b: &[f64], w: &[f64]) -> f64 {
    let sw: f64 = w.iter().sum();
    let ma = a.iter().zip(w).map(|(x, s)| x * s).sum::<f64>() / sw;
    let mb = b.iter().zip(w).map(|(x, s)| x * s).sum::<f64>() / sw;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for i in 0..a.len() {
        let (da, db) = (a[i] - ma, b[i] - mb);
        sab += w[i] * da * db;
        saa += w[i] * da * da;
        sbb += w[i] * db * db;
    }
    if saa > 0.0 && sbb > 0.0 {
        sab / (saa * sbb).sqrt()
    } else {
        0.0
    }
}

/// A subject's features sampled on the template grid (z-scored) and its
/// sphere's directions and radius.
#[derive(Debug, Clone)]
pub struct SampledSubject {
    /// Unit directions of the subject's vertices.
    pub directions: Vec<Vec3>,
    /// Radius of the subject sphere.
    pub radius: f64,
    /// Z-scored features on the vertices of the template grid, in the
    /// subject's own frame (no warp).
    pub on_grid: Vec<Vec<f64>>,
}

/// Check a subject and sample its features on the finest level of `grid`.
pub fn sample_subject(
    sphere: &TriMesh,
    features: &[Vec<f64>],
    names: &[String],
    grid: &IcoGrid,
    sphere_tolerance: f64,
) -> Result<SampledSubject> {
    sphere.validate()?;
    check_features(features, sphere.n_vertices(), names)?;
    let locator = Locator::new(&sphere.positions, None, sphere_tolerance)?;
    let fit = crate::resample::target::check_sphere(&sphere.positions, sphere_tolerance)?;
    let loc = locator.locate(&grid.points)?;
    let areas = grid.vertex_areas(grid.finest());
    let mut on_grid = Vec::with_capacity(features.len());
    for (k, f) in features.iter().enumerate() {
        let s: Vec<f64> = loc
            .points
            .iter()
            .map(|l| {
                (0..3)
                    .map(|j| l.weights[j] * f[l.vertices[j] as usize])
                    .sum()
            })
            .collect();
        let z = zscore(&s, &areas).ok_or_else(|| {
            Error::Invalid(format!(
                "feature map {} ({}) is constant on the template grid; expected a map that varies over the sphere",
                k + 1,
                names[k]
            ))
        })?;
        on_grid.push(z);
    }
    Ok(SampledSubject {
        directions: directions(&sphere.positions),
        radius: fit.radius,
        on_grid,
    })
}

/// Where a registration is: reported to the observer of
/// [`register_observed`] after every demons iteration (for progress bars).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Progress {
    /// Stage, from 1.
    pub stage: usize,
    pub stages: usize,
    /// Iterations done in this stage, and the most it may take.
    pub iteration: usize,
    pub iterations: usize,
}

/// Register a subject sphere with its feature maps to `template`.
pub fn register(
    sphere: &TriMesh,
    features: &[Vec<f64>],
    template: &Template,
    opts: &RegisterOptions,
) -> Result<Registration> {
    register_observed(sphere, features, template, opts, &|_| {})
}

/// [`register`], calling `observe` after every demons iteration.
pub fn register_observed(
    sphere: &TriMesh,
    features: &[Vec<f64>],
    template: &Template,
    opts: &RegisterOptions,
    observe: &dyn Fn(Progress),
) -> Result<Registration> {
    template.check()?;
    let grid = IcoGrid::new(template.level);
    let subject = sample_subject(
        sphere,
        features,
        &template.names,
        &grid,
        opts.sphere_tolerance,
    )?;
    register_sampled(sphere, &subject, template, &grid, opts, observe)
}

fn check_options(opts: &RegisterOptions, stages: &[Stage], level: u32) -> Result<()> {
    if !(opts.step.is_finite() && opts.step > 0.0 && opts.step <= 1.0) {
        return Err(Error::Invalid(format!(
            "registration step {}; expected a fraction of the control spacing in (0, 1]",
            opts.step
        )));
    }
    if !(opts.tolerance.is_finite() && opts.tolerance >= 0.0) {
        return Err(Error::Invalid(format!(
            "registration tolerance {}; expected a number >= 0",
            opts.tolerance
        )));
    }
    if opts.smooth_steps == 0 {
        return Err(Error::Invalid(
            "0 smoothing steps; expected at least 1".into(),
        ));
    }
    let mut prev = 0;
    for (i, s) in stages.iter().enumerate() {
        if s.control_level > level || s.control_level < prev {
            return Err(Error::Invalid(format!(
                "stage {}: control level {}; expected levels that never decrease, at most the template level {level}",
                i + 1,
                s.control_level
            )));
        }
        if !(s.fwhm_deg.is_finite() && s.fwhm_deg >= 0.0) {
            return Err(Error::Invalid(format!(
                "stage {}: smoothing FWHM {} degrees; expected a number >= 0",
                i + 1,
                s.fwhm_deg
            )));
        }
        prev = s.control_level;
    }
    Ok(())
}

/// Smooth maps on the template grid (FWHM in degrees of arc) and z-score
/// them again.
fn smooth_on_grid(
    mesh: &TriMesh,
    maps: &[Vec<f64>],
    fwhm_deg: f64,
    steps: usize,
    areas: &[f64],
) -> Result<Vec<Vec<f64>>> {
    if fwhm_deg <= 0.0 {
        return Ok(maps.to_vec());
    }
    let so = SmoothOptions {
        fwhm_mm: fwhm_deg.to_radians(),
        steps,
    };
    let (out, _) = smooth_maps(mesh, maps, None, &so)?;
    Ok(out
        .into_iter()
        .zip(maps)
        .map(|(s, orig)| zscore(&s, areas).unwrap_or_else(|| orig.clone()))
        .collect())
}

/// Mean squared residual (area-weighted, summed over features).
fn residual(t: &[Vec<f64>], w: &[Vec<f64>], areas: &[f64]) -> f64 {
    let sw: f64 = areas.iter().sum();
    let mut e = 0.0;
    for (tf, wf) in t.iter().zip(w) {
        for i in 0..areas.len() {
            let r = tf[i] - wf[i];
            e += areas[i] * r * r;
        }
    }
    e / sw
}

/// `maps` (on the finest level of `grid`) at the points `phi`: each point
/// is located once for all maps.
fn pull_back(grid: &IcoGrid, maps: &[Vec<f64>], phi: &[Vec3]) -> Vec<Vec<f64>> {
    let level = grid.finest();
    let hits: Vec<grid::Hit> = phi
        .par_iter()
        .with_min_len(512)
        .map(|&x| grid.locate(x, level))
        .collect();
    maps.iter()
        .map(|m| {
            hits.iter()
                .map(|h| {
                    (0..3)
                        .map(|j| h.weights[j] * m[h.vertices[j] as usize])
                        .sum()
                })
                .collect()
        })
        .collect()
}

/// [`register`] for a subject already sampled on the template grid
/// ([`sample_subject`]).
pub fn register_sampled(
    sphere: &TriMesh,
    subject: &SampledSubject,
    template: &Template,
    grid: &IcoGrid,
    opts: &RegisterOptions,
    observe: &dyn Fn(Progress),
) -> Result<Registration> {
    let start = std::time::Instant::now();
    let level = template.level;
    if grid.finest() != level {
        return Err(Error::Invalid(format!(
            "grid of level {}; expected the template level {level}",
            grid.finest()
        )));
    }
    let stages = opts.stages_for(level);
    check_options(opts, &stages, level)?;
    let mesh = TriMesh {
        positions: grid.points.clone(),
        faces: grid.faces[level as usize].clone(),
    };
    let areas = grid.vertex_areas(level);
    let x = &grid.points;
    let nt = x.len();
    let mut v = VelocityField::zero(grid, stages.first().map_or(1, |s| s.control_level));
    let mut stage_reports = Vec::with_capacity(stages.len());
    for (si, st) in stages.iter().enumerate() {
        let progress = |iteration| {
            observe(Progress {
                stage: si + 1,
                stages: stages.len(),
                iteration,
                iterations: st.iterations,
            })
        };
        progress(0);
        v = v.refine(grid, st.control_level);
        let c = st.control_level;
        let spacing = grid.spacing(c);
        let sigma = 2.0 * opts.step * spacing;
        // Smoothed, z-scored features of both sides.
        let t_s = smooth_on_grid(
            &mesh,
            &template.features,
            st.fwhm_deg,
            opts.smooth_steps,
            &areas,
        )?;
        let s_s = smooth_on_grid(
            &mesh,
            &subject.on_grid,
            st.fwhm_deg,
            opts.smooth_steps,
            &areas,
        )?;
        let grad_t: Vec<Vec<Vec3>> = t_s.iter().map(|f| grid.gradient(f, level)).collect();
        // Control-grid location of every template vertex (fixed).
        let hits: Vec<grid::Hit> = x.par_iter().map(|&p| grid.locate(p, c)).collect();
        let nc = n_vertices(c);
        let mut wsum = vec![0.0; nc];
        for h in &hits {
            for j in 0..3 {
                wsum[h.vertices[j] as usize] += h.weights[j];
            }
        }
        let mut n_steps = v.steps(grid);
        let mut phi = v.flow(grid, x, 1.0, n_steps);
        let mut w = pull_back(grid, &s_s, &phi);
        let mut e = residual(&t_s, &w, &areas);
        let e0 = e;
        let mut kept = 0;
        for it in 0..st.iterations {
            if e == 0.0 {
                break;
            }
            if it > 0 {
                progress(it);
            }
            let grad_w: Vec<Vec<Vec3>> = w.iter().map(|f| grid.gradient(f, level)).collect();
            let u: Vec<Vec3> = (0..nt)
                .into_par_iter()
                .with_min_len(512)
                .map(|i| {
                    let mut num = [0.0; 3];
                    let (mut gg, mut rr) = (0.0, 0.0);
                    for f in 0..t_s.len() {
                        let r = t_s[f][i] - w[f][i];
                        let g = scale(
                            [
                                grad_t[f][i][0] + grad_w[f][i][0],
                                grad_t[f][i][1] + grad_w[f][i][1],
                                grad_t[f][i][2] + grad_w[f][i][2],
                            ],
                            0.5,
                        );
                        for d in 0..3 {
                            num[d] += r * g[d];
                        }
                        gg += dot(g, g);
                        rr += r * r;
                    }
                    let den = gg + rr / (sigma * sigma);
                    if den > 0.0 {
                        scale(num, 1.0 / den)
                    } else {
                        [0.0; 3]
                    }
                })
                .collect();
            // Average the update onto the control grid (fixed order).
            let mut uc = vec![[0.0; 3]; nc];
            for (h, ui) in hits.iter().zip(&u) {
                for j in 0..3 {
                    let k = h.vertices[j] as usize;
                    for d in 0..3 {
                        uc[k][d] += h.weights[j] * ui[d];
                    }
                }
            }
            let cp = grid.level_points(c);
            for k in 0..nc {
                if wsum[k] > 0.0 {
                    uc[k] = tangent(scale(uc[k], 1.0 / wsum[k]), cp[k]);
                }
            }
            smooth_vectors(grid, c, &mut uc, opts.update_sweeps);
            let mut v_new = v.clone();
            for (a, b) in v_new.vectors.iter_mut().zip(&uc) {
                for d in 0..3 {
                    a[d] += b[d];
                }
            }
            v_new.smooth(grid, opts.field_sweeps);
            let steps_new = v_new.steps(grid);
            let phi_new = v_new.flow(grid, x, 1.0, steps_new);
            let w_new = pull_back(grid, &s_s, &phi_new);
            let e_new = residual(&t_s, &w_new, &areas);
            if e_new.is_nan() || e_new >= e {
                break;
            }
            let gain = (e - e_new) / e;
            v = v_new;
            n_steps = steps_new;
            phi = phi_new;
            w = w_new;
            e = e_new;
            kept += 1;
            if gain < opts.tolerance {
                break;
            }
        }
        let _ = &phi;
        stage_reports.push(StageReport {
            control_level: c,
            fwhm_deg: st.fwhm_deg,
            iterations: kept,
            flow_steps: n_steps,
            residual_start: e0,
            residual_end: e,
        });
    }
    // Soften the warp where the subject's own triangles cannot follow it
    // (module `embed`), then the final warp, correspondence and features.
    let (moved, embed) = embed_subject(grid, &mut v, &subject.directions, &sphere.faces);
    let n_steps = v.steps(grid);
    let phi = v.flow(grid, x, 1.0, n_steps);
    let warped_features = pull_back(grid, &subject.on_grid, &phi);
    let features = template
        .names
        .iter()
        .enumerate()
        .map(|(f, name)| FeatureCorrelation {
            name: name.clone(),
            before: correlation(&template.features[f], &subject.on_grid[f], &areas),
            after: correlation(&template.features[f], &warped_features[f], &areas),
        })
        .collect();
    let jac = jacobian(&grid.faces[level as usize], x, &phi);
    let subj_jac = jacobian(&sphere.faces, &subject.directions, &moved);
    let disp: Vec<f64> = subject
        .directions
        .iter()
        .zip(&moved)
        .map(|(a, b)| grid::angle(*a, *b).to_degrees())
        .collect();
    let warped = TriMesh {
        positions: moved.iter().map(|p| scale(*p, subject.radius)).collect(),
        faces: sphere.faces.clone(),
    };
    let report = RegisterReport {
        subject_vertices: sphere.n_vertices(),
        template_level: level,
        features,
        jacobian: jac,
        subject_folded: subj_jac.folded,
        embed,
        mean_displacement_deg: disp.iter().sum::<f64>() / disp.len().max(1) as f64,
        max_displacement_deg: disp.iter().copied().fold(0.0, f64::max),
        stages: stage_reports,
        seconds: start.elapsed().as_secs_f64(),
    };
    Ok(Registration {
        warped,
        velocity: v,
        correspondence: phi,
        warped_features,
        report,
    })
}
