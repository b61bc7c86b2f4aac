//! The cohort step: from the unit records to the cohort matrix of every
//! map and the cohort QC table.
//!
//! In: the [`Manifest`] and its [`Unit`]s; the unit records and resampled
//! maps under the output root. Out, under `OUTPUT/group/`:
//! `space-<S>_desc-<map>_matrix.func.gii` (one data array per unit that
//! finished, labelled `sub-<label>_hemi-<H>` in its metadata),
//! `space-<S>_desc-<map>_table.csv` (units x vertices) and
//! `desc-cohort_qc.csv` (one row per unit, including failed and missing
//! ones), each with a provenance sidecar; and
//! `OUTPUT/dataset_description.json`. What stays true: the files depend
//! only on the records and maps on disk (not on the process that wrote
//! them), rows and columns come in unit order, and numbers are written in
//! their shortest round-trip form, so the same inputs give the same bytes.

use super::discover::Unit;
use super::manifest::Manifest;
use super::provenance::{
    json_bytes, relative, sha256_bytes, write_sidecar, FileHash, GeneratedBy, Sidecar,
};
use super::unit::{read_record, record_path, UnitRecord};
use crate::error::{Error, Result};
use crate::io::atomic::write_bytes;
use crate::io::gifti;
use crate::resample::matrix::{cohort_gifti, CohortColumn};
use std::path::PathBuf;

/// Columns of the QC table, in order (documented in docs/user-guide.md).
pub const QC_COLUMNS: [&str; 47] = [
    "subject",
    "hemi",
    "status",
    "failed_stage",
    "error",
    "vertices",
    "faces",
    "euler_characteristic",
    "components",
    "boundary_loops",
    "genus",
    "non_manifold_edges",
    "duplicate_vertices",
    "degenerate_faces",
    "ready_to_map",
    "repaired",
    "holes_filled",
    "vertices_added",
    "pieces_dropped",
    "vertices_merged",
    "faces_dropped",
    "faces_reoriented",
    "handles_found",
    "handles_cut",
    "handle_loops_mm",
    "handle_locations",
    "vertices_mapped",
    "map_path",
    "map_iterations",
    "map_max_radius_error",
    "map_max_angle_error",
    "angle_distortion_p50",
    "angle_distortion_p95",
    "angle_distortion_max",
    "log_area_ratio_p5",
    "log_area_ratio_p95",
    "inverted_faces",
    "align_fit",
    "landmarks",
    "landmark_rms_deg",
    "landmark_max_deg",
    "register_corr_before",
    "register_corr_after",
    "register_jacobian_min",
    "register_folded",
    "register_softened",
    "register_identity_fallback",
];

/// What the cohort step wrote.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupSummary {
    /// Files written (relative to the output root).
    pub files: Vec<String>,
    /// Units in the QC table with status `failed` (or no record).
    pub failed: usize,
}

fn num<T: std::fmt::Display>(x: Option<T>) -> String {
    x.map(|v| v.to_string()).unwrap_or_default()
}

