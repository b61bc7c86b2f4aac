//! Surface and table I/O.
//!
//! In: paths. Out: [`TriMesh`]es, per-vertex data and tables, or files.
//! Invariants: a reader either returns validated data or an
//! [`Error::BadFile`] naming the file, the
//! element and what was expected; a writer never leaves a half-written file
//! (everything goes through [`atomic::write_atomic`]: temporary file in the
//! destination folder, then rename).
//!
//! Formats: GIFTI ("GIFTI Surface Data Format Version 1.0", NIfTI Data Format
//! Working Group, 2011), OBJ (Wavefront Technologies, "Object Files (.obj)",
//! Appendix B1 of the Advanced Visualizer manual), PLY (Turk, "The PLY polygon
//! file format", 1994) and OFF (the OFF format of Geomview: Phillips, Levy,
//! Munzner, "Geomview: an interactive geometry viewer", Notices AMS 40,
//! 1993). [`read_mesh`] and [`write_mesh`] dispatch on the file name's
//! extension and, for reading, on magic bytes.
//!
//! Polygons with more than three corners (OBJ, PLY, OFF) are split into
//! triangles by a fan from their first corner: `(v0, v1, ..., vk)` becomes
//! `(v0, v1, v2), (v0, v2, v3), ..., (v0, v(k-1), vk)`. This is exact for
//! convex planar polygons and keeps their orientation; cortical meshes are
//! triangle meshes, so the rule only matters for hand-made test files.

pub mod atomic;
pub mod gifti;
pub mod obj;
pub mod off;
pub mod ply;

use crate::error::{Error, Result};
use crate::mesh::TriMesh;
use std::path::Path;

/// The mesh file formats horosphere reads and writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MeshFormat {
    /// GIFTI surface (`.surf.gii`, `.gii`).
    Gifti,
    /// Wavefront OBJ (`.obj`).
    Obj,
    /// Stanford PLY (`.ply`), ASCII or binary.
    Ply,
    /// Object File Format (`.off`).
    Off,
}

impl MeshFormat {
    /// The format named by the file name's extension (case-insensitive):
    /// `.surf.gii` and `.gii` are GIFTI, `.obj`, `.ply`, `.off` the others.
    pub fn from_extension(path: &Path) -> Option<MeshFormat> {
        let name = path.file_name()?.to_string_lossy().to_ascii_lowercase();
        if name.ends_with(".gii") {
            Some(MeshFormat::Gifti)
        } else if name.ends_with(".obj") {
            Some(MeshFormat::Obj)
        } else if name.ends_with(".ply") {
            Some(MeshFormat::Ply)
        } else if name.ends_with(".off") {
            Some(MeshFormat::Off)
        } else {
            None
        }
    }

    /// The format announced by the first bytes of a file: `<?xml`,
    /// `<!DOCTYPE GIFTI` or `<GIFTI` (after an optional byte-order mark and
    /// white space) for
    /// GIFTI, a first line `ply` for PLY, a first token ending in `OFF` for
    /// OFF. OBJ has no magic bytes.
    pub fn from_magic(head: &[u8]) -> Option<MeshFormat> {
        let head = head.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(head);
        let start = head
            .iter()
            .position(|b| !b.is_ascii_whitespace())
            .unwrap_or(head.len());
        let body = &head[start..];
        if body.starts_with(b"<?xml")
            || body.starts_with(b"<GIFTI")
            || body.starts_with(b"<!DOCTYPE GIFTI")
        {
            return Some(MeshFormat::Gifti);
        }
        if head.starts_with(b"ply\n") || head.starts_with(b"ply\r\n") {
            return Some(MeshFormat::Ply);
        }
        let token_end = body
            .iter()
            .position(|b| b.is_ascii_whitespace())
            .unwrap_or(body.len());
        let token = &body[..token_end];
        if token.ends_with(b"OFF") && off::is_off_keyword(token) {
            return Some(MeshFormat::Off);
        }
        None
    }

    /// Lower-case name of the format, as used in messages.
    pub fn name(self) -> &'static str {
        match self {
            MeshFormat::Gifti => "GIFTI",
            MeshFormat::Obj => "OBJ",
            MeshFormat::Ply => "PLY",
            MeshFormat::Off => "OFF",
        }
    }
}

/// The format to read `path` with: its magic bytes when they name a format,
/// otherwise its extension. A file that is neither is refused.
pub fn detect_format(path: &Path) -> Result<MeshFormat> {
    use std::io::Read;
    let mut head = [0u8; 64];
    let mut file = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    let mut n = 0;
    while n < head.len() {
        match file.read(&mut head[n..]) {
            Ok(0) => break,
            Ok(k) => n += k,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(Error::io(path, e)),
        }
    }
    MeshFormat::from_magic(&head[..n])
        .or_else(|| MeshFormat::from_extension(path))
        .ok_or_else(|| {
            Error::bad_file(
                path,
                "header",
                "not a recognised mesh file: expected GIFTI (.surf.gii, .gii), OBJ (.obj), PLY (.ply) or OFF (.off)",
            )
        })
}

