//! `horosphere curvature SURFACE -o MAP.shape.gii [--float64] [--json]`:
//! the mean curvature of a surface at every vertex (1/mm, positive on
//! convex parts such as gyral crowns), written as a GIFTI shape. Useful as
//! a folding feature for `register-template` and `register`. The work is
//! [`horosphere::mesh::curvature::mean_curvature`].

use clap::Args;
use horosphere::io::gifti::MetaData;
use horosphere::mesh::curvature::mean_curvature;
use horosphere::{Error, Result};
use serde::Serialize;
use std::path::PathBuf;
use std::process::ExitCode;

/// Mean curvature of a surface.
#[derive(Args, Debug)]
pub struct CurvatureArgs {
    /// Surface (.surf.gii, .gii, .obj, .ply, .off), in mm.
    #[arg(value_name = "SURFACE")]
    surface: PathBuf,
    /// Output per-vertex mean curvature (GIFTI shape).
    #[arg(short = 'o', long = "out", value_name = "MAP")]
    out: PathBuf,
    /// Store the values as FLOAT64 instead of FLOAT32.
    #[arg(long)]
    float64: bool,
    /// Print the summary as JSON.
    #[arg(long)]
    json: bool,
}

/// The JSON summary.
#[derive(Serialize)]
struct Summary {
    surface: String,
    output: String,
    vertices: usize,
    /// Smallest and largest value, 1/mm.
    min: f64,
    max: f64,
    /// Area-weighted mean, 1/mm (for a closed surface, the total mean
    /// curvature over the area).
    area_weighted_mean: f64,
}

/// Run the subcommand.
pub fn run(args: &CurvatureArgs) -> Result<ExitCode> {
    let mesh = horosphere::io::read_mesh(&args.surface)?;
    if mesh.n_faces() == 0 {
        return Err(Error::bad_file(
            &args.surface,
            "faces",
            "no triangle; expected a triangle mesh",
        ));
    }
    let h = mean_curvature(&mesh);
    let mut meta = MetaData::new();
    let name = args
        .surface
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    meta.set("Name", "mean_curvature");
    meta.set("SourceSurface", name);
    meta.set("Units", "1/mm");
    horosphere::io::gifti::write_values(&args.out, &h, &meta, args.float64)?;
    let w = mesh.vertex_areas();
    let sw: f64 = w.iter().sum();
    let s = Summary {
        surface: args.surface.display().to_string(),
        output: args.out.display().to_string(),
        vertices: h.len(),
        min: h.iter().copied().fold(f64::INFINITY, f64::min),
        max: h.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        area_weighted_mean: if sw > 0.0 {
            h.iter().zip(&w).map(|(a, b)| a * b).sum::<f64>() / sw
        } else {
            0.0
        },
    };
    if args.json {
        super::print_json("summary", &s)?;
    } else {
        println!(
            "curvature: {} vertices of {}: min {:.4}, max {:.4}, area-weighted mean {:.5} 1/mm",
            s.vertices, s.surface, s.min, s.max, s.area_weighted_mean
        );
        println!("  wrote {}", s.output);
    }
    Ok(ExitCode::SUCCESS)
}
