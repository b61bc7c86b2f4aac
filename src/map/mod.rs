//! The spherical conformal mapper: exact discrete uniformization of a closed
//! genus-0 surface to a convex polyhedron inscribed in the unit sphere.
//!
//! In: a [`TriMesh`] that is closed, connected, genus 0, manifold, with
//! finite coordinates and no zero-length edge. Out: a [`SphereMap`] with one
//! point on the unit sphere per input vertex (input order), the pole vertex
//! at `(0, 0, 1)`, the faces of the final triangulation (the convex hull of
//! the points) and a [`MapReport`]. What stays true: the convex hull of the
//! output points is discretely conformally equivalent to the input (same
//! Penner coordinates after Ptolemy flips, up to vertex scaling); it exists
//! and is unique up to Moebius transformations. Every result passes the
//! checks of [`verify`] or the call returns an error.
//!
//! Pipeline (one file per piece): [`intrinsic`] (Penner coordinates, Ptolemy
//! flips, Delaunay), [`horocycle`] (bounds from the pole), [`energy`] and
//! [`solver`] (convex energy, projected Newton), [`layout`] (planar disk,
//! stereographic projection), [`verify`]. Papers: Bobenko, Pinkall,
//! Springborn, "Discrete conformal maps and ideal hyperbolic polyhedra",
//! Geom. Topol. 19 (2015) 2155-2215; Springborn, "Ideal hyperbolic polyhedra
//! and discrete uniformization", Discrete Comput. Geom. 64 (2020) 63-108;
//! Gillespie, Springborn, Crane, "Discrete conformal equivalence of
//! polyhedral surfaces", ACM Trans. Graph. 40(4) (2021) 103; Springborn,
//! Schröder, Pinkall, "Conformal equivalence of triangle meshes", ACM Trans.
//! Graph. 27(3) (2008) 77; Penner, "The decorated Teichmüller space of
//! punctured surfaces", Comm. Math. Phys. 113 (1987); Bertsekas, "Projected
//! Newton methods for optimization problems with simple constraints", SIAM
//! J. Control Optim. 20(2) (1982).
//!
//! Two paths. The *fast path* (uniformization.md section 10) guesses that
//! the disk boundary is the pole's neighbourhood in the input's intrinsic
//! Delaunay triangulation, holds those vertices on the horocycle through
//! their edges to the pole and flattens the rest; the result is kept only if
//! it passes every check of [`verify`] (the convex inscribed realisation is
//! unique up to Moebius, so a verified result is the answer). Otherwise the
//! *full method* runs: horocyclic distances ([`horocycle`]) and the
//! bounds-constrained projected Newton method ([`solver`]). The report says
//! which path gave the result.
//!
//! Pole rule of [`PoleChoice::Auto`] (documented, deterministic): among the
//! candidate vertices (all, or those given with [`PoleChoice::Among`], e.g.
//! vertices added by repair), take those whose degree is closest to the
//! median degree of the candidates; among them the one whose surrounding
//! triangles have the largest smallest angle; ties go to the lowest index.
//! A regular, well-shaped one-ring keeps the disk boundary well conditioned.

pub mod energy;
pub mod horocycle;
pub mod intrinsic;
pub mod layout;
pub mod milnor;
pub mod solver;
pub mod sparse;
pub mod verify;

use crate::error::{Error, Result};
use crate::mesh::halfedge::Halfedges;
use crate::mesh::topology::face_components;
use crate::mesh::{cross, dot, norm, sub, TriMesh};
use intrinsic::{FlipWork, Intrinsic, Scaling};
use serde::{Deserialize, Serialize};
use solver::{IterationRecord, SolverOptions};

use std::time::Instant;
use verify::{Verification, VerifyTolerances};

/// Which vertex goes to the north pole.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub enum PoleChoice {
    /// The documented rule over all vertices (see the module documentation).
    Auto,
    /// This vertex.
    Vertex(u32),
    /// The documented rule restricted to these vertices (e.g. vertices added
    /// by repair).
    Among(Vec<u32>),
}

/// Options of [`map_to_sphere`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MapOptions {
    /// The pole.
    pub pole: PoleChoice,
    /// Solver settings.
    pub solver: SolverOptions,
    /// Verification tolerances.
    pub verify: VerifyTolerances,
    /// Try the fast path first (see the module documentation).
    pub fast_path: bool,
}

