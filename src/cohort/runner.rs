//! Running a cohort: every unit (subject and hemisphere) through the chain
//! in parallel, then the cohort step and the QC report ([`crate::report`]).
//!
//! In: a [`Manifest`] and [`RunOptions`]. Out: the files of
//! [`super::unit`] and [`super::group`] and a [`RunSummary`]. What stays
//! true: units run on a rayon pool of `jobs` threads, one unit per task,
//! each unit's work deterministic, so every output is byte-identical for
//! any `jobs`; a failing unit is recorded and the others go on; a unit
//! whose record is current is skipped (see [`super::unit`]); the output
//! folder is locked for the run ([`super::lock`]: exclusive, or shared for
//! `--units-only --only ...` jobs of a workflow engine).

use super::discover::{units, Unit};
use super::group::{write_dataset_description, write_group, GroupSummary};
use super::lock::{LockMode, RunLock};
use super::manifest::Manifest;
use super::provenance::{sha256_file, write_sidecar, FileHash, GeneratedBy, Sidecar};
use super::unit::{run_unit, Shared, UnitRecord};
use crate::error::{Error, Result};
use crate::report::{write_report, ReportOptions, RUN_REPORT};
use crate::resample::target::{Target, DEFAULT_SPHERE_TOLERANCE};
use rayon::prelude::*;

/// Options of [`run`].
#[derive(Debug, Clone, PartialEq, Default)]
pub struct RunOptions {
    /// Worker threads (0 = 1).
    pub jobs: usize,
    /// Only these subjects (labels with or without `sub-`); empty = all.
    pub only: Vec<String>,
    /// Only these hemispheres; empty = all of the manifest.
    pub hemi: Vec<String>,
    /// Recompute units even when their record is current.
    pub force: bool,
    /// Skip the units: the cohort step only (from the records on disk).
    pub skip_units: bool,
    /// Skip the cohort step (matrices, QC table).
    pub skip_group: bool,
}

/// Progress of a run, reported as it happens (from worker threads).
#[derive(Debug, Clone, PartialEq)]
pub enum Event {
    /// The run starts `total` units.
    Start { total: usize },
    /// A unit enters a stage.
    Stage { unit: String, stage: String },
    /// A unit is done.
    Done {
        unit: String,
        status: String,
        computed: bool,
        error: Option<String>,
    },
    /// The cohort step starts.
    Group,
    /// The QC report is being drawn.
    Report,
}

/// What a run did.
#[derive(Debug, Clone, PartialEq)]
pub struct RunSummary {
    /// Units run or checked.
    pub units: usize,
    /// Units computed (not skipped).
    pub computed: usize,
    /// Units skipped because their outputs were current.
    pub skipped: usize,
    /// `(unit, error)` of the failed units of this run.
    pub failed: Vec<(String, String)>,
    /// The cohort step, when it ran.
    pub group: Option<GroupSummary>,
    /// The QC report (after the cohort step): its path relative to the
    /// output root, or why it could not be written. The cohort files are
    /// written before it, so a failed report loses none of them.
    pub report: Option<std::result::Result<String, String>>,
}

/// The target sphere and its label.
pub fn shared_data(m: &Manifest) -> Result<Shared> {
    let target =
        Target::parse(&m.resample.target).map_err(|e| e.in_file(&m.path, "resample.target"))?;
    let mesh = target.mesh(DEFAULT_SPHERE_TOLERANCE)?;
    let target_file = match &target {
        Target::File(p) => Some((p.clone(), sha256_file(p)?)),
        Target::Icosphere(_) => None,
    };
    Ok(Shared {
        target: mesh.positions,
        space: target.space_label(),
        target_file,
        register: super::unit::register_templates(m)?,
    })
}

/// Remove temporary files left in the output root by a killed run (only
/// while holding the exclusive lock: nobody else is writing there).
fn remove_root_temporaries(output: &std::path::Path) {
    let Ok(entries) = std::fs::read_dir(output) else {
        return;
    };
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        if name.starts_with('.') && name.ends_with(".tmp") {
            let _ = std::fs::remove_file(e.path());
        }
    }
}

