//! Landmark templates: the target position of each named landmark on the
//! common sphere, read from and written to TOML, and estimated from a
//! cohort.
//!
//! # File layout (our own)
//!
//! ```toml
//! # horosphere landmark template
//! format = "horosphere-landmark-template"   # optional on reading
//! version = 1                                # optional on reading
//!
//! [built]                                    # optional; written by `build_template`
//! subjects = 12
//! iterations = 7
//! fit = "mobius"
//! center = "area"
//! final_change_degrees = 3.1e-9
//!
//! [[landmark]]
//! name = "ridge-a"
//! latitude = 12.5      # degrees, -90 (south pole) to 90 (north pole)
//! longitude = -40.0    # degrees, east of the +x axis towards +y
//! weight = 1.0         # optional, default 1, must be positive
//! spread_degrees = 0.8 # optional; RMS distance of the cohort around it
//! ```
//!
//! The unit vector of `(latitude, longitude)` is
//! `(cos lat cos lon, cos lat sin lon, sin lat)`.
//!
//! # Estimation from a cohort
//!
//! [`build_template`] is a generalised Procrustes iteration on the sphere
//! (Gower, "Generalized Procrustes analysis", Psychometrika 40 (1975)
//! 33-51, with the fits of [`super::landmarks`]): centre every subject
//! (Springborn 2005), start from the subject with the most landmarks, then
//! repeat: fit every subject to the template, average each landmark's
//! fitted positions (normalised mean: the sum of the unit vectors divided by
//! its length, the extrinsic mean on the sphere), and pin the pose of the
//! new template to the previous one by a fit of the same kind (the average
//! is not Moebius-equivariant, so without this its pose could drift). Stop
//! when no landmark moves by more than the tolerance.
//!
//! Invariants: every template this module returns has unique non-empty
//! names, finite coordinates in range, positive weights and no two
//! landmarks at the same place.

use super::centring::{centre, CentringOptions};
use super::landmarks::{fit, FitKind, FitOptions, Landmark};
use crate::error::{Error, Result};
use crate::io::atomic::write_atomic;
use crate::mesh::{dist, norm, scale, Vec3};
use crate::moebius::{angle, Moebius};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::path::Path;

/// Value of the `format` key.
pub const TEMPLATE_FORMAT: &str = "horosphere-landmark-template";

/// One landmark of a template.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TemplateLandmark {
    /// Name, matched against the subjects' landmark tables.
    pub name: String,
    /// Latitude in degrees, in `[-90, 90]`.
    pub latitude: f64,
    /// Longitude in degrees, in `[-360, 360]`.
    pub longitude: f64,
    /// Weight in the fits (positive).
    #[serde(default = "one")]
    pub weight: f64,
    /// RMS angular distance (degrees) of the cohort's fitted landmarks.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub spread_degrees: Option<f64>,
}

fn one() -> f64 {
    1.0
}

impl TemplateLandmark {
    /// A landmark at the unit vector `x`.
    pub fn from_direction(name: &str, x: Vec3, weight: f64) -> Self {
        TemplateLandmark {
            name: name.to_string(),
            latitude: x[2].atan2(x[0].hypot(x[1])).to_degrees(),
            longitude: x[1].atan2(x[0]).to_degrees(),
            weight,
            spread_degrees: None,
        }
    }

    /// The unit vector `(cos lat cos lon, cos lat sin lon, sin lat)`.
    pub fn direction(&self) -> Vec3 {
        let (la, lo) = (self.latitude.to_radians(), self.longitude.to_radians());
        [la.cos() * lo.cos(), la.cos() * lo.sin(), la.sin()]
    }
}

/// How a template was estimated (the `[built]` table).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TemplateProvenance {
    /// Number of subjects.
    pub subjects: usize,
    /// Iterations of the estimation.
    pub iterations: usize,
    /// Fit kind (`rotation` or `mobius`).
    pub fit: String,
    /// Centring (`area`, `uniform` or `none`).
    pub center: String,
    /// Largest landmark move (degrees) in the last iteration.
    pub final_change_degrees: f64,
}

