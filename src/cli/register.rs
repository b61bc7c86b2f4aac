//! `horosphere register` and `horosphere register-template`: folding-pattern
//! registration of subject spheres to a feature template (library:
//! [`horosphere::register`]; layouts: docs/register.md).
//!
//! * `horosphere register SPHERE --features F.shape.gii [--features ...]
//!   --template TDIR -o WARPED.surf.gii [--report REG.json] [--json]`: warp
//!   the subject sphere so that its feature maps (in the template's feature
//!   order) line up with the template's; write the warped sphere (same
//!   vertex order, faces and radius) and optionally the JSON report.
//! * `horosphere register-template --cohort TABLE.csv -o TDIR [--level K]
//!   [--rounds N] [--tolerance X] [--report R.json] [--json]`: build a
//!   template from a table `subject,sphere,<feature>,...` (paths relative
//!   to the table). A subject whose files cannot be read is reported on
//!   stderr and left out; the template is written from the others and the
//!   exit status is 3.

use clap::Args;
use horosphere::io::atomic::write_atomic;
use horosphere::register::template::{
    build_template, read_feature, read_table, read_template, write_template, TemplateOptions,
    TemplateSubject,
};
use horosphere::register::{register_observed, RegisterOptions};
use horosphere::{Error, Result};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use super::subjects::{exit_code, left_out_note, load_subjects};

/// Options shared by both commands.
#[derive(Debug, Args)]
pub struct RegisterTuning {
    /// Longest update per iteration, as a fraction of the control spacing.
    #[arg(long, value_name = "FRACTION", default_value_t = 0.25)]
    pub step: f64,
    /// Stop a stage when the mean squared residual falls by less than this
    /// fraction in one iteration.
    #[arg(long = "stage-tolerance", value_name = "X", default_value_t = 1e-4)]
    pub stage_tolerance: f64,
    /// Relative tolerance of the sphere check (centre offset and radius
    /// deviation over radius).
    #[arg(long, value_name = "TOL", default_value_t = horosphere::resample::target::DEFAULT_SPHERE_TOLERANCE)]
    pub sphere_tolerance: f64,
}

impl RegisterTuning {
    fn options(&self) -> RegisterOptions {
        RegisterOptions {
            step: self.step,
            tolerance: self.stage_tolerance,
            sphere_tolerance: self.sphere_tolerance,
            ..RegisterOptions::default()
        }
    }
}

/// Flags of `register`.
#[derive(Debug, Args)]
pub struct RegisterArgs {
    /// The subject sphere (GIFTI, OBJ, PLY or OFF), centred at the origin.
    #[arg(value_name = "SPHERE")]
    pub sphere: PathBuf,
    /// A per-vertex feature map of the subject (.shape.gii or .func.gii);
    /// repeat in the template's feature order.
    #[arg(long = "features", value_name = "MAP", required = true)]
    pub features: Vec<PathBuf>,
    /// The template folder (from `register-template`).
    #[arg(long, value_name = "TDIR")]
    pub template: PathBuf,
    /// The warped sphere.
    #[arg(short = 'o', long = "output", value_name = "WARPED")]
    pub output: PathBuf,
    /// Write the JSON report here.
    #[arg(long, value_name = "REG.json")]
    pub report: Option<PathBuf>,
    /// Print the report as JSON on stdout.
    #[arg(long)]
    pub json: bool,
    #[command(flatten)]
    pub tuning: RegisterTuning,
}

/// Flags of `register-template`.
#[derive(Debug, Args)]
pub struct RegisterTemplateArgs {
    /// Cohort table: `subject,sphere,<feature>,...`.
    #[arg(long, value_name = "TABLE.csv")]
    pub cohort: PathBuf,
    /// Output folder of the template.
    #[arg(short = 'o', long = "output", value_name = "TDIR")]
    pub output: PathBuf,
    /// Icosphere level of the template (2 to 7).
    #[arg(long, value_name = "K", default_value_t = 5)]
    pub level: u32,
    /// Most register-all rounds.
    #[arg(long, value_name = "N", default_value_t = 3)]
    pub rounds: usize,
    /// Stop when the RMS change of the template maps (z units) is below this.
    #[arg(long, value_name = "X", default_value_t = 0.05)]
    pub tolerance: f64,
    /// Write the JSON report here.
    #[arg(long, value_name = "R.json")]
    pub report: Option<PathBuf>,
    /// Print the report as JSON on stdout.
    #[arg(long)]
    pub json: bool,
    #[command(flatten)]
    pub tuning: RegisterTuning,
}

fn write_json(path: &Path, text: &str) -> Result<()> {
    write_atomic(path, |w| {
        w.write_all(text.as_bytes())
            .and_then(|_| w.write_all(b"\n"))
            .map_err(|e| Error::io(path, e))
    })
}

fn load(sphere: &Path, features: &[PathBuf]) -> Result<TemplateSubject> {
    let mesh = horosphere::io::read_mesh(sphere)?;
    let maps = features
        .iter()
        .map(|p| read_feature(p))
        .collect::<Result<Vec<_>>>()?;
    // Name the file of a map whose length does not fit the sphere.
    for (p, m) in features.iter().zip(&maps) {
        if m.len() != mesh.n_vertices() {
            return Err(Error::bad_file(
                p,
                "DataArray 0",
                format!(
                    "{} values; expected one per vertex of {} ({})",
                    m.len(),
                    sphere.display(),
                    mesh.n_vertices()
                ),
            ));
        }
    }
    // Name the file of a non-finite or constant map.
    for (p, m) in features.iter().zip(&maps) {
        let name = p.file_name().map_or_else(
            || p.display().to_string(),
            |n| n.to_string_lossy().into_owned(),
        );
        horosphere::register::check_features(std::slice::from_ref(m), m.len(), &[name])
            .map_err(|e| e.in_file(p, "DataArray 0"))?;
    }
    Ok(TemplateSubject {
        sphere: mesh,
        features: maps,
    })
}

