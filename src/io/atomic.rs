//! Atomic file writes: write to a temporary file in the destination folder,
//! flush and sync it, then rename it over the destination. A failure at any
//! point removes the temporary file, so a destination is either the old file,
//! the complete new file, or absent; never half-written.
//!
//! Testing hook (fault injection, `tests/faults.rs`): when the environment
//! variable `HOROSPHERE_FAULT_WRITE_AFTER=N` is set, the first `N` writes of
//! the process succeed and every later one fails after its bytes went to the
//! temporary file, with an I/O error of kind `StorageFull` (as on a full
//! disk). It exists to prove that a failed write leaves no truncated or
//! stale file; it is never set in normal use and costs one atomic counter.

use crate::error::{Error, Result};
use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// Writes completed so far in this process (for the fault-injection hook).
static WRITES: AtomicU64 = AtomicU64::new(0);

/// Name of the fault-injection environment variable (see the module documentation).
pub const FAULT_WRITE_AFTER: &str = "HOROSPHERE_FAULT_WRITE_AFTER";

/// The hook's limit, read once per process.
fn fault_limit() -> Option<u64> {
    static LIMIT: std::sync::OnceLock<Option<u64>> = std::sync::OnceLock::new();
    *LIMIT.get_or_init(|| {
        std::env::var(FAULT_WRITE_AFTER)
            .ok()
            .and_then(|v| v.trim().parse().ok())
    })
}

/// An injected disk-full error when the hook's limit is reached.
fn injected_fault(tmp: &Path) -> Result<()> {
    if let Some(limit) = fault_limit() {
        if WRITES.fetch_add(1, Ordering::SeqCst) >= limit {
            return Err(Error::io(
                tmp,
                std::io::Error::new(
                    std::io::ErrorKind::StorageFull,
                    format!("injected write failure ({FAULT_WRITE_AFTER}={limit})"),
                ),
            ));
        }
    }
    Ok(())
}

/// Temporary path beside `dest`, unique within this process and across processes.
fn temp_path(dest: &Path) -> PathBuf {
    let name = dest
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "out".into());
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    dest.with_file_name(format!(".{name}.{}-{n}.tmp", std::process::id()))
}

/// Write `dest` atomically with the bytes that `fill` writes. The parent
/// folder is created if missing.
pub fn write_atomic<F>(dest: &Path, fill: F) -> Result<()>
where
    F: FnOnce(&mut dyn Write) -> Result<()>,
{
    if let Some(parent) = dest.parent() {
        if !parent.as_os_str().is_empty() {
            fs::create_dir_all(parent).map_err(|e| Error::io(parent, e))?;
        }
    }
    let tmp = temp_path(dest);
    let result = (|| {
        let file = File::create(&tmp).map_err(|e| Error::io(&tmp, e))?;
        let mut w = BufWriter::with_capacity(1 << 20, file);
        fill(&mut w)?;
        w.flush().map_err(|e| Error::io(&tmp, e))?;
        injected_fault(&tmp)?;
        let file = w
            .into_inner()
            .map_err(|e| Error::io(&tmp, e.into_error()))?;
        file.sync_all().map_err(|e| Error::io(&tmp, e))?;
        fs::rename(&tmp, dest).map_err(|e| Error::io(dest, e))
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result
}

/// Write `bytes` to `dest` atomically.
pub fn write_bytes(dest: &Path, bytes: &[u8]) -> Result<()> {
    write_atomic(dest, |w| w.write_all(bytes).map_err(|e| Error::io(dest, e)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn failed_write_leaves_nothing() {
        let dir = std::env::temp_dir().join(format!("horosphere-atomic-{}", std::process::id()));
        fs::create_dir_all(&dir).unwrap();
        let dest = dir.join("a.txt");
        write_bytes(&dest, b"old").unwrap();
        let r = write_atomic(&dest, |w| {
            w.write_all(b"partial").unwrap();
            Err(Error::Invalid("boom".into()))
        });
        assert!(r.is_err());
        assert_eq!(fs::read(&dest).unwrap(), b"old");
        let leftovers: Vec<_> = fs::read_dir(&dir)
            .unwrap()
            .filter(|e| {
                e.as_ref()
                    .unwrap()
                    .file_name()
                    .to_string_lossy()
                    .ends_with(".tmp")
            })
            .collect();
        assert!(leftovers.is_empty());
        fs::remove_dir_all(&dir).unwrap();
    }
}
