//! `horosphere align` and `horosphere template`: Moebius normalisation of
//! mapped spheres (library: [`horosphere::align`]; file formats and the
//! report layout: docs/align.md).
//!
//! * `horosphere align SPHERE --landmarks L.csv --template T.toml -o ALIGNED
//!   [--fit rotation|mobius] [--center area|uniform|none] [--surface NATIVE]
//!   [--report ALIGN.json] [--warn-degrees X] [--json]`: centre the sphere,
//!   fit its landmarks to the template, write the aligned sphere (same
//!   vertex order and faces, same radius) and optionally a JSON report.
//!   Exit status 0 (also when the residual warning is raised; it is in the
//!   report and on stderr), 1 on error.
//! * `horosphere template --cohort COHORT.csv -o T.toml [--fit ...]
//!   [--center ...] [--tolerance-degrees X] [--max-iterations N]`: estimate
//!   a template from a cohort table (`subject,sphere,landmarks[,surface]`,
//!   paths relative to the table). A subject whose files cannot be read is
//!   reported on stderr and left out; the template is written from the
//!   others and the exit status is 3. Exit 1 when no template is written.

use clap::{Args, ValueEnum};
use horosphere::align::centring::CentringOptions;
use horosphere::align::landmarks::{read_landmarks, resolve_landmarks, FitKind, Landmark};
use horosphere::align::template::{read_cohort, TemplateSubject};
use horosphere::align::{
    align, aligned_positions, build_template, read_template, unit_directions, write_template,
    AlignOptions, TemplateOptions,
};
use horosphere::io::atomic::write_atomic;
use horosphere::mesh::Vec3;
use horosphere::{Error, Result, TriMesh};
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use super::subjects::{exit_code, left_out_note, load_subjects};

/// The fit to the template.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum FitArg {
    /// Rotation only (weighted Kabsch), after centring.
    Rotation,
    /// All six degrees of freedom of a Moebius map.
    Mobius,
}

/// Centring before the fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum CenterArg {
    /// Weighted by the native surface's vertex areas (needs --surface).
    Area,
    /// Every vertex weighs the same.
    Uniform,
    /// No centring.
    None,
}

impl CenterArg {
    fn label(self) -> &'static str {
        match self {
            CenterArg::Area => "area",
            CenterArg::Uniform => "uniform",
            CenterArg::None => "none",
        }
    }
}

impl FitArg {
    fn kind(self) -> FitKind {
        match self {
            FitArg::Rotation => FitKind::Rotation,
            FitArg::Mobius => FitKind::Mobius,
        }
    }
}

/// Moebius-normalise a mapped sphere: centre it and fit its landmarks to a template.
#[derive(Args, Debug)]
pub struct AlignArgs {
    /// Mapped sphere (centred at the origin, any radius).
    pub sphere: PathBuf,
    /// Landmark CSV: `name,vertex` (zero-based) or `name,x,y,z` (mm on the native surface).
    #[arg(long, value_name = "CSV")]
    pub landmarks: PathBuf,
    /// Landmark template (TOML, `[[landmark]]` tables with name, latitude, longitude, weight).
    #[arg(long, value_name = "TOML")]
    pub template: PathBuf,
    /// Aligned sphere to write (same vertex order, faces and radius).
    #[arg(short = 'o', long = "output", value_name = "FILE")]
    pub output: PathBuf,
    /// Fit to the template.
    #[arg(long, value_enum, default_value_t = FitArg::Mobius)]
    pub fit: FitArg,
    /// Centring before the fit.
    #[arg(long, value_enum, default_value_t = CenterArg::Area)]
    pub center: CenterArg,
    /// Native surface the sphere was mapped from (same vertices): area weights and landmark snapping.
    #[arg(long, value_name = "FILE")]
    pub surface: Option<PathBuf>,
    /// Write a JSON report (residuals, RMS, the transformation) here (layout: docs/align.md).
    #[arg(long, value_name = "JSON")]
    pub report: Option<PathBuf>,
    /// Raise the warning flag when a landmark residual exceeds this many degrees.
    #[arg(long, value_name = "DEGREES", default_value_t = 5.0)]
    pub warn_degrees: f64,
    /// Print the report as JSON on stdout instead of a summary line.
    #[arg(long)]
    pub json: bool,
}

/// Estimate a landmark template from a cohort of mapped spheres.
#[derive(Args, Debug)]
pub struct TemplateArgs {
    /// Cohort table (CSV): `subject,sphere,landmarks[,surface]`, paths relative to the table.
    #[arg(long, value_name = "CSV")]
    pub cohort: PathBuf,
    /// Template to write (TOML).
    #[arg(short = 'o', long = "out", value_name = "TOML")]
    pub out: PathBuf,
    /// Fit of each subject to the template.
    #[arg(long, value_enum, default_value_t = FitArg::Mobius)]
    pub fit: FitArg,
    /// Centring before the fit.
    #[arg(long, value_enum, default_value_t = CenterArg::Area)]
    pub center: CenterArg,
    /// Stop when no template landmark moves by more than this many degrees.
    #[arg(long, value_name = "DEGREES", default_value_t = 1e-8)]
    pub tolerance_degrees: f64,
    /// Give up after this many iterations.
    #[arg(long, value_name = "N", default_value_t = 200)]
    pub max_iterations: usize,
}

