//! The payload of a `<Data>` element: bytes and text to typed values and back.
//!
//! In: the element's text (ASCII numbers, Base64, or Base64 of a zlib/gzip
//! stream) or raw bytes of an external file, plus the declared type, byte
//! order, index order and shape. Out: [`Data`] in row-major order and native
//! byte order. What stays true: memory is bounded by the declared size (a
//! compressed stream is read through `Read::take(declared + 1)` and refused
//! when it yields more), and every mismatch comes back as a message saying
//! what was found and what was expected; nothing here panics on file content.
//! Encodings follow "GIFTI Surface Data Format Version 1.0" (NIfTI DFWG,
//! 2011), section "Data"; like nibabel, "GZipBase64Binary" is written as a
//! zlib stream (RFC 1950), and read as zlib or gzip (RFC 1952).

use super::model::{Data, DataType};
use base64::engine::general_purpose::{STANDARD, STANDARD_PAD_INDIFFERENT};
use base64::Engine;
use flate2::read::{MultiGzDecoder, ZlibDecoder};
use flate2::write::ZlibEncoder;
use flate2::Compression;
use std::borrow::Cow;
use std::io::{Read, Write};

/// Byte order of binary data (`Endian` attribute).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ByteOrder {
    /// `LittleEndian` (the default we write).
    #[default]
    LittleEndian,
    /// `BigEndian`.
    BigEndian,
}

impl ByteOrder {
    /// The attribute value.
    pub fn as_str(self) -> &'static str {
        match self {
            ByteOrder::LittleEndian => "LittleEndian",
            ByteOrder::BigEndian => "BigEndian",
        }
    }
}

/// Index order of a multi-dimensional array (`ArrayIndexingOrder` attribute).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum IndexOrder {
    /// `RowMajorOrder`: last index varies fastest (the default we write).
    #[default]
    RowMajor,
    /// `ColumnMajorOrder`: first index varies fastest.
    ColumnMajor,
}

impl IndexOrder {
    /// The attribute value.
    pub fn as_str(self) -> &'static str {
        match self {
            IndexOrder::RowMajor => "RowMajorOrder",
            IndexOrder::ColumnMajor => "ColumnMajorOrder",
        }
    }
}

/// The zlib level we write with: fixed, so equal input gives equal bytes.
/// Level 1: on a 164k-vertex surface it compresses as well as level 6
/// (within 2%) in a sixth of the time (benches/gifti_io.rs, docs/benchmarks.md).
pub const ZLIB_LEVEL: u32 = 1;

/// Base64 text to bytes. White space inside the text is skipped.
pub fn base64_decode(text: &str) -> Result<Vec<u8>, String> {
    let bytes = text.as_bytes();
    let compact: Cow<'_, [u8]> = if bytes.iter().any(|b| b.is_ascii_whitespace()) {
        Cow::Owned(
            bytes
                .iter()
                .copied()
                .filter(|b| !b.is_ascii_whitespace())
                .collect(),
        )
    } else {
        Cow::Borrowed(bytes)
    };
    STANDARD_PAD_INDIFFERENT
        .decode(compact.as_ref())
        .map_err(|e| format!("invalid Base64 ({e}); expected Base64 text (RFC 4648), complete"))
}

/// Bytes to Base64 text (padded, one line).
pub fn base64_encode(bytes: &[u8]) -> String {
    STANDARD.encode(bytes)
}