/// A landmark template.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Template {
    /// Landmarks in file order.
    pub landmarks: Vec<TemplateLandmark>,
    /// Present when the template was estimated by [`build_template`].
    pub built: Option<TemplateProvenance>,
}

#[derive(Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct TemplateFile {
    #[serde(default)]
    format: Option<String>,
    #[serde(default)]
    version: Option<i64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    built: Option<TemplateProvenance>,
    #[serde(default)]
    landmark: Vec<TemplateLandmark>,
}

impl Template {
    /// Check the invariants (see the module doc); the error names the landmark.
    pub fn validate(&self) -> Result<()> {
        if self.landmarks.is_empty() {
            return Err(Error::Invalid(
                "template has no landmarks; expected [[landmark]] tables".into(),
            ));
        }
        let mut seen = HashMap::new();
        for (i, l) in self.landmarks.iter().enumerate() {
            let el = format!("landmark {} (`{}`)", i + 1, l.name);
            if l.name.trim().is_empty() {
                return Err(Error::Invalid(format!("landmark {}: empty name", i + 1)));
            }
            if let Some(j) = seen.insert(l.name.as_str(), i) {
                return Err(Error::Invalid(format!(
                    "{el}: name also used by landmark {}; names must be unique",
                    j + 1
                )));
            }
            let lat_ok = l.latitude.abs() <= 90.0;
            if !lat_ok {
                return Err(Error::Invalid(format!(
                    "{el}: latitude {} is outside [-90, 90] degrees",
                    l.latitude
                )));
            }
            let lon_ok = l.longitude.abs() <= 360.0;
            if !lon_ok {
                return Err(Error::Invalid(format!(
                    "{el}: longitude {} is outside [-360, 360] degrees",
                    l.longitude
                )));
            }
            if !(l.weight.is_finite() && l.weight > 0.0) {
                return Err(Error::Invalid(format!(
                    "{el}: weight {} is not a positive finite number",
                    l.weight
                )));
            }
        }
        for i in 0..self.landmarks.len() {
            for j in 0..i {
                let (a, b) = (&self.landmarks[j], &self.landmarks[i]);
                if dist(a.direction(), b.direction()) < 1e-9 {
                    return Err(Error::Invalid(format!(
                        "landmarks `{}` and `{}` are at the same place; coincident landmarks are not allowed",
                        a.name, b.name
                    )));
                }
            }
        }
        Ok(())
    }

    /// The landmark called `name`.
    pub fn get(&self, name: &str) -> Option<&TemplateLandmark> {
        self.landmarks.iter().find(|l| l.name == name)
    }
}

/// Read and validate a template TOML file.
pub fn read_template(path: &Path) -> Result<Template> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    let file: TemplateFile = toml::from_str(&text)
        .map_err(|e| Error::bad_file(path, "TOML", e.to_string().trim_end().to_string()))?;
    if let Some(f) = &file.format {
        if f != TEMPLATE_FORMAT {
            return Err(Error::bad_file(
                path,
                "format",
                format!("found `{f}`; expected `{TEMPLATE_FORMAT}`"),
            ));
        }
    }
    if let Some(v) = file.version {
        if v != 1 {
            return Err(Error::bad_file(
                path,
                "version",
                format!("found {v}; this build reads version 1"),
            ));
        }
    }
    let t = Template {
        landmarks: file.landmark,
        built: file.built,
    };
    t.validate().map_err(|e| e.in_file(path, "landmarks"))?;
    Ok(t)
}

