//! End-to-end tests of `horosphere run` on a small synthetic cohort made by
//! our own generator (`horosphere demo`, 4 subjects, 2,000 vertices per
//! hemisphere, one planted defect of each kind: stray piece, handle, hole,
//! duplicated vertices). The expectations come from the generator's
//! ground truth (`ground_truth.json`) and from properties that hold
//! whatever the numbers: linear interpolation is a convex combination, so
//! resampled values stay within the input's range; SHA-256 byte equality
//! of the outputs across thread counts, reruns and interrupted runs.

mod common;

use common::{copy_tree, manifest, qc, tree};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;

const BIN: &str = common::BIN;
const SUBJECTS: usize = 4;

fn scratch(tag: &str) -> PathBuf {
    common::scratch("cohort", tag)
}

/// The demo study (made once per test process).
fn study() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let d = scratch("study");
        common::demo_study(&d, SUBJECTS, 2000, 3, &[]);
        d
    })
}

fn run(manifest: &Path, extra: &[&str]) -> (i32, serde_json::Value, String) {
    let out = common::run_json_output(manifest, extra);
    (
        out.status.code().unwrap_or(-1),
        common::json(&out),
        common::stderr(&out),
    )
}

fn assert_same_tree(a: &Path, b: &Path) {
    let ta = tree(a);
    let tb = tree(b);
    let ka: Vec<_> = ta.keys().collect();
    let kb: Vec<_> = tb.keys().collect();
    assert_eq!(ka, kb, "different file sets");
    for (k, v) in &ta {
        assert!(tb[k] == *v, "{k} differs");
    }
}

/// The planted defect of each unit, from the ground truth.
fn planted() -> BTreeMap<(String, String), String> {
    let g: serde_json::Value =
        serde_json::from_slice(&std::fs::read(study().join("ground_truth.json")).unwrap()).unwrap();
    let mut out = BTreeMap::new();
    for s in g["subjects"].as_array().unwrap() {
        let id = s["participant_id"].as_str().unwrap().to_string();
        for h in s["hemispheres"].as_array().unwrap() {
            let kind = h["defect"]["kind"].as_str().unwrap_or("none").to_string();
            out.insert((id.clone(), h["hemi"].as_str().unwrap().to_string()), kind);
        }
    }
    out
}

/// Where the generator planted the defect of a unit (mm).
fn planted_at(subject: &str, hemi: &str) -> Vec<f64> {
    let g: serde_json::Value =
        serde_json::from_slice(&std::fs::read(study().join("ground_truth.json")).unwrap()).unwrap();
    for s in g["subjects"].as_array().unwrap() {
        if s["participant_id"] != subject {
            continue;
        }
        for h in s["hemispheres"].as_array().unwrap() {
            if h["hemi"] == hemi {
                return h["defect"]["at"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|x| x.as_f64().unwrap())
                    .collect();
            }
        }
    }
    panic!("no ground truth for {subject} {hemi}")
}

/// A finished native run with 2 threads (made once).
fn reference_run() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let d = scratch("ref");
        let m = manifest(&d, study(), &d.join("out"));
        let (code, v, err) = run(&m, &["--jobs", "2"]);
        assert_eq!(
            code, 0,
            "every unit goes through (the planted handle is cut): {err}"
        );
        assert_eq!(v["computed"], 2 * SUBJECTS as u64, "{v}");
        d.join("out")
    })
}