/// Inflate a zlib (or, when it starts with the gzip magic, gzip) stream that
/// must yield exactly `expected` bytes. Reads at most `expected + 1` bytes.
pub fn inflate_exact(compressed: &[u8], expected: usize) -> Result<Vec<u8>, String> {
    let limit = (expected as u64).saturating_add(1);
    // Deflate expands at most about 1032:1, which caps the first allocation.
    let cap = expected.min(compressed.len().saturating_mul(1032).saturating_add(64));
    let mut out = Vec::with_capacity(cap.min(1 << 30));
    let result = if compressed.starts_with(&[0x1f, 0x8b]) {
        MultiGzDecoder::new(compressed)
            .take(limit)
            .read_to_end(&mut out)
    } else {
        ZlibDecoder::new(compressed)
            .take(limit)
            .read_to_end(&mut out)
    };
    result.map_err(|e| {
        format!("corrupt compressed data ({e}); expected a complete zlib or gzip stream")
    })?;
    if out.len() > expected {
        return Err(format!(
            "decompressed data is larger than the {expected} bytes the dimensions and DataType declare; refused"
        ));
    }
    if out.len() < expected {
        return Err(format!(
            "decompressed data has {} bytes; expected {expected} (dimensions times DataType size)",
            out.len()
        ));
    }
    Ok(out)
}

/// Compress with zlib at [`ZLIB_LEVEL`] (no timestamps: deterministic).
pub fn deflate(bytes: &[u8]) -> std::io::Result<Vec<u8>> {
    let mut enc = ZlibEncoder::new(
        Vec::with_capacity(bytes.len() / 2 + 64),
        Compression::new(ZLIB_LEVEL),
    );
    enc.write_all(bytes)?;
    enc.finish()
}

#[inline]
fn arr4(c: &[u8]) -> [u8; 4] {
    let mut a = [0u8; 4];
    a.copy_from_slice(c);
    a
}

#[inline]
fn arr8(c: &[u8]) -> [u8; 8] {
    let mut a = [0u8; 8];
    a.copy_from_slice(c);
    a
}

/// Raw bytes of `n` values of type `dtype` in byte order `order` to values.
/// The caller has checked that `bytes.len() == n * dtype.size()`.
pub fn from_bytes(bytes: &[u8], dtype: DataType, order: ByteOrder) -> Data {
    let le = order == ByteOrder::LittleEndian;
    match dtype {
        DataType::U8 => Data::U8(bytes.to_vec()),
        DataType::I32 => Data::I32(
            bytes
                .chunks_exact(4)
                .map(|c| {
                    if le {
                        i32::from_le_bytes(arr4(c))
                    } else {
                        i32::from_be_bytes(arr4(c))
                    }
                })
                .collect(),
        ),
        DataType::F32 => Data::F32(
            bytes
                .chunks_exact(4)
                .map(|c| {
                    if le {
                        f32::from_le_bytes(arr4(c))
                    } else {
                        f32::from_be_bytes(arr4(c))
                    }
                })
                .collect(),
        ),
        DataType::F64 => Data::F64(
            bytes
                .chunks_exact(8)
                .map(|c| {
                    if le {
                        f64::from_le_bytes(arr8(c))
                    } else {
                        f64::from_be_bytes(arr8(c))
                    }
                })
                .collect(),
        ),
    }
}

/// Values to raw bytes in byte order `order`.
pub fn to_bytes(data: &Data, order: ByteOrder) -> Vec<u8> {
    let le = order == ByteOrder::LittleEndian;
    macro_rules! bytes_of {
        ($v:expr, $size:expr) => {{
            let mut out = Vec::with_capacity($v.len() * $size);
            for x in $v.iter() {
                if le {
                    out.extend_from_slice(&x.to_le_bytes());
                } else {
                    out.extend_from_slice(&x.to_be_bytes());
                }
            }
            out
        }};
    }
    match data {
        Data::U8(v) => v.clone(),
        Data::I32(v) => bytes_of!(v, 4),
        Data::F32(v) => bytes_of!(v, 4),
        Data::F64(v) => bytes_of!(v, 8),
    }
}

