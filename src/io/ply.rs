//! PLY meshes (Turk, "The PLY polygon file format", 1994).
//!
//! In: a header (`ply`, `format ascii|binary_little_endian|binary_big_endian
//! 1.0`, `comment`/`obj_info` lines, `element NAME COUNT` followed by its
//! `property TYPE NAME` and `property list COUNT_TYPE ITEM_TYPE NAME` lines,
//! `end_header`), then the element data in header order. Scalar types:
//! `char uchar short ushort int uint float double` and their sized aliases
//! (`int8 uint8 int16 uint16 int32 uint32 float32 float64`).
//!
//! Used: element `vertex` with scalar properties `x`, `y`, `z` (any numeric
//! type), element `face` with a list `vertex_indices` (or `vertex_index`)
//! whose count and item types are integers. Every other element and property
//! is read past and ignored. Polygons are split into a triangle fan (see
//! [`crate::io`]). In ASCII files every element item is one line.
//!
//! Out: a validated [`TriMesh`]; every malformed case gives
//! [`Error::BadFile`] naming `header`, `line N` (ASCII), or `vertex i` /
//! `face i` (binary). Declared element counts are checked against the bytes
//! after the header before anything is allocated (binary: the fixed size of
//! an item plus the count field of each list, and three indices for the
//! face list; ASCII: two bytes per value).
//!
//! Writing: binary little-endian by default (`double x y z`, `list uchar int
//! vertex_indices`, or `uint` above 2^31 - 1 vertices), or any encoding
//! through [`write_mesh_as`]; ASCII coordinates are round-trip exact.

use super::{
    line_text, push_fan, read_bytes, write_triangle_lines, write_validated, write_vertex_lines,
    Lines,
};
use crate::error::{Error, Result};
use crate::mesh::TriMesh;
use std::io::Write;
use std::path::Path;

/// How the data after a PLY header is encoded.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PlyEncoding {
    /// Text, one element item per line.
    Ascii,
    /// Binary, least significant byte first.
    BinaryLittleEndian,
    /// Binary, most significant byte first.
    BinaryBigEndian,
}

/// A PLY scalar type.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Scalar {
    I8,
    U8,
    I16,
    U16,
    I32,
    U32,
    F32,
    F64,
}

impl Scalar {
    fn parse(name: &str) -> Option<Scalar> {
        Some(match name {
            "char" | "int8" => Scalar::I8,
            "uchar" | "uint8" => Scalar::U8,
            "short" | "int16" => Scalar::I16,
            "ushort" | "uint16" => Scalar::U16,
            "int" | "int32" => Scalar::I32,
            "uint" | "uint32" => Scalar::U32,
            "float" | "float32" => Scalar::F32,
            "double" | "float64" => Scalar::F64,
            _ => return None,
        })
    }

    fn size(self) -> usize {
        match self {
            Scalar::I8 | Scalar::U8 => 1,
            Scalar::I16 | Scalar::U16 => 2,
            Scalar::I32 | Scalar::U32 | Scalar::F32 => 4,
            Scalar::F64 => 8,
        }
    }

    fn is_integer(self) -> bool {
        !matches!(self, Scalar::F32 | Scalar::F64)
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    Scalar(Scalar),
    List { count: Scalar, item: Scalar },
}

/// What a property is used for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Role {
    Ignore,
    Coordinate(usize),
    Corners,
}

#[derive(Debug, Clone)]
struct Property {
    kind: Kind,
    role: Role,
}

#[derive(Debug, Clone)]
struct Element {
    name: String,
    count: usize,
    properties: Vec<Property>,
}

struct Header {
    encoding: PlyEncoding,
    elements: Vec<Element>,
    /// Offset of the first data byte.
    body_start: usize,
    /// Number of header lines (ASCII data line numbers continue from here).
    lines: usize,
}

/// Read a PLY mesh.
pub fn read_mesh(path: &Path) -> Result<TriMesh> {
    parse(path, &read_bytes(path)?)
}

