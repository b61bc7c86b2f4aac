//! Moebius normalisation of mapped spheres: centring, landmark fits and
//! cohort templates.
//!
//! A conformal map to the sphere is unique only up to a Moebius
//! transformation (six real degrees of freedom); this stage fixes that
//! freedom so that subjects correspond.
//!
//! In: a mapped sphere (vertex positions of a sphere centred at the origin,
//! any radius), optional centring weights (the native surface's vertex
//! areas), the subject's landmarks (vertex indices) and a [`Template`].
//! Out: an [`Alignment`]: the Moebius map (centring, then fit), per-landmark
//! residuals in degrees and their RMS. The aligned sphere is the map applied
//! to the unit directions, scaled back to the input radius, in the same
//! vertex order ([`aligned_positions`]).
//!
//! * [`centring`]: weighted Moebius centring (Springborn, "A unique
//!   representation of polyhedral types. Centering via Moebius
//!   transformations", Math. Z. 249 (2005)).
//! * [`landmarks`]: landmark tables, rotation fit (Kabsch, Acta Cryst. A32
//!   (1976) 922) and Moebius fit (Levenberg-Marquardt on rotation x boost).
//! * [`template`]: template TOML files and their estimation from a cohort.
//!
//! Invariants: the output keeps the vertex count and order; errors name the
//! landmark or vertex at fault; results do not depend on the thread count.

pub mod centring;
pub mod landmarks;
pub mod template;

pub use centring::{centre, Centring, CentringOptions};
pub use landmarks::{Fit, FitKind, FitOptions, Landmark};
pub use template::{build_template, read_template, write_template, Template, TemplateOptions};

use crate::error::{Error, Result};
use crate::mesh::{norm, scale, Vec3};
use crate::moebius::Moebius;

/// Largest relative deviation of a vertex's distance from the centre from
/// the mean radius that [`unit_directions`] accepts.
pub const SPHERE_RADIUS_TOLERANCE: f64 = 0.05;

/// Settings of [`align`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AlignOptions {
    /// The fit to the template.
    pub fit: FitKind,
    /// Centring before the fit; `None` for no centring.
    pub centring: Option<CentringOptions>,
    /// Settings of the Moebius fit.
    pub fit_options: FitOptions,
}

impl Default for AlignOptions {
    fn default() -> Self {
        AlignOptions {
            fit: FitKind::Mobius,
            centring: Some(CentringOptions::default()),
            fit_options: FitOptions::default(),
        }
    }
}

/// Residual of one landmark after alignment.
#[derive(Debug, Clone, PartialEq)]
pub struct LandmarkResidual {
    /// Landmark name.
    pub name: String,
    /// Vertex index on the sphere.
    pub vertex: usize,
    /// Angle between the aligned landmark and its template target, degrees.
    pub residual_degrees: f64,
}

/// Result of [`align`].
#[derive(Debug, Clone, PartialEq)]
pub struct Alignment {
    /// The whole map: `fit ∘ centring`.
    pub transform: Moebius,
    /// The centring step, if any.
    pub centring: Option<Centring>,
    /// The fit step.
    pub fit: Fit,
    /// Residuals, in the order of the landmarks given.
    pub residuals: Vec<LandmarkResidual>,
    /// Root mean square of the residuals, degrees.
    pub rms_degrees: f64,
    /// Largest residual, degrees.
    pub max_degrees: f64,
}