/// Whitespace-separated numbers to `expected` values of type `dtype`.
/// Floats are parsed as `f64` and then rounded to `f32` (as numpy does).
pub fn parse_ascii(text: &str, dtype: DataType, expected: usize) -> Result<Data, String> {
    // Each value takes at least two bytes (digit + separator), which bounds
    // the allocation by the text, not by the declared size.
    let cap = expected.min(text.len() / 2 + 1);
    macro_rules! parse_all {
        ($variant:ident, $ty:ty, $parse:expr, $what:expr) => {{
            let mut v: Vec<$ty> = Vec::with_capacity(cap);
            for (i, tok) in text.split_ascii_whitespace().enumerate() {
                if i >= expected {
                    return Err(format!(
                        "more than the {expected} values the dimensions declare"
                    ));
                }
                let x: Option<$ty> = $parse(tok);
                match x {
                    Some(x) => v.push(x),
                    None => return Err(format!("value {i} is {tok:?}; expected {}", $what)),
                }
            }
            if v.len() != expected {
                return Err(format!(
                    "{} values; expected {expected} (the product of the dimensions)",
                    v.len()
                ));
            }
            Data::$variant(v)
        }};
    }
    Ok(match dtype {
        DataType::U8 => parse_all!(
            U8,
            u8,
            |t: &str| t.parse::<u8>().ok(),
            "an integer from 0 to 255"
        ),
        DataType::I32 => parse_all!(
            I32,
            i32,
            |t: &str| t.parse::<i32>().ok(),
            "a 32-bit integer"
        ),
        DataType::F32 => parse_all!(
            F32,
            f32,
            |t: &str| t.parse::<f64>().ok().map(|x| x as f32),
            "a number"
        ),
        DataType::F64 => parse_all!(F64, f64, |t: &str| t.parse::<f64>().ok(), "a number"),
    })
}

/// Shortest text that reads back to the same `f64` (plain or exponent form).
pub fn fmt_f64(x: f64) -> String {
    let a = x.abs();
    if x.is_finite() && x != 0.0 && !(1e-5..1e16).contains(&a) {
        format!("{x:e}")
    } else {
        format!("{x}")
    }
}

/// Shortest text that reads back to the same `f32`.
pub fn fmt_f32(x: f32) -> String {
    let a = x.abs();
    if x.is_finite() && x != 0.0 && !(1e-5..1e16).contains(&a) {
        format!("{x:e}")
    } else {
        format!("{x}")
    }
}

/// Values as ASCII text, `cols` values per line separated by one space.
pub fn write_ascii(w: &mut dyn Write, data: &Data, cols: usize) -> std::io::Result<()> {
    let cols = cols.max(1);
    macro_rules! lines {
        ($v:expr, $fmt:expr) => {{
            for (i, x) in $v.iter().enumerate() {
                if i > 0 {
                    w.write_all(if i % cols == 0 { b"\n" } else { b" " })?;
                }
                w.write_all($fmt(*x).as_bytes())?;
            }
        }};
    }
    match data {
        Data::U8(v) => lines!(v, |x: u8| x.to_string()),
        Data::I32(v) => lines!(v, |x: i32| x.to_string()),
        Data::F32(v) => lines!(v, fmt_f32),
        Data::F64(v) => lines!(v, fmt_f64),
    }
    Ok(())
}

/// Column-major values of shape `dims` to row-major (or, with `inverse`,
/// row-major to column-major).
fn permute<T: Copy>(v: &[T], dims: &[usize], inverse: bool) -> Vec<T> {
    if dims.len() < 2 || v.is_empty() {
        return v.to_vec();
    }
    // Walk the target order; `off` is the offset of the same index tuple in
    // the source order. Row-major walks the last index fastest.
    let k = dims.len();
    let mut src_stride = vec![1usize; k];
    if inverse {
        // source row-major: stride of axis a = product of dims after a
        for a in (0..k - 1).rev() {
            src_stride[a] = src_stride[a + 1] * dims[a + 1];
        }
    } else {
        // source column-major: stride of axis a = product of dims before a
        for a in 1..k {
            src_stride[a] = src_stride[a - 1] * dims[a - 1];
        }
    }
    let axes: Vec<usize> = if inverse {
        (0..k).collect() // target column-major: first axis fastest
    } else {
        (0..k).rev().collect() // target row-major: last axis fastest
    };
    let mut idx = vec![0usize; k];
    let mut off = 0usize;
    let mut out = Vec::with_capacity(v.len());
    for _ in 0..v.len() {
        out.push(v[off]);
        for &a in &axes {
            idx[a] += 1;
            off += src_stride[a];
            if idx[a] < dims[a] {
                break;
            }
            off -= src_stride[a] * dims[a];
            idx[a] = 0;
        }
    }
    out
}