#[test]
fn demo_cohort_outcomes_follow_the_ground_truth() {
    let out = reference_run();
    let rows = qc(out);
    let truth = planted();
    assert_eq!(rows.len(), 2 * SUBJECTS);
    let mut kinds = Vec::new();
    for r in &rows {
        let kind = &truth[&(r["subject"].clone(), r["hemi"].clone())];
        kinds.push(kind.clone());
        let n: f64 = r["vertices"].parse().unwrap();
        assert!(n >= 1900.0, "{r:?}"); // a planted hole removes a few vertices
        match kind.as_str() {
            "none" => {
                assert_eq!(r["status"], "ok", "{r:?}");
                assert_eq!(r["genus"], "0");
                assert_eq!(r["boundary_loops"], "0");
            }
            "handle" => {
                // Found where it was planted, cut (its tube removed), and
                // the unit goes on to the sphere.
                assert_eq!(r["status"], "repaired", "{r:?}");
                assert_eq!(r["genus"], "1", "{r:?}");
                assert_eq!(r["handles_found"], "1", "{r:?}");
                assert_eq!(r["handles_cut"], "1", "{r:?}");
                let loop_mm: f64 = r["handle_loops_mm"].parse().unwrap();
                assert!(loop_mm > 0.0 && loop_mm < 30.0, "{r:?}");
                let at: Vec<f64> = r["handle_locations"]
                    .split(';')
                    .map(|x| x.parse().unwrap())
                    .collect();
                let truth = planted_at(&r["subject"], &r["hemi"]);
                let off = (0..3)
                    .map(|k| (at[k] - truth[k]).powi(2))
                    .sum::<f64>()
                    .sqrt();
                assert!(off < 8.0, "handle at {at:?}, planted at {truth:?}");
            }
            "hole" | "stray-component" | "duplicate-vertices" if !r["handles_found"].is_empty() => {
                assert_eq!(r["handles_found"], "0", "{r:?}");
                assert_eq!(r["handle_locations"], "", "{r:?}");
            }
            _ => {}
        }
        match kind.as_str() {
            "none" | "handle" => {}
            "hole" => {
                assert_eq!(r["status"], "repaired", "{r:?}");
                assert!(r["boundary_loops"].parse::<usize>().unwrap() >= 1);
                assert!(r["holes_filled"].parse::<usize>().unwrap() >= 1, "{r:?}");
            }
            "stray-component" => {
                assert_eq!(r["status"], "repaired", "{r:?}");
                assert!(r["components"].parse::<usize>().unwrap() >= 2);
                assert!(r["pieces_dropped"].parse::<usize>().unwrap() >= 1, "{r:?}");
            }
            "duplicate-vertices" => {
                assert_eq!(r["status"], "repaired", "{r:?}");
                assert!(r["vertices_merged"].parse::<usize>().unwrap() >= 1, "{r:?}");
            }
            other => panic!("unexpected defect kind {other}"),
        }
        if r["status"] != "failed" {
            // Distortion figures present and sane; landmarks fitted to a few
            // degrees (the generator jitters them by 3 degrees per component).
            let p50: f64 = r["angle_distortion_p50"].parse().unwrap();
            assert!((1.0..3.0).contains(&p50), "{r:?}");
            let rms: f64 = r["landmark_rms_deg"].parse().unwrap();
            assert!(rms < 20.0, "{r:?}");
            assert_eq!(r["inverted_faces"], "0", "{r:?}");
        }
    }
    kinds.sort();
    kinds.dedup();
    assert_eq!(
        kinds.len(),
        5,
        "all four defects and clean units: {kinds:?}"
    );

    // Cohort matrix: one column per finished unit on the level-3 sphere
    // (642 vertices), and linear resampling stays within the input range.
    let ok: Vec<&BTreeMap<String, String>> =
        rows.iter().filter(|r| r["status"] != "failed").collect();
    let g = horosphere::io::gifti::read(
        &out.join("group/space-icosphere3_desc-thickness_matrix.func.gii"),
    )
    .unwrap();
    assert_eq!(g.arrays.len(), ok.len());
    for (a, r) in g.arrays.iter().zip(&ok) {
        let unit = format!("{}_hemi-{}", r["subject"], r["hemi"]);
        assert_eq!(a.meta.get("Subject"), Some(unit.as_str()));
        let input = horosphere::io::gifti::read_shape(
            &study()
                .join(&r["subject"])
                .join(format!("{unit}_thickness.shape.gii")),
        )
        .unwrap();
        let lo = input.values.iter().copied().fold(f32::INFINITY, f32::min);
        let hi = input
            .values
            .iter()
            .copied()
            .fold(f32::NEG_INFINITY, f32::max);
        let v = a.data.to_f64();
        assert_eq!(v.len(), 642);
        let finite: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
        assert!(
            finite.len() >= 600,
            "{unit}: {} of 642 values",
            finite.len()
        );
        for x in finite {
            assert!(
                x >= f64::from(lo) - 1e-4 && x <= f64::from(hi) + 1e-4,
                "{unit}: {x} outside [{lo}, {hi}]"
            );
        }
    }
    let table =
        std::fs::read_to_string(out.join("group/space-icosphere3_desc-thickness_table.csv"))
            .unwrap();
    assert_eq!(table.lines().count(), ok.len() + 1);
    assert_eq!(table.lines().next().unwrap().split(',').count(), 643);

    // Every output has a sidecar whose hash is the file's.
    let files = tree(out);
    let mut checked = 0;
    for (name, bytes) in &files {
        if name.ends_with(".gii") || (name.ends_with(".csv")) {
            let stem = name.split('.').next().unwrap();
            let side: serde_json::Value =
                serde_json::from_slice(&files[&format!("{stem}.json")]).unwrap();
            assert_eq!(
                side["output"]["sha256"],
                horosphere::cohort::provenance::sha256_bytes(bytes),
                "{name}"
            );
            assert_eq!(side["GeneratedBy"]["Name"], "horosphere");
            assert!(!side["inputs"].as_array().unwrap().is_empty());
            checked += 1;
        }
    }
    assert!(checked > 20, "{checked}");
    let dd: serde_json::Value = serde_json::from_slice(&files["dataset_description.json"]).unwrap();
    assert_eq!(dd["GeneratedBy"][0]["Name"], "horosphere");
}

