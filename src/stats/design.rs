//! The design matrix of a linear model, built from a participants table.
//!
//! In: a BIDS `participants.tsv` (tab-separated, header row, first column
//! `participant_id`), a [`Formula`] and the unit labels of the cohort matrix
//! (e.g. `sub-kf01_hemi-L`; a unit matches the participant whose
//! `participant_id` equals the label or the label's part before the first
//! `_`). Out: a [`Design`]: one row per unit, named columns.
//!
//! Coding (documented choice): a column whose every value parses as a
//! number is numeric and enters as is; any other column is categorical and
//! enters with treatment (dummy) coding against a reference level, the
//! first level in sorted (byte-wise) order, one 0/1 column per other level
//! named `term[T.level]`. With no intercept, the first categorical term
//! gets a column for every level (`term[level]`) so that the model spans
//! the same space. The intercept column is named `Intercept`.
//!
//! What stays true: a unit without a participants row, a formula naming a
//! column the table lacks, or an empty value (`n/a` or blank) in a used
//! column is an error naming the file, the row or column and what was
//! expected.

use super::formula::Formula;
use crate::error::{Error, Result};
use std::path::Path;

/// A participants table: header and rows of text cells.
#[derive(Debug, Clone, PartialEq)]
pub struct Participants {
    /// Column names, the first being `participant_id`.
    pub header: Vec<String>,
    /// One row per participant (same length as `header`).
    pub rows: Vec<Vec<String>>,
}

/// Read a tab-separated participants table.
pub fn read_participants(path: &Path) -> Result<Participants> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    parse_participants(path, &text)
}

/// Parse participants-table text held in memory, as [`read_participants`]
/// does for a file (`path` names the table in errors). Used by the fuzz targets.
pub fn parse_participants(path: &Path, text: &str) -> Result<Participants> {
    let mut lines = text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty());
    let (_, head) = lines.next().ok_or_else(|| {
        Error::bad_file(path, "header", "the table is empty; expected a header row")
    })?;
    let header: Vec<String> = head.split('\t').map(|s| s.trim().to_string()).collect();
    if header.first().map(String::as_str) != Some("participant_id") {
        return Err(Error::bad_file(
            path,
            "header",
            format!(
                "first column is '{}'; expected 'participant_id' (tab-separated)",
                header.first().cloned().unwrap_or_default()
            ),
        ));
    }
    let mut rows = Vec::new();
    for (k, l) in lines {
        let row: Vec<String> = l.split('\t').map(|s| s.trim().to_string()).collect();
        if row.len() != header.len() {
            return Err(Error::bad_file(
                path,
                format!("line {}", k + 1),
                format!(
                    "{} fields; expected {} like the header",
                    row.len(),
                    header.len()
                ),
            ));
        }
        rows.push(row);
    }
    Ok(Participants { header, rows })
}

/// A design matrix with named columns, stored row-major.
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    /// Column names (`Intercept`, `age`, `group[T.patient]`, ...).
    pub names: Vec<String>,
    /// `rows x names.len()` values, row-major.
    pub x: Vec<f64>,
    /// Number of rows (units).
    pub rows: usize,
    /// For each categorical term: the term, its sorted levels and the level of each row.
    pub factors: Vec<(String, Vec<String>, Vec<usize>)>,
}

impl Design {
    /// Number of columns.
    pub fn cols(&self) -> usize {
        self.names.len()
    }
    /// Value at row `i`, column `j` (0 when out of range).
    pub fn at(&self, i: usize, j: usize) -> f64 {
        self.x.get(i * self.cols() + j).copied().unwrap_or(0.0)
    }
}

/// The participant id a unit label stands for, if any row matches.
fn match_row<'a>(p: &'a Participants, unit: &str) -> Option<&'a Vec<String>> {
    let base = unit.split('_').next().unwrap_or(unit);
    p.rows
        .iter()
        .find(|r| r.first().map(String::as_str) == Some(unit))
        .or_else(|| {
            p.rows
                .iter()
                .find(|r| r.first().map(String::as_str) == Some(base))
        })
}

fn is_missing(s: &str) -> bool {
    s.is_empty() || s.eq_ignore_ascii_case("n/a") || s.eq_ignore_ascii_case("na")
}

