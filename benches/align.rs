//! Benchmark of the Moebius normalisation on a cortex-sized sphere.
//!
//! Input: the icosahedral sphere of level 7 (163,842 vertices; Kenner 1976)
//! with its own vertex areas as centring weights, moved by a seeded random
//! Moebius map (rapidity up to 2), and 20 exact landmarks whose template
//! positions are the unmoved vertices. Timed: area-weighted centring
//! (Springborn 2005), the Moebius landmark fit, and the whole `align` call
//! plus writing the aligned positions (no file I/O). Target: centring plus
//! Moebius fit under 0.3 s in a release build.
//!
//! Run: `cargo bench --bench align` (prints the minimum and median of 7 runs
//! and checks that the result undoes the map; figures are recorded in
//! docs/benchmarks.md). Under `cargo test --all-targets` (no `--bench`
//! argument) it makes one smoke run on a level-4 sphere, no figures; the
//! accuracy check still fails the run (exit status 1).

use horosphere::align::landmarks::{fit_mobius, FitOptions, Landmark};
use horosphere::align::template::{Template, TemplateLandmark};
use horosphere::align::{align, aligned_positions, centre, AlignOptions, CentringOptions};
use horosphere::mesh::shapes::icosphere;
use horosphere::mesh::{dist, Vec3};
use horosphere::moebius::Moebius;
use std::time::Instant;

fn stats(mut t: Vec<f64>) -> (f64, f64) {
    t.sort_by(f64::total_cmp);
    (t[0], t[t.len() / 2])
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let base = icosphere(if full { 7 } else { 4 }, 1.0);
    let n = base.n_vertices();
    let w = base.vertex_areas();
    let m = Moebius::random(2026, 2.0);
    let moved = m.apply_all(&base.positions);
    let verts: Vec<usize> = (0..20).map(|k| (k * 8191 + 17) % n).collect();
    let landmarks: Vec<Landmark> = verts
        .iter()
        .enumerate()
        .map(|(i, &v)| Landmark {
            name: format!("b{i}"),
            vertex: v,
            snap_mm: None,
        })
        .collect();
    let template = Template {
        landmarks: verts
            .iter()
            .enumerate()
            .map(|(i, &v)| {
                TemplateLandmark::from_direction(&format!("b{i}"), base.positions[v], 1.0)
            })
            .collect(),
        built: None,
    };
    let names: Vec<String> = landmarks.iter().map(|l| l.name.clone()).collect();
    let q: Vec<Vec3> = template.landmarks.iter().map(|l| l.direction()).collect();
    let reps = if full { 7 } else { 1 };
    let (mut t_centre, mut t_fit, mut t_all) = (Vec::new(), Vec::new(), Vec::new());
    let mut iterations = 0;
    let mut worst = 0.0f64;
    for _ in 0..reps {
        let t0 = Instant::now();
        let c = centre(&moved, &w, &CentringOptions::default()).expect("centring");
        let t1 = Instant::now();
        let p: Vec<Vec3> = verts.iter().map(|&v| c.transform.apply(moved[v])).collect();
        let f =
            fit_mobius(&p, &q, &vec![1.0; p.len()], &names, &FitOptions::default()).expect("fit");
        let t2 = Instant::now();
        t_centre.push((t1 - t0).as_secs_f64());
        t_fit.push((t2 - t1).as_secs_f64());
        iterations = c.iterations;
        std::hint::black_box(f);

        let t3 = Instant::now();
        let a = align(
            &moved,
            Some(&w),
            &landmarks,
            &template,
            &AlignOptions::default(),
        )
        .expect("align");
        let out = aligned_positions(&a.transform, &moved, 1.0);
        t_all.push(t3.elapsed().as_secs_f64());
        worst = out
            .iter()
            .zip(&base.positions)
            .map(|(x, y)| dist(*x, *y))
            .fold(0.0, f64::max);
    }
    if worst > 1e-9 {
        eprintln!("align benchmark: the alignment did not undo the map (largest error {worst:e})");
        std::process::exit(1);
    }
    if !full {
        println!("align benchmark: smoke run passed ({n} vertices); use `cargo bench --bench align` for figures");
        return;
    }
    let threads = rayon::current_num_threads();
    let (c_min, c_med) = stats(t_centre);
    let (f_min, f_med) = stats(t_fit);
    let (a_min, a_med) = stats(t_all);
    println!("align benchmark: {n} vertices, {threads} threads, {reps} runs");
    println!(
        "  centring ({iterations} Newton steps): min {:.4} s, median {:.4} s",
        c_min, c_med
    );
    println!(
        "  mobius fit (20 landmarks):        min {:.6} s, median {:.6} s",
        f_min, f_med
    );
    println!(
        "  centring + fit:                   min {:.4} s, median {:.4} s (target < 0.3 s)",
        c_min + f_min,
        c_med + f_med
    );
    println!(
        "  align() + aligned positions:      min {:.4} s, median {:.4} s",
        a_min, a_med
    );
    println!("  largest vertex error after alignment: {worst:.2e} (unit sphere)");
}