impl Default for MapOptions {
    fn default() -> Self {
        MapOptions {
            pole: PoleChoice::Auto,
            solver: SolverOptions::default(),
            verify: VerifyTolerances::default(),
            fast_path: true,
        }
    }
}

/// Wall time per phase in seconds.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct PhaseTimes {
    pub checks: f64,
    pub delaunay: f64,
    /// The fast path in all (solve, layout, verify), when tried.
    pub fast_path: f64,
    pub horocycles: f64,
    pub solve: f64,
    pub layout: f64,
    pub verify: f64,
    pub metrics: f64,
    pub total: f64,
}

/// Percentiles of a per-face quantity.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Percentiles {
    pub p1: f64,
    pub p5: f64,
    pub p50: f64,
    pub p95: f64,
    pub p99: f64,
    pub max: f64,
    pub min: f64,
}

impl Percentiles {
    /// Percentiles of `v` (nearest rank; `v` is sorted in place; NaN last).
    pub fn of(v: &mut [f64]) -> Self {
        if v.is_empty() {
            return Percentiles::default();
        }
        v.sort_by(|a, b| a.total_cmp(b));
        let q = |p: f64| v[((p * (v.len() - 1) as f64).round() as usize).min(v.len() - 1)];
        Percentiles {
            p1: q(0.01),
            p5: q(0.05),
            p50: q(0.5),
            p95: q(0.95),
            p99: q(0.99),
            max: v[v.len() - 1],
            min: v[0],
        }
    }
}

/// The JSON report of one mapping.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct MapReport {
    /// `"ok"` or `"failed"`.
    pub status: String,
    /// `"fast"` (guessed boundary, verified) or `"full"` (distances and
    /// bounds-constrained minimisation).
    pub path: String,
    /// Why the fast path was not taken, if it was tried.
    pub fast_path_rejected: Option<String>,
    /// The error of a failed mapping.
    pub error: Option<String>,
    pub vertices: usize,
    pub faces: usize,
    pub pole: u32,
    pub pole_rule: String,
    /// Newton iterations in all stages.
    pub iterations: usize,
    /// Numeric factorisations and symbolic analyses of the Newton matrices.
    pub factorizations: usize,
    pub symbolic_analyses: usize,
    /// Flips: to the input's intrinsic Delaunay triangulation, in the
    /// distance step, in the minimisation.
    pub flips_delaunay: u64,
    pub flips_horocycles: u64,
    pub flips_solve: u64,
    /// Where the minimisation's time went.
    pub solve_profile: solver::SolveProfile,
    /// The distance step's final `M`.
    pub horocycle_m: f64,
    pub times: PhaseTimes,
    /// Number of disk boundary vertices (joined to the pole at the end).
    pub boundary_vertices: usize,
    /// Largest layout residual (unit-scale triangle equations).
    pub layout_residual: f64,
    /// Layout method: `"harmonic"` or `"least-squares"`.
    pub layout_method: String,
    /// The verification figures (residuals).
    pub verification: Verification,
    /// Per input face, the ratio of the singular values of the linear map
    /// from the input triangle to its image triangle (1 = conformal).
    pub angle_distortion: Percentiles,
    /// Per input face, `ln((A_sphere / total) / (A_input / total))`.
    pub log_area_ratio: Percentiles,
    /// Input faces whose image on the sphere is inverted: the chord
    /// triangle's normal points into the sphere (for images smaller than a
    /// hemisphere, i.e. all but the coarsest meshes).
    pub inverted_faces: usize,
    /// The Newton iteration log.
    pub iteration_log: Vec<IterationRecord>,
}

/// A mapped surface.
#[derive(Debug, Clone, PartialEq)]
pub struct SphereMap {
    /// One point on the unit sphere per input vertex, input order.
    pub points: Vec<[f64; 3]>,
    /// The pole vertex (at `(0, 0, 1)`).
    pub pole: u32,
    /// Faces of the final triangulation: the convex hull of `points`,
    /// counter-clockwise seen from outside.
    pub hull_faces: Vec<[u32; 3]>,
    /// The report.
    pub report: MapReport,
}

