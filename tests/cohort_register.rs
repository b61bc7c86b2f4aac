//! End-to-end tests of the optional registration stage of `horosphere run`
//! (`[register]` in the manifest) on a small synthetic cohort made by our
//! own generator (`horosphere demo`, 4 subjects, 2,000 vertices, left
//! hemisphere, no defects). A first run without registration gives the
//! aligned spheres; `horosphere register-template` builds a depth template
//! (level 3) from them; a second run registers every unit to it.
//!
//! Expectations that hold whatever the numbers: the demons update lowers
//! the residual or is undone, so the depth correlation with the template
//! rises for every unit (Vercauteren et al., NeuroImage 45 (2009) S61-S72);
//! the warp is a diffeomorphism, so no triangle folds; outputs are the
//! same bytes for any thread count.

mod common;

use common::{labels, ok, qc, tree};
use std::path::{Path, PathBuf};
use std::process::Command;

const BIN: &str = common::BIN;
const SUBJECTS: usize = 4;

fn scratch(tag: &str) -> PathBuf {
    common::scratch("cohort-register", tag)
}

fn manifest(dir: &Path, name: &str, root: &Path, output: &Path, register: &str) -> PathBuf {
    common::write_manifest(
        &dir.join(name),
        root,
        output,
        "hemispheres = [\"L\"]\n",
        "[\"thickness\", \"depth\"]",
        &format!("[resample]\ntarget = \"icosphere:3\"\n{register}\n"),
    )
}

fn run(manifest: &Path, extra: &[&str]) -> serde_json::Value {
    let out = common::run_json_output(manifest, extra);
    assert_eq!(out.status.code(), Some(0), "{}", common::stderr(&out));
    common::json(&out)
}

