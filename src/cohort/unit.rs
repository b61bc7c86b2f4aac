//! One subject and hemisphere through the whole chain: read, inspect,
//! repair, map, align, register (optional, `[register]` in the manifest),
//! resample; outputs with provenance sidecars and the unit record.
//!
//! In: a [`Unit`] (its input files), the [`Manifest`] and the run's
//! [`Shared`] data (target sphere). Out: files under
//! `OUTPUT/sub-<label>/` and a [`UnitRecord`] (also written as
//! `sub-<label>_hemi-<H>_desc-pipeline_record.json`), whose status is `ok`,
//! `repaired` or `failed` (with the stage and error text).
//!
//! What stays true:
//! - the whole unit runs on one thread with deterministic stages, in
//!   memory, in double precision; the files are written from those values,
//!   so the outputs do not depend on the thread count or on which process
//!   (a whole-cohort run or one job of a workflow) made them;
//! - a unit is all or nothing for resuming: its record lists every output
//!   with its SHA-256 and the key of its inputs and options; a rerun skips
//!   the unit only when the record's key matches and every output is
//!   present with the recorded hash. Intermediate files are not read back
//!   to resume mid-unit, because spheres are stored in single precision
//!   and a resumed chain would not reproduce an uninterrupted one bit for
//!   bit;
//! - every file is written atomically ([`crate::io::atomic`]); the record
//!   is written last, so a unit killed mid-way has no record and reruns;
//! - a failed unit leaves only its record (stale outputs of an earlier
//!   run are removed) and never stops the other units.
//!
//! Methods: inspection and repair ([`crate::inspect`], [`crate::repair`]),
//! the exact discrete conformal map of Bobenko, Pinkall and Springborn
//! (Geom. Topol. 19, 2015) and Springborn (Discrete Comput. Geom. 64, 2020)
//! ([`crate::map`]), Moebius centring (Springborn, Math. Z. 249, 2005) and
//! landmark fits ([`crate::align`]), log-domain diffeomorphic demons on the
//! sphere (Vercauteren, Pennec, Perchant, Ayache, NeuroImage 45, 2009)
//! ([`crate::register`]), resampling and heat-kernel smoothing
//! (Chung et al., NeuroImage 25, 2005) ([`crate::resample`]).

use super::discover::Unit;
use super::manifest::{Manifest, PoleSetting};
use super::provenance::{
    json_bytes, relative, sha256_bytes, sha256_file, write_sidecar, FileHash, GeneratedBy, Sidecar,
};
use crate::align::{self, AlignOptions, CentringOptions, FitKind, Landmark};
use crate::error::{Error, Result};
use crate::inspect::{inspect, InspectOptions, Inspection};
use crate::io::atomic::write_bytes;
use crate::io::gifti::{self, Gifti, WriteOptions};
use crate::map::{map_to_sphere_diagnosed, MapOptions, PoleChoice};
use crate::mesh::{TriMesh, Vec3};
use crate::repair::{repair, RepairOptions};
use crate::resample::{self, files, locate::Locator, InputMap, MapValues, Method};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Format tag of unit records.
pub const RECORD_FORMAT: &str = "horosphere-unit-record";

/// Data shared by all units of a run.
#[derive(Debug, Clone)]
pub struct Shared {
    /// Target sphere points (mm).
    pub target: Vec<Vec3>,
    /// The `space-` label of the target.
    pub space: String,
    /// The target file and its hash, when the target is a file.
    pub target_file: Option<(PathBuf, String)>,
    /// Registration templates per hemisphere (empty when the registration
    /// stage is off).
    pub register: Vec<RegisterTemplate>,
}

/// A registration template read for one hemisphere.
#[derive(Debug, Clone)]
pub struct RegisterTemplate {
    /// `L` or `R`.
    pub hemi: String,
    pub template: crate::register::Template,
    /// Its files with their hashes (unit inputs, so a changed template
    /// recomputes the units).
    pub files: Vec<FileHash>,
}

/// Read the registration template of every hemisphere of the manifest
/// (none when the stage is off). Errors name the template file at fault;
/// a template whose features differ from `[register] features` is refused.
pub fn register_templates(m: &Manifest) -> Result<Vec<RegisterTemplate>> {
    let Some(r) = &m.register else {
        return Ok(Vec::new());
    };
    let mut out = Vec::new();
    for hemi in &m.hemispheres {
        let dir = r.template_for(hemi);
        let template = crate::register::template::read_template(&dir)?;
        let mut have = template.names.clone();
        let mut want = r.features.clone();
        have.sort();
        want.sort();
        if have != want {
            return Err(Error::bad_file(
                &dir.join("template.json"),
                "features",
                format!(
                    "the template has features [{}]; expected those of [register] features in {} ([{}])",
                    template.names.join(", "),
                    m.path.display(),
                    r.features.join(", ")
                ),
            ));
        }
        let mut names = vec!["template.json".to_string(), "sphere.surf.gii".to_string()];
        names.extend(
            template
                .names
                .iter()
                .map(|n| crate::register::template::feature_file(n)),
        );
        let mut files = Vec::with_capacity(names.len());
        for n in names {
            let p = dir.join(&n);
            files.push(FileHash {
                path: relative(&p, &m.root),
                sha256: sha256_file(&p)?,
            });
        }
        out.push(RegisterTemplate {
            hemi: hemi.clone(),
            template,
            files,
        });
    }
    Ok(out)
}

