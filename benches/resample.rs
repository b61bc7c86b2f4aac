//! Benchmark of the resampling stage (run: `cargo bench --bench resample`).
//!
//! With `--bench` (as `cargo bench` passes): a 160,000-vertex subject sphere (a Fibonacci lattice with jitter,
//! re-projected to radius 100 mm, then rotated) to the level-7 target
//! (163,842 vertices): the sphere checks, the convex hull, the grid and the
//! point location, then one linear map, then four more maps on the same
//! location; also building the level-8 target (655,362 vertices) and one
//! heat-kernel smoothing of a 163,842-vertex surface. Prints wall-clock
//! figures (best of a few runs); no pass/fail. Without `--bench` (under
//! `cargo test --all-targets`): the same steps at small sizes, as a smoke
//! test.

use horosphere::mesh::shapes::icosphere;
use horosphere::resample::hull::convex_hull;
use horosphere::resample::locate::Locator;
use horosphere::resample::smooth::{smooth_maps, SmoothOptions};
use horosphere::resample::target::{check_sphere, directions};
use horosphere::resample::{resample_located, InputMap, MapValues};
use std::time::Instant;

fn subject(n: usize) -> Vec<[f64; 3]> {
    let mut s = 0x1234_5678_9abc_def0u64;
    let mut rnd = || {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (s >> 11) as f64 / (1u64 << 53) as f64 - 0.5
    };
    let ga = std::f64::consts::PI * (3.0 - 5f64.sqrt());
    let h = (4.0 * std::f64::consts::PI / n as f64).sqrt();
    (0..n)
        .map(|i| {
            let z = 1.0 - (2.0 * i as f64 + 1.0) / n as f64;
            let r = (1.0 - z * z).sqrt();
            let t = ga * i as f64;
            let p = [
                r * t.cos() + 0.3 * h * rnd(),
                r * t.sin() + 0.3 * h * rnd(),
                z + 0.3 * h * rnd(),
            ];
            let l = (p[0] * p[0] + p[1] * p[1] + p[2] * p[2]).sqrt();
            // Rotation by 0.5 rad about x.
            let (c, sn) = (0.5f64.cos(), 0.5f64.sin());
            let q = [
                p[0] / l,
                c * p[1] / l - sn * p[2] / l,
                sn * p[1] / l + c * p[2] / l,
            ];
            [100.0 * q[0], 100.0 * q[1], 100.0 * q[2]]
        })
        .collect()
}

/// CPU time of the calling thread (s), from /proc/thread-self/schedstat
/// (Linux); 0 elsewhere. Under a loaded machine this is steadier than the
/// wall clock for the single-threaded steps.
fn thread_cpu() -> f64 {
    std::fs::read_to_string("/proc/thread-self/schedstat")
        .ok()
        .and_then(|s| {
            s.split_whitespace()
                .next()
                .and_then(|x| x.parse::<f64>().ok())
        })
        .map_or(0.0, |ns| ns * 1e-9)
}

/// CPU time of the whole process, all threads (s), from /proc/self/stat
/// (Linux, clock ticks of 10 ms); 0 elsewhere.
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

fn best<T>(runs: usize, mut f: impl FnMut() -> T) -> (f64, T) {
    let mut best = f64::INFINITY;
    let mut out = None;
    for _ in 0..runs {
        let t = Instant::now();
        let r = f();
        best = best.min(t.elapsed().as_secs_f64());
        out = Some(r);
    }
    match out {
        Some(r) => (best, r),
        None => (best, f()),
    }
}

fn main() -> horosphere::Result<()> {
    // `cargo bench` passes --bench: the full sizes. Without it (as under
    // `cargo test --all-targets`) a small smoke run keeps the suite fast.
    let full = std::env::args().any(|a| a == "--bench");
    let (n, level, steps) = if full {
        (160_000, 7, 100)
    } else {
        (5_000, 4, 5)
    };
    let pts = subject(n);
    let (t_target, target) = best(3, || icosphere(level, 100.0));
    let dirs = directions(&pts);
    let (t_check, _) = best(3, || check_sphere(&pts, 1e-3));
    let c0 = thread_cpu();
    let (t_hull, hull) = best(3, || convex_hull(&dirs));
    let c_hull = (thread_cpu() - c0) / 3.0;
    hull?;
    let c0 = process_cpu();
    let (t_loc, locator) = best(3, || Locator::new(&pts, None, 1e-3));
    let c_loc = (process_cpu() - c0) / 3.0;
    let locator = locator?;
    let c0 = process_cpu();
    let (t_locate, location) = best(3, || locator.locate(&target.positions));
    let c_locate = (process_cpu() - c0) / 3.0;
    let location = location?;
    let maps: Vec<InputMap> = (0..5)
        .map(|k| InputMap {
            name: format!("map{k}"),
            values: MapValues::Continuous(
                pts.iter().map(|p| p[0] * (k as f64 + 1.0) + p[2]).collect(),
            ),
        })
        .collect();
    let c0 = process_cpu();
    let (t_one, r1) = best(3, || {
        resample_located(&locator, &location, &maps[..1], None, None)
    });
    let c_one = (process_cpu() - c0) / 3.0;
    r1?;
    let (t_five, r5) = best(3, || {
        resample_located(&locator, &location, &maps, None, None)
    });
    r5?;
    let (t_l8, l8) = best(1, || icosphere(if full { 8 } else { 5 }, 100.0));
    println!(
        "resample benchmark ({} threads)",
        rayon::current_num_threads()
    );
    println!("subject vertices            {n}");
    println!("hull triangles              {}", locator.hull().faces.len());
    println!("target vertices (level {level})   {}", target.n_vertices());
    println!("build target level {level}        {:.3} s", t_target);
    println!("sphere check                {:.3} s", t_check);
    println!(
        "convex hull                 {:.3} s (thread CPU {:.3} s)",
        t_hull, c_hull
    );
    println!(
        "sphere check + hull + grid  {:.3} s (process CPU {:.2} s)",
        t_loc, c_loc
    );
    println!(
        "locate {} targets      {:.3} s (process CPU {:.2} s; fallback walks: {})",
        target.n_vertices(),
        t_locate,
        c_locate,
        location.n_fallback
    );
    println!("interpolate 1 map           {:.4} s", t_one);
    println!("interpolate 5 maps          {:.4} s", t_five);
    println!(
        "total, 1 map (hull+locate+map) {:.3} s wall, {:.2} s CPU; each extra map {:.4} s",
        t_loc + t_locate + t_one,
        c_loc + c_locate + c_one,
        (t_five - t_one) / 4.0
    );
    println!(
        "build target level {}        {:.3} s ({} vertices)",
        if full { 8 } else { 5 },
        t_l8,
        l8.n_vertices()
    );
    let x: Vec<f64> = target.positions.iter().map(|p| p[0]).collect();
    let y: Vec<f64> = target.positions.iter().map(|p| p[1] * p[2]).collect();
    for (steps, maps) in [(1usize, 1usize), (steps, 1), (steps, 3)] {
        let input: Vec<Vec<f64>> = [&x, &y, &x][..maps].iter().map(|v| v.to_vec()).collect();
        let opts = SmoothOptions {
            fwhm_mm: 10.0,
            steps,
        };
        let c0 = process_cpu();
        let (t, sm) = best(1, || smooth_maps(&target, &input, None, &opts));
        let c = process_cpu() - c0;
        sm?;
        println!(
            "smooth {maps} map(s), {} vertices, FWHM 10 mm, {steps:>3} steps  {t:.3} s wall, {c:.2} s CPU",
            target.n_vertices()
        );
    }
    Ok(())
}
