//! Provenance sidecars: for every output file, a JSON file beside it that
//! records the tool and version, the stage, the SHA-256 of each input file,
//! the stage options and the SHA-256 of the output itself.
//!
//! In: input files, options (any serialisable value), the output's bytes.
//! Out: [`Sidecar`]s written atomically. What stays true: a sidecar holds
//! no time stamps, host names or absolute paths (input paths are relative
//! to the study root, outputs to the output root), so the same inputs and
//! options give byte-identical sidecars on any machine; SHA-256 is the
//! function of FIPS 180-4 ("Secure Hash Standard", NIST, 2015), checked in
//! the tests against its published test vector.

use crate::error::{Error, Result};
use crate::io::atomic::write_bytes;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::{Path, PathBuf};

/// Name and version of the tool that made an output.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GeneratedBy {
    #[serde(rename = "Name")]
    pub name: String,
    #[serde(rename = "Version")]
    pub version: String,
}

impl GeneratedBy {
    /// This build of horosphere.
    pub fn this() -> Self {
        GeneratedBy {
            name: "horosphere".into(),
            version: env!("CARGO_PKG_VERSION").into(),
        }
    }
}

/// A file and its SHA-256 (lower-case hex).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct FileHash {
    pub path: String,
    pub sha256: String,
}

/// The provenance sidecar of one output.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Sidecar {
    #[serde(rename = "GeneratedBy")]
    pub generated_by: GeneratedBy,
    /// The stage that wrote the output.
    pub stage: String,
    /// The input files, relative to the study root (or the output root
    /// for the cohort files, whose inputs are outputs of the units).
    pub inputs: Vec<FileHash>,
    /// The options of the stages the output depends on.
    pub options: serde_json::Value,
    /// The output, relative to the output root, and its hash.
    pub output: FileHash,
}

/// Lower-case hex of bytes.
pub fn hex(bytes: &[u8]) -> String {
    const DIGITS: &[u8; 16] = b"0123456789abcdef";
    let mut s = String::with_capacity(bytes.len() * 2);
    for b in bytes {
        s.push(char::from(DIGITS[usize::from(b >> 4)]));
        s.push(char::from(DIGITS[usize::from(b & 15)]));
    }
    s
}

/// SHA-256 of bytes, hex.
pub fn sha256_bytes(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// SHA-256 of a file, hex (read in 1 MiB blocks).
pub fn sha256_file(path: &Path) -> Result<String> {
    let mut f = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    loop {
        match f.read(&mut buf) {
            Ok(0) => break,
            Ok(n) => h.update(buf.get(..n).unwrap_or(&[])),
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(Error::io(path, e)),
        }
    }
    Ok(hex(&h.finalize()))
}

/// `path` relative to `base` with `/` separators (the path itself, with
/// `/` separators, when it is not under `base`).
pub fn relative(path: &Path, base: &Path) -> String {
    let rel = path.strip_prefix(base).unwrap_or(path);
    rel.components()
        .map(|c| c.as_os_str().to_string_lossy().into_owned())
        .collect::<Vec<_>>()
        .join("/")
}

/// The sidecar path of an output: its name with the (multi-part)
/// extension replaced by `.json`, BIDS style
/// (`x_sphere.surf.gii` -> `x_sphere.json`).
pub fn sidecar_path(output: &Path) -> PathBuf {
    let name = output
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let stem = name.split('.').next().unwrap_or("");
    output.with_file_name(format!("{stem}.json"))
}

/// Pretty JSON with a final newline (the form of every JSON file we write).
pub fn json_bytes<T: Serialize>(value: &T) -> Result<Vec<u8>> {
    let mut v = serde_json::to_vec_pretty(value)
        .map_err(|e| Error::Invalid(format!("JSON encoding: {e}")))?;
    v.push(b'\n');
    Ok(v)
}

/// Write `sidecar` beside its output (atomically).
pub fn write_sidecar(output: &Path, sidecar: &Sidecar) -> Result<()> {
    write_bytes(&sidecar_path(output), &json_bytes(sidecar)?)
}

/// Read a sidecar; `None` when it is missing or not a sidecar.
pub fn read_sidecar(output: &Path) -> Option<Sidecar> {
    let bytes = std::fs::read(sidecar_path(output)).ok()?;
    serde_json::from_slice(&bytes).ok()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_matches_the_published_test_vector() {
        // FIPS 180-4 / NIST example "abc" (published value).
        assert_eq!(
            sha256_bytes(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        // Empty message (published value).
        assert_eq!(
            sha256_bytes(b""),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
    }

    #[test]
    fn sidecar_names_and_relative_paths() {
        assert_eq!(
            sidecar_path(Path::new("/o/sub-a/sub-a_hemi-L_sphere.surf.gii")),
            Path::new("/o/sub-a/sub-a_hemi-L_sphere.json")
        );
        assert_eq!(
            relative(Path::new("/r/sub-a/x.gii"), Path::new("/r")),
            "sub-a/x.gii"
        );
        assert_eq!(hex(&[0, 15, 255]), "000fff");
    }
}