/// Topology figures of the input surface (from inspection).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InspectFigures {
    pub vertices: usize,
    pub faces: usize,
    pub euler_characteristic: i64,
    pub components: usize,
    pub boundary_loops: usize,
    /// Genus of the largest component (when it is closed and manifold).
    pub genus: Option<u32>,
    pub non_manifold_edges: usize,
    pub duplicate_vertices: usize,
    pub degenerate_faces: usize,
    pub ready_to_map: bool,
    /// Codes of the reasons it is not ready.
    pub reasons: Vec<String>,
}

/// What repair changed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RepairFigures {
    pub holes_filled: usize,
    pub vertices_added: usize,
    pub pieces_dropped: usize,
    pub vertices_merged: usize,
    pub faces_dropped: usize,
    pub faces_reoriented: usize,
    pub flipped_to_outward: bool,
    pub vertices_out: usize,
    pub faces_out: usize,
    pub genus: i64,
    /// Handles found on the repaired surface, in the order they were cut
    /// (the last one is uncut when its loop was over the limit).
    #[serde(default)]
    pub handles: Vec<HandleFigure>,
}

/// One handle found by repair ([`crate::handles`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HandleFigure {
    /// Length of its shortest non-separating loop (mm).
    pub loop_mm: f64,
    /// Centre of the loop (mm, native space of the input surface).
    pub centre: [f64; 3],
    /// Whether it was cut.
    pub cut: bool,
    /// Area of the tube removed with the cut (mm^2; 0 when only cut).
    pub removed_area_mm2: f64,
}

/// Convergence and distortion of the map.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MapFigures {
    /// `fast` or `full` (see [`crate::map`]).
    pub path: String,
    pub pole: u32,
    pub iterations: usize,
    pub layout_residual: Option<f64>,
    pub max_radius_error: Option<f64>,
    pub max_interior_angle_error: Option<f64>,
    pub angle_distortion_p50: Option<f64>,
    pub angle_distortion_p95: Option<f64>,
    pub angle_distortion_max: Option<f64>,
    pub log_area_ratio_p5: Option<f64>,
    pub log_area_ratio_p95: Option<f64>,
    pub inverted_faces: usize,
}

/// Residual of one landmark, degrees.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LandmarkFigure {
    pub name: String,
    pub residual_degrees: Option<f64>,
}

/// The alignment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AlignFigures {
    /// `mobius`, `rotation`, or `center-only` when no landmarks are used.
    pub fit: String,
    pub centring_iterations: Option<usize>,
    pub landmarks: usize,
    pub rms_degrees: Option<f64>,
    pub max_degrees: Option<f64>,
    pub residuals: Vec<LandmarkFigure>,
}

/// One resampled map.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ResampleFigures {
    pub map: String,
    pub method: String,
    pub target_vertices: usize,
    pub missing_target_vertices: usize,
}

/// Correlation of one feature with the registration template.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RegisterFeatureFigure {
    pub name: String,
    /// Area-weighted Pearson correlation on the template vertices, on the
    /// aligned sphere (before the warp).
    pub before: Option<f64>,
    /// The same after the warp.
    pub after: Option<f64>,
}

/// The registration to the folding template (see [`crate::register`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RegisterFigures {
    pub template_level: u32,
    pub features: Vec<RegisterFeatureFigure>,
    /// Mean over the features of `before` / `after`.
    pub corr_before: Option<f64>,
    pub corr_after: Option<f64>,
    /// Range of the signed area ratios of the template triangles under the warp.
    pub jacobian_min: Option<f64>,
    pub jacobian_max: Option<f64>,
    /// Template triangles folded by the warp plus subject triangles turned
    /// over (must be 0).
    pub folded: usize,
    /// Demons iterations kept, over all stages.
    pub iterations: usize,
    /// Subject triangles the unsoftened warp would have turned over or
    /// squashed, and the rounds of softening that kept the mesh embedded
    /// (`register::embed`).
    pub softened_triangles: usize,
    pub soften_rounds: usize,
    /// Every softening failed and the warp was given up (the unit's maps
    /// are resampled from the aligned sphere).
    pub identity_fallback: bool,
    pub mean_displacement_deg: Option<f64>,
    pub max_displacement_deg: Option<f64>,
}

/// One output file of a unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OutputEntry {
    /// `repaired-surface`, `sphere`, `aligned-sphere`, `registered-sphere`
    /// or `resampled-map`.
    pub role: String,
    /// The map suffix, for resampled maps.
    pub map: Option<String>,
    /// Relative to the output root.
    pub path: String,
    pub sha256: String,
}

/// Everything a unit did: the provenance of the unit, its figures and its
/// outputs. Written as JSON; read back by the cohort step.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct UnitRecord {
    pub format: String,
    pub subject: String,
    pub hemi: String,
    /// `ok`, `repaired` or `failed`.
    pub status: String,
    pub failed_stage: Option<String>,
    pub error: Option<String>,
    #[serde(rename = "GeneratedBy")]
    pub generated_by: GeneratedBy,
    /// SHA-256 of the inputs' hashes, the options and the tool version.
    pub key: String,
    pub inputs: Vec<FileHash>,
    pub options: serde_json::Value,
    pub inspect: Option<InspectFigures>,
    pub repair: Option<RepairFigures>,
    pub map: Option<MapFigures>,
    pub align: Option<AlignFigures>,
    /// Only when the registration stage is on (absent from the JSON
    /// otherwise, so records of runs without it keep their bytes).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub register: Option<RegisterFigures>,
    pub resample: Vec<ResampleFigures>,
    pub outputs: Vec<OutputEntry>,
}

