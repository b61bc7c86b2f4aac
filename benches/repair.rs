//! Benchmark: repair of a cortex-sized surface.
//!
//! In: an icosahedral sphere of level 7 (163,842 vertices, 327,680
//! triangles; about the size of one hemisphere's white surface, common
//! practice, from memory), vertices moved radially by a pseudo-random 0..3 mm,
//! with 12 holes punched around the icosahedron's vertices (angular radii
//! 0.5 to 11.5 degrees, so both the dynamic programme and the fan run),
//! 1% of the faces reversed and a seam of duplicated vertices along x = 0.
//! Out: the median wall time of `repair::repair` over 5 runs and the log's
//! figures, printed. Not a timed test: the figures go to docs/benchmarks.md.
//! Run with `cargo bench --bench repair`.

use horosphere::mesh::shapes::icosphere;
use horosphere::mesh::{dot, norm};
use horosphere::repair::{repair, FillMethod, RepairOptions};
use std::time::Instant;

fn main() {
    // `cargo bench` passes `--bench`; `cargo test --all-targets` does not, and
    // then a small sphere keeps the test run short (a smoke run, no figures).
    let bench = std::env::args().any(|a| a == "--bench");
    let full = icosphere(if bench { 7 } else { 4 }, 100.0);
    let mut m = full.clone();
    let mut s: u64 = 12345;
    let mut rand = move || {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (s >> 11) as f64 / (1u64 << 53) as f64
    };
    for p in &mut m.positions {
        let f = 1.0 + 0.03 * rand();
        for c in p.iter_mut() {
            *c *= f;
        }
    }
    let dirs = full.positions.clone();
    let angle = |a: [f64; 3], b: [f64; 3]| {
        (dot(a, b) / (norm(a) * norm(b)))
            .clamp(-1.0, 1.0)
            .acos()
            .to_degrees()
    };
    for v in 0..12 {
        let c = dirs[v];
        let r = 0.5 + v as f64;
        m.faces
            .retain(|t| t.iter().all(|&u| angle(dirs[u as usize], c) > r));
    }
    for t in &mut m.faces {
        if rand() < 0.01 {
            t.swap(1, 2);
        }
    }
    let n = m.n_vertices() as u32;
    let copies = m.positions.clone();
    m.positions.extend(copies);
    let pos = m.positions.clone();
    for t in &mut m.faces {
        if t.iter().map(|&v| pos[v as usize][0]).sum::<f64>() < 0.0 {
            *t = t.map(|v| v + n);
        }
    }
    println!(
        "input: {} vertices ({} duplicated), {} triangles",
        m.n_vertices(),
        n,
        m.n_faces()
    );
    let opts = RepairOptions::default();
    let mut times = Vec::new();
    let mut last = None;
    for _ in 0..5 {
        let t = Instant::now();
        let r = repair(&m, &opts).expect("the benchmark mesh is repairable");
        times.push(t.elapsed().as_secs_f64() * 1e3);
        last = Some(r);
    }
    times.sort_by(|a, b| a.total_cmp(b));
    let Some(r) = last else { return };
    let l = &r.log;
    let dp = l
        .holes
        .iter()
        .filter(|h| h.method != FillMethod::Fan)
        .count();
    let largest = l.holes.iter().map(|h| h.boundary_edges).max().unwrap_or(0);
    println!(
        "output: {} vertices, {} triangles, Euler characteristic {}",
        l.output_vertices, l.output_faces, l.euler_characteristic
    );
    println!(
        "merged {}, reoriented {}, holes {} ({} by DP, {} by fan, largest {} edges)",
        l.merge.vertices_merged,
        l.faces_reoriented.len(),
        l.holes.len(),
        dp,
        l.holes.len() - dp,
        largest
    );
    println!(
        "repair: median {:.0} ms (min {:.0}, max {:.0}) over {} runs",
        times[times.len() / 2],
        times[0],
        times[times.len() - 1],
        times.len()
    );
}
