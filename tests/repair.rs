//! `horosphere repair` on the command line: files in, repaired surface, mask
//! of created vertices (GIFTI shape) and JSON log out; bad input gives a
//! clear message and leaves no output. The library itself is tested in
//! `src/repair/tests.rs`. Index: round trip with default mask path, other
//! formats and flags, refusal of a non-manifold edge, bad flags, the JSON
//! layout documentation.

use horosphere::mesh::shapes::icosphere;
use horosphere::mesh::{dot, norm};
use horosphere::repair::{repair, RepairLog, RepairOptions};
use horosphere::TriMesh;
use std::ffi::OsStr;
use std::path::PathBuf;

fn temp_dir(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("horosphere-repair-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn horosphere(args: &[&OsStr]) -> std::process::Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_horosphere"))
        .args(args)
        .output()
        .unwrap()
}

/// Level-3 icosphere of radius 50 mm without the faces within `deg` degrees
/// of vertices 0 (small hole) and 3 (large hole).
fn holed_sphere(deg_small: f64, deg_large: f64) -> TriMesh {
    let full = icosphere(3, 50.0);
    let mut m = full.clone();
    let p = full.positions.clone();
    let angle = |a: [f64; 3], b: [f64; 3]| {
        (dot(a, b) / (norm(a) * norm(b)))
            .clamp(-1.0, 1.0)
            .acos()
            .to_degrees()
    };
    m.faces.retain(|t| {
        t.iter().all(|&v| {
            angle(p[v as usize], p[0]) > deg_small && angle(p[v as usize], p[3]) > deg_large
        })
    });
    m
}

#[derive(serde::Deserialize)]
struct LogFile {
    input: String,
    mask: String,
    options: RepairOptions,
    repair: RepairLog,
}

