//! The registration stage (`horosphere::register`).
//!
//! Index of this file:
//! - known diffeomorphism: a subject made from a template by a composition
//!   of two swirls (rotations about two axes by angles that fall off with
//!   the distance from the axis; each keeps the distance to its axis, so
//!   the composition is a diffeomorphism with a closed-form inverse) is
//!   registered back; the mean angular error of the recovered
//!   correspondence is a stated fraction of the template spacing, and no
//!   triangle folds;
//! - identity: a subject registered to a template made from itself stays
//!   in place (1e-6 rad);
//! - synthetic cohort (`horosphere::synth`): depth correlation with a
//!   template built from the cohort rises for every subject;
//! - planted effect (synthetic cohort, 12 subjects): sensitivity at a 5%
//!   false-positive rate of a vertex-wise t statistic, canonical frame
//!   against registered;
//! - bad input: wrong-length and constant feature maps, a template of
//!   another mesh, a feature count that does not match;
//! - template folder round trip and the `register` and `register-template`
//!   commands.

use horosphere::mesh::shapes::icosphere;
use horosphere::mesh::{dot, norm, scale, Vec3};
use horosphere::register::grid::{angle, IcoGrid};
use horosphere::register::template::{
    build_template, read_template, write_template, TemplateOptions, TemplateSubject,
};
use horosphere::register::{register, RegisterOptions, Template};
use horosphere::synth::rng::{axis_angle, mat_vec, Rng};
use horosphere::TriMesh;

// ---------------------------------------------------------------- helpers

fn unit(x: Vec3) -> Vec3 {
    scale(x, 1.0 / norm(x))
}

/// A smooth random function on the sphere: a sum of von Mises bumps.
struct Field {
    bumps: Vec<(Vec3, f64, f64)>,
}

impl Field {
    fn random(rng: &mut Rng, n: usize, kappa: f64) -> Self {
        Field {
            bumps: (0..n)
                .map(|_| (rng.unit_vector(), kappa * rng.range(0.7, 1.4), rng.normal()))
                .collect(),
        }
    }
    fn at(&self, x: Vec3) -> f64 {
        self.bumps
            .iter()
            .map(|(c, k, a)| a * (k * (dot(x, *c) - 1.0)).exp())
            .sum()
    }
}

/// Rotation about axis `c` by `theta * exp(-(1 - c.x) / s2)`: keeps
/// `c.x`, so it is a bijection; the inverse uses `-theta`.
fn swirl(c: Vec3, theta: f64, s2: f64, x: Vec3) -> Vec3 {
    let a = theta * (-(1.0 - dot(c, x)) / s2).exp();
    mat_vec(&axis_angle(c, a), x)
}

struct Warp {
    swirls: Vec<(Vec3, f64, f64)>,
}

impl Warp {
    fn apply(&self, x: Vec3) -> Vec3 {
        self.swirls
            .iter()
            .fold(x, |p, (c, t, s)| unit(swirl(*c, *t, *s, p)))
    }
}

fn rotated_sphere(level: u32, radius: f64, rng: &mut Rng) -> TriMesh {
    let r = rng.rotation();
    let mut m = icosphere(level, radius);
    for p in &mut m.positions {
        *p = mat_vec(&r, *p);
    }
    m
}

fn names(n: usize) -> Vec<String> {
    (0..n).map(|i| format!("f{i}")).collect()
}

// ------------------------------------------------- known diffeomorphism