/// Unit directions of the vertices of a sphere centred at the origin and
/// its radius (the mean distance from the origin). Errors name the first
/// vertex whose distance from the origin is not within
/// [`SPHERE_RADIUS_TOLERANCE`] of the mean.
pub fn unit_directions(positions: &[Vec3]) -> Result<(Vec<Vec3>, f64)> {
    if positions.is_empty() {
        return Err(Error::Invalid("sphere has no vertices".into()));
    }
    let radius = positions.iter().map(|p| norm(*p)).sum::<f64>() / positions.len() as f64;
    if !(radius > 0.0 && radius.is_finite()) {
        return Err(Error::Invalid(format!(
            "sphere has mean radius {radius}; expected a positive finite radius"
        )));
    }
    let mut out = Vec::with_capacity(positions.len());
    for (i, p) in positions.iter().enumerate() {
        let r = norm(*p);
        let on_sphere = (r / radius - 1.0).abs() <= SPHERE_RADIUS_TOLERANCE;
        if !on_sphere {
            return Err(Error::Invalid(format!(
                "vertex {i} is at distance {r} from the origin but the mean radius is {radius}; expected a sphere centred at the origin (within {}%)",
                SPHERE_RADIUS_TOLERANCE * 100.0
            )));
        }
        out.push(scale(*p, 1.0 / r));
    }
    Ok((out, radius))
}

/// Positions of the aligned sphere: `radius * T(d)` for each unit
/// direction `d`, same order.
pub fn aligned_positions(transform: &Moebius, directions: &[Vec3], radius: f64) -> Vec<Vec3> {
    use rayon::prelude::*;
    directions
        .par_iter()
        .map(|d| scale(transform.apply(*d), radius))
        .collect()
}

/// Align a sphere to a template: centre (weights `weights`, uniform when
/// `None`), then fit the landmarks to their template targets. Every landmark
/// must be named in the template (extra template landmarks are ignored).
pub fn align(
    directions: &[Vec3],
    weights: Option<&[f64]>,
    landmarks: &[Landmark],
    template: &Template,
    opts: &AlignOptions,
) -> Result<Alignment> {
    let n = directions.len();
    if let Some(w) = weights {
        if w.len() != n {
            return Err(Error::Invalid(format!(
                "{} centring weights for a sphere of {n} vertices; the native surface must have the sphere's vertex count",
                w.len()
            )));
        }
    }
    let mut q = Vec::with_capacity(landmarks.len());
    let mut tw = Vec::with_capacity(landmarks.len());
    let mut names = Vec::with_capacity(landmarks.len());
    for l in landmarks {
        if l.vertex >= n {
            return Err(Error::Invalid(format!(
                "landmark `{}`: vertex {} is out of range; the sphere has {n} vertices",
                l.name, l.vertex
            )));
        }
        let t = template.get(&l.name).ok_or_else(|| {
            let known: Vec<&str> = template.landmarks.iter().map(|t| t.name.as_str()).collect();
            Error::Invalid(format!(
                "landmark `{}` is not in the template (it has: {})",
                l.name,
                known.join(", ")
            ))
        })?;
        q.push(t.direction());
        tw.push(t.weight);
        names.push(l.name.clone());
    }
    let centring = match opts.centring {
        None => None,
        Some(co) => {
            let uniform;
            let w = match weights {
                Some(w) => w,
                None => {
                    uniform = vec![1.0; n];
                    &uniform
                }
            };
            Some(centre(directions, w, &co)?)
        }
    };
    let c = centring.map(|c| c.transform).unwrap_or_default();
    // Landmark vertices were checked above.
    let p: Vec<Vec3> = landmarks
        .iter()
        .map(|l| c.apply(directions.get(l.vertex).copied().unwrap_or([0.0, 0.0, 1.0])))
        .collect();
    let fit = landmarks::fit(opts.fit, &p, &q, &tw, &names, &opts.fit_options)?;
    let transform = fit.transform.compose(&c);
    let res = landmarks::residuals_degrees(&fit.transform, &p, &q);
    let rms_degrees = (res.iter().map(|r| r * r).sum::<f64>() / res.len().max(1) as f64).sqrt();
    let max_degrees = res.iter().copied().fold(0.0, f64::max);
    let residuals = landmarks
        .iter()
        .zip(res)
        .map(|(l, r)| LandmarkResidual {
            name: l.name.clone(),
            vertex: l.vertex,
            residual_degrees: r,
        })
        .collect();
    Ok(Alignment {
        transform,
        centring,
        fit,
        residuals,
        rms_degrees,
        max_degrees,
    })
}