/// Run the cohort of `m`.
pub fn run(
    m: &Manifest,
    opts: &RunOptions,
    progress: &(dyn Fn(Event) + Sync),
) -> Result<RunSummary> {
    let all_units = units(m, &[], &[])?;
    let selected: Vec<Unit> = units(m, &opts.only, &opts.hemi)?;
    let shared = shared_data(m)?;
    std::fs::create_dir_all(&m.output).map_err(|e| Error::io(&m.output, e))?;
    let mode = if opts.skip_group && !opts.only.is_empty() {
        LockMode::Shared
    } else {
        LockMode::Exclusive
    };
    let _lock = RunLock::acquire(&m.output, mode)?;
    if mode == LockMode::Exclusive {
        remove_root_temporaries(&m.output);
    }
    write_dataset_description(m)?;
    let mut summary = RunSummary {
        units: 0,
        computed: 0,
        skipped: 0,
        failed: Vec::new(),
        group: None,
        report: None,
    };
    // One pool of `jobs` workers for the units and the report.
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(opts.jobs.max(1))
        .build()
        .map_err(|e| Error::Invalid(format!("cannot start {} worker threads: {e}", opts.jobs)))?;
    if !opts.skip_units {
        progress(Event::Start {
            total: selected.len(),
        });
        let results: Vec<(String, Result<(UnitRecord, bool)>)> = pool.install(|| {
            selected
                .par_iter()
                .with_max_len(1)
                .map(|u| {
                    let name = u.stem();
                    let r = run_unit(m, u, &shared, opts.force, &|stage| {
                        progress(Event::Stage {
                            unit: name.clone(),
                            stage: stage.to_string(),
                        })
                    });
                    let (status, computed, error) = match &r {
                        Ok((rec, c)) => (rec.status.clone(), *c, rec.error.clone()),
                        Err(e) => ("failed".to_string(), true, Some(e.to_string())),
                    };
                    progress(Event::Done {
                        unit: name.clone(),
                        status,
                        computed,
                        error,
                    });
                    (name, r)
                })
                .collect()
        });
        summary.units = results.len();
        for (name, r) in results {
            match r {
                Ok((rec, computed)) => {
                    if computed {
                        summary.computed += 1;
                    } else {
                        summary.skipped += 1;
                    }
                    if rec.status == "failed" {
                        summary
                            .failed
                            .push((name, rec.error.unwrap_or_else(|| "failed".into())));
                    }
                }
                Err(e) => {
                    summary.computed += 1;
                    summary.failed.push((name, e.to_string()));
                }
            }
        }
    }
    if !opts.skip_group {
        progress(Event::Group);
        summary.group = Some(write_group(m, &all_units, &shared.space)?);
        progress(Event::Report);
        summary.report = Some(
            pool.install(|| write_run_report(m))
                .map(|()| RUN_REPORT.to_string())
                .map_err(|e| e.to_string()),
        );
    }
    Ok(summary)
}

/// Write the QC report of the run (`group/desc-cohort_report.html`, see
/// [`crate::report`]) with its provenance sidecar (input: the QC table).
pub fn write_run_report(m: &Manifest) -> Result<()> {
    let out = m.output.join(RUN_REPORT);
    let opts = ReportOptions {
        study: Some(m.root.clone()),
        ..ReportOptions::default()
    };
    let summary = write_report(&m.output, &out, &opts, &|_, _| {})?;
    let qc = crate::report::load::QC_TABLE;
    let sidecar = Sidecar {
        generated_by: GeneratedBy::this(),
        stage: "report".into(),
        inputs: vec![FileHash {
            path: qc.into(),
            sha256: sha256_file(&m.output.join(qc))?,
        }],
        options: serde_json::json!({ "map": opts.map, "units": summary.units }),
        output: FileHash {
            path: RUN_REPORT.into(),
            sha256: sha256_file(&out)?,
        },
    };
    write_sidecar(&out, &sidecar)
}
