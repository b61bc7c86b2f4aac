//! The cohort manifest: a TOML file of our own layout that says where a
//! study is, which files of each subject and hemisphere to take, the
//! options of every stage and where the outputs go.
//!
//! In: the manifest's path (every relative path in it is taken relative to
//! the manifest's folder). Out: a validated [`Manifest`] with absolute
//! paths and parsed stage options. What stays true: unknown keys are
//! refused (a misspelt option never passes silently), every error names
//! the manifest file and the key at fault, and the options that reach the
//! stages are exactly those recorded in the provenance sidecars.
//! The layout and every key are documented in `docs/manifest.md`.

use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Format tag of a manifest (the optional top-level `format` key).
pub const MANIFEST_FORMAT: &str = "horosphere-cohort-manifest";

/// The file as written (before validation).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawManifest {
    #[serde(default)]
    format: Option<String>,
    #[serde(default)]
    version: Option<u32>,
    study: RawStudy,
    inputs: RawInputs,
    #[serde(default)]
    repair: RepairSettings,
    #[serde(default)]
    map: RawMap,
    #[serde(default)]
    align: AlignSettings,
    #[serde(default)]
    resample: RawResample,
    #[serde(default)]
    register: RawRegister,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawStudy {
    root: String,
    output: String,
    #[serde(default)]
    subjects: Option<Vec<String>>,
    #[serde(default)]
    hemispheres: Option<Vec<String>>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawInputs {
    surface: String,
    #[serde(default)]
    maps: Vec<String>,
    #[serde(default)]
    landmarks: Option<String>,
    #[serde(default)]
    template: Option<String>,
}

/// Options of the repair stage (`[repair]`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RepairSettings {
    /// Run repair on surfaces that inspection finds not ready to map.
    #[serde(default = "yes")]
    pub enabled: bool,
    /// Vertices closer than this (mm) are merged; 0 = identical positions.
    #[serde(default)]
    pub merge_tolerance_mm: f64,
    /// Holes up to this many boundary edges get the minimum-weight
    /// triangulation; larger ones a fan around a new centre vertex.
    #[serde(default = "default_hole_edges")]
    pub max_hole_edges: usize,
    /// Cut handles (genus > 0) of the repaired surface along their
    /// shortest non-separating loops, removing thin tubes
    /// ([`crate::handles`]).
    #[serde(default = "yes")]
    pub cut_handles: bool,
    /// Longest handle loop cut (mm); a longer one fails the unit.
    #[serde(default = "default_max_handle_mm")]
    pub max_handle_mm: f64,
    /// A repaired surface of higher genus fails the unit without a search.
    #[serde(default = "default_max_genus")]
    pub max_genus: i64,
}

fn default_max_handle_mm() -> f64 {
    crate::handles::DEFAULT_MAX_LOOP_MM
}

fn default_max_genus() -> i64 {
    crate::handles::DEFAULT_MAX_GENUS
}

fn yes() -> bool {
    true
}

fn default_hole_edges() -> usize {
    60
}

impl Default for RepairSettings {
    fn default() -> Self {
        RepairSettings {
            enabled: true,
            merge_tolerance_mm: 0.0,
            max_hole_edges: default_hole_edges(),
            cut_handles: true,
            max_handle_mm: default_max_handle_mm(),
            max_genus: default_max_genus(),
        }
    }
}

#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMap {
    #[serde(default)]
    pole: Option<toml::Value>,
    #[serde(default)]
    radius_mm: Option<f64>,
}

/// Which vertex the mapper sends to the north pole.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum PoleSetting {
    /// The mapper's documented rule over all vertices.
    Auto,
    /// The rule over the vertices repair created (fan centres of filled
    /// holes), or over all vertices when repair created none.
    RepairAdded,
    /// This vertex (index into the surface the mapper gets).
    Vertex(u32),
}

/// Options of the map stage (`[map]`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MapSettings {
    pub pole: PoleSetting,
    /// Radius of the written spheres, mm.
    pub radius_mm: f64,
}

