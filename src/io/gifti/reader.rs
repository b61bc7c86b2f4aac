//! GIFTI reader: the bytes of a `.gii` file to a [`Gifti`].
//!
//! In: the file's bytes and its path (for messages and for resolving
//! `ExternalFileBinary` data). Out: a [`Gifti`] whose arrays are row-major,
//! native byte order, with shapes checked. What stays true: XML is read with
//! a streaming parser (quick-xml) and never fetches or expands anything; the
//! usual `<!DOCTYPE GIFTI SYSTEM "...gifti.dtd">` line is accepted (and not
//! fetched), but any internal DTD subset, in particular one declaring
//! entities, is refused, and a reference to any entity other than the five
//! predefined ones is refused. External data files must sit in the same
//! folder as the GIFTI file (no absolute paths, no sub-folders, no `..`, no
//! symbolic links). Every failure is an [`Error::BadFile`] naming the file,
//! the element (e.g. `DataArray 1 (NIFTI_INTENT_TRIANGLE)`) and what was
//! expected. Follows "GIFTI Surface Data Format Version 1.0" (NIfTI Data
//! Format Working Group, 2011); lenient where nibabel is (empty
//! `ExternalFileOffset`, missing `Endian` taken as little-endian, label
//! `Index` read as `Key`, the `GIFTI_ENCODING_*` / `GIFTI_ENDIAN_*` spellings
//! of older writers). ASCII data in a `ColumnMajorOrder` array is read as
//! the standard says, values in the declared index order (nibabel 5 writes
//! ASCII text row by row whatever its ordering option).

use super::codec::{self, ByteOrder, IndexOrder};
use super::model::{
    array_element, element_count, CoordTransform, DataArray, DataType, Gifti, Intent, Label,
    LabelTable, MetaData, MAX_DIMS,
};
use crate::error::{Error, Result};
use quick_xml::events::{BytesStart, Event};
use quick_xml::name::QName;
use quick_xml::reader::Reader;
use quick_xml::XmlVersion;
use std::borrow::Cow;
use std::io::{Read, Seek, SeekFrom};
use std::path::{Component, Path};

/// The `Encoding` attribute.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum SourceEncoding {
    Ascii,
    Base64,
    GzipBase64,
    External,
}

/// Attributes of a `<DataArray>` start tag.
struct ArrayHeader {
    intent: Intent,
    dtype: DataType,
    dims: Vec<usize>,
    encoding: SourceEncoding,
    order: ByteOrder,
    index_order: IndexOrder,
    ext_name: String,
    ext_offset: u64,
}

/// Parse the bytes of a GIFTI file. `path` names the file in messages and
/// locates `ExternalFileBinary` data.
pub fn parse(bytes: &[u8], path: &Path) -> Result<Gifti> {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let text = std::str::from_utf8(bytes).map_err(|e| {
        Error::bad_file(
            path,
            "file",
            format!(
                "not UTF-8 text (invalid byte at offset {}); expected an XML GIFTI file",
                e.valid_up_to()
            ),
        )
    })?;
    let mut reader = Reader::from_str(text);
    {
        let c = reader.config_mut();
        c.expand_empty_elements = true;
        c.check_end_names = true;
        c.trim_text(false);
    }
    let mut p = Parser { reader, text, path };
    p.document()
}

struct Parser<'a, 'p> {
    reader: Reader<&'a [u8]>,
    text: &'a str,
    path: &'p Path,
}

fn is_blank(s: &str) -> bool {
    s.bytes().all(|b| b.is_ascii_whitespace())
}

fn name_of(e: &BytesStart<'_>) -> String {
    e.name().as_ref().to_string()
}