fn header_err(path: &Path, message: impl Into<String>) -> Error {
    Error::bad_file(path, "header", message)
}

fn parse_header(path: &Path, bytes: &[u8]) -> Result<Header> {
    let mut encoding = None;
    let mut elements: Vec<Element> = Vec::new();
    let mut offset = 0usize;
    let mut number = 0usize;
    loop {
        let rest = bytes.get(offset..).unwrap_or(&[]);
        let Some(nl) = rest.iter().position(|&b| b == b'\n') else {
            let message = if number == 0 {
                "first line is not `ply`; expected a PLY file"
            } else {
                "no `end_header` line; expected a complete PLY header"
            };
            return Err(header_err(path, message));
        };
        let raw = &rest[..nl];
        let raw = raw.strip_suffix(b"\r").unwrap_or(raw);
        offset += nl + 1;
        number += 1;
        if number == 1 {
            if raw != b"ply" {
                return Err(header_err(
                    path,
                    "first line is not `ply`; expected a PLY file",
                ));
            }
            continue;
        }
        let text = line_text(path, number, raw)?;
        let tokens: Vec<&str> = text.split_ascii_whitespace().collect();
        match tokens.as_slice() {
            ["format", kind, version] => {
                if *version != "1.0" {
                    return Err(header_err(
                        path,
                        format!("format version `{version}`; expected 1.0"),
                    ));
                }
                encoding = Some(match *kind {
                    "ascii" => PlyEncoding::Ascii,
                    "binary_little_endian" => PlyEncoding::BinaryLittleEndian,
                    "binary_big_endian" => PlyEncoding::BinaryBigEndian,
                    other => {
                        return Err(header_err(
                            path,
                            format!(
                                "format `{other}`; expected {}",
                                "ascii, binary_little_endian or binary_big_endian"
                            ),
                        ))
                    }
                });
            }
            ["comment", ..] | ["obj_info", ..] | [] => {}
            ["element", name, count] => {
                let count: usize = count.parse().map_err(|_| {
                    header_err(
                        path,
                        format!(
                            "element {name} has count `{count}`; expected a non-negative integer"
                        ),
                    )
                })?;
                elements.push(Element {
                    name: name.to_string(),
                    count,
                    properties: Vec::new(),
                });
            }
            ["property", "list", count, item, name] => {
                let el = elements.last_mut().ok_or_else(|| {
                    header_err(path, format!("line {number}: property before any element"))
                })?;
                let (c, i) = match (Scalar::parse(count), Scalar::parse(item)) {
                    (Some(c), Some(i)) => (c, i),
                    _ => {
                        return Err(header_err(
                            path,
                            format!(
                            "line {number}: list types `{count} {item}`; expected PLY scalar types"
                        ),
                        ))
                    }
                };
                let corners =
                    el.name == "face" && (*name == "vertex_indices" || *name == "vertex_index");
                if corners && !(c.is_integer() && i.is_integer()) {
                    return Err(header_err(
                        path,
                        format!(
                            "face list `{name}` has types `{count} {item}`; expected integer types"
                        ),
                    ));
                }
                if !c.is_integer() {
                    return Err(header_err(
                        path,
                        format!(
                            "line {number}: list count type `{count}`; expected an integer type"
                        ),
                    ));
                }
                el.properties.push(Property {
                    kind: Kind::List { count: c, item: i },
                    role: if corners { Role::Corners } else { Role::Ignore },
                });
            }
            ["property", ty, name] => {
                let el = elements.last_mut().ok_or_else(|| {
                    header_err(path, format!("line {number}: property before any element"))
                })?;
                let s = Scalar::parse(ty).ok_or_else(|| {
                    header_err(
                        path,
                        format!("line {number}: property type `{ty}`; expected a PLY scalar type"),
                    )
                })?;
                let role = match (el.name.as_str(), *name) {
                    ("vertex", "x") => Role::Coordinate(0),
                    ("vertex", "y") => Role::Coordinate(1),
                    ("vertex", "z") => Role::Coordinate(2),
                    _ => Role::Ignore,
                };
                el.properties.push(Property {
                    kind: Kind::Scalar(s),
                    role,
                });
            }
            ["end_header"] => {
                let encoding = encoding
                    .ok_or_else(|| header_err(path, "no `format` line before end_header"))?;
                return Ok(Header {
                    encoding,
                    elements,
                    body_start: offset,
                    lines: number,
                });
            }
            _ => {
                return Err(header_err(
                    path,
                    format!("line {number} `{text}` is not a PLY header line"),
                ))
            }
        }
    }
}

