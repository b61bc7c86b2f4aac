//! Cohort-table commands (`template`, `register-template`) load their
//! subjects one by one: in, the rows of a table and a loader; out, what
//! loaded, in table order, and how many were left out. A subject that fails
//! is reported on stderr (table, line, subject, error) and never stops the
//! others; none loaded is an error naming the table. A run that left some
//! out ends with exit status [`SOME_SUBJECTS_FAILED`].

use horosphere::{Error, Result};
use std::path::Path;
use std::process::ExitCode;

/// Exit status of a cohort-table command when some subjects were left out.
pub const SOME_SUBJECTS_FAILED: u8 = 3;

/// Load every row of the table `table` with `load`; `line_subject` gives a
/// row's line and subject label for the stderr report.
pub fn load_subjects<'a, R, T>(
    table: &Path,
    rows: &'a [R],
    line_subject: impl Fn(&R) -> (usize, &str),
    mut load: impl FnMut(&'a R) -> Result<T>,
) -> Result<(Vec<T>, usize)> {
    let mut loaded = Vec::with_capacity(rows.len());
    let mut failed = 0usize;
    for row in rows {
        match load(row) {
            Ok(s) => loaded.push(s),
            Err(e) => {
                failed += 1;
                let (line, subject) = line_subject(row);
                eprintln!(
                    "horosphere: {} line {line} (subject {subject}): left out: {e}",
                    table.display()
                );
            }
        }
    }
    if loaded.is_empty() {
        return Err(Error::bad_file(
            table,
            "subjects",
            "no subject could be read; no template written",
        ));
    }
    Ok((loaded, failed))
}

/// ` (N left out)` for the summary line, or nothing when none was.
pub fn left_out_note(failed: usize) -> String {
    if failed > 0 {
        format!(" ({failed} left out)")
    } else {
        String::new()
    }
}

/// Success, or [`SOME_SUBJECTS_FAILED`] when subjects were left out.
pub fn exit_code(failed: usize) -> ExitCode {
    if failed > 0 {
        ExitCode::from(SOME_SUBJECTS_FAILED)
    } else {
        ExitCode::SUCCESS
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn failed_subjects_are_left_out_and_counted() {
        let rows: Vec<(usize, String)> = (2..7).map(|l| (l, format!("s{l}"))).collect();
        let load = |r: &(usize, String)| {
            if r.0.is_multiple_of(3) {
                Err(Error::Invalid(format!("{} unreadable", r.1)))
            } else {
                Ok(r.1.clone())
            }
        };
        let t = Path::new("table.csv");
        let (got, failed) = load_subjects(t, &rows, |r| (r.0, r.1.as_str()), load).unwrap();
        assert_eq!(got, ["s2", "s4", "s5"]);
        assert_eq!(failed, 2);
        assert_eq!(left_out_note(failed), " (2 left out)");
        assert_eq!(left_out_note(0), "");
        assert_eq!(exit_code(failed), ExitCode::from(SOME_SUBJECTS_FAILED));
        assert_eq!(exit_code(0), ExitCode::SUCCESS);
        // None loaded: an error naming the table.
        let e = load_subjects(t, &rows[1..2], |r| (r.0, r.1.as_str()), load)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("table.csv") && e.contains("no subject could be read"),
            "{e}"
        );
    }
}
