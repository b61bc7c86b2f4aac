//! `horosphere sample VOLUME --surface SURF -o MAP.shape.gii [--offset MM]
//! [--method trilinear|nearest] [--json]`: values of a NIfTI volume at the
//! vertices of a surface in the volume's mm space, written as a GIFTI
//! shape; vertices outside the volume get NaN and are counted. The work is
//! [`horosphere::volume::sample::sample`].

use clap::{Args, ValueEnum};
use horosphere::io::gifti::MetaData;
use horosphere::volume::{self, sample::Method};
use horosphere::{Error, Result};
use serde::Serialize;
use std::path::PathBuf;
use std::process::ExitCode;

/// Sample a volume (NIfTI) at the vertices of a surface.
#[derive(Args, Debug)]
pub struct SampleArgs {
    /// Volume (.nii or .nii.gz, 3-D).
    #[arg(value_name = "VOLUME")]
    volume: PathBuf,
    /// Surface in the volume's mm space (.surf.gii, .gii, .obj, .ply, .off).
    #[arg(long, value_name = "SURF")]
    surface: PathBuf,
    /// Output per-vertex values (GIFTI shape).
    #[arg(short = 'o', long = "out", value_name = "MAP")]
    out: PathBuf,
    /// Move each vertex this many mm along its outward unit normal
    /// (area-weighted) before sampling; negative goes inwards.
    #[arg(
        long,
        value_name = "MM",
        default_value_t = 0.0,
        allow_hyphen_values = true
    )]
    offset: f64,
    /// Interpolation.
    #[arg(long, value_enum, default_value_t = MethodArg::Trilinear)]
    method: MethodArg,
    /// Store the values as FLOAT64 instead of FLOAT32.
    #[arg(long)]
    float64: bool,
    /// Print the summary as JSON.
    #[arg(long)]
    json: bool,
}

/// `--method` values.
#[derive(ValueEnum, Clone, Copy, Debug)]
enum MethodArg {
    /// Trilinear between the eight surrounding voxel centres.
    Trilinear,
    /// The voxel with the nearest centre.
    Nearest,
}

/// The JSON summary.
#[derive(Serialize)]
struct Summary {
    volume: String,
    surface: String,
    output: String,
    method: Method,
    offset_mm: f64,
    vertices: usize,
    outside: usize,
    nan_values: usize,
    min: Option<f64>,
    max: Option<f64>,
    mean: Option<f64>,
}

/// Run the subcommand.
pub fn run(args: &SampleArgs) -> Result<ExitCode> {
    if !args.offset.is_finite() {
        return Err(Error::Invalid(format!(
            "--offset {} is not a finite number of millimetres",
            args.offset
        )));
    }
    let method = match args.method {
        MethodArg::Trilinear => Method::Trilinear,
        MethodArg::Nearest => Method::Nearest,
    };
    let vol = volume::nifti::read_volume(&args.volume)?;
    let mesh = horosphere::io::read_mesh(&args.surface)?;
    let pb = indicatif::ProgressBar::new_spinner();
    pb.set_message("sampling");
    let got = volume::sample::sample(&vol, &mesh, args.offset, method);
    pb.finish_and_clear();
    let mut meta = MetaData::new();
    let name = args
        .volume
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    meta.set("Name", name.clone());
    meta.set("SourceVolume", name);
    meta.set(
        "SampleMethod",
        match method {
            Method::Trilinear => "trilinear",
            Method::Nearest => "nearest",
        },
    );
    meta.set("SampleOffsetMillimetres", format!("{}", args.offset));
    horosphere::io::gifti::write_values(&args.out, &got.values, &meta, args.float64)?;
    let finite: Vec<f64> = got.values.iter().copied().filter(|v| !v.is_nan()).collect();
    let nan_values = got.values.len() - finite.len();
    let (min, max, mean) = if finite.is_empty() {
        (None, None, None)
    } else {
        (
            Some(finite.iter().copied().fold(f64::INFINITY, f64::min)),
            Some(finite.iter().copied().fold(f64::NEG_INFINITY, f64::max)),
            Some(finite.iter().sum::<f64>() / finite.len() as f64),
        )
    };
    let s = Summary {
        volume: args.volume.display().to_string(),
        surface: args.surface.display().to_string(),
        output: args.out.display().to_string(),
        method,
        offset_mm: args.offset,
        vertices: mesh.n_vertices(),
        outside: got.outside,
        nan_values,
        min,
        max,
        mean,
    };
    if args.json {
        super::print_json("summary", &s)?;
    } else {
        println!(
            "sample: {} at {} vertices of {} ({:?}, offset {} mm)",
            s.volume, s.vertices, s.surface, method, s.offset_mm
        );
        println!(
            "  {} outside the volume (NaN), {} NaN values in all",
            s.outside, s.nan_values
        );
        if let (Some(a), Some(b), Some(m)) = (min, max, mean) {
            println!("  values: min {a}, max {b}, mean {m}");
        }
        println!("  wrote {}", s.output);
    }
    Ok(ExitCode::SUCCESS)
}