/// Check that the header names what a mesh needs and that the declared
/// counts fit in the bytes after it; returns (vertex count, face count).
fn check_header(path: &Path, h: &Header, body_len: usize) -> Result<(usize, usize)> {
    let vertex = h
        .elements
        .iter()
        .find(|e| e.name == "vertex")
        .ok_or_else(|| header_err(path, "no `element vertex`; expected vertices"))?;
    for (k, axis) in ["x", "y", "z"].iter().enumerate() {
        let n = vertex
            .properties
            .iter()
            .filter(|p| p.role == Role::Coordinate(k))
            .count();
        if n != 1 {
            return Err(header_err(
                path,
                format!("element vertex has {n} properties `{axis}`; expected one"),
            ));
        }
    }
    let face = h
        .elements
        .iter()
        .find(|e| e.name == "face")
        .ok_or_else(|| header_err(path, "no `element face`; expected faces"))?;
    if face
        .properties
        .iter()
        .filter(|p| p.role == Role::Corners)
        .count()
        != 1
    {
        return Err(header_err(
            path,
            "element face needs one list property `vertex_indices` (or `vertex_index`)",
        ));
    }
    if h.elements
        .iter()
        .filter(|e| e.name == "vertex" || e.name == "face")
        .count()
        != 2
    {
        return Err(header_err(path, "element vertex or face is declared twice"));
    }
    let mut need: u128 = 0;
    for e in &h.elements {
        let per_item: u128 = e
            .properties
            .iter()
            .map(|p| match (h.encoding, p.kind) {
                (PlyEncoding::Ascii, _) => 2,
                (_, Kind::Scalar(s)) => s.size() as u128,
                (_, Kind::List { count, item }) => {
                    count.size() as u128
                        + if p.role == Role::Corners {
                            3 * item.size() as u128
                        } else {
                            0
                        }
                }
            })
            .sum();
        need += per_item * e.count as u128;
    }
    if need > body_len as u128 {
        return Err(header_err(
            path,
            format!(
                "the elements need at least {need} data bytes; the file has {body_len} after the header"
            ),
        ));
    }
    if vertex.count == 0 || face.count == 0 {
        return Err(header_err(
            path,
            format!(
                "declares {} vertices and {} faces; expected a non-empty mesh",
                vertex.count, face.count
            ),
        ));
    }
    if vertex.count >= u32::MAX as usize {
        return Err(header_err(
            path,
            format!(
                "declares {} vertices; at most {} are supported",
                vertex.count,
                u32::MAX - 1
            ),
        ));
    }
    Ok((vertex.count, face.count))
}