/// A subject's sphere, centring weights and landmarks, read and checked.
struct LoadedSubject {
    mesh: TriMesh,
    directions: Vec<Vec3>,
    radius: f64,
    weights: Option<Vec<f64>>,
    landmarks: Vec<Landmark>,
}

/// Read a sphere, its native surface (if given) and landmarks; `center`
/// decides whether area weights are needed.
fn load_subject(
    sphere: &Path,
    surface: Option<&Path>,
    landmarks: &Path,
    center: CenterArg,
) -> Result<LoadedSubject> {
    let mesh = horosphere::io::read_mesh(sphere)?;
    let (directions, radius) =
        unit_directions(&mesh.positions).map_err(|e| e.in_file(sphere, "vertices"))?;
    let native = match surface {
        Some(p) => {
            let nat = horosphere::io::read_mesh(p)?;
            if nat.n_vertices() != mesh.n_vertices() {
                return Err(Error::bad_file(
                    p,
                    "vertices",
                    format!(
                        "{} vertices, but the sphere {} has {}; expected the surface the sphere was mapped from",
                        nat.n_vertices(),
                        sphere.display(),
                        mesh.n_vertices()
                    ),
                ));
            }
            Some(nat)
        }
        None => None,
    };
    let weights = match center {
        CenterArg::Area => Some(
            native
                .as_ref()
                .ok_or_else(|| {
                    Error::Invalid(format!(
                        "--center area weighs the vertices of {} by the native surface's vertex areas: give the native surface (--surface NATIVE, or the `surface` column of a cohort table), or choose --center uniform or none",
                        sphere.display()
                    ))
                })?
                .vertex_areas(),
        ),
        CenterArg::Uniform | CenterArg::None => None,
    };
    let raw = read_landmarks(landmarks)?;
    let lms = resolve_landmarks(
        &raw,
        mesh.n_vertices(),
        native.as_ref().map(|n| n.positions.as_slice()),
        landmarks,
    )
    .map_err(|e| e.in_file(landmarks, "landmarks"))?;
    Ok(LoadedSubject {
        mesh,
        directions,
        radius,
        weights,
        landmarks: lms,
    })
}

fn centring_options(center: CenterArg) -> Option<CentringOptions> {
    match center {
        CenterArg::None => None,
        CenterArg::Area | CenterArg::Uniform => Some(CentringOptions::default()),
    }
}

#[derive(Serialize)]
struct ReportInputs {
    sphere: String,
    landmarks: String,
    template: String,
    surface: Option<String>,
}

#[derive(Serialize)]
struct ReportCentring {
    iterations: usize,
    centroid_norm: f64,
    rapidity: f64,
}

#[derive(Serialize)]
struct ReportLandmark {
    name: String,
    vertex: usize,
    snap_mm: Option<f64>,
    residual_degrees: f64,
    above_warning: bool,
}

#[derive(Serialize)]
struct ReportTransform {
    convention: &'static str,
    /// `[[A11, A12], [A21, A22]]`, each entry `[re, im]`.
    sl2c: [[[f64; 2]; 2]; 2],
    lorentz: [[f64; 4]; 4],
}

#[derive(Serialize)]
struct AlignReport {
    report: &'static str,
    version: &'static str,
    caution: &'static str,
    inputs: ReportInputs,
    output: String,
    fit: &'static str,
    center: &'static str,
    vertices: usize,
    radius_mm: f64,
    centring: Option<ReportCentring>,
    fit_iterations: usize,
    fit_cost: f64,
    landmarks: Vec<ReportLandmark>,
    rms_degrees: f64,
    max_degrees: f64,
    warn_degrees: f64,
    warning: bool,
    transform: ReportTransform,
}

const CAUTION: &str = "Research use only: not a medical device, not for diagnosis; results need review by a trained analyst.";

const CONVENTION: &str = "Moebius map on the unit sphere. sl2c acts on the stereographic coordinate z = (x + i y) / (1 - z3) (projection from the north pole (0,0,1)) as z -> (A11 z + A12) / (A21 z + A22), determinant 1, defined up to sign. lorentz acts on (x, y, z3, 1): the image is the spatial part divided by its length.";

