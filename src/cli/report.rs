//! `horosphere report RESULTS -o REPORT.html [--study DIR] [--stats DIR]
//! [--map NAME] [--threads N] [--json]`: the cohort QC report, one
//! self-contained HTML file (library: [`horosphere::report`]; how to read
//! it: docs/report.md). A progress bar on a terminal while units are drawn.

use clap::Args;
use horosphere::report::{write_report, ReportOptions};
use horosphere::{Error, Result};
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;

/// Flags of `report`.
#[derive(Debug, Args)]
pub struct ReportArgs {
    /// The output folder of `horosphere run` (unit records, QC table, spheres, maps).
    pub results: PathBuf,
    /// The report file to write (HTML).
    #[arg(short = 'o', long = "output", value_name = "FILE")]
    pub output: PathBuf,
    /// The study folder (input surfaces and maps), to show surfaces repair left unchanged.
    #[arg(long, value_name = "DIR")]
    pub study: Option<PathBuf>,
    /// A folder written by `horosphere stats` (default: RESULTS/stats when present).
    #[arg(long, value_name = "DIR")]
    pub stats: Option<PathBuf>,
    /// The per-vertex map to colour surfaces by.
    #[arg(long, default_value = "thickness")]
    pub map: String,
    /// Worker threads (the file is the same for any number).
    #[arg(long, short = 'j', default_value_t = 1)]
    pub jobs: usize,
    /// Print what the report holds as JSON on stdout.
    #[arg(long)]
    pub json: bool,
}

/// Run `report`.
pub fn run(args: &ReportArgs) -> Result<ExitCode> {
    if args.jobs == 0 || args.jobs > 1024 {
        return Err(Error::Invalid(format!(
            "--jobs {}: expected 1 to 1024",
            args.jobs
        )));
    }
    let opts = ReportOptions {
        study: args.study.clone(),
        stats: args.stats.clone(),
        map: args.map.clone(),
        ..ReportOptions::default()
    };
    let bar = std::io::stderr().is_terminal().then(|| {
        let b = indicatif::ProgressBar::new(0);
        b.set_style(
            indicatif::ProgressStyle::with_template("{prefix} {bar:30} {pos}/{len} units")
                .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
        );
        b.set_prefix("report");
        b
    });
    let progress = |k: usize, n: usize| {
        if let Some(b) = &bar {
            b.set_length(n as u64);
            b.set_position(k as u64);
        }
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(args.jobs)
        .build()
        .map_err(|e| Error::Invalid(format!("cannot start {} worker threads: {e}", args.jobs)))?;
    let summary = pool.install(|| write_report(&args.results, &args.output, &opts, &progress))?;
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    if args.json {
        let v = serde_json::json!({
            "report": args.output.display().to_string(),
            "summary": summary,
        });
        println!("{}", serde_json::to_string_pretty(&v).unwrap_or_default());
    } else {
        eprintln!(
            "report: {} units ({} failed, {} with pictures), {} images, {} statistics maps, {} bytes -> {}",
            summary.units,
            summary.failed,
            summary.pictured,
            summary.images,
            summary.stats_maps,
            summary.bytes,
            args.output.display()
        );
    }
    Ok(ExitCode::SUCCESS)
}
