#[cfg(test)]
mod t {
    use crate::synth::*;
    use std::io::Write;
    #[test]
    #[ignore]
    fn dump() {
        for (hemi, name) in [(Hemi::Left, "L"), (Hemi::Right, "R")] {
            let p = SurfaceParams { vertices: 40_000, hemi, ..Default::default() };
            let s = folded_surface(&p, 3).unwrap();
            let t = maps::thickness(&s, &maps::ThicknessModel::default(), 3, |_| 0.0);
            let mut f = std::fs::File::create(format!("/tmp/synth/{name}.obj")).unwrap();
            for (p, d) in s.mesh.positions.iter().zip(&t) {
                writeln!(f, "v {} {} {} {}", p[0], p[1], p[2], d).unwrap();
            }
            for q in &s.mesh.faces {
                writeln!(f, "f {} {} {}", q[0] + 1, q[1] + 1, q[2] + 1).unwrap();
            }
        }
    }
    #[test]
    #[ignore]
    fn probe() {
        for n in [15_000usize, 150_000] {
            for seed in 0..3u64 {
                let p = SurfaceParams { vertices: n, ..Default::default() };
                let t = std::time::Instant::now();
                let s = folded_surface(&p, seed).unwrap();
                let dt = t.elapsed();
                let dmax = s.depth.iter().cloned().fold(0.0, f64::max);
                let dmean = s.depth.iter().sum::<f64>() / s.depth.len() as f64;
                let (lo, hi) = s.mesh.bounding_box();
                println!("n {n} seed {seed}: area {:.1} cm2, vol {:.0} cm3, sulci {} seeds {}, depth max {dmax:.1} mean {dmean:.1}, bbox {:?} {:?} {:?}", s.mesh.area()/100.0, s.mesh.signed_volume()/1000.0, s.field.sulci.len(), s.field.network.seeds.len(), lo, hi, dt);
            }
        }
    }
}