/// Reader of a CSV table held in memory.
pub(crate) type CsvReader = csv::Reader<std::io::Cursor<Vec<u8>>>;

/// A CSV table read whole, as its reader and its lower-cased header
/// (fields trimmed); shared by the landmark and cohort-table readers.
pub(crate) fn open_csv(path: &std::path::Path) -> Result<(CsvReader, Vec<String>)> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, e))?;
    csv_from_bytes(path, bytes)
}

/// A table held in memory, as [`open_csv`] reads it (`path` names it in errors).
pub(crate) fn csv_from_bytes(
    path: &std::path::Path,
    bytes: Vec<u8>,
) -> Result<(CsvReader, Vec<String>)> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .from_reader(std::io::Cursor::new(bytes));
    let header: Vec<String> = rdr
        .headers()
        .map_err(|e| Error::bad_file(path, "header", e.to_string()))?
        .iter()
        .map(|h| h.to_ascii_lowercase())
        .collect();
    Ok((rdr, header))
}

/// The data rows of a table opened by [`open_csv`], each with its 1-based
/// line number (the header is line 1) and the element name `line N`; a row
/// the CSV parser refuses is an error naming that line.
pub(crate) fn csv_rows<'a>(
    path: &'a std::path::Path,
    rdr: &'a mut CsvReader,
) -> impl Iterator<Item = Result<(usize, String, csv::StringRecord)>> + 'a {
    rdr.records().enumerate().map(move |(k, rec)| {
        let line = k + 2;
        let element = format!("line {line}");
        let rec = rec.map_err(|e| Error::bad_file(path, &element, e.to_string()))?;
        Ok((line, element, rec))
    })
}

/// The rows of a subject table opened by [`open_csv`] (first column the
/// subject label; shared by the landmark and feature cohort tables): each
/// row's line number and cells, once every cell of `required` (column,
/// name) is filled and the subject is not listed on an earlier line.
/// Errors name the table and the line; a table without rows is an error.
pub(crate) fn subject_rows(
    path: &std::path::Path,
    rdr: &mut CsvReader,
    required: &[(usize, &str)],
) -> Result<Vec<(usize, csv::StringRecord)>> {
    let mut rows: Vec<(usize, csv::StringRecord)> = Vec::new();
    for row in csv_rows(path, rdr) {
        let (line, element, rec) = row?;
        let field = |i: usize| rec.get(i).unwrap_or("");
        for &(i, what) in required {
            if field(i).is_empty() {
                return Err(Error::bad_file(
                    path,
                    &element,
                    format!("empty `{what}` cell"),
                ));
            }
        }
        if rows.iter().any(|(_, r)| r.get(0).unwrap_or("") == field(0)) {
            return Err(Error::bad_file(
                path,
                &element,
                format!("subject `{}` is listed twice", field(0)),
            ));
        }
        rows.push((line, rec));
    }
    if rows.is_empty() {
        return Err(Error::bad_file(
            path,
            "rows",
            "no subjects; expected at least one row",
        ));
    }
    Ok(rows)
}