#[test]
fn one_thread_gives_the_bytes_of_two_and_a_rerun_recomputes_nothing() {
    let reference = reference_run();
    let d = scratch("jobs1");
    let out = d.join("out");
    let m = manifest(&d, study(), &out);
    let (code, v, _) = run(&m, &["--jobs", "1"]);
    assert_eq!(code, 0);
    assert_eq!(v["computed"], 2 * SUBJECTS as u64);
    assert_same_tree(reference, &out);
    let record = out.join("sub-kf01/sub-kf01_hemi-L_space-individual_desc-aligned_sphere.surf.gii");
    let before = std::fs::metadata(&record)
        .map(|m| m.modified().unwrap())
        .ok();
    let (_, v, _) = run(&m, &["--jobs", "2"]);
    // Every finished unit is skipped (a failed one would be retried).
    assert_eq!(v["skipped"], 2 * SUBJECTS as u64, "{v}");
    assert_eq!(v["computed"], 0, "{v}");
    let after = std::fs::metadata(&record)
        .map(|m| m.modified().unwrap())
        .ok();
    assert_eq!(before, after);
    assert_same_tree(reference, &out);
    // --force recomputes everything and gives the same bytes.
    let (_, v, _) = run(&m, &["--jobs", "2", "--force"]);
    assert_eq!(v["computed"], 2 * SUBJECTS as u64);
    assert_same_tree(reference, &out);
    // A damaged output is noticed and its unit recomputed.
    let victim =
        out.join("sub-kf02/sub-kf02_hemi-R_space-icosphere3_desc-aligned_thickness.shape.gii");
    if victim.exists() {
        std::fs::write(&victim, b"damaged").unwrap();
        let (_, v, _) = run(&m, &["--jobs", "2"]);
        assert_eq!(v["computed"], 1, "{v}");
        assert_same_tree(reference, &out);
    }
}

fn copy_study(to: &Path) {
    copy_tree(study(), to);
}

