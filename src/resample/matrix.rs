//! The cohort matrix: one resampled map per subject, all on the same target
//! sphere, stacked for statistics.
//!
//! In: [`CohortColumn`]s (a subject label and one value per target vertex).
//! Out, through [`crate::io::atomic`]:
//! - a GIFTI file with one `NIFTI_INTENT_SHAPE` FLOAT32 array per subject,
//!   in the given order, each array's metadata holding `Subject` (the
//!   label) and `Name`;
//! - a wide CSV, one row per subject: header `subject,v0,v1,...`, then the
//!   subject label and one value per target vertex;
//! - or a long ("tidy") CSV, one row per subject and vertex: header
//!   `subject,vertex,value`.
//!
//! What stays true: every column has the same length; subject labels are
//! unique and non-empty; missing values (NaN) are written as empty CSV
//! fields and stay NaN in GIFTI; numbers are written in the shortest form
//! that reads back to the same 32-bit float, so the output is
//! byte-identical for the same input. Worked example (two subjects, three
//! vertices, one missing value):
//!
//! ```text
//! wide:  subject,v0,v1,v2          long:  subject,vertex,value
//!        sub-01,2.5,2.25,                 sub-01,0,2.5
//!        sub-02,3,2.75,1.5                sub-01,1,2.25
//!                                         sub-01,2,
//!                                         sub-02,0,3   ...
//! ```

use crate::error::{Error, Result};
use crate::io::atomic::write_atomic;
use crate::io::gifti::{self, Data, DataArray, Gifti, Intent, MetaData, WriteOptions};
use std::io::Write;
use std::path::Path;

/// One subject's map on the target vertices.
#[derive(Debug, Clone, PartialEq)]
pub struct CohortColumn {
    /// Subject label (e.g. `sub-01`).
    pub subject: String,
    /// One value per target vertex; NaN = missing.
    pub values: Vec<f32>,
}

fn check(cols: &[CohortColumn]) -> Result<usize> {
    let first = cols
        .first()
        .ok_or_else(|| Error::Invalid("no subjects; expected at least one map".into()))?;
    let n = first.values.len();
    if n == 0 {
        return Err(Error::Invalid(format!(
            "subject '{}' has no values; expected one per target vertex",
            first.subject
        )));
    }
    for (k, c) in cols.iter().enumerate() {
        if c.values.len() != n {
            return Err(Error::Invalid(format!(
                "subject '{}' has {} values; expected {n} like subject '{}' (the same target sphere)",
                c.subject,
                c.values.len(),
                first.subject
            )));
        }
        if c.subject.trim().is_empty() {
            return Err(Error::Invalid(format!(
                "column {k} has an empty subject label; expected a label such as sub-01"
            )));
        }
        if cols[..k].iter().any(|d| d.subject == c.subject) {
            return Err(Error::Invalid(format!(
                "subject '{}' appears twice; expected unique subject labels",
                c.subject
            )));
        }
    }
    Ok(n)
}

/// The cohort as a GIFTI model (see the module doc).
pub fn cohort_gifti(cols: &[CohortColumn]) -> Result<Gifti> {
    let n = check(cols)?;
    let arrays = cols
        .iter()
        .map(|c| {
            let mut meta = MetaData::new();
            meta.set("Name", c.subject.clone());
            meta.set("Subject", c.subject.clone());
            DataArray {
                intent: Intent::Shape,
                dims: vec![n],
                data: Data::F32(c.values.clone()),
                meta,
                transforms: Vec::new(),
            }
        })
        .collect();
    let mut meta = MetaData::new();
    meta.set("Description", "cohort matrix: one data array per subject");
    Ok(Gifti {
        meta,
        arrays,
        ..Gifti::default()
    })
}

/// Write the cohort GIFTI file.
pub fn write_cohort_gifti(path: &Path, cols: &[CohortColumn]) -> Result<()> {
    gifti::write(path, &cohort_gifti(cols)?, &WriteOptions::default())
}

