//! The command line: flags are parsed and validated here into the library's
//! option structs; each subcommand lives in its own file and calls one
//! library stage. Errors print as `horosphere: <message>` on stderr with
//! exit status 1 (2 for usage errors, from clap).

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod align;
mod convert;
mod curvature;
mod demo;
mod extract;
mod inspect;
mod map;
mod matrix;
mod register;
mod repair;
mod report;
mod resample;
mod run;
mod sample;
mod sphere;
mod stats;
mod subjects;

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
    /// Write a synthetic study (folded surfaces, maps, landmarks, ground truth) as BIDS derivatives.
    Demo(demo::DemoArgs),
    /// Repair a surface: merge duplicate vertices, drop degenerate faces and
    /// stray pieces, orient it consistently and outward, fill its holes.
    Repair(repair::RepairArgs),
    /// Map a closed genus-0 surface to the sphere by exact discrete conformal uniformization.
    Map(map::MapArgs),
    /// Moebius-normalise a mapped sphere: centre it and fit its landmarks to a template.
    Align(align::AlignArgs),
    /// Estimate a landmark template from a cohort of mapped spheres.
    Template(align::TemplateArgs),
    /// Warp a subject sphere so that its folding features line up with a feature template.
    Register(register::RegisterArgs),
    /// Build a feature template for `register` from a cohort table.
    RegisterTemplate(register::RegisterTemplateArgs),
    /// Resample per-vertex maps from a subject sphere to a common target sphere.
    Resample(resample::ResampleArgs),
    /// Write a built-in target sphere (icosphere:K) as a surface file.
    Sphere(sphere::SphereArgs),
    /// Stack resampled maps of a cohort into one GIFTI (and CSV) matrix.
    Matrix(matrix::MatrixArgs),
    /// Extract the closed surface of a mask volume (NIfTI) by marching cubes.
    Extract(extract::ExtractArgs),
    /// Sample a volume (NIfTI) at the vertices of a surface, optionally along normals.
    Sample(sample::SampleArgs),
    /// Mean curvature of a surface at every vertex (a folding feature for `register`).
    Curvature(curvature::CurvatureArgs),
    /// Vertex-wise linear model on a cohort matrix: effect, se, t, p, BH q and Cohen's d maps.
    Stats(stats::StatsArgs),
    /// Write the cohort QC report: one self-contained HTML file with tables, pictures and histograms.
    Report(report::ReportArgs),
}

/// Print `value` as pretty JSON on stdout (the `--json` output of a
/// command); `what` names it in the error.
pub(crate) fn print_json<T: serde::Serialize>(what: &str, value: &T) -> horosphere::Result<()> {
    let text = serde_json::to_string_pretty(value)
        .map_err(|e| horosphere::Error::Invalid(format!("cannot serialise the {what}: {e}")))?;
    println!("{text}");
    Ok(())
}

/// Run the command line and return the exit status.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    let result: horosphere::Result<ExitCode> = match &cli.command {
        Command::Run(args) => run::run(args),
        Command::Inspect(args) => inspect::run(args),
        Command::Convert(args) => convert::run(args),
        Command::Demo(args) => demo::run(args),
        Command::Repair(args) => repair::run(args),
        Command::Map(args) => map::run(args),
        Command::Align(args) => align::run_align(args),
        Command::Template(args) => align::run_template(args),
        Command::Register(args) => register::run_register(args),
        Command::RegisterTemplate(args) => register::run_template(args),
        Command::Resample(args) => resample::run(args),
        Command::Sphere(args) => sphere::run(args),
        Command::Matrix(args) => matrix::run(args),
        Command::Stats(args) => stats::run(args),
        Command::Report(args) => report::run(args),
        Command::Extract(args) => extract::run(args),
        Command::Sample(args) => sample::run(args),
        Command::Curvature(args) => curvature::run(args),
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            eprintln!("horosphere: {e}");
            ExitCode::FAILURE
        }
    }
}
