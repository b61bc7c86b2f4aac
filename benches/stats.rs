//! Benchmark of the vertex-wise linear model: 40,962 vertices (icosphere
//! level 6) by 100 units with 4 design columns (intercept, group, age,
//! sex), plus Benjamini-Hochberg q. Target: under 2 s. Data are synthetic
//! (a fixed linear congruential generator), so the run is reproducible.

use horosphere::stats::{design::Design, fdr, glm};
use std::time::Instant;

fn main() {
    let (n, nv) = (100usize, 40_962usize);
    let mut state: u64 = 12345;
    let mut rnd = move || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((state >> 11) as f64) / ((1u64 << 53) as f64)
    };
    let mut x = Vec::with_capacity(n * 4);
    for i in 0..n {
        x.extend_from_slice(&[
            1.0,
            (i % 2) as f64,
            40.0 + 40.0 * rnd(),
            f64::from(u8::from(rnd() < 0.5)),
        ]);
    }
    let d = Design {
        names: vec![
            "Intercept".into(),
            "group[T.b]".into(),
            "age".into(),
            "sex[T.M]".into(),
        ],
        x,
        rows: n,
        factors: Vec::new(),
    };
    let y: Vec<Vec<f32>> = (0..n)
        .map(|_| (0..nv).map(|_| 2.5 + rnd() as f32).collect())
        .collect();
    let t0 = Instant::now();
    let r = glm::fit(&d, &[0.0, 1.0, 0.0, 0.0], &y).unwrap_or_else(|e| panic!("{e}"));
    let q = fdr::bh_q(&r.p);
    let dt = t0.elapsed().as_secs_f64();
    let sig = q.iter().filter(|v| **v < 0.05).count();
    println!("stats: {nv} vertices x {n} units x 4 columns: {dt:.3} s (target < 2 s); {sig} with q < 0.05 under the null");
}
