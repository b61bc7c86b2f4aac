//! Benchmark: a 256^3 mask to a closed surface (`volume::extract`: threshold,
//! cavity filling, largest piece, marching cubes, affine), target under 2 s.
//!
//! In: a synthetic folded blob (a ball of radius 100 voxels whose radius is
//! modulated by folds, +-12%, with a hollow inside and a few stray voxels),
//! anisotropic oblique affine (1 x 1 x 1.2 mm, rotated). Out: the median
//! wall time of 3 runs and the surface figures, printed. Not a timed test:
//! the figures go to docs/benchmarks.md. Run with `cargo bench --bench volume`;
//! without `--bench` (as under `cargo test --all-targets`) a 48^3 smoke run.

use horosphere::volume::affine::{Affine, AffineSource};
use horosphere::volume::{extract, ExtractOptions, Volume};
use std::time::Instant;

fn blob(n: usize) -> Vec<f64> {
    let c = (n as f64 - 1.0) / 2.0;
    let r0 = 0.39 * n as f64;
    let mut v = Vec::with_capacity(n * n * n);
    for k in 0..n {
        for j in 0..n {
            for i in 0..n {
                let (x, y, z) = (i as f64 - c, j as f64 - c, k as f64 - c);
                let r = (x * x + y * y + z * z).sqrt();
                let th = (z / r.max(1e-9)).acos();
                let ph = y.atan2(x);
                let fold = 0.08 * (7.0 * ph).sin() * (5.0 * th).sin()
                    + 0.04 * (13.0 * ph + 3.0 * th).sin();
                let inside = r < r0 * (1.0 + fold) && r > 0.2 * r0;
                v.push(if inside { 1.0 } else { 0.0 });
            }
        }
    }
    // Stray voxels (dropped as smaller pieces).
    for s in 0..5 {
        v[3 + 7 * s + n * (2 + n * 2)] = 1.0;
    }
    v
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let n = if full { 256 } else { 48 };
    let (c, s) = (0.2f64.cos(), 0.2f64.sin());
    let affine = Affine {
        m: [
            [c, -s, 0.0, -128.0],
            [s, c, 0.0, -110.0],
            [0.0, 0.0, 1.2, -90.0],
        ],
    };
    let vol = Volume {
        dims: [n, n, n],
        values: blob(n),
        affine,
        affine_source: AffineSource::Sform,
        space: "NIFTI_XFORM_SCANNER_ANAT".into(),
    };
    let opts = ExtractOptions::default();
    let runs = if full { 3 } else { 1 };
    let mut times = Vec::new();
    let mut last = None;
    for _ in 0..runs {
        let t0 = Instant::now();
        let r = extract(&vol, &opts).unwrap_or_else(|e| panic!("{e}"));
        times.push(t0.elapsed().as_secs_f64());
        last = Some(r);
    }
    // Phases of one run (mask steps, marching cubes).
    let t0 = Instant::now();
    let (solid, _) = horosphere::volume::mask::solidify(&vol.values, vol.dims, 0.5)
        .unwrap_or_else(|e| panic!("{e}"));
    let t_mask = t0.elapsed().as_secs_f64();
    let t1 = Instant::now();
    let _ = horosphere::volume::mc::march(&solid, None);
    let t_mc = t1.elapsed().as_secs_f64();
    println!("volume: phases: mask steps {t_mask:.3} s, marching cubes {t_mc:.3} s");
    times.sort_by(f64::total_cmp);
    let med = times[times.len() / 2];
    let (mesh, rep) = last.unwrap_or_else(|| panic!("no run"));
    let chi = mesh.n_vertices() as i64 - (3 * mesh.n_faces() / 2) as i64 + mesh.n_faces() as i64;
    println!(
        "volume: {n}^3 mask to surface: median {med:.3} s of {runs} (target < 2 s); {} vertices, {} faces, chi {chi}, {} cavity voxels filled, {} pieces, threads {}",
        rep.vertices,
        rep.faces,
        rep.mask.cavity_voxels_filled,
        rep.mask.pieces,
        rayon::current_num_threads()
    );
}