#[test]
fn a_corrupt_input_fails_its_unit_only_with_a_clear_message() {
    let reference = qc(reference_run());
    let d = scratch("corrupt");
    let root = d.join("study");
    copy_study(&root);
    // Cut the surface of a clean unit in half (invalid GZip/XML).
    let target = reference
        .iter()
        .find(|r| r["status"] == "ok")
        .map(|r| (r["subject"].clone(), r["hemi"].clone()))
        .unwrap();
    let surf = root
        .join(&target.0)
        .join(format!("{}_hemi-{}_white.surf.gii", target.0, target.1));
    let bytes = std::fs::read(&surf).unwrap();
    std::fs::write(&surf, &bytes[..bytes.len() / 2]).unwrap();
    let m = manifest(&d, &root, &d.join("out"));
    let (code, _, _) = run(&m, &["--jobs", "2"]);
    assert_eq!(code, 1);
    let rows = qc(&d.join("out"));
    for (r, want) in rows.iter().zip(&reference) {
        if (r["subject"].clone(), r["hemi"].clone()) == target {
            assert_eq!(r["status"], "failed");
            assert_eq!(r["failed_stage"], "read");
            assert!(
                r["error"].contains(&format!("{}_hemi-{}_white.surf.gii", target.0, target.1)),
                "{r:?}"
            );
        } else {
            assert_eq!(r["status"], want["status"], "{r:?}");
        }
    }
    // A wrong-length map is refused naming the file and the counts.
    let other = reference
        .iter()
        .filter(|r| r["status"] == "ok")
        .map(|r| (r["subject"].clone(), r["hemi"].clone()))
        .nth(1)
        .unwrap();
    let map = root
        .join(&other.0)
        .join(format!("{}_hemi-{}_thickness.shape.gii", other.0, other.1));
    horosphere::io::gifti::write_shape(&map, &[1.0, 2.0, 3.0], &Default::default()).unwrap();
    let (code, _, _) = run(&m, &["--jobs", "2"]);
    assert_eq!(code, 1);
    let rows = qc(&d.join("out"));
    let r = rows
        .iter()
        .find(|r| (r["subject"].clone(), r["hemi"].clone()) == other)
        .unwrap();
    assert_eq!(r["status"], "failed");
    assert!(
        r["error"].contains("_thickness.shape.gii") && r["error"].contains("3 values"),
        "{r:?}"
    );
}