/// Parse PLY bytes; `path` names the file in errors.
pub fn parse(path: &Path, bytes: &[u8]) -> Result<TriMesh> {
    let header = parse_header(path, bytes)?;
    let body = bytes.get(header.body_start..).unwrap_or(&[]);
    let (nv, nf) = check_header(path, &header, body.len())?;
    let mut sink = Sink {
        positions: Vec::with_capacity(nv),
        faces: Vec::with_capacity(nf),
        face_of_triangle: Vec::with_capacity(nf),
        polygon: Vec::new(),
        n_polygons: 0,
    };
    match header.encoding {
        PlyEncoding::Ascii => read_ascii(path, &header, body, &mut sink)?,
        PlyEncoding::BinaryLittleEndian => read_binary(path, &header, body, false, &mut sink)?,
        PlyEncoding::BinaryBigEndian => read_binary(path, &header, body, true, &mut sink)?,
    }
    let n = sink.positions.len();
    for (t, &f) in sink.faces.iter().zip(&sink.face_of_triangle) {
        if let Some(&v) = t.iter().find(|&&v| v as usize >= n) {
            return Err(Error::bad_file(
                path,
                format!("face {f}"),
                format!("corner index {v} is out of range; expected below the vertex count {n}"),
            ));
        }
    }
    TriMesh::new(sink.positions, sink.faces).map_err(|e| e.in_file(path, "file"))
}

/// Where parsed items go.
struct Sink {
    positions: Vec<[f64; 3]>,
    faces: Vec<[u32; 3]>,
    face_of_triangle: Vec<u32>,
    polygon: Vec<u32>,
    n_polygons: u32,
}

impl Sink {
    /// Finish one face item: check and fan its polygon.
    fn end_face(&mut self, path: &Path, element: impl FnOnce() -> String) -> Result<()> {
        if self.polygon.len() < 3 {
            return Err(Error::bad_file(
                path,
                element(),
                format!("has {} corners; expected at least 3", self.polygon.len()),
            ));
        }
        push_fan(&mut self.faces, &self.polygon);
        self.face_of_triangle
            .resize(self.faces.len(), self.n_polygons);
        self.n_polygons += 1;
        Ok(())
    }
}

/// A corner index value: a non-negative integer below `u32::MAX`.
#[inline]
fn corner_index(x: f64) -> Option<u32> {
    (x >= 0.0 && x < u32::MAX as f64 && x.fract() == 0.0).then_some(x as u32)
}

fn bad_corner(path: &Path, element: &str, x: f64) -> Error {
    Error::bad_file(
        path,
        element,
        format!("corner index {x} is not a vertex index; expected a non-negative integer"),
    )
}

fn read_ascii(path: &Path, h: &Header, body: &[u8], sink: &mut Sink) -> Result<()> {
    let mut lines = Lines::new(body)
        .map(|(n, l)| (n + h.lines, l))
        .filter(|(_, l)| l.iter().any(|b| !b.is_ascii_whitespace()));
    for e in &h.elements {
        let is_vertex = e.name == "vertex";
        let is_face = e.name == "face";
        for i in 0..e.count {
            let (number, raw) = lines.next().ok_or_else(|| {
                Error::bad_file(
                    path,
                    "end of file",
                    format!(
                        "found {i} items of element {}; the header declares {}",
                        e.name, e.count
                    ),
                )
            })?;
            let element = format!("line {number}");
            let text = line_text(path, number, raw)?;
            let mut tokens = text.split_ascii_whitespace();
            let mut next = |what: &str| -> Result<f64> {
                let tok = tokens.next().ok_or_else(|| {
                    Error::bad_file(
                        path,
                        element.as_str(),
                        format!("{} {i} ends early; expected {what}", e.name),
                    )
                })?;
                tok.parse::<f64>().map_err(|_| {
                    Error::bad_file(
                        path,
                        element.as_str(),
                        format!("`{tok}` is not a number; expected {what}"),
                    )
                })
            };
            let mut p = [0.0; 3];
            sink.polygon.clear();
            for prop in &e.properties {
                match (prop.kind, prop.role) {
                    (Kind::Scalar(_), Role::Coordinate(k)) => {
                        let x = next("a coordinate")?;
                        if !x.is_finite() {
                            return Err(Error::bad_file(
                                path,
                                element.as_str(),
                                format!("vertex {i} has a non-finite coordinate {x}; expected millimetres"),
                            ));
                        }
                        p[k] = x;
                    }
                    (Kind::Scalar(_), _) => {
                        next("a property value")?;
                    }
                    (Kind::List { .. }, role) => {
                        let c = next("a list count")?;
                        if !(c >= 0.0 && c.fract() == 0.0 && c <= u32::MAX as f64) {
                            return Err(Error::bad_file(
                                path,
                                element.as_str(),
                                format!("list count {c}; expected a non-negative integer"),
                            ));
                        }
                        for _ in 0..c as u32 {
                            let x = next("a list item")?;
                            if role == Role::Corners {
                                let v =
                                    corner_index(x).ok_or_else(|| bad_corner(path, &element, x))?;
                                sink.polygon.push(v);
                            }
                        }
                    }
                }
            }
            if tokens.next().is_some() {
                return Err(Error::bad_file(
                    path,
                    element.as_str(),
                    format!("{} {i} has more values than the header declares", e.name),
                ));
            }
            if is_vertex {
                sink.positions.push(p);
            } else if is_face {
                sink.end_face(path, || element.clone())?;
            }
        }
    }
    Ok(())
}

