//! `horosphere repair MESH -o OUT`: one surface in, the repaired surface,
//! a per-vertex mask of created vertices (GIFTI shape) and optionally the
//! repair log (JSON) out. All the work is [`horosphere::repair::repair`].

use clap::{Args, ValueEnum};
use horosphere::io::atomic::write_bytes;
use horosphere::repair::{repair, HoleWeight, RepairLog, RepairOptions};
use horosphere::{Error, Result};
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Repair a surface: merge duplicate vertices, drop degenerate faces and
/// stray pieces, make the orientation consistent and outward, fill holes.
#[derive(Args, Debug)]
pub struct RepairArgs {
    /// Input surface (.surf.gii, .gii, .obj, .ply or .off).
    #[arg(value_name = "MESH")]
    mesh: PathBuf,
    /// Output surface; its extension chooses the format.
    #[arg(short = 'o', long = "out", value_name = "OUT")]
    out: PathBuf,
    /// Write the repair log (every change) as JSON to this file.
    #[arg(long, value_name = "LOG")]
    json: Option<PathBuf>,
    /// Per-vertex mask of the vertices the repair created (GIFTI shape,
    /// 1 = created, 0 = from the input). Default: OUT with its surface
    /// extension replaced by `.added.shape.gii`.
    #[arg(long, value_name = "MASK")]
    mask_out: Option<PathBuf>,
    /// Merge vertices closer than this many millimetres (0: identical only).
    #[arg(long, value_name = "MM", default_value_t = 0.0)]
    merge_tolerance: f64,
    /// Holes with at most N boundary edges are triangulated by dynamic
    /// programming; larger holes get a fan around one new vertex.
    #[arg(long, value_name = "N", default_value_t = 60)]
    max_dp_hole: usize,
    /// Weight of the hole triangulation.
    #[arg(long, value_enum, default_value_t = WeightArg::AngleThenArea)]
    hole_weight: WeightArg,
    /// Cut handles (positive genus) along their shortest non-separating
    /// loops and cap both sides, until genus 0.
    #[arg(long)]
    cut_handles: bool,
    /// Longest handle loop (mm) that `--cut-handles` cuts; longer ones are
    /// reported and left.
    #[arg(long, value_name = "MM", default_value_t = 30.0)]
    max_handle_mm: f64,
    /// With `--cut-handles`: a surface of higher genus is reported and
    /// nothing is cut (at most 32).
    #[arg(long, value_name = "G", default_value_t = 20)]
    max_genus: i64,
}

/// `--hole-weight` values.
#[derive(ValueEnum, Clone, Copy, Debug)]
enum WeightArg {
    /// Smallest total area (Barequet and Sharir 1995).
    MinArea,
    /// Smallest largest dihedral angle, then smallest area (Liepa 2003).
    AngleThenArea,
}

/// The JSON written by `--json`: the paths, the options and the log.
#[derive(Serialize)]
struct LogFile<'a> {
    input: String,
    output: String,
    mask: String,
    options: &'a RepairOptions,
    repair: &'a RepairLog,
}

/// Surface extensions stripped before the mask suffix is added (longest first).
const SURFACE_EXTENSIONS: [&str; 5] = [".surf.gii", ".gii", ".obj", ".ply", ".off"];

/// Default mask path: `OUT` with its surface extension replaced by
/// `.added.shape.gii` (any other extension is kept and the suffix appended).
pub fn default_mask_path(out: &Path) -> PathBuf {
    let name = out
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let lower = name.to_ascii_lowercase();
    let stem = SURFACE_EXTENSIONS
        .iter()
        .find(|ext| lower.ends_with(*ext) && lower.len() > ext.len())
        .map_or(name.as_str(), |ext| &name[..name.len() - ext.len()]);
    out.with_file_name(format!("{stem}.added.shape.gii"))
}

