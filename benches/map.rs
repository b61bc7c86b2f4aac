//! Benchmark of the spherical conformal mapper on folded synthetic surfaces
//! of about 10k, 40k and 160k vertices (icospheres of levels 5, 6, 7 with
//! radial folds; a stand-in until the synthetic cortex generator is used).
//!
//! Run: `cargo bench --bench map [-- 10k 40k 160k]` (under `cargo test
//! --all-targets` it only maps a 642-vertex surface as a smoke test). Prints, per size, the
//! wall time of each phase, Newton iterations, flips, factorisations and the
//! peak resident memory of the process so far (VmHWM from
//! /proc/self/status; sizes run in increasing order, so each figure is the
//! peak up to and including that size). With `HOROSPHERE_BENCH_JSON=path`
//! the figures are also written as JSON.

use horosphere::map::{map_to_sphere, MapOptions};
use horosphere::mesh::shapes::icosphere;
use horosphere::mesh::TriMesh;
use horosphere::synth::surface::{folded_surface, SurfaceParams};
use std::f64::consts::PI;
use std::time::Instant;

/// Icosphere of `level` with radial folds: a sum of 12 plane waves of
/// random directions and frequencies 4-12 (deterministic seed), amplitude
/// `amp`, then an anisotropic stretch 1 : 1.2 : 0.9.
fn folded_sphere(level: u32, amp: f64, seed: u64) -> TriMesh {
    let mut m = icosphere(level, 1.0);
    let mut x = seed;
    let mut rnd = || {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        (x >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut waves = Vec::new();
    for _ in 0..12 {
        let mut d = [rnd() - 0.5, rnd() - 0.5, rnd() - 0.5];
        let n = (d[0] * d[0] + d[1] * d[1] + d[2] * d[2]).sqrt();
        d = [d[0] / n, d[1] / n, d[2] / n];
        waves.push((d, 4.0 + 8.0 * rnd(), 2.0 * PI * rnd()));
    }
    for p in &mut m.positions {
        let mut r = 1.0;
        for (d, k, ph) in &waves {
            r += amp / 4.0 * (k * (p[0] * d[0] + p[1] * d[1] + p[2] * d[2]) + ph).sin();
        }
        *p = [p[0] * r, p[1] * r * 1.2, p[2] * r * 0.9];
    }
    m
}

fn peak_rss_mb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines().find(|l| l.starts_with("VmHWM:")).and_then(|l| {
                l.split_whitespace()
                    .nth(1)
                    .and_then(|v| v.parse::<f64>().ok())
            })
        })
        .map(|kb| kb / 1024.0)
        .unwrap_or(f64::NAN)
}

/// The linear harmonic map of Angenent et al. (1999) in Python/scipy
/// (benches/harmonic_map.py), on the same mesh and pole, for comparison.
/// Python: `HOROSPHERE_PYTHON` or /work/venv/bin/python, else `python3`.
fn harmonic_comparison(mesh: &TriMesh, pole: u32, name: &str) -> serde_json::Value {
    let dir = std::env::temp_dir().join(format!("horosphere-bench-{}", std::process::id()));
    let path = dir.join(format!("folded-{name}.off"));
    if std::fs::create_dir_all(&dir).is_err() || horosphere::io::write_mesh(&path, mesh).is_err() {
        return serde_json::Value::Null;
    }
    let python = std::env::var("HOROSPHERE_PYTHON").unwrap_or_else(|_| {
        if std::path::Path::new("/work/venv/bin/python").exists() {
            "/work/venv/bin/python".into()
        } else {
            "python3".into()
        }
    });
    let script = concat!(env!("CARGO_MANIFEST_DIR"), "/benches/harmonic_map.py");
    let out = std::process::Command::new(python)
        .arg(script)
        .arg(&path)
        .arg(pole.to_string())
        .output();
    let _ = std::fs::remove_file(&path);
    match out {
        Ok(o) if o.status.success() => {
            let v: serde_json::Value =
                serde_json::from_slice(&o.stdout).unwrap_or(serde_json::Value::Null);
            println!(
                "      harmonic map (Python/scipy, Angenent et al. 1999): {:.2} s, angle distortion p50/p95 {:.3}/{:.3}, inverted faces {}",
                v["seconds"].as_f64().unwrap_or(f64::NAN),
                v["angle_distortion_p50"].as_f64().unwrap_or(f64::NAN),
                v["angle_distortion_p95"].as_f64().unwrap_or(f64::NAN),
                v["inverted_faces"]
            );
            v
        }
        Ok(o) => {
            println!(
                "      harmonic map comparison failed: {}",
                String::from_utf8_lossy(&o.stderr)
                    .lines()
                    .last()
                    .unwrap_or("")
            );
            serde_json::Value::Null
        }
        Err(e) => {
            println!("      harmonic map comparison skipped: {e}");
            serde_json::Value::Null
        }
    }
}

