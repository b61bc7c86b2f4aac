//! Wavefront OBJ meshes (Wavefront Technologies, "Object Files (.obj)",
//! Appendix B1 of the Advanced Visualizer manual).
//!
//! In: a text file with `v x y z` vertex lines and `f i j k ...` face lines.
//! Indices are 1-based; negative indices count back from the last vertex
//! defined so far; a corner may carry texture and normal indices (`i/t/n`,
//! `i//n`), which are ignored. Polygons are split into a triangle fan (see
//! [`crate::io`]). Other statements (`vt`, `vn`, `g`, `o`, `s`, `usemtl`,
//! `mtllib`, `l`, comments) are ignored; extra numbers on a `v` line (a `w`
//! weight or vertex colours) are ignored.
//!
//! Out: a validated [`TriMesh`]. Every malformed line gives
//! [`Error::BadFile`] with the element `line N`. Memory stays proportional
//! to the file size (each stored value comes from at least two input bytes).
//!
//! Writing: `v x y z` with round-trip exact coordinates, then `f a b c`
//! (1-based), atomically.

use super::{
    line_text, parse_coordinate, push_fan, read_bytes, write_triangle_lines, write_validated,
    write_vertex_lines, Lines,
};
use crate::error::{Error, Result};
use crate::mesh::TriMesh;
use std::io::Write;
use std::path::Path;

/// Read an OBJ mesh.
pub fn read_mesh(path: &Path) -> Result<TriMesh> {
    parse(path, &read_bytes(path)?)
}

/// Parse OBJ text; `path` names the file in errors.
pub fn parse(path: &Path, bytes: &[u8]) -> Result<TriMesh> {
    let mut positions: Vec<[f64; 3]> = Vec::new();
    let mut faces: Vec<[u32; 3]> = Vec::new();
    // Line of every triangle, to name it if an index turns out to be too large.
    let mut face_line: Vec<u32> = Vec::new();
    let mut polygon: Vec<u32> = Vec::new();
    for (number, raw) in Lines::new(bytes) {
        let text = line_text(path, number, raw)?;
        let text = text.split('#').next().unwrap_or("");
        let mut tokens = text.split_ascii_whitespace();
        let element = || format!("line {number}");
        match tokens.next() {
            Some("v") => {
                let mut p = [0.0; 3];
                for (k, c) in p.iter_mut().enumerate() {
                    let tok = tokens.next().ok_or_else(|| {
                        Error::bad_file(
                            path,
                            element(),
                            format!("vertex has {k} coordinates; expected `v x y z`"),
                        )
                    })?;
                    *c = parse_coordinate(path, &element(), tok)?;
                }
                positions.push(p);
            }
            Some("f") => {
                polygon.clear();
                for tok in tokens {
                    let idx_text = tok.split('/').next().unwrap_or("");
                    let idx: i64 = idx_text.parse().map_err(|_| {
                        Error::bad_file(
                            path,
                            element(),
                            format!(
                                "face corner `{tok}` does not start with an integer vertex index"
                            ),
                        )
                    })?;
                    let n = positions.len() as i64;
                    let zero_based = if idx > 0 {
                        idx - 1
                    } else if idx < 0 {
                        n + idx
                    } else {
                        -1
                    };
                    if zero_based < 0 || zero_based >= u32::MAX as i64 {
                        return Err(Error::bad_file(
                            path,
                            element(),
                            format!(
                                "face corner index {idx} is out of range; expected 1..={n} or a negative index back to -{n}"
                            ),
                        ));
                    }
                    polygon.push(zero_based as u32);
                }
                if polygon.len() < 3 {
                    return Err(Error::bad_file(
                        path,
                        element(),
                        format!("face has {} corners; expected at least 3", polygon.len()),
                    ));
                }
                push_fan(&mut faces, &polygon);
                let line = u32::try_from(number).unwrap_or(u32::MAX);
                face_line.resize(faces.len(), line);
            }
            _ => {}
        }
    }
    finish(path, positions, faces, &face_line)
}