/// Options of the align stage (`[align]`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AlignSettings {
    /// `mobius` (6 degrees of freedom) or `rotation` (3).
    #[serde(default = "default_fit")]
    pub fit: String,
    /// Moebius-centre the sphere (area weights of the native surface)
    /// before the landmark fit.
    #[serde(default = "yes")]
    pub center: bool,
}

fn default_fit() -> String {
    "mobius".into()
}

impl Default for AlignSettings {
    fn default() -> Self {
        AlignSettings {
            fit: default_fit(),
            center: true,
        }
    }
}

#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawResample {
    #[serde(default)]
    target: Option<String>,
    #[serde(default)]
    fwhm_mm: Option<f64>,
    #[serde(default)]
    method: std::collections::BTreeMap<String, String>,
}

#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawRegister {
    #[serde(default)]
    enabled: bool,
    #[serde(default)]
    template: Option<String>,
    #[serde(default)]
    features: Option<Vec<String>>,
    #[serde(default)]
    step: Option<f64>,
    #[serde(default)]
    tolerance: Option<f64>,
}

/// Options of the optional registration stage (`[register]`), between
/// align and resample. Present in a [`Manifest`] only when enabled.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RegisterSettings {
    /// Template folder written by `horosphere register-template`
    /// (absolute after validation); `{hemi}` stands for `L` or `R`.
    pub template: PathBuf,
    /// Input map suffixes used as features (among `inputs.maps`).
    pub features: Vec<String>,
    /// Longest demons update per iteration, fraction of the control spacing.
    pub step: f64,
    /// A stage of the registration stops when the residual falls by less
    /// than this fraction in one iteration.
    pub tolerance: f64,
}

impl RegisterSettings {
    /// The template folder for hemisphere `hemi` (`{hemi}` replaced).
    pub fn template_for(&self, hemi: &str) -> PathBuf {
        PathBuf::from(self.template.to_string_lossy().replace("{hemi}", hemi))
    }
}

/// Options of the resample stage (`[resample]`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ResampleSettings {
    /// `icosphere:K` or a sphere file (absolute after validation).
    pub target: String,
    /// Heat-kernel smoothing of continuous maps on the native surface
    /// before resampling (FWHM, mm); 0 = none.
    pub fwhm_mm: f64,
    /// Method per map suffix (`linear`, `nearest`, `majority`); maps not
    /// listed get the default (linear for values, majority for labels).
    pub method: std::collections::BTreeMap<String, String>,
}

/// A validated manifest.
#[derive(Debug, Clone, PartialEq)]
pub struct Manifest {
    /// The manifest file.
    pub path: PathBuf,
    /// Study root (BIDS-derivatives layout).
    pub root: PathBuf,
    /// Output root.
    pub output: PathBuf,
    /// Subject labels without `sub-`, when listed; `None` = discover.
    pub subjects: Option<Vec<String>>,
    /// Hemispheres, `L` and/or `R`.
    pub hemispheres: Vec<String>,
    /// Surface suffix (`white` for `sub-X_hemi-L_white.surf.gii`).
    pub surface: String,
    /// Map suffixes (`thickness` for `sub-X_hemi-L_thickness.shape.gii`).
    pub maps: Vec<String>,
    /// Landmark suffix (`landmarks` for `sub-X_hemi-L_landmarks.csv`).
    pub landmarks: Option<String>,
    /// Template file; `{hemi}` in the name stands for `L` or `R`.
    pub template: Option<PathBuf>,
    pub repair: RepairSettings,
    pub map: MapSettings,
    pub align: AlignSettings,
    pub resample: ResampleSettings,
    /// The registration stage; `None` when `[register] enabled = false`.
    pub register: Option<RegisterSettings>,
}

fn bad(path: &Path, key: &str, message: impl Into<String>) -> Error {
    Error::bad_file(path, key, message)
}

/// True for a BIDS label: letters and digits only, not empty.
pub fn is_label(s: &str) -> bool {
    !s.is_empty() && s.chars().all(|c| c.is_ascii_alphanumeric())
}