/// Write a template TOML file atomically (after validating it).
pub fn write_template(path: &Path, template: &Template) -> Result<()> {
    template.validate()?;
    let file = TemplateFile {
        format: Some(TEMPLATE_FORMAT.into()),
        version: Some(1),
        built: template.built.clone(),
        landmark: template.landmarks.clone(),
    };
    let body = toml::to_string(&file).map_err(|e| Error::Algorithm {
        stage: "template writer",
        message: e.to_string(),
    })?;
    let text = format!(
        "# horosphere landmark template: target positions on the unit sphere\n\
         # (latitude, longitude in degrees). Research use only.\n{body}"
    );
    write_atomic(path, |w| {
        w.write_all(text.as_bytes()).map_err(|e| Error::io(path, e))
    })
}

/// One subject of [`build_template`]: unit directions of its sphere's
/// vertices, optional centring weights (uniform when `None`), landmarks.
#[derive(Debug, Clone, Copy)]
pub struct TemplateSubject<'a> {
    /// Identifier used in error messages.
    pub id: &'a str,
    /// Unit vectors of the sphere's vertices.
    pub directions: &'a [Vec3],
    /// Centring weights (native vertex areas); uniform when `None`.
    pub weights: Option<&'a [f64]>,
    /// Landmarks (vertex indices into `directions`).
    pub landmarks: &'a [Landmark],
}

/// Settings of [`build_template`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TemplateOptions {
    /// Fit of each subject to the template.
    pub fit: FitKind,
    /// Centring before the fit (`None`: no centring).
    pub centring: Option<CentringOptions>,
    /// Label of the centring for the `[built]` table (`area`, `uniform`, `none`).
    pub center_label: &'static str,
    /// Settings of the Moebius fit.
    pub fit_options: FitOptions,
    /// Stop when no landmark moves by more than this many degrees.
    pub tolerance_degrees: f64,
    /// Give up after this many iterations ([`Error::Algorithm`]).
    pub max_iterations: usize,
}

impl Default for TemplateOptions {
    fn default() -> Self {
        TemplateOptions {
            fit: FitKind::Mobius,
            centring: Some(CentringOptions::default()),
            center_label: "area",
            fit_options: FitOptions::default(),
            tolerance_degrees: 1e-8,
            max_iterations: 200,
        }
    }
}

