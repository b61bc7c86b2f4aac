//! `horosphere demo`: the written study reads back, each surface inspects
//! exactly as the ground truth says, and the same command gives the same
//! bytes whatever the number of threads.
//!
//! Checks from outside the project: Euler's formula `V - E + F = 2 - 2g - b`
//! (Massey, "A basic course in algebraic topology", 1991) through
//! `horosphere::inspect`, and the layout of BIDS derivatives (participant
//! table columns, `sub-<label>` folders; Gorgolewski et al., "The brain
//! imaging data structure", Sci. Data 3, 2016). nibabel reads the same files
//! in tests/reference/test_demo_nibabel.py.

mod common;

use horosphere::inspect::{inspect, InspectOptions};
use horosphere::io::gifti;
use horosphere::mesh::intersect::self_intersections;
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

fn bin() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_horosphere"))
}

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("horosphere-demo-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    d
}

fn demo(out: &Path, threads: &str, extra: &[&str]) -> std::process::Output {
    Command::new(bin())
        .args(["demo", "--out"])
        .arg(out)
        .args(["--subjects", "5", "--vertices", "2000", "--seed", "7"])
        .args(extra)
        .env("RAYON_NUM_THREADS", threads)
        .output()
        .unwrap()
}

/// Relative path -> SHA-256 of every file under `dir`.
fn digests(dir: &Path) -> BTreeMap<String, String> {
    common::tree(dir)
        .into_iter()
        .map(|(rel, bytes)| {
            let h = Sha256::digest(bytes);
            let hex: String = h.iter().map(|b| format!("{b:02x}")).collect();
            (rel, hex)
        })
        .collect()
}

