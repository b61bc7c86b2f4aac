//! `horosphere matrix MAP... -o COHORT.func.gii [--csv WIDE.csv] [--long LONG.csv]`:
//! stack resampled maps of a cohort (all on one target sphere) into the
//! cohort matrix (`horosphere::resample::matrix`). Subject labels come from
//! the `sub-` entity of each file name, or from `--subject`.

use clap::Args;
use horosphere::io::gifti;
use horosphere::resample::files::subject_label;
use horosphere::resample::matrix::{
    write_cohort_csv_long, write_cohort_csv_wide, write_cohort_gifti, CohortColumn,
};
use horosphere::{Error, Result};
use std::path::PathBuf;
use std::process::ExitCode;

/// Flags of `matrix`.
#[derive(Debug, Args)]
pub struct MatrixArgs {
    /// Resampled maps, one per subject, in row order.
    #[arg(required = true)]
    pub maps: Vec<PathBuf>,
    /// Cohort GIFTI: one data array per subject.
    #[arg(short = 'o', long = "output", value_name = "FILE")]
    pub output: PathBuf,
    /// Also write the wide CSV (subjects by vertices).
    #[arg(long, value_name = "FILE")]
    pub csv: Option<PathBuf>,
    /// Also write the long CSV (subject,vertex,value).
    #[arg(long, value_name = "FILE")]
    pub long: Option<PathBuf>,
    /// Subject labels, one per map, comma-separated (default: from names).
    #[arg(long, value_delimiter = ',')]
    pub subject: Vec<String>,
}

/// Run `matrix`.
pub fn run(args: &MatrixArgs) -> Result<ExitCode> {
    if !args.subject.is_empty() && args.subject.len() != args.maps.len() {
        return Err(Error::Invalid(format!(
            "{} subject labels for {} maps; expected one per map",
            args.subject.len(),
            args.maps.len()
        )));
    }
    let mut cols = Vec::with_capacity(args.maps.len());
    for (k, p) in args.maps.iter().enumerate() {
        let s = gifti::read_shape(p)?;
        let subject = args
            .subject
            .get(k)
            .cloned()
            .unwrap_or_else(|| subject_label(p));
        cols.push(CohortColumn {
            subject,
            values: s.values,
        });
    }
    write_cohort_gifti(&args.output, &cols)?;
    if let Some(p) = &args.csv {
        write_cohort_csv_wide(p, &cols)?;
    }
    if let Some(p) = &args.long {
        write_cohort_csv_long(p, &cols)?;
    }
    Ok(ExitCode::SUCCESS)
}
