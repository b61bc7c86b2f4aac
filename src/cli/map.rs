//! `horosphere map SURF -o SPHERE [--pole auto|N] [--radius 100] [--report MAP.json] [--hull-out HULL]`:
//! exact discrete conformal map of a closed genus-0 surface to the sphere
//! (library: [`horosphere::map`]). The sphere keeps the input's vertex order
//! and connectivity; `--hull-out` writes the convex-hull (Delaunay)
//! triangulation of the same points. Nothing is written when the mapping
//! fails, except the report (status `failed`, with the iteration log).

use clap::Args;
use horosphere::error::{Error, Result};
use horosphere::io::atomic::write_atomic;
use horosphere::map::{map_to_sphere_diagnosed, MapOptions, MapReport, PoleChoice};
use horosphere::TriMesh;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Arguments of `horosphere map`.
#[derive(Args, Debug)]
pub struct MapArgs {
    /// Input surface: closed, connected, genus 0 (GIFTI, OBJ, PLY or OFF).
    pub surf: PathBuf,
    /// Output sphere, same vertex order and faces as the input.
    #[arg(short = 'o', long = "output", value_name = "SPHERE")]
    pub output: PathBuf,
    /// Vertex sent to the north pole: `auto` (documented rule) or an index.
    #[arg(long, default_value = "auto", value_name = "auto|N")]
    pub pole: String,
    /// Sphere radius in millimetres.
    #[arg(long, default_value_t = 100.0)]
    pub radius: f64,
    /// Write the JSON report here (also on failure).
    #[arg(long, value_name = "MAP.json")]
    pub report: Option<PathBuf>,
    /// Also write the convex-hull triangulation of the sphere points.
    #[arg(long = "hull-out", value_name = "HULL")]
    pub hull_out: Option<PathBuf>,
}

/// Parse `--pole`.
fn parse_pole(s: &str) -> Result<PoleChoice> {
    if s.eq_ignore_ascii_case("auto") {
        return Ok(PoleChoice::Auto);
    }
    s.parse::<u32>()
        .map(PoleChoice::Vertex)
        .map_err(|_| Error::Invalid(format!("--pole {s}: expected `auto` or a vertex index")))
}

fn write_report(path: &Path, report: &MapReport) -> Result<()> {
    write_atomic(path, |w| {
        serde_json::to_writer_pretty(&mut *w, report)
            .map_err(|e| Error::io(path, std::io::Error::other(e)))?;
        w.write_all(b"\n").map_err(|e| Error::io(path, e))
    })
}

/// Run `horosphere map`.
pub fn run(args: &MapArgs) -> Result<ExitCode> {
    if !(args.radius.is_finite() && args.radius > 0.0) {
        return Err(Error::Invalid(format!(
            "--radius {}: expected a positive number of millimetres",
            args.radius
        )));
    }
    let opts = MapOptions {
        pole: parse_pole(&args.pole)?,
        ..MapOptions::default()
    };
    let mesh = horosphere::io::read_mesh(&args.surf)?;
    match map_to_sphere_diagnosed(&mesh, &opts) {
        Ok(out) => {
            let scale = |p: &[f64; 3]| [p[0] * args.radius, p[1] * args.radius, p[2] * args.radius];
            let sphere = TriMesh {
                positions: out.points.iter().map(scale).collect(),
                faces: mesh.faces.clone(),
            };
            horosphere::io::write_mesh(&args.output, &sphere)?;
            if let Some(hull) = &args.hull_out {
                let hull_mesh = TriMesh {
                    positions: sphere.positions.clone(),
                    faces: out.hull_faces.clone(),
                };
                horosphere::io::write_mesh(hull, &hull_mesh)?;
            }
            if let Some(path) = &args.report {
                write_report(path, &out.report)?;
            }
            Ok(ExitCode::SUCCESS)
        }
        Err(failure) => {
            if let Some(path) = &args.report {
                write_report(path, &failure.report)?;
            }
            Err(match failure.error {
                Error::NotReady(m) => Error::NotReady(format!("{}: {m}", args.surf.display())),
                Error::Algorithm { stage, message } => Error::Algorithm {
                    stage,
                    message: format!("{}: {message}; no sphere written", args.surf.display()),
                },
                other => other,
            })
        }
    }
}
