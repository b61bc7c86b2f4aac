//! Resampling of per-vertex maps from a subject sphere to a common target
//! sphere, heat-kernel smoothing on the native surface, and the cohort
//! matrix.
//!
//! In: a subject's sphere points (same vertex order as its native surface,
//! so per-vertex maps line up), optionally the hull triangles the mapper
//! already made, the target sphere's points ([`target`]: `icosphere:K` or a
//! file), per-vertex maps ([`MapValues`]: continuous values or label keys
//! with their table) and an optional vertex mask. Out: one map per input on
//! the target's vertices ([`ResampledMap`]), each with a per-target-vertex
//! mask and counts ([`MapReport`]), plus a [`ResampleReport`].
//!
//! What stays true:
//! - every target vertex is located once ([`locate::Locator`], on the
//!   convex-hull triangulation of the subject points, [`hull`]) and that
//!   location serves every map;
//! - a masked subject vertex never contributes a value: a target vertex is
//!   missing when its nearest corner (largest weight) is masked; otherwise
//!   `linear` averages only the unmasked corners, with their weights
//!   renormalised; missing values are NaN in continuous maps and
//!   [`missing_key`] in label maps, and the mask says which;
//! - NaN in the input is masked for that map and counted
//!   ([`MapReport::n_nan_input`]);
//! - on identical spheres every method returns the input values exactly;
//! - results do not depend on the thread count.
//!
//! Methods ([`Method`]): `linear` (barycentric interpolation on the flat
//! triangle under the central projection, for continuous maps), `nearest`
//! (the corner with the largest weight) and `majority` (the label with the
//! largest total weight over the triangle's unmasked corners; a tie goes to
//! the nearest corner's label, which is always among the tied). Linear
//! interpolation of a function with second derivatives bounded by `M` on a
//! triangle of circumradius `R` errs by at most `M R^2 / 2` (Waldron, "The
//! error in linear interpolation at the vertices of a simplex", SIAM J.
//! Numer. Anal. 35 (1998) 1191-1200), so the error falls with the square of
//! the subject's mesh spacing (tested with spherical harmonics).

pub mod files;
pub mod hull;
pub mod locate;
pub mod matrix;
pub mod predicates;
pub mod smooth;
pub mod target;

use crate::error::{Error, Result};
use crate::io::gifti::{Label, LabelTable};
use crate::mesh::Vec3;
use locate::{Location, Locator};

/// How values are carried from the subject triangle to the target vertex.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// Barycentric interpolation (continuous maps only).
    Linear,
    /// The value of the corner with the largest weight.
    Nearest,
    /// The label with the largest total weight (label maps only).
    Majority,
}

impl Method {
    /// Parse `linear`, `nearest` or `majority`.
    pub fn parse(s: &str) -> Result<Method> {
        match s {
            "linear" => Ok(Method::Linear),
            "nearest" => Ok(Method::Nearest),
            "majority" => Ok(Method::Majority),
            _ => Err(Error::Invalid(format!(
                "method '{s}'; expected linear, nearest or majority"
            ))),
        }
    }

    /// The method's name.
    pub fn name(self) -> &'static str {
        match self {
            Method::Linear => "linear",
            Method::Nearest => "nearest",
            Method::Majority => "majority",
        }
    }
}

/// Per-vertex values of one map.
#[derive(Debug, Clone, PartialEq)]
pub enum MapValues {
    /// Continuous values (thickness, depth, ...); NaN marks a missing value.
    Continuous(Vec<f64>),
    /// Label keys with their table.
    Labels { keys: Vec<i32>, table: LabelTable },
}

impl MapValues {
    /// Number of vertices.
    pub fn len(&self) -> usize {
        match self {
            MapValues::Continuous(v) => v.len(),
            MapValues::Labels { keys, .. } => keys.len(),
        }
    }

    /// True when there are no values.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The method used when none is asked for: linear for continuous maps,
    /// majority for labels.
    pub fn default_method(&self) -> Method {
        match self {
            MapValues::Continuous(_) => Method::Linear,
            MapValues::Labels { .. } => Method::Majority,
        }
    }
}

/// One input map with a name (used in reports and errors).
#[derive(Debug, Clone, PartialEq)]
pub struct InputMap {
    /// Name, e.g. the file it came from.
    pub name: String,
    /// The values, one per subject vertex.
    pub values: MapValues,
}

/// Options of [`resample_maps`].
#[derive(Debug, Clone, PartialEq)]
pub struct ResampleOptions {
    /// Method for every map; `None` picks [`MapValues::default_method`].
    pub method: Option<Method>,
    /// Relative tolerance for the sphere checks (see [`target::check_sphere`]).
    pub sphere_tolerance: f64,
}