/// Little reader over the binary body.
struct Cursor<'a> {
    bytes: &'a [u8],
    pos: usize,
    big_endian: bool,
}

impl Cursor<'_> {
    fn take<const N: usize>(&mut self) -> Option<[u8; N]> {
        let end = self.pos.checked_add(N)?;
        let s = self.bytes.get(self.pos..end)?;
        let mut a = [0u8; N];
        a.copy_from_slice(s);
        self.pos = end;
        if self.big_endian != cfg!(target_endian = "big") {
            a.reverse();
        }
        Some(a)
    }

    /// A scalar as `f64` (exact for every PLY integer type).
    fn read(&mut self, s: Scalar) -> Option<f64> {
        Some(match s {
            Scalar::I8 => i8::from_ne_bytes(self.take()?) as f64,
            Scalar::U8 => u8::from_ne_bytes(self.take()?) as f64,
            Scalar::I16 => i16::from_ne_bytes(self.take()?) as f64,
            Scalar::U16 => u16::from_ne_bytes(self.take()?) as f64,
            Scalar::I32 => i32::from_ne_bytes(self.take()?) as f64,
            Scalar::U32 => u32::from_ne_bytes(self.take()?) as f64,
            Scalar::F32 => f32::from_ne_bytes(self.take()?) as f64,
            Scalar::F64 => f64::from_ne_bytes(self.take()?),
        })
    }

    fn skip(&mut self, n: usize) -> Option<()> {
        let end = self.pos.checked_add(n)?;
        if end > self.bytes.len() {
            return None;
        }
        self.pos = end;
        Some(())
    }
}

fn read_binary(
    path: &Path,
    h: &Header,
    body: &[u8],
    big_endian: bool,
    sink: &mut Sink,
) -> Result<()> {
    let mut cur = Cursor {
        bytes: body,
        pos: 0,
        big_endian,
    };
    for e in &h.elements {
        if e.properties.is_empty() {
            continue; // items of no bytes: nothing to read, however many
        }
        let is_vertex = e.name == "vertex";
        let is_face = e.name == "face";
        for i in 0..e.count {
            let element = || format!("{} {i}", e.name);
            let truncated = || {
                Error::bad_file(
                    path,
                    element(),
                    format!(
                        "the file ends inside this item; expected {} items of element {}",
                        e.count, e.name
                    ),
                )
            };
            let mut p = [0.0; 3];
            sink.polygon.clear();
            for prop in &e.properties {
                match (prop.kind, prop.role) {
                    (Kind::Scalar(s), Role::Coordinate(k)) => {
                        let x = cur.read(s).ok_or_else(truncated)?;
                        if !x.is_finite() {
                            return Err(Error::bad_file(
                                path,
                                element(),
                                format!("non-finite coordinate {x}; expected finite millimetres"),
                            ));
                        }
                        p[k] = x;
                    }
                    (Kind::Scalar(s), _) => cur.skip(s.size()).ok_or_else(truncated)?,
                    (Kind::List { count, item }, role) => {
                        let c = cur.read(count).ok_or_else(truncated)?;
                        if c < 0.0 {
                            return Err(Error::bad_file(
                                path,
                                element(),
                                format!("list count {c}; expected a non-negative integer"),
                            ));
                        }
                        let c = c as usize;
                        if role == Role::Corners {
                            for _ in 0..c {
                                let x = cur.read(item).ok_or_else(truncated)?;
                                let v = corner_index(x)
                                    .ok_or_else(|| bad_corner(path, &element(), x))?;
                                sink.polygon.push(v);
                            }
                        } else {
                            cur.skip(c.saturating_mul(item.size()))
                                .ok_or_else(truncated)?;
                        }
                    }
                }
            }
            if is_vertex {
                sink.positions.push(p);
            } else if is_face {
                sink.end_face(path, element)?;
            }
        }
    }
    Ok(())
}

