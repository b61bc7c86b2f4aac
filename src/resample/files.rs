//! Files of the resampling stage: per-vertex maps and masks in, resampled
//! maps out, and the BIDS-derivatives names of the outputs.
//!
//! In: GIFTI files with one value per vertex (a `NIFTI_INTENT_LABEL` array
//! makes a label map, otherwise the first shape or float array a continuous
//! map), mask files. Out: a [`Gifti`] per resampled map with two arrays:
//! the values (`NIFTI_INTENT_SHAPE` FLOAT32 with NaN where missing, or
//! `NIFTI_INTENT_LABEL` INT32 with the missing key, and the label table)
//! and the mask (`NIFTI_INTENT_NONE` UINT8, 1 = missing, metadata
//! `Name = missing`). File metadata records the method and the target.
//! What stays true: errors name the file and the array; the output name
//! keeps the input's entities and sets `space-<label>`.

use super::{InputMap, MapValues, Method, ResampledMap};
use crate::error::{Error, Result};
use crate::io::gifti::{self, Data, DataArray, Gifti, Intent, MetaData};
use std::path::Path;

/// Read a per-vertex map: labels when the file has a `NIFTI_INTENT_LABEL`
/// array, else the first shape (or float) array as continuous values.
pub fn read_map(path: &Path) -> Result<InputMap> {
    let g = gifti::read(path)?;
    let name = path.file_name().map_or_else(
        || path.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    );
    let values = if g.arrays.iter().any(|a| a.intent == Intent::Label) {
        let l = g.to_labels(path)?;
        MapValues::Labels {
            keys: l.values,
            table: l.table,
        }
    } else {
        let s = g.to_shape(path)?;
        MapValues::Continuous(s.values.iter().map(|&x| f64::from(x)).collect())
    };
    Ok(InputMap { name, values })
}

/// Read a mask with `n` vertices: with `keys`, the vertices whose label key
/// (first label or integer array) is one of them; otherwise the vertices
/// whose value in the first per-vertex array is non-zero (NaN counts as
/// masked too).
pub fn read_mask(path: &Path, keys: Option<&[i32]>, n: usize) -> Result<Vec<bool>> {
    let g = gifti::read(path)?;
    let (i, a) = g
        .arrays
        .iter()
        .enumerate()
        .find(|(_, a)| !matches!(a.intent, Intent::PointSet | Intent::Triangle))
        .ok_or_else(|| {
            Error::bad_file(
                path,
                "file",
                "no per-vertex array; expected a mask with one value per vertex",
            )
        })?;
    let el = gifti::array_element(i, &a.intent);
    if !a.is_column() || a.rows() != n {
        return Err(Error::bad_file(
            path,
            el,
            format!(
                "dimensions {:?}; expected one value per sphere vertex ([{n}])",
                a.dims
            ),
        ));
    }
    match keys {
        Some(keys) => {
            let k = a.data.to_i32().ok_or_else(|| {
                Error::bad_file(
                    path,
                    el,
                    "float values; expected integer label keys for a mask chosen by key",
                )
            })?;
            Ok(k.iter().map(|x| keys.contains(x)).collect())
        }
        None => Ok(a.data.to_f64().iter().map(|&x| x != 0.0).collect()),
    }
}

/// The output file of one resampled map (see the module doc).
pub fn resampled_gifti(map: &ResampledMap, method: Method, target: &str, source: &str) -> Gifti {
    let mut meta = MetaData::new();
    meta.set("Name", source);
    let (values, table) = match &map.values {
        MapValues::Continuous(v) => (
            DataArray {
                intent: Intent::Shape,
                dims: vec![v.len()],
                data: Data::F32(v.iter().map(|&x| x as f32).collect()),
                meta,
                transforms: Vec::new(),
            },
            Default::default(),
        ),
        MapValues::Labels { keys, table } => (
            DataArray {
                intent: Intent::Label,
                dims: vec![keys.len()],
                data: Data::I32(keys.clone()),
                meta,
                transforms: Vec::new(),
            },
            table.clone(),
        ),
    };
    let mut mmeta = MetaData::new();
    mmeta.set("Name", "missing");
    let mask = DataArray {
        intent: Intent::None,
        dims: vec![map.mask.len()],
        data: Data::U8(map.mask.iter().map(|&b| u8::from(b)).collect()),
        meta: mmeta,
        transforms: Vec::new(),
    };
    let mut fmeta = MetaData::new();
    fmeta.set("ResampleMethod", method.name());
    fmeta.set("ResampleTarget", target);
    fmeta.set("ResampleSource", source);
    Gifti {
        meta: fmeta,
        label_table: table,
        arrays: vec![values, mask],
        ..Gifti::default()
    }
}