/// Read a triangle mesh in any supported format (see [`detect_format`]).
pub fn read_mesh(path: &Path) -> Result<TriMesh> {
    match detect_format(path)? {
        MeshFormat::Gifti => gifti::read_mesh(path),
        MeshFormat::Obj => obj::read_mesh(path),
        MeshFormat::Ply => ply::read_mesh(path),
        MeshFormat::Off => off::read_mesh(path),
    }
}

/// Write a triangle mesh atomically in the format named by the extension of
/// `path` (PLY is written binary little-endian).
pub fn write_mesh(path: &Path, mesh: &TriMesh) -> Result<()> {
    let format = MeshFormat::from_extension(path).ok_or_else(|| {
        Error::Invalid(format!(
            "{}: cannot tell the mesh format from the file name; expected an extension .surf.gii, .gii, .obj, .ply or .off",
            path.display()
        ))
    })?;
    match format {
        MeshFormat::Gifti => gifti::write_mesh(path, mesh),
        MeshFormat::Obj => obj::write_mesh(path, mesh),
        MeshFormat::Ply => ply::write_mesh(path, mesh),
        MeshFormat::Off => off::write_mesh(path, mesh),
    }
}

/// Read a whole file into memory (mesh files are tens of megabytes at most;
/// memory is bounded by the file size).
pub(crate) fn read_bytes(path: &Path) -> Result<Vec<u8>> {
    std::fs::read(path).map_err(|e| Error::io(path, e))
}

/// Lines of a text file with their 1-based numbers; `\n` or `\r\n` endings.
pub(crate) struct Lines<'a> {
    rest: &'a [u8],
    number: usize,
}

impl<'a> Lines<'a> {
    pub(crate) fn new(bytes: &'a [u8]) -> Self {
        Lines {
            rest: bytes,
            number: 0,
        }
    }
}

impl<'a> Iterator for Lines<'a> {
    type Item = (usize, &'a [u8]);

    fn next(&mut self) -> Option<Self::Item> {
        if self.rest.is_empty() {
            return None;
        }
        let (line, rest) = match self.rest.iter().position(|&b| b == b'\n') {
            Some(i) => (&self.rest[..i], &self.rest[i + 1..]),
            None => (self.rest, &self.rest[self.rest.len()..]),
        };
        self.rest = rest;
        self.number += 1;
        let line = line.strip_suffix(b"\r").unwrap_or(line);
        Some((self.number, line))
    }
}

/// A line as text, or an error naming it.
pub(crate) fn line_text<'a>(path: &Path, number: usize, line: &'a [u8]) -> Result<&'a str> {
    std::str::from_utf8(line).map_err(|_| {
        Error::bad_file(
            path,
            format!("line {number}"),
            "not text: expected ASCII (UTF-8) characters",
        )
    })
}

/// Parse a coordinate token; the error names `element` and the token.
pub(crate) fn parse_coordinate(path: &Path, element: &str, token: &str) -> Result<f64> {
    match token.parse::<f64>() {
        Ok(x) if x.is_finite() => Ok(x),
        Ok(_) => Err(Error::bad_file(
            path,
            element,
            format!("coordinate `{token}` is not finite; expected a finite number of millimetres"),
        )),
        Err(_) => Err(Error::bad_file(
            path,
            element,
            format!("`{token}` is not a number; expected a coordinate"),
        )),
    }
}

/// Split a polygon into a triangle fan from its first corner (see the module
/// documentation), appending to `faces`.
pub(crate) fn push_fan(faces: &mut Vec<[u32; 3]>, polygon: &[u32]) {
    if let Some((&first, rest)) = polygon.split_first() {
        for pair in rest.windows(2) {
            faces.push([first, pair[0], pair[1]]);
        }
    }
}

/// Format a coordinate so that it reads back to the same `f64` bit for bit
/// (Rust's shortest round-trip representation).
pub(crate) fn fmt_coordinate(x: f64) -> String {
    format!("{x:?}")
}

/// Write one text line `{prefix}x y z` per vertex, coordinates formatted by
/// [`fmt_coordinate`] (shared by the OBJ, OFF and ASCII PLY writers).
pub(crate) fn write_vertex_lines(
    w: &mut dyn std::io::Write,
    mesh: &TriMesh,
    prefix: &str,
) -> std::io::Result<()> {
    for p in &mesh.positions {
        writeln!(
            w,
            "{prefix}{} {} {}",
            fmt_coordinate(p[0]),
            fmt_coordinate(p[1]),
            fmt_coordinate(p[2])
        )?;
    }
    Ok(())
}