fn not_ready(what: String) -> Error {
    Error::NotReady(format!(
        "{what}; the mapper needs a closed, connected, genus-0 manifold surface (run `horosphere inspect` to see the defects and `horosphere repair` to fix them)"
    ))
}

/// Check the input and build its intrinsic triangulation.
pub fn check_input(mesh: &TriMesh) -> Result<Intrinsic> {
    mesh.validate().map_err(|e| not_ready(e.to_string()))?;
    let (_, n_comp) = face_components(mesh);
    if n_comp != 1 {
        return Err(not_ready(format!(
            "the surface has {n_comp} connected components"
        )));
    }
    let he =
        Halfedges::from_faces(mesh.n_vertices(), &mesh.faces).map_err(|e| not_ready(strip(e)))?;
    let chi = he.euler_characteristic();
    if chi != 2 {
        let genus = (2 - chi) / 2;
        return Err(not_ready(format!(
            "the surface has Euler characteristic {chi} (genus {genus}), expected 2 (genus 0)"
        )));
    }
    Intrinsic::from_mesh(&mesh.positions, &mesh.faces).map_err(|e| not_ready(strip(e)))
}

fn strip(e: Error) -> String {
    match e {
        Error::Invalid(m) => m,
        other => other.to_string(),
    }
}

/// Choose the pole by `choice` (see the module documentation for `Auto`).
pub fn choose_pole(mesh: &TriMesh, he: &Halfedges, choice: &PoleChoice) -> Result<(u32, String)> {
    let n = mesh.n_vertices() as u32;
    let candidates: Vec<u32> = match choice {
        PoleChoice::Vertex(v) => {
            if *v >= n {
                return Err(Error::Invalid(format!(
                    "pole vertex {v} is not below the vertex count {n}"
                )));
            }
            return Ok((*v, "given".into()));
        }
        PoleChoice::Auto => (0..n).collect(),
        PoleChoice::Among(list) => {
            if let Some(v) = list.iter().find(|&&v| v >= n) {
                return Err(Error::Invalid(format!(
                    "pole candidate {v} is not below the vertex count {n}"
                )));
            }
            list.clone()
        }
    };
    if candidates.is_empty() {
        return Err(Error::Invalid("no pole candidates given".into()));
    }
    let mut degrees: Vec<usize> = candidates.iter().map(|&v| he.degree(v)).collect();
    let deg_of: Vec<usize> = degrees.clone();
    degrees.sort_unstable();
    let median = degrees[degrees.len() / 2];
    let best_dev = deg_of
        .iter()
        .map(|&d| d.abs_diff(median))
        .min()
        .unwrap_or(0);
    // Smallest angle of the input triangles around each vertex.
    let mut min_angle = vec![f64::INFINITY; n as usize];
    for t in &mesh.faces {
        let p = t.map(|v| mesh.positions[v as usize]);
        for k in 0..3 {
            let (a, b, c) = (p[k], p[(k + 1) % 3], p[(k + 2) % 3]);
            let (u, w) = (sub(b, a), sub(c, a));
            let ang = norm(cross(u, w)).atan2(dot(u, w));
            for &v in t {
                let m = &mut min_angle[v as usize];
                *m = m.min(ang);
            }
        }
    }
    let mut best: Option<(f64, u32)> = None;
    for (i, &v) in candidates.iter().enumerate() {
        if deg_of[i].abs_diff(median) != best_dev {
            continue;
        }
        let q = min_angle[v as usize];
        match best {
            Some((bq, bv)) if bq > q || (bq == q && bv < v) => {}
            _ => best = Some((q, v)),
        }
    }
    let (q, v) = best.ok_or_else(|| Error::Invalid("no pole candidate".into()))?;
    Ok((
        v,
        format!(
            "auto: degree closest to the median {median}, then largest smallest angle ({:.1} deg), then lowest index",
            q.to_degrees()
        ),
    ))
}

/// A failed mapping: the error and the report so far (with the iteration
/// log), for diagnostics. No points.
#[derive(Debug)]
pub struct MapFailure {
    pub error: Error,
    pub report: MapReport,
}

