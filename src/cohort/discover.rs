//! Finding the work of a cohort: the subjects of a BIDS-derivatives study
//! folder and, per subject and hemisphere, the input files named by the
//! manifest.
//!
//! In: a [`Manifest`]. Out: [`Unit`]s (one per subject and hemisphere) in
//! a fixed order (subject label, then L before R), each with the paths of
//! its surface, maps and landmarks. Subjects are the manifest's list or
//! the folders `sub-<label>` of the study root that hold a surface
//! `sub-<label>_hemi-<H>_<surface>.surf.gii` for a listed hemisphere
//! (entities after the BIDS specification: Gorgolewski et al., "The brain
//! imaging data structure", Sci. Data 3 (2016) 160044). A missing input
//! file is not an error here: the unit fails when it runs, with the file
//! named, and the other units go on.

use super::manifest::{is_label, Manifest};
use crate::error::{Error, Result};
use std::path::{Path, PathBuf};

/// Extensions tried, in order, for a per-vertex map.
pub const MAP_EXTENSIONS: [&str; 3] = ["shape.gii", "func.gii", "label.gii"];

/// One subject and hemisphere.
#[derive(Debug, Clone, PartialEq)]
pub struct Unit {
    /// Subject label without `sub-`.
    pub subject: String,
    /// `L` or `R`.
    pub hemi: String,
    /// The surface file.
    pub surface: PathBuf,
    /// (suffix, file) per map, in manifest order. A missing file is given
    /// with the first extension tried.
    pub maps: Vec<(String, PathBuf)>,
    /// The landmark table, when the manifest names one.
    pub landmarks: Option<PathBuf>,
    /// The template, when the manifest names one.
    pub template: Option<PathBuf>,
}

impl Unit {
    /// `sub-<label>_hemi-<H>`: the prefix of every file of this unit.
    pub fn stem(&self) -> String {
        format!("sub-{}_hemi-{}", self.subject, self.hemi)
    }

    /// `sub-<label>`.
    pub fn sub(&self) -> String {
        format!("sub-{}", self.subject)
    }
}

/// Subject labels of the study root: folders `sub-<label>` (sorted).
pub fn discover_subjects(m: &Manifest) -> Result<Vec<String>> {
    if !m.root.is_dir() {
        return Err(Error::Invalid(format!(
            "{}: study.root {} is not a folder; expected the study folder (for the bundled demo: `horosphere demo --out demo-subjects`)",
            m.path.display(),
            m.root.display()
        )));
    }
    let entries = std::fs::read_dir(&m.root).map_err(|e| Error::io(&m.root, e))?;
    let mut out = Vec::new();
    for entry in entries {
        let entry = entry.map_err(|e| Error::io(&m.root, e))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some(label) = name.strip_prefix("sub-") else {
            continue;
        };
        if !is_label(label) || !entry.path().is_dir() {
            continue;
        }
        let has_surface = m
            .hemispheres
            .iter()
            .any(|h| surface_path(&m.root, label, h, &m.surface).is_file());
        if has_surface {
            out.push(label.to_string());
        }
    }
    out.sort();
    if out.is_empty() {
        return Err(Error::Invalid(format!(
            "{}: no subjects found; expected folders sub-<label> holding sub-<label>_hemi-<L|R>_{}.surf.gii",
            m.root.display(),
            m.surface
        )));
    }
    Ok(out)
}

fn surface_path(root: &Path, label: &str, hemi: &str, suffix: &str) -> PathBuf {
    root.join(format!("sub-{label}"))
        .join(format!("sub-{label}_hemi-{hemi}_{suffix}.surf.gii"))
}

/// The units of the manifest, optionally restricted to `only` subjects
/// (labels with or without `sub-`) and `hemi` hemispheres. A subject in
/// `only` that the study does not have is an error.
pub fn units(m: &Manifest, only: &[String], hemi: &[String]) -> Result<Vec<Unit>> {
    let all = match &m.subjects {
        Some(list) => list.clone(),
        None => discover_subjects(m)?,
    };
    let mut wanted = Vec::new();
    for o in only {
        let label = o.strip_prefix("sub-").unwrap_or(o);
        if !all.iter().any(|s| s == label) {
            return Err(Error::Invalid(format!(
                "--only {o}: no such subject in the study (it has {})",
                all.join(", ")
            )));
        }
        wanted.push(label.to_string());
    }
    for h in hemi {
        if !m.hemispheres.contains(h) {
            return Err(Error::Invalid(format!(
                "--hemi {h}: the manifest lists hemispheres {}",
                m.hemispheres.join(", ")
            )));
        }
    }
    let mut out = Vec::new();
    let mut subjects = all.clone();
    subjects.sort();
    for s in &subjects {
        if !wanted.is_empty() && !wanted.contains(s) {
            continue;
        }
        let mut hemis = m.hemispheres.clone();
        hemis.sort();
        for h in hemis {
            if !hemi.is_empty() && !hemi.contains(&h) {
                continue;
            }
            let dir = m.root.join(format!("sub-{s}"));
            let stem = format!("sub-{s}_hemi-{h}");
            let maps = m
                .maps
                .iter()
                .map(|suffix| {
                    let found = MAP_EXTENSIONS
                        .iter()
                        .map(|ext| dir.join(format!("{stem}_{suffix}.{ext}")))
                        .find(|p| p.is_file())
                        .unwrap_or_else(|| {
                            dir.join(format!("{stem}_{suffix}.{}", MAP_EXTENSIONS[0]))
                        });
                    (suffix.clone(), found)
                })
                .collect();
            out.push(Unit {
                subject: s.clone(),
                hemi: h.clone(),
                surface: surface_path(&m.root, s, &h, &m.surface),
                maps,
                landmarks: m
                    .landmarks
                    .as_ref()
                    .map(|l| dir.join(format!("{stem}_{l}.csv"))),
                template: m.template_for(&h),
            });
        }
    }
    Ok(out)
}
