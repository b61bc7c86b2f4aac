//! Fault injection in `horosphere run` on a small synthetic cohort (our own
//! generator: `horosphere demo`, 2 subjects, 2,000 vertices per hemisphere,
//! icosphere:3 target). Every check compares files byte for byte with a
//! clean, uninterrupted run, so "no truncated or stale output" and "the
//! provenance stays true" are tested exactly, not by sampling:
//!
//! (a) units whose stage fails (read, align) -> the other units complete
//!     with the clean run's bytes;
//! (b) a disk-full write (the testing hook `HOROSPHERE_FAULT_WRITE_AFTER=N`
//!     of `io::atomic`) -> the run reports the failure, every file on disk is
//!     complete and equal to the clean run's, no temporary is left, and a
//!     rerun without the hook gives the clean run's bytes;
//! (c) SIGKILL at seeded random moments over several runs -> a final run
//!     gives the clean run's bytes (outputs, sidecars, records);
//! (d) two runs on one output folder -> the second is refused with a
//!     message naming the lock file; unit jobs (`--units-only --only`) share it.

mod common;

// A killed run may leave folders that vanish while they are listed: this
// file's walks skip what cannot be read.
use common::{manifest, run_output as run, tree_if_present as tree};
use horosphere::synth::rng::SplitMix64;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

const BIN: &str = common::BIN;

fn scratch(tag: &str) -> PathBuf {
    common::scratch("faults", tag)
}

fn study() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let d = scratch("study");
        common::demo_study(&d, 2, 2000, 11, &[]);
        d
    })
}

fn assert_same_tree(want: &BTreeMap<String, Vec<u8>>, dir: &Path, what: &str) {
    let got = tree(dir);
    let kw: Vec<_> = want.keys().collect();
    let kg: Vec<_> = got.keys().collect();
    assert_eq!(kw, kg, "{what}: different file sets");
    for (k, v) in want {
        assert!(got[k] == *v, "{what}: {k} differs from the clean run");
    }
}

/// The clean run (2 threads) and its time; made once.
fn clean() -> &'static (BTreeMap<String, Vec<u8>>, Duration) {
    static CLEAN: OnceLock<(BTreeMap<String, Vec<u8>>, Duration)> = OnceLock::new();
    CLEAN.get_or_init(|| {
        let d = scratch("clean");
        let m = manifest(&d, study(), &d.join("out"));
        let t0 = Instant::now();
        let o = run(&m, &["--jobs", "2", "--allow-failed"], &[]);
        let dt = t0.elapsed();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let t = tree(&d.join("out"));
        assert!(t.keys().any(|k| k.ends_with("desc-cohort_qc.csv")));
        assert!(
            !t.keys().any(|k| k.contains(".horosphere-run.lock")),
            "lock file left behind"
        );
        (t, dt)
    })
}

fn copy_study(to: &Path) {
    common::copy_tree(study(), to);
}

