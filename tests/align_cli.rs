//! `horosphere align` and `horosphere template` end to end, on synthetic
//! spheres: an icosahedral sphere (Kenner 1976) moved by known random Moebius
//! maps. Checks: the alignment undoes the map; the report's 2x2 complex
//! matrix acts on stereographic coordinates as the written sphere says
//! (Needham, "Visual complex analysis", 1997, ch. 3); bad input gives a clear
//! error naming the file and writes nothing; a cohort with one unreadable
//! subject still gives a template (exit status 3); a synthetic folded
//! hemisphere goes through `map` and `align` with residuals of the order of
//! the planted landmark jitter.

use horosphere::mesh::shapes::icosphere;
use horosphere::mesh::{dist, norm, scale, Vec3};
use horosphere::moebius::{inverse_stereographic, stereographic, Moebius, C64};
use horosphere::TriMesh;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

const LANDMARK_VERTICES: [usize; 6] = [3, 60, 129, 250, 400, 601];

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_horosphere"))
}

fn temp_dir(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("horosphere-align-cli-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn run(args: &[&str]) -> Output {
    bin().args(args).output().unwrap()
}

/// `horosphere <args>`, which must succeed (else fail with its stderr).
fn run_ok(args: &[&str]) -> Output {
    let o = run(args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    o
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// `align <sphere> --landmarks <landmarks> --template <template> -o <out>`
/// followed by `extra`.
fn align_args<'a>(
    sphere: &'a Path,
    landmarks: &'a Path,
    template: &'a Path,
    out: &'a Path,
    extra: &[&'a str],
) -> Vec<&'a str> {
    let mut v = vec![
        "align",
        s(sphere),
        "--landmarks",
        s(landmarks),
        "--template",
        s(template),
        "-o",
        s(out),
    ];
    v.extend_from_slice(extra);
    v
}

/// Largest distance (mm) from a vertex of `aligned` to the same vertex of
/// the unmoved icosphere of level 3 and radius 100, whose faces it must have.
fn worst_offset_from_the_icosphere(aligned: &TriMesh) -> f64 {
    let base = icosphere(3, 100.0);
    assert_eq!(aligned.faces, base.faces);
    aligned
        .positions
        .iter()
        .zip(&base.positions)
        .map(|(a, b)| dist(*a, *b))
        .fold(0.0, f64::max)
}

/// Native surface (icosphere, radius 100), the sphere moved by `m`, the
/// landmark CSV and a template of the unmoved landmark positions.
fn subject(dir: &Path, tag: &str, m: &Moebius) -> (PathBuf, PathBuf, PathBuf) {
    subject_at(dir, tag, m, 3)
}

/// As [`subject`] on the icosphere of level `level` >= 3 (its first 642
/// vertices are those of level 3, so the landmarks stay where they are).
fn subject_at(dir: &Path, tag: &str, m: &Moebius, level: u32) -> (PathBuf, PathBuf, PathBuf) {
    let base = icosphere(level, 1.0);
    let native = TriMesh {
        positions: base.positions.iter().map(|p| scale(*p, 100.0)).collect(),
        faces: base.faces.clone(),
    };
    let sphere = TriMesh {
        positions: m
            .apply_all(&base.positions)
            .iter()
            .map(|p| scale(*p, 100.0))
            .collect(),
        faces: base.faces.clone(),
    };
    let np = dir.join(format!("{tag}-native.obj"));
    let sp = dir.join(format!("{tag}-sphere.obj"));
    horosphere::io::write_mesh(&np, &native).unwrap();
    horosphere::io::write_mesh(&sp, &sphere).unwrap();
    let lp = dir.join(format!("{tag}-landmarks.csv"));
    let mut csv = String::from("name,vertex\n");
    for (i, v) in LANDMARK_VERTICES.iter().enumerate() {
        csv += &format!("mark-{i},{v}\n");
    }
    std::fs::write(&lp, csv).unwrap();
    (sp, np, lp)
}

fn write_template(dir: &Path) -> PathBuf {
    let base = icosphere(3, 1.0);
    let mut t = String::new();
    for (i, &v) in LANDMARK_VERTICES.iter().enumerate() {
        let x = base.positions[v];
        let lat = x[2].atan2(x[0].hypot(x[1])).to_degrees();
        let lon = x[1].atan2(x[0]).to_degrees();
        t += &format!(
            "[[landmark]]\nname = \"mark-{i}\"\nlatitude = {lat:?}\nlongitude = {lon:?}\n\n"
        );
    }
    let p = dir.join("template.toml");
    std::fs::write(&p, t).unwrap();
    p
}

#[test]
fn align_undoes_a_moebius_map_and_reports_it() {
    let dir = temp_dir("undo");
    let m = Moebius::random(11, 1.5);
    let (sp, np, lp) = subject(&dir, "a", &m);
    let tp = write_template(&dir);
    let out = dir.join("aligned.obj");
    let rep = dir.join("align.json");
    run_ok(&align_args(
        &sp,
        &lp,
        &tp,
        &out,
        &["--surface", s(&np), "--report", s(&rep)],
    ));
    let aligned = horosphere::io::read_mesh(&out).unwrap();
    let worst = worst_offset_from_the_icosphere(&aligned);
    // OBJ keeps enough digits for 1e-6 mm on a 100 mm sphere.
    assert!(worst < 1e-6, "{worst}");

    let r: serde_json::Value = serde_json::from_slice(&std::fs::read(&rep).unwrap()).unwrap();
    assert!(r["rms_degrees"].as_f64().unwrap() < 1e-6);
    assert_eq!(r["warning"], false);
    assert_eq!(r["landmarks"].as_array().unwrap().len(), 6);
    assert_eq!(r["fit"], "mobius");
    assert!((r["radius_mm"].as_f64().unwrap() - 100.0).abs() < 1e-9);
    // The 2x2 matrix of the report, applied as (a z + b) / (c z + d) to the
    // stereographic coordinate of an input vertex, gives the output vertex.
    let a: Vec<C64> = (0..4)
        .map(|k| {
            let e = &r["transform"]["sl2c"][k / 2][k % 2];
            C64::new(e[0].as_f64().unwrap(), e[1].as_f64().unwrap())
        })
        .collect();
    assert!((a[0] * a[3] - a[1] * a[2] - C64::new(1.0, 0.0)).norm() < 1e-9);
    let input = horosphere::io::read_mesh(&sp).unwrap();
    for v in [0usize, 77, 500] {
        let x: Vec3 = scale(input.positions[v], 1.0 / norm(input.positions[v]));
        let z = stereographic(x).unwrap();
        let w = (a[0] * z + a[1]) / (a[2] * z + a[3]);
        let y = scale(aligned.positions[v], 0.01);
        assert!(dist(inverse_stereographic(w), y) < 1e-6, "vertex {v}");
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn gifti_spheres_in_and_out() {
    // GIFTI stores coordinates as float32 ("GIFTI Surface Data Format
    // Version 1.0", 2011): the alignment must still undo the map to float32
    // precision (about 1e-5 mm on a 100 mm sphere, times the map's stretch).
    let dir = temp_dir("gifti");
    let m = Moebius::random(13, 1.0);
    let (sp, np, lp) = subject(&dir, "g", &m);
    let tp = write_template(&dir);
    let sg = dir.join("sub-x_hemi-L_sphere.surf.gii");
    let ng = dir.join("sub-x_hemi-L_white.surf.gii");
    horosphere::io::write_mesh(&sg, &horosphere::io::read_mesh(&sp).unwrap()).unwrap();
    horosphere::io::write_mesh(&ng, &horosphere::io::read_mesh(&np).unwrap()).unwrap();
    let out = dir.join("sub-x_hemi-L_space-common_sphere.surf.gii");
    let o = run_ok(&align_args(
        &sg,
        &lp,
        &tp,
        &out,
        &["--surface", s(&ng), "--fit", "rotation"],
    ));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("6 landmarks"), "{stdout}");
    let aligned = horosphere::io::read_mesh(&out).unwrap();
    let worst = worst_offset_from_the_icosphere(&aligned);
    assert!(worst < 1e-3, "{worst}");
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn output_does_not_depend_on_the_thread_count() {
    // Project rule: byte-identical output whatever the thread count. Level 5
    // (10,242 vertices) spans several of the fixed summation chunks.
    let dir = temp_dir("threads");
    let (sp, np, lp) = subject_at(&dir, "t", &Moebius::random(14, 2.0), 5);
    let tp = write_template(&dir);
    let out = dir.join("aligned.surf.gii");
    let rep = dir.join("align.json");
    let mut results = Vec::new();
    for threads in ["1", "3"] {
        let o = bin()
            .env("RAYON_NUM_THREADS", threads)
            .args(align_args(
                &sp,
                &lp,
                &tp,
                &out,
                &["--surface", s(&np), "--report", s(&rep)],
            ))
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        results.push((std::fs::read(&out).unwrap(), std::fs::read(&rep).unwrap()));
    }
    assert!(
        results[0] == results[1],
        "outputs differ between 1 and 3 threads"
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn synthetic_subject_map_then_align() {
    // The whole chain on a synthetic folded hemisphere (crate::synth, 3,000
    // vertices): `horosphere map` (exact discrete conformal map), then
    // `horosphere align` with the generator's landmarks, planted with a
    // 3-degree jitter per tangent component around the template directions
    // and snapped to vertices. The residual left after the mobius fit must
    // be of the order of the planted offsets (their RMS: about 3 sqrt 2
    // degrees plus snapping); the conformal map of the folded surface is not
    // the generator's canonical parametrisation, hence the margin of 1.5.
    use horosphere::synth::maps::{landmark_template, place_landmarks};
    use horosphere::synth::{folded_surface, SurfaceParams};
    let dir = temp_dir("chain");
    let params = SurfaceParams {
        vertices: 3000,
        ..SurfaceParams::default()
    };
    let surface = folded_surface(&params, 70).unwrap();
    let native = dir.join("sub-x_hemi-L_white.surf.gii");
    horosphere::io::write_mesh(&native, &surface.mesh).unwrap();
    let placed = place_landmarks(&surface, 70, 3.0);
    let mut csv = String::from("name,vertex\n");
    let mut tpl = String::new();
    let mut planted = Vec::new();
    for (p, l) in placed.iter().zip(landmark_template()) {
        csv += &format!("{},{}\n", p.name, p.vertex);
        let t = TemplateLandmarkDir(l.direction);
        tpl += &format!(
            "[[landmark]]\nname = \"{}\"\nlatitude = {:?}\nlongitude = {:?}\n\n",
            l.name,
            t.latitude(),
            t.longitude()
        );
        planted.push(
            horosphere::moebius::angle(surface.directions[p.vertex as usize], l.direction)
                .to_degrees(),
        );
    }
    let planted_rms = (planted.iter().map(|a| a * a).sum::<f64>() / planted.len() as f64).sqrt();
    let lp = dir.join("landmarks.csv");
    let tp = dir.join("template.toml");
    std::fs::write(&lp, csv).unwrap();
    std::fs::write(&tp, tpl).unwrap();
    let sphere = dir.join("sub-x_hemi-L_sphere.surf.gii");
    run_ok(&["map", s(&native), "-o", s(&sphere)]);
    let out = dir.join("sub-x_hemi-L_space-common_sphere.surf.gii");
    let rep = dir.join("align.json");
    run_ok(&align_args(
        &sphere,
        &lp,
        &tp,
        &out,
        &[
            "--surface",
            s(&native),
            "--report",
            s(&rep),
            "--warn-degrees",
            "15",
        ],
    ));
    let r: serde_json::Value = serde_json::from_slice(&std::fs::read(&rep).unwrap()).unwrap();
    let rms = r["rms_degrees"].as_f64().unwrap();
    assert!(
        rms <= 1.5 * planted_rms,
        "RMS {rms} vs planted {planted_rms}"
    );
    assert!(rms > 0.5, "{rms}");
    assert_eq!(r["warning"], false);
    assert!(r["centring"]["centroid_norm"].as_f64().unwrap() < 1e-10);
    let aligned = horosphere::io::read_mesh(&out).unwrap();
    assert_eq!(aligned.n_vertices(), surface.mesh.n_vertices());
    assert_eq!(aligned.faces, surface.mesh.faces);
    assert!(aligned
        .positions
        .iter()
        .all(|p| (norm(*p) - 100.0).abs() < 1e-3));
    std::fs::remove_dir_all(&dir).unwrap();
}

/// Latitude and longitude (degrees) of a unit vector, as in docs/align.md.
struct TemplateLandmarkDir(Vec3);

impl TemplateLandmarkDir {
    fn latitude(&self) -> f64 {
        let x = self.0;
        x[2].atan2(x[0].hypot(x[1])).to_degrees()
    }
    fn longitude(&self) -> f64 {
        self.0[1].atan2(self.0[0]).to_degrees()
    }
}

#[test]
fn bad_input_gives_clear_errors_and_no_output() {
    let dir = temp_dir("bad");
    let m = Moebius::random(12, 1.0);
    let (sp, np, lp) = subject(&dir, "a", &m);
    let tp = write_template(&dir);
    let out = dir.join("aligned.obj");
    let base_args = |lp: &Path, extra: &[&str]| -> Vec<String> {
        align_args(&sp, lp, &tp, &out, extra)
            .iter()
            .map(|x| x.to_string())
            .collect()
    };
    let check = |args: Vec<String>, want: &[&str]| {
        let o = bin().args(&args).output().unwrap();
        let err = String::from_utf8_lossy(&o.stderr).to_string();
        assert_eq!(o.status.code(), Some(1), "{err}");
        for w in want {
            assert!(err.contains(w), "expected `{w}` in: {err}");
        }
        assert!(!out.exists(), "output written despite error: {err}");
    };
    // Area centring without the native surface.
    check(base_args(&lp, &[]), &["--surface"]);
    // A landmark missing from the template.
    let bad = dir.join("missing.csv");
    std::fs::write(&bad, "name,vertex\nmark-0,3\nmark-1,60\nelsewhere,129\n").unwrap();
    check(
        base_args(&bad, &["--center", "uniform"]),
        &["missing.csv", "`elsewhere` is not in the template"],
    );
    // Index out of range.
    std::fs::write(&bad, "name,vertex\nmark-0,3\nmark-1,60\nmark-2,642\n").unwrap();
    check(
        base_args(&bad, &["--center", "uniform"]),
        &["missing.csv", "line 4", "out of range"],
    );
    // Fewer than 3 landmarks for the mobius fit.
    std::fs::write(&bad, "name,vertex\nmark-0,3\nmark-1,60\n").unwrap();
    check(base_args(&bad, &["--center", "uniform"]), &["at least 3"]);
    // Coincident landmarks.
    std::fs::write(&bad, "name,vertex\nmark-0,3\nmark-1,60\nmark-2,3\n").unwrap();
    check(
        base_args(&bad, &["--center", "uniform"]),
        &["line 4", "coincident"],
    );
    // Native surface with another vertex count.
    let small = dir.join("small.obj");
    horosphere::io::write_mesh(&small, &icosphere(2, 100.0)).unwrap();
    check(
        base_args(&lp, &["--surface", s(&small)]),
        &["small.obj", "162 vertices", "642"],
    );
    // Landmarks in mm need the surface; with it they snap.
    std::fs::write(&bad, "name,x,y,z\nmark-0,1,2,3\n").unwrap();
    check(base_args(&bad, &["--center", "none"]), &["native surface"]);
    let _ = np;
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn template_from_a_cohort_then_align() {
    let dir = temp_dir("cohort");
    let mut rows = String::from("subject,sphere,landmarks,surface\n");
    for k in 0..4u64 {
        let tag = format!("s{k}");
        let (sp, np, lp) = subject(&dir, &tag, &Moebius::random(200 + k, 1.2));
        rows += &format!(
            "{tag},{},{},{}\n",
            sp.file_name().unwrap().to_str().unwrap(),
            lp.file_name().unwrap().to_str().unwrap(),
            np.file_name().unwrap().to_str().unwrap()
        );
    }
    let cohort = dir.join("cohort.csv");
    std::fs::write(&cohort, &rows).unwrap();
    let tp = dir.join("built.toml");
    run_ok(&["template", "--cohort", s(&cohort), "-o", s(&tp)]);
    let t = horosphere::align::read_template(&tp).unwrap();
    assert_eq!(t.landmarks.len(), 6);
    assert_eq!(t.built.as_ref().unwrap().subjects, 4);
    // Every subject aligns to the built template with (near) zero residual.
    let out = dir.join("aligned.obj");
    let (sp, lp, np) = (
        dir.join("s2-sphere.obj"),
        dir.join("s2-landmarks.csv"),
        dir.join("s2-native.obj"),
    );
    let o = run_ok(&align_args(
        &sp,
        &lp,
        &tp,
        &out,
        &["--surface", s(&np), "--json"],
    ));
    let r: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert!(r["max_degrees"].as_f64().unwrap() < 1e-6, "{r}");

    // One unreadable subject: left out, template still written, status 3.
    rows += "broken,nothing.obj,nothing.csv,\n";
    std::fs::write(&cohort, &rows).unwrap();
    let tp2 = dir.join("partial.toml");
    let o = run(&["template", "--cohort", s(&cohort), "-o", s(&tp2)]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(3), "{err}");
    assert!(
        err.contains("broken") && err.contains("nothing.obj"),
        "{err}"
    );
    assert!(tp2.exists());
    std::fs::remove_dir_all(&dir).unwrap();
}