/// The stages, in order (names used in records and progress).
/// `register` runs only when the manifest turns it on.
pub const STAGES: [&str; 7] = [
    "read", "inspect", "repair", "map", "align", "register", "resample",
];

fn fin(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

/// Path of a unit's record.
pub fn record_path(m: &Manifest, u: &Unit) -> PathBuf {
    m.output
        .join(u.sub())
        .join(format!("{}_desc-pipeline_record.json", u.stem()))
}

/// The names of every file a unit may write (relative to the output root).
fn output_names(
    m: &Manifest,
    u: &Unit,
    space: &str,
    label_maps: &[String],
) -> Vec<(String, Option<String>, String)> {
    let dir = u.sub();
    let stem = u.stem();
    let mut out = vec![
        (
            "repaired-surface".to_string(),
            None,
            format!(
                "{dir}/{stem}_space-native_desc-repaired_{}.surf.gii",
                m.surface
            ),
        ),
        (
            "sphere".to_string(),
            None,
            format!("{dir}/{stem}_space-individual_desc-conformal_sphere.surf.gii"),
        ),
        (
            "aligned-sphere".to_string(),
            None,
            format!("{dir}/{stem}_space-individual_desc-aligned_sphere.surf.gii"),
        ),
        (
            "registered-sphere".to_string(),
            None,
            format!("{dir}/{stem}_space-individual_desc-registered_sphere.surf.gii"),
        ),
    ];
    for suffix in &m.maps {
        let ext = if label_maps.contains(suffix) {
            "label.gii"
        } else {
            "shape.gii"
        };
        out.push((
            "resampled-map".to_string(),
            Some(suffix.clone()),
            format!(
                "{dir}/{stem}_space-{space}_desc-{}_{suffix}.{ext}",
                map_desc(m)
            ),
        ));
    }
    out
}

/// The `desc-` entity of the resampled maps: `registered` when the
/// registration stage ran, else `aligned`.
fn map_desc(m: &Manifest) -> &'static str {
    if m.register.is_some() {
        "registered"
    } else {
        "aligned"
    }
}

/// The inputs of a unit with their hashes and the options, as recorded.
/// Missing files get the hash `missing`, so the key changes when they appear.
pub fn unit_inputs(m: &Manifest, u: &Unit, shared: &Shared) -> (Vec<FileHash>, serde_json::Value) {
    let mut files: Vec<&Path> = vec![&u.surface];
    for (_, p) in &u.maps {
        files.push(p);
    }
    if let Some(l) = &u.landmarks {
        files.push(l);
    }
    if let Some(t) = &u.template {
        files.push(t);
    }
    let mut inputs: Vec<FileHash> = files
        .iter()
        .map(|p| FileHash {
            path: relative(p, &m.root),
            sha256: sha256_file(p).unwrap_or_else(|_| "missing".into()),
        })
        .collect();
    if let Some((p, h)) = &shared.target_file {
        inputs.push(FileHash {
            path: relative(p, &m.root),
            sha256: h.clone(),
        });
    }
    if let Some(t) = shared.register.iter().find(|t| t.hemi == u.hemi) {
        inputs.extend(t.files.iter().cloned());
    }
    let mut resample = serde_json::json!({
        "target": if shared.target_file.is_some() { format!("file:{}", shared.space) } else { m.resample.target.clone() },
        "fwhm_mm": m.resample.fwhm_mm,
        "method": m.resample.method,
    });
    if let Some(obj) = resample.as_object_mut() {
        obj.insert("space".into(), shared.space.clone().into());
    }
    let mut options = serde_json::json!({
        "inputs": {
            "surface": m.surface,
            "maps": m.maps,
            "landmarks": m.landmarks,
        },
        "inspect": { "duplicate_tolerance_mm": 0.0, "degenerate_relative_tolerance": 1e-10 },
        "repair": m.repair,
        "map": m.map,
        "align": m.align,
        "resample": resample,
    });
    // Only when on, so the keys of runs without registration do not change.
    if let (Some(r), Some(obj)) = (&m.register, options.as_object_mut()) {
        obj.insert(
            "register".into(),
            serde_json::json!({
                "features": r.features,
                "step": r.step,
                "tolerance": r.tolerance,
            }),
        );
    }
    (inputs, options)
}

/// The key of a unit: SHA-256 of the tool, its inputs and options.
pub fn unit_key(inputs: &[FileHash], options: &serde_json::Value) -> String {
    let v = serde_json::json!({
        "GeneratedBy": GeneratedBy::this(),
        "inputs": inputs,
        "options": options,
    });
    sha256_bytes(v.to_string().as_bytes())
}

/// Read a unit record; `None` if missing or unreadable.
pub fn read_record(path: &Path) -> Option<UnitRecord> {
    let bytes = std::fs::read(path).ok()?;
    let r: UnitRecord = serde_json::from_slice(&bytes).ok()?;
    (r.format == RECORD_FORMAT).then_some(r)
}

/// True when the unit's record says it is done with these inputs and
/// options and all its outputs are intact.
pub fn is_current(m: &Manifest, record: &UnitRecord, key: &str) -> bool {
    record.key == key
        && record.status != "failed"
        && record.outputs.iter().all(|o| {
            let p = m.output.join(&o.path);
            super::provenance::sidecar_path(&p).is_file()
                && sha256_file(&p).is_ok_and(|h| h == o.sha256)
        })
}

