//! `horosphere resample`: per-vertex maps of one subject from its sphere to
//! a common target sphere, optionally smoothed on the native surface first.
//!
//! In: `--sphere` (the subject's sphere, same vertex order as its maps),
//! one or more `--data` maps, `--target` (`icosphere:K` or a sphere file),
//! optional `--mask`, `--fwhm` with `--surface`. Out: one GIFTI per map
//! (values and a missing-vertex mask, see `horosphere::resample::files`),
//! written atomically into the `-o` folder with the `space-` entity set, or
//! to `-o FILE.gii` when there is a single map, each with a JSON
//! provenance sidecar (same name, `.json`); a summary (text, or JSON
//! with `--json`) on stdout. The library does the work
//! (`horosphere::resample::resample_maps` and `smooth::smooth_maps`).

use clap::Args;
use horosphere::resample::files::{
    output_name, read_map, read_mask, resampled_gifti, sidecar_path,
};
use horosphere::resample::locate::Locator;
use horosphere::resample::smooth::{smooth_maps_with_progress, SmoothOptions, DEFAULT_STEPS};
use horosphere::resample::target::{check_sphere, Target, DEFAULT_SPHERE_TOLERANCE};
use horosphere::resample::{resample_located, InputMap, MapValues, Method};
use horosphere::{Error, Result};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Flags of `resample`.
#[derive(Debug, Args)]
pub struct ResampleArgs {
    /// The subject's sphere (GIFTI, OBJ, PLY or OFF), centred at the origin.
    #[arg(long, value_name = "SPHERE")]
    pub sphere: PathBuf,
    /// A per-vertex map (.shape.gii, .func.gii or .label.gii); repeat for more.
    #[arg(long = "data", value_name = "MAP", required = true)]
    pub data: Vec<PathBuf>,
    /// Target sphere: icosphere:K (K = 0..8) or a sphere mesh file.
    #[arg(long, value_name = "TARGET", default_value = "icosphere:6")]
    pub target: String,
    /// Output folder, or a .gii file when there is one map.
    #[arg(short = 'o', long = "output", value_name = "OUT")]
    pub output: PathBuf,
    /// linear, nearest or majority (default: linear for continuous maps,
    /// majority for label maps).
    #[arg(long)]
    pub method: Option<String>,
    /// Smooth continuous maps on the native surface first with a heat
    /// kernel of this FWHM (mm); needs --surface.
    #[arg(long, value_name = "MM")]
    pub fwhm: Option<f64>,
    /// The native surface for --fwhm (same vertices as the sphere).
    #[arg(long, value_name = "NATIVE")]
    pub surface: Option<PathBuf>,
    /// Implicit steps of the heat-kernel smoothing.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_STEPS)]
    pub steps: usize,
    /// Smooth the resampled continuous maps on the target sphere with a heat
    /// kernel of this FWHM (mm); missing target vertices are cut out.
    #[arg(long, value_name = "MM")]
    pub target_fwhm: Option<f64>,
    /// A surface with the sphere's vertices whose triangles are its convex
    /// hull (e.g. from the mapper); default: the hull is computed.
    #[arg(long, value_name = "HULL")]
    pub hull: Option<PathBuf>,
    /// Mask file over the subject's vertices: non-zero = masked.
    #[arg(long, value_name = "MASK")]
    pub mask: Option<PathBuf>,
    /// With --mask: mask the vertices whose label key is one of these.
    #[arg(long, value_name = "KEY", value_delimiter = ',')]
    pub mask_keys: Vec<i32>,
    /// Relative tolerance of the sphere checks (centre offset and radius
    /// deviation over radius).
    #[arg(long, value_name = "TOL", default_value_t = DEFAULT_SPHERE_TOLERANCE)]
    pub sphere_tolerance: f64,
    /// Label of the BIDS space- entity of the outputs (default from the target).
    #[arg(long, value_name = "LABEL")]
    pub space: Option<String>,
    /// Print the summary as JSON.
    #[arg(long)]
    pub json: bool,
}

/// A progress callback drawing an indicatif bar on stderr when it is a
/// terminal (hidden otherwise, so logs stay quiet).
fn bar(what: &'static str) -> impl FnMut(usize, usize) {
    let pb = indicatif::ProgressBar::new(0);
    pb.set_message(what);
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("{msg} [{bar:30}] {pos}/{len} implicit steps")
    {
        pb.set_style(style);
    }
    move |done, total| {
        pb.set_length(total as u64);
        pb.set_position(done as u64);
        if done >= total {
            pb.finish_and_clear();
        }
    }
}

