//! `horosphere inspect MESH [--json]`: read one surface, run the library's
//! [`horosphere::inspect::inspect`], print the report as text or JSON.
//! Exit status 0 when the report was made (add `--require-ready` to get
//! status 3 when the mesh is not ready to map), 1 on error.

use clap::Args;
use horosphere::inspect::{inspect, render_text, InspectOptions};
use horosphere::{Error, Result};
use std::path::PathBuf;
use std::process::ExitCode;

/// Exit status for a mesh that is not ready to map under `--require-ready`.
const NOT_READY: u8 = 3;

/// Report the topology and geometry of a surface mesh and whether it is ready to map.
#[derive(Args, Debug)]
pub struct InspectArgs {
    /// Surface mesh (GIFTI .surf.gii/.gii, OBJ, PLY or OFF).
    pub mesh: PathBuf,
    /// Print the report as JSON (layout: docs/inspect-json.md).
    #[arg(long)]
    pub json: bool,
    /// Vertices closer than this many millimetres count as duplicates
    /// (0: identical positions only).
    #[arg(long, value_name = "MM", default_value_t = 0.0)]
    pub duplicate_tolerance: f64,
    /// List at most this many entries per finding (counts stay complete).
    #[arg(long, value_name = "N", default_value_t = 20)]
    pub list_limit: usize,
    /// Exit with status 3 when the mesh is not ready to map.
    #[arg(long)]
    pub require_ready: bool,
}

/// Validate the flags into library options.
fn options(args: &InspectArgs) -> Result<InspectOptions> {
    if !(args.duplicate_tolerance.is_finite() && args.duplicate_tolerance >= 0.0) {
        return Err(Error::Invalid(format!(
            "--duplicate-tolerance {} is not a non-negative number of millimetres",
            args.duplicate_tolerance
        )));
    }
    Ok(InspectOptions {
        duplicate_tolerance_mm: args.duplicate_tolerance,
        max_listed: args.list_limit,
        ..InspectOptions::default()
    })
}

/// Run the subcommand.
pub fn run(args: &InspectArgs) -> Result<ExitCode> {
    let opts = options(args)?;
    let mesh = horosphere::io::read_mesh(&args.mesh)?;
    let report = inspect(&mesh, &opts).map_err(|e| e.in_file(&args.mesh, "mesh"))?;
    if args.json {
        super::print_json("report", &report)?;
    } else {
        print!("{}", render_text(&report, &args.mesh.display().to_string()));
    }
    if args.require_ready && !report.ready_to_map {
        Ok(ExitCode::from(NOT_READY))
    } else {
        Ok(ExitCode::SUCCESS)
    }
}