/// Remove leftover temporary files of this unit (from a killed run).
fn remove_stale_temporaries(dir: &Path, stem: &str) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    let prefix = format!(".{stem}_");
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        if name.starts_with(&prefix) && name.ends_with(".tmp") {
            let _ = std::fs::remove_file(e.path());
        }
    }
}

/// A stage error with the stage name, paths shown relative to the study root.
struct StageError {
    stage: &'static str,
    error: Error,
}

fn at(stage: &'static str) -> impl Fn(Error) -> StageError {
    move |error| StageError { stage, error }
}

/// Run one unit: skip it when current (unless `force`), else compute it.
/// `progress(stage)` is called as stages start. Returns the record and
/// whether it was computed (false: skipped).
pub fn run_unit(
    m: &Manifest,
    u: &Unit,
    shared: &Shared,
    force: bool,
    progress: &dyn Fn(&str),
) -> Result<(UnitRecord, bool)> {
    let (inputs, options) = unit_inputs(m, u, shared);
    let key = unit_key(&inputs, &options);
    let rpath = record_path(m, u);
    if !force {
        if let Some(r) = read_record(&rpath) {
            if is_current(m, &r, &key) {
                return Ok((r, false));
            }
        }
    }
    let dir = m.output.join(u.sub());
    remove_stale_temporaries(&dir, &u.stem());
    let mut record = UnitRecord {
        format: RECORD_FORMAT.into(),
        subject: u.subject.clone(),
        hemi: u.hemi.clone(),
        status: "failed".into(),
        failed_stage: None,
        error: None,
        generated_by: GeneratedBy::this(),
        key,
        inputs,
        options,
        inspect: None,
        repair: None,
        map: None,
        align: None,
        register: None,
        resample: Vec::new(),
        outputs: Vec::new(),
    };
    match compute(m, u, shared, &mut record, progress) {
        Ok(()) => {}
        Err(e) => {
            record.failed_stage = Some(e.stage.to_string());
            let root = format!("{}/", m.root.display());
            record.error = Some(e.error.to_string().replace(&root, ""));
            record.status = "failed".into();
            // Remove outputs of this run and of earlier runs.
            for (_, _, name) in output_names(m, u, &shared.space, &m.maps) {
                let p = m.output.join(&name);
                let _ = std::fs::remove_file(&p);
                let _ = std::fs::remove_file(super::provenance::sidecar_path(&p));
            }
            for (_, _, name) in output_names(m, u, &shared.space, &[]) {
                let p = m.output.join(&name);
                let _ = std::fs::remove_file(&p);
                let _ = std::fs::remove_file(super::provenance::sidecar_path(&p));
            }
            record.outputs.clear();
        }
    }
    write_bytes(&rpath, &json_bytes(&record)?)?;
    Ok((record, true))
}

fn inspect_figures(i: &Inspection) -> InspectFigures {
    InspectFigures {
        vertices: i.vertices,
        faces: i.faces,
        euler_characteristic: i.euler_characteristic,
        components: i.components.count,
        boundary_loops: i.boundary.loops,
        genus: i.components.listed.first().and_then(|c| c.genus),
        non_manifold_edges: i.non_manifold_edges.count,
        duplicate_vertices: i.duplicate_vertices.count,
        degenerate_faces: i.degenerate_faces.count,
        ready_to_map: i.ready_to_map,
        reasons: i.reasons.iter().map(|r| r.code.clone()).collect(),
    }
}

/// Read a map and check it has one value per input vertex.
fn read_input_map(path: &Path, n: usize) -> Result<InputMap> {
    let map = files::read_map(path)?;
    if map.values.len() != n {
        return Err(Error::bad_file(
            path,
            "data array",
            format!(
                "{} values; expected one per vertex of the surface ({n})",
                map.values.len()
            ),
        ));
    }
    Ok(map)
}

/// Carry a map from the input vertices to the repaired ones (`origin`);
/// vertices repair created get NaN or the missing label key.
fn carry(values: &MapValues, origin: &[Option<u32>]) -> MapValues {
    match values {
        MapValues::Continuous(v) => MapValues::Continuous(
            origin
                .iter()
                .map(|o| {
                    o.and_then(|i| v.get(i as usize).copied())
                        .unwrap_or(f64::NAN)
                })
                .collect(),
        ),
        MapValues::Labels { keys, table } => {
            let missing = resample::missing_key(table);
            MapValues::Labels {
                keys: origin
                    .iter()
                    .map(|o| {
                        o.and_then(|i| keys.get(i as usize).copied())
                            .unwrap_or(missing)
                    })
                    .collect(),
                table: table.clone(),
            }
        }
    }
}

fn gifti_bytes(g: &Gifti) -> Result<Vec<u8>> {
    gifti::to_bytes(g, &WriteOptions::default())
}

