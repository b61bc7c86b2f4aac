//! Reading a cohort output folder for the report, and the per-unit
//! distortion measures.
//!
//! In: the output root of `horosphere run` (unit records, the QC table,
//! repaired surfaces, aligned spheres, resampled maps), optionally the
//! study folder (native input surfaces and maps). Out: the QC rows in
//! table order, each unit's record, and per unit the native surface, the
//! aligned sphere and a per-vertex map to colour them with, plus notes on
//! what was not available. Distortion: per face the log area ratio
//! `ln((A_sphere / sum A_sphere) / (A_surface / sum A_surface))` and the
//! angle distortion `sigma_1 / sigma_2` of the linear map between the flat
//! triangles (1 = angles kept; conformality measure as in Hormann and
//! Greiner, Curve and Surface Design 2000); per vertex the log ratio of
//! the barycentric vertex areas, normalised the same way.
//!
//! What stays true: nothing here writes; a folder that is not a run output
//! is an error naming the missing file; a unit whose files are missing or
//! unreadable gets notes, never an error for the cohort.

use crate::cohort::group::QC_COLUMNS;
use crate::cohort::unit::{read_record, UnitRecord};
use crate::error::{Error, Result};
use crate::io::gifti;
use crate::mesh::{cross, norm, sub, TriMesh, Vec3};
use crate::resample::locate::Locator;
use crate::resample::target::DEFAULT_SPHERE_TOLERANCE;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Relative path of the QC table under the output root.
pub const QC_TABLE: &str = "group/desc-cohort_qc.csv";

/// One unit of the cohort as the report sees it.
#[derive(Debug, Clone)]
pub struct UnitEntry {
    /// `sub-<label>`.
    pub subject: String,
    pub hemi: String,
    /// The QC row (column name -> text), in the QC table's columns.
    pub qc: BTreeMap<String, String>,
    /// The unit record, when present and readable.
    pub record: Option<UnitRecord>,
}

impl UnitEntry {
    /// `sub-<label>_hemi-<H>`.
    pub fn name(&self) -> String {
        format!("{}_hemi-{}", self.subject, self.hemi)
    }

    /// A QC field (empty when absent).
    pub fn field(&self, column: &str) -> &str {
        self.qc.get(column).map_or("", |s| s.as_str())
    }
}

/// A cohort output folder, read.
#[derive(Debug, Clone)]
pub struct CohortResults {
    pub root: PathBuf,
    /// The QC table's header.
    pub columns: Vec<String>,
    /// Units in QC table order.
    pub units: Vec<UnitEntry>,
}

/// Read the QC table and unit records of the run output `root`.
pub fn read_results(root: &Path) -> Result<CohortResults> {
    if !root.is_dir() {
        return Err(Error::bad_file(
            root,
            "folder",
            "not found or not a folder; expected the output folder of `horosphere run`",
        ));
    }
    let dd = root.join("dataset_description.json");
    let made_by_us = std::fs::read(&dd)
        .ok()
        .and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok())
        .and_then(|v| {
            v.get("GeneratedBy")?
                .as_array()?
                .first()?
                .get("Name")?
                .as_str()
                .map(|s| s == "horosphere")
        })
        .unwrap_or(false);
    if !made_by_us {
        return Err(Error::bad_file(
            &dd,
            "GeneratedBy",
            "missing, unreadable or not naming horosphere; expected the output folder of `horosphere run` (it writes dataset_description.json)",
        ));
    }
    let qc_path = root.join(QC_TABLE);
    let bytes = std::fs::read(&qc_path).map_err(|e| {
        Error::bad_file(
            &qc_path,
            "file",
            format!("cannot read ({e}); expected the QC table of a finished cohort step (run `horosphere run` without --units-only)"),
        )
    })?;
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .from_reader(&bytes[..]);
    let columns: Vec<String> = rdr
        .headers()
        .map_err(|e| Error::bad_file(&qc_path, "header", format!("{e}; expected CSV")))?
        .iter()
        .map(str::to_string)
        .collect();
    for need in QC_COLUMNS.iter().take(5) {
        if !columns.iter().any(|c| c == need) {
            return Err(Error::bad_file(
                &qc_path,
                "header",
                format!("no column `{need}`; expected the columns of the cohort QC table"),
            ));
        }
    }
    let mut units = Vec::new();
    for (i, row) in rdr.records().enumerate() {
        let row =
            row.map_err(|e| Error::bad_file(&qc_path, format!("row {}", i + 2), format!("{e}")))?;
        let qc: BTreeMap<String, String> = columns
            .iter()
            .cloned()
            .zip(row.iter().map(str::to_string))
            .collect();
        let subject = qc.get("subject").cloned().unwrap_or_default();
        let hemi = qc.get("hemi").cloned().unwrap_or_default();
        if !subject.starts_with("sub-") || hemi.is_empty() {
            return Err(Error::bad_file(
                &qc_path,
                format!("row {}", i + 2),
                format!(
                    "subject `{subject}`, hemi `{hemi}`; expected sub-<label> and a hemisphere"
                ),
            ));
        }
        let rpath = root
            .join(&subject)
            .join(format!("{subject}_hemi-{hemi}_desc-pipeline_record.json"));
        let record = read_record(&rpath);
        units.push(UnitEntry {
            subject,
            hemi,
            qc,
            record,
        });
    }
    Ok(CohortResults {
        root: root.to_path_buf(),
        columns,
        units,
    })
}