/// Read a cohort GIFTI file back: every float array with its `Subject`
/// label (or `Name`, or `array K`).
pub fn read_cohort_gifti(path: &Path) -> Result<Vec<CohortColumn>> {
    let g = gifti::read(path)?;
    let mut cols = Vec::new();
    for (k, a) in g.arrays.iter().enumerate() {
        if !matches!(a.data, Data::F32(_) | Data::F64(_)) || !a.is_column() {
            continue;
        }
        let subject = a
            .meta
            .get("Subject")
            .or_else(|| a.meta.get("Name"))
            .map_or_else(|| format!("array {k}"), str::to_string);
        let values = a.data.to_f64().iter().map(|&x| x as f32).collect();
        cols.push(CohortColumn { subject, values });
    }
    check(&cols).map_err(|e| e.in_file(path, "DataArray"))?;
    Ok(cols)
}

fn field(x: f32) -> String {
    if x.is_nan() {
        String::new()
    } else {
        format!("{x}")
    }
}

fn csv_err(path: &Path, e: csv::Error) -> Error {
    Error::io(path, std::io::Error::other(e.to_string()))
}

/// Write the wide CSV (one row per subject).
pub fn write_cohort_csv_wide(path: &Path, cols: &[CohortColumn]) -> Result<()> {
    let n = check(cols)?;
    write_atomic(path, |w: &mut dyn Write| {
        let mut c = csv::Writer::from_writer(w);
        let mut header = Vec::with_capacity(n + 1);
        header.push("subject".to_string());
        header.extend((0..n).map(|v| format!("v{v}")));
        c.write_record(&header).map_err(|e| csv_err(path, e))?;
        for col in cols {
            let mut row = Vec::with_capacity(n + 1);
            row.push(col.subject.clone());
            row.extend(col.values.iter().map(|&x| field(x)));
            c.write_record(&row).map_err(|e| csv_err(path, e))?;
        }
        c.flush().map_err(|e| Error::io(path, e))
    })
}

/// Write the long ("tidy") CSV: `subject,vertex,value`.
pub fn write_cohort_csv_long(path: &Path, cols: &[CohortColumn]) -> Result<()> {
    check(cols)?;
    write_atomic(path, |w: &mut dyn Write| {
        let mut c = csv::Writer::from_writer(w);
        c.write_record(["subject", "vertex", "value"])
            .map_err(|e| csv_err(path, e))?;
        for col in cols {
            for (v, &x) in col.values.iter().enumerate() {
                c.write_record([col.subject.as_str(), &v.to_string(), &field(x)])
                    .map_err(|e| csv_err(path, e))?;
            }
        }
        c.flush().map_err(|e| Error::io(path, e))
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cols() -> Vec<CohortColumn> {
        vec![
            CohortColumn {
                subject: "sub-01".into(),
                values: vec![2.5, 2.25, f32::NAN],
            },
            CohortColumn {
                subject: "sub-02".into(),
                values: vec![3.0, 2.75, 1.5],
            },
        ]
    }

    #[test]
    fn writes_the_documented_layouts() {
        let d = std::env::temp_dir().join(format!("horosphere-matrix-{}", std::process::id()));
        std::fs::create_dir_all(&d).unwrap();
        write_cohort_csv_wide(&d.join("w.csv"), &cols()).unwrap();
        assert_eq!(
            std::fs::read_to_string(d.join("w.csv")).unwrap(),
            "subject,v0,v1,v2\nsub-01,2.5,2.25,\nsub-02,3,2.75,1.5\n"
        );
        write_cohort_csv_long(&d.join("l.csv"), &cols()).unwrap();
        let long = std::fs::read_to_string(d.join("l.csv")).unwrap();
        assert!(long.starts_with(
            "subject,vertex,value\nsub-01,0,2.5\nsub-01,1,2.25\nsub-01,2,\nsub-02,0,3\n"
        ));
        assert_eq!(long.lines().count(), 7);
        write_cohort_gifti(&d.join("m.func.gii"), &cols()).unwrap();
        let back = read_cohort_gifti(&d.join("m.func.gii")).unwrap();
        assert_eq!(back.len(), 2);
        assert_eq!(back[1], cols()[1]);
        assert_eq!(back[0].subject, "sub-01");
        assert!(back[0].values[2].is_nan());
        let _ = std::fs::remove_dir_all(&d);
    }

    #[test]
    fn refuses_ragged_or_duplicate_columns() {
        let mut c = cols();
        c[1].values.pop();
        assert!(cohort_gifti(&c)
            .unwrap_err()
            .to_string()
            .contains("expected 3"));
        let mut c = cols();
        c[1].subject = "sub-01".into();
        assert!(cohort_gifti(&c).unwrap_err().to_string().contains("twice"));
        assert!(cohort_gifti(&[]).is_err());
    }
}