impl Default for ResampleOptions {
    fn default() -> Self {
        ResampleOptions {
            method: None,
            sphere_tolerance: target::DEFAULT_SPHERE_TOLERANCE,
        }
    }
}

/// Counts for one resampled map.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct MapReport {
    /// The map's name.
    pub name: String,
    /// Method used.
    pub method: Method,
    /// Subject vertices whose value is NaN (masked for this map).
    pub n_nan_input: usize,
    /// Subject vertices masked in total (user mask or NaN).
    pub n_masked_input: usize,
    /// Target vertices that are missing in the output.
    pub n_masked_output: usize,
    /// For label maps with missing vertices: the key they carry.
    pub missing_key: Option<i32>,
}

/// One map on the target vertices.
#[derive(Debug, Clone, PartialEq)]
pub struct ResampledMap {
    /// The values on the target (NaN or the missing key where masked).
    pub values: MapValues,
    /// `true` where the target vertex is missing.
    pub mask: Vec<bool>,
    /// Counts.
    pub report: MapReport,
}

/// What one subject's resampling did.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ResampleReport {
    /// Subject sphere vertices.
    pub n_subject_vertices: usize,
    /// Triangles of the subject's hull triangulation.
    pub n_hull_triangles: usize,
    /// Subject vertices with the same position as an earlier one (their
    /// values are not used; the earlier vertex's are).
    pub n_duplicate_vertices: usize,
    /// Subject vertices that are not hull vertices for lack of precision.
    pub n_interior_vertices: usize,
    /// Target vertices.
    pub n_target_vertices: usize,
    /// Point-location walks finished by a full scan.
    pub n_fallback_walks: usize,
    /// Subject vertices in the user mask.
    pub n_user_masked: usize,
    /// One entry per map.
    pub maps: Vec<MapReport>,
}

/// The label key given to missing target vertices of a label map: 0 when
/// the table has no key 0; otherwise -1 when the table has no key -1;
/// otherwise one below the smallest key of the table. When used, the key is
/// added to the output table as a transparent label named `missing`.
pub fn missing_key(table: &LabelTable) -> i32 {
    if table.get(0).is_none() {
        0
    } else if table.get(-1).is_none() {
        -1
    } else {
        table
            .labels
            .iter()
            .map(|l| l.key)
            .min()
            .unwrap_or(0)
            .saturating_sub(1)
    }
}

/// Resample `maps` from the subject sphere `subject` (with optional
/// precomputed hull triangles) to the target points `target`, with an
/// optional user `mask` over the subject vertices (`true` = masked). The
/// sphere checks, the triangulation and the point location are done once
/// for all maps.
pub fn resample_maps(
    subject: &[Vec3],
    hull_faces: Option<&[[u32; 3]]>,
    target: &[Vec3],
    maps: &[InputMap],
    mask: Option<&[bool]>,
    opts: &ResampleOptions,
) -> Result<(Vec<ResampledMap>, ResampleReport)> {
    target::check_sphere(target, opts.sphere_tolerance).map_err(|e| prefix(e, "target sphere"))?;
    let locator = Locator::new(subject, hull_faces, opts.sphere_tolerance)
        .map_err(|e| prefix(e, "subject sphere"))?;
    let location = locator.locate(target)?;
    resample_located(&locator, &location, maps, mask, opts.method)
}

fn prefix(e: Error, what: &str) -> Error {
    match e {
        Error::Invalid(m) => Error::Invalid(format!("{what}: {m}")),
        other => other,
    }
}

/// Resample `maps` with a location already made by `locator` (see
/// [`resample_maps`]); `method` as in [`ResampleOptions::method`].
pub fn resample_located(
    locator: &Locator,
    location: &Location,
    maps: &[InputMap],
    mask: Option<&[bool]>,
    method: Option<Method>,
) -> Result<(Vec<ResampledMap>, ResampleReport)> {
    let n = locator.n_points();
    if let Some(m) = mask {
        if m.len() != n {
            return Err(Error::Invalid(format!(
                "the mask has {} values; expected one per subject sphere vertex ({n})",
                m.len()
            )));
        }
    }
    let mut out = Vec::with_capacity(maps.len());
    for map in maps {
        if map.values.len() != n {
            return Err(Error::Invalid(format!(
                "map '{}' has {} values; expected one per subject sphere vertex ({n})",
                map.name,
                map.values.len()
            )));
        }
        let method = method.unwrap_or_else(|| map.values.default_method());
        out.push(resample_one(location, map, mask, method)?);
    }
    let excluded = locator.excluded();
    let report = ResampleReport {
        n_subject_vertices: n,
        n_hull_triangles: locator.hull().faces.len(),
        n_duplicate_vertices: excluded
            .iter()
            .filter(|e| matches!(e.1, hull::Excluded::Duplicate { .. }))
            .count(),
        n_interior_vertices: excluded
            .iter()
            .filter(|e| matches!(e.1, hull::Excluded::Interior))
            .count(),
        n_target_vertices: location.points.len(),
        n_fallback_walks: location.n_fallback,
        n_user_masked: mask.map_or(0, |m| m.iter().filter(|&&b| b).count()),
        maps: out.iter().map(|m| m.report.clone()).collect(),
    };
    Ok((out, report))
}

