//! GIFTI writer: a [`Gifti`] to the bytes of a `.gii` file.
//!
//! In: a [`Gifti`] and [`WriteOptions`] (encoding, byte order, index order).
//! Out: UTF-8 XML following "GIFTI Surface Data Format Version 1.0" (NIfTI
//! Data Format Working Group, 2011), with the usual DOCTYPE line naming the
//! GIFTI DTD. What stays true: the same [`Gifti`] and options always give
//! the same bytes (fixed zlib level, no timestamps, attributes in a fixed
//! order); every array's shape is checked before anything is written, and
//! text that XML 1.0 cannot carry is refused with [`Error::Invalid`]; files
//! are replaced atomically (temporary file, then rename), so a failure
//! never leaves half a file.

use super::codec::{self, ByteOrder, IndexOrder};
use super::model::{array_element, CoordTransform, Gifti, Intent, MetaData};
use crate::error::{Error, Result};
use crate::io::atomic::write_bytes;
use std::io::Write;
use std::path::Path;

/// How the `<Data>` of every array is encoded on write.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Encoding {
    /// Numbers as text, one row per line.
    Ascii,
    /// Raw bytes in Base64.
    Base64Binary,
    /// zlib-compressed bytes in Base64 (the default).
    #[default]
    GZipBase64Binary,
}

impl Encoding {
    /// The attribute value.
    pub fn as_str(self) -> &'static str {
        match self {
            Encoding::Ascii => "ASCII",
            Encoding::Base64Binary => "Base64Binary",
            Encoding::GZipBase64Binary => "GZipBase64Binary",
        }
    }
}

/// Options of [`write()`]: the default is GZipBase64Binary, little-endian, row-major.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct WriteOptions {
    /// Encoding of every array's data.
    pub encoding: Encoding,
    /// Byte order of binary data (ignored for ASCII, but still recorded).
    pub byte_order: ByteOrder,
    /// Index order of multi-dimensional arrays.
    pub index_order: IndexOrder,
}

/// The DOCTYPE line of GIFTI files (the DTD is named, never fetched).
const DOCTYPE: &str =
    "<!DOCTYPE GIFTI SYSTEM \"http://www.nitrc.org/frs/download.php/115/gifti.dtd\">";

/// Write `g` to `path` atomically.
pub fn write(path: &Path, g: &Gifti, opts: &WriteOptions) -> Result<()> {
    let bytes = to_bytes(g, opts)?;
    write_bytes(path, &bytes)
}

/// Check that `s` can be carried by XML 1.0 text; `what` names it in the message.
fn check_text(s: &str, what: &str) -> Result<()> {
    if let Some(c) = s.chars().find(|&c| {
        (c < ' ' && !matches!(c, '\t' | '\n' | '\r')) || c == '\u{FFFE}' || c == '\u{FFFF}'
    }) {
        return Err(Error::Invalid(format!(
            "{what} contains the control character U+{:04X}, which XML 1.0 cannot carry",
            c as u32
        )));
    }
    Ok(())
}

/// Escape text for element content and attribute values.
fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\r' => out.push_str("&#13;"),
            '\t' => out.push_str("&#9;"),
            '\n' => out.push_str("&#10;"),
            c => out.push(c),
        }
    }
    out
}

/// Check everything that could make the output invalid, before writing.
fn validate(g: &Gifti) -> Result<()> {
    check_text(&g.version, "GIFTI Version")?;
    for (n, v) in g.meta.iter() {
        check_text(n, "GIFTI metadata name")?;
        check_text(v, "GIFTI metadata value")?;
    }
    if let Some(k) = g.label_table.duplicate_key() {
        return Err(Error::Invalid(format!(
            "label table key {k} appears twice; expected unique keys"
        )));
    }
    for l in &g.label_table.labels {
        check_text(&l.name, "label name")?;
        if let Some(c) = l.rgba {
            if c.iter().any(|x| !x.is_finite()) {
                return Err(Error::Invalid(format!(
                    "label {} has a non-finite colour component; expected numbers from 0 to 1",
                    l.key
                )));
            }
        }
    }
    for (i, a) in g.arrays.iter().enumerate() {
        let el = array_element(i, &a.intent);
        a.check_shape()
            .map_err(|e| Error::Invalid(format!("{el}: {e}")))?;
        if let Intent::Other(s) = &a.intent {
            if s.is_empty() || s.chars().any(|c| c.is_whitespace()) {
                return Err(Error::Invalid(format!(
                    "{el}: intent {s:?} is not a single word; expected a name like NIFTI_INTENT_TIME_SERIES"
                )));
            }
            check_text(s, &format!("{el} intent"))?;
        }
        for (n, v) in a.meta.iter() {
            check_text(n, &format!("{el} metadata name"))?;
            check_text(v, &format!("{el} metadata value"))?;
        }
        for t in &a.transforms {
            check_text(&t.data_space, &format!("{el} DataSpace"))?;
            check_text(&t.transformed_space, &format!("{el} TransformedSpace"))?;
            if t.matrix.iter().flatten().any(|x| !x.is_finite()) {
                return Err(Error::Invalid(format!(
                    "{el}: coordinate transform has a non-finite entry; expected finite numbers"
                )));
            }
        }
    }
    Ok(())
}