#[test]
fn a_known_diffeomorphism_is_recovered() {
    let mut rng = Rng::new(11);
    let fields = [
        Field::random(&mut rng, 24, 8.0),
        Field::random(&mut rng, 24, 8.0),
    ];
    let level = 4;
    let template = Template {
        level,
        names: names(2),
        features: fields
            .iter()
            .map(|f| {
                icosphere(level, 1.0)
                    .positions
                    .iter()
                    .map(|&x| f.at(x))
                    .collect()
            })
            .map(|m: Vec<f64>| {
                horosphere::register::zscore(&m, &IcoGrid::new(level).vertex_areas(level)).unwrap()
            })
            .collect(),
        subjects: 1,
    };
    // psi: subject -> template; the subject's features are T o psi.
    let warp = Warp {
        swirls: vec![
            (unit([0.2, 0.3, 0.9]), 0.35, 0.5),
            (unit([-0.6, 0.7, -0.2]), -0.3, 0.6),
            (unit([0.8, -0.5, -0.3]), 0.25, 0.4),
        ],
    };
    let subject = rotated_sphere(5, 100.0, &mut rng);
    let dirs: Vec<Vec3> = subject.positions.iter().map(|p| unit(*p)).collect();
    let truth: Vec<Vec3> = dirs.iter().map(|&y| warp.apply(y)).collect();
    let feats: Vec<Vec<f64>> = fields
        .iter()
        .map(|f| truth.iter().map(|&x| f.at(x)).collect())
        .collect();
    let reg = register(&subject, &feats, &template, &RegisterOptions::default()).unwrap();
    let before: f64 = dirs
        .iter()
        .zip(&truth)
        .map(|(a, b)| angle(*a, *b))
        .sum::<f64>()
        / dirs.len() as f64;
    let after: f64 = reg
        .warped
        .positions
        .iter()
        .zip(&truth)
        .map(|(a, b)| angle(unit(*a), *b))
        .sum::<f64>()
        / dirs.len() as f64;
    let spacing = IcoGrid::new(level).spacing(level);
    eprintln!(
        "known warp: mean error before {:.3} deg, after {:.3} deg, template spacing {:.3} deg; report {:#?}",
        before.to_degrees(),
        after.to_degrees(),
        spacing.to_degrees(),
        reg.report
    );
    // Measured: 6.68 deg before, 0.49 deg after, spacing 4.33 deg.
    assert!(
        before > 1.5 * spacing,
        "the test warp is too small: {before}"
    );
    assert!(
        after < 0.2 * spacing,
        "mean error {after} rad, spacing {spacing}"
    );
    assert!(after < before / 8.0);
    assert_eq!(reg.report.jacobian.folded, 0);
    assert!(reg.report.jacobian.min > 0.0);
    assert_eq!(reg.report.subject_folded, 0);
    for f in &reg.report.features {
        assert!(f.after > 0.99, "{f:?}");
        assert!(f.after > f.before);
    }
}

// ------------------------------------------------------------- identity

#[test]
fn a_subject_registered_to_itself_stays_in_place() {
    let mut rng = Rng::new(5);
    let fields = [
        Field::random(&mut rng, 20, 8.0),
        Field::random(&mut rng, 20, 8.0),
    ];
    let subject = rotated_sphere(4, 80.0, &mut rng);
    let feats: Vec<Vec<f64>> = fields
        .iter()
        .map(|f| subject.positions.iter().map(|&p| f.at(unit(p))).collect())
        .collect();
    let one = TemplateSubject {
        sphere: subject.clone(),
        features: feats.clone(),
    };
    let opts = TemplateOptions {
        level: 4,
        rounds: 1,
        ..TemplateOptions::default()
    };
    let (template, _) = build_template(&[one], &names(2), &opts, &mut |_, _| {}).unwrap();
    let reg = register(&subject, &feats, &template, &RegisterOptions::default()).unwrap();
    let worst = subject
        .positions
        .iter()
        .zip(&reg.warped.positions)
        .map(|(a, b)| angle(*a, *b))
        .fold(0.0, f64::max);
    assert!(worst < 1e-6, "largest move {worst} rad");
    assert_eq!(reg.warped.faces, subject.faces);
    let r0 = norm(subject.positions[0]);
    assert!((norm(reg.warped.positions[0]) - r0).abs() < 1e-9 * r0);
    for f in &reg.report.features {
        assert!(f.after > 1.0 - 1e-9, "{f:?}");
    }
}

// ---------------------------------------------------- synthetic cohort