fn resample_one(
    location: &Location,
    map: &InputMap,
    mask: Option<&[bool]>,
    method: Method,
) -> Result<ResampledMap> {
    let user = |v: u32| mask.is_some_and(|m| m.get(v as usize).copied().unwrap_or(false));
    match &map.values {
        MapValues::Continuous(x) => {
            if method == Method::Majority {
                return Err(Error::Invalid(format!(
                    "map '{}' is continuous; majority is for label maps (use linear or nearest)",
                    map.name
                )));
            }
            let masked = |v: u32| user(v) || x.get(v as usize).is_none_or(|y| y.is_nan());
            let n_nan = x.iter().filter(|y| y.is_nan()).count();
            let n_masked_in = (0..x.len() as u32).filter(|&v| masked(v)).count();
            let mut values = Vec::with_capacity(location.points.len());
            let mut out_mask = Vec::with_capacity(location.points.len());
            for p in &location.points {
                let k = p.nearest();
                if masked(p.vertices[k]) {
                    values.push(f64::NAN);
                    out_mask.push(true);
                    continue;
                }
                let value = match method {
                    Method::Nearest | Method::Majority => x[p.vertices[k] as usize],
                    Method::Linear => {
                        let (mut s, mut w) = (0.0, 0.0);
                        for c in 0..3 {
                            let v = p.vertices[c];
                            if p.weights[c] > 0.0 && !masked(v) {
                                s += p.weights[c] * x[v as usize];
                                w += p.weights[c];
                            }
                        }
                        if w == 1.0 {
                            s
                        } else {
                            s / w
                        }
                    }
                };
                values.push(value);
                out_mask.push(false);
            }
            let n_out = out_mask.iter().filter(|&&b| b).count();
            Ok(ResampledMap {
                values: MapValues::Continuous(values),
                mask: out_mask,
                report: MapReport {
                    name: map.name.clone(),
                    method,
                    n_nan_input: n_nan,
                    n_masked_input: n_masked_in,
                    n_masked_output: n_out,
                    missing_key: None,
                },
            })
        }
        MapValues::Labels { keys, table } => {
            if method == Method::Linear {
                return Err(Error::Invalid(format!(
                    "map '{}' holds labels; linear blending of labels has no meaning (use majority or nearest)",
                    map.name
                )));
            }
            let n_masked_in = (0..keys.len() as u32).filter(|&v| user(v)).count();
            let missing = missing_key(table);
            let mut values = Vec::with_capacity(location.points.len());
            let mut out_mask = Vec::with_capacity(location.points.len());
            for p in &location.points {
                let k = p.nearest();
                let nearest_vertex = p.vertices[k];
                if user(nearest_vertex) {
                    values.push(missing);
                    out_mask.push(true);
                    continue;
                }
                let nearest_key = keys[nearest_vertex as usize];
                let key = match method {
                    Method::Nearest | Method::Linear => nearest_key,
                    Method::Majority => {
                        let mut total = [(0i32, 0.0f64); 3];
                        let mut len = 0;
                        for c in 0..3 {
                            let v = p.vertices[c];
                            if user(v) || p.weights[c] <= 0.0 {
                                continue;
                            }
                            let kc = keys[v as usize];
                            match total[..len].iter_mut().find(|e| e.0 == kc) {
                                Some(e) => e.1 += p.weights[c],
                                None => {
                                    total[len] = (kc, p.weights[c]);
                                    len += 1;
                                }
                            }
                        }
                        let mut best = nearest_key;
                        let mut best_w = total[..len]
                            .iter()
                            .find(|e| e.0 == nearest_key)
                            .map_or(0.0, |e| e.1);
                        for e in &total[..len] {
                            if e.1 > best_w {
                                best = e.0;
                                best_w = e.1;
                            }
                        }
                        best
                    }
                };
                values.push(key);
                out_mask.push(false);
            }
            let n_out = out_mask.iter().filter(|&&b| b).count();
            let mut table = table.clone();
            if n_out > 0 && table.get(missing).is_none() {
                table.labels.push(Label {
                    key: missing,
                    name: "missing".into(),
                    rgba: Some([0.0, 0.0, 0.0, 0.0]),
                });
            }
            Ok(ResampledMap {
                values: MapValues::Labels {
                    keys: values,
                    table,
                },
                mask: out_mask,
                report: MapReport {
                    name: map.name.clone(),
                    method,
                    n_nan_input: 0,
                    n_masked_input: n_masked_in,
                    n_masked_output: n_out,
                    missing_key: (n_out > 0).then_some(missing),
                },
            })
        }
    }
}