/// One QC row.
fn qc_row(u: &Unit, r: Option<&UnitRecord>) -> Vec<String> {
    let Some(r) = r else {
        let mut row = vec![
            format!("sub-{}", u.subject),
            u.hemi.clone(),
            "failed".into(),
            "not-run".into(),
            "no unit record: the unit has not run (or was interrupted)".into(),
        ];
        row.resize(QC_COLUMNS.len(), String::new());
        return row;
    };
    let i = r.inspect.as_ref();
    let p = r.repair.as_ref();
    let m = r.map.as_ref();
    let a = r.align.as_ref();
    let g = r.register.as_ref();
    let vertices_mapped =
        m.map(|_| p.map_or_else(|| i.map_or(0, |i| i.vertices), |p| p.vertices_out));
    vec![
        format!("sub-{}", r.subject),
        r.hemi.clone(),
        r.status.clone(),
        r.failed_stage.clone().unwrap_or_default(),
        r.error.clone().unwrap_or_default(),
        num(i.map(|i| i.vertices)),
        num(i.map(|i| i.faces)),
        num(i.map(|i| i.euler_characteristic)),
        num(i.map(|i| i.components)),
        num(i.map(|i| i.boundary_loops)),
        num(i.and_then(|i| i.genus)),
        num(i.map(|i| i.non_manifold_edges)),
        num(i.map(|i| i.duplicate_vertices)),
        num(i.map(|i| i.degenerate_faces)),
        num(i.map(|i| i.ready_to_map)),
        num(i.map(|_| p.is_some())),
        num(p.map(|p| p.holes_filled)),
        num(p.map(|p| p.vertices_added)),
        num(p.map(|p| p.pieces_dropped)),
        num(p.map(|p| p.vertices_merged)),
        num(p.map(|p| p.faces_dropped)),
        num(p.map(|p| p.faces_reoriented)),
        num(p.map(|p| p.handles.len())),
        num(p.map(|p| p.handles.iter().filter(|h| h.cut).count())),
        p.map(|p| {
            p.handles
                .iter()
                .map(|h| format!("{:.2}", h.loop_mm))
                .collect::<Vec<_>>()
                .join("|")
        })
        .unwrap_or_default(),
        p.map(|p| {
            p.handles
                .iter()
                .map(|h| format!("{:.1};{:.1};{:.1}", h.centre[0], h.centre[1], h.centre[2]))
                .collect::<Vec<_>>()
                .join("|")
        })
        .unwrap_or_default(),
        num(vertices_mapped),
        m.map(|m| m.path.clone()).unwrap_or_default(),
        num(m.map(|m| m.iterations)),
        num(m.and_then(|m| m.max_radius_error)),
        num(m.and_then(|m| m.max_interior_angle_error)),
        num(m.and_then(|m| m.angle_distortion_p50)),
        num(m.and_then(|m| m.angle_distortion_p95)),
        num(m.and_then(|m| m.angle_distortion_max)),
        num(m.and_then(|m| m.log_area_ratio_p5)),
        num(m.and_then(|m| m.log_area_ratio_p95)),
        num(m.map(|m| m.inverted_faces)),
        a.map(|a| a.fit.clone()).unwrap_or_default(),
        num(a.map(|a| a.landmarks)),
        num(a.and_then(|a| a.rms_degrees)),
        num(a.and_then(|a| a.max_degrees)),
        num(g.and_then(|g| g.corr_before)),
        num(g.and_then(|g| g.corr_after)),
        num(g.and_then(|g| g.jacobian_min)),
        num(g.map(|g| g.folded)),
        num(g.map(|g| g.softened_triangles)),
        g.map(|g| g.identity_fallback.to_string())
            .unwrap_or_default(),
    ]
}

fn csv_bytes(rows: &[Vec<String>]) -> Result<Vec<u8>> {
    let mut w = csv::WriterBuilder::new().from_writer(Vec::new());
    for row in rows {
        w.write_record(row)
            .map_err(|e| Error::Invalid(format!("CSV encoding: {e}")))?;
    }
    w.into_inner()
        .map_err(|e| Error::Invalid(format!("CSV encoding: {}", e.error())))
}

/// The `dataset_description.json` of the output root (BIDS derivatives).
pub fn dataset_description() -> serde_json::Value {
    serde_json::json!({
        "Name": "horosphere cohort outputs",
        "BIDSVersion": "1.9.0",
        "DatasetType": "derivative",
        "GeneratedBy": [{
            "Name": "horosphere",
            "Version": env!("CARGO_PKG_VERSION"),
            "Description": "inspect, repair, exact discrete conformal map to the sphere, Moebius alignment, resampling"
        }]
    })
}

/// Write `dataset_description.json` (same bytes every time).
pub fn write_dataset_description(m: &Manifest) -> Result<()> {
    write_bytes(
        &m.output.join("dataset_description.json"),
        &json_bytes(&dataset_description())?,
    )
}