/// The geometry of one unit, for its pictures.
#[derive(Debug, Clone, Default)]
pub struct UnitGeometry {
    /// The surface that was mapped (repaired output, or the study input).
    pub native: Option<TriMesh>,
    /// Where `native` came from.
    pub native_from: String,
    /// The aligned sphere (same vertices and faces as `native`).
    pub sphere: Option<TriMesh>,
    /// The colouring map, one value per vertex of `native`/`sphere`.
    pub values: Option<Vec<f64>>,
    /// Where `values` came from.
    pub values_from: String,
    /// What could not be loaded.
    pub notes: Vec<String>,
}

/// A target sphere's points and locator (`None`: no icosphere level fits).
pub type SharedTarget = std::sync::Arc<Option<(Vec<Vec3>, Locator)>>;

/// Target spheres by vertex count, with their locators (built on demand).
pub struct Targets {
    cache: std::sync::Mutex<BTreeMap<usize, SharedTarget>>,
}

impl Default for Targets {
    fn default() -> Self {
        Targets {
            cache: std::sync::Mutex::new(BTreeMap::new()),
        }
    }
}

impl Targets {
    /// The icosahedral target sphere with `n` vertices (`10 * 4^k + 2`)
    /// and its locator; `None` when no level has that count.
    pub fn get(&self, n: usize) -> SharedTarget {
        if let Ok(g) = self.cache.lock() {
            if let Some(t) = g.get(&n) {
                return t.clone();
            }
        }
        let made = (0..=8u32)
            .find(|&k| 10 * 4usize.pow(k) + 2 == n)
            .and_then(|k| {
                let m = crate::mesh::shapes::icosphere(k, 100.0);
                let loc = Locator::new(&m.positions, Some(&m.faces), DEFAULT_SPHERE_TOLERANCE)
                    .or_else(|_| Locator::new(&m.positions, None, DEFAULT_SPHERE_TOLERANCE))
                    .ok()?;
                Some((m.positions, loc))
            });
        let arc = std::sync::Arc::new(made);
        if let Ok(mut g) = self.cache.lock() {
            g.entry(n).or_insert_with(|| arc.clone());
        }
        arc
    }
}

fn output_path(root: &Path, r: &UnitRecord, role: &str, map: Option<&str>) -> Option<PathBuf> {
    r.outputs
        .iter()
        .find(|o| o.role == role && o.map.as_deref() == map)
        .map(|o| root.join(&o.path))
}

fn read_values(path: &Path) -> Result<Vec<f64>> {
    let g = gifti::read(path)?;
    let a = g.arrays.first().ok_or_else(|| {
        Error::bad_file(path, "DataArray 0", "missing; expected per-vertex values")
    })?;
    Ok(a.data.to_f64())
}

