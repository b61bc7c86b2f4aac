//! Writing a synthetic cohort to disk as BIDS derivatives.
//!
//! In: [`CohortParams`], an output folder and the command line that asked
//! for it (recorded in the README). Out: the folder below, every file
//! written atomically ([`crate::io::atomic`]). Invariants: the same
//! parameters give byte-identical files (GIFTI data are written
//! GZipBase64Binary little-endian by a deterministic compressor; JSON and
//! tables are formatted by our code); one subject's failure is recorded and
//! the others are still written.
//!
//! Layout (entities after the BIDS derivatives specification, "Brain
//! Imaging Data Structure", Gorgolewski et al., Sci. Data 3, 2016):
//!
//! ```text
//! OUT/README.md                      what this is (synthetic), how to regenerate
//! OUT/dataset_description.json       BIDS dataset description (derivative)
//! OUT/participants.tsv, .json        participant_id, group, age, sex
//! OUT/ground_truth.json              everything planted (see cohort::GroundTruth)
//! OUT/sub-kf01/sub-kf01_hemi-L_white.surf.gii       surface, mm
//! OUT/sub-kf01/sub-kf01_hemi-L_thickness.shape.gii  thickness, mm
//! OUT/sub-kf01/sub-kf01_hemi-L_depth.shape.gii      depth below the envelope, mm
//! OUT/sub-kf01/sub-kf01_hemi-L_regions.label.gii    region keys and table
//! OUT/sub-kf01/sub-kf01_hemi-L_landmarks.csv        name,vertex
//! ... the same for hemi-R and every subject
//! ```

use super::cohort::{
    generate_subject, ground_truth, landmarks_csv, participants, participants_tsv, CohortParams,
    SubjectData, SubjectTruth, SITE_NAME, STUDY_NAME,
};
use super::maps::region_table;
use crate::error::{Error, Result};
use crate::io::atomic::write_bytes;
use crate::io::gifti::{self, Label, LabelTable, MetaData};
use serde::Serialize;
use std::path::{Path, PathBuf};

/// What was written.
#[derive(Debug, Clone, Serialize)]
pub struct CohortSummary {
    pub out: PathBuf,
    pub subjects_written: usize,
    pub subjects_failed: Vec<(String, String)>,
    pub files: usize,
    pub bytes: u64,
}

/// Generate the cohort and write it under `out`. `command` is the command
/// line recorded in the README; `progress(done, total)` is called after
/// each subject. Refuses a non-empty `out` unless `overwrite`.
pub fn write_cohort(
    out: &Path,
    params: &CohortParams,
    command: &str,
    overwrite: bool,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<CohortSummary> {
    params.validate()?;
    if !overwrite {
        if let Ok(mut entries) = std::fs::read_dir(out) {
            if entries.next().is_some() {
                return Err(Error::Invalid(format!(
                    "output folder {} is not empty; expected an empty or new folder (or allow overwriting)",
                    out.display()
                )));
            }
        }
    }
    std::fs::create_dir_all(out).map_err(|e| Error::io(out, e))?;
    let people = participants(params);
    let mut files: Vec<PathBuf> = Vec::new();
    let mut put = |path: PathBuf, bytes: &[u8]| -> Result<()> {
        write_bytes(&path, bytes)?;
        files.push(path);
        Ok(())
    };
    put(
        out.join("participants.tsv"),
        participants_tsv(&people).as_bytes(),
    )?;
    put(out.join("participants.json"), PARTICIPANTS_JSON.as_bytes())?;
    put(
        out.join("dataset_description.json"),
        json_bytes(&dataset_description())?.as_slice(),
    )?;
    put(out.join("README.md"), readme(params, command).as_bytes())?;
    let mut truths = Vec::new();
    let mut failed = Vec::new();
    let mut gifti_files = Vec::new();
    for i in 0..people.len() {
        let id = format!("sub-{}", people[i].label);
        match generate_subject(params, &people, i)
            .and_then(|s| write_subject(out, &s).map(|f| (s, f)))
        {
            Ok((s, written)) => {
                truths.push(SubjectTruth::of(&s));
                gifti_files.extend(written);
            }
            Err(e) => failed.push((id, e.to_string())),
        }
        progress(i + 1, people.len());
    }
    let mut truth = serde_json::to_value(ground_truth(params, truths))
        .map_err(|e| Error::Invalid(format!("ground truth: {e}")))?;
    if let Some(obj) = truth.as_object_mut() {
        obj.insert("command".into(), command.into());
        obj.insert(
            "failed_subjects".into(),
            serde_json::to_value(&failed).unwrap_or_default(),
        );
    }
    put(
        out.join("ground_truth.json"),
        json_bytes(&truth)?.as_slice(),
    )?;
    files.extend(gifti_files);
    let bytes = files
        .iter()
        .filter_map(|p| std::fs::metadata(p).ok())
        .map(|m| m.len())
        .sum();
    let summary = CohortSummary {
        out: out.to_path_buf(),
        subjects_written: people.len() - failed.len(),
        subjects_failed: failed,
        files: files.len(),
        bytes,
    };
    if !summary.subjects_failed.is_empty() {
        let list: Vec<String> = summary
            .subjects_failed
            .iter()
            .map(|(id, e)| format!("{id}: {e}"))
            .collect();
        return Err(Error::Algorithm {
            stage: "demo",
            message: format!(
                "{} of {} subjects failed (the others were written): {}",
                summary.subjects_failed.len(),
                people.len(),
                list.join("; ")
            ),
        });
    }
    Ok(summary)
}

/// Pretty JSON with a final newline.
fn json_bytes<T: Serialize>(value: &T) -> Result<Vec<u8>> {
    let mut v =
        serde_json::to_vec_pretty(value).map_err(|e| Error::Invalid(format!("JSON: {e}")))?;
    v.push(b'\n');
    Ok(v)
}

/// The label table of the region maps, in GIFTI form.
pub fn gifti_label_table() -> LabelTable {
    LabelTable {
        labels: region_table()
            .iter()
            .map(|r| Label {
                key: r.key,
                name: r.name.to_string(),
                rgba: Some(r.rgba.map(f64::from)),
            })
            .collect(),
    }
}

/// Write one subject's files; returns their paths.
pub fn write_subject(out: &Path, s: &SubjectData) -> Result<Vec<PathBuf>> {
    let id = format!("sub-{}", s.participant.label);
    let dir = out.join(&id);
    let table = gifti_label_table();
    let mut files = Vec::new();
    for h in &s.hemis {
        let stem = format!("{id}_hemi-{}", h.hemi.label());
        let p = dir.join(format!("{stem}_white.surf.gii"));
        gifti::write_mesh(&p, &h.mesh)?;
        files.push(p);
        let mut meta = MetaData::new();
        meta.set("Name", "thickness");
        meta.set("Units", "mm");
        let p = dir.join(format!("{stem}_thickness.shape.gii"));
        gifti::write_shape(&p, &h.thickness, &meta)?;
        files.push(p);
        let mut meta = MetaData::new();
        meta.set("Name", "depth");
        meta.set("Units", "mm");
        meta.set(
            "Description",
            "depth below the unfolded envelope; 0 on crowns, positive in sulci",
        );
        let p = dir.join(format!("{stem}_depth.shape.gii"));
        gifti::write_shape(&p, &h.depth, &meta)?;
        files.push(p);
        let p = dir.join(format!("{stem}_regions.label.gii"));
        gifti::write_labels(&p, &h.labels, &table)?;
        files.push(p);
        let p = dir.join(format!("{stem}_landmarks.csv"));
        write_bytes(&p, landmarks_csv(&h.landmarks).as_bytes())?;
        files.push(p);
    }
    Ok(files)
}

/// BIDS `dataset_description.json` of the derivative dataset.
fn dataset_description() -> serde_json::Value {
    serde_json::json!({
        "Name": STUDY_NAME,
        "BIDSVersion": "1.9.0",
        "DatasetType": "derivative",
        "License": "CC0",
        "GeneratedBy": [{
            "Name": "horosphere",
            "Version": env!("CARGO_PKG_VERSION"),
            "Description": "synthetic cortex generator (horosphere demo); no real person's data"
        }],
        "HowToAcknowledge": "Synthetic data; no acknowledgement needed."
    })
}

/// BIDS sidecar describing the participants table's columns.
const PARTICIPANTS_JSON: &str = r#"{
  "group": {
    "Description": "study group",
    "Levels": {
      "control": "control participant",
      "patient": "patient participant (thinner cortex in the planted region, left hemisphere)"
    }
  },
  "age": {
    "Description": "age at the (invented) scan",
    "Units": "year"
  },
  "sex": {
    "Description": "sex",
    "Levels": {
      "F": "female",
      "M": "male"
    }
  }
}
"#;