#[test]
fn synthetic_cohort_depth_correlation_rises_for_every_subject() {
    use horosphere::synth::surface::{folded_surface, SurfaceParams};
    let n_subjects = 3;
    let mut subjects = Vec::new();
    for i in 0..n_subjects {
        let sp = SurfaceParams {
            vertices: 3000,
            ..SurfaceParams::default()
        };
        let s = folded_surface(&sp, 100 + i as u64).unwrap();
        // The subject sphere: the canonical directions (primary sulci move
        // by a few degrees per subject, secondary sulci are random).
        let sphere = TriMesh {
            positions: s.directions.iter().map(|&u| scale(u, 100.0)).collect(),
            faces: s.mesh.faces.clone(),
        };
        subjects.push(TemplateSubject {
            sphere,
            features: vec![s.depth.clone()],
        });
    }
    let opts = TemplateOptions {
        level: 4,
        rounds: 1,
        ..TemplateOptions::default()
    };
    let (template, report) =
        build_template(&subjects, &["depth".to_string()], &opts, &mut |_, _| {}).unwrap();
    assert_eq!(template.subjects, n_subjects);
    eprintln!("{:#?}", report.rounds);
    for (i, s) in subjects.iter().enumerate() {
        let reg = register(
            &s.sphere,
            &s.features,
            &template,
            &RegisterOptions::default(),
        )
        .unwrap();
        let f = &reg.report.features[0];
        eprintln!(
            "subject {i}: depth correlation {:.3} -> {:.3}",
            f.before, f.after
        );
        // Measured: 0.79, 0.78, 0.77 -> 0.88, 0.87, 0.89.
        assert!(f.after > f.before + 0.05, "subject {i}: {f:?}");
        assert_eq!(reg.report.jacobian.folded, 0);
        assert_eq!(reg.report.subject_folded, 0);
    }
}

// ------------------------------------------------------------ bad input

fn small_case() -> (TriMesh, Vec<Vec<f64>>, Template) {
    let mut rng = Rng::new(3);
    let field = Field::random(&mut rng, 12, 6.0);
    let subject = rotated_sphere(3, 50.0, &mut rng);
    let feats = vec![subject
        .positions
        .iter()
        .map(|&p| field.at(unit(p)))
        .collect::<Vec<f64>>()];
    let one = TemplateSubject {
        sphere: subject.clone(),
        features: feats.clone(),
    };
    let opts = TemplateOptions {
        level: 3,
        rounds: 0,
        ..TemplateOptions::default()
    };
    let (t, _) = build_template(&[one], &names(1), &opts, &mut |_, _| {}).unwrap();
    (subject, feats, t)
}

#[test]
fn bad_input_is_refused_with_clear_errors() {
    let (subject, feats, template) = small_case();
    let opts = RegisterOptions::default();
    // Wrong length.
    let mut short = feats.clone();
    short[0].pop();
    let e = register(&subject, &short, &template, &opts)
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("feature map 1 (f0) has 641 values") && e.contains("642"),
        "{e}"
    );
    // Constant.
    let flat = vec![vec![2.5; subject.n_vertices()]];
    let e = register(&subject, &flat, &template, &opts)
        .unwrap_err()
        .to_string();
    assert!(e.contains("constant"), "{e}");
    // Non-finite.
    let mut nan = feats.clone();
    nan[0][7] = f64::NAN;
    let e = register(&subject, &nan, &template, &opts)
        .unwrap_err()
        .to_string();
    assert!(e.contains("vertex 7") && e.contains("finite"), "{e}");
    // Feature count.
    let two = vec![feats[0].clone(), feats[0].clone()];
    let e = register(&subject, &two, &template, &opts)
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("2 feature maps given; the template has 1"),
        "{e}"
    );
    // A template whose maps do not fit its mesh.
    let mut bad = template.clone();
    bad.features[0].truncate(100);
    let e = register(&subject, &feats, &bad, &opts)
        .unwrap_err()
        .to_string();
    assert!(e.contains("expected 642 (icosphere level 3)"), "{e}");
    // Not a sphere.
    let mut lumpy = subject.clone();
    lumpy.positions[3] = scale(lumpy.positions[3], 1.5);
    let e = register(&lumpy, &feats, &template, &opts)
        .unwrap_err()
        .to_string();
    assert!(e.contains("sphere not"), "{e}");
}