/// Load a unit's geometry and its colouring map `map` (e.g. `thickness`).
/// `study` is the study folder (for the input surface of units repair did
/// not change, and the input map).
pub fn load_geometry(
    root: &Path,
    study: Option<&Path>,
    r: &UnitRecord,
    map: &str,
    targets: &Targets,
) -> UnitGeometry {
    let mut g = UnitGeometry::default();
    if r.status == "failed" {
        return g;
    }
    let sphere = match output_path(root, r, "aligned-sphere", None) {
        Some(p) => match gifti::read_mesh(&p) {
            Ok(m) => Some(m),
            Err(e) => {
                g.notes.push(format!(
                    "aligned sphere unreadable: {}",
                    strip(&e.to_string(), root)
                ));
                None
            }
        },
        None => {
            g.notes.push("no aligned sphere in the unit record".into());
            None
        }
    };
    let input_surface = r.inputs.first().map(|f| f.path.clone());
    let native = match output_path(root, r, "repaired-surface", None) {
        Some(p) => match gifti::read_mesh(&p) {
            Ok(m) => {
                g.native_from = "repaired surface".into();
                Some(m)
            }
            Err(e) => {
                g.notes.push(format!(
                    "repaired surface unreadable: {}",
                    strip(&e.to_string(), root)
                ));
                None
            }
        },
        None => match (study, &input_surface) {
            (Some(s), Some(rel)) => match crate::io::read_mesh(&s.join(rel)) {
                Ok(m) => {
                    g.native_from = "input surface".into();
                    Some(m)
                }
                Err(_) => {
                    g.notes.push(format!(
                        "input surface {rel} not readable in the study folder"
                    ));
                    None
                }
            },
            _ => {
                g.notes.push(
                    "native surface not shown: repair did not change it and no study folder was given (--study)".into(),
                );
                None
            }
        },
    };
    // The native surface must match the sphere vertex for vertex.
    let native = match (native, &sphere) {
        (Some(n), Some(s)) if n.n_vertices() != s.n_vertices() || n.faces != s.faces => {
            g.notes.push(format!(
                "native surface ({} vertices) does not match the aligned sphere ({} vertices); not shown",
                n.n_vertices(),
                s.n_vertices()
            ));
            None
        }
        (n, _) => n,
    };
    // Colouring map: the study's input map when the surface is the input
    // itself (repair renumbers vertices, and the renumbering is not
    // stored), else the resampled map carried back from the common sphere.
    let nv = sphere.as_ref().map(|s| s.n_vertices());
    let maps: Vec<String> = r
        .options
        .get("inputs")
        .and_then(|i| i.get("maps"))
        .and_then(|m| m.as_array())
        .map(|a| {
            a.iter()
                .filter_map(|x| x.as_str().map(str::to_string))
                .collect()
        })
        .unwrap_or_default();
    let unrepaired = r.outputs.iter().all(|o| o.role != "repaired-surface");
    if let (Some(k), Some(s), Some(nv), true) =
        (maps.iter().position(|m| m == map), study, nv, unrepaired)
    {
        if let Some(f) = r.inputs.get(1 + k) {
            if let Ok(v) = read_values(&s.join(&f.path)) {
                if v.len() == nv {
                    g.values = Some(v);
                    g.values_from = format!("input {map}");
                }
            }
        }
    }
    if g.values.is_none() {
        if let (Some(p), Some(s)) = (output_path(root, r, "resampled-map", Some(map)), &sphere) {
            match carry_back(&p, s, targets) {
                Ok(v) => {
                    g.values = Some(v);
                    g.values_from = format!("{map} on the common sphere, carried back");
                }
                Err(e) => g
                    .notes
                    .push(format!("{map}: {}", strip(&e.to_string(), root))),
            }
        } else if sphere.is_some() {
            g.notes.push(format!("no `{map}` map for this unit"));
        }
    }
    g.native = native;
    g.sphere = sphere;
    g
}

/// Paths in messages relative to the output root (no absolute paths in
/// the report).
pub fn strip(msg: &str, root: &Path) -> String {
    msg.replace(&format!("{}/", root.display()), "")
}

/// Values of a resampled map (on an icosahedral target) at the points of
/// the aligned sphere, by linear interpolation; missing values are NaN.
fn carry_back(path: &Path, sphere: &TriMesh, targets: &Targets) -> Result<Vec<f64>> {
    let g = gifti::read(path)?;
    let a = g.arrays.first().ok_or_else(|| {
        Error::bad_file(
            path,
            "DataArray 0",
            "missing; expected the resampled values",
        )
    })?;
    let mut v = a.data.to_f64();
    if let Some(mask) = g.arrays.get(1) {
        for (x, m) in v.iter_mut().zip(mask.data.to_f64()) {
            if m != 0.0 {
                *x = f64::NAN;
            }
        }
    }
    let t = targets.get(v.len());
    let Some((_, loc)) = t.as_ref() else {
        return Err(Error::bad_file(
            path,
            "DataArray 0",
            format!(
                "{} values; expected the vertex count of an icosahedral target (10*4^k+2)",
                v.len()
            ),
        ));
    };
    let l = loc.locate(&sphere.positions)?;
    Ok(l.points
        .iter()
        .map(|p| {
            let mut s = 0.0;
            for k in 0..3 {
                let x = v.get(p.vertices[k] as usize).copied().unwrap_or(f64::NAN);
                if p.weights[k] > 0.0 {
                    s += p.weights[k] * x;
                }
            }
            s
        })
        .collect())
}

fn tri_area(a: Vec3, b: Vec3, c: Vec3) -> f64 {
    0.5 * norm(cross(sub(b, a), sub(c, a)))
}

/// Per-face distortion of the map `native -> sphere` (same faces): log
/// area ratio (normalised by total areas) and the singular-value ratio.
pub fn face_distortion(native: &TriMesh, sphere: &TriMesh) -> (Vec<f64>, Vec<f64>) {
    let an: Vec<f64> = (0..native.n_faces()).map(|f| native.face_area(f)).collect();
    let as_: Vec<f64> = sphere
        .faces
        .iter()
        .map(|t| {
            tri_area(
                sphere.positions[t[0] as usize],
                sphere.positions[t[1] as usize],
                sphere.positions[t[2] as usize],
            )
        })
        .collect();
    let lar = log_area_ratios(&an, &as_);
    let ang = (0..native.n_faces())
        .map(|f| angle_distortion(native.corners(f), sphere.corners(f)))
        .collect();
    (lar, ang)
}