#[test]
fn demo_is_byte_identical_across_runs_and_threads() {
    let a = scratch("a");
    let o = demo(&a, "1", &[]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let first = digests(&a);
    // 5 top-level files + 5 subjects x 2 hemispheres x 5 files.
    assert_eq!(first.len(), 5 + 5 * 2 * 5, "{:?}", first.keys());
    std::fs::remove_dir_all(&a).unwrap();
    let o = demo(&a, "2", &[]);
    assert!(o.status.success());
    assert_eq!(digests(&a), first, "same command, two threads: same bytes");
    // A different seed changes the surfaces.
    let b = scratch("b");
    let o = Command::new(bin())
        .args(["demo", "--out"])
        .arg(&b)
        .args(["--subjects", "5", "--vertices", "2000", "--seed", "8"])
        .output()
        .unwrap();
    assert!(o.status.success());
    let other = digests(&b);
    let key = "sub-kf01/sub-kf01_hemi-L_white.surf.gii";
    assert_ne!(other.get(key), first.get(key));
    std::fs::remove_dir_all(&a).unwrap();
    std::fs::remove_dir_all(&b).unwrap();
}

#[test]
fn every_surface_inspects_as_the_ground_truth_says() {
    let out = scratch("truth");
    let o = demo(&out, "2", &[]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let truth: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("ground_truth.json")).unwrap()).unwrap();
    assert_eq!(truth["synthetic"], true);
    let tsv = std::fs::read_to_string(out.join("participants.tsv")).unwrap();
    let mut rows = tsv.lines();
    assert_eq!(rows.next(), Some("participant_id\tgroup\tage\tsex"));
    assert_eq!(rows.count(), 5);
    let subjects = truth["subjects"].as_array().unwrap();
    assert_eq!(subjects.len(), 5);
    let mut planted = 0;
    for s in subjects {
        let id = s["participant_id"].as_str().unwrap();
        assert!(tsv.contains(&format!("{id}\t{}\t", s["group"].as_str().unwrap())));
        for h in s["hemispheres"].as_array().unwrap() {
            let hemi = h["hemi"].as_str().unwrap();
            let stem = out.join(id).join(format!("{id}_hemi-{hemi}"));
            let file = |suffix: &str| PathBuf::from(format!("{}_{suffix}", stem.display()));
            let mesh = gifti::read_mesh(&file("white.surf.gii")).unwrap();
            assert_eq!(mesh.n_vertices() as u64, h["vertices"].as_u64().unwrap());
            let r = inspect(&mesh, &InspectOptions::default()).unwrap();
            let mut codes: Vec<&str> = r.reasons.iter().map(|x| x.code.as_str()).collect();
            codes.sort_unstable();
            let want: Vec<&str> = match h["defect"]["kind"].as_str() {
                None => vec![],
                Some("hole") => vec!["open"],
                Some("handle") => vec!["genus"],
                Some("stray-component") => vec!["components"],
                Some("duplicate-vertices") => vec!["duplicate_vertices", "open"],
                Some(k) => panic!("unknown defect {k}"),
            };
            planted += usize::from(!want.is_empty());
            // No self-intersections after the f32 rounding of GIFTI, except
            // faces touching across a duplicated seam at coincident vertices.
            for (f, g) in self_intersections(&mesh) {
                let pf = mesh.faces[f as usize].map(|v| mesh.positions[v as usize]);
                let pg = mesh.faces[g as usize].map(|v| mesh.positions[v as usize]);
                assert!(
                    h["defect"]["kind"] == "duplicate-vertices"
                        && pf.iter().any(|p| pg.contains(p)),
                    "{id} hemi-{hemi}: faces {f} and {g} cross"
                );
            }
            assert_eq!(codes, want, "{id} hemi-{hemi}");
            assert_eq!(r.ready_to_map, want.is_empty());
            // Maps: one value per vertex, in range.
            let t = gifti::read_shape(&file("thickness.shape.gii")).unwrap();
            assert_eq!(t.values.len(), mesh.n_vertices());
            let d = gifti::read_shape(&file("depth.shape.gii")).unwrap();
            assert_eq!(d.values.len(), mesh.n_vertices());
            assert!(d.values.iter().all(|&x| (0.0..=25.0).contains(&x)));
            let l = gifti::read_labels(&file("regions.label.gii")).unwrap();
            assert_eq!(l.values.len(), mesh.n_vertices());
            assert!(l.table.labels.iter().any(|x| x.name == "medial-wall"));
            if h["defect"].is_null() {
                // Thickness of human cortex, 1 to 4.5 mm (Fischl and Dale,
                // PNAS 97, 2000).
                assert!(t.values.iter().all(|&x| (1.0..=4.5).contains(&x)));
            }
            let csv = std::fs::read_to_string(file("landmarks.csv")).unwrap();
            let mut lines = csv.lines();
            assert_eq!(lines.next(), Some("name,vertex"));
            let lm = h["landmarks"].as_array().unwrap();
            for (line, l) in lines.zip(lm) {
                let (name, v) = line.split_once(',').unwrap();
                assert_eq!(name, l["name"].as_str().unwrap());
                let v: u64 = v.parse().unwrap();
                assert_eq!(v, l["vertex"].as_u64().unwrap());
                assert!((v as usize) < mesh.n_vertices());
            }
        }
    }
    assert_eq!(
        planted, 4,
        "one subject each with a hole, a handle, a stray piece, duplicates"
    );
    std::fs::remove_dir_all(&out).unwrap();
}

#[test]
fn bad_requests_are_refused_clearly() {
    let out = scratch("bad");
    let o = Command::new(bin())
        .args(["demo", "--out"])
        .arg(&out)
        .args(["--vertices", "500"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("--vertices is 500; expected 2000 to 200000"),
        "{err}"
    );
    assert!(!out.exists(), "nothing written");
    // A non-empty folder is refused without --overwrite.
    std::fs::create_dir_all(&out).unwrap();
    std::fs::write(out.join("keep.txt"), b"x").unwrap();
    let o = demo(&out, "2", &["--no-defects"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("is not empty"));
    assert_eq!(std::fs::read(out.join("keep.txt")).unwrap(), b"x");
    std::fs::remove_dir_all(&out).unwrap();
}