/// A path cell of the table `table`: an absolute path as it stands, a
/// relative one taken from the table's folder.
pub(crate) fn table_path(table: &std::path::Path, cell: &str) -> std::path::PathBuf {
    let p = std::path::Path::new(cell);
    if p.is_absolute() {
        p.to_path_buf()
    } else {
        table.parent().unwrap_or(std::path::Path::new("")).join(p)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::shapes::icosphere;
    use crate::mesh::{dist, sub};
    use template::TemplateLandmark;

    fn setup() -> (Vec<Vec3>, Vec<f64>, Vec<Landmark>, Template, Moebius) {
        let base = icosphere(3, 1.0);
        let w = base.vertex_areas();
        let m = Moebius::random(42, 1.5);
        let moved = m.apply_all(&base.positions);
        let verts = [3usize, 60, 129, 250, 400, 601];
        let lms: Vec<Landmark> = verts
            .iter()
            .enumerate()
            .map(|(i, &v)| Landmark {
                name: format!("p{i}"),
                vertex: v,
                snap_mm: None,
            })
            .collect();
        let t = Template {
            landmarks: verts
                .iter()
                .enumerate()
                .map(|(i, &v)| {
                    TemplateLandmark::from_direction(&format!("p{i}"), base.positions[v], 1.0)
                })
                .collect(),
            built: None,
        };
        (moved, w, lms, t, m)
    }

    #[test]
    fn align_undoes_a_moebius_map() {
        // The sphere is the icosphere moved by m; the template holds the
        // unmoved landmark positions: both fits must undo m (the rotation fit
        // can because area centring already removes the boost, the icosphere
        // being centred by symmetry; Springborn 2005).
        let (moved, w, lms, t, m) = setup();
        let base = icosphere(3, 1.0);
        for kind in [FitKind::Mobius, FitKind::Rotation] {
            let opts = AlignOptions {
                fit: kind,
                ..Default::default()
            };
            let a = align(&moved, Some(&w), &lms, &t, &opts).unwrap();
            assert!(a.rms_degrees < 1e-7, "{kind:?}: {}", a.rms_degrees);
            let out = aligned_positions(&a.transform, &moved, 100.0);
            let worst = out
                .iter()
                .zip(&base.positions)
                .map(|(x, y)| dist(scale(*x, 0.01), *y))
                .fold(0.0, f64::max);
            assert!(worst < 1e-8, "{kind:?}: {worst}");
            let undo = a.transform.compose(&m);
            assert!(dist(undo.apply([0.0, 0.0, 1.0]), [0.0, 0.0, 1.0]) < 1e-8);
        }
    }

    #[test]
    fn synthetic_cohort_residuals_within_planted_jitter() {
        // Synthetic cohort (crate::synth): each subject's landmarks are the
        // template directions jittered by 3 degrees (per tangent component)
        // and snapped to a vertex. Until the mapper lands, the subject's
        // "mapped sphere" is its canonical vertex directions moved by a
        // random Moebius map. After area centring, the mobius fit is a least
        // squares fit with all six degrees of freedom, so its residuals can
        // be no larger than the planted offsets (jitter plus snapping), which
        // the map that undoes the random one leaves.
        use crate::synth::maps::{landmark_template, place_landmarks};
        use crate::synth::{folded_surface, SurfaceParams};
        let t = Template {
            landmarks: landmark_template()
                .iter()
                .map(|l| TemplateLandmark::from_direction(l.name, l.direction, 1.0))
                .collect(),
            built: None,
        };
        for subject in 0..3u64 {
            let params = SurfaceParams {
                vertices: 4000,
                ..SurfaceParams::default()
            };
            let surface = folded_surface(&params, 70 + subject).unwrap();
            let placed = place_landmarks(&surface, 70 + subject, 3.0);
            let lms: Vec<Landmark> = placed
                .iter()
                .map(|p| Landmark {
                    name: p.name.to_string(),
                    vertex: p.vertex as usize,
                    snap_mm: None,
                })
                .collect();
            let planted: Vec<f64> = placed
                .iter()
                .map(|p| {
                    let target = t.get(p.name).unwrap().direction();
                    crate::moebius::angle(surface.directions[p.vertex as usize], target)
                        .to_degrees()
                })
                .collect();
            let planted_rms =
                (planted.iter().map(|a| a * a).sum::<f64>() / planted.len() as f64).sqrt();
            let m = Moebius::random(900 + subject, 1.5);
            let sphere = m.apply_all(&surface.directions);
            let w = surface.mesh.vertex_areas();
            let a = align(&sphere, Some(&w), &lms, &t, &AlignOptions::default()).unwrap();
            assert!(
                a.rms_degrees <= planted_rms * 1.001,
                "subject {subject}: RMS {} above the planted {planted_rms}",
                a.rms_degrees
            );
            // The jitter is real: the residuals are not zero either.
            assert!(a.rms_degrees > 0.3, "{}", a.rms_degrees);
        }
    }

    #[test]
    fn align_errors_name_the_landmark() {
        let (moved, w, mut lms, t, _) = setup();
        lms[2].name = "nowhere".into();
        let e = align(&moved, Some(&w), &lms, &t, &AlignOptions::default())
            .unwrap_err()
            .to_string();
        assert!(e.contains("`nowhere` is not in the template"), "{e}");
        let (moved, w, mut lms, t, _) = setup();
        lms[1].vertex = moved.len();
        let e = align(&moved, Some(&w), &lms, &t, &AlignOptions::default())
            .unwrap_err()
            .to_string();
        assert!(e.contains("out of range"), "{e}");
        let (moved, w, lms, t, _) = setup();
        let e = align(&moved, Some(&w[1..]), &lms, &t, &AlignOptions::default())
            .unwrap_err()
            .to_string();
        assert!(e.contains("vertex count"), "{e}");
        let e = align(&moved, Some(&w), &lms[..2], &t, &AlignOptions::default())
            .unwrap_err()
            .to_string();
        assert!(e.contains("at least 3"), "{e}");
    }

    #[test]
    fn unit_directions_checks_the_sphere() {
        let s = icosphere(1, 100.0);
        let (d, r) = unit_directions(&s.positions).unwrap();
        assert!((r - 100.0).abs() < 1e-12);
        assert!(d.iter().all(|x| (norm(*x) - 1.0).abs() < 1e-15));
        let mut off = s.positions.clone();
        for p in &mut off {
            *p = sub(*p, [-30.0, 0.0, 0.0]);
        }
        let e = unit_directions(&off).unwrap_err().to_string();
        assert!(e.contains("vertex"), "{e}");
    }

    #[test]
    fn subject_rows_check_cells_repeats_and_emptiness() {
        let path = std::path::Path::new("/data/study/table.csv");
        let rows = |text: &str| {
            let (mut rdr, _) = csv_from_bytes(path, text.as_bytes().to_vec()).unwrap();
            subject_rows(path, &mut rdr, &[(0, "subject"), (1, "sphere")])
        };
        let ok = rows("subject,sphere,x\na,a.gii,\nb,b.gii,1\n").unwrap();
        let got: Vec<(usize, String)> = ok.iter().map(|(l, r)| (*l, r[0].to_string())).collect();
        assert_eq!(got, vec![(2, "a".to_string()), (3, "b".to_string())]);
        let e = rows("subject,sphere\na,a.gii\nb,\n")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("table.csv") && e.contains("line 3") && e.contains("empty `sphere` cell"),
            "{e}"
        );
        let e = rows("subject,sphere\na,a.gii\nb,b.gii\na,c.gii\n")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("line 4") && e.contains("subject `a` is listed twice"),
            "{e}"
        );
        let e = rows("subject,sphere\n").unwrap_err().to_string();
        assert!(e.contains("no subjects"), "{e}");
        // Paths: relative ones from the table's folder, absolute ones kept.
        assert_eq!(
            table_path(path, "sub/a.gii"),
            std::path::Path::new("/data/study/sub/a.gii")
        );
        assert_eq!(
            table_path(path, "/elsewhere/a.gii"),
            std::path::Path::new("/elsewhere/a.gii")
        );
        assert_eq!(
            table_path(std::path::Path::new("t.csv"), "a.gii"),
            std::path::Path::new("a.gii")
        );
    }
}
