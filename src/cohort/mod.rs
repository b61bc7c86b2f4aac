//! The cohort pipeline: a study folder to aligned, resampled data with one
//! command (`horosphere run MANIFEST`).
//!
//! In: a TOML [`manifest::Manifest`] naming the study (a BIDS-derivatives
//! layout of surfaces, per-vertex maps and landmark tables per subject and
//! hemisphere), the options of every stage and the output root. Out: per
//! subject and hemisphere the repaired surface (when repair was needed),
//! the conformal sphere, the aligned sphere and every map on the common
//! target sphere, each with a provenance sidecar, plus a unit record; then
//! the cohort matrix of every map and the cohort QC table.
//!
//! What stays true: outputs are byte-identical for any number of worker
//! threads and whether the cohort runs in one process or one job per unit
//! (as in `pipelines/Snakefile`); a rerun recomputes only units whose
//! inputs, options or outputs changed; a killed run leaves no half-written
//! file and its rerun gives the bytes of an uninterrupted run; one unit's
//! failure is recorded (QC table, exit status) and the others go on.
//!
//! Layout: [`manifest`] (the TOML file), [`discover`] (subjects and input
//! files), [`unit`] (one subject and hemisphere through inspect -> repair
//! -> map -> align -> resample), [`group`] (matrices, QC table),
//! [`provenance`] (SHA-256 sidecars), [`runner`] (the parallel run),
//! [`lock`] (one run at a time per output folder).
//! The methods are those of the stages, cited in their modules and in
//! [`unit`].

pub mod discover;
pub mod group;
pub mod lock;
pub mod manifest;
pub mod provenance;
pub mod runner;
pub mod unit;

pub use manifest::Manifest;
pub use runner::{run, Event, RunOptions, RunSummary};