fn main() {
    // `cargo bench` passes `--bench`; under `cargo test --all-targets` the
    // binary runs as a smoke test on a small surface only.
    let benching = std::env::args().any(|a| a == "--bench");
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with("--"))
        .collect();
    let all = if benching {
        vec![("10k", 5u32), ("40k", 6), ("160k", 7)]
    } else {
        vec![("smoke-642", 3u32)]
    };
    let sizes: Vec<(&str, u32)> = all
        .into_iter()
        .filter(|(name, _)| args.is_empty() || args.iter().any(|a| a == name))
        .collect();
    let mut results = Vec::new();
    let synthetic = std::env::var("HOROSPHERE_BENCH_SURFACE")
        .map(|v| v != "stand-in")
        .unwrap_or(true);
    for (name, level) in sizes {
        let mesh = if synthetic {
            // The synthetic cortex (crate::synth), same vertex count.
            let params = SurfaceParams {
                vertices: 10 * 4usize.pow(level) + 2,
                ..SurfaceParams::default()
            };
            match folded_surface(&params, 7) {
                Ok(s) => s.mesh,
                Err(e) => {
                    eprintln!("{name}: synthetic surface failed: {e}");
                    std::process::exit(1);
                }
            }
        } else {
            folded_sphere(level, 0.25, 7)
        };
        let t = Instant::now();
        let out = match map_to_sphere(&mesh, &MapOptions::default()) {
            Ok(out) => out,
            Err(e) => {
                eprintln!("{name}: mapping failed: {e}");
                std::process::exit(1);
            }
        };
        let wall = t.elapsed().as_secs_f64();
        let r = &out.report;
        let tm = &r.times;
        println!(
            "map {name:>5} ({} vertices, {} path): wall {wall:.2} s [checks {:.2}, delaunay {:.2}, distances {:.2}, solve {:.2} ({} evaluations {:.2}, assemble {:.2}, symbolic {:.2}, numeric {:.2}, solve {:.2}), layout {:.2} ({}), verify {:.2}, metrics {:.2}], iterations {}, factorisations {} (symbolic {}), flips {}/{}/{}, boundary {}, peak RSS {:.0} MB",
            r.vertices,
            r.path,
            tm.checks,
            tm.delaunay,
            tm.horocycles,
            tm.solve,
            r.solve_profile.evaluations,
            r.solve_profile.evaluate,
            r.solve_profile.assemble,
            r.solve_profile.symbolic,
            r.solve_profile.numeric,
            r.solve_profile.solve,
            tm.layout,
            r.layout_method,
            tm.verify,
            tm.metrics,
            r.iterations,
            r.factorizations,
            r.symbolic_analyses,
            r.flips_delaunay,
            r.flips_horocycles,
            r.flips_solve,
            r.boundary_vertices,
            peak_rss_mb()
        );
        println!(
            "      angle sum error {:.1e}, boundary excess {:.2e}, cross-ratio error {:.1e}, inverted input faces {}, angle distortion p50/p95 {:.3}/{:.3}",
            r.verification.max_interior_angle_error,
            r.verification.max_boundary_angle_excess,
            r.verification.max_cross_ratio_error,
            r.inverted_faces,
            r.angle_distortion.p50,
            r.angle_distortion.p95
        );
        if let Some(why) = &r.fast_path_rejected {
            println!("      fast path rejected: {why}");
        }
        if std::env::var("HOROSPHERE_BENCH_LOG").is_ok() {
            for it in &r.iteration_log {
                println!(
                    "      T {:>4} iter {:>2}: pg {:.2e}, active {}, step {}, flips {}",
                    it.t, it.iter, it.max_projected_gradient, it.active, it.step, it.flips
                );
            }
        }
        let harmonic = if benching {
            harmonic_comparison(&mesh, out.pole, name)
        } else {
            serde_json::Value::Null
        };
        results.push(serde_json::json!({
            "harmonic_python": harmonic,
            "angle_distortion_p50": r.angle_distortion.p50,
            "angle_distortion_p95": r.angle_distortion.p95,
            "inverted_faces": r.inverted_faces,
            "size": name,
            "vertices": r.vertices,
            "wall_s": wall,
            "times": tm,
            "iterations": r.iterations,
            "factorizations": r.factorizations,
            "peak_rss_mb": peak_rss_mb(),
        }));
    }
    if let Ok(path) = std::env::var("HOROSPHERE_BENCH_JSON") {
        let text = serde_json::to_string_pretty(&results).unwrap_or_default();
        if let Err(e) = std::fs::write(&path, text) {
            eprintln!("cannot write {path}: {e}");
        }
    }
}