/// Estimate a template from a cohort (see the module doc). Landmark order:
/// first appearance, walking the subjects in order starting with the one
/// with the most landmarks. Errors name the subject.
pub fn build_template(subjects: &[TemplateSubject], opts: &TemplateOptions) -> Result<Template> {
    if subjects.is_empty() {
        return Err(Error::Invalid("template: no subjects".into()));
    }
    // Centred landmark directions of each subject.
    let mut points: Vec<Vec<(usize, Vec3)>> = Vec::with_capacity(subjects.len());
    let mut names: Vec<String> = Vec::new();
    let mut index: HashMap<String, usize> = HashMap::new();
    let mut order: Vec<usize> = (0..subjects.len()).collect();
    order.sort_by_key(|&s| std::cmp::Reverse(subjects[s].landmarks.len()));
    for &s in &order {
        for l in subjects[s].landmarks {
            if !index.contains_key(&l.name) {
                index.insert(l.name.clone(), names.len());
                names.push(l.name.clone());
            }
        }
    }
    for s in subjects {
        let n = s.directions.len();
        let c = match opts.centring {
            None => Moebius::identity(),
            Some(co) => {
                let uniform;
                let w = match s.weights {
                    Some(w) => w,
                    None => {
                        uniform = vec![1.0; n];
                        &uniform
                    }
                };
                centre(s.directions, w, &co)
                    .map_err(|e| subject_error(s.id, e))?
                    .transform
            }
        };
        let mut pts = Vec::with_capacity(s.landmarks.len());
        for l in s.landmarks {
            let d = s.directions.get(l.vertex).ok_or_else(|| {
                Error::Invalid(format!(
                    "subject {}: landmark `{}` at vertex {} is out of range (the sphere has {n} vertices)",
                    s.id, l.name, l.vertex
                ))
            })?;
            let k = index.get(&l.name).copied().unwrap_or(0);
            pts.push((k, c.apply(*d)));
        }
        points.push(pts);
    }
    // Start: the subject with the most landmarks.
    let mut current: Vec<Option<Vec3>> = vec![None; names.len()];
    for &(k, x) in &points[order[0]] {
        current[k] = Some(x);
    }
    let mut change = f64::INFINITY;
    let mut iterations = 0;
    let mut spread = vec![0.0; names.len()];
    while iterations < opts.max_iterations {
        iterations += 1;
        let mut sum = vec![[0.0; 3]; names.len()];
        let mut sq = vec![0.0; names.len()];
        let mut count = vec![0usize; names.len()];
        let mut fitted_all: Vec<Vec<(usize, Vec3)>> = Vec::with_capacity(points.len());
        for (s, pts) in points.iter().enumerate() {
            let (mut p, mut q, mut lab) = (Vec::new(), Vec::new(), Vec::new());
            for &(k, x) in pts {
                if let Some(t) = current[k] {
                    p.push(x);
                    q.push(t);
                    lab.push(names[k].clone());
                }
            }
            let w = vec![1.0; p.len()];
            let f = fit(opts.fit, &p, &q, &w, &lab, &opts.fit_options)
                .map_err(|e| subject_error(subjects[s].id, e))?;
            let fitted: Vec<(usize, Vec3)> = pts
                .iter()
                .map(|&(k, x)| (k, f.transform.apply(x)))
                .collect();
            for &(k, y) in &fitted {
                sum[k] = crate::mesh::add(sum[k], y);
                count[k] += 1;
            }
            fitted_all.push(fitted);
        }
        let mut mean = vec![[0.0; 3]; names.len()];
        for k in 0..names.len() {
            let l = norm(sum[k]);
            let defined = l > 1e-6 * count[k] as f64;
            if !defined {
                return Err(Error::Algorithm {
                    stage: "template",
                    message: format!(
                        "landmark `{}` is spread over the whole sphere across subjects; its mean is undefined",
                        names[k]
                    ),
                });
            }
            mean[k] = scale(sum[k], 1.0 / l);
        }
        // Pin the pose to the previous template.
        let (mut p, mut q, mut lab) = (Vec::new(), Vec::new(), Vec::new());
        for k in 0..names.len() {
            if let Some(t) = current[k] {
                p.push(mean[k]);
                q.push(t);
                lab.push(names[k].clone());
            }
        }
        let w = vec![1.0; p.len()];
        let pin = fit(opts.fit, &p, &q, &w, &lab, &opts.fit_options)?;
        let next: Vec<Vec3> = mean.iter().map(|&x| pin.transform.apply(x)).collect();
        change = 0.0;
        for k in 0..names.len() {
            change = match current[k] {
                Some(t) => change.max(angle(t, next[k]).to_degrees()),
                None => f64::INFINITY,
            };
        }
        for fitted in &fitted_all {
            for &(k, y) in fitted {
                let a = angle(pin.transform.apply(y), next[k]).to_degrees();
                sq[k] += a * a;
            }
        }
        for k in 0..names.len() {
            spread[k] = (sq[k] / count[k].max(1) as f64).sqrt();
        }
        current = next.into_iter().map(Some).collect();
        if change <= opts.tolerance_degrees {
            break;
        }
    }
    if change > opts.tolerance_degrees {
        return Err(Error::Algorithm {
            stage: "template",
            message: format!(
                "largest landmark move {change:e} degrees after {iterations} iterations, tolerance {:e}",
                opts.tolerance_degrees
            ),
        });
    }
    let landmarks = names
        .iter()
        .zip(&current)
        .zip(&spread)
        .map(|((n, x), s)| {
            let mut l = TemplateLandmark::from_direction(n, x.unwrap_or([0.0, 0.0, 1.0]), 1.0);
            l.spread_degrees = Some(*s);
            l
        })
        .collect();
    let t = Template {
        landmarks,
        built: Some(TemplateProvenance {
            subjects: subjects.len(),
            iterations,
            fit: opts.fit.as_str().into(),
            center: opts.center_label.into(),
            final_change_degrees: change,
        }),
    };
    t.validate()?;
    Ok(t)
}

