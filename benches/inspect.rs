//! Benchmark (not a test): `inspect` and the mesh readers on a
//! 163,842-vertex icosahedral sphere (level 7), the size of one cortical
//! hemisphere. Run with `cargo bench --bench inspect`; figures are recorded
//! in docs/benchmarks.md. Prints the median wall time of repeated runs and,
//! on Linux, the mean CPU time summed over all threads (from
//! `/proc/self/task/*/schedstat`), which a busy shared machine inflates less.

use horosphere::inspect::{inspect, InspectOptions};
use horosphere::io::{ply, read_mesh, write_mesh};
use horosphere::mesh::shapes::icosphere;
use std::time::Instant;

/// CPU time of this process in seconds, summed over its threads (Linux);
/// `None` elsewhere.
fn cpu_secs() -> Option<f64> {
    let mut ns = 0u64;
    for task in std::fs::read_dir("/proc/self/task").ok()? {
        let path = task.ok()?.path().join("schedstat");
        let text = std::fs::read_to_string(path).ok()?;
        ns += text.split_whitespace().next()?.parse::<u64>().ok()?;
    }
    Some(ns as f64 * 1e-9)
}

/// Median wall time and mean CPU time (seconds) of `reps` runs of `f`.
fn measure(reps: usize, mut f: impl FnMut()) -> (f64, Option<f64>) {
    let cpu0 = cpu_secs();
    let mut t: Vec<f64> = (0..reps)
        .map(|_| {
            let s = Instant::now();
            f();
            s.elapsed().as_secs_f64()
        })
        .collect();
    let cpu = match (cpu0, cpu_secs()) {
        (Some(a), Some(b)) => Some((b - a) / reps as f64),
        _ => None,
    };
    t.sort_by(f64::total_cmp);
    (t[reps / 2], cpu)
}

fn show(label: &str, (wall, cpu): (f64, Option<f64>)) {
    match cpu {
        Some(c) => println!(
            "{label:<38} wall {:7.1} ms   cpu {:7.1} ms",
            wall * 1e3,
            c * 1e3
        ),
        None => println!("{label:<38} wall {:7.1} ms", wall * 1e3),
    }
}

fn main() {
    // `cargo bench` passes `--bench`; `cargo test --all-targets` does not, and
    // then a small sphere keeps the test run short (a smoke run, no figures).
    let full = std::env::args().any(|a| a == "--bench");
    let mesh = icosphere(if full { 7 } else { 2 }, 100.0);
    println!(
        "mesh: {} vertices, {} faces",
        mesh.n_vertices(),
        mesh.n_faces()
    );
    let opts = InspectOptions::default();
    let r = inspect(&mesh, &opts).expect("inspect");
    assert!(r.ready_to_map);
    show(
        "inspect (exact duplicates)",
        measure(11, || {
            std::hint::black_box(inspect(&mesh, &opts).expect("inspect"));
        }),
    );
    let tol = InspectOptions {
        duplicate_tolerance_mm: 0.01,
        ..opts
    };
    show(
        "inspect (duplicates within 0.01 mm)",
        measure(11, || {
            std::hint::black_box(inspect(&mesh, &tol).expect("inspect"));
        }),
    );

    let dir = std::env::temp_dir().join(format!("horosphere-bench-{}", std::process::id()));
    for name in ["s.ply", "s.obj", "s.off"] {
        let p = dir.join(name);
        show(
            &format!("write {name}"),
            measure(3, || write_mesh(&p, &mesh).expect("write")),
        );
        let size = std::fs::metadata(&p).map(|m| m.len()).unwrap_or(0);
        show(
            &format!("read {name} ({:.1} MB)", size as f64 / 1e6),
            measure(5, || {
                std::hint::black_box(read_mesh(&p).expect("read"));
            }),
        );
    }
    let p = dir.join("a.ply");
    ply::write_mesh_as(&p, &mesh, ply::PlyEncoding::Ascii).expect("write");
    show(
        "read ASCII PLY",
        measure(5, || {
            std::hint::black_box(read_mesh(&p).expect("read"));
        }),
    );
    let _ = std::fs::remove_dir_all(&dir);
}
