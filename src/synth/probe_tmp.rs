#[cfg(test)]
mod t {
    use crate::synth::*;
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
                println!("n {n} seed {seed}: area {:.1} cm2, vol {:.0} cm3, sulci {}, len {:.0}, depth max {dmax:.1} mean {dmean:.1}, bbox {:?} {:?} {:?}", s.mesh.area()/100.0, s.mesh.signed_volume()/1000.0, s.field.sulci.len(), s.field.sulci.iter().map(|x| x.length).sum::<f64>(), lo, hi, dt);
            }
        }
    }
}
