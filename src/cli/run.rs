//! `horosphere run MANIFEST [--jobs N] [--only SUBJECT...] [--hemi H...]
//! [--force] [--units-only | --cohort-only] [--output DIR] [--allow-failed]
//! [--list] [--json]`:
//! the cohort pipeline (library: [`horosphere::cohort`]). A progress bar
//! (overall, with each unit's current stage) when stderr is a terminal;
//! plain log lines otherwise. Exit status 1 when any unit failed, unless
//! `--allow-failed` (used by workflow engines, so that the cohort step
//! still runs and the failures stay in the QC table).

use clap::Args;
use horosphere::cohort::{run as run_cohort, Event, Manifest, RunOptions};
use horosphere::error::{Error, Result};
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Mutex;

/// Arguments of `horosphere run`.
#[derive(Args, Debug)]
pub struct RunArgs {
    /// The cohort manifest (TOML; see docs/manifest.md).
    pub manifest: PathBuf,
    /// Worker threads (units run in parallel, one per thread).
    #[arg(long, short = 'j', default_value_t = 1)]
    pub jobs: usize,
    /// Only these subjects (label, with or without `sub-`).
    #[arg(long, num_args = 1.., value_name = "SUBJECT")]
    pub only: Vec<String>,
    /// Only these hemispheres (L, R).
    #[arg(long, num_args = 1.., value_name = "L|R")]
    pub hemi: Vec<String>,
    /// Recompute units whose outputs are current.
    #[arg(long)]
    pub force: bool,
    /// Run the units only, not the cohort step.
    #[arg(long, conflicts_with = "cohort_only")]
    pub units_only: bool,
    /// Run the cohort step only (matrices, QC table) from the unit records.
    #[arg(long)]
    pub cohort_only: bool,
    /// Output root instead of the manifest's `study.output`.
    #[arg(long, value_name = "DIR")]
    pub output: Option<PathBuf>,
    /// Exit 0 even when units failed (they are recorded in the QC table).
    #[arg(long)]
    pub allow_failed: bool,
    /// Print the run summary as JSON on stdout.
    #[arg(long)]
    pub json: bool,
    /// Print the units (subject, hemisphere, record file) and the output
    /// root as JSON and stop; used by workflow engines to plan one job per unit.
    #[arg(long)]
    pub list: bool,
}

/// Run `horosphere run`.
pub fn run(args: &RunArgs) -> Result<ExitCode> {
    if args.jobs == 0 || args.jobs > 1024 {
        return Err(Error::Invalid(format!(
            "--jobs {}: expected 1 to 1024",
            args.jobs
        )));
    }
    let mut manifest = Manifest::read(&args.manifest)?;
    if let Some(o) = &args.output {
        manifest.output = std::path::absolute(o).map_err(|e| Error::io(o, e))?;
    }
    if args.list {
        let units = horosphere::cohort::discover::units(&manifest, &args.only, &args.hemi)?;
        let v = serde_json::json!({
            "output": manifest.output.to_string_lossy(),
            "qc_table": "group/desc-cohort_qc.csv",
            "units": units.iter().map(|u| serde_json::json!({
                "subject": u.subject,
                "hemi": u.hemi,
                "record": horosphere::cohort::provenance::relative(
                    &horosphere::cohort::unit::record_path(&manifest, u),
                    &manifest.output,
                ),
            })).collect::<Vec<_>>(),
        });
        println!("{}", serde_json::to_string_pretty(&v).unwrap_or_default());
        return Ok(ExitCode::SUCCESS);
    }
    let opts = RunOptions {
        jobs: args.jobs,
        only: args.only.clone(),
        hemi: args.hemi.clone(),
        force: args.force,
        skip_units: args.cohort_only,
        skip_group: args.units_only,
    };
    let terminal = std::io::stderr().is_terminal();
    let bar: Mutex<Option<indicatif::ProgressBar>> = Mutex::new(None);
    let done = Mutex::new((0usize, 0usize));
    let progress = |e: Event| match e {
        Event::Start { total } => {
            if let Ok(mut d) = done.lock() {
                d.1 = total;
            }
            if terminal {
                let b = indicatif::ProgressBar::new(total as u64);
                b.set_style(
                    indicatif::ProgressStyle::with_template(
                        "{prefix} {bar:30} {pos}/{len} units  {msg}",
                    )
                    .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
                );
                b.set_prefix("run");
                if let Ok(mut g) = bar.lock() {
                    *g = Some(b);
                }
            }
        }
        Event::Stage { unit, stage } => {
            if let Ok(g) = bar.lock() {
                if let Some(b) = g.as_ref() {
                    b.set_message(format!("{unit}: {stage}"));
                }
            }
        }
        Event::Done {
            unit,
            status,
            computed,
            error,
        } => {
            let (k, n) = done
                .lock()
                .map(|mut d| {
                    d.0 += 1;
                    *d
                })
                .unwrap_or((0, 0));
            let how = if computed { "computed" } else { "up to date" };
            let line = match error {
                Some(err) => format!("[{k}/{n}] {unit}: {status} ({how}): {err}"),
                None => format!("[{k}/{n}] {unit}: {status} ({how})"),
            };
            match bar.lock().ok().and_then(|g| g.clone()) {
                Some(b) => {
                    b.inc(1);
                    if status == "failed" {
                        b.println(line);
                    }
                }
                None => eprintln!("{line}"),
            }
        }
        Event::Group => {
            if let Some(b) = bar.lock().ok().and_then(|mut g| g.take()) {
                b.finish_and_clear();
            }
            if !terminal {
                eprintln!("cohort: matrices and QC table");
            }
        }
        Event::Report => {
            if !terminal {
                eprintln!("cohort: QC report");
            }
        }
    };
    let summary = run_cohort(&manifest, &opts, &progress)?;
    if let Some(b) = bar.lock().ok().and_then(|mut g| g.take()) {
        b.finish_and_clear();
    }
    let failed_total = if args.cohort_only {
        summary.group.as_ref().map_or(0, |g| g.failed)
    } else {
        summary.failed.len()
    };
    if args.json {
        let v = serde_json::json!({
            "units": summary.units,
            "computed": summary.computed,
            "skipped": summary.skipped,
            "failed": summary.failed.iter().map(|(u, e)| serde_json::json!({"unit": u, "error": e})).collect::<Vec<_>>(),
            "cohort_failed": summary.group.as_ref().map(|g| g.failed),
            "cohort_files": summary.group.as_ref().map(|g| g.files.clone()),
            "report": summary.report.as_ref().and_then(|r| r.as_ref().ok()),
            "report_error": summary.report.as_ref().and_then(|r| r.as_ref().err()),
        });
        println!("{}", serde_json::to_string_pretty(&v).unwrap_or_default());
    } else {
        eprintln!(
            "{} units: {} computed, {} up to date, {} failed{}",
            summary.units,
            summary.computed,
            summary.skipped,
            summary.failed.len(),
            summary
                .group
                .as_ref()
                .map(|g| format!(
                    "; {} failed in the cohort QC table {}",
                    g.failed,
                    manifest.output.join("group/desc-cohort_qc.csv").display()
                ))
                .unwrap_or_default()
        );
    }
    if let Some(Err(e)) = &summary.report {
        eprintln!(
            "horosphere: the QC report could not be written (the cohort files are complete): {e}"
        );
        return Ok(ExitCode::FAILURE);
    }
    if failed_total > 0 && !args.allow_failed {
        Ok(ExitCode::FAILURE)
    } else {
        Ok(ExitCode::SUCCESS)
    }
}