/// One row of a cohort table (see [`read_cohort`]).
#[derive(Debug, Clone, PartialEq)]
pub struct CohortEntry {
    /// Subject label.
    pub subject: String,
    /// Mapped sphere.
    pub sphere: std::path::PathBuf,
    /// Landmark CSV.
    pub landmarks: std::path::PathBuf,
    /// Native surface (centring weights, snapping of x,y,z landmarks).
    pub surface: Option<std::path::PathBuf>,
    /// Line of the table (1-based, the header is line 1).
    pub line: usize,
}

/// Read a cohort table: CSV with header `subject,sphere,landmarks` and an
/// optional fourth column `surface` (an empty cell means none). Relative
/// paths are taken relative to the table's folder. Subject labels must be
/// unique.
pub fn read_cohort(path: &Path) -> Result<Vec<CohortEntry>> {
    let (mut rdr, header) = super::open_csv(path)?;
    let has_surface = header == ["subject", "sphere", "landmarks", "surface"];
    if !has_surface && header != ["subject", "sphere", "landmarks"] {
        return Err(Error::bad_file(
            path,
            "header",
            format!("found columns {header:?}; expected `subject,sphere,landmarks` or `subject,sphere,landmarks,surface`"),
        ));
    }
    let resolve = |s: &str| super::table_path(path, s);
    let rows = super::subject_rows(
        path,
        &mut rdr,
        &[(0, "subject"), (1, "sphere"), (2, "landmarks")],
    )?;
    let mut out: Vec<CohortEntry> = Vec::with_capacity(rows.len());
    for (line, rec) in rows {
        let field = |i: usize| rec.get(i).unwrap_or("");
        let surface = if has_surface && !field(3).is_empty() {
            Some(resolve(field(3)))
        } else {
            None
        };
        out.push(CohortEntry {
            subject: field(0).to_string(),
            sphere: resolve(field(1)),
            landmarks: resolve(field(2)),
            surface,
            line,
        });
    }
    Ok(out)
}