/// Write one text line `{prefix}a b c` per triangle, the corner indices
/// offset by `base` (1 for OBJ, 0 for OFF and ASCII PLY).
pub(crate) fn write_triangle_lines(
    w: &mut dyn std::io::Write,
    mesh: &TriMesh,
    prefix: &str,
    base: u64,
) -> std::io::Result<()> {
    for t in &mesh.faces {
        writeln!(
            w,
            "{prefix}{} {} {}",
            u64::from(t[0]) + base,
            u64::from(t[1]) + base,
            u64::from(t[2]) + base
        )?;
    }
    Ok(())
}

/// Validate `mesh`, then write it to `path` atomically with `write_to`
/// (the shared tail of the text-format writers); I/O errors name `path`.
pub(crate) fn write_validated(
    path: &Path,
    mesh: &TriMesh,
    write_to: impl FnOnce(&mut dyn std::io::Write, &TriMesh) -> std::io::Result<()>,
) -> Result<()> {
    mesh.validate()?;
    atomic::write_atomic(path, |w| write_to(w, mesh).map_err(|e| Error::io(path, e)))
}

/// Checks shared by the unit tests of the text and binary mesh readers.
#[cfg(test)]
pub(crate) mod test_support {
    use crate::error::{Error, Result};
    use crate::mesh::TriMesh;
    use std::path::Path;

    /// The message of the [`Error::BadFile`] a reader gave; fails on a
    /// success or on any other kind of error.
    pub fn bad_file_message<T: std::fmt::Debug>(r: Result<T>) -> String {
        let e = r.unwrap_err();
        assert!(matches!(e, Error::BadFile { .. }), "{e}");
        e.to_string()
    }