/// Write `mesh` as PLY with the given encoding into `w`.
pub fn write_to(w: &mut dyn Write, mesh: &TriMesh, encoding: PlyEncoding) -> std::io::Result<()> {
    let format = match encoding {
        PlyEncoding::Ascii => "ascii",
        PlyEncoding::BinaryLittleEndian => "binary_little_endian",
        PlyEncoding::BinaryBigEndian => "binary_big_endian",
    };
    let wide = mesh.n_vertices() > i32::MAX as usize;
    let index_type = if wide { "uint" } else { "int" };
    write!(
        w,
        "ply\nformat {format} 1.0\ncomment horosphere triangle mesh, millimetres\n\
         element vertex {}\nproperty double x\nproperty double y\nproperty double z\n\
         element face {}\nproperty list uchar {index_type} vertex_indices\nend_header\n",
        mesh.n_vertices(),
        mesh.n_faces()
    )?;
    match encoding {
        PlyEncoding::Ascii => {
            write_vertex_lines(w, mesh, "")?;
            write_triangle_lines(w, mesh, "3 ", 0)?;
        }
        PlyEncoding::BinaryLittleEndian | PlyEncoding::BinaryBigEndian => {
            let big = encoding == PlyEncoding::BinaryBigEndian;
            for p in &mesh.positions {
                for &c in p {
                    w.write_all(&if big {
                        c.to_be_bytes()
                    } else {
                        c.to_le_bytes()
                    })?;
                }
            }
            for t in &mesh.faces {
                w.write_all(&[3u8])?;
                for &v in t {
                    // Below 2^31 the `int` and `uint` encodings of v coincide.
                    w.write_all(&if big {
                        v.to_be_bytes()
                    } else {
                        v.to_le_bytes()
                    })?;
                }
            }
        }
    }
    Ok(())
}

/// Write `mesh` to `path` as binary little-endian PLY, atomically.
pub fn write_mesh(path: &Path, mesh: &TriMesh) -> Result<()> {
    write_mesh_as(path, mesh, PlyEncoding::BinaryLittleEndian)
}

