//! Determinism audit: every command gives the same bytes with one and with
//! two threads (`RAYON_NUM_THREADS`, and `--jobs` for `run`), and again on
//! a repeated run (the report once per thread count: it is the slowest). Inputs: a synthetic cohort from our own generator (4
//! subjects, 2,000 vertices per hemisphere, seed 3). Platform notes:
//! docs/determinism.md.

mod common;

use common::tree;
use std::collections::BTreeMap;
use std::path::Path;
use std::process::Command;

const BIN: &str = common::BIN;

/// Run `args` (`{o}` = the output folder of this attempt) with `threads`
/// rayon threads; return stdout and every file written under the folder.
fn attempt(
    base: &Path,
    tag: &str,
    threads: usize,
    args: &[String],
) -> (Vec<u8>, BTreeMap<String, Vec<u8>>) {
    let o = base.join(tag);
    let _ = std::fs::remove_dir_all(&o);
    std::fs::create_dir_all(&o).unwrap();
    let args: Vec<String> = args
        .iter()
        .map(|a| a.replace("{o}", &o.display().to_string()))
        .collect();
    let out = Command::new(BIN)
        .args(&args)
        .env("RAYON_NUM_THREADS", threads.to_string())
        .output()
        .unwrap();
    assert!(
        out.status.success() || args[0] == "run",
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    // Paths of this attempt's folder may be echoed; make them comparable.
    let mut stdout = String::from_utf8_lossy(&out.stdout).replace(&o.display().to_string(), "{o}");
    // The second documented exception: `register` ends its line with the
    // wall-clock seconds ("...; 0.1 s"); everything before must be equal.
    if args[0] == "register" {
        if let Some(cut) = stdout.rfind("; ").filter(|_| stdout.ends_with(" s\n")) {
            stdout.truncate(cut);
        }
    }
    let stdout = stdout.into_bytes();
    // A file may name its own output folder (the demo README quotes its
    // command line): compare with that folder replaced by `{o}`.
    let needle = o.display().to_string().into_bytes();
    let files = tree(&o)
        .into_iter()
        .map(|(k, v)| {
            let v = replace_bytes(&v, &needle, b"{o}");
            let v = if k.ends_with(".json") {
                without_clock(v)
            } else {
                v
            };
            (k, v)
        })
        .collect();
    (stdout, files)
}

/// The one documented exception (docs/determinism.md): the `map --report`
/// JSON holds wall-clock seconds per phase (`times`, and the time fields of
/// `solve_profile`). They are removed before comparing; the evaluation
/// count and every other field must be equal.
fn without_clock(v: Vec<u8>) -> Vec<u8> {
    let Ok(mut j) = serde_json::from_slice::<serde_json::Value>(&v) else {
        return v;
    };
    let Some(obj) = j.as_object_mut() else {
        return v;
    };
    if obj.remove("times").is_none() {
        return v;
    }
    if let Some(p) = obj.get_mut("solve_profile").and_then(|p| p.as_object_mut()) {
        p.retain(|k, _| k == "evaluations");
    }
    serde_json::to_vec(&j).unwrap()
}

fn replace_bytes(v: &[u8], from: &[u8], to: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(v.len());
    let mut i = 0;
    while i < v.len() {
        if v[i..].starts_with(from) {
            out.extend_from_slice(to);
            i += from.len();
        } else {
            out.push(v[i]);
            i += 1;
        }
    }
    out
}

/// The command gives equal bytes with 1 thread, 2 threads and 2 threads again.
fn same_bytes(base: &Path, name: &str, args: &[String], repeat: bool) -> BTreeMap<String, Vec<u8>> {
    let (s1, t1) = attempt(base, &format!("{name}-1"), 1, args);
    let (s2, t2) = attempt(base, &format!("{name}-2"), 2, args);
    assert!(!t1.is_empty() || !s1.is_empty(), "{name}: no output at all");
    assert_eq!(s1, s2, "{name}: stdout differs between 1 and 2 threads");
    assert_eq!(
        t1.keys().collect::<Vec<_>>(),
        t2.keys().collect::<Vec<_>>(),
        "{name}: file sets differ"
    );
    for (k, v) in &t1 {
        assert!(t2[k] == *v, "{name}: {k} differs between 1 and 2 threads");
    }
    if repeat {
        let (s3, t3) = attempt(base, &format!("{name}-2b"), 2, args);
        assert_eq!(s2, s3, "{name}: stdout differs on a repeated run");
        assert!(t2 == t3, "{name}: files differ on a repeated run");
    }
    t1
}

fn s(x: &str) -> String {
    x.to_string()
}

#[test]
fn every_command_gives_the_same_bytes_for_any_thread_count_and_on_repeat() {
    let base = std::env::temp_dir().join(format!("horosphere-determinism-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&base);
    std::fs::create_dir_all(&base).unwrap();
    let p = |x: &Path| x.display().to_string();

    // demo
    same_bytes(
        &base,
        "demo",
        &[
            s("demo"),
            s("--out"),
            s("{o}/study"),
            s("--subjects"),
            s("4"),
            s("--vertices"),
            s("2000"),
            s("--seed"),
            s("3"),
        ],
        true,
    );
    let study = base.join("demo-1/study");

    // run (the cohort): --jobs 1 with 1 rayon thread against --jobs 2 with 2.
    let pipelines = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines");
    let manifest = common::manifest(&base, &study, Path::new("out"));
    let run = |tag: &str, jobs: &str| {
        attempt(
            &base,
            tag,
            jobs.parse().unwrap(),
            &[
                s("run"),
                p(&manifest),
                s("--jobs"),
                s(jobs),
                s("--output"),
                s("{o}/out"),
                s("--allow-failed"),
            ],
        )
    };
    let (_, r1) = run("run-1", "1");
    let (_, r2) = run("run-2", "2");
    assert!(r1.len() > 20, "run wrote only {} files", r1.len());
    assert!(
        r1 == r2,
        "run: outputs differ between --jobs 1 and --jobs 2"
    );
    let out = base.join("run-1/out");

    // A unit that is ready to map as it is (no planted defect): its
    // landmark vertices and map lengths refer to the native surface.
    let mut unit = None;
    let mut ready = Vec::new();
    for sub in ["sub-kf01", "sub-kf02", "sub-kf03", "sub-kf04"] {
        for h in ["L", "R"] {
            let surf = study
                .join(sub)
                .join(format!("{sub}_hemi-{h}_white.surf.gii"));
            let o = Command::new(BIN)
                .arg("inspect")
                .arg(&surf)
                .arg("--json")
                .output()
                .unwrap();
            let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
            if v["ready_to_map"] == true {
                if unit.is_none() {
                    unit = Some((sub, h));
                }
                ready.push((sub, h));
            }
        }
    }
    let (sub, h) = unit.expect("no clean unit in the demo cohort");
    let f = |suffix: &str| p(&study.join(sub).join(format!("{sub}_hemi-{h}_{suffix}")));
    let white = f("white.surf.gii");

    same_bytes(
        &base,
        "inspect",
        &[s("inspect"), white.clone(), s("--json")],
        true,
    );
    same_bytes(
        &base,
        "repair",
        &[
            s("repair"),
            white.clone(),
            s("-o"),
            s("{o}/r.surf.gii"),
            s("--json"),
            s("{o}/r.json"),
        ],
        true,
    );
    let m = same_bytes(
        &base,
        "map",
        &[
            s("map"),
            white.clone(),
            s("-o"),
            s("{o}/s.surf.gii"),
            s("--report"),
            s("{o}/s.json"),
        ],
        true,
    );
    assert!(m.contains_key("s.surf.gii"));
    let sphere = p(&base.join("map-1/s.surf.gii"));
    same_bytes(
        &base,
        "align",
        &[
            s("align"),
            sphere,
            s("--landmarks"),
            f("landmarks.csv"),
            s("--template"),
            p(&pipelines.join(format!("demo-template-{h}.toml"))),
            s("--surface"),
            white.clone(),
            s("-o"),
            s("{o}/a.surf.gii"),
            s("--report"),
            s("{o}/a.json"),
        ],
        true,
    );
    let aligned = p(&base.join("align-1/a.surf.gii"));
    same_bytes(
        &base,
        "resample",
        &[
            s("resample"),
            s("--sphere"),
            aligned.clone(),
            s("--data"),
            f("thickness.shape.gii"),
            s("--target"),
            s("icosphere:4"),
            s("--fwhm"),
            s("5"),
            s("--surface"),
            white,
            s("-o"),
            s("{o}/m"),
            s("--json"),
        ],
        true,
    );
    same_bytes(
        &base,
        "resample-labels",
        &[
            s("resample"),
            s("--sphere"),
            aligned,
            s("--data"),
            f("regions.label.gii"),
            s("--data"),
            f("thickness.shape.gii"),
            s("--target"),
            s("icosphere:4"),
            s("-o"),
            s("{o}/m"),
            s("--json"),
        ],
        true,
    );
    same_bytes(
        &base,
        "sphere",
        &[
            s("sphere"),
            s("icosphere:5"),
            s("-o"),
            s("{o}/ico5.surf.gii"),
        ],
        true,
    );

    // matrix and stats on the cohort's resampled thickness maps, hemisphere L.
    let mut maps: Vec<String> = r1
        .keys()
        .filter(|k| {
            k.contains("_hemi-L_")
                && k.ends_with("_thickness.shape.gii")
                && k.contains("desc-aligned")
        })
        .map(|k| p(&out.join(k.trim_start_matches("out/"))))
        .collect();
    maps.sort();
    assert!(
        maps.len() >= 3,
        "only {} resampled maps: {maps:?}",
        maps.len()
    );
    let mut margs = vec![s("matrix")];
    margs.extend(maps);
    margs.extend([
        s("-o"),
        s("{o}/thick.func.gii"),
        s("--csv"),
        s("{o}/thick.csv"),
    ]);
    same_bytes(&base, "matrix", &margs, true);
    same_bytes(
        &base,
        "stats",
        &[
            s("stats"),
            s("--matrix"),
            p(&base.join("matrix-1/thick.func.gii")),
            s("--participants"),
            p(&study.join("participants.tsv")),
            s("--formula"),
            s("thickness ~ age"),
            s("--contrast"),
            s("age"),
            s("-o"),
            s("{o}/st"),
            s("--json"),
        ],
        true,
    );
    more_commands(&base, &study, &out, &ready);
    let _ = std::fs::remove_dir_all(&base);
}

/// The commands added after the first audit: curvature, convert, the
/// landmark template, the feature template and registration, the report,
/// and the volume commands.
fn more_commands(base: &Path, study: &Path, out: &Path, ready: &[(&str, &str)]) {
    let p = |x: &Path| x.display().to_string();
    let native = |sub: &str, h: &str, suffix: &str| {
        p(&study.join(sub).join(format!("{sub}_hemi-{h}_{suffix}")))
    };
    let output = |sub: &str, h: &str, what: &str| {
        p(&out.join(sub).join(format!(
            "{sub}_hemi-{h}_space-individual_desc-{what}_sphere.surf.gii"
        )))
    };
    let (sub, h) = ready[0];
    let white = native(sub, h, "white.surf.gii");
    same_bytes(
        base,
        "curvature",
        &[
            s("curvature"),
            white.clone(),
            s("-o"),
            s("{o}/c.shape.gii"),
            s("--json"),
        ],
        true,
    );
    same_bytes(
        base,
        "convert",
        &[
            s("convert"),
            white.clone(),
            s("{o}/w.surf.gii"),
            s("--encoding"),
            s("base64"),
        ],
        true,
    );

    // Tables over the units that needed no repair (their spheres keep the
    // native vertex order, so native landmarks and maps fit them).
    let same_hemi: Vec<&(&str, &str)> = ready.iter().filter(|(_, hh)| *hh == h).collect();
    assert!(same_hemi.len() >= 2, "too few clean units: {ready:?}");
    let mut landmark_table = String::from("subject,sphere,landmarks,surface\n");
    let mut feature_table = String::from("subject,sphere,depth\n");
    for (sb, hh) in &same_hemi {
        landmark_table.push_str(&format!(
            "{sb},{},{},{}\n",
            output(sb, hh, "conformal"),
            native(sb, hh, "landmarks.csv"),
            native(sb, hh, "white.surf.gii")
        ));
        feature_table.push_str(&format!(
            "{sb},{},{}\n",
            output(sb, hh, "aligned"),
            native(sb, hh, "depth.shape.gii")
        ));
    }
    let lt = base.join("landmark-table.csv");
    let ft = base.join("feature-table.csv");
    std::fs::write(&lt, landmark_table).unwrap();
    std::fs::write(&ft, feature_table).unwrap();
    same_bytes(
        base,
        "template",
        &[
            s("template"),
            s("--cohort"),
            p(&lt),
            s("-o"),
            s("{o}/t.toml"),
        ],
        true,
    );
    same_bytes(
        base,
        "register-template",
        &[
            s("register-template"),
            s("--cohort"),
            p(&ft),
            s("-o"),
            s("{o}/tpl"),
            s("--level"),
            s("3"),
            s("--rounds"),
            s("1"),
        ],
        true,
    );
    let r = same_bytes(
        base,
        "register",
        &[
            s("register"),
            output(sub, h, "aligned"),
            s("--features"),
            native(sub, h, "depth.shape.gii"),
            s("--template"),
            p(&base.join("register-template-1/tpl")),
            s("-o"),
            s("{o}/w.surf.gii"),
        ],
        true,
    );
    assert!(r.contains_key("w.surf.gii"));
    let html = same_bytes(
        base,
        "report",
        &[
            s("report"),
            p(out),
            s("-o"),
            s("{o}/r.html"),
            s("--stats"),
            p(&base.join("stats-1/st")),
        ],
        false,
    );
    assert!(html.contains_key("r.html"));

    // A ball mask (our NIfTI writer) through extract, then sample.
    let n = 20usize;
    let mut values = vec![0.0; n * n * n];
    for z in 0..n {
        for y in 0..n {
            for x in 0..n {
                let d = [x, y, z].map(|c| c as f64 - 9.5);
                if d.iter().map(|c| c * c).sum::<f64>() < 36.0 {
                    values[x + n * (y + n * z)] = 1.0;
                }
            }
        }
    }
    let affine = horosphere::volume::affine::Affine {
        m: [
            [1.5, 0.0, 0.0, -15.0],
            [0.0, 1.5, 0.0, -15.0],
            [0.0, 0.0, 1.5, -15.0],
        ],
    };
    let mask = base.join("ball.nii");
    std::fs::write(
        &mask,
        horosphere::volume::nifti::encode_nifti1(
            &[n, n, n],
            &values,
            &affine,
            horosphere::volume::nifti::StoreType::U8,
        ),
    )
    .unwrap();
    same_bytes(
        base,
        "extract",
        &[
            s("extract"),
            p(&mask),
            s("-o"),
            s("{o}/e.surf.gii"),
            s("--smooth"),
            s("5"),
            s("--json"),
        ],
        true,
    );
    same_bytes(
        base,
        "sample",
        &[
            s("sample"),
            p(&mask),
            s("--surface"),
            p(&base.join("extract-1/e.surf.gii")),
            s("-o"),
            s("{o}/v.shape.gii"),
            s("--offset"),
            s("-0.5"),
            s("--json"),
        ],
        true,
    );
}