/// Check the parsed mesh: not empty, every index defined.
fn finish(
    path: &Path,
    positions: Vec<[f64; 3]>,
    faces: Vec<[u32; 3]>,
    face_line: &[u32],
) -> Result<TriMesh> {
    if positions.is_empty() {
        return Err(Error::bad_file(
            path,
            "file",
            "no vertices; expected `v x y z` lines",
        ));
    }
    if faces.is_empty() {
        return Err(Error::bad_file(
            path,
            "file",
            "no faces; expected `f i j k` lines",
        ));
    }
    let n = positions.len();
    for (t, line) in faces.iter().zip(face_line) {
        if let Some(&v) = t.iter().find(|&&v| v as usize >= n) {
            return Err(Error::bad_file(
                path,
                format!("line {line}"),
                format!(
                    "face refers to vertex {} but the file defines {n} vertices",
                    v as u64 + 1
                ),
            ));
        }
    }
    TriMesh::new(positions, faces).map_err(|e| e.in_file(path, "file"))
}

/// Write `mesh` as OBJ text into `w`.
pub fn write_to(w: &mut dyn Write, mesh: &TriMesh) -> std::io::Result<()> {
    writeln!(
        w,
        "# {} vertices, {} triangles (horosphere)",
        mesh.n_vertices(),
        mesh.n_faces()
    )?;
    write_vertex_lines(w, mesh, "v ")?;
    write_triangle_lines(w, mesh, "f ", 1)
}

/// Write `mesh` to `path` as OBJ, atomically. The mesh is validated first.
pub fn write_mesh(path: &Path, mesh: &TriMesh) -> Result<()> {
    write_validated(path, mesh, write_to)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::test_support::{assert_round_trip, bad_file_message};
    use crate::mesh::shapes::{icosphere, torus};

    fn p() -> &'static Path {
        Path::new("test.obj")
    }

    fn err(text: &str) -> String {
        bad_file_message(parse(p(), text.as_bytes()))
    }

    #[test]
    fn round_trip_is_exact() {
        let meshes = [icosphere(2, 73.25), torus(3.0, 1.1, 17, 9)];
        assert_round_trip("obj", "t.obj", &meshes, write_mesh, read_mesh);
    }

    #[test]
    fn reads_corner_forms_negative_indices_and_polygons() {
        let text =
            "# a square and a triangle\r\nv 0 0 0\nv 1 0 0 1.0\nv 1 1 0\nv 0 1 0 0.5 0.5 0.5\n\
                    vt 0 0\nvn 0 0 1\ng part\nf 1/1/1 2//1 3/1 4\nf -4 -2 -1 # tail comment\n";
        let m = parse(p(), text.as_bytes()).unwrap();
        assert_eq!(m.n_vertices(), 4);
        assert_eq!(m.faces, vec![[0, 1, 2], [0, 2, 3], [0, 2, 3]]);
        assert_eq!(m.positions[3], [0.0, 1.0, 0.0]);
    }

    #[test]
    fn bad_input_names_line_and_expectation() {
        let e = err("v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 nan\nf 1 2 3\n");
        assert!(e.contains("line 4") && e.contains("finite"), "{e}");
        let e = err("v 0 0 0\nv 1 0\n");
        assert!(
            e.contains("line 2") && e.contains("expected `v x y z`"),
            "{e}"
        );
        let e = err("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 9\n");
        assert!(
            e.contains("line 4") && e.contains("vertex 9") && e.contains("3 vertices"),
            "{e}"
        );
        let e = err("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 0\n");
        assert!(e.contains("line 4") && e.contains("out of range"), "{e}");
        let e = err("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 -4\n");
        assert!(e.contains("line 4"), "{e}");
        let e = err("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2\n");
        assert!(e.contains("2 corners"), "{e}");
        let e = err("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 x 3\n");
        assert!(e.contains("`x`"), "{e}");
        let e = err("");
        assert!(e.contains("no vertices"), "{e}");
        let e = err("v 0 0 0\n");
        assert!(e.contains("no faces"), "{e}");
        // Truncated in the middle of a face line.
        let e = err("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2");
        assert!(e.contains("line 4"), "{e}");
        let e = parse(p(), b"v 0 0 0\n\xff\xfe\n").unwrap_err().to_string();
        assert!(e.contains("line 2") && e.contains("not text"), "{e}");
    }
}