/// 2D frame of a triangle: the edge vectors `b - a` and `c - a` as columns
/// `[[p, q], [0, r]]`.
fn frame(t: [Vec3; 3]) -> Option<[f64; 3]> {
    let e1 = sub(t[1], t[0]);
    let e2 = sub(t[2], t[0]);
    let l1 = norm(e1);
    if l1.is_nan() || l1 <= 0.0 {
        return None;
    }
    let q = crate::mesh::dot(e1, e2) / l1;
    let r = norm(cross(e1, e2)) / l1;
    (r > 0.0).then_some([l1, q, r])
}

/// Ratio of the singular values of the linear map from triangle `a` to
/// triangle `b` (flat triangles); NaN for degenerate ones.
pub fn angle_distortion(a: [Vec3; 3], b: [Vec3; 3]) -> f64 {
    let (Some([p1, q1, r1]), Some([p2, q2, r2])) = (frame(a), frame(b)) else {
        return f64::NAN;
    };
    // J = B A^-1 with A = [[p1, q1], [0, r1]], B = [[p2, q2], [0, r2]].
    let (j11, j12) = (p2 / p1, (q2 - p2 * q1 / p1) / r1);
    let (j21, j22) = (0.0, r2 / r1);
    let e = 0.5 * (j11 + j22);
    let f = 0.5 * (j11 - j22);
    let gg = 0.5 * (j21 + j12);
    let h = 0.5 * (j21 - j12);
    let qq = (e * e + h * h).sqrt();
    let rr = (f * f + gg * gg).sqrt();
    let (s1, s2) = (qq + rr, (qq - rr).abs());
    if s2 > 0.0 {
        s1 / s2
    } else {
        f64::INFINITY
    }
}

/// Per-vertex log area ratio (barycentric vertex areas, normalised by the
/// totals); NaN where a vertex has no area.
pub fn vertex_log_area_ratio(native: &TriMesh, sphere: &TriMesh) -> Vec<f64> {
    log_area_ratios(&native.vertex_areas(), &sphere.vertex_areas())
}

/// `ln((s_i / sum s) / (a_i / sum a))` per element; NaN where the ratio is
/// not positive and finite.
fn log_area_ratios(an: &[f64], as_: &[f64]) -> Vec<f64> {
    let tn: f64 = an.iter().sum();
    let ts: f64 = as_.iter().sum();
    an.iter()
        .zip(as_)
        .map(|(&a, &s)| {
            let r = (s / ts) / (a / tn);
            if r > 0.0 && r.is_finite() {
                r.ln()
            } else {
                f64::NAN
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn similarity_has_no_angle_distortion_and_a_stretch_has_its_ratio() {
        let a = [[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [0.3, 0.8, 0.0]];
        // Rotated and scaled copy: conformal.
        let rot = |p: Vec3| [2.0 * p[1], 0.0, 2.0 * p[0]];
        let b = [rot(a[0]), rot(a[1]), rot(a[2])];
        assert!((angle_distortion(a, b) - 1.0).abs() < 1e-12);
        // Stretch x by 3: singular values 3 and 1.
        let st = |p: Vec3| [3.0 * p[0], p[1], 5.0];
        let c = [st(a[0]), st(a[1]), st(a[2])];
        assert!((angle_distortion(a, c) - 3.0).abs() < 1e-12);
    }

    #[test]
    fn log_area_ratio_of_a_scaled_copy_is_zero() {
        let m = crate::mesh::shapes::icosphere(2, 1.0);
        let mut s = m.clone();
        for p in &mut s.positions {
            *p = [p[0] * 7.0, p[1] * 7.0, p[2] * 7.0];
        }
        let (lar, ang) = face_distortion(&m, &s);
        assert!(lar.iter().all(|x| x.abs() < 1e-12));
        assert!(ang.iter().all(|x| (x - 1.0).abs() < 1e-9));
        // Squash z: equatorial faces shrink, polar ones keep their area, so
        // relative to the total the poles gain.
        for p in &mut s.positions {
            p[2] *= 0.5;
        }
        let v = vertex_log_area_ratio(&m, &s);
        let top = m.positions.iter().position(|p| p[2] > 0.999).unwrap();
        let equator = m.positions.iter().position(|p| p[2].abs() < 1e-9).unwrap();
        assert!(v[top] > v[equator] + 0.3, "{} vs {}", v[top], v[equator]);
    }
}