#[cfg(test)]
mod tests {
    use super::locate::Located;
    use super::*;

    fn at(vertices: [u32; 3], weights: [f64; 3]) -> Located {
        Located {
            triangle: 0,
            vertices,
            weights,
        }
    }

    #[test]
    fn rules_on_single_triangles() {
        let location = Location {
            points: vec![
                at([0, 1, 2], [0.4, 0.35, 0.25]), // majority: key of 1 and 2
                at([0, 1, 2], [0.5, 0.3, 0.2]),   // vertex 1 masked
                at([1, 0, 2], [0.5, 0.3, 0.2]),   // nearest (1) masked
                at([0, 1, 2], [0.5, 0.5, 0.0]),   // tie: lowest vertex index
            ],
            n_fallback: 0,
        };
        let table = LabelTable {
            labels: vec![
                Label {
                    key: 0,
                    name: "zero".into(),
                    rgba: None,
                },
                Label {
                    key: 7,
                    name: "seven".into(),
                    rgba: None,
                },
                Label {
                    key: 9,
                    name: "nine".into(),
                    rgba: None,
                },
            ],
        };
        let labels = InputMap {
            name: "l".into(),
            values: MapValues::Labels {
                keys: vec![7, 9, 9],
                table: table.clone(),
            },
        };
        let cont = InputMap {
            name: "c".into(),
            values: MapValues::Continuous(vec![1.0, 100.0, 3.0]),
        };
        let mask = [false, true, false];
        let out = resample_one(&location, &labels, Some(&mask), Method::Majority).unwrap();
        let MapValues::Labels { keys, table: t } = &out.values else {
            panic!()
        };
        // Point 0: vertex 1 masked, so 7 (0.4) beats 9 (0.25 from vertex 2).
        // Point 1: 7 (0.5) beats 9 (0.2). Point 2: missing. Point 3: nearest 0 -> 7.
        // Key 0 is taken by the table, so the missing key is -1.
        assert_eq!(keys, &vec![7, 7, -1, 7]);
        assert_eq!(out.mask, vec![false, false, true, false]);
        assert_eq!(t.get(-1).map(|l| l.name.as_str()), Some("missing"));
        assert_eq!(out.report.missing_key, Some(-1));
        // Without the mask, the weighted majority wins over the nearest corner.
        let out = resample_one(&location, &labels, None, Method::Majority).unwrap();
        let MapValues::Labels { keys, .. } = &out.values else {
            panic!()
        };
        assert_eq!(keys, &vec![9, 7, 9, 7]);
        let out = resample_one(&location, &labels, None, Method::Nearest).unwrap();
        let MapValues::Labels { keys, table: t } = &out.values else {
            panic!()
        };
        assert_eq!(keys, &vec![7, 7, 9, 7]);
        assert_eq!(t, &table);
        // Linear with a masked corner: renormalised over the others.
        let out = resample_one(&location, &cont, Some(&mask), Method::Linear).unwrap();
        let MapValues::Continuous(v) = &out.values else {
            panic!()
        };
        assert!((v[0] - (0.4 * 1.0 + 0.25 * 3.0) / 0.65).abs() < 1e-15);
        assert!((v[1] - (0.5 * 1.0 + 0.2 * 3.0) / 0.7).abs() < 1e-15);
        assert!(v[2].is_nan());
        assert_eq!(v[3], 1.0);
        assert_eq!(out.report.n_masked_output, 1);
    }

    #[test]
    fn missing_key_choice() {
        let mk = |keys: &[i32]| LabelTable {
            labels: keys
                .iter()
                .map(|&key| Label {
                    key,
                    name: format!("k{key}"),
                    rgba: None,
                })
                .collect(),
        };
        assert_eq!(missing_key(&mk(&[1, 2])), 0);
        assert_eq!(missing_key(&mk(&[0, 2])), -1);
        assert_eq!(missing_key(&mk(&[-3, -1, 0, 2])), -4);
    }
}