/// A suffix: letters, digits, not empty.
fn check_suffix(path: &Path, key: &str, s: &str) -> Result<()> {
    if is_label(s) {
        Ok(())
    } else {
        Err(bad(
            path,
            key,
            format!("`{s}`: expected a file suffix of letters and digits (e.g. white, thickness)"),
        ))
    }
}

/// The registration feature computed from each unit's (repaired) surface
/// when no input map has this suffix: the mean curvature
/// ([`crate::mesh::curvature::mean_curvature`]).
pub const BUILTIN_MEAN_CURVATURE: &str = "mean_curvature";

/// Validate `[register]`: when enabled, a template folder that exists for
/// every hemisphere (its content is checked when the run reads it) and
/// features among the input maps (or the built-in `mean_curvature`).
fn register_settings(
    path: &Path,
    raw: &RawRegister,
    maps: &[String],
    hemispheres: &[String],
    resolve: &dyn Fn(&str) -> PathBuf,
) -> Result<Option<RegisterSettings>> {
    if !raw.enabled {
        return Ok(None);
    }
    let Some(text) = raw.template.as_deref().filter(|t| !t.trim().is_empty()) else {
        return Err(bad(
            path,
            "register.template",
            "missing; expected the folder written by `horosphere register-template` (may contain {hemi})",
        ));
    };
    let template = resolve(text);
    for h in hemispheres {
        let dir = PathBuf::from(template.to_string_lossy().replace("{hemi}", h));
        if !dir.join("template.json").is_file() {
            return Err(bad(
                path,
                "register.template",
                format!(
                    "`{}` (hemisphere {h}) has no template.json; expected a folder written by `horosphere register-template`",
                    dir.display()
                ),
            ));
        }
    }
    let features = raw
        .features
        .clone()
        .unwrap_or_else(|| vec!["depth".to_string()]);
    if features.is_empty() {
        return Err(bad(
            path,
            "register.features",
            "empty; expected at least one map suffix (e.g. [\"depth\"])",
        ));
    }
    for (i, f) in features.iter().enumerate() {
        if !maps.contains(f) && f != BUILTIN_MEAN_CURVATURE {
            return Err(bad(
                path,
                "register.features",
                format!(
                    "`{f}` is not one of inputs.maps ({}) nor `{BUILTIN_MEAN_CURVATURE}`; expected the suffix of an input map or the built-in feature",
                    maps.join(", ")
                ),
            ));
        }
        if features[..i].contains(f) {
            return Err(bad(
                path,
                "register.features",
                format!("`{f}` is listed twice"),
            ));
        }
    }
    let step = raw.step.unwrap_or(0.25);
    if !(step.is_finite() && step > 0.0 && step <= 1.0) {
        return Err(bad(
            path,
            "register.step",
            format!("{step}; expected a fraction of the control spacing in (0, 1]"),
        ));
    }
    let tolerance = raw.tolerance.unwrap_or(1e-4);
    if !(tolerance.is_finite() && tolerance >= 0.0) {
        return Err(bad(
            path,
            "register.tolerance",
            format!("{tolerance}; expected a number >= 0"),
        ));
    }
    Ok(Some(RegisterSettings {
        template,
        features,
        step,
        tolerance,
    }))
}