#[allow(clippy::too_many_arguments)]
fn put(
    m: &Manifest,
    record: &mut UnitRecord,
    role: &str,
    map: Option<String>,
    name: &str,
    bytes: &[u8],
    stage: &str,
    options: serde_json::Value,
) -> Result<()> {
    let path = m.output.join(name);
    write_bytes(&path, bytes)?;
    let sha = sha256_bytes(bytes);
    let sidecar = Sidecar {
        generated_by: GeneratedBy::this(),
        stage: stage.into(),
        inputs: record.inputs.clone(),
        options,
        output: FileHash {
            path: name.to_string(),
            sha256: sha.clone(),
        },
    };
    write_sidecar(&path, &sidecar)?;
    record.outputs.push(OutputEntry {
        role: role.into(),
        map,
        path: name.to_string(),
        sha256: sha,
    });
    Ok(())
}

/// Options of the stages up to `stage` (from the record's options).
fn options_upto(all: &serde_json::Value, stage: &str) -> serde_json::Value {
    let order = [
        "inputs", "inspect", "repair", "map", "align", "register", "resample",
    ];
    let mut out = serde_json::Map::new();
    for s in order {
        if let Some(v) = all.get(s) {
            out.insert(s.into(), v.clone());
        }
        if s == stage {
            break;
        }
    }
    serde_json::Value::Object(out)
}