/// Run `horosphere align`.
pub fn run_align(args: &AlignArgs) -> Result<ExitCode> {
    if !(args.warn_degrees.is_finite() && args.warn_degrees >= 0.0) {
        return Err(Error::Invalid(format!(
            "--warn-degrees {} is not a non-negative number of degrees",
            args.warn_degrees
        )));
    }
    let s = load_subject(
        &args.sphere,
        args.surface.as_deref(),
        &args.landmarks,
        args.center,
    )?;
    let template = read_template(&args.template)?;
    let opts = AlignOptions {
        fit: args.fit.kind(),
        centring: centring_options(args.center),
        ..AlignOptions::default()
    };
    let element = format!("landmarks (template {})", args.template.display());
    let a = align(
        &s.directions,
        s.weights.as_deref(),
        &s.landmarks,
        &template,
        &opts,
    )
    .map_err(|e| e.in_file(&args.landmarks, &element))?;
    let out = TriMesh {
        positions: aligned_positions(&a.transform, &s.directions, s.radius),
        faces: s.mesh.faces,
    };
    horosphere::io::write_mesh(&args.output, &out)?;

    let warning = a.max_degrees > args.warn_degrees;
    let sl = a.transform.to_sl2c();
    let report = AlignReport {
        report: "horosphere align",
        version: env!("CARGO_PKG_VERSION"),
        caution: CAUTION,
        inputs: ReportInputs {
            sphere: args.sphere.display().to_string(),
            landmarks: args.landmarks.display().to_string(),
            template: args.template.display().to_string(),
            surface: args.surface.as_ref().map(|p| p.display().to_string()),
        },
        output: args.output.display().to_string(),
        fit: opts.fit.as_str(),
        center: args.center.label(),
        vertices: out.n_vertices(),
        radius_mm: s.radius,
        centring: a.centring.map(|c| ReportCentring {
            iterations: c.iterations,
            centroid_norm: c.centroid_norm,
            rapidity: c.transform.rapidity(),
        }),
        fit_iterations: a.fit.iterations,
        fit_cost: a.fit.cost,
        landmarks: a
            .residuals
            .iter()
            .zip(&s.landmarks)
            .map(|(r, l)| ReportLandmark {
                name: r.name.clone(),
                vertex: r.vertex,
                snap_mm: l.snap_mm,
                residual_degrees: r.residual_degrees,
                above_warning: r.residual_degrees > args.warn_degrees,
            })
            .collect(),
        rms_degrees: a.rms_degrees,
        max_degrees: a.max_degrees,
        warn_degrees: args.warn_degrees,
        warning,
        transform: ReportTransform {
            convention: CONVENTION,
            sl2c: [
                [[sl[0][0].re, sl[0][0].im], [sl[0][1].re, sl[0][1].im]],
                [[sl[1][0].re, sl[1][0].im], [sl[1][1].re, sl[1][1].im]],
            ],
            lorentz: *a.transform.lorentz(),
        },
    };
    let text = serde_json::to_string_pretty(&report)
        .map_err(|e| Error::Invalid(format!("cannot serialise the report: {e}")))?;
    if let Some(path) = &args.report {
        write_atomic(path, |w| {
            w.write_all(text.as_bytes())
                .and_then(|_| w.write_all(b"\n"))
                .map_err(|e| Error::io(path, e))
        })?;
    }
    if args.json {
        println!("{text}");
    } else {
        println!(
            "{} -> {}: {} landmarks, RMS {:.4} deg, max {:.4} deg (fit {}, centring {})",
            args.sphere.display(),
            args.output.display(),
            a.residuals.len(),
            a.rms_degrees,
            a.max_degrees,
            opts.fit.as_str(),
            args.center.label()
        );
    }
    if warning {
        eprintln!(
            "horosphere: warning: {}: largest landmark residual {:.3} deg is above --warn-degrees {}",
            args.sphere.display(),
            a.max_degrees,
            args.warn_degrees
        );
    }
    Ok(ExitCode::SUCCESS)
}

/// Run `horosphere template`.
pub fn run_template(args: &TemplateArgs) -> Result<ExitCode> {
    if !(args.tolerance_degrees.is_finite() && args.tolerance_degrees > 0.0) {
        return Err(Error::Invalid(format!(
            "--tolerance-degrees {} is not a positive number of degrees",
            args.tolerance_degrees
        )));
    }
    let cohort = read_cohort(&args.cohort)?;
    let (loaded, failed) = load_subjects(
        &args.cohort,
        &cohort,
        |e| (e.line, e.subject.as_str()),
        |entry| {
            load_subject(
                &entry.sphere,
                entry.surface.as_deref(),
                &entry.landmarks,
                args.center,
            )
            .map(|s| (entry.subject.as_str(), s))
        },
    )?;
    let subjects: Vec<TemplateSubject> = loaded
        .iter()
        .map(|(id, s)| TemplateSubject {
            id,
            directions: &s.directions,
            weights: s.weights.as_deref(),
            landmarks: &s.landmarks,
        })
        .collect();
    let opts = TemplateOptions {
        fit: args.fit.kind(),
        centring: centring_options(args.center),
        center_label: args.center.label(),
        tolerance_degrees: args.tolerance_degrees,
        max_iterations: args.max_iterations,
        ..TemplateOptions::default()
    };
    let t = build_template(&subjects, &opts)?;
    write_template(&args.out, &t)?;
    let iterations = t.built.as_ref().map(|b| b.iterations).unwrap_or(0);
    println!(
        "{}: {} landmarks from {} subjects in {} iterations{}",
        args.out.display(),
        t.landmarks.len(),
        subjects.len(),
        iterations,
        left_out_note(failed)
    );
    Ok(exit_code(failed))
}