/// Run `horosphere register`.
pub fn run_register(args: &RegisterArgs) -> Result<ExitCode> {
    if horosphere::io::MeshFormat::from_extension(&args.output).is_none() {
        return Err(Error::Invalid(format!(
            "{}: cannot tell the mesh format from the file name; expected an extension .surf.gii, .gii, .obj, .ply or .off",
            args.output.display()
        )));
    }
    let template = read_template(&args.template)?;
    let subject = load(&args.sphere, &args.features)?;
    // A bar over the stages' iterations (stderr; hidden when not a
    // terminal). Stages may stop early, so the bar jumps at stage ends.
    let opts = args.tuning.options();
    let stages = opts.stages_for(template.level);
    let total: usize = stages.iter().map(|s| s.iterations).sum();
    let bar = indicatif::ProgressBar::new(total as u64);
    bar.set_style(
        indicatif::ProgressStyle::with_template("{msg} [{bar:30}] {pos}/{len} iterations")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    let done_before: Vec<usize> = stages
        .iter()
        .scan(0, |acc, s| {
            let here = *acc;
            *acc += s.iterations;
            Some(here)
        })
        .collect();
    let observe = |p: horosphere::register::Progress| {
        bar.set_message(format!("register: stage {}/{}", p.stage, p.stages));
        bar.set_position((done_before[p.stage - 1] + p.iteration) as u64);
    };
    let reg = register_observed(
        &subject.sphere,
        &subject.features,
        &template,
        &opts,
        &observe,
    )
    .map_err(|e| e.in_file(&args.sphere, "registration"));
    bar.finish_and_clear();
    let reg = reg?;
    let e = &reg.report.embed;
    if e.identity_fallback {
        eprintln!(
            "horosphere: warning: {}: the warp could not keep the subject mesh embedded even when halved {} times; the sphere is written unwarped",
            args.sphere.display(),
            e.global_halvings
        );
    } else if e.offenders_first > 0 {
        eprintln!(
            "horosphere: note: {}: the warp was softened around {} subject triangles it would have turned over or squashed ({} local rounds, {} global halvings; docs/register.md)",
            args.sphere.display(),
            e.offenders_first,
            e.local_rounds,
            e.global_halvings
        );
    }
    horosphere::io::write_mesh(&args.output, &reg.warped)?;
    let text = serde_json::to_string_pretty(&reg.report)
        .map_err(|e| Error::Invalid(format!("cannot serialise the report: {e}")))?;
    if let Some(path) = &args.report {
        write_json(path, &text)?;
    }
    if args.json {
        println!("{text}");
    } else {
        let r = &reg.report;
        let corr: Vec<String> = r
            .features
            .iter()
            .map(|f| format!("{} {:.3} -> {:.3}", f.name, f.before, f.after))
            .collect();
        println!(
            "{} -> {}: correlation {}; Jacobian {:.3}..{:.3}, {} folded; mean move {:.2} deg; {:.1} s",
            args.sphere.display(),
            args.output.display(),
            corr.join(", "),
            r.jacobian.min,
            r.jacobian.max,
            r.jacobian.folded + r.subject_folded,
            r.mean_displacement_deg,
            r.seconds
        );
    }
    Ok(ExitCode::SUCCESS)
}

/// Run `horosphere register-template`.
pub fn run_template(args: &RegisterTemplateArgs) -> Result<ExitCode> {
    let (names, rows) = read_table(&args.cohort)?;
    let (subjects, failed) = load_subjects(
        &args.cohort,
        &rows,
        |r| (r.line, r.subject.as_str()),
        |row| load(&row.sphere, &row.features),
    )?;
    let opts = TemplateOptions {
        level: args.level,
        rounds: args.rounds,
        tolerance: args.tolerance,
        register: args.tuning.options(),
    };
    let pb = indicatif::ProgressBar::new(0);
    pb.set_message("registering");
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("{msg} [{bar:30}] {pos}/{len} registrations")
    {
        pb.set_style(style);
    }
    let mut progress = |done: usize, total: usize| {
        pb.set_length(total as u64);
        pb.set_position(done as u64);
    };
    let (template, report) = build_template(&subjects, &names, &opts, &mut progress)?;
    pb.finish_and_clear();
    write_template(&args.output, &template)?;
    let text = serde_json::to_string_pretty(&report)
        .map_err(|e| Error::Invalid(format!("cannot serialise the report: {e}")))?;
    if let Some(path) = &args.report {
        write_json(path, &text)?;
    }
    if args.json {
        println!("{text}");
    } else {
        let last = report.rounds.last();
        println!(
            "{}: template of level {} ({} features) from {} subjects in {} rounds{}{}",
            args.output.display(),
            template.level,
            names.len(),
            subjects.len(),
            report.rounds.len(),
            last.map_or(String::new(), |r| format!(
                ", last change {:.4}, mean correlation {:.3}",
                r.change, r.mean_correlation
            )),
            left_out_note(failed)
        );
    }
    Ok(exit_code(failed))
}
