//! `horosphere extract MASK -o SURF.surf.gii [--level L] [--smooth N] [--json]`:
//! a NIfTI mask in, one closed surface in scanner mm out, with its topology
//! (via [`horosphere::inspect`]). The work is [`horosphere::volume::extract`].

use clap::Args;
use horosphere::inspect::{inspect, InspectOptions, Orientation};
use horosphere::volume::{self, ExtractOptions, ExtractReport};
use horosphere::{Error, Result};
use serde::Serialize;
use std::path::PathBuf;
use std::process::ExitCode;

/// Extract the closed surface of a mask volume (NIfTI) by marching cubes.
#[derive(Args, Debug)]
pub struct ExtractArgs {
    /// Mask volume (.nii or .nii.gz, 3-D).
    #[arg(value_name = "MASK")]
    mask: PathBuf,
    /// Output surface (.surf.gii / .gii carry the coordinate system; .obj,
    /// .ply, .off are also written).
    #[arg(short = 'o', long = "out", value_name = "SURF")]
    out: PathBuf,
    /// Foreground: voxels with values above this level.
    #[arg(long, value_name = "L", default_value_t = 0.5)]
    level: f64,
    /// Taubin lambda|mu smoothing iterations (0: none).
    #[arg(long, value_name = "ITER", default_value_t = 0)]
    smooth: usize,
    /// Store GIFTI coordinates as FLOAT64 instead of FLOAT32.
    #[arg(long)]
    float64: bool,
    /// Print the summary as JSON.
    #[arg(long)]
    json: bool,
}

/// Topology of the written surface, from `inspect`.
#[derive(Serialize)]
struct Topology {
    components: usize,
    euler_characteristic: i64,
    genus: Option<u32>,
    closed: bool,
    manifold: bool,
    outward: bool,
    ready_to_map: bool,
}

/// The JSON summary.
#[derive(Serialize)]
struct Summary<'a> {
    input: String,
    output: String,
    extract: &'a ExtractReport,
    topology: Topology,
}

/// Upper limit of `--smooth`.
const MAX_SMOOTH: usize = 10_000;

/// Run the subcommand.
pub fn run(args: &ExtractArgs) -> Result<ExitCode> {
    if !args.level.is_finite() {
        return Err(Error::Invalid(format!(
            "--level {} is not a finite number",
            args.level
        )));
    }
    if args.smooth > MAX_SMOOTH {
        return Err(Error::Invalid(format!(
            "--smooth {} is above the limit of {MAX_SMOOTH} iterations",
            args.smooth
        )));
    }
    let steps = ["reading", "extracting", "inspecting", "writing"];
    let pb = indicatif::ProgressBar::new(steps.len() as u64);
    if let Ok(style) = indicatif::ProgressStyle::with_template("extract [{bar:20}] {msg}") {
        pb.set_style(style);
    }
    pb.set_message(steps[0]);
    let vol = volume::nifti::read_volume(&args.mask)?;
    pb.inc(1);
    pb.set_message(steps[1]);
    let opts = ExtractOptions {
        level: args.level,
        smooth_iterations: args.smooth,
    };
    let (mesh, report) =
        volume::extract(&vol, &opts).map_err(|e| e.in_file(&args.mask, "voxel data"))?;
    pb.inc(1);
    pb.set_message(steps[2]);
    let insp = inspect(&mesh, &InspectOptions::default())?;
    let c0 = insp.components.listed.first();
    let topology = Topology {
        components: insp.components.count,
        euler_characteristic: insp.euler_characteristic,
        genus: c0.and_then(|c| c.genus),
        closed: insp.boundary.loops == 0,
        manifold: insp.non_manifold_edges.count == 0 && insp.non_manifold_vertices.count == 0,
        outward: insp.orientation == Orientation::Outward,
        ready_to_map: insp.ready_to_map,
    };
    pb.inc(1);
    pb.set_message(steps[3]);
    let lower = args.out.to_string_lossy().to_ascii_lowercase();
    if lower.ends_with(".gii") {
        volume::write_surface(&args.out, &mesh, &vol, &args.mask, args.float64)?;
    } else {
        horosphere::io::write_mesh(&args.out, &mesh)?;
    }
    pb.finish_and_clear();
    if args.json {
        let s = Summary {
            input: args.mask.display().to_string(),
            output: args.out.display().to_string(),
            extract: &report,
            topology,
        };
        super::print_json("summary", &s)?;
    } else {
        let m = &report.mask;
        println!("extract: {}", args.mask.display());
        println!(
            "  volume {}x{}x{}, affine from {:?} ({}), determinant {:.6} mm^3{}",
            report.dims[0],
            report.dims[1],
            report.dims[2],
            report.affine_source,
            report.space,
            report.affine_determinant,
            if report.flipped_for_negative_determinant {
                " (negative: faces reversed to point out)"
            } else {
                ""
            }
        );
        println!(
            "  mask: {} voxels above {}, {} cavity voxels filled ({} cavities), {} pieces, {} voxels dropped, {} kept",
            m.above_level, report.level, m.cavity_voxels_filled, m.cavities_filled, m.pieces, m.dropped_voxels, m.kept_voxels
        );
        println!(
            "  surface: {} vertices, {} faces, area {:.3} mm^2, volume {:.3} mm^3, smoothing {} iterations",
            report.vertices, report.faces, report.area_mm2, report.volume_mm3, report.smooth_iterations
        );
        println!(
            "  topology: {} component(s), Euler characteristic {}, genus {}, closed {}, manifold {}, outward {}",
            topology.components,
            topology.euler_characteristic,
            topology
                .genus
                .map_or_else(|| "-".to_string(), |g| g.to_string()),
            topology.closed,
            topology.manifold,
            topology.outward
        );
        println!("  wrote {}", args.out.display());
    }
    Ok(ExitCode::SUCCESS)
}