#[test]
fn failing_units_leave_the_others_complete() {
    let (clean, _) = clean();
    let d = scratch("stage");
    let root = d.join("study");
    copy_study(&root);
    // sub-kf01 hemi-L: a truncated surface (fails at read);
    // sub-kf02 hemi-R: a landmark on a vertex that does not exist (fails at align).
    let surf = root.join("sub-kf01/sub-kf01_hemi-L_white.surf.gii");
    let b = std::fs::read(&surf).unwrap();
    std::fs::write(&surf, &b[..b.len() / 3]).unwrap();
    let lm = root.join("sub-kf02/sub-kf02_hemi-R_landmarks.csv");
    let text = std::fs::read_to_string(&lm).unwrap();
    let mut lines: Vec<String> = text.lines().map(String::from).collect();
    let name = lines[1].split(',').next().unwrap().to_string();
    lines[1] = format!("{name},99999999");
    std::fs::write(&lm, lines.join("\n") + "\n").unwrap();
    let m = manifest(&d, &root, &d.join("out"));
    let o = run(&m, &["--jobs", "2", "--json"], &[]);
    assert_eq!(
        o.status.code(),
        Some(1),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let failed: Vec<String> = v["failed"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f.to_string())
        .collect();
    assert!(
        failed
            .iter()
            .any(|f| f.contains("sub-kf01_hemi-L") && f.contains("white.surf.gii")),
        "{failed:?}"
    );
    assert!(
        failed
            .iter()
            .any(|f| f.contains("sub-kf02_hemi-R") && f.contains("99999999")),
        "{failed:?}"
    );
    // The other two units and their sidecars: the clean run's bytes.
    let got = tree(&d.join("out"));
    let mut compared = 0;
    for (k, bytes) in clean {
        if k.contains("sub-kf01_hemi-R") || k.contains("sub-kf02_hemi-L") {
            assert!(got.get(k) == Some(bytes), "{k} differs from the clean run");
            compared += 1;
        }
    }
    assert!(compared >= 10, "only {compared} files of the intact units");
    // The failed units' records say failed, at the right stage.
    let qc = String::from_utf8(got["group/desc-cohort_qc.csv"].clone()).unwrap();
    let row = |s: &str, h: &str| {
        qc.lines()
            .find(|l| l.starts_with(&format!("{s},{h},")))
            .unwrap_or_else(|| panic!("no QC row {s} {h}: {qc}"))
            .to_string()
    };
    assert!(row("sub-kf01", "L").contains("failed"), "{qc}");
    assert!(
        row("sub-kf02", "R").contains("failed") && row("sub-kf02", "R").contains("align"),
        "{qc}"
    );
}

#[test]
fn a_disk_full_write_leaves_no_truncated_file_and_a_rerun_recovers() {
    let (clean, _) = clean();
    for (k, after) in [(0usize, "7"), (1, "23")] {
        let d = scratch(&format!("diskfull{k}"));
        let out = d.join("out");
        let m = manifest(&d, study(), &out);
        let o = run(
            &m,
            &["--jobs", "1"],
            &[("HOROSPHERE_FAULT_WRITE_AFTER", after)],
        );
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(!o.status.success(), "the run hid a write failure: {err}");
        assert!(err.contains("injected write failure"), "{err}");
        assert!(!err.contains("panicked"), "{err}");
        // Whatever is on disk is complete: byte-equal to the clean run.
        let got = tree(&out);
        assert!(!got.is_empty());
        for (f, bytes) in &got {
            assert!(!f.ends_with(".tmp"), "temporary left: {f}");
            assert!(!f.ends_with(".lock"), "lock left: {f}");
            assert!(
                clean.get(f) == Some(bytes),
                "after {after} writes: {f} is not the clean run's file"
            );
        }
        assert!(
            got.len() < clean.len(),
            "every file was written despite the fault"
        );
        // A rerun without the hook completes with the clean bytes.
        let o = run(&m, &["--jobs", "2", "--allow-failed"], &[]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        assert_same_tree(clean, &out, "rerun after disk-full");
    }
}

#[cfg(unix)]
#[test]
fn seeded_kills_then_a_final_run_give_the_clean_bytes() {
    let (clean, clean_time) = clean();
    let d = scratch("kills");
    let out = d.join("out");
    let m = manifest(&d, study(), &out);
    let mut rng = SplitMix64::new(0x4b11_2026);
    // A whole run here takes about `clean_time` (2 threads); kill the
    // one-thread runs at 10% to 90% of it, so kills land in every stage.
    let span = clean_time.as_secs_f64().max(0.5);
    let mut killed = 0;
    for _ in 0..5 {
        let delay = Duration::from_secs_f64(span * (0.1 + 0.8 * rng.uniform()));
        let mut child = Command::new(BIN)
            .arg("run")
            .arg(&m)
            .args(["--jobs", "1", "--allow-failed"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(delay);
        if child.try_wait().unwrap().is_none() {
            child.kill().unwrap(); // SIGKILL
            killed += 1;
        }
        child.wait().unwrap();
        // Every non-temporary file on disk is complete and current.
        for (f, bytes) in tree(&out) {
            if f.ends_with(".tmp") || f.ends_with(".horosphere-run.lock") {
                continue;
            }
            assert!(
                clean.get(&f) == Some(&bytes),
                "after a kill: {f} is not the clean run's file"
            );
        }
    }
    assert!(
        killed >= 2,
        "only {killed} runs were killed; the delays are too long"
    );
    let o = run(&m, &["--jobs", "2", "--allow-failed"], &[]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_same_tree(clean, &out, "final run after kills");
}

#[cfg(unix)]
#[test]
fn a_second_run_on_the_same_output_is_refused() {
    let d = scratch("lock");
    let out = d.join("out");
    let m = manifest(&d, study(), &out);
    let mut first = Command::new(BIN)
        .arg("run")
        .arg(&m)
        .args(["--jobs", "1", "--allow-failed"])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let lock = out.join(".horosphere-run.lock");
    let t0 = Instant::now();
    while !lock.exists() && t0.elapsed() < Duration::from_secs(30) {
        std::thread::sleep(Duration::from_millis(2));
    }
    assert!(lock.exists(), "the first run took no lock");
    let second = run(&m, &["--jobs", "1"], &[]);
    let unit_job = run(&m, &["--units-only", "--only", "kf01", "--hemi", "L"], &[]);
    let still_running = first.try_wait().unwrap().is_none();
    first.kill().ok();
    first.wait().unwrap();
    assert!(
        still_running,
        "the first run finished before the second started; test inconclusive"
    );
    for (what, o) in [("second run", &second), ("unit job", &unit_job)] {
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(1), "{what}: {err}");
        assert!(
            err.contains(".horosphere-run.lock")
                && err.contains("in use by horosphere run (process"),
            "{what}: {err}"
        );
        assert!(!err.contains("panicked"), "{err}");
    }
    // The killed holder's lock file is taken over by the next run.
    let o = run(&m, &["--jobs", "2", "--allow-failed"], &[]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(!lock.exists());
    // Unit jobs share the lock: two at once both succeed.
    let d2 = scratch("lock-shared");
    let m2 = manifest(&d2, study(), &d2.join("out"));
    let spawn = |s: &str, h: &str| {
        Command::new(BIN)
            .arg("run")
            .arg(&m2)
            .args(["--units-only", "--allow-failed", "--only", s, "--hemi", h])
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap()
    };
    let a = spawn("kf01", "L");
    let b = spawn("kf01", "R");
    for c in [a, b] {
        let o = c.wait_with_output().unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
}