#[test]
fn template_folder_round_trip_and_another_mesh() {
    let (_, _, template) = small_case();
    let dir = std::env::temp_dir().join(format!("horosphere-register-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    write_template(&dir, &template).unwrap();
    let back = read_template(&dir).unwrap();
    assert_eq!(back.level, 3);
    assert_eq!(back.names, template.names);
    for (a, b) in back.features[0].iter().zip(&template.features[0]) {
        assert!((a - b).abs() < 1e-5 * (1.0 + b.abs()));
    }
    // Replace the sphere by another mesh: refused, naming the file.
    horosphere::io::gifti::write_mesh(&dir.join("sphere.surf.gii"), &icosphere(2, 1.0)).unwrap();
    let e = read_template(&dir).unwrap_err().to_string();
    assert!(
        e.contains("sphere.surf.gii") && e.contains("expected the icosphere of level 3"),
        "{e}"
    );
    let _ = std::fs::remove_dir_all(&dir);
}

// ------------------------------------------------------------- commands

#[test]
fn register_template_and_register_commands() {
    use horosphere::io::gifti::{write_shape, MetaData};
    use std::process::Command;
    let bin = env!("CARGO_BIN_EXE_horosphere");
    let dir = std::env::temp_dir().join(format!("horosphere-register-cli-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let mut rng = Rng::new(21);
    let fields = [
        Field::random(&mut rng, 16, 8.0),
        Field::random(&mut rng, 16, 8.0),
    ];
    let warp = Warp {
        swirls: vec![(unit([0.1, 0.9, 0.3]), 0.2, 0.5)],
    };
    let mut table = String::from("subject,sphere,depth,curv\n");
    for s in 0..2 {
        let sphere = rotated_sphere(4, 100.0, &mut rng);
        let sp = dir.join(format!("s{s}.surf.gii"));
        horosphere::io::gifti::write_mesh(&sp, &sphere).unwrap();
        for (k, f) in fields.iter().enumerate() {
            let vals: Vec<f32> = sphere
                .positions
                .iter()
                .map(|&p| {
                    let x = unit(p);
                    let x = if s == 1 { warp.apply(x) } else { x };
                    f.at(x) as f32
                })
                .collect();
            write_shape(
                &dir.join(format!("s{s}-f{k}.shape.gii")),
                &vals,
                &MetaData::new(),
            )
            .unwrap();
        }
        table.push_str(&format!(
            "s{s},s{s}.surf.gii,s{s}-f0.shape.gii,s{s}-f1.shape.gii\n"
        ));
    }
    std::fs::write(dir.join("cohort.csv"), &table).unwrap();
    let tdir = dir.join("tpl");
    let out = Command::new(bin)
        .args(["register-template", "--cohort"])
        .arg(dir.join("cohort.csv"))
        .arg("-o")
        .arg(&tdir)
        .args(["--level", "3", "--rounds", "1", "--json"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let rep: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(rep["features"], serde_json::json!(["depth", "curv"]));
    let t = read_template(&tdir).unwrap();
    assert_eq!((t.level, t.subjects), (3, 2));
    // Register subject 1 to it.
    let warped = dir.join("s1-warped.surf.gii");
    let report = dir.join("s1.json");
    let out = Command::new(bin)
        .arg("register")
        .arg(dir.join("s1.surf.gii"))
        .arg("--features")
        .arg(dir.join("s1-f0.shape.gii"))
        .arg("--features")
        .arg(dir.join("s1-f1.shape.gii"))
        .arg("--template")
        .arg(&tdir)
        .arg("-o")
        .arg(&warped)
        .arg("--report")
        .arg(&report)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("correlation depth"), "{text}");
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&report).unwrap()).unwrap();
    assert_eq!(r["jacobian"]["folded"], 0);
    let (b, a) = (
        r["features"][0]["before"].as_f64().unwrap(),
        r["features"][0]["after"].as_f64().unwrap(),
    );
    assert!(a > b, "correlation {b} -> {a}");
    let m = horosphere::io::read_mesh(&warped).unwrap();
    assert_eq!(m.n_vertices(), 2562);
    // Bad feature files: exit status 1, the error names the file, no output.
    let refused = |features: [&std::path::Path; 2]| {
        let out = Command::new(bin)
            .arg("register")
            .arg(dir.join("s1.surf.gii"))
            .arg("--features")
            .arg(features[0])
            .arg("--features")
            .arg(features[1])
            .arg("--template")
            .arg(&tdir)
            .arg("-o")
            .arg(dir.join("never.surf.gii"))
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(1));
        assert!(!dir.join("never.surf.gii").exists());
        String::from_utf8_lossy(&out.stderr).into_owned()
    };
    // A feature file of the wrong length.
    let short = dir.join("short.shape.gii");
    write_shape(&short, &vec![1.0f32; 642], &MetaData::new()).unwrap();
    let err = refused([&dir.join("s1-f0.shape.gii"), &short]);
    assert!(
        err.contains("short.shape.gii") && err.contains("642 values"),
        "{err}"
    );
    // A constant feature file.
    let flat = dir.join("flat.shape.gii");
    write_shape(&flat, &vec![0.5f32; 2562], &MetaData::new()).unwrap();
    let err = refused([&flat, &dir.join("s1-f1.shape.gii")]);
    assert!(
        err.contains("flat.shape.gii") && err.contains("constant"),
        "{err}"
    );
    let _ = std::fs::remove_dir_all(&dir);
}

// ---------------------------------------------------------- determinism

#[test]
fn results_do_not_depend_on_the_thread_count() {
    let (subject, _, template) = small_case();
    let mut rng = Rng::new(9);
    let field = Field::random(&mut rng, 12, 6.0);
    let warp = Warp {
        swirls: vec![(unit([0.3, 0.3, 0.9]), 0.3, 0.5)],
    };
    // The template's own field is unknown here; register a warped copy of
    // a different field: any non-trivial run will do.
    let feats = vec![subject
        .positions
        .iter()
        .map(|&p| field.at(warp.apply(unit(p))))
        .collect::<Vec<f64>>()];
    let run = |threads: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| register(&subject, &feats, &template, &RegisterOptions::default()).unwrap())
    };
    let (a, b) = (run(1), run(3));
    assert_eq!(a.warped.positions, b.warped.positions);
    assert_eq!(a.velocity, b.velocity);
    assert!(a.report.stages.iter().map(|s| s.iterations).sum::<usize>() > 0);
}