/// The bytes of the GIFTI file for `g` (what [`write()`] writes).
pub fn to_bytes(g: &Gifti, opts: &WriteOptions) -> Result<Vec<u8>> {
    validate(g)?;
    let mut w: Vec<u8> = Vec::new();
    emit(&mut w, g, opts).map_err(|e| Error::Invalid(format!("encoding GIFTI failed: {e}")))?;
    Ok(w)
}

fn emit_meta(w: &mut Vec<u8>, md: &MetaData, indent: &str) -> std::io::Result<()> {
    if md.is_empty() {
        return writeln!(w, "{indent}<MetaData/>");
    }
    writeln!(w, "{indent}<MetaData>")?;
    for (n, v) in md.iter() {
        writeln!(w, "{indent}  <MD>")?;
        writeln!(w, "{indent}    <Name>{}</Name>", esc(n))?;
        writeln!(w, "{indent}    <Value>{}</Value>", esc(v))?;
        writeln!(w, "{indent}  </MD>")?;
    }
    writeln!(w, "{indent}</MetaData>")
}

fn emit_transform(w: &mut Vec<u8>, t: &CoordTransform) -> std::io::Result<()> {
    writeln!(w, "    <CoordinateSystemTransformMatrix>")?;
    writeln!(w, "      <DataSpace>{}</DataSpace>", esc(&t.data_space))?;
    writeln!(
        w,
        "      <TransformedSpace>{}</TransformedSpace>",
        esc(&t.transformed_space)
    )?;
    write!(w, "      <MatrixData>")?;
    for (r, row) in t.matrix.iter().enumerate() {
        if r > 0 {
            write!(w, "\n        ")?;
        }
        let cells: Vec<String> = row.iter().map(|&x| codec::fmt_f64(x)).collect();
        write!(w, "{}", cells.join(" "))?;
    }
    writeln!(w, "</MatrixData>")?;
    writeln!(w, "    </CoordinateSystemTransformMatrix>")
}

fn emit(w: &mut Vec<u8>, g: &Gifti, opts: &WriteOptions) -> std::io::Result<()> {
    writeln!(w, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>")?;
    writeln!(w, "{DOCTYPE}")?;
    writeln!(
        w,
        "<GIFTI Version=\"{}\" NumberOfDataArrays=\"{}\">",
        esc(&g.version),
        g.arrays.len()
    )?;
    emit_meta(w, &g.meta, "  ")?;
    if !g.label_table.is_empty() {
        writeln!(w, "  <LabelTable>")?;
        for l in &g.label_table.labels {
            write!(w, "    <Label Key=\"{}\"", l.key)?;
            if let Some([r, gr, b, a]) = l.rgba {
                write!(
                    w,
                    " Red=\"{}\" Green=\"{}\" Blue=\"{}\" Alpha=\"{}\"",
                    codec::fmt_f64(r),
                    codec::fmt_f64(gr),
                    codec::fmt_f64(b),
                    codec::fmt_f64(a)
                )?;
            }
            writeln!(w, ">{}</Label>", esc(&l.name))?;
        }
        writeln!(w, "  </LabelTable>")?;
    }
    for a in &g.arrays {
        write!(
            w,
            "  <DataArray Intent=\"{}\" DataType=\"{}\" ArrayIndexingOrder=\"{}\" Dimensionality=\"{}\"",
            esc(a.intent.as_str()),
            a.data.data_type().as_str(),
            opts.index_order.as_str(),
            a.dims.len()
        )?;
        for (d, n) in a.dims.iter().enumerate() {
            write!(w, " Dim{d}=\"{n}\"")?;
        }
        writeln!(
            w,
            " Encoding=\"{}\" Endian=\"{}\" ExternalFileName=\"\" ExternalFileOffset=\"\">",
            opts.encoding.as_str(),
            opts.byte_order.as_str()
        )?;
        emit_meta(w, &a.meta, "    ")?;
        for t in &a.transforms {
            emit_transform(w, t)?;
        }
        let reordered;
        let data = match opts.index_order {
            IndexOrder::RowMajor => &a.data,
            IndexOrder::ColumnMajor => {
                reordered = codec::row_to_column_major(&a.data, &a.dims);
                &reordered
            }
        };
        w.write_all(b"    <Data>")?;
        match opts.encoding {
            Encoding::Ascii => {
                // Rows on their own lines; column-major text keeps one value per line.
                let cols = match opts.index_order {
                    IndexOrder::RowMajor => a.cols(),
                    IndexOrder::ColumnMajor => 1,
                };
                w.write_all(b"\n")?;
                codec::write_ascii(w, data, cols)?;
                w.write_all(b"\n    ")?;
            }
            Encoding::Base64Binary => {
                let raw = codec::to_bytes(data, opts.byte_order);
                w.write_all(codec::base64_encode(&raw).as_bytes())?;
            }
            Encoding::GZipBase64Binary => {
                let raw = codec::to_bytes(data, opts.byte_order);
                let z = codec::deflate(&raw)?;
                w.write_all(codec::base64_encode(&z).as_bytes())?;
            }
        }
        writeln!(w, "</Data>")?;
        writeln!(w, "  </DataArray>")?;
    }
    writeln!(w, "</GIFTI>")
}
