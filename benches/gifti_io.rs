//! Benchmark: GIFTI read and write of a cortex-sized surface.
//!
//! In: an icosahedral sphere of level 7 (163,842 vertices, 327,680
//! triangles; the size of one hemisphere's white surface, about 120k to
//! 180k vertices from a 1 mm MRI, common practice, from memory). Out: the
//! vertices are moved radially by a pseudo-random 0..3 mm so that the
//! coordinates compress like a real surface's. Out: the median wall time of parse + to_mesh and of to_bytes, for each encoding,
//! printed as a table. Not a timed test: the figures go to
//! docs/benchmarks.md. Run with `cargo bench --bench gifti_io`.

use horosphere::io::gifti::{self, Encoding, Gifti, WriteOptions};
use horosphere::mesh::shapes::icosphere;
use std::path::Path;
use std::time::Instant;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(|a, b| a.total_cmp(b));
    v[v.len() / 2]
}

/// zlib alone on the surface's raw little-endian bytes, at a few levels.
fn zlib_levels(mesh: &horosphere::TriMesh) {
    use std::io::Write;
    let mut raw = Vec::new();
    for p in &mesh.positions {
        for c in p {
            raw.extend_from_slice(&(*c as f32).to_le_bytes());
        }
    }
    for t in &mesh.faces {
        for v in t {
            raw.extend_from_slice(&(*v as i32).to_le_bytes());
        }
    }
    println!("zlib on the raw arrays ({:.2} MB):", raw.len() as f64 / 1e6);
    for level in [1, 2, 3, 6] {
        let t = Instant::now();
        let mut e = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::new(level));
        e.write_all(&raw).expect("zlib");
        let z = e.finish().expect("zlib");
        println!(
            "  level {level}: {:.2} MB in {:.1} ms",
            z.len() as f64 / 1e6,
            t.elapsed().as_secs_f64() * 1e3
        );
    }
}

/// The sphere with every vertex moved radially by a pseudo-random 0..3 mm,
/// so the coordinates are as incompressible as a real surface's.
fn jittered(mut mesh: horosphere::TriMesh) -> horosphere::TriMesh {
    let mut s: u64 = 12345;
    for p in &mut mesh.positions {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let f = 1.0 + 0.03 * ((s >> 11) as f64 / (1u64 << 53) as f64);
        for c in p.iter_mut() {
            *c *= f;
        }
    }
    mesh
}

fn main() {
    let mesh = jittered(icosphere(7, 100.0));
    let g = Gifti::from_mesh(&mesh);
    let path = Path::new("bench.surf.gii");
    println!(
        "mesh: {} vertices, {} triangles",
        mesh.n_vertices(),
        mesh.n_faces()
    );
    println!("encoding          file MB   write ms   read+to_mesh ms");
    zlib_levels(&mesh);
    for encoding in [
        Encoding::GZipBase64Binary,
        Encoding::Base64Binary,
        Encoding::Ascii,
    ] {
        let opts = WriteOptions {
            encoding,
            ..WriteOptions::default()
        };
        let reps = 7;
        let mut wt = Vec::new();
        let mut bytes = Vec::new();
        for _ in 0..reps {
            let t = Instant::now();
            bytes = gifti::to_bytes(&g, &opts).expect("write");
            wt.push(t.elapsed().as_secs_f64() * 1e3);
        }
        let mut rt = Vec::new();
        for _ in 0..reps {
            let t = Instant::now();
            let back = gifti::parse(&bytes, path)
                .and_then(|g| g.to_mesh(path))
                .expect("read");
            rt.push(t.elapsed().as_secs_f64() * 1e3);
            assert_eq!(back.n_faces(), mesh.n_faces());
        }
        println!(
            "{:<16} {:>8.2} {:>10.1} {:>17.1}",
            encoding.as_str(),
            bytes.len() as f64 / 1e6,
            median(wt),
            median(rt)
        );
    }
}