fn is_gii(p: &Path) -> bool {
    p.to_string_lossy().to_ascii_lowercase().ends_with(".gii")
}

/// Run `resample`.
pub fn run(args: &ResampleArgs) -> Result<ExitCode> {
    // Flags to options.
    let method = args.method.as_deref().map(Method::parse).transpose()?;
    let target = Target::parse(&args.target)?;
    let space = args.space.clone().unwrap_or_else(|| target.space_label());
    if space.is_empty() || !space.chars().all(|c| c.is_ascii_alphanumeric()) {
        return Err(Error::Invalid(format!(
            "--space '{space}'; expected letters and digits only (a BIDS label)"
        )));
    }
    let single_file = is_gii(&args.output);
    if single_file && args.data.len() != 1 {
        return Err(Error::Invalid(format!(
            "-o {} is a file but there are {} maps; expected a folder for several maps",
            args.output.display(),
            args.data.len()
        )));
    }
    let smoothing = match (args.fwhm, &args.surface) {
        (Some(f), Some(s)) => Some((
            SmoothOptions {
                fwhm_mm: f,
                steps: args.steps,
            },
            s.clone(),
        )),
        (None, None) => None,
        (Some(_), None) => {
            return Err(Error::Invalid(
                "--fwhm needs --surface (the native surface to smooth on)".into(),
            ))
        }
        (None, Some(_)) => return Err(Error::Invalid("--surface is used only with --fwhm".into())),
    };
    if !args.mask_keys.is_empty() && args.mask.is_none() {
        return Err(Error::Invalid("--mask-keys needs --mask".into()));
    }

    // Inputs.
    let sphere = horosphere::io::read_mesh(&args.sphere)?;
    let n = sphere.n_vertices();
    let mut maps: Vec<InputMap> = Vec::with_capacity(args.data.len());
    for p in &args.data {
        let m = read_map(p)?;
        if m.values.len() != n {
            return Err(Error::bad_file(
                p,
                "DataArray 0",
                format!(
                    "{} values; expected one per vertex of the sphere {} ({n})",
                    m.values.len(),
                    args.sphere.display()
                ),
            ));
        }
        maps.push(m);
    }
    let mask = match &args.mask {
        Some(p) => {
            let keys = (!args.mask_keys.is_empty()).then_some(args.mask_keys.as_slice());
            Some(read_mask(p, keys, n)?)
        }
        None => None,
    };
    let target_mesh = target.mesh(args.sphere_tolerance)?;

    // Smoothing on the native surface.
    let mut smooth_report = None;
    if let Some((opts, surface)) = &smoothing {
        let native = horosphere::io::read_mesh(surface)?;
        if native.n_vertices() != n {
            return Err(Error::bad_file(
                surface,
                "vertices",
                format!(
                    "{} vertices; expected {n} like the sphere",
                    native.n_vertices()
                ),
            ));
        }
        let mut cont: Vec<Vec<f64>> = Vec::new();
        for (m, p) in maps.iter().zip(&args.data) {
            match &m.values {
                MapValues::Continuous(v) => cont.push(v.clone()),
                MapValues::Labels { .. } => {
                    return Err(Error::bad_file(
                        p,
                        "file",
                        "holds labels; --fwhm smooths continuous maps only (resample labels in a separate run)",
                    ))
                }
            }
        }
        let (out, rep) =
            smooth_maps_with_progress(&native, &cont, mask.as_deref(), opts, &mut bar("smoothing"))
                .map_err(|e| e.in_file(surface, "surface"))?;
        for (m, v) in maps.iter_mut().zip(out) {
            m.values = MapValues::Continuous(v);
        }
        smooth_report = Some(rep);
    }

    // Resampling.
    check_sphere(&target_mesh.positions, args.sphere_tolerance)
        .map_err(|e| e.in_file(Path::new(&args.target), "vertices"))?;
    let hull_faces = match &args.hull {
        Some(p) => {
            let h = horosphere::io::read_mesh(p)?;
            if h.n_vertices() != n {
                return Err(Error::bad_file(
                    p,
                    "vertices",
                    format!("{} vertices; expected {n} like the sphere", h.n_vertices()),
                ));
            }
            Some((h.faces, p))
        }
        None => None,
    };
    let locator = match &hull_faces {
        Some((faces, p)) => Locator::new(&sphere.positions, Some(faces), args.sphere_tolerance)
            .map_err(|e| e.in_file(p, "triangles"))?,
        None => Locator::new(&sphere.positions, None, args.sphere_tolerance)
            .map_err(|e| e.in_file(&args.sphere, "vertices"))?,
    };
    let location = locator.locate(&target_mesh.positions)?;
    let (mut out, report) = resample_located(&locator, &location, &maps, mask.as_deref(), method)?;

    // Optional smoothing on the target sphere (missing vertices are NaN
    // and so cut out of their own map).
    let mut target_smooth_report = None;
    if let Some(f) = args.target_fwhm {
        let idx: Vec<usize> = (0..out.len())
            .filter(|&k| matches!(out[k].values, MapValues::Continuous(_)))
            .collect();
        let cont: Vec<Vec<f64>> = idx
            .iter()
            .filter_map(|&k| match &out[k].values {
                MapValues::Continuous(v) => Some(v.clone()),
                MapValues::Labels { .. } => None,
            })
            .collect();
        let opts = SmoothOptions {
            fwhm_mm: f,
            steps: args.steps,
        };
        let (sm, rep) = smooth_maps_with_progress(
            &target_mesh,
            &cont,
            None,
            &opts,
            &mut bar("smoothing on the target"),
        )?;
        for (k, v) in idx.into_iter().zip(sm) {
            if let Some(m) = out.get_mut(k) {
                m.values = MapValues::Continuous(v);
            }
        }
        target_smooth_report = Some(rep);
    }

    // Outputs.
    let mut written = Vec::with_capacity(out.len());
    for ((m, r), p) in out.iter().zip(&report.maps).zip(&args.data) {
        let dest = if single_file {
            args.output.clone()
        } else {
            args.output.join(output_name(p, &space))
        };
        let g = resampled_gifti(m, r.method, &args.target, &r.name);
        horosphere::io::gifti::write(&dest, &g, &Default::default())?;
        // Provenance sidecar: inputs, options and counts; no time stamps,
        // so that the same run gives the same bytes.
        let side = serde_json::json!({
            "Software": format!("horosphere {}", env!("CARGO_PKG_VERSION")),
            "Source": p.display().to_string(),
            "Sphere": args.sphere.display().to_string(),
            "Target": args.target,
            "Space": space,
            "Method": r.method.name(),
            "Mask": args.mask.as_ref().map(|m| m.display().to_string()),
            "MaskKeys": args.mask_keys,
            "SmoothingFWHMmm": args.fwhm,
            "SmoothingSurface": args.surface.as_ref().map(|m| m.display().to_string()),
            "TargetSmoothingFWHMmm": args.target_fwhm,
            "SmoothingSteps": (args.fwhm.is_some() || args.target_fwhm.is_some()).then_some(args.steps),
            "SphereTolerance": args.sphere_tolerance,
            "Report": r,
            "SubjectSphere": {
                "Vertices": report.n_subject_vertices,
                "HullTriangles": report.n_hull_triangles,
                "DuplicateVertices": report.n_duplicate_vertices,
                "InteriorVertices": report.n_interior_vertices,
            },
        });
        let text = serde_json::to_string_pretty(&side)
            .map_err(|e| Error::Invalid(format!("cannot serialise the sidecar: {e}")))?;
        horosphere::io::atomic::write_bytes(&sidecar_path(&dest), format!("{text}\n").as_bytes())?;
        written.push(dest);
    }
    if args.json {
        let v = serde_json::json!({
            "target": args.target,
            "resample": report,
            "smoothing": smooth_report,
            "target_smoothing": target_smooth_report,
            "outputs": written.iter().map(|p| p.display().to_string()).collect::<Vec<_>>(),
        });
        super::print_json("report", &v)?;
    } else {
        println!(
            "subject sphere: {} vertices, {} hull triangles, {} duplicate and {} interior vertices not used",
            report.n_subject_vertices,
            report.n_hull_triangles,
            report.n_duplicate_vertices,
            report.n_interior_vertices
        );
        println!(
            "target {}: {} vertices",
            args.target, report.n_target_vertices
        );
        if let Some(s) = &smooth_report {
            println!(
                "smoothed: FWHM {} mm (t = {:.4} mm^2, {} implicit steps)",
                s.fwhm_mm, s.time, s.steps
            );
        }
        if let Some(s) = &target_smooth_report {
            println!(
                "smoothed on the target: FWHM {} mm ({} implicit steps)",
                s.fwhm_mm, s.steps
            );
        }
        for (r, d) in report.maps.iter().zip(&written) {
            println!(
                "{}: {}, {} masked input vertices ({} NaN), {} missing target vertices -> {}",
                r.name,
                r.method.name(),
                r.n_masked_input,
                r.n_nan_input,
                r.n_masked_output,
                d.display()
            );
        }
    }
    Ok(ExitCode::SUCCESS)
}
