//! Benchmark: generating a 160k-vertex synthetic subject with its maps.
//!
//! Run: `cargo bench --bench synth`; figures are recorded in
//! docs/benchmarks.md. Prints, for one hemisphere and for a whole subject
//! (two hemispheres, thickness, depth, regions, landmarks, and the defect
//! the plan gives it), the best and median wall time of several runs and,
//! on Linux, the mean CPU time summed over all threads (from the first
//! field of `/proc/self/task/*/schedstat`, nanoseconds on the CPU), which a
//! busy shared machine inflates less. Target (issue 3): a 160k-vertex
//! subject with its maps in under 2 s in a release build.

use horosphere::synth::cohort::{defect_plan, generate_subject, participants, CohortParams};
use horosphere::synth::maps::{place_landmarks, region_labels, thickness, ThicknessModel};
use horosphere::synth::{folded_surface, Hemi, SurfaceParams};
use std::time::{Duration, Instant};

/// CPU seconds of this process over all its threads (Linux), else `None`.
fn cpu_seconds() -> Option<f64> {
    let tasks = std::fs::read_dir("/proc/self/task").ok()?;
    let mut total = 0.0;
    for t in tasks {
        let stat = std::fs::read_to_string(t.ok()?.path().join("schedstat")).ok()?;
        total += stat.split_whitespace().next()?.parse::<f64>().ok()? * 1e-9;
    }
    Some(total)
}

/// Best and median wall time, and mean CPU seconds per run.
fn time<F: FnMut()>(runs: usize, mut f: F) -> (Duration, Duration, Option<f64>) {
    let c0 = cpu_seconds();
    let mut t: Vec<Duration> = (0..runs)
        .map(|_| {
            let s = Instant::now();
            f();
            s.elapsed()
        })
        .collect();
    let cpu = c0.zip(cpu_seconds()).map(|(a, b)| (b - a) / runs as f64);
    t.sort();
    (t[0], t[runs / 2], cpu)
}

fn show(label: &str, runs: usize, (best, median, cpu): (Duration, Duration, Option<f64>)) {
    let threads = rayon::current_num_threads();
    let cpu = cpu.map_or("n/a".to_string(), |c| format!("{c:.3} s"));
    println!(
        "{label}: best {:.3} s, median {:.3} s, cpu {cpu} ({runs} runs, {threads} threads)",
        best.as_secs_f64(),
        median.as_secs_f64()
    );
}

fn main() {
    // `cargo bench` passes `--bench`; `cargo test --all-targets` does not,
    // and then a small size and single runs keep the test run short (a
    // smoke run, no figures).
    let full = std::env::args().any(|a| a == "--bench");
    let n = if full { 160_000 } else { 20_000 };
    let runs = if full { 5 } else { 1 };
    let defect_runs = if full { 3 } else { 1 };
    let r = time(runs, || {
        let p = SurfaceParams {
            vertices: n,
            hemi: Hemi::Left,
            ..Default::default()
        };
        let s = folded_surface(&p, 1).expect("valid parameters");
        let t = thickness(&s, &ThicknessModel::default(), 1, |_| 0.0);
        let l = region_labels(&s, 1, 2.0);
        let m = place_landmarks(&s, 1, 3.0);
        std::hint::black_box((s, t, l, m));
    });
    show(&format!("synth/hemisphere-{n}"), runs, r);
    let params = CohortParams {
        subjects: 8,
        vertices: n,
        ..Default::default()
    };
    let people = participants(&params);
    let plan = defect_plan(&params);
    let clean = (0..params.subjects).find(|i| plan.iter().all(|p| p.0 != *i));
    if let Some(i) = clean {
        let r = time(runs, || {
            let s = generate_subject(&params, &people, i).expect("valid parameters");
            std::hint::black_box(s);
        });
        show(&format!("synth/subject-2x{n}"), runs, r);
    }
    for (i, hemi, kind) in plan {
        let r = time(defect_runs, || {
            let s = generate_subject(&params, &people, i).expect("valid parameters");
            std::hint::black_box(s);
        });
        show(
            &format!(
                "synth/subject-2x{n}, {} on hemi-{}",
                kind.label(),
                hemi.label()
            ),
            defect_runs,
            r,
        );
    }
}