#[test]
fn repairs_a_file_and_writes_mask_and_log() {
    let dir = temp_dir("round");
    let src = dir.join("holed.obj");
    let m = holed_sphere(0.1, 25.0);
    horosphere::io::write_mesh(&src, &m).unwrap();
    let out = dir.join("fixed.surf.gii");
    let log = dir.join("fixed.json");
    let run = horosphere(&[
        "repair".as_ref(),
        src.as_os_str(),
        "-o".as_ref(),
        out.as_os_str(),
        "--json".as_ref(),
        log.as_os_str(),
        "--max-dp-hole".as_ref(),
        "12".as_ref(),
    ]);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let text = String::from_utf8_lossy(&run.stdout);
    assert!(text.contains("filled 2 holes adding 1 vertices"), "{text}");

    // The files agree with the library run on the same mesh (the OBJ keeps
    // full precision; the GIFTI surface stores float32).
    let expect = repair(
        &m,
        &RepairOptions {
            max_dp_hole_edges: 12,
            ..Default::default()
        },
    )
    .unwrap();
    let got = horosphere::io::read_mesh(&out).unwrap();
    assert_eq!(got.faces, expect.mesh.faces);
    assert_eq!(got.n_vertices(), expect.mesh.n_vertices());
    for (a, b) in got.positions.iter().zip(&expect.mesh.positions) {
        for k in 0..3 {
            assert!((a[k] - b[k]).abs() <= 1e-5 * b[k].abs().max(1.0));
        }
    }
    let mask_path = dir.join("fixed.added.shape.gii");
    let mask = horosphere::io::gifti::read_shape(&mask_path).unwrap();
    assert_eq!(mask.values.len(), got.n_vertices());
    let ones: Vec<u32> = (0..mask.values.len() as u32)
        .filter(|&v| mask.values[v as usize] == 1.0)
        .collect();
    assert!(mask.values.iter().all(|&x| x == 0.0 || x == 1.0));
    assert_eq!(ones, expect.log.added_vertices);
    assert_eq!(ones.len(), 1);

    let doc: LogFile = serde_json::from_slice(&std::fs::read(&log).unwrap()).unwrap();
    assert_eq!(doc.repair, expect.log);
    assert_eq!(doc.options.max_dp_hole_edges, 12);
    assert!(doc.input.ends_with("holed.obj"));
    assert!(doc.mask.ends_with("fixed.added.shape.gii"));
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn other_formats_and_flags() {
    let dir = temp_dir("flags");
    // A seam of duplicated vertices 1e-4 mm apart, written as PLY; welded
    // with --merge-tolerance, written as OFF with an explicit mask path.
    let full = icosphere(2, 40.0);
    let mut m = full.clone();
    let n = m.n_vertices() as u32;
    m.positions
        .extend(full.positions.iter().map(|p| [p[0] + 1e-4, p[1], p[2]]));
    for t in m.faces.iter_mut().skip(full.n_faces() / 2) {
        *t = t.map(|v| v + n);
    }
    let src = dir.join("seam.ply");
    horosphere::io::write_mesh(&src, &m).unwrap();
    let out = dir.join("welded.off");
    let mask = dir.join("masks").join("welded-mask.shape.gii");
    let run = horosphere(&[
        "repair".as_ref(),
        src.as_os_str(),
        "-o".as_ref(),
        out.as_os_str(),
        "--mask-out".as_ref(),
        mask.as_os_str(),
        "--merge-tolerance".as_ref(),
        "0.001".as_ref(),
        "--hole-weight".as_ref(),
        "min-area".as_ref(),
    ]);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let got = horosphere::io::read_mesh(&out).unwrap();
    assert_eq!(got.faces, full.faces);
    let values = horosphere::io::gifti::read_shape(&mask).unwrap().values;
    assert_eq!(values.len(), full.n_vertices());
    assert!(values.iter().all(|&x| x == 0.0));
    assert!(!dir.join("welded.added.shape.gii").exists());
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn non_manifold_input_is_refused_without_output() {
    let dir = temp_dir("nm");
    let mut m = icosphere(1, 50.0);
    let [a, b, _] = m.faces[0];
    m.positions.push([0.0, 0.0, 0.0]);
    let c = (m.n_vertices() - 1) as u32;
    m.faces.push([a, b, c]);
    let src = dir.join("fin.obj");
    horosphere::io::write_mesh(&src, &m).unwrap();
    let out = dir.join("never.surf.gii");
    let run = horosphere(&[
        "repair".as_ref(),
        src.as_os_str(),
        "-o".as_ref(),
        out.as_os_str(),
    ]);
    assert_eq!(run.status.code(), Some(1));
    let err = String::from_utf8_lossy(&run.stderr);
    let (lo, hi) = (a.min(b), a.max(b));
    assert!(
        err.contains("fin.obj") && err.contains(&format!("vertices {lo} and {hi} has 3 faces")),
        "{err}"
    );
    let left: Vec<_> = std::fs::read_dir(&dir).unwrap().collect();
    assert_eq!(left.len(), 1, "only the input stays");
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn genus_over_the_limit_is_reported_not_attempted() {
    let dir = temp_dir("genus");
    let src = dir.join("torus.obj");
    horosphere::io::write_mesh(&src, &horosphere::mesh::shapes::torus(10.0, 2.0, 32, 12)).unwrap();
    let out = dir.join("never.obj");
    let args = |g: &'static str| -> Vec<&OsStr> {
        vec![
            "repair".as_ref(),
            src.as_os_str(),
            "-o".as_ref(),
            out.as_os_str(),
            "--cut-handles".as_ref(),
            "--max-genus".as_ref(),
            g.as_ref(),
        ]
    };
    let run = horosphere(&args("0"));
    assert_eq!(run.status.code(), Some(1));
    let err = String::from_utf8_lossy(&run.stderr);
    assert!(
        err.contains("genus 1") && err.contains("limit 0") && err.contains("not attempted"),
        "{err}"
    );
    assert!(!out.exists());
    // Within the limit the handle is cut.
    let run = horosphere(&args("1"));
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let m = horosphere::io::read_mesh(&out).unwrap();
    assert_eq!(
        m.n_vertices() as i64 - 3 * m.n_faces() as i64 / 2 + m.n_faces() as i64,
        2
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn bad_flags_are_refused() {
    let dir = temp_dir("bad");
    let src = dir.join("s.obj");
    horosphere::io::write_mesh(&src, &icosphere(1, 10.0)).unwrap();
    let out = dir.join("o.obj");
    for flags in [
        ["--merge-tolerance", "-1"],
        ["--merge-tolerance", "nan"],
        ["--max-dp-hole", "5000"],
        ["--hole-weight", "nonsense"],
        ["--max-genus", "40"],
        ["--max-handle-mm", "-3"],
    ] {
        let mut args: Vec<&OsStr> = vec![
            "repair".as_ref(),
            src.as_os_str(),
            "-o".as_ref(),
            out.as_os_str(),
        ];
        args.extend(flags.iter().map(|s| OsStr::new(*s)));
        let run = horosphere(&args);
        assert!(!run.status.success(), "{flags:?}");
        assert!(!out.exists());
    }
    let run = horosphere(&[
        "repair".as_ref(),
        dir.join("missing.obj").as_os_str(),
        "-o".as_ref(),
        out.as_os_str(),
    ]);
    assert_eq!(run.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&run.stderr).contains("missing.obj"));
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn every_json_field_is_documented() {
    // docs/repair-json.md promises every field of the --json file.
    let doc = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/docs/repair-json.md"))
        .unwrap();
    let dir = temp_dir("doc");
    let src = dir.join("h.obj");
    let mut m = holed_sphere(0.1, 25.0);
    m.faces.push([0, 0, 1]);
    horosphere::io::write_mesh(&src, &m).unwrap();
    let out = dir.join("h.surf.gii");
    let log = dir.join("h.json");
    let run = horosphere(&[
        "repair".as_ref(),
        src.as_os_str(),
        "-o".as_ref(),
        out.as_os_str(),
        "--json".as_ref(),
        log.as_os_str(),
        "--max-dp-hole".as_ref(),
        "12".as_ref(),
    ]);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&log).unwrap()).unwrap();
    fn walk(v: &serde_json::Value, doc: &str, missing: &mut Vec<String>) {
        match v {
            serde_json::Value::Object(map) => {
                for (k, x) in map {
                    if !doc.contains(&format!("`{k}`")) {
                        missing.push(k.clone());
                    }
                    walk(x, doc, missing);
                }
            }
            serde_json::Value::Array(items) => {
                for x in items {
                    walk(x, doc, missing);
                }
            }
            _ => {}
        }
    }
    let mut missing = Vec::new();
    walk(&json, &doc, &mut missing);
    assert!(missing.is_empty(), "undocumented fields: {missing:?}");
    std::fs::remove_dir_all(&dir).unwrap();
}