impl Manifest {
    /// Read and validate a manifest file.
    pub fn read(path: &Path) -> Result<Manifest> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        Manifest::parse(&text, path)
    }

    /// Parse manifest text; `path` names the file in errors and gives the
    /// folder relative paths are taken from.
    pub fn parse(text: &str, path: &Path) -> Result<Manifest> {
        let raw: RawManifest = toml::from_str(text).map_err(|e| {
            bad(
                path,
                "TOML",
                format!(
                    "{}; expected a manifest as described in docs/manifest.md",
                    e.message()
                ),
            )
        })?;
        if let Some(f) = &raw.format {
            if f != MANIFEST_FORMAT {
                return Err(bad(
                    path,
                    "format",
                    format!("`{f}`; expected `{MANIFEST_FORMAT}`"),
                ));
            }
        }
        if let Some(v) = raw.version {
            if v != 1 {
                return Err(bad(path, "version", format!("{v}; expected 1")));
            }
        }
        let base = path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        let base = std::path::absolute(base).map_err(|e| Error::io(base, e))?;
        let resolve = |s: &str| -> PathBuf {
            let p = Path::new(s);
            if p.is_absolute() {
                p.to_path_buf()
            } else {
                base.join(p)
            }
        };
        if raw.study.root.trim().is_empty() {
            return Err(bad(path, "study.root", "empty; expected the study folder"));
        }
        if raw.study.output.trim().is_empty() {
            return Err(bad(
                path,
                "study.output",
                "empty; expected the output folder",
            ));
        }
        let subjects = match raw.study.subjects {
            None => None,
            Some(list) => {
                let mut out = Vec::with_capacity(list.len());
                for s in list {
                    let label = s.strip_prefix("sub-").unwrap_or(&s).to_string();
                    if !is_label(&label) {
                        return Err(bad(
                            path,
                            "study.subjects",
                            format!("`{s}`: expected a subject label of letters and digits (with or without `sub-`)"),
                        ));
                    }
                    if out.contains(&label) {
                        return Err(bad(
                            path,
                            "study.subjects",
                            format!("`{s}` is listed twice"),
                        ));
                    }
                    out.push(label);
                }
                Some(out)
            }
        };
        let hemispheres = raw
            .study
            .hemispheres
            .unwrap_or_else(|| vec!["L".into(), "R".into()]);
        if hemispheres.is_empty() {
            return Err(bad(
                path,
                "study.hemispheres",
                "empty; expected [\"L\"], [\"R\"] or [\"L\", \"R\"]",
            ));
        }
        for (i, h) in hemispheres.iter().enumerate() {
            if h != "L" && h != "R" {
                return Err(bad(
                    path,
                    "study.hemispheres",
                    format!("`{h}`: expected L or R"),
                ));
            }
            if hemispheres[..i].contains(h) {
                return Err(bad(
                    path,
                    "study.hemispheres",
                    format!("`{h}` is listed twice"),
                ));
            }
        }
        check_suffix(path, "inputs.surface", &raw.inputs.surface)?;
        for (i, m) in raw.inputs.maps.iter().enumerate() {
            check_suffix(path, "inputs.maps", m)?;
            if raw.inputs.maps[..i].contains(m) || *m == raw.inputs.surface {
                return Err(bad(
                    path,
                    "inputs.maps",
                    format!("`{m}` is listed twice or is the surface suffix"),
                ));
            }
        }
        if let Some(l) = &raw.inputs.landmarks {
            check_suffix(path, "inputs.landmarks", l)?;
        }
        if raw.inputs.landmarks.is_some() != raw.inputs.template.is_some() {
            return Err(bad(
                path,
                "inputs.landmarks",
                "landmarks and template go together; expected both keys or neither",
            ));
        }
        let template = raw.inputs.template.as_deref().map(resolve);
        let r = &raw.repair;
        if !(r.merge_tolerance_mm.is_finite() && r.merge_tolerance_mm >= 0.0) {
            return Err(bad(
                path,
                "repair.merge_tolerance_mm",
                format!("{}; expected a number >= 0", r.merge_tolerance_mm),
            ));
        }
        if r.max_hole_edges < 3 || r.max_hole_edges > 2000 {
            return Err(bad(
                path,
                "repair.max_hole_edges",
                format!("{}; expected 3 to 2000", r.max_hole_edges),
            ));
        }
        if !(r.max_handle_mm.is_finite() && r.max_handle_mm > 0.0) {
            return Err(bad(
                path,
                "repair.max_handle_mm",
                format!(
                    "{}; expected a positive number of millimetres",
                    r.max_handle_mm
                ),
            ));
        }
        if !(0..=crate::handles::MAX_GENUS).contains(&r.max_genus) {
            return Err(bad(
                path,
                "repair.max_genus",
                format!(
                    "{}; expected 0 to {}",
                    r.max_genus,
                    crate::handles::MAX_GENUS
                ),
            ));
        }
        let pole = match &raw.map.pole {
            None => PoleSetting::Auto,
            Some(toml::Value::String(s)) if s == "auto" => PoleSetting::Auto,
            Some(toml::Value::String(s)) if s == "repair-added" => PoleSetting::RepairAdded,
            Some(toml::Value::Integer(i)) if *i >= 0 && *i <= i64::from(u32::MAX) => {
                PoleSetting::Vertex(*i as u32)
            }
            Some(other) => {
                return Err(bad(
                    path,
                    "map.pole",
                    format!("`{other}`; expected \"auto\", \"repair-added\" or a vertex index"),
                ))
            }
        };
        let radius_mm = raw.map.radius_mm.unwrap_or(100.0);
        if !(radius_mm.is_finite() && radius_mm > 0.0) {
            return Err(bad(
                path,
                "map.radius_mm",
                format!("{radius_mm}; expected a positive number of millimetres"),
            ));
        }
        if raw.align.fit != "mobius" && raw.align.fit != "rotation" {
            return Err(bad(
                path,
                "align.fit",
                format!("`{}`; expected mobius or rotation", raw.align.fit),
            ));
        }
        let target_text = raw.resample.target.unwrap_or_else(|| "icosphere:5".into());
        let target = if target_text.starts_with("icosphere:") {
            target_text
        } else {
            resolve(&target_text).to_string_lossy().into_owned()
        };
        let fwhm_mm = raw.resample.fwhm_mm.unwrap_or(0.0);
        if !(fwhm_mm.is_finite() && fwhm_mm >= 0.0) {
            return Err(bad(
                path,
                "resample.fwhm_mm",
                format!("{fwhm_mm}; expected a number of millimetres >= 0"),
            ));
        }
        for (k, v) in &raw.resample.method {
            if !raw.inputs.maps.contains(k) {
                return Err(bad(
                    path,
                    "resample.method",
                    format!("`{k}` is not one of inputs.maps"),
                ));
            }
            if !["linear", "nearest", "majority"].contains(&v.as_str()) {
                return Err(bad(
                    path,
                    "resample.method",
                    format!("{k} = `{v}`; expected linear, nearest or majority"),
                ));
            }
        }
        let register = register_settings(
            path,
            &raw.register,
            &raw.inputs.maps,
            &hemispheres,
            &resolve,
        )?;
        Ok(Manifest {
            path: path.to_path_buf(),
            root: resolve(&raw.study.root),
            output: resolve(&raw.study.output),
            subjects,
            hemispheres,
            surface: raw.inputs.surface,
            maps: raw.inputs.maps,
            landmarks: raw.inputs.landmarks,
            template,
            repair: raw.repair,
            map: MapSettings { pole, radius_mm },
            align: raw.align,
            resample: ResampleSettings {
                target,
                fwhm_mm,
                method: raw.resample.method,
            },
            register,
        })
    }

    /// The template file for hemisphere `hemi` (`{hemi}` replaced).
    pub fn template_for(&self, hemi: &str) -> Option<PathBuf> {
        self.template
            .as_ref()
            .map(|t| PathBuf::from(t.to_string_lossy().replace("{hemi}", hemi)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const GOOD: &str = r#"
[study]
root = "subjects"
output = "out"
hemispheres = ["L"]
[inputs]
surface = "white"
maps = ["thickness", "regions"]
landmarks = "landmarks"
template = "tpl-{hemi}.toml"
[map]
pole = 7
[resample]
target = "icosphere:3"
method = { regions = "majority" }
"#;

    #[test]
    fn parses_and_resolves_relative_to_the_manifest() {
        let m = Manifest::parse(GOOD, Path::new("/study/pipelines/m.toml")).unwrap();
        assert_eq!(m.root, Path::new("/study/pipelines/subjects"));
        assert_eq!(m.output, Path::new("/study/pipelines/out"));
        assert_eq!(m.map.pole, PoleSetting::Vertex(7));
        assert_eq!(m.hemispheres, vec!["L".to_string()]);
        assert_eq!(
            m.template_for("L").unwrap(),
            Path::new("/study/pipelines/tpl-L.toml")
        );
        assert_eq!(m.repair.max_hole_edges, 60);
        assert!(m.repair.cut_handles);
        assert_eq!(m.repair.max_handle_mm, 30.0);
        assert_eq!(m.repair.max_genus, 20);
        let bad = GOOD.replace("[map]", "[repair]\nmax_handle_mm = -1.0\n[map]");
        let e = Manifest::parse(&bad, Path::new("/m.toml")).unwrap_err();
        assert!(e.to_string().contains("repair.max_handle_mm"), "{e}");
        let bad = GOOD.replace("[map]", "[repair]\nmax_genus = 99\n[map]");
        let e = Manifest::parse(&bad, Path::new("/m.toml")).unwrap_err();
        assert!(e.to_string().contains("repair.max_genus"), "{e}");
        assert_eq!(m.map.radius_mm, 100.0);
    }

    #[test]
    fn refuses_unknown_keys_and_bad_values_naming_the_key() {
        let p = Path::new("m.toml");
        let e = Manifest::parse(&GOOD.replace("[map]", "[map]\npoel = 1"), p).unwrap_err();
        assert!(e.to_string().contains("poel"), "{e}");
        let e = Manifest::parse(&GOOD.replace("pole = 7", "pole = \"north\""), p).unwrap_err();
        assert!(e.to_string().contains("map.pole"), "{e}");
        let e = Manifest::parse(&GOOD.replace("[\"L\"]", "[\"X\"]"), p).unwrap_err();
        assert!(e.to_string().contains("study.hemispheres"), "{e}");
        let e = Manifest::parse(
            &GOOD.replace("regions = \"majority\"", "regions = \"mode\""),
            p,
        )
        .unwrap_err();
        assert!(e.to_string().contains("resample.method"), "{e}");
        let e =
            Manifest::parse(&GOOD.replace("template = \"tpl-{hemi}.toml\"", ""), p).unwrap_err();
        assert!(e.to_string().contains("inputs.landmarks"), "{e}");
    }

    #[test]
    fn register_section_defaults_off_and_resolves_the_template_per_hemisphere() {
        let p = Path::new("/study/pipelines/m.toml");
        assert_eq!(Manifest::parse(GOOD, p).unwrap().register, None);
        let off = GOOD.to_string() + "[register]\nenabled = false\ntemplate = \"x\"\n";
        assert_eq!(Manifest::parse(&off, p).unwrap().register, None);
        let dir =
            std::env::temp_dir().join(format!("horosphere-manifest-reg-{}", std::process::id()));
        std::fs::create_dir_all(dir.join("tpl-L")).unwrap();
        std::fs::write(dir.join("tpl-L/template.json"), "{}").unwrap();
        let on = GOOD.replace(
            "\"thickness\", \"regions\"",
            "\"thickness\", \"regions\", \"depth\"",
        ) + "[register]\nenabled = true\ntemplate = \"tpl-{hemi}\"\nstep = 0.2\n";
        let m = Manifest::parse(&on, &dir.join("m.toml")).unwrap();
        let r = m.register.unwrap();
        assert_eq!(r.features, vec!["depth".to_string()]);
        assert_eq!(r.step, 0.2);
        assert_eq!(r.tolerance, 1e-4);
        assert_eq!(r.template_for("L"), dir.join("tpl-L"));
        let e = Manifest::parse(
            &on.replace("[\"L\"]", "[\"L\", \"R\"]"),
            &dir.join("m.toml"),
        )
        .unwrap_err();
        assert!(e.to_string().contains("tpl-R"), "{e}");
        let e =
            Manifest::parse(&on.replace("\"depth\"", "\"sulc\""), &dir.join("m.toml")).unwrap_err();
        assert!(e.to_string().contains("register.features"), "{e}");
        let _ = std::fs::remove_dir_all(&dir);
    }
}