fn subject_error(id: &str, e: Error) -> Error {
    match e {
        Error::Invalid(m) => Error::Invalid(format!("subject {id}: {m}")),
        Error::Algorithm { stage, message } => Error::Algorithm {
            stage,
            message: format!("subject {id}: {message}"),
        },
        other => other,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::shapes::icosphere;
    use crate::moebius::SeededRng;

    fn temp_dir(tag: &str) -> std::path::PathBuf {
        let d = std::env::temp_dir().join(format!("horosphere-tpl-{tag}-{}", std::process::id()));
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    #[test]
    fn toml_round_trip_and_directions() {
        let dir = temp_dir("rt");
        let f = dir.join("t.toml");
        let t = Template {
            landmarks: vec![
                TemplateLandmark::from_direction("a", [1.0, 0.0, 0.0], 1.0),
                TemplateLandmark::from_direction("b", [0.0, 0.6, 0.8], 2.5),
                TemplateLandmark::from_direction("c", [0.0, 0.0, -1.0], 1.0),
            ],
            built: None,
        };
        assert!((t.landmarks[1].latitude - 0.8f64.asin().to_degrees()).abs() < 1e-12);
        assert!((t.landmarks[1].longitude - 90.0).abs() < 1e-12);
        write_template(&f, &t).unwrap();
        let back = read_template(&f).unwrap();
        assert_eq!(back, t);
        assert!(dist(back.landmarks[1].direction(), [0.0, 0.6, 0.8]) < 1e-15);
        // Hand-written file without the optional keys.
        std::fs::write(
            &f,
            "[[landmark]]\nname = \"x\"\nlatitude = 10\nlongitude = 20\n\n[[landmark]]\nname = \"y\"\nlatitude = -5.5\nlongitude = 170\nweight = 3\n",
        )
        .unwrap();
        let t = read_template(&f).unwrap();
        assert_eq!(t.landmarks[0].weight, 1.0);
        assert_eq!(t.landmarks[1].weight, 3.0);
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn bad_templates_are_refused() {
        let dir = temp_dir("bad");
        let f = dir.join("t.toml");
        let cases = [
            ("[[landmark]]\nname = \"x\"\nlatitude = 100\nlongitude = 0\n", "latitude 100"),
            ("[[landmark]]\nname = \"x\"\nlatitude = 1\nlongitude = 0\nweight = 0\n", "weight"),
            ("[[landmark]]\nname = \"x\"\nlatitude = 1\nlongitude = 0\n[[landmark]]\nname = \"x\"\nlatitude = 2\nlongitude = 0\n", "unique"),
            ("[[landmark]]\nname = \"x\"\nlatitude = 1\nlongitude = 0\n[[landmark]]\nname = \"y\"\nlatitude = 1\nlongitude = 360\n", "same place"),
            ("[[landmark]]\nname = \"x\"\nlatitude = 1\nlongitde = 0\n", "TOML"),
            ("format = \"other\"\n[[landmark]]\nname = \"x\"\nlatitude = 1\nlongitude = 0\n", "format"),
            ("", "no landmarks"),
        ];
        for (text, want) in cases {
            std::fs::write(&f, text).unwrap();
            let e = read_template(&f).unwrap_err().to_string();
            assert!(e.contains(want) && e.contains("t.toml"), "{want}: {e}");
        }
        std::fs::remove_dir_all(&dir).unwrap();
    }

    /// Spheres, landmarks, centring weights, planted landmark positions.
    type Cohort = (Vec<Vec<Vec3>>, Vec<Vec<Landmark>>, Vec<f64>, Vec<Vec3>);

    /// A cohort made from one base sphere: each subject is the sphere moved
    /// by its own random Moebius map, with its landmarks jittered by up to
    /// `jitter` degrees around the planted positions.
    fn cohort(n_subjects: usize, jitter: f64) -> Cohort {
        let base = icosphere(3, 1.0);
        let w = base.vertex_areas();
        let planted_vertices = [0usize, 5, 17, 40, 101, 222, 300, 444];
        let planted: Vec<Vec3> = planted_vertices
            .iter()
            .map(|&v| base.positions[v])
            .collect();
        let mut rng = SeededRng::new(31);
        let mut spheres = Vec::new();
        let mut lms = Vec::new();
        for s in 0..n_subjects {
            let m = Moebius::random(500 + s as u64, 1.0);
            spheres.push(m.apply_all(&base.positions));
            // Jitter: snap a perturbed planted point to the nearest vertex.
            let l = planted_vertices
                .iter()
                .enumerate()
                .map(|(i, &v)| {
                    let target = if jitter > 0.0 {
                        let axis = rng.unit_vector();
                        let ang = jitter.to_radians() * rng.uniform();
                        Moebius::rotation_vector(scale(axis, ang)).apply(base.positions[v])
                    } else {
                        base.positions[v]
                    };
                    let (k, _) =
                        super::super::landmarks::nearest_vertex(&base.positions, target).unwrap();
                    Landmark {
                        name: format!("lm{i}"),
                        vertex: k,
                        snap_mm: None,
                    }
                })
                .collect();
            lms.push(l);
        }
        (spheres, lms, w, planted)
    }

    #[test]
    fn cohort_without_jitter_gives_the_planted_shape() {
        // Subjects that differ only by Moebius maps: the template must be the
        // planted landmark set up to a Moebius map, with zero spread.
        let (spheres, lms, w, planted) = cohort(5, 0.0);
        let subjects: Vec<TemplateSubject> = (0..5)
            .map(|s| TemplateSubject {
                id: "s",
                directions: &spheres[s],
                weights: Some(&w),
                landmarks: &lms[s],
            })
            .collect();
        for kind in [FitKind::Mobius, FitKind::Rotation] {
            let opts = TemplateOptions {
                fit: kind,
                ..Default::default()
            };
            let t = build_template(&subjects, &opts).unwrap();
            let q: Vec<Vec3> = t.landmarks.iter().map(|l| l.direction()).collect();
            let f = fit(
                FitKind::Mobius,
                &planted,
                &q,
                &[1.0; 8],
                &[],
                &FitOptions::default(),
            )
            .unwrap();
            assert!(f.cost < 1e-18, "{kind:?}: {}", f.cost);
            for l in &t.landmarks {
                assert!(l.spread_degrees.unwrap() < 1e-7, "{kind:?}: {l:?}");
            }
            assert!(t.built.as_ref().unwrap().iterations < 20);
        }
    }

    #[test]
    fn jittered_cohort_converges_with_spread_of_the_jitter() {
        // Landmarks jittered by up to 12 degrees (then snapped to vertices of
        // a level-3 icosphere, about 8 degrees apart): the spread of each
        // template landmark must be of the order of the planted jitter.
        let (spheres, lms, w, _) = cohort(8, 12.0);
        let subjects: Vec<TemplateSubject> = (0..8)
            .map(|s| TemplateSubject {
                id: "s",
                directions: &spheres[s],
                weights: Some(&w),
                landmarks: &lms[s],
            })
            .collect();
        let t = build_template(&subjects, &TemplateOptions::default()).unwrap();
        for l in &t.landmarks {
            let s = l.spread_degrees.unwrap();
            assert!(s < 16.0, "{l:?}");
        }
        let mean_spread: f64 = t
            .landmarks
            .iter()
            .map(|l| l.spread_degrees.unwrap())
            .sum::<f64>()
            / 8.0;
        assert!(mean_spread > 1.0, "{mean_spread}");
    }

    #[test]
    fn cohort_table_paths_are_relative_to_the_table() {
        let dir = temp_dir("cohort");
        let f = dir.join("cohort.csv");
        std::fs::write(
            &f,
            "subject,sphere,landmarks,surface\nA,a/s.obj,a/l.csv,\nB,/abs/s.obj,b.csv,b/n.obj\n",
        )
        .unwrap();
        let c = read_cohort(&f).unwrap();
        assert_eq!(c.len(), 2);
        assert_eq!(c[0].sphere, dir.join("a/s.obj"));
        assert_eq!(c[0].surface, None);
        assert_eq!(c[1].sphere, std::path::PathBuf::from("/abs/s.obj"));
        assert_eq!(c[1].surface, Some(dir.join("b/n.obj")));
        std::fs::write(&f, "subject,sphere,landmarks\nA,s,l\nA,t,m\n").unwrap();
        let e = read_cohort(&f).unwrap_err().to_string();
        assert!(e.contains("line 3") && e.contains("twice"), "{e}");
        std::fs::write(&f, "id,sphere\nA,s\n").unwrap();
        assert!(read_cohort(&f).unwrap_err().to_string().contains("header"));
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn subject_errors_are_named() {
        let (spheres, mut lms, w, _) = cohort(2, 0.0);
        lms[1][0].vertex = 10_000;
        let subjects: Vec<TemplateSubject> = ["first", "second"]
            .iter()
            .enumerate()
            .map(|(s, id)| TemplateSubject {
                id,
                directions: &spheres[s],
                weights: Some(&w),
                landmarks: &lms[s],
            })
            .collect();
        let e = build_template(&subjects, &TemplateOptions::default())
            .unwrap_err()
            .to_string();
        assert!(e.contains("second") && e.contains("out of range"), "{e}");
    }
}