#[cfg(unix)]
#[test]
fn a_killed_run_resumes_to_the_bytes_of_an_uninterrupted_one() {
    let reference = reference_run();
    let d = scratch("kill");
    let out = d.join("out");
    let m = manifest(&d, study(), &out);
    let mut child = Command::new(BIN)
        .arg("run")
        .arg(&m)
        .args(["--jobs", "1"])
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    // Kill as soon as the first unit is complete (its record is written
    // last), so the run is cut in the middle of the second unit or so.
    let first = out.join("sub-kf01/sub-kf01_hemi-L_desc-pipeline_record.json");
    let start = std::time::Instant::now();
    while !first.exists() && start.elapsed().as_secs() < 120 {
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    std::thread::sleep(std::time::Duration::from_millis(150));
    child.kill().unwrap(); // SIGKILL on Unix
    let status = child.wait().unwrap();
    assert!(
        !status.success(),
        "the run should have been killed before it finished"
    );
    assert!(!out.join("group/desc-cohort_qc.csv").exists());
    let (_, v, _) = run(&m, &["--jobs", "2"]);
    let skipped = v["skipped"].as_u64().unwrap();
    assert!(skipped >= 1 && skipped < 2 * SUBJECTS as u64, "{v}");
    assert_same_tree(reference, &out);
}

#[test]
fn the_demo_manifest_is_valid() {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/demo-cohort.toml");
    let m = horosphere::cohort::Manifest::read(&p).unwrap();
    assert_eq!(m.maps, ["thickness", "depth", "regions"]);
    for h in ["L", "R"] {
        let t = horosphere::align::read_template(&m.template_for(h).unwrap()).unwrap();
        assert_eq!(t.landmarks.len(), 7);
    }
}

/// The per-unit mode the Snakemake workflow uses (one process per unit,
/// then the cohort step) gives the bytes of the whole-cohort run.
#[test]
fn one_process_per_unit_gives_the_bytes_of_one_run() {
    let reference = reference_run();
    let d = scratch("perunit");
    let out = d.join("out");
    let m = manifest(&d, study(), &out);
    let list = Command::new(BIN)
        .arg("run")
        .arg(&m)
        .arg("--list")
        .output()
        .unwrap();
    assert!(list.status.success());
    let plan: serde_json::Value = serde_json::from_slice(&list.stdout).unwrap();
    let units = plan["units"].as_array().unwrap();
    assert_eq!(units.len(), 2 * SUBJECTS);
    for u in units {
        let (code, v, err) = run(
            &m,
            &[
                "--only",
                u["subject"].as_str().unwrap(),
                "--hemi",
                u["hemi"].as_str().unwrap(),
                "--units-only",
                "--allow-failed",
            ],
        );
        assert_eq!(code, 0, "{err}");
        assert_eq!(v["units"], 1);
        assert!(out.join(u["record"].as_str().unwrap()).is_file());
    }
    let (code, _, _) = run(&m, &["--cohort-only"]);
    assert_eq!(code, 0, "no unit failed");
    assert_same_tree(reference, &out);
}

/// The QC report `run` writes: one QC row per unit in QC-table order
/// (failed ones included), the research-use caution, pictures for every
/// finished unit, no absolute path; `horosphere report` with the study
/// folder gives the same bytes, and the same for any thread count.
#[test]
fn the_run_writes_a_report_with_one_row_per_unit() {
    let out = reference_run();
    let rows = qc(out);
    let html = std::fs::read_to_string(out.join("group/desc-cohort_report.html")).unwrap();
    let units: Vec<String> = html
        .split("data-unit=\"")
        .skip(1)
        .map(|s| s.split('"').next().unwrap().to_string())
        .collect();
    let want: Vec<String> = rows
        .iter()
        .map(|r| format!("{}_hemi-{}", r["subject"], r["hemi"]))
        .collect();
    assert_eq!(units, want);
    let failed = rows.iter().filter(|r| r["status"] == "failed").count();
    assert_eq!(
        html.matches("<span class=\"chip failed\">").count(),
        3 * failed
    );
    assert!(html.contains("not a medical device"));
    assert!(html.contains("trained analyst"));
    // Every cut handle shows in the topology findings with its loop length
    // and centre, as in the QC table (issue #10).
    let topo = html
        .split("id=\"topology-table\"")
        .nth(1)
        .and_then(|t| t.split("</table>").next())
        .expect("a topology table");
    let cut: Vec<_> = rows
        .iter()
        .filter(|r| !r["handles_cut"].is_empty() && r["handles_cut"] != "0")
        .collect();
    assert!(!cut.is_empty(), "the test cohort plants a handle");
    for r in cut {
        assert!(
            topo.contains(&format!(">{}</td>", r["handle_loops_mm"])),
            "{r:?}"
        );
        assert!(
            topo.contains(&format!(">{}</td>", r["handle_locations"])),
            "{r:?}"
        );
    }
    assert!(html.contains("data-protection"));
    // Two picture strips per finished unit, plus histograms and colour bars.
    let strips = html.matches("alt=\"area distortion of ").count();
    assert_eq!(strips, rows.len() - failed);
    assert!(html.matches("<img ").count() >= 4 * (rows.len() - failed) + 2);
    assert!(!html.contains(&*out.to_string_lossy()), "no absolute paths");
    assert!(
        !html.contains(&*study().to_string_lossy()),
        "no absolute paths"
    );
    // Sidecar with the report's hash.
    let side: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("group/desc-cohort_report.json")).unwrap())
            .unwrap();
    assert_eq!(
        side["output"]["sha256"],
        horosphere::cohort::provenance::sha256_bytes(html.as_bytes())
    );
    // The report command: same bytes with the study folder, any thread count.
    let d = scratch("report-cli");
    for jobs in ["1", "2"] {
        let p = d.join(format!("r{jobs}.html"));
        let o = Command::new(BIN)
            .arg("report")
            .arg(out)
            .arg("-o")
            .arg(&p)
            .arg("--study")
            .arg(study())
            .args(["--jobs", jobs, "--json"])
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        assert_eq!(v["summary"]["units"], rows.len());
        assert_eq!(v["summary"]["failed"], failed);
        assert_eq!(std::fs::read_to_string(&p).unwrap(), html, "jobs {jobs}");
    }
    // Without the study folder, unchanged surfaces are shown as spheres only.
    let p = d.join("nostudy.html");
    let o = Command::new(BIN)
        .arg("report")
        .arg(out)
        .arg("-o")
        .arg(&p)
        .output()
        .unwrap();
    assert!(o.status.success());
    let text = std::fs::read_to_string(&p).unwrap();
    assert!(text.contains("no study folder was given"));
}