/// Write `mesh` to `path` as PLY with the given encoding, atomically. The
/// mesh is validated first.
pub fn write_mesh_as(path: &Path, mesh: &TriMesh, encoding: PlyEncoding) -> Result<()> {
    write_validated(path, mesh, |w, m| write_to(w, m, encoding))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::test_support::{assert_round_trip, bad_file_message};
    use crate::mesh::shapes::{icosphere, torus};

    fn p() -> &'static Path {
        Path::new("test.ply")
    }

    fn err(bytes: &[u8]) -> String {
        bad_file_message(parse(p(), bytes))
    }

    fn to_bytes(m: &TriMesh, enc: PlyEncoding) -> Vec<u8> {
        let mut v = Vec::new();
        write_to(&mut v, m, enc).unwrap();
        v
    }

    const ENCODINGS: [PlyEncoding; 3] = [
        PlyEncoding::Ascii,
        PlyEncoding::BinaryLittleEndian,
        PlyEncoding::BinaryBigEndian,
    ];

    #[test]
    fn round_trip_is_exact_in_every_encoding() {
        let meshes = [icosphere(2, 99.5), torus(3.0, 1.25, 11, 7)];
        for enc in ENCODINGS {
            let tag = format!("ply-{enc:?}");
            let write = |f: &Path, m: &TriMesh| write_mesh_as(f, m, enc);
            assert_round_trip(&tag, "t.ply", &meshes, write, read_mesh);
        }
    }

    /// Hand-assembled binary file with float coordinates, extra properties,
    /// an extra element, `vertex_index`, uint indices and a quad.
    fn foreign_binary(big: bool, nan: bool) -> Vec<u8> {
        let fmt = if big {
            "binary_big_endian"
        } else {
            "binary_little_endian"
        };
        let mut b = format!(
            "ply\r\nformat {fmt} 1.0\r\ncomment made by hand\r\nobj_info none\r\n\
             element vertex 4\r\nproperty float x\r\nproperty float y\r\nproperty uchar red\r\n\
             property float z\r\nproperty list uchar float extra\r\n\
             element face 1\r\nproperty list int uint vertex_index\r\nproperty short flag\r\n\
             element edge 1\r\nproperty int a\r\nproperty int b\r\nend_header\r\n"
        )
        .into_bytes();
        let f32b = |x: f32| {
            if big {
                x.to_be_bytes()
            } else {
                x.to_le_bytes()
            }
        };
        let u32b = |x: u32| {
            if big {
                x.to_be_bytes()
            } else {
                x.to_le_bytes()
            }
        };
        for (i, q) in [[0f32, 0., 0.], [1., 0., 0.], [1., 1., 0.], [0., 1., 0.]]
            .iter()
            .enumerate()
        {
            b.extend(f32b(q[0]));
            b.extend(f32b(q[1]));
            b.push(200);
            b.extend(f32b(if nan && i == 2 { f32::NAN } else { q[2] }));
            b.push(2);
            b.extend(f32b(0.5));
            b.extend(f32b(0.25));
        }
        b.extend(u32b(4)); // int count 4
        for v in [0u32, 1, 2, 3] {
            b.extend(u32b(v));
        }
        b.extend(if big {
            7i16.to_be_bytes()
        } else {
            7i16.to_le_bytes()
        });
        b.extend(u32b(0));
        b.extend(u32b(1));
        b
    }

    #[test]
    fn reads_foreign_layouts() {
        for big in [false, true] {
            let m = parse(p(), &foreign_binary(big, false)).unwrap();
            assert_eq!(
                m.positions,
                vec![[0., 0., 0.], [1., 0., 0.], [1., 1., 0.], [0., 1., 0.]]
            );
            assert_eq!(m.faces, vec![[0, 1, 2], [0, 2, 3]]);
        }
        let text = b"ply\nformat ascii 1.0\nelement vertex 3\nproperty double z\nproperty double y\nproperty double x\n\
                     property uchar alpha\nelement face 1\nproperty uchar flags\nproperty list uchar int vertex_indices\n\
                     end_header\n3 2 1 9\n\n0 0 0 9\n1 1 1 9\n5 3 0 1 2\n";
        let m = parse(p(), text).unwrap();
        assert_eq!(m.positions[0], [1.0, 2.0, 3.0]);
        assert_eq!(m.faces, vec![[0, 1, 2]]);
    }

    #[test]
    fn bad_input_names_element_and_expectation() {
        let m = icosphere(1, 1.0);
        // Truncated binary data: every cut point gives an error, never a panic.
        for enc in [
            PlyEncoding::BinaryLittleEndian,
            PlyEncoding::BinaryBigEndian,
        ] {
            let b = to_bytes(&m, enc);
            let body = b.windows(11).position(|w| w == b"end_header\n").unwrap() + 11;
            for cut in [0, 3, body - 1, body, body + 5, b.len() - 13, b.len() - 1] {
                assert!(parse(p(), &b[..cut]).is_err(), "cut {cut}");
            }
            let e = err(&b[..b.len() - 1]);
            assert!(e.contains("header") && e.contains("need at least"), "{e}");
        }
        // A truncated face list that passes the size check is caught in the data.
        let mut b = to_bytes(&m, PlyEncoding::BinaryLittleEndian);
        let last = b.len() - 13;
        b[last] = 4; // last face claims 4 corners: one index short
        let e = err(&b);
        assert!(e.contains("face 79") && e.contains("ends inside"), "{e}");
        // Truncated ASCII.
        let t = to_bytes(&m, PlyEncoding::Ascii);
        let cut = t.len() - 20;
        let e = err(&t[..cut]);
        assert!(
            e.contains("header") || e.contains("end of file") || e.contains("line"),
            "{e}"
        );
        // NaN coordinate, binary and ASCII.
        let e = err(&foreign_binary(false, true));
        assert!(e.contains("vertex 2") && e.contains("non-finite"), "{e}");
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\n\
                      element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n1 0 nan\n0 1 0\n3 0 1 2\n");
        assert!(e.contains("line 11") && e.contains("non-finite"), "{e}");
        // Index out of range and negative index.
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\n\
                      element face 2\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n1 0 0\n0 1 0\n3 0 1 2\n3 0 1 3\n");
        assert!(e.contains("face 1") && e.contains("index 3"), "{e}");
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\n\
                      element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n1 0 0\n0 1 0\n3 0 -1 2\n");
        assert!(e.contains("line 13") && e.contains("-1"), "{e}");
        // Wrong counts: a huge declared count is refused before allocating.
        let e = err(b"ply\nformat binary_little_endian 1.0\nelement vertex 4000000000000\nproperty float x\nproperty float y\n\
                      property float z\nelement face 1\nproperty list uchar int vertex_indices\nend_header\n\0\0\0\0");
        assert!(e.contains("header") && e.contains("need at least"), "{e}");
        // Too many values on an ASCII line (count mismatch).
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\n\
                      element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n1 0 0 5\n0 1 0\n3 0 1 2\n");
        assert!(e.contains("line 11") && e.contains("more values"), "{e}");
        // An element without properties is empty however large its count
        // (no loop over its items), and the mesh after it still reads.
        let mut b = b"ply\nformat binary_little_endian 1.0\nelement nothing 18446744073709551615\n"
            .to_vec();
        let body = to_bytes(&m, PlyEncoding::BinaryLittleEndian);
        b.extend_from_slice(&body[b"ply\nformat binary_little_endian 1.0\n".len()..]);
        assert_eq!(parse(p(), &b).unwrap(), m);
        // Header problems.
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 0\nproperty float x\nproperty float y\nproperty float z\n\
                      element face 0\nproperty list uchar int vertex_indices\nend_header\n");
        assert!(e.contains("non-empty"), "{e}");
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\nproperty float y\nend_header\n0 0\n");
        assert!(e.contains("`z`"), "{e}");
        let e = err(b"ply\nformat ascii 2.0\nend_header\n");
        assert!(e.contains("version"), "{e}");
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 1\nproperty quad x\nend_header\n");
        assert!(e.contains("`quad`"), "{e}");
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\n");
        assert!(e.contains("end_header"), "{e}");
        let e = err(b"PLY\n");
        assert!(e.contains("`ply`"), "{e}");
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\n\
                      element face 1\nproperty list uchar float vertex_indices\nend_header\n");
        assert!(e.contains("integer"), "{e}");
        let e = err(b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\n\
                      element face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0\n1 0 0\n0 1 0\n2 0 1\n");
        assert!(e.contains("line 13") && e.contains("2 corners"), "{e}");
    }
}