/// Write the cohort files for `units` (see the module documentation).
pub fn write_group(m: &Manifest, units: &[Unit], space: &str) -> Result<GroupSummary> {
    write_dataset_description(m)?;
    let group = m.output.join("group");
    if let Ok(entries) = std::fs::read_dir(&group) {
        for e in entries.flatten() {
            let name = e.file_name().to_string_lossy().into_owned();
            if name.starts_with('.') && name.ends_with(".tmp") {
                let _ = std::fs::remove_file(e.path());
            }
        }
    }
    let records: Vec<(PathBuf, Option<UnitRecord>)> = units
        .iter()
        .map(|u| {
            let p = record_path(m, u);
            let r = read_record(&p);
            (p, r)
        })
        .collect();
    let mut files = Vec::new();
    let options =
        serde_json::json!({ "space": space, "maps": m.maps, "hemispheres": m.hemispheres });
    // QC table.
    let mut rows = vec![QC_COLUMNS.iter().map(|s| s.to_string()).collect::<Vec<_>>()];
    let mut failed = 0;
    let mut record_inputs = Vec::new();
    for (u, (p, r)) in units.iter().zip(&records) {
        let row = qc_row(u, r.as_ref());
        if row.get(2).is_some_and(|s| s == "failed") {
            failed += 1;
        }
        rows.push(row);
        if let Ok(bytes) = std::fs::read(p) {
            record_inputs.push(FileHash {
                path: relative(p, &m.output),
                sha256: sha256_bytes(&bytes),
            });
        }
    }
    let name = "group/desc-cohort_qc.csv".to_string();
    put(m, &name, &csv_bytes(&rows)?, record_inputs, options.clone())?;
    files.push(name);
    // Matrices.
    for suffix in &m.maps {
        let mut cols = Vec::new();
        let mut inputs = Vec::new();
        for (u, (_, r)) in units.iter().zip(&records) {
            let Some(r) = r else { continue };
            if r.status == "failed" {
                continue;
            }
            let Some(o) = r
                .outputs
                .iter()
                .find(|o| o.map.as_deref() == Some(suffix.as_str()))
            else {
                continue;
            };
            let path = m.output.join(&o.path);
            let g = gifti::read(&path)?;
            let a = g.arrays.first().ok_or_else(|| {
                Error::bad_file(
                    &path,
                    "DataArray 0",
                    "missing; expected the resampled values",
                )
            })?;
            cols.push(CohortColumn {
                subject: u.stem(),
                values: a.data.to_f64().iter().map(|&x| x as f32).collect(),
            });
            inputs.push(FileHash {
                path: o.path.clone(),
                sha256: o.sha256.clone(),
            });
        }
        if cols.is_empty() {
            continue;
        }
        let gname = format!("group/space-{space}_desc-{suffix}_matrix.func.gii");
        let g = cohort_gifti(&cols)?;
        let bytes = gifti::to_bytes(&g, &gifti::WriteOptions::default())?;
        put(m, &gname, &bytes, inputs.clone(), options.clone())?;
        files.push(gname);
        let tname = format!("group/space-{space}_desc-{suffix}_table.csv");
        let n = cols.first().map_or(0, |c| c.values.len());
        let mut rows = Vec::with_capacity(cols.len() + 1);
        let mut header = Vec::with_capacity(n + 1);
        header.push("unit".to_string());
        header.extend((0..n).map(|v| format!("v{v}")));
        rows.push(header);
        for c in &cols {
            let mut row = Vec::with_capacity(n + 1);
            row.push(c.subject.clone());
            row.extend(c.values.iter().map(|x| {
                if x.is_finite() {
                    x.to_string()
                } else {
                    String::new()
                }
            }));
            rows.push(row);
        }
        put(m, &tname, &csv_bytes(&rows)?, inputs, options.clone())?;
        files.push(tname);
    }
    Ok(GroupSummary { files, failed })
}

fn put(
    m: &Manifest,
    name: &str,
    bytes: &[u8],
    inputs: Vec<FileHash>,
    options: serde_json::Value,
) -> Result<()> {
    let path = m.output.join(name);
    write_bytes(&path, bytes)?;
    write_sidecar(
        &path,
        &Sidecar {
            generated_by: GeneratedBy::this(),
            stage: "cohort".into(),
            inputs,
            options,
            output: FileHash {
                path: name.to_string(),
                sha256: sha256_bytes(bytes),
            },
        },
    )
}
