//! The command line: flags are parsed and validated here into the library's
//! option structs; each subcommand lives in its own file and calls one
//! library stage. Errors print as `horosphere: <message>` on stderr with
//! exit status 1 (2 for usage errors, from clap).

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod convert;
mod inspect;
mod repair;
mod run;

/// Cortical surfaces of a cohort to one common sphere. Research use only:
/// not a medical device; results need review by a trained analyst.
#[derive(Parser, Debug)]
#[command(name = "horosphere", version, about, long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Run a cohort study: every subject and hemisphere through inspect, repair, map, align, resample; then matrices and a QC table.
    Run(run::RunArgs),
    /// Report the topology and geometry of a surface mesh and whether it is ready to map.
    Inspect(inspect::InspectArgs),
    /// Re-encode a GIFTI file (encoding, byte order), keeping all its content.
    Convert(convert::ConvertArgs),
    /// Repair a surface: merge duplicate vertices, drop degenerate faces and
    /// stray pieces, orient it consistently and outward, fill its holes.
    Repair(repair::RepairArgs),
}

/// Run the command line and return the exit status.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    let result: horosphere::Result<ExitCode> = match &cli.command {
        Command::Run(args) => run::run(args),
        Command::Inspect(args) => inspect::run(args),
        Command::Convert(args) => convert::run(args),
        Command::Repair(args) => repair::run(args),
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            eprintln!("horosphere: {e}");
            ExitCode::FAILURE
        }
    }
}