/// The output file name for `input` on the target `space`: the input's
/// name with its `space-` entity set to `space` (added after `sub-`,
/// `ses-` and `hemi-`, in BIDS-derivatives order, when missing).
/// `sub-01_hemi-L_thickness.shape.gii` becomes
/// `sub-01_hemi-L_space-icosphere6_thickness.shape.gii`.
pub fn output_name(input: &Path, space: &str) -> String {
    let name = input.file_name().map_or_else(
        || "map.shape.gii".to_string(),
        |n| n.to_string_lossy().into_owned(),
    );
    let (stem, ext) = match name.find('.') {
        Some(i) => (&name[..i], &name[i..]),
        None => (name.as_str(), ""),
    };
    let mut parts: Vec<String> = stem.split('_').map(str::to_string).collect();
    let entity = format!("space-{space}");
    if let Some(p) = parts.iter_mut().find(|p| p.starts_with("space-")) {
        *p = entity;
    } else {
        let at = parts
            .iter()
            .rposition(|p| p.starts_with("sub-") || p.starts_with("ses-") || p.starts_with("hemi-"))
            .map_or(0, |i| i + 1);
        parts.insert(at, entity);
    }
    format!("{}{ext}", parts.join("_"))
}

/// The JSON sidecar path of an output (BIDS-derivatives style): the
/// output's name with everything from the first dot replaced by `.json`
/// (`x_space-icosphere6_thickness.shape.gii` -> `x_space-icosphere6_thickness.json`).
pub fn sidecar_path(output: &Path) -> std::path::PathBuf {
    let name = output.file_name().map_or_else(
        || "output".to_string(),
        |n| n.to_string_lossy().into_owned(),
    );
    let stem = name.split('.').next().unwrap_or("output");
    output.with_file_name(format!("{stem}.json"))
}

/// A subject label for a file: its `sub-<label>` entity (`sub-01`), or the
/// part of the name before the first dot.
pub fn subject_label(path: &Path) -> String {
    let name = path
        .file_name()
        .map_or_else(String::new, |n| n.to_string_lossy().into_owned());
    let stem = name.split('.').next().unwrap_or("").to_string();
    stem.split('_')
        .find(|p| p.starts_with("sub-") && p.len() > 4)
        .map_or(stem.clone(), str::to_string)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names() {
        let p = Path::new("/d/sub-01_hemi-L_thickness.shape.gii");
        assert_eq!(
            output_name(p, "icosphere6"),
            "sub-01_hemi-L_space-icosphere6_thickness.shape.gii"
        );
        assert_eq!(
            output_name(
                Path::new("sub-01_ses-2_hemi-R_space-native_desc-sm_depth.func.gii"),
                "x"
            ),
            "sub-01_ses-2_hemi-R_space-x_desc-sm_depth.func.gii"
        );
        assert_eq!(
            output_name(Path::new("thick.shape.gii"), "x"),
            "space-x_thick.shape.gii"
        );
        assert_eq!(subject_label(p), "sub-01");
        assert_eq!(
            sidecar_path(Path::new("/o/sub-01_space-x_thick.shape.gii")),
            Path::new("/o/sub-01_space-x_thick.json")
        );
        assert_eq!(subject_label(Path::new("alpha.shape.gii")), "alpha");
    }
}