/// The README of the generated folder.
fn readme(params: &CohortParams, command: &str) -> String {
    let defects: Vec<String> = super::cohort::defect_plan(params)
        .iter()
        .filter_map(|(i, hemi, kind)| {
            participants(params)
                .get(*i)
                .map(|p| format!("- sub-{} hemi-{}: {}", p.label, hemi.label(), kind.label()))
        })
        .collect();
    format!(
        "# {STUDY_NAME}\n\
\n\
**Synthetic data.** Every surface, map and participant here was made by\n\
`horosphere demo` from a random seed. No real person, scan or study is\n\
behind it: the study, the site and the participant labels are invented\n\
(site: {SITE_NAME}).\n\
\n\
Regenerate byte-identically with the command below, run from the folder\n\
that holds this one, into a new or empty folder (add `--overwrite` to\n\
replace these files in place; the output is the same):\n\
\n\
```\n\
{command}\n\
```\n\
\n\
## What is here\n\
\n\
- `participants.tsv` (+ `.json`): participant_id, group, age, sex.\n\
- `ground_truth.json`: everything planted: the region where patients are\n\
  thinner (centre direction and angular radius on the base sphere, left\n\
  hemisphere, {effect} mm), the age slope, the landmark template and each\n\
  subject's landmark directions and vertices, and the planted defects.\n\
- `sub-<label>/sub-<label>_hemi-<L|R>_white.surf.gii`: the folded surface\n\
  (mm, {vertices} vertices per clean hemisphere, outward triangles).\n\
- `..._thickness.shape.gii`: cortical thickness (mm).\n\
- `..._depth.shape.gii`: depth below the unfolded envelope (mm; 0 on\n\
  crowns, positive in sulci).\n\
- `..._regions.label.gii`: regions with their label table (invented names).\n\
- `..._landmarks.csv`: `name,vertex` of seven invented landmarks.\n\
\n\
## Planted defects\n\
\n\
Surfaces are closed, genus 0, one piece and free of self-intersections,\n\
except these, which carry one defect each on purpose:\n\
\n\
{defects}\n\
\n\
The vertices of a stray piece carry thickness 0, depth 0 and the region\n\
`unlabelled`; `ground_truth.json` gives each defect's place and counts.\n\
\n\
## Caution\n\
\n\
For research and software testing only: not a medical device, not for\n\
diagnosis. Results from any analysis need review by a trained analyst;\n\
follow local ethics approval and data-protection rules for real data.\n",
        effect = params.effect.change_mm,
        vertices = params.vertices,
        defects = if defects.is_empty() {
            "- none".to_string()
        } else {
            defects.join("\n")
        },
    )
}