// ------------------------------------------- planted effect sensitivity

/// Per template vertex, the pooled two-sample t statistic of controls
/// minus patients (thinning gives t > 0).
fn t_map(control: &[Vec<f64>], patient: &[Vec<f64>]) -> Vec<f64> {
    let n = control[0].len();
    let (n1, n2) = (control.len() as f64, patient.len() as f64);
    (0..n)
        .map(|i| {
            let m1 = control.iter().map(|s| s[i]).sum::<f64>() / n1;
            let m2 = patient.iter().map(|s| s[i]).sum::<f64>() / n2;
            let v1 = control.iter().map(|s| (s[i] - m1).powi(2)).sum::<f64>();
            let v2 = patient.iter().map(|s| (s[i] - m2).powi(2)).sum::<f64>();
            let sp = ((v1 + v2) / (n1 + n2 - 2.0)).sqrt();
            (m1 - m2) / (sp * (1.0 / n1 + 1.0 / n2).sqrt())
        })
        .collect()
}

/// Sensitivity (fraction of in-cap vertices above the threshold) at the
/// threshold that gives a 5% false-positive rate outside the cap (with a
/// 10-degree margin).
fn sensitivity_at_5pc(t: &[f64], inside: &[bool], outside: &[bool]) -> f64 {
    let mut out: Vec<f64> = t
        .iter()
        .zip(outside)
        .filter(|(_, &o)| o)
        .map(|(v, _)| *v)
        .collect();
    out.sort_by(f64::total_cmp);
    let thr = out[(0.95 * out.len() as f64) as usize];
    let (mut hit, mut n) = (0usize, 0usize);
    for (v, &i) in t.iter().zip(inside) {
        if i {
            n += 1;
            if *v > thr {
                hit += 1;
            }
        }
    }
    hit as f64 / n as f64
}