/// Reorder `data` of shape `dims` from column-major to row-major.
pub fn column_to_row_major(data: Data, dims: &[usize]) -> Data {
    if dims.iter().filter(|&&d| d > 1).count() < 2 {
        return data; // a vector: both orders agree
    }
    match data {
        Data::U8(v) => Data::U8(permute(&v, dims, false)),
        Data::I32(v) => Data::I32(permute(&v, dims, false)),
        Data::F32(v) => Data::F32(permute(&v, dims, false)),
        Data::F64(v) => Data::F64(permute(&v, dims, false)),
    }
}

/// Reorder `data` of shape `dims` from row-major to column-major.
pub fn row_to_column_major(data: &Data, dims: &[usize]) -> Data {
    match data {
        Data::U8(v) => Data::U8(permute(v, dims, true)),
        Data::I32(v) => Data::I32(permute(v, dims, true)),
        Data::F32(v) => Data::F32(permute(v, dims, true)),
        Data::F64(v) => Data::F64(permute(v, dims, true)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn transpose_2d_and_back() {
        // 2 x 3 row-major [[1,2,3],[4,5,6]] is column-major [1,4,2,5,3,6].
        let rm = Data::I32(vec![1, 2, 3, 4, 5, 6]);
        let cm = row_to_column_major(&rm, &[2, 3]);
        assert_eq!(cm, Data::I32(vec![1, 4, 2, 5, 3, 6]));
        assert_eq!(column_to_row_major(cm, &[2, 3]), rm);
    }

    #[test]
    fn transpose_3d_matches_index_formula() {
        let d = [2usize, 3, 4];
        let rm: Vec<i32> = (0..24).collect();
        let cm = match row_to_column_major(&Data::I32(rm.clone()), &d) {
            Data::I32(v) => v,
            _ => unreachable!(),
        };
        for i in 0..2 {
            for j in 0..3 {
                for k in 0..4 {
                    let r = (i * 3 + j) * 4 + k;
                    let c = i + 2 * (j + 3 * k);
                    assert_eq!(cm[c], rm[r]);
                }
            }
        }
        assert_eq!(column_to_row_major(Data::I32(cm), &d), Data::I32(rm));
    }

    #[test]
    fn inflate_refuses_more_than_declared() {
        let z = deflate(&[7u8; 1000]).unwrap();
        assert_eq!(inflate_exact(&z, 1000).unwrap().len(), 1000);
        let e = inflate_exact(&z, 999).unwrap_err();
        assert!(e.contains("larger than"), "{e}");
        let e = inflate_exact(&z, 1001).unwrap_err();
        assert!(e.contains("1000 bytes"), "{e}");
    }

    #[test]
    fn float_text_round_trips() {
        for x in [0.1f32, 1e-30, 3.4e38, -7.25, 1.0 / 3.0, f32::MIN_POSITIVE] {
            let s = fmt_f32(x);
            assert_eq!(s.parse::<f64>().unwrap() as f32, x, "{s}");
        }
        for x in [0.1f64, 1e-300, 1.7e308, -7.25, 1.0 / 3.0] {
            assert_eq!(fmt_f64(x).parse::<f64>().unwrap(), x);
        }
    }
}
