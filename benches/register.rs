//! Benchmark of the registration stage (run: `cargo bench --bench register`).
//!
//! With `--bench` (as `cargo bench` passes): one subject sphere of 160,000
//! vertices (`synth::sphere::base_sphere`: geodesic sphere with random
//! edge splits and jitter, radius 100 mm) with two feature maps (sums of
//! 60 random von Mises bumps, about 10 degrees wide, pulled back through a
//! known warp of up to 10 degrees) registered to a level-6 template
//! (40,962 vertices) with the default options: sampling the subject on the
//! template grid (convex hull and point location), the three stages, and
//! the warp of all 160,000 vertices. Target: under 30 s wall on 2 cores.
//! Prints wall-clock and process CPU time; no pass/fail. Without `--bench`
//! (under `cargo test --all-targets`): 4,000 vertices to a level-3
//! template, as a smoke test.

use horosphere::mesh::shapes::icosphere;
use horosphere::mesh::{dot, norm, scale, Vec3};
use horosphere::register::grid::IcoGrid;
use horosphere::register::{register, zscore, RegisterOptions, Template};
use horosphere::synth::rng::{axis_angle, mat_vec, Rng};
use horosphere::synth::sphere::base_sphere;
use std::time::Instant;

fn process_cpu() -> f64 {
    std::fs::read_to_string("/proc/self/stat")
        .ok()
        .and_then(|s| {
            let rest = s.rsplit(')').next()?.split_whitespace().collect::<Vec<_>>();
            let u = rest.get(11)?.parse::<f64>().ok()?;
            let k = rest.get(12)?.parse::<f64>().ok()?;
            Some((u + k) / 100.0)
        })
        .unwrap_or(0.0)
}

fn unit(x: Vec3) -> Vec3 {
    scale(x, 1.0 / norm(x))
}

fn field(rng: &mut Rng, n: usize, kappa: f64) -> Vec<(Vec3, f64, f64)> {
    (0..n)
        .map(|_| (rng.unit_vector(), kappa * rng.range(0.7, 1.4), rng.normal()))
        .collect()
}

fn at(f: &[(Vec3, f64, f64)], x: Vec3) -> f64 {
    f.iter()
        .map(|(c, k, a)| a * (k * (dot(x, *c) - 1.0)).exp())
        .sum()
}

fn warp(x: Vec3) -> Vec3 {
    let swirls = [
        (unit([0.2, 0.3, 0.9]), 0.3, 0.5),
        (unit([-0.6, 0.7, -0.2]), -0.25, 0.6),
    ];
    swirls.iter().fold(x, |p, (c, t, s)| {
        let a = t * (-(1.0 - dot(*c, p)) / s).exp();
        unit(mat_vec(&axis_angle(*c, a), p))
    })
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let (n, level) = if full { (160_000, 6) } else { (4_000, 3) };
    let mut rng = Rng::new(7);
    let fields = [field(&mut rng, 60, 60.0), field(&mut rng, 60, 60.0)];
    let t0 = Instant::now();
    let mut srng = Rng::new(8);
    let sphere = base_sphere(n, 0.15, &mut srng).expect("base sphere");
    let sphere = horosphere::TriMesh {
        positions: sphere
            .positions
            .iter()
            .map(|p| scale(unit(*p), 100.0))
            .collect(),
        faces: sphere.faces,
    };
    let features: Vec<Vec<f64>> = fields
        .iter()
        .map(|f| {
            sphere
                .positions
                .iter()
                .map(|&p| at(f, warp(unit(p))))
                .collect()
        })
        .collect();
    let areas = IcoGrid::new(level).vertex_areas(level);
    let template = Template {
        level,
        names: vec!["a".into(), "b".into()],
        features: fields
            .iter()
            .map(|f| {
                let m: Vec<f64> = icosphere(level, 1.0)
                    .positions
                    .iter()
                    .map(|&x| at(f, x))
                    .collect();
                zscore(&m, &areas).expect("varying field")
            })
            .collect(),
        subjects: 1,
    };
    println!(
        "setup: {} subject vertices, template level {} ({} vertices): {:.2} s",
        n,
        level,
        areas.len(),
        t0.elapsed().as_secs_f64()
    );
    let cpu0 = process_cpu();
    let t = Instant::now();
    let reg =
        register(&sphere, &features, &template, &RegisterOptions::default()).expect("registration");
    let wall = t.elapsed().as_secs_f64();
    let cpu = process_cpu() - cpu0;
    let r = &reg.report;
    println!(
        "register: {wall:.2} s wall, {cpu:.2} s CPU (threads: {}); correlation {}; Jacobian {:.3}..{:.3}, folded {} + {}; iterations {:?}; flow steps {:?}",
        rayon::current_num_threads(),
        r.features
            .iter()
            .map(|f| format!("{} {:.3} -> {:.3}", f.name, f.before, f.after))
            .collect::<Vec<_>>()
            .join(", "),
        r.jacobian.min,
        r.jacobian.max,
        r.jacobian.folded,
        r.subject_folded,
        r.stages.iter().map(|s| s.iterations).collect::<Vec<_>>(),
        r.stages.iter().map(|s| s.flow_steps).collect::<Vec<_>>()
    );
    assert_eq!(r.jacobian.folded, 0);
}