fn compute(
    m: &Manifest,
    u: &Unit,
    shared: &Shared,
    record: &mut UnitRecord,
    progress: &dyn Fn(&str),
) -> std::result::Result<(), StageError> {
    // Read.
    progress("read");
    let input = crate::io::read_mesh(&u.surface).map_err(at("read"))?;
    let n_in = input.n_vertices();
    let mut maps = Vec::with_capacity(u.maps.len());
    for (_, p) in &u.maps {
        maps.push(read_input_map(p, n_in).map_err(at("read"))?);
    }
    let raw_landmarks = match &u.landmarks {
        Some(p) => Some(align::landmarks::read_landmarks(p).map_err(at("read"))?),
        None => None,
    };
    let template = match &u.template {
        Some(p) => Some(align::read_template(p).map_err(at("read"))?),
        None => None,
    };

    // Inspect.
    progress("inspect");
    let inspection = inspect(&input, &InspectOptions::default()).map_err(at("inspect"))?;
    record.inspect = Some(inspect_figures(&inspection));

    // Repair.
    progress("repair");
    let (mesh, origin, added, repaired) = if inspection.ready_to_map {
        let origin: Vec<Option<u32>> = (0..n_in as u32).map(Some).collect();
        (input, origin, vec![false; n_in], false)
    } else if !m.repair.enabled {
        let reasons: Vec<String> = inspection
            .reasons
            .iter()
            .map(|r| r.message.clone())
            .collect();
        return Err(StageError {
            stage: "repair",
            error: Error::NotReady(format!(
                "{}: not ready to map and repair is disabled in the manifest: {}",
                relative(&u.surface, &m.root),
                reasons.join("; ")
            )),
        });
    } else {
        let opts = RepairOptions {
            merge_tolerance_mm: m.repair.merge_tolerance_mm,
            max_dp_hole_edges: m.repair.max_hole_edges,
            max_handle_mm: m.repair.cut_handles.then_some(m.repair.max_handle_mm),
            max_genus: m.repair.max_genus,
            ..RepairOptions::default()
        };
        let r = repair(&input, &opts).map_err(at("repair"))?;
        let log = &r.log;
        record.repair = Some(RepairFigures {
            holes_filled: log.holes.len(),
            vertices_added: log.added_vertices.len(),
            pieces_dropped: log.dropped_components.len(),
            vertices_merged: log.merge.vertices_merged,
            faces_dropped: log.dropped_faces.len(),
            faces_reoriented: log.faces_reoriented.len(),
            flipped_to_outward: log.flipped_to_outward,
            vertices_out: log.output_vertices,
            faces_out: log.output_faces,
            genus: log.genus,
            handles: log
                .handles
                .iter()
                .map(|h| HandleFigure {
                    loop_mm: h.length_mm,
                    centre: h.centre,
                    cut: h.cut,
                    removed_area_mm2: h.removed_area_mm2,
                })
                .collect(),
        });
        if log.genus != 0 {
            let why = match log.handles.iter().find(|h| !h.cut) {
                Some(h) => format!(
                    "its shortest handle loop is {:.1} mm long at ({:.1}, {:.1}, {:.1}) mm, over the limit repair.max_handle_mm = {} mm",
                    h.length_mm, h.centre[0], h.centre[1], h.centre[2], m.repair.max_handle_mm
                ),
                None => "handle cutting is off (repair.cut_handles = false)".to_string(),
            };
            return Err(StageError {
                stage: "repair",
                error: Error::NotReady(format!(
                    "{}: the repaired surface has genus {} (a handle) and the mapper needs genus 0: {why}",
                    relative(&u.surface, &m.root),
                    log.genus
                )),
            });
        }
        (r.mesh, r.origin, r.added, true)
    };
    let n = mesh.n_vertices();
    if repaired {
        let name = format!(
            "{}/{}_space-native_desc-repaired_{}.surf.gii",
            u.sub(),
            u.stem(),
            m.surface
        );
        let bytes = gifti_bytes(&Gifti::from_mesh(&mesh)).map_err(at("repair"))?;
        let opts = options_upto(&record.options, "repair");
        put(
            m,
            record,
            "repaired-surface",
            None,
            &name,
            &bytes,
            "repair",
            opts,
        )
        .map_err(at("repair"))?;
    }
    // Landmarks on the repaired surface.
    let landmarks: Option<Vec<Landmark>> = match (&raw_landmarks, &u.landmarks) {
        (Some(raw), Some(path)) => {
            let mut inverse: Vec<Option<usize>> = vec![None; n_in];
            for (v, o) in origin.iter().enumerate() {
                if let Some(slot) = o.and_then(|i| inverse.get_mut(i as usize)) {
                    if slot.is_none() {
                        *slot = Some(v);
                    }
                }
            }
            let mut moved = Vec::with_capacity(raw.len());
            for l in raw {
                let mut l = l.clone();
                if let align::landmarks::LandmarkPosition::Vertex(v) = l.position {
                    let to = inverse.get(v).copied().flatten().ok_or_else(|| StageError {
                        stage: "align",
                        error: Error::bad_file(
                            path,
                            format!("line {} (landmark `{}`)", l.line, l.name),
                            format!(
                                "vertex {v} is not on the repaired surface (out of range or removed by repair); expected a vertex of the surface's main piece"
                            ),
                        ),
                    })?;
                    l.position = align::landmarks::LandmarkPosition::Vertex(to);
                }
                moved.push(l);
            }
            Some(
                align::landmarks::resolve_landmarks(&moved, n, Some(&mesh.positions), path)
                    .map_err(at("align"))?,
            )
        }
        _ => None,
    };

    // Map.
    progress("map");
    let pole = match m.map.pole {
        PoleSetting::Auto => PoleChoice::Auto,
        PoleSetting::Vertex(v) => PoleChoice::Vertex(v),
        PoleSetting::RepairAdded => {
            let list: Vec<u32> = (0..n as u32)
                .filter(|&v| added.get(v as usize).copied().unwrap_or(false))
                .collect();
            if list.is_empty() {
                PoleChoice::Auto
            } else {
                PoleChoice::Among(list)
            }
        }
    };
    let opts = MapOptions {
        pole,
        ..MapOptions::default()
    };
    let sphere = match map_to_sphere_diagnosed(&mesh, &opts) {
        Ok(s) => s,
        Err(f) => {
            let f = *f;
            record.map = Some(map_figures(&f.report));
            return Err(StageError {
                stage: "map",
                error: match f.error {
                    Error::NotReady(msg) => {
                        Error::NotReady(format!("{}: {msg}", relative(&u.surface, &m.root)))
                    }
                    other => other,
                },
            });
        }
    };
    record.map = Some(map_figures(&sphere.report));
    let radius = m.map.radius_mm;
    let scaled: Vec<Vec3> = sphere
        .points
        .iter()
        .map(|p| [p[0] * radius, p[1] * radius, p[2] * radius])
        .collect();
    let name = format!(
        "{}/{}_space-individual_desc-conformal_sphere.surf.gii",
        u.sub(),
        u.stem()
    );
    let bytes = gifti_bytes(&Gifti::from_mesh(&TriMesh {
        positions: scaled,
        faces: mesh.faces.clone(),
    }))
    .map_err(at("map"))?;
    let opts = options_upto(&record.options, "map");
    put(m, record, "sphere", None, &name, &bytes, "map", opts).map_err(at("map"))?;

    // Align.
    progress("align");
    let weights = mesh.vertex_areas();
    let centring = m.align.center.then(CentringOptions::default);
    let transform = match (&landmarks, &template) {
        (Some(l), Some(t)) => {
            let fit = if m.align.fit == "rotation" {
                FitKind::Rotation
            } else {
                FitKind::Mobius
            };
            let a = align::align(
                &sphere.points,
                Some(&weights),
                l,
                t,
                &AlignOptions {
                    fit,
                    centring,
                    ..AlignOptions::default()
                },
            )
            .map_err(|e| StageError {
                stage: "align",
                error: match e {
                    Error::Invalid(msg) => Error::Invalid(format!(
                        "{}: {msg}",
                        u.landmarks
                            .as_deref()
                            .map(|p| relative(p, &m.root))
                            .unwrap_or_default()
                    )),
                    other => other,
                },
            })?;
            record.align = Some(AlignFigures {
                fit: m.align.fit.clone(),
                centring_iterations: a.centring.map(|c| c.iterations),
                landmarks: a.residuals.len(),
                rms_degrees: fin(a.rms_degrees),
                max_degrees: fin(a.max_degrees),
                residuals: a
                    .residuals
                    .iter()
                    .map(|r| LandmarkFigure {
                        name: r.name.clone(),
                        residual_degrees: fin(r.residual_degrees),
                    })
                    .collect(),
            });
            a.transform
        }
        _ => {
            let (t, iterations) = match centring {
                Some(co) => {
                    let c = align::centre(&sphere.points, &weights, &co).map_err(at("align"))?;
                    (c.transform, Some(c.iterations))
                }
                None => (Default::default(), None),
            };
            record.align = Some(AlignFigures {
                fit: "center-only".into(),
                centring_iterations: iterations,
                landmarks: 0,
                rms_degrees: None,
                max_degrees: None,
                residuals: Vec::new(),
            });
            t
        }
    };
    let aligned = align::aligned_positions(&transform, &sphere.points, radius);
    let name = format!(
        "{}/{}_space-individual_desc-aligned_sphere.surf.gii",
        u.sub(),
        u.stem()
    );
    let bytes = gifti_bytes(&Gifti::from_mesh(&TriMesh {
        positions: aligned.clone(),
        faces: mesh.faces.clone(),
    }))
    .map_err(at("align"))?;
    let opts = options_upto(&record.options, "align");
    put(
        m,
        record,
        "aligned-sphere",
        None,
        &name,
        &bytes,
        "align",
        opts,
    )
    .map_err(at("align"))?;

    // Register (optional): warp the aligned sphere to the folding template.
    let aligned = match shared.register.iter().find(|t| t.hemi == u.hemi) {
        Some(t) if m.register.is_some() => {
            progress("register");
            register_stage(m, u, t, &mesh, aligned, &maps, &origin, record)
                .map_err(at("register"))?
        }
        _ => aligned,
    };

    // Resample.
    progress("resample");
    if maps.is_empty() {
        return finish(record, repaired);
    }
    let any_added = added.iter().any(|&a| a);
    let mask = any_added.then_some(added.as_slice());
    let mut carried: Vec<InputMap> = maps
        .iter()
        .map(|mp| InputMap {
            name: mp.name.clone(),
            values: carry(&mp.values, &origin),
        })
        .collect();
    if m.resample.fwhm_mm > 0.0 {
        let idx: Vec<usize> = (0..carried.len())
            .filter(|&i| {
                matches!(
                    carried.get(i).map(|c| &c.values),
                    Some(MapValues::Continuous(_))
                )
            })
            .collect();
        let values: Vec<Vec<f64>> = idx
            .iter()
            .filter_map(|&i| match carried.get(i).map(|c| &c.values) {
                Some(MapValues::Continuous(v)) => Some(v.clone()),
                _ => None,
            })
            .collect();
        if !values.is_empty() {
            let (smoothed, _) = resample::smooth::smooth_maps(
                &mesh,
                &values,
                mask,
                &resample::smooth::SmoothOptions::new(m.resample.fwhm_mm),
            )
            .map_err(at("resample"))?;
            for (i, v) in idx.into_iter().zip(smoothed) {
                if let Some(c) = carried.get_mut(i) {
                    c.values = MapValues::Continuous(v);
                }
            }
        }
    }
    let tol = resample::target::DEFAULT_SPHERE_TOLERANCE;
    let locator = match Locator::new(&aligned, Some(&sphere.hull_faces), tol) {
        Ok(l) => l,
        Err(_) => Locator::new(&aligned, None, tol).map_err(at("resample"))?,
    };
    let location = locator.locate(&shared.target).map_err(at("resample"))?;
    for ((suffix, path), map) in u.maps.iter().zip(&carried) {
        let method = match m.resample.method.get(suffix) {
            Some(s) => Method::parse(s).map_err(at("resample"))?,
            None => map.values.default_method(),
        };
        let (out, _) = resample::resample_located(
            &locator,
            &location,
            std::slice::from_ref(map),
            mask,
            Some(method),
        )
        .map_err(|e| StageError {
            stage: "resample",
            error: match e {
                Error::Invalid(msg) => {
                    Error::Invalid(format!("{}: {msg}", relative(path, &m.root)))
                }
                other => other,
            },
        })?;
        let Some(r) = out.into_iter().next() else {
            continue;
        };
        let is_label = matches!(r.values, MapValues::Labels { .. });
        let ext = if is_label { "label.gii" } else { "shape.gii" };
        let name = format!(
            "{}/{}_space-{}_desc-{}_{suffix}.{ext}",
            u.sub(),
            u.stem(),
            shared.space,
            map_desc(m)
        );
        record.resample.push(ResampleFigures {
            map: suffix.clone(),
            method: method.name().into(),
            target_vertices: r.mask.len(),
            missing_target_vertices: r.report.n_masked_output,
        });
        let source = path
            .file_name()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        let g = files::resampled_gifti(&r, method, &shared.space, &source);
        let bytes = gifti_bytes(&g).map_err(at("resample"))?;
        let opts = options_upto(&record.options, "resample");
        put(
            m,
            record,
            "resampled-map",
            Some(suffix.clone()),
            &name,
            &bytes,
            "resample",
            opts,
        )
        .map_err(at("resample"))?;
    }
    finish(record, repaired)
}