#[test]
fn planted_effect_sensitivity_with_and_without_registration() {
    use horosphere::resample::locate::Locator;
    use horosphere::synth::cohort::{generate_subject, participants, CohortParams, Group};
    let params = CohortParams {
        subjects: 12,
        vertices: 3000,
        defects: false,
        ..CohortParams::default()
    };
    let people = participants(&params);
    let mut subjects = Vec::new();
    let mut thick = Vec::new();
    let mut groups = Vec::new();
    for i in 0..params.subjects {
        let s = generate_subject(&params, &people, i).unwrap();
        let h = &s.hemis[0]; // left: the effect's hemisphere
        let sp = horosphere::synth::surface::SurfaceParams {
            vertices: params.vertices,
            ..params.surface.clone()
        };
        let seed = horosphere::synth::cohort::subject_seed(&params, i);
        let fs = horosphere::synth::surface::folded_surface(&sp, seed).unwrap();
        assert_eq!(fs.mesh.n_vertices(), h.mesh.n_vertices());
        let sphere = TriMesh {
            positions: fs.directions.iter().map(|&u| scale(u, 100.0)).collect(),
            faces: h.mesh.faces.clone(),
        };
        subjects.push(TemplateSubject {
            sphere,
            features: vec![h.depth.iter().map(|&d| f64::from(d)).collect()],
        });
        thick.push(
            h.thickness
                .iter()
                .map(|&t| f64::from(t))
                .collect::<Vec<f64>>(),
        );
        groups.push(s.participant.group);
    }
    let level = 4;
    let opts = TemplateOptions {
        level,
        rounds: 1,
        ..TemplateOptions::default()
    };
    let (template, _) =
        build_template(&subjects, &["depth".to_string()], &opts, &mut |_, _| {}).unwrap();
    let grid = IcoGrid::new(level);
    let (mut base, mut reg) = (Vec::new(), Vec::new());
    for (s, t) in subjects.iter().zip(&thick) {
        let loc = Locator::new(&s.sphere.positions, None, 1e-3).unwrap();
        let sample = |pts: &[Vec3]| -> Vec<f64> {
            loc.locate(pts)
                .unwrap()
                .points
                .iter()
                .map(|l| {
                    (0..3)
                        .map(|j| l.weights[j] * t[l.vertices[j] as usize])
                        .sum()
                })
                .collect()
        };
        base.push(sample(&grid.points));
        let r = register(
            &s.sphere,
            &s.features,
            &template,
            &RegisterOptions::default(),
        )
        .unwrap();
        reg.push(sample(&r.correspondence));
    }
    let split = |maps: &[Vec<f64>]| {
        let c: Vec<Vec<f64>> = maps
            .iter()
            .zip(&groups)
            .filter(|(_, g)| **g == Group::Control)
            .map(|(m, _)| m.clone())
            .collect();
        let p: Vec<Vec<f64>> = maps
            .iter()
            .zip(&groups)
            .filter(|(_, g)| **g == Group::Patient)
            .map(|(m, _)| m.clone())
            .collect();
        t_map(&c, &p)
    };
    let cap = &params.effect;
    let ang: Vec<f64> = grid
        .points
        .iter()
        .map(|&x| angle(x, cap.centre).to_degrees())
        .collect();
    let inside: Vec<bool> = ang.iter().map(|&a| a <= cap.angular_radius_deg).collect();
    let outside: Vec<bool> = ang
        .iter()
        .map(|&a| a > cap.angular_radius_deg + 10.0)
        .collect();
    let s_base = sensitivity_at_5pc(&split(&base), &inside, &outside);
    let s_reg = sensitivity_at_5pc(&split(&reg), &inside, &outside);
    eprintln!("sensitivity at 5% FPR: canonical frame {s_base:.3}, registered {s_reg:.3}");
    // Measured (seed 1): 0.413 -> 0.556; seeds 2 and 3 (not run here):
    // 0.270 -> 0.365 and 0.571 -> 0.619.
    assert!(s_reg > s_base + 0.05, "{s_base} -> {s_reg}");
}