impl<'a> Parser<'a, '_> {
    fn bad(&self, element: impl Into<String>, message: impl Into<String>) -> Error {
        Error::bad_file(self.path, element, message)
    }

    /// 1-based line of byte offset `pos`.
    fn line_at(&self, pos: u64) -> usize {
        let pos = usize::try_from(pos)
            .unwrap_or(usize::MAX)
            .min(self.text.len());
        self.text
            .as_bytes()
            .get(..pos)
            .map_or(0, |b| b.iter().filter(|&&c| c == b'\n').count())
            + 1
    }

    fn next(&mut self) -> Result<Event<'a>> {
        match self.reader.read_event() {
            Ok(e) => Ok(e),
            Err(e) => {
                let line = self.line_at(self.reader.error_position());
                Err(self.bad(
                    format!("XML line {line}"),
                    format!("{e}; expected well-formed XML"),
                ))
            }
        }
    }

    fn truncated(&self, inside: &str) -> Error {
        self.bad(
            inside.to_string(),
            format!("the file ends inside <{inside}>; expected its closing tag (truncated file?)"),
        )
    }

    fn document(&mut self) -> Result<Gifti> {
        loop {
            match self.next()? {
                Event::Decl(_) | Event::Comment(_) | Event::PI(_) => {}
                Event::Text(t) if is_blank(&t) => {}
                Event::DocType(d) => self.check_doctype(&d)?,
                Event::Start(e) => {
                    if e.name().as_ref() != "GIFTI" {
                        return Err(self.bad(
                            "root element",
                            format!(
                                "the root element is <{}>; expected <GIFTI> (not a GIFTI file)",
                                name_of(&e)
                            ),
                        ));
                    }
                    let g = self.gifti(&e)?;
                    self.trailer()?;
                    return Ok(g);
                }
                Event::Eof => {
                    return Err(self.bad(
                        "file",
                        "no <GIFTI> element; expected an XML GIFTI file",
                    ))
                }
                _ => {
                    return Err(self.bad(
                        "file",
                        "content before any element; expected an XML GIFTI file starting with <?xml or <GIFTI",
                    ))
                }
            }
        }
    }

    /// Accept `<!DOCTYPE GIFTI SYSTEM "...">` / `PUBLIC`; refuse any internal subset.
    fn check_doctype(&self, content: &str) -> Result<()> {
        if content.contains("<!ENTITY") {
            return Err(self.bad(
                "DOCTYPE",
                "the document declares entities; refused (entities are never expanded). Expected at most the plain <!DOCTYPE GIFTI SYSTEM \"...gifti.dtd\"> line",
            ));
        }
        if content.contains('[') {
            return Err(self.bad(
                "DOCTYPE",
                "the document has an internal DTD subset; refused. Expected at most the plain <!DOCTYPE GIFTI SYSTEM \"...gifti.dtd\"> line",
            ));
        }
        let root = content.split_ascii_whitespace().next().unwrap_or("");
        if root != "GIFTI" {
            return Err(self.bad(
                "DOCTYPE",
                format!("the DOCTYPE names root {root:?}; expected GIFTI (not a GIFTI file)"),
            ));
        }
        Ok(())
    }

    /// After `</GIFTI>`: only white space, comments and processing instructions.
    fn trailer(&mut self) -> Result<()> {
        loop {
            match self.next()? {
                Event::Eof => return Ok(()),
                Event::Comment(_) | Event::PI(_) => {}
                Event::Text(t) if is_blank(&t) => {}
                _ => {
                    return Err(self.bad(
                        "file",
                        "content after </GIFTI>; expected the end of the file",
                    ))
                }
            }
        }
    }

    /// Attribute `key` of `e`, with predefined entities and character references resolved.
    fn attr(&self, e: &BytesStart<'_>, key: &str, element: &str) -> Result<Option<String>> {
        for a in e.attributes() {
            let a = a.map_err(|err| {
                self.bad(
                    element.to_string(),
                    format!("malformed attribute ({err}); expected name=\"value\""),
                )
            })?;
            if a.key.as_ref() == key {
                let v = a.normalized_value(XmlVersion::Implicit1_0).map_err(|err| {
                    self.bad(
                        element.to_string(),
                        format!(
                            "attribute {key}: {err}; expected plain text (only the five predefined XML entities and character references are accepted; entities are never expanded)"
                        ),
                    )
                })?;
                return Ok(Some(v.into_owned()));
            }
        }
        Ok(None)
    }

    /// Skip an element we do not know, with everything inside it.
    fn skip(&mut self, e: &BytesStart<'_>) -> Result<()> {
        let name = e.name().as_ref().to_string();
        let shown = name_of(e);
        self.reader.read_to_end(QName(&name)).map_err(|err| {
            self.bad(
                shown,
                format!("{err}; expected a well-formed element (truncated file?)"),
            )
        })?;
        Ok(())
    }

    /// The character content of the current element up to its end tag.
    /// `element` names it in messages.
    fn text_content(&mut self, element: &str) -> Result<Cow<'a, str>> {
        let mut out: Option<Cow<'a, str>> = None;
        fn push<'a>(out: &mut Option<Cow<'a, str>>, piece: Cow<'a, str>) {
            match out.take() {
                None => *out = Some(piece),
                Some(prev) => {
                    let mut s = prev.into_owned();
                    s.push_str(&piece);
                    *out = Some(Cow::Owned(s));
                }
            }
        }
        loop {
            match self.next()? {
                Event::Text(t) => push(&mut out, t.xml10_content()),
                Event::CData(c) => push(&mut out, c.into_inner()),
                Event::GeneralRef(r) => {
                    let piece = self.resolve_ref(&r, element)?;
                    push(&mut out, Cow::Owned(piece));
                }
                Event::Comment(_) | Event::PI(_) => {}
                Event::End(_) => return Ok(out.unwrap_or(Cow::Borrowed(""))),
                Event::Start(e) => {
                    return Err(self.bad(
                        element.to_string(),
                        format!("unexpected element <{}>; expected text", name_of(&e)),
                    ))
                }
                Event::Eof => return Err(self.truncated(element)),
                _ => return Err(self.bad(element.to_string(), "unexpected markup; expected text")),
            }
        }
    }

    fn resolve_ref(&self, r: &quick_xml::events::BytesRef<'_>, element: &str) -> Result<String> {
        let name: &str = r;
        if r.is_char_ref() {
            return match r.resolve_char_ref() {
                Ok(Some(c)) => Ok(c.to_string()),
                _ => Err(self.bad(
                    element.to_string(),
                    format!("invalid character reference &{name};; expected a valid code point"),
                )),
            };
        }
        let s = match name {
            "lt" => "<",
            "gt" => ">",
            "amp" => "&",
            "apos" => "'",
            "quot" => "\"",
            _ => {
                return Err(self.bad(
                    element.to_string(),
                    format!(
                        "reference to entity &{name};; refused (entities are never expanded; only &lt; &gt; &amp; &apos; &quot; and character references are accepted)"
                    ),
                ))
            }
        };
        Ok(s.to_string())
    }

    fn gifti(&mut self, e: &BytesStart<'_>) -> Result<Gifti> {
        let mut g = Gifti {
            version: self
                .attr(e, "Version", "GIFTI")?
                .unwrap_or_else(|| "1.0".into()),
            ..Gifti::default()
        };
        let declared = match self.attr(e, "NumberOfDataArrays", "GIFTI")? {
            Some(s) => Some(s.trim().parse::<usize>().map_err(|_| {
                self.bad(
                    "GIFTI",
                    format!("NumberOfDataArrays is {s:?}; expected a non-negative integer"),
                )
            })?),
            None => None,
        };
        let mut saw_table = false;
        loop {
            match self.next()? {
                Event::Start(c) => match c.name().as_ref() {
                    "MetaData" => g.meta = self.metadata("GIFTI MetaData")?,
                    "LabelTable" => {
                        if saw_table {
                            return Err(self
                                .bad("LabelTable", "a second <LabelTable>; expected at most one"));
                        }
                        saw_table = true;
                        g.label_table = self.label_table()?;
                    }
                    "DataArray" => {
                        let index = g.arrays.len();
                        let a = self.data_array(&c, index)?;
                        g.arrays.push(a);
                    }
                    _ => self.skip(&c)?,
                },
                Event::End(_) => break,
                Event::Text(t) if is_blank(&t) => {}
                Event::Comment(_) | Event::PI(_) => {}
                Event::Eof => return Err(self.truncated("GIFTI")),
                _ => {
                    return Err(self.bad(
                        "GIFTI",
                        "unexpected text; expected MetaData, LabelTable and DataArray elements",
                    ))
                }
            }
        }
        if let Some(n) = declared {
            if n != g.arrays.len() {
                return Err(self.bad(
                    "GIFTI",
                    format!(
                        "NumberOfDataArrays is {n} but the file has {} DataArray elements; expected them to agree (truncated file?)",
                        g.arrays.len()
                    ),
                ));
            }
        }
        Ok(g)
    }

    fn metadata(&mut self, element: &str) -> Result<MetaData> {
        let mut md = MetaData::new();
        loop {
            match self.next()? {
                Event::Start(c) if c.name().as_ref() == "MD" => {
                    let (n, v) = self.md(&format!("{element} MD {}", md.len()))?;
                    md.0.push((n, v));
                }
                Event::Start(c) => self.skip(&c)?,
                Event::End(_) => return Ok(md),
                Event::Text(t) if is_blank(&t) => {}
                Event::Comment(_) | Event::PI(_) => {}
                Event::Eof => return Err(self.truncated(element)),
                _ => {
                    return Err(self.bad(
                        element.to_string(),
                        "unexpected text; expected <MD> elements",
                    ))
                }
            }
        }
    }

    fn md(&mut self, element: &str) -> Result<(String, String)> {
        let mut name = None;
        let mut value = None;
        let el = element;
        loop {
            match self.next()? {
                Event::Start(c) => match c.name().as_ref() {
                    "Name" => name = Some(self.text_content(el)?.trim().to_string()),
                    "Value" => value = Some(self.text_content(el)?.trim().to_string()),
                    _ => self.skip(&c)?,
                },
                Event::End(_) => break,
                Event::Text(t) if is_blank(&t) => {}
                Event::Comment(_) | Event::PI(_) => {}
                Event::Eof => return Err(self.truncated(element)),
                _ => {
                    return Err(self.bad(
                        element.to_string(),
                        "unexpected text in <MD>; expected <Name> and <Value>",
                    ))
                }
            }
        }
        let name = name.ok_or_else(|| {
            self.bad(
                element.to_string(),
                "an <MD> without <Name>; expected <Name> and <Value>",
            )
        })?;
        Ok((name, value.unwrap_or_default()))
    }

    fn label_table(&mut self) -> Result<LabelTable> {
        let mut t = LabelTable::default();
        loop {
            match self.next()? {
                Event::Start(c) if c.name().as_ref() == "Label" => {
                    let el = format!("LabelTable Label {}", t.labels.len());
                    let key_text = match self.attr(&c, "Key", &el)? {
                        Some(k) => k,
                        None => self.attr(&c, "Index", &el)?.ok_or_else(|| {
                            self.bad(el.clone(), "no Key attribute; expected Key=\"<integer>\"")
                        })?,
                    };
                    let key = key_text.trim().parse::<i32>().map_err(|_| {
                        self.bad(
                            el.clone(),
                            format!("Key is {key_text:?}; expected a 32-bit integer"),
                        )
                    })?;
                    let mut comps = [None; 4];
                    for (i, k) in ["Red", "Green", "Blue", "Alpha"].iter().enumerate() {
                        if let Some(v) = self.attr(&c, k, &el)? {
                            let x = v.trim().parse::<f64>().ok().filter(|x| x.is_finite());
                            comps[i] = Some(x.ok_or_else(|| {
                                self.bad(
                                    el.clone(),
                                    format!("{k} is {v:?}; expected a number from 0 to 1"),
                                )
                            })?);
                        }
                    }
                    let rgba = if comps.iter().any(Option::is_some) {
                        Some([
                            comps[0].unwrap_or(0.0),
                            comps[1].unwrap_or(0.0),
                            comps[2].unwrap_or(0.0),
                            comps[3].unwrap_or(1.0),
                        ])
                    } else {
                        None
                    };
                    let name = self.text_content(&el)?.trim().to_string();
                    t.labels.push(Label { key, name, rgba });
                }
                Event::Start(c) => self.skip(&c)?,
                Event::End(_) => break,
                Event::Text(x) if is_blank(&x) => {}
                Event::Comment(_) | Event::PI(_) => {}
                Event::Eof => return Err(self.truncated("LabelTable")),
                _ => {
                    return Err(self.bad("LabelTable", "unexpected text; expected <Label> elements"))
                }
            }
        }
        if let Some(k) = t.duplicate_key() {
            return Err(self.bad(
                "LabelTable",
                format!("key {k} appears twice; expected unique keys"),
            ));
        }
        Ok(t)
    }

    fn header(&self, e: &BytesStart<'_>, index: usize) -> Result<ArrayHeader> {
        let plain = format!("DataArray {index}");
        let intent = Intent::from_name(
            &self
                .attr(e, "Intent", &plain)?
                .unwrap_or_else(|| "NIFTI_INTENT_NONE".into()),
        );
        let el = array_element(index, &intent);
        let need = |key: &str, expected: &str| -> Result<String> {
            self.attr(e, key, &el)?.ok_or_else(|| {
                self.bad(
                    el.clone(),
                    format!("no {key} attribute; expected {key}=\"{expected}\""),
                )
            })
        };
        let dt = need("DataType", "NIFTI_TYPE_FLOAT32")?;
        let dtype = DataType::from_name(&dt).ok_or_else(|| {
            self.bad(
                el.clone(),
                format!(
                    "unsupported DataType {dt:?}; expected NIFTI_TYPE_FLOAT32, NIFTI_TYPE_INT32, NIFTI_TYPE_UINT8 or NIFTI_TYPE_FLOAT64"
                ),
            )
        })?;
        let nd_text = need("Dimensionality", "2")?;
        let nd = nd_text
            .trim()
            .parse::<usize>()
            .ok()
            .filter(|n| (1..=MAX_DIMS).contains(n))
            .ok_or_else(|| {
                self.bad(
                    el.clone(),
                    format!(
                        "Dimensionality is {nd_text:?}; expected an integer from 1 to {MAX_DIMS}"
                    ),
                )
            })?;
        let mut dims = Vec::with_capacity(nd);
        for d in 0..nd {
            let key = format!("Dim{d}");
            let v = need(&key, "<number of entries>")?;
            let n = v.trim().parse::<usize>().map_err(|_| {
                self.bad(
                    el.clone(),
                    format!("{key} is {v:?}; expected a non-negative integer"),
                )
            })?;
            dims.push(n);
        }
        let enc = need("Encoding", "GZipBase64Binary")?;
        let encoding = match enc.trim() {
            // The GIFTI_ENCODING_* spellings occur in files of older writers.
            "ASCII" | "GIFTI_ENCODING_ASCII" => SourceEncoding::Ascii,
            "Base64Binary" | "GIFTI_ENCODING_B64BIN" => SourceEncoding::Base64,
            "GZipBase64Binary" | "GIFTI_ENCODING_B64GZ" => SourceEncoding::GzipBase64,
            "ExternalFileBinary" | "GIFTI_ENCODING_EXTBIN" => SourceEncoding::External,
            other => {
                return Err(self.bad(
                    el,
                    format!(
                        "unknown Encoding {other:?}; expected ASCII, Base64Binary, GZipBase64Binary or ExternalFileBinary"
                    ),
                ))
            }
        };
        let order = match self.attr(e, "Endian", &el)?.as_deref().map(str::trim) {
            None | Some("LittleEndian") | Some("GIFTI_ENDIAN_LITTLE") => ByteOrder::LittleEndian,
            Some("BigEndian") | Some("GIFTI_ENDIAN_BIG") => ByteOrder::BigEndian,
            Some(other) => {
                return Err(self.bad(
                    el,
                    format!("unknown Endian {other:?}; expected LittleEndian or BigEndian"),
                ))
            }
        };
        let index_order = match self
            .attr(e, "ArrayIndexingOrder", &el)?
            .as_deref()
            .map(str::trim)
        {
            None | Some("RowMajorOrder") => IndexOrder::RowMajor,
            Some("ColumnMajorOrder") => IndexOrder::ColumnMajor,
            Some(other) => {
                return Err(self.bad(
                    el,
                    format!(
                        "unknown ArrayIndexingOrder {other:?}; expected RowMajorOrder or ColumnMajorOrder"
                    ),
                ))
            }
        };
        let ext_name = self.attr(e, "ExternalFileName", &el)?.unwrap_or_default();
        let off_text = self.attr(e, "ExternalFileOffset", &el)?.unwrap_or_default();
        let ext_offset = if off_text.trim().is_empty() {
            0
        } else {
            off_text.trim().parse::<u64>().map_err(|_| {
                self.bad(
                    el.clone(),
                    format!("ExternalFileOffset is {off_text:?}; expected a byte offset"),
                )
            })?
        };
        Ok(ArrayHeader {
            intent,
            dtype,
            dims,
            encoding,
            order,
            index_order,
            ext_name,
            ext_offset,
        })
    }

    fn data_array(&mut self, e: &BytesStart<'_>, index: usize) -> Result<DataArray> {
        let h = self.header(e, index)?;
        let el = array_element(index, &h.intent);
        let mut meta = MetaData::new();
        let mut transforms = Vec::new();
        let mut data = None;
        loop {
            match self.next()? {
                Event::Start(c) => match c.name().as_ref() {
                    "MetaData" => meta = self.metadata(&format!("{el} MetaData"))?,
                    "CoordinateSystemTransformMatrix" => {
                        let t = self.transform(&format!(
                            "{el} CoordinateSystemTransformMatrix {}",
                            transforms.len()
                        ))?;
                        transforms.push(t);
                    }
                    "Data" => {
                        if data.is_some() {
                            return Err(self.bad(el, "a second <Data>; expected one"));
                        }
                        let text = self.text_content(&format!("{el} Data"))?;
                        data = Some(self.decode(&h, &text, &el)?);
                    }
                    _ => self.skip(&c)?,
                },
                Event::End(_) => break,
                Event::Text(t) if is_blank(&t) => {}
                Event::Comment(_) | Event::PI(_) => {}
                Event::Eof => return Err(self.truncated(&el)),
                _ => {
                    return Err(self.bad(
                        el,
                        "unexpected text; expected MetaData, CoordinateSystemTransformMatrix and Data elements",
                    ))
                }
            }
        }
        let data = data.ok_or_else(|| self.bad(el.clone(), "no <Data> element; expected one"))?;
        let a = DataArray {
            intent: h.intent,
            dims: h.dims,
            data,
            meta,
            transforms,
        };
        a.check_shape().map_err(|err| err.in_file(self.path, &el))?;
        Ok(a)
    }

    fn transform(&mut self, element: &str) -> Result<CoordTransform> {
        let mut t = CoordTransform::identity_unknown();
        let mut saw_matrix = false;
        loop {
            match self.next()? {
                Event::Start(c) => match c.name().as_ref() {
                    "DataSpace" => t.data_space = self.text_content(element)?.trim().into(),
                    "TransformedSpace" => {
                        t.transformed_space = self.text_content(element)?.trim().into()
                    }
                    "MatrixData" => {
                        let text = self.text_content(element)?;
                        let v: Vec<Option<f64>> = text
                            .split_ascii_whitespace()
                            .map(|s| s.parse::<f64>().ok().filter(|x| x.is_finite()))
                            .collect();
                        if v.len() != 16 || v.iter().any(Option::is_none) {
                            return Err(self.bad(
                                element.to_string(),
                                format!(
                                    "MatrixData has {} entries ({} not finite numbers); expected 16 finite numbers (4x4, row by row)",
                                    v.len(),
                                    v.iter().filter(|x| x.is_none()).count()
                                ),
                            ));
                        }
                        for (k, x) in v.iter().enumerate() {
                            t.matrix[k / 4][k % 4] = x.unwrap_or(0.0);
                        }
                        saw_matrix = true;
                    }
                    _ => self.skip(&c)?,
                },
                Event::End(_) => break,
                Event::Text(x) if is_blank(&x) => {}
                Event::Comment(_) | Event::PI(_) => {}
                Event::Eof => return Err(self.truncated(element)),
                _ => {
                    return Err(self.bad(
                        element.to_string(),
                        "unexpected text; expected DataSpace, TransformedSpace and MatrixData",
                    ))
                }
            }
        }
        if !saw_matrix {
            return Err(self.bad(
                element.to_string(),
                "no <MatrixData>; expected a 4x4 matrix",
            ));
        }
        Ok(t)
    }

    /// The payload of `<Data>` to values (row-major, native byte order).
    fn decode(&self, h: &ArrayHeader, text: &str, el: &str) -> Result<super::model::Data> {
        let n = element_count(&h.dims).ok_or_else(|| {
            self.bad(
                el.to_string(),
                format!(
                    "dimensions {:?} overflow; expected a size that fits in memory",
                    h.dims
                ),
            )
        })?;
        let nbytes = n.checked_mul(h.dtype.size()).ok_or_else(|| {
            self.bad(
                el.to_string(),
                format!(
                    "dimensions {:?} overflow; expected a size that fits in memory",
                    h.dims
                ),
            )
        })?;
        let declared = || {
            format!(
                "{} bytes ({} values of {} bytes, dimensions {:?})",
                nbytes,
                n,
                h.dtype.size(),
                h.dims
            )
        };
        let data = match h.encoding {
            SourceEncoding::Ascii => codec::parse_ascii(text, h.dtype, n)
                .map_err(|m| self.bad(el.to_string(), format!("ASCII data: {m}")))?,
            SourceEncoding::Base64 | SourceEncoding::GzipBase64 => {
                let enc_name = if h.encoding == SourceEncoding::GzipBase64 {
                    "GZipBase64Binary"
                } else {
                    "Base64Binary"
                };
                let raw = codec::base64_decode(text)
                    .map_err(|m| self.bad(el.to_string(), format!("{enc_name} data: {m}")))?;
                let bytes = if h.encoding == SourceEncoding::GzipBase64 {
                    codec::inflate_exact(&raw, nbytes).map_err(|m| {
                        self.bad(el.to_string(), format!("GZipBase64Binary data: {m}"))
                    })?
                } else {
                    if raw.len() != nbytes {
                        return Err(self.bad(
                            el.to_string(),
                            format!(
                                "Base64Binary data decodes to {} bytes; expected {}",
                                raw.len(),
                                declared()
                            ),
                        ));
                    }
                    raw
                };
                codec::from_bytes(&bytes, h.dtype, h.order)
            }
            SourceEncoding::External => {
                let bytes = self.external(h, nbytes, el)?;
                codec::from_bytes(&bytes, h.dtype, h.order)
            }
        };
        Ok(match h.index_order {
            IndexOrder::RowMajor => data,
            IndexOrder::ColumnMajor => codec::column_to_row_major(data, &h.dims),
        })
    }

    /// Read `nbytes` raw bytes of an `ExternalFileBinary` array.
    fn external(&self, h: &ArrayHeader, nbytes: usize, el: &str) -> Result<Vec<u8>> {
        let name = h.ext_name.trim();
        let rel = Path::new(name);
        let mut comps = rel.components();
        let plain = matches!(
            (comps.next(), comps.next()),
            (Some(Component::Normal(_)), None)
        ) && !name.contains('/')
            && !name.contains('\\');
        if name.is_empty() || !plain {
            return Err(self.bad(
                el.to_string(),
                format!(
                    "ExternalFileName {name:?} is not a plain file name; expected a file in the GIFTI file's own folder (absolute paths, sub-folders and '..' are refused)"
                ),
            ));
        }
        let full = self
            .path
            .parent()
            .map_or_else(|| rel.to_path_buf(), |d| d.join(rel));
        let meta = std::fs::symlink_metadata(&full).map_err(|err| {
            self.bad(
                el.to_string(),
                format!("ExternalFileName {name:?} cannot be opened ({err}); expected a file beside the GIFTI file"),
            )
        })?;
        if !meta.file_type().is_file() {
            return Err(self.bad(
                el.to_string(),
                format!("ExternalFileName {name:?} is not a regular file (symbolic links are refused); expected a file beside the GIFTI file"),
            ));
        }
        let end = h.ext_offset.checked_add(nbytes as u64);
        if end.is_none_or(|end| end > meta.len()) {
            return Err(self.bad(
                el.to_string(),
                format!(
                    "external file {name:?} has {} bytes; expected at least {} bytes at offset {}",
                    meta.len(),
                    nbytes,
                    h.ext_offset
                ),
            ));
        }
        let mut f = std::fs::File::open(&full).map_err(|err| Error::io(&full, err))?;
        f.seek(SeekFrom::Start(h.ext_offset))
            .map_err(|err| Error::io(&full, err))?;
        let mut out = Vec::with_capacity(nbytes);
        f.take(nbytes as u64)
            .read_to_end(&mut out)
            .map_err(|err| Error::io(&full, err))?;
        if out.len() != nbytes {
            return Err(self.bad(
                el.to_string(),
                format!(
                    "external file {name:?} gave {} bytes; expected {nbytes}",
                    out.len()
                ),
            ));
        }
        Ok(out)
    }
}