/// The registration stage: the unit's feature maps (carried to the
/// repaired surface; values at vertices repair created are filled from
/// their neighbours) drive [`crate::register::register`] of the aligned
/// sphere to the hemisphere's template. Writes the warped sphere and puts
/// the report figures in the record; returns the warped positions.
#[allow(clippy::too_many_arguments)]
fn register_stage(
    m: &Manifest,
    u: &Unit,
    t: &RegisterTemplate,
    mesh: &TriMesh,
    aligned: Vec<Vec3>,
    maps: &[InputMap],
    origin: &[Option<u32>],
    record: &mut UnitRecord,
) -> Result<Vec<Vec3>> {
    let Some(settings) = &m.register else {
        return Ok(aligned);
    };
    let mut features = Vec::with_capacity(t.template.names.len());
    for name in &t.template.names {
        let k = u.maps.iter().position(|(s, _)| s == name);
        if k.is_none() && name == crate::cohort::manifest::BUILTIN_MEAN_CURVATURE {
            features.push(crate::mesh::curvature::mean_curvature(mesh));
            continue;
        }
        let k = k.ok_or_else(|| {
                Error::Invalid(format!(
                    "feature `{name}`: no input map with this suffix for this unit; expected one of inputs.maps"
                ))
            })?;
        let path = &u.maps[k].1;
        let values = match maps.get(k).map(|mp| &mp.values) {
            Some(MapValues::Continuous(v)) => carry_values(v, origin),
            _ => {
                return Err(Error::bad_file(
                    path,
                    "data array",
                    format!("feature `{name}` is a label map; expected a map of numbers"),
                ))
            }
        };
        features.push(fill_missing(&values, &mesh.faces).ok_or_else(|| {
            Error::bad_file(
                path,
                "data array",
                format!("feature `{name}` has no finite value; expected a map of numbers"),
            )
        })?);
    }
    let subject = TriMesh {
        positions: aligned,
        faces: mesh.faces.clone(),
    };
    let opts = crate::register::RegisterOptions {
        step: settings.step,
        tolerance: settings.tolerance,
        ..crate::register::RegisterOptions::default()
    };
    let reg =
        crate::register::register(&subject, &features, &t.template, &opts).map_err(
            |e| match e {
                Error::Invalid(msg) => Error::Invalid(format!("{}: {msg}", u.stem())),
                other => other,
            },
        )?;
    let rep = &reg.report;
    let nf = rep.features.len().max(1) as f64;
    record.register = Some(RegisterFigures {
        template_level: rep.template_level,
        features: rep
            .features
            .iter()
            .map(|f| RegisterFeatureFigure {
                name: f.name.clone(),
                before: fin(f.before),
                after: fin(f.after),
            })
            .collect(),
        corr_before: fin(rep.features.iter().map(|f| f.before).sum::<f64>() / nf),
        corr_after: fin(rep.features.iter().map(|f| f.after).sum::<f64>() / nf),
        jacobian_min: fin(rep.jacobian.min),
        jacobian_max: fin(rep.jacobian.max),
        folded: rep.jacobian.folded + rep.subject_folded,
        iterations: rep.stages.iter().map(|s| s.iterations).sum(),
        softened_triangles: rep.embed.offenders_first,
        soften_rounds: rep.embed.local_rounds + rep.embed.global_halvings,
        identity_fallback: rep.embed.identity_fallback,
        mean_displacement_deg: fin(rep.mean_displacement_deg),
        max_displacement_deg: fin(rep.max_displacement_deg),
    });
    let name = format!(
        "{}/{}_space-individual_desc-registered_sphere.surf.gii",
        u.sub(),
        u.stem()
    );
    let bytes = gifti_bytes(&Gifti::from_mesh(&reg.warped))?;
    let opts = options_upto(&record.options, "register");
    put(
        m,
        record,
        "registered-sphere",
        None,
        &name,
        &bytes,
        "register",
        opts,
    )?;
    Ok(reg.warped.positions)
}