#[test]
fn report_on_a_folder_that_is_not_a_run_output_is_a_clear_error() {
    let d = scratch("not-a-run");
    let o = Command::new(BIN)
        .arg("report")
        .arg(&d)
        .arg("-o")
        .arg(d.join("r.html"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("dataset_description.json"), "{err}");
    assert!(err.contains("horosphere run"), "{err}");
    assert!(!d.join("r.html").exists());
}

/// A report that cannot be written is an error (non-zero exit) but the
/// cohort files are complete.
#[test]
fn a_failed_report_keeps_the_cohort_results() {
    let reference = reference_run();
    let d = scratch("report-fails");
    let out = d.join("out");
    copy_tree(reference, &out);
    std::fs::remove_file(out.join("group/desc-cohort_qc.csv")).unwrap();
    // A folder where the report goes: the final rename must fail.
    let blocker = out.join("group/desc-cohort_report.html");
    std::fs::remove_file(&blocker).unwrap();
    std::fs::create_dir_all(blocker.join("x")).unwrap();
    let m = manifest(&d, study(), &out);
    let (code, v, err) = run(&m, &["--cohort-only", "--allow-failed"]);
    assert_eq!(code, 1, "{err}");
    assert!(v["report_error"].is_string(), "{v}");
    assert!(err.contains("QC report could not be written"), "{err}");
    assert_eq!(
        std::fs::read(out.join("group/desc-cohort_qc.csv")).unwrap(),
        std::fs::read(reference.join("group/desc-cohort_qc.csv")).unwrap()
    );
}

/// The report's per-face distortion (`report::load::face_distortion`, one
/// implementation) on the conformal sphere agrees with the mapper's own
/// figures in the QC table (`map::face_metrics`, another; nearest-rank
/// percentiles there, interpolated here).
#[test]
fn report_distortion_agrees_with_the_mappers_figures() {
    use horosphere::report::colour::percentile;
    let out = reference_run();
    let mut checked = 0;
    for r in qc(out).iter().filter(|r| r["status"] != "failed") {
        let unit = format!("{}_hemi-{}", r["subject"], r["hemi"]);
        let native = if r["status"] == "repaired" {
            out.join(&r["subject"])
                .join(format!("{unit}_space-native_desc-repaired_white.surf.gii"))
        } else {
            study()
                .join(&r["subject"])
                .join(format!("{unit}_white.surf.gii"))
        };
        let native = horosphere::io::read_mesh(&native).unwrap();
        let sphere = horosphere::io::read_mesh(&out.join(&r["subject"]).join(format!(
            "{unit}_space-individual_desc-conformal_sphere.surf.gii"
        )))
        .unwrap();
        let (lar, ang) = horosphere::report::load::face_distortion(&native, &sphere);
        let close = |ours: f64, col: &str, tol: f64| {
            let theirs: f64 = r[col].parse().unwrap();
            assert!(
                (ours - theirs).abs() <= tol * theirs.abs().max(0.1),
                "{unit} {col}: report {ours}, mapper {theirs}"
            );
        };
        // Spheres are stored in single precision: small tolerances.
        close(percentile(&ang, 0.5), "angle_distortion_p50", 0.01);
        close(percentile(&ang, 0.95), "angle_distortion_p95", 0.02);
        close(percentile(&lar, 0.05), "log_area_ratio_p5", 0.02);
        close(percentile(&lar, 0.95), "log_area_ratio_p95", 0.02);
        checked += 1;
    }
    assert!(checked >= 6, "{checked}");
}
