//! Setup shared by the end-to-end tests of the binary (`mod common;` in each
//! test file): scratch folders, the synthetic demo study (our own generator,
//! `horosphere demo`), cohort manifests for it, `horosphere run` with its
//! `--json` report, and readers of what a run leaves on disk (every file as
//! bytes, the QC table, the subject folders). Nothing here asserts a result
//! of its own beyond "the command ran"; the checks stay in the test files.
//! Not every test binary uses every helper.
#![allow(dead_code)]

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

pub const BIN: &str = env!("CARGO_BIN_EXE_horosphere");

/// A fresh, empty folder `horosphere-{prefix}-{tag}-{pid}` in the system's
/// temporary folder (an older one of that name is removed first).
pub fn scratch(prefix: &str, tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("horosphere-{prefix}-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Stdout of a command that must have succeeded (else fail with its stderr).
pub fn ok(out: Output) -> String {
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// Generate the demo study in `out`: `subjects` subjects of `vertices`
/// vertices per hemisphere from `seed`, with the `extra` options of
/// `horosphere demo`; the command must succeed.
pub fn demo_study(out: &Path, subjects: usize, vertices: usize, seed: u64, extra: &[&str]) {
    ok(Command::new(BIN)
        .args(["demo", "--out"])
        .arg(out)
        .args(["--subjects", &subjects.to_string()])
        .args(["--vertices", &vertices.to_string()])
        .args(["--seed", &seed.to_string()])
        .args(extra)
        .output()
        .unwrap());
}

/// Write the manifest `path` for the demo study `root` writing to `output`:
/// `[study]` with the two folders and the lines `study`, `[inputs]` with the
/// demo's white surface, `maps` (a TOML array), landmarks and the bundled
/// demo templates, then `rest` as it stands.
pub fn write_manifest(
    path: &Path,
    root: &Path,
    output: &Path,
    study: &str,
    maps: &str,
    rest: &str,
) -> PathBuf {
    let pipelines = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines");
    let text = format!(
        "[study]\nroot = \"{}\"\noutput = \"{}\"\n{study}[inputs]\nsurface = \"white\"\nmaps = {maps}\n\
         landmarks = \"landmarks\"\ntemplate = \"{}/demo-template-{{hemi}}.toml\"\n{rest}",
        root.display(),
        output.display(),
        pipelines.display()
    );
    std::fs::write(path, text).unwrap();
    path.to_path_buf()
}

/// `dir/cohort.toml`: the whole demo pipeline (thickness and regions, pole
/// at the repair-added vertices, icosphere:3 target) for `root` -> `output`.
pub fn manifest(dir: &Path, root: &Path, output: &Path) -> PathBuf {
    write_manifest(
        &dir.join("cohort.toml"),
        root,
        output,
        "",
        "[\"thickness\", \"regions\"]",
        "[map]\npole = \"repair-added\"\n[resample]\ntarget = \"icosphere:3\"\n",
    )
}

/// `horosphere run <manifest> <extra>` with the variables `env` set.
pub fn run_output(manifest: &Path, extra: &[&str], env: &[(&str, &str)]) -> Output {
    let mut c = Command::new(BIN);
    c.arg("run").arg(manifest).args(extra);
    for (k, v) in env {
        c.env(k, v);
    }
    c.output().unwrap()
}

/// `horosphere run <manifest> --json <extra>`.
pub fn run_json_output(manifest: &Path, extra: &[&str]) -> Output {
    let mut args = vec!["--json"];
    args.extend_from_slice(extra);
    run_output(manifest, &args, &[])
}

/// Stderr of a command as text.
pub fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// The JSON report on stdout (else fail with the parse error and stderr).
pub fn json(out: &Output) -> serde_json::Value {
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}: {}", stderr(out)))
}

fn walk(dir: &Path, skip_unreadable: bool) -> BTreeMap<String, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        let rd = match std::fs::read_dir(&d) {
            Ok(rd) => rd,
            Err(_) if skip_unreadable => continue,
            Err(e) => panic!("{}: {e}", d.display()),
        };
        for e in rd {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                let rel = p.strip_prefix(dir).unwrap().to_string_lossy().into_owned();
                out.insert(rel, std::fs::read(&p).unwrap());
            }
        }
    }
    out
}

/// Every file under `dir` (relative path -> bytes); `dir` must exist.
pub fn tree(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    walk(dir, false)
}

/// As [`tree`], but a folder that cannot be read (or `dir` itself missing)
/// counts as empty.
pub fn tree_if_present(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    walk(dir, true)
}

/// Copy every file of the folder `from` into `to` (made as needed).
pub fn copy_tree(from: &Path, to: &Path) {
    for (rel, bytes) in tree(from) {
        let p = to.join(rel);
        std::fs::create_dir_all(p.parent().unwrap()).unwrap();
        std::fs::write(p, bytes).unwrap();
    }
}

/// The rows of a run's QC table (`group/desc-cohort_qc.csv`), column -> value.
pub fn qc(output: &Path) -> Vec<BTreeMap<String, String>> {
    let mut r = csv::Reader::from_path(output.join("group/desc-cohort_qc.csv")).unwrap();
    let h = r.headers().unwrap().clone();
    r.records()
        .map(|rec| {
            let rec = rec.unwrap();
            h.iter()
                .zip(rec.iter())
                .map(|(a, b)| (a.to_string(), b.to_string()))
                .collect()
        })
        .collect()
}

/// The subject folders (`sub-*`) of a study, sorted.
pub fn labels(study: &Path) -> Vec<String> {
    let mut out: Vec<String> = std::fs::read_dir(study)
        .unwrap()
        .filter_map(|e| {
            let n = e.unwrap().file_name().to_string_lossy().into_owned();
            n.starts_with("sub-").then_some(n)
        })
        .collect();
    out.sort();
    out
}
