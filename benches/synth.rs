//! Benchmark: generating a 160k-vertex synthetic subject with its maps.
//!
//! Run: `cargo bench --bench synth`. Prints, for one hemisphere and for a
//! whole subject (two hemispheres, thickness, depth, regions, landmarks),
//! the best and median wall time of several runs. Target (issue 3): a
//! 160k-vertex subject with its maps in under 2 s in a release build.

use horosphere::synth::cohort::{generate_subject, participants, CohortParams};
use horosphere::synth::maps::{place_landmarks, region_labels, thickness, ThicknessModel};
use horosphere::synth::{folded_surface, Hemi, SurfaceParams};
use std::time::{Duration, Instant};

fn time<F: FnMut()>(runs: usize, mut f: F) -> (Duration, Duration) {
    let mut t: Vec<Duration> = (0..runs)
        .map(|_| {
            let s = Instant::now();
            f();
            s.elapsed()
        })
        .collect();
    t.sort();
    (t[0], t[runs / 2])
}

fn main() {
    let n = 160_000;
    let runs = 5;
    let threads = rayon::current_num_threads();
    let (best, median) = time(runs, || {
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
    println!(
        "synth/hemisphere-{n}: best {:.3} s, median {:.3} s ({runs} runs, {threads} threads)",
        best.as_secs_f64(),
        median.as_secs_f64()
    );
    let params = CohortParams {
        subjects: 4,
        vertices: n,
        ..Default::default()
    };
    let people = participants(&params);
    // Subject index 0 of this plan: whatever defect it carries is included.
    let (best, median) = time(runs, || {
        let s = generate_subject(&params, &people, 0).expect("valid parameters");
        std::hint::black_box(s);
    });
    println!(
        "synth/subject-2x{n}: best {:.3} s, median {:.3} s ({runs} runs, {threads} threads)",
        best.as_secs_f64(),
        median.as_secs_f64()
    );
}