/// Build the design for `units` (see the module documentation); `path`
/// names the participants file in errors.
pub fn build(path: &Path, p: &Participants, f: &Formula, units: &[String]) -> Result<Design> {
    let mut rows: Vec<&Vec<String>> = Vec::with_capacity(units.len());
    let missing: Vec<&String> = units.iter().filter(|u| match_row(p, u).is_none()).collect();
    if !missing.is_empty() {
        return Err(Error::bad_file(
            path,
            "participant_id",
            format!(
                "no row for {} unit(s) of the matrix ({}); expected a row per subject",
                missing.len(),
                missing
                    .iter()
                    .take(5)
                    .map(|s| s.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        ));
    }
    for u in units {
        if let Some(r) = match_row(p, u) {
            rows.push(r);
        }
    }
    let n = rows.len();
    let mut names = Vec::new();
    let mut cols: Vec<Vec<f64>> = Vec::new();
    let mut factors = Vec::new();
    if f.intercept {
        names.push("Intercept".to_string());
        cols.push(vec![1.0; n]);
    }
    let mut full_dummy_done = f.intercept;
    for term in &f.terms {
        let j = p.header.iter().position(|h| h == term).ok_or_else(|| {
            Error::bad_file(
                path,
                "header",
                format!(
                    "no column '{term}' named in the formula; the table has: {}",
                    p.header.join(", ")
                ),
            )
        })?;
        let cells: Vec<&str> = rows
            .iter()
            .map(|r| r.get(j).map_or("", String::as_str))
            .collect();
        if let Some((i, _)) = cells.iter().enumerate().find(|(_, c)| is_missing(c)) {
            return Err(Error::bad_file(
                path,
                format!("column '{term}'"),
                format!(
                    "no value for unit '{}'; expected a value for every subject in the model",
                    units.get(i).map_or("", String::as_str)
                ),
            ));
        }
        let nums: Option<Vec<f64>> = cells
            .iter()
            .map(|c| c.parse::<f64>().ok().filter(|v| v.is_finite()))
            .collect();
        if let Some(v) = nums {
            names.push(term.clone());
            cols.push(v);
            continue;
        }
        let mut levels: Vec<String> = cells.iter().map(|c| c.to_string()).collect();
        levels.sort();
        levels.dedup();
        let idx: Vec<usize> = cells
            .iter()
            .map(|c| levels.iter().position(|l| l == c).unwrap_or(0))
            .collect();
        let start = if full_dummy_done { 1 } else { 0 };
        for (li, l) in levels.iter().enumerate().skip(start) {
            names.push(if full_dummy_done {
                format!("{term}[T.{l}]")
            } else {
                format!("{term}[{l}]")
            });
            cols.push(idx.iter().map(|&k| f64::from(u8::from(k == li))).collect());
        }
        full_dummy_done = true;
        factors.push((term.clone(), levels, idx));
    }
    let p_cols = names.len();
    let mut x = vec![0.0; n * p_cols];
    for (j, c) in cols.iter().enumerate() {
        for (i, v) in c.iter().enumerate() {
            if let Some(slot) = x.get_mut(i * p_cols + j) {
                *slot = *v;
            }
        }
    }
    Ok(Design {
        names,
        x,
        rows: n,
        factors,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::formula::parse;

    fn table() -> Participants {
        let t = "participant_id\tgroup\tage\tsex\nsub-a\tpatient\t60\tF\nsub-b\tcontrol\t70\tM\nsub-c\tpatient\t65\tM\n";
        let dir = std::env::temp_dir().join(format!("hs-design-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let p = dir.join("participants.tsv");
        std::fs::write(&p, t).unwrap();
        read_participants(&p).unwrap()
    }

    #[test]
    fn treatment_coding_with_sorted_reference() {
        let p = table();
        let units: Vec<String> = ["sub-a_hemi-L", "sub-b_hemi-L", "sub-c_hemi-L"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let d = build(
            Path::new("p.tsv"),
            &p,
            &parse("y ~ group + age + sex").unwrap(),
            &units,
        )
        .unwrap();
        assert_eq!(
            d.names,
            vec!["Intercept", "group[T.patient]", "age", "sex[T.M]"]
        );
        assert_eq!(&d.x[..4], &[1.0, 1.0, 60.0, 0.0]);
        assert_eq!(&d.x[4..8], &[1.0, 0.0, 70.0, 1.0]);
        let e = build(
            Path::new("p.tsv"),
            &p,
            &parse("y ~ 0 + group").unwrap(),
            &units,
        )
        .unwrap();
        assert_eq!(e.names, vec!["group[control]", "group[patient]"]);
        assert!(build(
            Path::new("p.tsv"),
            &p,
            &parse("y ~ weight").unwrap(),
            &units
        )
        .is_err());
        let more = vec!["sub-z_hemi-L".to_string()];
        let err = build(Path::new("p.tsv"), &p, &parse("y ~ age").unwrap(), &more).unwrap_err();
        assert!(err.to_string().contains("sub-z_hemi-L"));
    }
}