#[test]
fn registration_stage_raises_the_feature_correlation_without_folds_for_any_thread_count() {
    let base = scratch("main");
    let study = base.join("study");
    common::demo_study(&study, SUBJECTS, 2000, 4, &["--no-defects"]);
    let subs = labels(&study);
    assert_eq!(subs.len(), SUBJECTS);

    // First run: aligned spheres, no registration.
    let plain_out = base.join("plain");
    let plain = manifest(&base, "plain.toml", &study, &plain_out, "");
    run(&plain, &["--jobs", "2"]);
    let plain_qc = qc(&plain_out);
    assert_eq!(plain_qc.len(), SUBJECTS);
    for row in &plain_qc {
        assert_eq!(row["status"], "ok", "{row:?}");
        for c in [
            "register_corr_before",
            "register_corr_after",
            "register_jacobian_min",
            "register_folded",
            "register_softened",
            "register_identity_fallback",
        ] {
            assert_eq!(row[c], "", "{c} filled with the stage off");
        }
    }

    // Template from the aligned spheres and the native depth maps (no
    // defects: the aligned sphere has the native vertex order).
    // The second feature is the mean curvature of the native surface,
    // written by `horosphere curvature` (the run computes the same values
    // itself for the built-in feature `mean_curvature`).
    let mut table = String::from("subject,sphere,depth,mean_curvature\n");
    for s in &subs {
        let curv = base.join(format!("{s}_curv.shape.gii"));
        let summary: serde_json::Value = serde_json::from_str(&ok(Command::new(BIN)
            .arg("curvature")
            .arg(study.join(format!("{s}/{s}_hemi-L_white.surf.gii")))
            .arg("-o")
            .arg(&curv)
            .arg("--json")
            .output()
            .unwrap()))
        .unwrap();
        // A closed folded surface of about brain size: the area-weighted
        // mean curvature is positive and of the order of 1/(50 mm).
        let hm = summary["area_weighted_mean"].as_f64().unwrap();
        assert!(hm > 0.005 && hm < 0.05, "{s}: mean curvature {hm}");
        assert!(
            summary["min"].as_f64().unwrap() < 0.0,
            "{s}: no concave vertex"
        );
        table.push_str(&format!(
            "{s},{}/{s}/{s}_hemi-L_space-individual_desc-aligned_sphere.surf.gii,{}/{s}/{s}_hemi-L_depth.shape.gii,{}\n",
            plain_out.display(),
            study.display(),
            curv.display()
        ));
    }
    std::fs::write(base.join("table.csv"), table).unwrap();
    ok(Command::new(BIN)
        .args(["register-template", "--cohort"])
        .arg(base.join("table.csv"))
        .arg("-o")
        .arg(base.join("tpl-L"))
        .args(["--level", "3", "--rounds", "1"])
        .output()
        .unwrap());

    let section = "[register]\nenabled = true\ntemplate = \"tpl-{hemi}\"\nfeatures = [\"depth\", \"mean_curvature\"]\n";
    let out1 = base.join("reg1");
    let out2 = base.join("reg2");
    let m1 = manifest(&base, "reg1.toml", &study, &out1, section);
    let m2 = manifest(&base, "reg2.toml", &study, &out2, section);
    let s1 = run(&m1, &["--jobs", "1"]);
    run(&m2, &["--jobs", "2"]);
    assert_eq!(s1["computed"], SUBJECTS, "{s1}");

    // Same bytes with 1 and 2 threads (the manifests differ only in the
    // output folder, which no output records).
    let (t1, t2) = (tree(&out1), tree(&out2));
    assert_eq!(t1.keys().collect::<Vec<_>>(), t2.keys().collect::<Vec<_>>());
    for (k, v) in &t1 {
        if k.ends_with(".html") {
            continue;
        }
        assert!(t2[k] == *v, "{k} differs between --jobs 1 and --jobs 2");
    }

    let rows = qc(&out1);
    assert_eq!(rows.len(), SUBJECTS);
    for (s, row) in subs.iter().zip(&rows) {
        assert_eq!(row["status"], "ok", "{row:?}");
        let stem = format!("{s}/{s}_hemi-L");
        let sphere = format!("{stem}_space-individual_desc-registered_sphere.surf.gii");
        assert!(t1.contains_key(&sphere), "{sphere} missing");
        assert!(t1.contains_key(&format!(
            "{stem}_space-individual_desc-registered_sphere.json"
        )));
        // The maps are resampled from the registered sphere and named so.
        for map in ["thickness", "depth"] {
            assert!(
                t1.contains_key(&format!(
                    "{stem}_space-icosphere3_desc-registered_{map}.shape.gii"
                )),
                "{s}: registered {map} missing"
            );
            assert!(!t1.contains_key(&format!(
                "{stem}_space-icosphere3_desc-aligned_{map}.shape.gii"
            )));
        }
        // The registered sphere differs from the aligned one (it moved).
        assert!(
            t1[&sphere] != t1[&format!("{stem}_space-individual_desc-aligned_sphere.surf.gii")]
        );
        let record: serde_json::Value =
            serde_json::from_slice(&t1[&format!("{stem}_desc-pipeline_record.json")]).unwrap();
        let r = &record["register"];
        let before = r["corr_before"].as_f64().unwrap();
        let after = r["corr_after"].as_f64().unwrap();
        assert!(
            after > before + 0.01,
            "{s}: depth correlation {before} -> {after}"
        );
        assert!(before > 0.0 && after <= 1.0, "{s}: {before} -> {after}");
        assert_eq!(r["folded"], 0, "{s}");
        let jmin = r["jacobian_min"].as_f64().unwrap();
        assert!(jmin > 0.0, "{s}: Jacobian min {jmin}");
        assert!(r["iterations"].as_u64().unwrap() > 0, "{s}");
        assert_eq!(record["options"]["register"]["features"][0], "depth");
        assert_eq!(
            record["options"]["register"]["features"][1],
            "mean_curvature"
        );
        assert_eq!(r["features"].as_array().map(|a| a.len()), Some(2), "{r}");
        // QC columns carry the record's figures.
        assert_eq!(row["register_folded"], "0");
        assert_eq!(row["register_identity_fallback"], "false", "{row:?}");
        assert_eq!(
            row["register_softened"],
            r["softened_triangles"].to_string(),
            "{row:?}"
        );
        let qb: f64 = row["register_corr_before"].parse().unwrap();
        let qa: f64 = row["register_corr_after"].parse().unwrap();
        assert_eq!((qb, qa), (before, after));
    }

    // The stage's options enter the unit key: a changed step recomputes.
    let section2 = section.replace("enabled = true", "enabled = true\nstep = 0.2");
    let m3 = manifest(&base, "reg1.toml", &study, &out1, &section2);
    let s3 = run(&m3, &["--jobs", "2"]);
    assert_eq!(s3["computed"], SUBJECTS, "{s3}");
    let s4 = run(&m3, &["--jobs", "2"]);
    assert_eq!(s4["computed"], 0, "{s4}");
    let _ = std::fs::remove_dir_all(&base);
}

#[test]
fn bad_register_sections_are_clear_errors() {
    let base = scratch("bad");
    let check = |section: &str, want: &[&str]| {
        let m = manifest(&base, "m.toml", &base, &base.join("out"), section);
        let out = Command::new(BIN)
            .args(["run", "--list"])
            .arg(&m)
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr).into_owned()
            + &String::from_utf8_lossy(&out.stdout);
        assert!(!out.status.success(), "{section}: accepted");
        for w in want {
            assert!(err.contains(w), "{section}: `{w}` not in {err}");
        }
    };
    check(
        "[register]\nenabled = true\n",
        &["register.template", "missing"],
    );
    check(
        "[register]\nenabled = true\ntemplate = \"nowhere-{hemi}\"\n",
        &["register.template", "nowhere-L", "template.json"],
    );
    std::fs::create_dir_all(base.join("tpl")).unwrap();
    std::fs::write(base.join("tpl/template.json"), "{}").unwrap();
    check(
        "[register]\nenabled = true\ntemplate = \"tpl\"\nfeatures = [\"sulc\"]\n",
        &["register.features", "sulc", "inputs.maps"],
    );
    check(
        "[register]\nenabled = true\ntemplate = \"tpl\"\nstep = 2.0\n",
        &["register.step"],
    );
    check(
        "[register]\nenabled = true\ntemplate = \"tpl\"\nsmoth = 1\n",
        &["smoth"],
    );
    let _ = std::fs::remove_dir_all(&base);
}
