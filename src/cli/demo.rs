//! `horosphere demo --out DIR`: write a synthetic study (folded surfaces,
//! thickness, depth and region maps, landmarks, participants, ground truth)
//! laid out as BIDS derivatives. The work is
//! [`horosphere::synth::write::write_cohort`]; this file parses the flags.

use clap::Args;
use horosphere::synth::cohort::CohortParams;
use horosphere::synth::write::write_cohort;
use horosphere::{Error, Result};
use std::path::PathBuf;
use std::process::ExitCode;

/// Flags of `demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Output folder (created; must be empty unless --overwrite).
    #[arg(long)]
    pub out: PathBuf,
    /// Number of subjects.
    #[arg(long, default_value_t = 14)]
    pub subjects: usize,
    /// Vertices per hemisphere (2,000 to 200,000).
    #[arg(long, default_value_t = 150_000)]
    pub vertices: usize,
    /// Random seed; the same seed and options give byte-identical files.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Thickness change of the planted group effect, mm (patients, left
    /// hemisphere). Default: the generator's (-0.3).
    #[arg(long, allow_hyphen_values = true)]
    pub effect_mm: Option<f64>,
    /// Angular radius of the planted effect's cap, degrees. Default: the
    /// generator's (18).
    #[arg(long)]
    pub effect_radius_deg: Option<f64>,
    /// Leave out the planted defects.
    #[arg(long)]
    pub no_defects: bool,
    /// Write into a non-empty folder, replacing files of the same names.
    #[arg(long)]
    pub overwrite: bool,
    /// Print a JSON summary on stdout.
    #[arg(long)]
    pub json: bool,
}

/// Run `demo`.
pub fn run(args: &DemoArgs) -> Result<ExitCode> {
    if !(2_000..=200_000).contains(&args.vertices) {
        return Err(Error::Invalid(format!(
            "--vertices is {}; expected 2000 to 200000",
            args.vertices
        )));
    }
    if !(1..=999).contains(&args.subjects) {
        return Err(Error::Invalid(format!(
            "--subjects is {}; expected 1 to 999",
            args.subjects
        )));
    }
    let mut params = CohortParams {
        subjects: args.subjects,
        vertices: args.vertices,
        seed: args.seed,
        defects: !args.no_defects,
        ..Default::default()
    };
    if let Some(mm) = args.effect_mm {
        params.effect.change_mm = mm;
    }
    if let Some(deg) = args.effect_radius_deg {
        params.effect.angular_radius_deg = deg;
    }
    // The command that regenerates this output, recorded in its README.
    let mut command = format!(
        "horosphere demo --out {} --subjects {} --vertices {} --seed {}",
        args.out.display(),
        args.subjects,
        args.vertices,
        args.seed
    );
    if let Some(mm) = args.effect_mm {
        command.push_str(&format!(" --effect-mm {mm}"));
    }
    if let Some(deg) = args.effect_radius_deg {
        command.push_str(&format!(" --effect-radius-deg {deg}"));
    }
    if args.no_defects {
        command.push_str(" --no-defects");
    }
    let bar = indicatif::ProgressBar::new(args.subjects as u64);
    bar.set_style(
        indicatif::ProgressStyle::with_template("{prefix} {bar:30} {pos}/{len} subjects")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    bar.set_prefix("demo");
    let summary = write_cohort(
        &args.out,
        &params,
        &command,
        args.overwrite,
        &mut |done, _| bar.set_position(done as u64),
    );
    bar.finish_and_clear();
    let summary = summary?;
    if args.json {
        super::print_json("summary", &summary)?;
    } else {
        println!(
            "{}: {} subjects, {} files, {:.1} MB (synthetic)",
            summary.out.display(),
            summary.subjects_written,
            summary.files,
            summary.bytes as f64 / 1e6
        );
    }
    Ok(ExitCode::SUCCESS)
}
