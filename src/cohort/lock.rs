//! The run lock of an output folder: two `horosphere run` processes never
//! write the same output folder at once unless both only compute units.
//!
//! In: the output root and a [`LockMode`]. Out: a [`RunLock`] held until it
//! is dropped, or an error naming the lock file, the process that holds it
//! and what to do. The lock is an advisory operating-system file lock
//! (`flock` on Unix, `LockFileEx` on Windows, through `std::fs::File::try_lock`)
//! on `<output>/.horosphere-run.lock`; the file records the holder's process
//! id for the message.
//!
//! What stays true:
//! - a whole run, a `--cohort-only` run and an unrestricted `--units-only`
//!   run take the lock exclusively; a `--units-only --only ...` run (one job
//!   per unit of a workflow engine, `pipelines/Snakefile`) takes it shared, so
//!   such jobs run side by side but never beside a whole run. Two jobs on the
//!   same unit write the same bytes (every unit is deterministic and every
//!   file is written atomically), so they cannot corrupt each other.
//! - a lock never outlives its process: the operating system releases it
//!   when the process ends, also on SIGKILL, so a stale lock file (left by a
//!   killed run) is detected by simply locking it again. No process-id
//!   guessing is needed, and it also works when the pid was reused.
//! - the holder removes the file when it is done (while still holding the
//!   lock), so a finished run leaves no trace; a process that opened the file
//!   just before it was removed notices (the path no longer names the file it
//!   locked) and tries again.

use crate::error::{Error, Result};
use std::fs::{File, OpenOptions, TryLockError};
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

/// Name of the lock file inside the output root.
pub const LOCK_FILE: &str = ".horosphere-run.lock";

/// How a run holds the lock.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LockMode {
    /// Alone: nobody else may run in the folder.
    Exclusive,
    /// Beside other shared holders (unit jobs of a workflow engine).
    Shared,
}

/// A held run lock; released (and the file removed) on drop.
#[derive(Debug)]
pub struct RunLock {
    file: Option<File>,
    path: PathBuf,
    mode: LockMode,
}

fn holder_text(file: &mut File) -> String {
    let mut s = String::new();
    let _ = file.seek(SeekFrom::Start(0));
    let _ = file.take(256).read_to_string(&mut s);
    let s = s.trim();
    if s.is_empty() {
        "another horosphere run".to_string()
    } else {
        s.to_string()
    }
}

#[cfg(unix)]
fn same_file(a: &File, path: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (a.metadata(), std::fs::metadata(path)) {
        (Ok(x), Ok(y)) => x.dev() == y.dev() && x.ino() == y.ino(),
        _ => false,
    }
}

#[cfg(not(unix))]
fn same_file(_a: &File, path: &Path) -> bool {
    path.exists()
}

impl RunLock {
    /// Take the lock of `output` (created if missing) in `mode`, or fail at
    /// once with a message naming the lock file and the holder.
    pub fn acquire(output: &Path, mode: LockMode) -> Result<RunLock> {
        std::fs::create_dir_all(output).map_err(|e| Error::io(output, e))?;
        let path = output.join(LOCK_FILE);
        // A few rounds cover the race with a holder removing the file.
        for _ in 0..8 {
            let mut file = OpenOptions::new()
                .read(true)
                .write(true)
                .create(true)
                .truncate(false)
                .open(&path)
                .map_err(|e| Error::io(&path, e))?;
            let r = match mode {
                LockMode::Exclusive => file.try_lock(),
                LockMode::Shared => file.try_lock_shared(),
            };
            match r {
                Ok(()) => {}
                Err(TryLockError::WouldBlock) => {
                    let holder = holder_text(&mut file);
                    return Err(Error::Invalid(format!(
                        "{}: the output folder is in use by {holder}; expected no other `horosphere run` writing to {} (wait for it to finish; a lock left by a killed run is taken over automatically)",
                        path.display(),
                        output.display()
                    )));
                }
                Err(TryLockError::Error(e)) => return Err(Error::io(&path, e)),
            }
            if !same_file(&file, &path) {
                // The previous holder removed the file after we opened it.
                continue;
            }
            if mode == LockMode::Exclusive {
                let text = format!("horosphere run (process {})\n", std::process::id());
                let _ = file.set_len(0);
                let _ = file.write_all(text.as_bytes());
            } else if file.metadata().map(|m| m.len() == 0).unwrap_or(false) {
                let text = format!(
                    "horosphere unit jobs (process {} and others)\n",
                    std::process::id()
                );
                let _ = file.write_all(text.as_bytes());
            }
            return Ok(RunLock {
                file: Some(file),
                path,
                mode,
            });
        }
        Err(Error::Invalid(format!(
            "{}: could not take the run lock (the file kept changing); expected one `horosphere run` at a time in {}",
            path.display(),
            output.display()
        )))
    }

    /// The lock file.
    pub fn path(&self) -> &Path {
        &self.path
    }
}

impl Drop for RunLock {
    fn drop(&mut self) {
        if let Some(file) = self.file.take() {
            // Remove the file while holding the lock; a shared holder removes
            // it only when it can upgrade to exclusive (it is the last one).
            let last = match self.mode {
                LockMode::Exclusive => true,
                LockMode::Shared => {
                    let _ = file.unlock();
                    file.try_lock().is_ok()
                }
            };
            if last && same_file(&file, &self.path) {
                let _ = std::fs::remove_file(&self.path);
            }
            let _ = file.unlock();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exclusive_refuses_a_second_holder_and_shared_holders_coexist() {
        let dir = std::env::temp_dir().join(format!("horosphere-lock-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        let a = RunLock::acquire(&dir, LockMode::Exclusive).unwrap();
        let e = RunLock::acquire(&dir, LockMode::Exclusive)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains(LOCK_FILE) && e.contains("in use by horosphere run (process"),
            "{e}"
        );
        assert!(RunLock::acquire(&dir, LockMode::Shared).is_err());
        drop(a);
        assert!(!dir.join(LOCK_FILE).exists(), "lock file left behind");
        let s1 = RunLock::acquire(&dir, LockMode::Shared).unwrap();
        let s2 = RunLock::acquire(&dir, LockMode::Shared).unwrap();
        assert!(RunLock::acquire(&dir, LockMode::Exclusive).is_err());
        drop(s1);
        assert!(
            dir.join(LOCK_FILE).exists(),
            "removed while shared holder remains"
        );
        drop(s2);
        assert!(!dir.join(LOCK_FILE).exists());
        // A left-over file that nobody holds (a killed run) is taken over.
        std::fs::write(dir.join(LOCK_FILE), "horosphere run (process 999999)\n").unwrap();
        let c = RunLock::acquire(&dir, LockMode::Exclusive).unwrap();
        drop(c);
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