/// Map a closed genus-0 surface conformally to the unit sphere.
pub fn map_to_sphere(mesh: &TriMesh, opts: &MapOptions) -> Result<SphereMap> {
    map_to_sphere_diagnosed(mesh, opts).map_err(|f| f.error)
}

/// [`map_to_sphere`], keeping the partial report of a failure.
pub fn map_to_sphere_diagnosed(
    mesh: &TriMesh,
    opts: &MapOptions,
) -> std::result::Result<SphereMap, Box<MapFailure>> {
    let mut report = MapReport {
        status: "failed".into(),
        vertices: mesh.n_vertices(),
        faces: mesh.n_faces(),
        ..MapReport::default()
    };
    match run(mesh, opts, &mut report) {
        Ok((points, pole, hull_faces)) => {
            report.status = "ok".into();
            Ok(SphereMap {
                points,
                pole,
                hull_faces,
                report,
            })
        }
        Err(error) => {
            report.error = Some(error.to_string());
            Err(Box::new(MapFailure { error, report }))
        }
    }
}

type Mapped = (Vec<[f64; 3]>, u32, Vec<[u32; 3]>);
type Solved = (
    solver::Solution,
    layout::Layout,
    Vec<[f64; 3]>,
    Verification,
);

fn lay_out(
    sol: &solver::Solution,
    d: &[f64],
    pole: u32,
) -> Result<(layout::Layout, Vec<[f64; 3]>)> {
    let u: Vec<f64> = sol.s.iter().zip(d).map(|(s, d)| s - d).collect();
    let sc = Scaling {
        u: &u,
        pole,
        t: sol.t,
    };
    let lay = layout::layout_disk(&sol.tri, &sc)?;
    let points = layout::project(&lay.z, pole);
    Ok((lay, points))
}

/// The harmonic layout with the last Newton factor (see
/// [`layout::layout_disk_harmonic`]); errors send the caller to [`lay_out`].
fn lay_out_fast(
    sol: &mut solver::Solution,
    d: &[f64],
    pole: u32,
) -> Result<(layout::Layout, Vec<[f64; 3]>)> {
    let u: Vec<f64> = sol.s.iter().zip(d).map(|(s, d)| s - d).collect();
    let sc = Scaling {
        u: &u,
        pole,
        t: sol.t,
    };
    let Some((factor, fvar)) = sol.newton.as_mut() else {
        return Err(Error::Algorithm {
            stage: "map: harmonic layout",
            message: "no Newton factor".into(),
        });
    };
    let lay = layout::layout_disk_harmonic(
        &sol.tri,
        &sc,
        &sol.eval.angle,
        &sol.eval.cot,
        factor,
        fvar,
        1e-9,
    )?;
    let points = layout::project(&lay.z, pole);
    Ok((lay, points))
}

fn verify_solution(
    sol: &solver::Solution,
    d: &[f64],
    pole: u32,
    lay: &layout::Layout,
    points: &[[f64; 3]],
    opts: &MapOptions,
) -> Result<Verification> {
    let u: Vec<f64> = sol.s.iter().zip(d).map(|(s, d)| s - d).collect();
    let sc = Scaling {
        u: &u,
        pole,
        t: sol.t,
    };
    verify::verify(
        &sol.tri,
        &sc,
        &sol.eval.angle,
        &sol.eval.sums,
        &lay.z,
        points,
        &opts.verify,
    )
}

