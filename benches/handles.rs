//! Benchmark: locate and cut five small handles on a cortex-sized surface.
//!
//! In: a synthetic folded hemisphere of 160,000 vertices
//! ([`folded_surface`], our own generator) with five handles planted one
//! after another by the generator's defect module (each a thin three-quad
//! tube joining two faces up to 8 mm apart, sites kept 12 mm apart), genus
//! 5. Out: the median wall time of [`cut_handles`] over 5 runs (default
//! options: loops up to 30 mm cut, tubes removed), the loop lengths and
//! where they lie against the planted places, printed. Not a timed test:
//! the figures go to docs/benchmarks.md. Run with
//! `cargo bench --bench handles`; without `--bench` (as under
//! `cargo test --all-targets`) a 5,000-vertex smoke run.

use horosphere::handles::{cut_handles, HandleOptions};
use horosphere::mesh::dist;
use horosphere::synth::defects::{plant, DefectKind};
use horosphere::synth::rng::Rng;
use horosphere::synth::surface::{folded_surface, Hemi, SurfaceParams};
use std::time::Instant;

fn main() {
    let bench = std::env::args().any(|a| a == "--bench");
    let params = SurfaceParams {
        vertices: if bench { 160_000 } else { 5_000 },
        hemi: Hemi::Left,
        ..Default::default()
    };
    let seed = 11;
    let mut s = folded_surface(&params, seed).expect("synthetic surface");
    let mut rng = Rng::new(seed);
    let mut avoid: Vec<u32> = Vec::new();
    let mut planted = Vec::new();
    let n_handles = if bench { 5 } else { 2 };
    for _ in 0..n_handles {
        let e = plant(&s, DefectKind::Handle, &mut rng, &avoid).expect("a place for the handle");
        let nf = e.mesh.n_faces();
        avoid.extend(e.mesh.faces[nf - 6..].iter().flatten().copied());
        planted.push(e.record.at);
        s.mesh = e.mesh;
    }
    let m = &s.mesh;
    println!(
        "input: {} vertices, {} triangles, {} planted handles",
        m.n_vertices(),
        m.n_faces(),
        planted.len()
    );
    let opts = HandleOptions::default();
    let runs = if bench { 5 } else { 1 };
    let mut times = Vec::new();
    let mut last = None;
    for _ in 0..runs {
        let t = Instant::now();
        let r = cut_handles(m, &opts).expect("the handles are cut");
        times.push(t.elapsed().as_secs_f64() * 1e3);
        last = Some(r);
    }
    times.sort_by(|a, b| a.total_cmp(b));
    let Some(r) = last else { return };
    assert_eq!(r.genus, 0, "every planted handle is cut");
    assert_eq!(r.handles.len(), planted.len());
    for h in &r.handles {
        let off = planted
            .iter()
            .map(|p| dist(*p, h.centre))
            .fold(f64::INFINITY, f64::min);
        println!(
            "handle: loop {:.2} mm, {} vertices, {:.1} mm from the nearest planted place, tube removed {:.1} mm^2",
            h.length_mm,
            h.vertices.len(),
            off,
            h.removed_area_mm2
        );
        assert!(off < 8.0, "a handle found away from every planted place");
    }
    println!(
        "cut_handles: median {:.0} ms over {} runs (min {:.0}, max {:.0})",
        times[times.len() / 2],
        runs,
        times[0],
        times[times.len() - 1]
    );
}