/// Carry numbers from the input vertices to the repaired ones (NaN for
/// vertices repair created).
fn carry_values(v: &[f64], origin: &[Option<u32>]) -> Vec<f64> {
    origin
        .iter()
        .map(|o| {
            o.and_then(|i| v.get(i as usize).copied())
                .unwrap_or(f64::NAN)
        })
        .collect()
}

/// Fill non-finite values by repeated averaging of finite neighbours (in
/// vertex order, so the result is deterministic); `None` when no value is
/// finite.
fn fill_missing(values: &[f64], faces: &[[u32; 3]]) -> Option<Vec<f64>> {
    let mut v = values.to_vec();
    if v.iter().all(|x| x.is_finite()) {
        return Some(v);
    }
    if !v.iter().any(|x| x.is_finite()) {
        return None;
    }
    let mut nbrs: Vec<Vec<u32>> = vec![Vec::new(); v.len()];
    for f in faces {
        for k in 0..3 {
            let (a, b) = (f[k] as usize, f[(k + 1) % 3]);
            if a < nbrs.len() && (b as usize) < nbrs.len() {
                nbrs[a].push(b);
                nbrs[b as usize].push(f[k]);
            }
        }
    }
    loop {
        let mut next = v.clone();
        let mut changed = false;
        for (i, x) in v.iter().enumerate() {
            if x.is_finite() {
                continue;
            }
            let (s, c) = nbrs[i]
                .iter()
                .map(|&j| v[j as usize])
                .filter(|y| y.is_finite())
                .fold((0.0, 0usize), |(s, c), y| (s + y, c + 1));
            if c > 0 {
                next[i] = s / c as f64;
                changed = true;
            }
        }
        v = next;
        if !changed {
            break;
        }
    }
    // Vertices not connected to any finite value: the mean.
    let finite: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    let mean = finite.iter().sum::<f64>() / finite.len() as f64;
    for x in &mut v {
        if !x.is_finite() {
            *x = mean;
        }
    }
    Some(v)
}

fn finish(record: &mut UnitRecord, repaired: bool) -> std::result::Result<(), StageError> {
    record.status = if repaired { "repaired" } else { "ok" }.into();
    Ok(())
}

fn map_figures(r: &crate::map::MapReport) -> MapFigures {
    MapFigures {
        path: r.path.clone(),
        pole: r.pole,
        iterations: r.iterations,
        layout_residual: fin(r.layout_residual),
        max_radius_error: fin(r.verification.max_radius_error),
        max_interior_angle_error: fin(r.verification.max_interior_angle_error),
        angle_distortion_p50: fin(r.angle_distortion.p50),
        angle_distortion_p95: fin(r.angle_distortion.p95),
        angle_distortion_max: fin(r.angle_distortion.max),
        log_area_ratio_p5: fin(r.log_area_ratio.p5),
        log_area_ratio_p95: fin(r.log_area_ratio.p95),
        inverted_faces: r.inverted_faces,
    }
}