/// The fast path with a certificate: guess that the disk boundary is the
/// pole's neighbours in the input's Delaunay triangulation, hold them on the
/// horocycle through their edges to the pole (`u_i = -lam_pi`), flatten the
/// rest, lay out and verify. The convex inscribed realisation is unique up
/// to Moebius (Springborn 2020), so a result that passes [`verify`] is the
/// answer; otherwise the caller falls back to the full method.
fn fast_path(
    input: &Intrinsic,
    pole: u32,
    opts: &MapOptions,
    log: &mut Vec<IterationRecord>,
    times: &mut PhaseTimes,
) -> Result<Solved> {
    let n = input.he.n_vertices();
    let mut fixed = vec![false; n];
    let mut d = vec![0.0; n];
    let mut dmin = vec![f64::INFINITY; n];
    for h in input.he.outgoing(pole) {
        let i = input.he.head(h) as usize;
        if i as u32 != pole {
            fixed[i] = true;
            dmin[i] = dmin[i].min(input.lam[input.he.edge[h as usize] as usize]);
        }
    }
    for v in 0..n {
        if fixed[v] {
            d[v] = dmin[v];
        }
    }
    let t = Instant::now();
    let sol = solver::solve_fixed_boundary(input, pole, &d, &fixed, &opts.solver, log)?;
    times.solve = t.elapsed().as_secs_f64();
    // KKT of the guess: the held vertices must want to stay on their bounds
    // (disk angle below pi), checked by the verification's boundary test.
    let t = Instant::now();
    let mut sol = sol;
    let (lay, points) = lay_out_fast(&mut sol, &d, pole).or_else(|_| lay_out(&sol, &d, pole))?;
    times.layout = t.elapsed().as_secs_f64();
    let t = Instant::now();
    let ver = verify_solution(&sol, &d, pole, &lay, &points, opts).map_err(|e| {
        let held = fixed.iter().filter(|&&f| f).count();
        let joined = sol
            .tri
            .he
            .outgoing(pole)
            .filter(|&h| fixed[sol.tri.he.head(h) as usize])
            .count();
        Error::Algorithm {
            stage: "map: fast path",
            message: format!(
                "{e} [{held} vertices held on the boundary, {joined} still joined to the pole]"
            ),
        }
    })?;
    times.verify = t.elapsed().as_secs_f64();
    Ok((sol, lay, points, ver))
}

fn run(mesh: &TriMesh, opts: &MapOptions, report: &mut MapReport) -> Result<Mapped> {
    let t0 = Instant::now();
    let mut input = check_input(mesh)?;
    let (pole, pole_rule) = choose_pole(mesh, &input.he, &opts.pole)?;
    report.pole = pole;
    report.pole_rule = pole_rule;
    report.times.checks = t0.elapsed().as_secs_f64();

    let t = Instant::now();
    let zero = vec![0.0; mesh.n_vertices()];
    let mut work = FlipWork::default();
    report.flips_delaunay = input.flip_to_delaunay(&Scaling::plain(&zero), &mut work)?;
    report.times.delaunay = t.elapsed().as_secs_f64();

    let mut fast = None;
    if opts.fast_path {
        let t = Instant::now();
        let mut log = Vec::new();
        match fast_path(&input, pole, opts, &mut log, &mut report.times) {
            Ok(done) => fast = Some((done, log)),
            Err(e) => report.fast_path_rejected = Some(e.to_string()),
        }
        report.times.fast_path = t.elapsed().as_secs_f64();
    }
    let (sol, lay, points, ver) = match fast {
        Some(((sol, lay, points, ver), log)) => {
            report.path = "fast".into();
            report.iteration_log = log;
            (sol, lay, points, ver)
        }
        None => {
            report.path = "full".into();
            let t = Instant::now();
            let horo = horocycle::horocyclic_distances(&input, pole, &mut work)?;
            report.flips_horocycles = horo.flips;
            report.horocycle_m = horo.m;
            report.times.horocycles = t.elapsed().as_secs_f64();

            let t = Instant::now();
            let solved = solver::solve(
                &input,
                pole,
                &horo.d,
                &opts.solver,
                &mut report.iteration_log,
            );
            report.times.solve = t.elapsed().as_secs_f64();
            let sol = solved?;
            let t = Instant::now();
            let (lay, points) = lay_out(&sol, &horo.d, pole)?;
            report.times.layout = t.elapsed().as_secs_f64();
            let t = Instant::now();
            let ver = verify_solution(&sol, &horo.d, pole, &lay, &points, opts)?;
            report.times.verify = t.elapsed().as_secs_f64();
            (sol, lay, points, ver)
        }
    };
    report.iterations = sol.iterations;
    report.factorizations = sol.factorizations;
    report.symbolic_analyses = sol.symbolic_analyses;
    report.flips_solve = sol.flips;
    report.solve_profile = sol.profile.clone();
    report.layout_residual = lay.residual;
    report.layout_method = lay.method.clone();
    report.boundary_vertices = ver.boundary_vertices;
    report.verification = ver;

    let t = Instant::now();
    let (angle_distortion, log_area_ratio, inverted_faces) = face_metrics(mesh, &points);
    report.angle_distortion = angle_distortion;
    report.log_area_ratio = log_area_ratio;
    report.inverted_faces = inverted_faces;
    report.times.metrics = t.elapsed().as_secs_f64();
    report.times.total = t0.elapsed().as_secs_f64();

    let he = &sol.tri.he;
    let hull_faces: Vec<[u32; 3]> = (0..he.n_faces())
        .map(|f| [he.tail[3 * f], he.tail[3 * f + 1], he.tail[3 * f + 2]])
        .collect();
    Ok((points, pole, hull_faces))
}