    /// Write every mesh with `write` to `file` in a scratch folder named
    /// after `tag`, read it back with `read`: the same mesh, to the bit.
    pub fn assert_round_trip(
        tag: &str,
        file: &str,
        meshes: &[TriMesh],
        write: impl Fn(&Path, &TriMesh) -> Result<()>,
        read: impl Fn(&Path) -> Result<TriMesh>,
    ) {
        let dir = std::env::temp_dir().join(format!("horosphere-{tag}-{}", std::process::id()));
        let file = dir.join(file);
        for m in meshes {
            write(&file, m).unwrap();
            assert_eq!(&read(&file).unwrap(), m, "{tag}");
        }
        std::fs::remove_dir_all(&dir).unwrap();
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::shapes::icosphere;

    fn temp_dir(tag: &str) -> std::path::PathBuf {
        let d = std::env::temp_dir().join(format!("horosphere-io-{tag}-{}", std::process::id()));
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    #[test]
    fn extension_and_magic() {
        assert_eq!(
            MeshFormat::from_extension(Path::new("a/b.surf.gii")),
            Some(MeshFormat::Gifti)
        );
        assert_eq!(
            MeshFormat::from_extension(Path::new("x.OBJ")),
            Some(MeshFormat::Obj)
        );
        assert_eq!(
            MeshFormat::from_extension(Path::new("x.ply")),
            Some(MeshFormat::Ply)
        );
        assert_eq!(
            MeshFormat::from_extension(Path::new("x.off")),
            Some(MeshFormat::Off)
        );
        assert_eq!(MeshFormat::from_extension(Path::new("x.stl")), None);
        assert_eq!(
            MeshFormat::from_magic(b"\xEF\xBB\xBF<?xml version"),
            Some(MeshFormat::Gifti)
        );
        assert_eq!(
            MeshFormat::from_magic(b"  <GIFTI "),
            Some(MeshFormat::Gifti)
        );
        assert_eq!(
            MeshFormat::from_magic(b"ply\r\nformat"),
            Some(MeshFormat::Ply)
        );
        assert_eq!(MeshFormat::from_magic(b"OFF\n3 1 0"), Some(MeshFormat::Off));
        assert_eq!(MeshFormat::from_magic(b"COFF 3 1 0"), Some(MeshFormat::Off));
        assert_eq!(MeshFormat::from_magic(b"v 0 0 0"), None);
        assert_eq!(MeshFormat::from_magic(b"plywood"), None);
    }

    #[test]
    fn dispatch_round_trips_and_content_wins_over_extension() {
        let dir = temp_dir("dispatch");
        let m = icosphere(1, 50.0);
        for ext in ["obj", "ply", "off"] {
            let p = dir.join(format!("s.{ext}"));
            write_mesh(&p, &m).unwrap();
            assert_eq!(read_mesh(&p).unwrap(), m, "{ext}");
        }
        // A PLY file misnamed .obj is still read as PLY (magic bytes win).
        let p = dir.join("s.ply");
        let q = dir.join("misnamed.obj");
        std::fs::copy(&p, &q).unwrap();
        assert_eq!(read_mesh(&q).unwrap(), m);
        // Unknown content and extension: refused, naming the file.
        let r = dir.join("s.dat");
        std::fs::write(&r, b"hello").unwrap();
        let e = read_mesh(&r).unwrap_err();
        assert!(matches!(e, Error::BadFile { .. }), "{e}");
        assert!(e.to_string().contains("s.dat"), "{e}");
        assert!(write_mesh(&r, &m).is_err());
        // GIFTI goes through the GIFTI module: f64 positions become float32.
        let g = dir.join("s.surf.gii");
        write_mesh(&g, &m).unwrap();
        let back = read_mesh(&g).unwrap();
        assert_eq!(back.faces, m.faces);
        for (a, b) in back.positions.iter().zip(&m.positions) {
            for k in 0..3 {
                assert!(
                    (a[k] - b[k]).abs() <= 50.0 * f32::EPSILON as f64,
                    "{a:?} {b:?}"
                );
            }
        }
        std::fs::remove_dir_all(&dir).unwrap();
    }

    /// Seeded mutations of valid files (byte changes, digit runs, cuts,
    /// duplicated spans): every reader returns `Ok` or `Err`, never panics,
    /// and never allocates beyond what the file size allows (a huge
    /// declared count must be refused by the size check, or the test would
    /// abort on allocation).
    #[test]
    fn mutated_files_never_panic() {
        let m = icosphere(0, 2.5);
        let mut inputs: Vec<(&str, Vec<u8>)> = Vec::new();
        let mut b = Vec::new();
        obj::write_to(&mut b, &m).unwrap();
        inputs.push(("obj", b));
        let mut b = Vec::new();
        off::write_to(&mut b, &m).unwrap();
        inputs.push(("off", b));
        for enc in [
            ply::PlyEncoding::Ascii,
            ply::PlyEncoding::BinaryLittleEndian,
            ply::PlyEncoding::BinaryBigEndian,
        ] {
            let mut b = Vec::new();
            ply::write_to(&mut b, &m, enc).unwrap();
            inputs.push(("ply", b));
        }
        // 64-bit LCG (Knuth's MMIX constants), fixed seed.
        let mut state = 0x9e37_79b9_7f4a_7c15u64;
        let mut rand = |n: usize| {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((state >> 33) as usize) % n.max(1)
        };
        let path = Path::new("fuzz");
        let mut errors = 0;
        for (kind, good) in &inputs {
            for _ in 0..1500 {
                let mut b = good.clone();
                for _ in 0..1 + rand(4) {
                    let at = rand(b.len());
                    match rand(5) {
                        0 => b[at] = rand(256) as u8,
                        1 => b[at] = b"0123456789-. \nexnaif"[rand(20)],
                        2 => b.truncate(at),
                        3 => {
                            let run: Vec<u8> = (0..1 + rand(12)).map(|_| b'9').collect();
                            b.splice(at..at, run);
                        }
                        _ => {
                            let end = (at + rand(16)).min(b.len());
                            let span = b[at..end].to_vec();
                            b.splice(at..at, span);
                        }
                    }
                    if b.is_empty() {
                        break;
                    }
                }
                let r = match *kind {
                    "obj" => obj::parse(path, &b),
                    "off" => off::parse(path, &b),
                    _ => ply::parse(path, &b),
                };
                if let Err(e) = r {
                    errors += 1;
                    assert!(e.to_string().starts_with("fuzz: "), "{e}");
                }
            }
        }
        assert!(
            errors > 1000,
            "the mutations should mostly break the files: {errors}"
        );
    }

    #[test]
    fn lines_and_fans() {
        let l: Vec<_> = Lines::new(b"a\r\nb\n\nc").collect();
        assert_eq!(
            l,
            vec![
                (1, &b"a"[..]),
                (2, &b"b"[..]),
                (3, &b""[..]),
                (4, &b"c"[..])
            ]
        );
        let mut f = Vec::new();
        push_fan(&mut f, &[4, 5, 6, 7, 8]);
        assert_eq!(f, vec![[4, 5, 6], [4, 6, 7], [4, 7, 8]]);
        for x in [
            0.1,
            -1e-300,
            1e300,
            123.456_789_012_345_68,
            f64::MIN_POSITIVE,
        ] {
            assert_eq!(
                fmt_coordinate(x).parse::<f64>().unwrap().to_bits(),
                x.to_bits()
            );
        }
    }
}
