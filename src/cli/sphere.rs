//! `horosphere sphere icosphere:K -o FILE`: write a built-in target sphere
//! (`horosphere::resample::target`) as a surface file, atomically.

use clap::Args;
use horosphere::resample::target::{Target, DEFAULT_RADIUS};
use horosphere::{Error, Result};
use std::path::PathBuf;
use std::process::ExitCode;

/// Flags of `sphere`.
#[derive(Debug, Args)]
pub struct SphereArgs {
    /// Built-in target: icosphere:K with K = 0..8.
    pub name: String,
    /// Output surface (.surf.gii, .obj, .ply, .off).
    #[arg(short = 'o', long = "output", value_name = "FILE")]
    pub output: PathBuf,
    /// Radius in millimetres.
    #[arg(long, value_name = "MM", default_value_t = DEFAULT_RADIUS)]
    pub radius: f64,
}

/// Run `sphere`.
pub fn run(args: &SphereArgs) -> Result<ExitCode> {
    let level = match Target::parse(&args.name)? {
        Target::Icosphere(k) => k,
        Target::File(_) => {
            return Err(Error::Invalid(format!(
                "'{}' is a file; expected a built-in name icosphere:K",
                args.name
            )))
        }
    };
    if !(args.radius.is_finite() && args.radius > 0.0) {
        return Err(Error::Invalid(format!(
            "--radius {}; expected a positive number of millimetres",
            args.radius
        )));
    }
    let mesh = horosphere::mesh::shapes::icosphere(level, args.radius);
    horosphere::io::write_mesh(&args.output, &mesh)?;
    Ok(ExitCode::SUCCESS)
}
