//! Benchmark (not a test): `inspect` and the mesh readers on a
//! 163,842-vertex icosahedral sphere (level 7), the size of one cortical
//! hemisphere. Run with `cargo bench --bench inspect`; figures are recorded
//! in docs/benchmarks.md. Prints the median of repeated runs.

use horosphere::inspect::{inspect, InspectOptions};
use horosphere::io::{ply, read_mesh, write_mesh};
use horosphere::mesh::shapes::icosphere;
use std::time::Instant;

fn median_secs(reps: usize, mut f: impl FnMut()) -> f64 {
    let mut t: Vec<f64> = (0..reps)
        .map(|_| {
            let s = Instant::now();
            f();
            s.elapsed().as_secs_f64()
        })
        .collect();
    t.sort_by(f64::total_cmp);
    t[reps / 2]
}

fn main() {
    let mesh = icosphere(7, 100.0);
    println!(
        "mesh: {} vertices, {} faces",
        mesh.n_vertices(),
        mesh.n_faces()
    );
    let opts = InspectOptions::default();
    let r = inspect(&mesh, &opts).expect("inspect");
    assert!(r.ready_to_map);
    let t = median_secs(11, || {
        std::hint::black_box(inspect(&mesh, &opts).expect("inspect"));
    });
    println!("inspect (exact duplicates):       {:8.1} ms", t * 1e3);
    let tol = InspectOptions {
        duplicate_tolerance_mm: 0.01,
        ..opts
    };
    let t = median_secs(11, || {
        std::hint::black_box(inspect(&mesh, &tol).expect("inspect"));
    });
    println!("inspect (duplicates within 0.01 mm): {:5.1} ms", t * 1e3);

    let dir = std::env::temp_dir().join(format!("horosphere-bench-{}", std::process::id()));
    for name in ["s.ply", "s.obj", "s.off"] {
        let p = dir.join(name);
        let tw = median_secs(3, || write_mesh(&p, &mesh).expect("write"));
        let tr = median_secs(5, || {
            std::hint::black_box(read_mesh(&p).expect("read"));
        });
        let size = std::fs::metadata(&p).map(|m| m.len()).unwrap_or(0);
        println!(
            "{name}: {:6.1} MB, write {:7.1} ms, read {:7.1} ms",
            size as f64 / 1e6,
            tw * 1e3,
            tr * 1e3
        );
    }
    let p = dir.join("a.ply");
    ply::write_mesh_as(&p, &mesh, ply::PlyEncoding::Ascii).expect("write");
    let tr = median_secs(5, || {
        std::hint::black_box(read_mesh(&p).expect("read"));
    });
    println!("a.ply (ASCII): read {:7.1} ms", tr * 1e3);
    let _ = std::fs::remove_dir_all(&dir);
}
