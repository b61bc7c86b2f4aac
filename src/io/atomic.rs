//! Atomic file writes: write to a temporary file in the destination folder,
//! flush and sync it, then rename it over the destination. A failure at any
//! point removes the temporary file, so a destination is either the old file,
//! the complete new file, or absent; never half-written.

use crate::error::{Error, Result};
use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

static COUNTER: AtomicU64 = AtomicU64::new(0);

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