/// Per input face: quasi-conformal ratio and log area ratio (percentiles),
/// and the number of inverted images.
pub fn face_metrics(mesh: &TriMesh, points: &[[f64; 3]]) -> (Percentiles, Percentiles, usize) {
    let nf = mesh.n_faces();
    let mut ratio = Vec::with_capacity(nf);
    let mut area_in = Vec::with_capacity(nf);
    let mut area_out = Vec::with_capacity(nf);
    let mut inverted = 0;
    for t in &mesh.faces {
        let p = t.map(|v| mesh.positions[v as usize]);
        let q = t.map(|v| points[v as usize]);
        let (e1, e2) = (sub(p[1], p[0]), sub(p[2], p[0]));
        let (f1, f2) = (sub(q[1], q[0]), sub(q[2], q[0]));
        let nin = cross(e1, e2);
        let nout = cross(f1, f2);
        // Orientation on the sphere: the image normal against the position.
        let centre = [
            q[0][0] + q[1][0] + q[2][0],
            q[0][1] + q[1][1] + q[2][1],
            q[0][2] + q[1][2] + q[2][2],
        ];
        if dot(nout, centre) <= 0.0 {
            inverted += 1;
        }
        let (ain, aout) = (0.5 * norm(nin), 0.5 * norm(nout));
        area_in.push(ain);
        area_out.push(aout);
        // Linear map from the input triangle to the image triangle in local
        // orthonormal frames: J = Q P^-1.
        let frame = |a: [f64; 3], b: [f64; 3]| -> [[f64; 2]; 2] {
            let la = norm(a);
            let x = [a[0] / la, a[1] / la, a[2] / la];
            let bx = dot(b, x);
            let by = norm(sub(b, [x[0] * bx, x[1] * bx, x[2] * bx]));
            [[la, bx], [0.0, by]] // columns: a = (la, 0), b = (bx, by)
        };
        let pm = frame(e1, e2);
        let qm = frame(f1, f2);
        let det_p = pm[0][0] * pm[1][1] - pm[0][1] * pm[1][0];
        let inv = [
            [pm[1][1] / det_p, -pm[0][1] / det_p],
            [-pm[1][0] / det_p, pm[0][0] / det_p],
        ];
        let j = [
            [
                qm[0][0] * inv[0][0] + qm[0][1] * inv[1][0],
                qm[0][0] * inv[0][1] + qm[0][1] * inv[1][1],
            ],
            [
                qm[1][0] * inv[0][0] + qm[1][1] * inv[1][0],
                qm[1][0] * inv[0][1] + qm[1][1] * inv[1][1],
            ],
        ];
        let fro = j[0][0].powi(2) + j[0][1].powi(2) + j[1][0].powi(2) + j[1][1].powi(2);
        let det = (j[0][0] * j[1][1] - j[0][1] * j[1][0]).abs();
        let disc = (fro * fro - 4.0 * det * det).max(0.0).sqrt();
        let s1 = (0.5 * (fro + disc)).sqrt();
        let s2 = det / s1;
        ratio.push(if s2 > 0.0 { s1 / s2 } else { f64::INFINITY });
    }
    let tin: f64 = area_in.iter().sum();
    let tout: f64 = area_out.iter().sum();
    let mut lar: Vec<f64> = area_in
        .iter()
        .zip(&area_out)
        .map(|(a, b)| ((b / tout) / (a / tin)).ln())
        .collect();
    (
        Percentiles::of(&mut ratio),
        Percentiles::of(&mut lar),
        inverted,
    )
}
