//! OFF meshes (the Object File Format of Geomview: Phillips, Levy, Munzner,
//! "Geomview: an interactive geometry viewer", Notices AMS 40, 1993).
//!
//! In: a text file: the keyword `OFF` (the variants `COFF`, `NOFF`, `CNOFF`,
//! `STOFF`, ... whose vertex lines start with `x y z` are accepted too), the
//! counts `nv nf [ne]` (on the keyword line or the next), then `nv` vertex
//! lines `x y z [extra...]` and `nf` face lines `k i1 .. ik [colour...]` with
//! 0-based indices. `#` starts a comment; blank lines are skipped. Polygons
//! are split into a triangle fan (see [`crate::io`]); extra values after
//! the coordinates or indices are ignored. Binary OFF and the 4-D and n-D
//! variants are refused.
//!
//! Out: a validated [`TriMesh`]; every malformed case gives
//! [`Error::BadFile`] naming `header`, `line N` or `end of file`. The counts
//! are checked against the file size before anything is allocated: a vertex
//! line takes at least 6 bytes (`0 0 0\n`) and a face line at least 8
//! (`3 0 1 2\n`).
//!
//! Writing: `OFF`, `nv nf 0`, round-trip exact coordinates, `3 a b c`,
//! atomically.

use super::{
    line_text, parse_coordinate, push_fan, read_bytes, write_triangle_lines, write_validated,
    write_vertex_lines, Lines,
};
use crate::error::{Error, Result};
use crate::mesh::TriMesh;
use std::io::Write;
use std::path::Path;

/// True for the OFF keywords whose vertex lines start with `x y z`:
/// `[ST][C][N]OFF`.
pub(crate) fn is_off_keyword(token: &[u8]) -> bool {
    let Some(prefix) = token.strip_suffix(b"OFF") else {
        return false;
    };
    let prefix = prefix.strip_prefix(b"ST").unwrap_or(prefix);
    let prefix = prefix.strip_prefix(b"C").unwrap_or(prefix);
    let prefix = prefix.strip_prefix(b"N").unwrap_or(prefix);
    prefix.is_empty()
}

/// Read an OFF mesh.
pub fn read_mesh(path: &Path) -> Result<TriMesh> {
    parse(path, &read_bytes(path)?)
}