/// Validate the flags into library options.
fn options(args: &RepairArgs) -> Result<RepairOptions> {
    if !(args.merge_tolerance.is_finite() && args.merge_tolerance >= 0.0) {
        return Err(Error::Invalid(format!(
            "--merge-tolerance {} is not a non-negative number of millimetres",
            args.merge_tolerance
        )));
    }
    if args.max_dp_hole > 2000 {
        return Err(Error::Invalid(format!(
            "--max-dp-hole {} is above the limit of 2000 boundary edges",
            args.max_dp_hole
        )));
    }
    if !(args.max_handle_mm.is_finite() && args.max_handle_mm > 0.0) {
        return Err(Error::Invalid(format!(
            "--max-handle-mm {} is not a positive number of millimetres",
            args.max_handle_mm
        )));
    }
    if !(0..=horosphere::handles::MAX_GENUS).contains(&args.max_genus) {
        return Err(Error::Invalid(format!(
            "--max-genus {} is outside 0 to {}",
            args.max_genus,
            horosphere::handles::MAX_GENUS
        )));
    }
    Ok(RepairOptions {
        max_handle_mm: args.cut_handles.then_some(args.max_handle_mm),
        max_genus: args.max_genus,
        merge_tolerance_mm: args.merge_tolerance,
        max_dp_hole_edges: args.max_dp_hole,
        hole_weight: match args.hole_weight {
            WeightArg::MinArea => HoleWeight::MinArea,
            WeightArg::AngleThenArea => HoleWeight::AngleThenArea,
        },
    })
}

/// Run the subcommand.
pub fn run(args: &RepairArgs) -> Result<ExitCode> {
    let opts = options(args)?;
    let mask_path = args
        .mask_out
        .clone()
        .unwrap_or_else(|| default_mask_path(&args.out));
    if mask_path == args.out {
        return Err(Error::Invalid(format!(
            "--mask-out {} is the output surface itself; expected another path",
            mask_path.display()
        )));
    }
    let mesh = horosphere::io::read_mesh(&args.mesh)?;
    let fixed = repair(&mesh, &opts).map_err(|e| match e {
        Error::NotReady(m) => Error::NotReady(format!("{}: {m}", args.mesh.display())),
        other => other.in_file(&args.mesh, "mesh"),
    })?;
    let mask: Vec<f32> = fixed
        .added
        .iter()
        .map(|&a| if a { 1.0 } else { 0.0 })
        .collect();
    let mut meta = horosphere::io::gifti::MetaData::new();
    meta.set("Name", "vertices added by repair (1) or from the input (0)");
    horosphere::io::gifti::write_shape(&mask_path, &mask, &meta)?;
    if let Some(json) = &args.json {
        let doc = LogFile {
            input: args.mesh.display().to_string(),
            output: args.out.display().to_string(),
            mask: mask_path.display().to_string(),
            options: &opts,
            repair: &fixed.log,
        };
        let mut bytes = serde_json::to_vec_pretty(&doc).map_err(|e| Error::Algorithm {
            stage: "repair",
            message: format!("could not serialise the log: {e}"),
        })?;
        bytes.push(b'\n');
        write_bytes(json, &bytes)?;
    }
    horosphere::io::write_mesh(&args.out, &fixed.mesh)?;
    let l = &fixed.log;
    println!(
        "{}: {} vertices, {} faces -> {}: {} vertices, {} faces",
        args.mesh.display(),
        l.input_vertices,
        l.input_faces,
        args.out.display(),
        l.output_vertices,
        l.output_faces
    );
    println!(
        "merged {} vertices; dropped {} faces and {} components; reoriented {} faces{}; \
         split {} bow-tie vertices; filled {} holes adding {} vertices",
        l.merge.vertices_merged,
        l.dropped_faces.len(),
        l.dropped_components.len(),
        l.faces_reoriented.len(),
        if l.flipped_to_outward {
            "; turned the surface outward"
        } else {
            ""
        },
        l.bowtie_splits.len(),
        l.holes.len(),
        l.added_vertices.len()
    );
    for h in &l.handles {
        println!(
            "handle: loop {:.1} mm at ({:.1}, {:.1}, {:.1}) mm, {} vertices: {}",
            h.length_mm,
            h.centre[0],
            h.centre[1],
            h.centre[2],
            h.vertices.len(),
            if h.cut {
                "cut and capped"
            } else {
                "longer than --max-handle-mm, left (genus > 0: not ready to map)"
            }
        );
    }
    println!(
        "result: closed, Euler characteristic {}, area {:.1} mm^2, volume {:.1} mm^3; mask {}",
        l.euler_characteristic,
        l.area_mm2,
        l.volume_mm3,
        mask_path.display()
    );
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mask_path_replaces_the_surface_extension() {
        let p = |s: &str| default_mask_path(Path::new(s));
        assert_eq!(
            p("out/a_white.surf.gii"),
            PathBuf::from("out/a_white.added.shape.gii")
        );
        assert_eq!(p("b.OBJ"), PathBuf::from("b.added.shape.gii"));
        assert_eq!(p("c.ply"), PathBuf::from("c.added.shape.gii"));
        assert_eq!(p("d.mesh"), PathBuf::from("d.mesh.added.shape.gii"));
    }
}
