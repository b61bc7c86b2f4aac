//! Benchmark of the QC report: 100 units (50 subjects x 2 hemispheres).
//!
//! A small cohort is made by our own generator (`horosphere demo`) and run
//! through the pipeline (`horosphere run`, icosphere:5 target); its
//! subjects are then replicated under new labels (outputs, records, study
//! inputs and QC rows) up to 50 subjects, and `report::build_report` is
//! timed on the 100 units, with the study folder (native surfaces), on the
//! global rayon pool. Target: under 30 s. Without `--bench` (as under
//! `cargo test --all-targets`) a smoke run: 2 subjects of 2,000 vertices
//! replicated to 4 subjects.

use horosphere::report::{build_report, ReportOptions};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

const BIN: &str = env!("CARGO_BIN_EXE_horosphere");

fn copy_renamed(from: &Path, to: &Path, old: &str, new: &str) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap().flatten() {
        let name = e.file_name().to_string_lossy().replace(old, new);
        let bytes = std::fs::read(e.path()).unwrap();
        let bytes = if name.ends_with("_record.json") {
            String::from_utf8(bytes)
                .unwrap()
                .replace(old, new)
                .replace(
                    &format!("\"subject\": \"{}\"", &old[4..]),
                    &format!("\"subject\": \"{}\"", &new[4..]),
                )
                .into_bytes()
        } else {
            bytes
        };
        std::fs::write(to.join(name), bytes).unwrap();
    }
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let (base, vertices, total) = if full {
        (4usize, 20_000usize, 50usize)
    } else {
        (2, 2_000, 4)
    };
    let dir: PathBuf =
        std::env::temp_dir().join(format!("horosphere-bench-report-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let study = dir.join("study");
    let out = dir.join("out");
    let ok = Command::new(BIN)
        .args(["demo", "--out"])
        .arg(&study)
        .args([
            "--subjects",
            &base.to_string(),
            "--vertices",
            &vertices.to_string(),
            "--seed",
            "11",
        ])
        .output()
        .unwrap();
    assert!(
        ok.status.success(),
        "{}",
        String::from_utf8_lossy(&ok.stderr)
    );
    let pipelines = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines");
    let manifest = dir.join("cohort.toml");
    std::fs::write(
        &manifest,
        format!(
            "[study]\nroot = \"{}\"\noutput = \"{}\"\n[inputs]\nsurface = \"white\"\nmaps = [\"thickness\"]\nlandmarks = \"landmarks\"\ntemplate = \"{}/demo-template-{{hemi}}.toml\"\n[map]\npole = \"repair-added\"\n[resample]\ntarget = \"icosphere:5\"\n",
            study.display(),
            out.display(),
            pipelines.display()
        ),
    )
    .unwrap();
    let t0 = Instant::now();
    let run = Command::new(BIN)
        .arg("run")
        .arg(&manifest)
        .args(["--jobs", "2", "--allow-failed"])
        .output()
        .unwrap();
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let pipeline_s = t0.elapsed().as_secs_f64();
    // Replicate subjects under new labels.
    let qc_path = out.join("group/desc-cohort_qc.csv");
    let qc = std::fs::read_to_string(&qc_path).unwrap();
    let mut lines = qc.lines();
    let header = lines.next().unwrap().to_string();
    let rows: Vec<String> = lines.map(str::to_string).collect();
    let labels: Vec<String> = (1..=base).map(|i| format!("sub-kf{i:02}")).collect();
    let mut new_qc = header + "\n";
    for k in 0..total {
        let old = &labels[k % base];
        let new = format!("sub-x{k:03}");
        copy_renamed(&out.join(old), &out.join(&new), old, &new);
        copy_renamed(&study.join(old), &study.join(&new), old, &new);
        for r in rows.iter().filter(|r| r.starts_with(&format!("{old},"))) {
            new_qc.push_str(&r.replacen(old.as_str(), &new, 1));
            new_qc.push('\n');
        }
    }
    std::fs::write(&qc_path, new_qc).unwrap();
    let opts = ReportOptions {
        study: Some(study.clone()),
        ..ReportOptions::default()
    };
    let t1 = Instant::now();
    let (bytes, summary) = build_report(&out, &opts, &|_, _| {}).unwrap_or_else(|e| panic!("{e}"));
    let dt = t1.elapsed().as_secs_f64();
    assert_eq!(summary.units, 2 * total);
    println!(
        "report: {} units ({} failed, {} pictured) of {vertices}-vertex surfaces, {} threads: {dt:.2} s (target < 30 s); {} images, {:.1} MB; base pipeline of {} units took {pipeline_s:.1} s",
        summary.units,
        summary.failed,
        summary.pictured,
        rayon::current_num_threads(),
        summary.images,
        bytes.len() as f64 / 1e6,
        2 * base
    );
    let _ = std::fs::remove_dir_all(&dir);
}