/// Non-blank, comment-stripped lines as `(line number, tokens)`.
fn content_lines<'a>(
    path: &'a Path,
    bytes: &'a [u8],
) -> impl Iterator<Item = Result<(usize, Vec<&'a str>)>> + 'a {
    Lines::new(bytes).filter_map(move |(number, raw)| {
        let text = match line_text(path, number, raw) {
            Ok(t) => t,
            Err(e) => return Some(Err(e)),
        };
        let text = text.split('#').next().unwrap_or("");
        let tokens: Vec<&str> = text.split_ascii_whitespace().collect();
        if tokens.is_empty() {
            None
        } else {
            Some(Ok((number, tokens)))
        }
    })
}

fn parse_count(path: &Path, what: &str, tok: Option<&&str>) -> Result<usize> {
    let tok = tok.ok_or_else(|| {
        Error::bad_file(
            path,
            "header",
            format!("missing the {what} count; expected `nv nf ne` after OFF"),
        )
    })?;
    tok.parse::<usize>().map_err(|_| {
        Error::bad_file(
            path,
            "header",
            format!("{what} count `{tok}` is not a non-negative integer"),
        )
    })
}

/// Parse OFF text; `path` names the file in errors.
pub fn parse(path: &Path, bytes: &[u8]) -> Result<TriMesh> {
    let mut lines = content_lines(path, bytes);
    let (_, first) = lines
        .next()
        .transpose()?
        .ok_or_else(|| Error::bad_file(path, "header", "empty file; expected `OFF`"))?;
    let keyword = first.first().copied().unwrap_or("");
    if !is_off_keyword(keyword.as_bytes()) {
        return Err(Error::bad_file(
            path,
            "header",
            format!("first word is `{keyword}`; expected `OFF`"),
        ));
    }
    if first.get(1) == Some(&"BINARY") {
        return Err(Error::bad_file(
            path,
            "header",
            "binary OFF is not supported; expected text OFF",
        ));
    }
    let counts: Vec<&str> = if first.len() > 1 {
        first[1..].to_vec()
    } else {
        lines
            .next()
            .transpose()?
            .map(|(_, t)| t)
            .ok_or_else(|| Error::bad_file(path, "header", "missing the counts `nv nf ne`"))?
    };
    let nv = parse_count(path, "vertex", counts.first())?;
    let nf = parse_count(path, "face", counts.get(1))?;
    let need = (nv as u128) * 6 + (nf as u128) * 8;
    if need > bytes.len() as u128 {
        return Err(Error::bad_file(
            path,
            "header",
            format!(
                "declares {nv} vertices and {nf} faces, which need at least {need} bytes, but the file has {}",
                bytes.len()
            ),
        ));
    }
    if nv == 0 || nf == 0 {
        return Err(Error::bad_file(
            path,
            "header",
            format!("declares {nv} vertices and {nf} faces; expected a non-empty mesh"),
        ));
    }
    if nv >= u32::MAX as usize {
        return Err(Error::bad_file(
            path,
            "header",
            format!(
                "declares {nv} vertices; at most {} are supported",
                u32::MAX - 1
            ),
        ));
    }
    let mut positions = Vec::with_capacity(nv);
    for i in 0..nv {
        let (number, tokens) = lines.next().transpose()?.ok_or_else(|| {
            Error::bad_file(
                path,
                "end of file",
                format!("found {i} vertices; the header declares {nv}"),
            )
        })?;
        let element = format!("line {number}");
        if tokens.len() < 3 {
            return Err(Error::bad_file(
                path,
                element,
                format!("vertex {i} has {} values; expected `x y z`", tokens.len()),
            ));
        }
        let mut p = [0.0; 3];
        for k in 0..3 {
            p[k] = parse_coordinate(path, &element, tokens[k])?;
        }
        positions.push(p);
    }
    let mut faces = Vec::with_capacity(nf);
    let mut polygon: Vec<u32> = Vec::new();
    for i in 0..nf {
        let (number, tokens) = lines.next().transpose()?.ok_or_else(|| {
            Error::bad_file(
                path,
                "end of file",
                format!("found {i} faces; the header declares {nf}"),
            )
        })?;
        let element = format!("line {number}");
        let k: usize = tokens[0].parse().map_err(|_| {
            Error::bad_file(
                path,
                element.clone(),
                format!(
                    "face {i} starts with `{}`; expected its corner count",
                    tokens[0]
                ),
            )
        })?;
        if k < 3 {
            return Err(Error::bad_file(
                path,
                element,
                format!("face {i} has {k} corners; expected at least 3"),
            ));
        }
        if tokens.len() - 1 < k {
            return Err(Error::bad_file(
                path,
                element,
                format!(
                    "face {i} declares {k} corners but lists {}",
                    tokens.len() - 1
                ),
            ));
        }
        polygon.clear();
        for tok in &tokens[1..=k] {
            let v: u32 = tok
                .parse()
                .ok()
                .filter(|&v: &u32| (v as usize) < nv)
                .ok_or_else(|| {
                    Error::bad_file(
                        path,
                        element.clone(),
                        format!("face {i} has corner `{tok}`; expected a vertex index in 0..{nv}"),
                    )
                })?;
            polygon.push(v);
        }
        push_fan(&mut faces, &polygon);
    }
    TriMesh::new(positions, faces).map_err(|e| e.in_file(path, "file"))
}

/// Write `mesh` as OFF text into `w`.
pub fn write_to(w: &mut dyn Write, mesh: &TriMesh) -> std::io::Result<()> {
    writeln!(w, "OFF")?;
    writeln!(w, "{} {} 0", mesh.n_vertices(), mesh.n_faces())?;
    write_vertex_lines(w, mesh, "")?;
    write_triangle_lines(w, mesh, "3 ", 0)
}

/// Write `mesh` to `path` as OFF, atomically. The mesh is validated first.
pub fn write_mesh(path: &Path, mesh: &TriMesh) -> Result<()> {
    write_validated(path, mesh, write_to)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::test_support::{assert_round_trip, bad_file_message};
    use crate::mesh::shapes::{icosphere, torus};

    fn p() -> &'static Path {
        Path::new("test.off")
    }

    fn err(text: &str) -> String {
        bad_file_message(parse(p(), text.as_bytes()))
    }

    #[test]
    fn round_trip_is_exact() {
        let meshes = [icosphere(2, 0.001), torus(30.0, 7.5, 13, 8)];
        assert_round_trip("off", "t.off", &meshes, write_mesh, read_mesh);
    }

    #[test]
    fn reads_variants_comments_and_polygons() {
        let text = "# comment\nCOFF 4 1 0\n0 0 0 255 0 0\n1 0 0 255 0 0\n\n1 1 0 0 0 0\n0 1 0 1 1 1 # c\n4 0 1 2 3 10 20 30\n";
        let m = parse(p(), text.as_bytes()).unwrap();
        assert_eq!(m.faces, vec![[0, 1, 2], [0, 2, 3]]);
        assert_eq!(m.positions[2], [1.0, 1.0, 0.0]);
        let m = parse(p(), b"OFF\n3 1 3\n0 0 0\n1 0 0\n0 1 0\n3 0 1 2\n").unwrap();
        assert_eq!(m.n_faces(), 1);
    }

    #[test]
    fn bad_input_names_element_and_expectation() {
        let e = err("OBJ\n3 1 0\n");
        assert!(e.contains("header") && e.contains("expected `OFF`"), "{e}");
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n0 inf 0\n3 0 1 2\n");
        assert!(e.contains("line 5") && e.contains("finite"), "{e}");
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n0 NaN 0\n3 0 1 2\n");
        assert!(e.contains("line 5") && e.contains("finite"), "{e}");
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n0 1 0\n3 0 1 3\n");
        assert!(
            e.contains("line 6") && e.contains("`3`") && e.contains("0..3"),
            "{e}"
        );
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n0 1 0\n3 0 -1 2\n");
        assert!(e.contains("line 6"), "{e}");
        // Truncated: a missing face, a missing vertex (padded past the size
        // check by a comment), and a file too short for its counts.
        let e = err("OFF\n3 2 0\n0 0 0\n1 0 0\n0 1 0\n3 0 1 2\n");
        assert!(
            e.contains("end of file") && e.contains("found 1 faces"),
            "{e}"
        );
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n# padding padding\n");
        assert!(
            e.contains("end of file") && e.contains("found 2 vertices"),
            "{e}"
        );
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n");
        assert!(
            e.contains("header") && e.contains("need at least 26 bytes"),
            "{e}"
        );
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n0 1\n3 0 1 2\n");
        assert!(
            e.contains("line 5") && e.contains("vertex 2 has 2 values"),
            "{e}"
        );
        // Wrong counts: more declared than the file could hold, without allocating.
        let e = err("OFF\n4000000000 4000000000 0\n0 0 0\n");
        assert!(e.contains("header") && e.contains("need at least"), "{e}");
        let e = err("OFF\n99999999999999999999999 1 0\n");
        assert!(e.contains("header"), "{e}");
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n0 1 0\n2 0 1\n");
        assert!(e.contains("2 corners"), "{e}");
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n0 1 0\n4 0 1 2\n");
        assert!(e.contains("declares 4 corners but lists 3"), "{e}");
        let e = err("OFF\n3 1 0\n0 0 0\n1 0 0\n0 1 0\n18446744073709551615 0 1 2\n");
        assert!(e.contains("line 6") && e.contains("lists 3"), "{e}");
        let e = err("OFF\n0 0 0\n");
        assert!(e.contains("non-empty"), "{e}");
        let e = err("");
        assert!(e.contains("empty file"), "{e}");
        let e = err("OFF BINARY\n");
        assert!(e.contains("binary"), "{e}");
        let e = err("OFF\nx 1 0\n");
        assert!(e.contains("`x`"), "{e}");
    }
}
