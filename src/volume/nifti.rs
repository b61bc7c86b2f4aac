//! Reading NIfTI-1 volumes (`.nii`, `.nii.gz`) with the header parsed by the
//! `nifti` crate, and a minimal single-file NIfTI-1 writer (for tests and
//! synthetic data).
//!
//! In: the file's bytes ([`parse_volume`]; [`read_volume`] reads the file and
//! calls it, so there is one code path). Gzip is recognised by its magic
//! bytes `1f 8b`, not the file name. Out: a [`Volume`]: three dimensions,
//! every voxel as `f64` (x index fastest, the file's order), the data scaling
//! applied, the voxel-to-mm [`Affine`] by the NIfTI-1 rule (see
//! `volume::affine`).
//!
//! What is refused, with the file and the header field named: fewer than 348
//! header bytes, a header the crate cannot parse (bad magic), `sizeof_hdr`
//! other than 348, a header-only file (magic `ni1`, the `.hdr`/`.img` pair),
//! fewer or more than three dimensions (a 4-D or higher file whose extra
//! dimensions are all 1, i.e. a single volume, is accepted as 3-D), a zero
//! dimension, data types other than the integer and real ones (complex, RGB,
//! 128-bit floats), a `vox_offset` that is not a whole non-negative number,
//! fewer data bytes after `vox_offset` than `dim[1] x dim[2] x dim[3] x
//! size(datatype)`, a gzip stream that inflates to more than the header
//! declares (`vox_offset + data`), a non-finite scale, a singular or
//! non-finite affine.
//!
//! What stays true (the fuzz target `nifti` checks it, docs/fuzzing.md):
//! memory is bounded: a volume may declare at most [`MAX_VOXELS`] voxels;
//! the declared size is compared with the bytes present before the values
//! are allocated, and gzip inflation stops one byte after the declared size
//! (so a gzip bomb costs at most the declared size, itself at most 8 GiB,
//! before it is refused). An accepted volume has `dims[0] x dims[1] x dims[2]` values and
//! a finite, invertible affine; values of an integer datatype are finite,
//! those of a float datatype may be NaN or infinite as stored (NaN often
//! marks voxels outside a map; the commands that need finite values check).
//!
//! Follows the NIfTI-1 standard (NIfTI Data Format Working Group, 2004;
//! `nifti1.h`): the data of a single-file `.nii` start at `vox_offset`, at
//! least 352.

use super::affine::{xform_name, Affine, AffineSource, XformFields};
use super::Volume;
use crate::error::{Error, Result};
use nifti::{Endianness, NiftiHeader, NiftiType};
use std::borrow::Cow;
use std::io::Read;
use std::path::Path;

/// Bytes of the NIfTI-1 header proper (`sizeof_hdr`).
const HEADER_BYTES: usize = 348;
/// First byte the data of a single-file `.nii` can start at (header + the
/// 4-byte extension flag).
const MIN_DATA_OFFSET: usize = 352;
/// Most voxels a volume may declare (2^30: 1024^3, 8 GiB as `f64`). With
/// the largest type (8 bytes) a gzip stream then inflates to at most 8 GiB
/// plus the header before it is refused.
pub const MAX_VOXELS: u64 = 1 << 30;

/// Read the NIfTI-1 volume at `path` (see the module doc for what is refused):
/// the file is read whole and handed to [`parse_volume`].
pub fn read_volume(path: &Path) -> Result<Volume> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, e))?;
    parse_volume(&bytes, path)
}

/// Parse a NIfTI-1 volume held in memory: plain `.nii` bytes or a gzip
/// stream of them. `path` only names the file in error messages.
pub fn parse_volume(bytes: &[u8], path: &Path) -> Result<Volume> {
    parse_volume_typed(bytes, path).map(|(v, _)| v)
}

/// [`parse_volume`], also returning the stored datatype (an integer type
/// guarantees finite values; see the module doc).
pub fn parse_volume_typed(bytes: &[u8], path: &Path) -> Result<(Volume, NiftiType)> {
    let (data, layout) = if bytes.starts_with(&[0x1f, 0x8b]) {
        inflate_bounded(bytes, path)?
    } else {
        let layout = layout_of(bytes, path)?;
        (Cow::Borrowed(bytes), layout)
    };
    let Layout {
        header: h,
        dims,
        dtype,
        offset,
        nbytes,
    } = layout;
    let present = data.len().saturating_sub(offset);
    let size = voxel_bytes(dtype).unwrap_or(0);
    if present < nbytes {
        return Err(Error::bad_file(
            path,
            "data",
            format!(
                "{present} bytes after vox_offset {offset}; expected {nbytes} (dimensions {dims:?} of {dtype:?}, {size} byte{} per voxel)",
                if size == 1 { "" } else { "s" }
            ),
        ));
    }
    let raw = &data[offset..offset + nbytes];
    let le = h.endianness == Endianness::Little;
    let mut values = decode(raw, dtype, le);
    // Data scaling (nifti1.h: applied when scl_slope is nonzero; nibabel
    // also skips a non-finite slope).
    let slope = f64::from(h.scl_slope);
    let inter = f64::from(h.scl_inter);
    if slope != 0.0 && slope.is_finite() && !(slope == 1.0 && inter == 0.0) {
        if !inter.is_finite() {
            return Err(Error::bad_file(
                path,
                "header scl_inter",
                format!("scl_inter = {inter}; expected a finite intercept"),
            ));
        }
        for v in &mut values {
            *v = slope * *v + inter;
        }
    }
    let f = |x: f32| f64::from(x);
    let fields = XformFields {
        pixdim: [
            f(h.pixdim[0]),
            f(h.pixdim[1]),
            f(h.pixdim[2]),
            f(h.pixdim[3]),
        ],
        qform_code: h.qform_code,
        sform_code: h.sform_code,
        quatern: [f(h.quatern_b), f(h.quatern_c), f(h.quatern_d)],
        qoffset: [f(h.quatern_x), f(h.quatern_y), f(h.quatern_z)],
        srow: [
            h.srow_x.map(f64::from),
            h.srow_y.map(f64::from),
            h.srow_z.map(f64::from),
        ],
    };
    let (affine, source) =
        Affine::from_header(&fields).map_err(|e| e.in_file(path, "header affine"))?;
    let space = match source {
        AffineSource::Sform => xform_name(h.sform_code),
        AffineSource::Qform => xform_name(h.qform_code),
        AffineSource::Pixdim => xform_name(0),
    };
    Ok((
        Volume {
            dims,
            values,
            affine,
            affine_source: source,
            space: space.to_string(),
        },
        dtype,
    ))
}

/// What the header says about the data: where they start and how many
/// bytes they take.
struct Layout {
    header: NiftiHeader,
    dims: [usize; 3],
    dtype: NiftiType,
    /// First data byte (`vox_offset`, at least 352).
    offset: usize,
    /// `dims[0] x dims[1] x dims[2] x size(dtype)`.
    nbytes: usize,
}

/// Parse and check the header at the start of `bytes` (at least
/// [`HEADER_BYTES`] of them are needed; the data are not looked at).
fn layout_of(bytes: &[u8], path: &Path) -> Result<Layout> {
    if bytes.len() < HEADER_BYTES {
        return Err(Error::bad_file(
            path,
            "header",
            format!(
                "{} bytes; expected a {HEADER_BYTES}-byte NIfTI-1 header (a .nii or .nii.gz NIfTI-1 volume)",
                bytes.len()
            ),
        ));
    }
    let h = NiftiHeader::from_reader(&bytes[..HEADER_BYTES]).map_err(|e| match e {
        nifti::NiftiError::Io(io) => Error::io(path, io),
        other => Error::bad_file(
            path,
            "file",
            format!("cannot read as NIfTI-1 ({other}); expected a .nii or .nii.gz NIfTI-1 volume"),
        ),
    })?;
    if h.sizeof_hdr != HEADER_BYTES as i32 {
        return Err(Error::bad_file(
            path,
            "header sizeof_hdr",
            format!(
                "sizeof_hdr = {}; expected {HEADER_BYTES} (NIfTI-1)",
                h.sizeof_hdr
            ),
        ));
    }
    if &h.magic == nifti::header::MAGIC_CODE_NI1 {
        return Err(Error::bad_file(
            path,
            "header magic",
            "\"ni1\": the header of a .hdr/.img pair; expected a single-file NIfTI-1 volume (magic \"n+1\", .nii or .nii.gz)",
        ));
    }
    let dims = dims_of(path, &h.dim)?;
    let dtype = h.data_type().map_err(|_| {
        Error::bad_file(
            path,
            "header datatype",
            format!("unknown datatype code {}", h.datatype),
        )
    })?;
    let Some(size) = voxel_bytes(dtype) else {
        return Err(Error::bad_file(
            path,
            "header datatype",
            format!(
                "data type {dtype:?} is not supported; expected an integer or real type (uint8, int8, int16, uint16, int32, uint32, int64, uint64, float32, float64)"
            ),
        ));
    };
    let vo = h.vox_offset;
    if !(vo.is_finite() && vo >= 0.0 && vo.fract() == 0.0 && vo < 4.0e9) {
        return Err(Error::bad_file(
            path,
            "header vox_offset",
            format!("vox_offset = {vo}; expected a whole number of bytes (at least {MIN_DATA_OFFSET} in a .nii file)"),
        ));
    }
    let offset = (vo as usize).max(MIN_DATA_OFFSET);
    // At most 65535^3 x 8 bytes: fits in 64 bits, but check anyway.
    let nbytes = dims
        .iter()
        .try_fold(size, |acc, &d| acc.checked_mul(d))
        .ok_or_else(|| {
            Error::bad_file(
                path,
                "header dim",
                format!("dimensions {dims:?} of {dtype:?} overflow the address space"),
            )
        })?;
    let voxels = dims[0] as u64 * dims[1] as u64 * dims[2] as u64;
    if voxels > MAX_VOXELS {
        return Err(Error::bad_file(
            path,
            "header dim",
            format!(
                "dimensions {dims:?} hold {voxels} voxels; at most {MAX_VOXELS} (2^30, e.g. 1024^3) are read"
            ),
        ));
    }
    Ok(Layout {
        header: h,
        dims,
        dtype,
        offset,
        nbytes,
    })
}

/// Inflate a gzip stream holding a `.nii`, stopping one byte after the size
/// its header declares (`vox_offset + data`), so a gzip bomb costs no more
/// than the declared size. More than declared is refused; fewer is left to
/// the data-length check of the caller.
fn inflate_bounded<'a>(bytes: &[u8], path: &Path) -> Result<(Cow<'a, [u8]>, Layout)> {
    let gz_err = |e: std::io::Error| {
        Error::bad_file(
            path,
            "gzip stream",
            format!("cannot decompress ({e}); expected a gzip-compressed NIfTI-1 volume (.nii.gz)"),
        )
    };
    let mut dec = flate2::read::GzDecoder::new(bytes);
    let mut out = Vec::with_capacity(MIN_DATA_OFFSET);
    (&mut dec)
        .take(HEADER_BYTES as u64)
        .read_to_end(&mut out)
        .map_err(gz_err)?;
    let layout = layout_of(&out, path)?;
    let declared = layout.offset.checked_add(layout.nbytes).ok_or_else(|| {
        Error::bad_file(
            path,
            "header dim",
            "declared size overflows the address space",
        )
    })?;
    let rest = (declared - HEADER_BYTES) as u64 + 1;
    dec.take(rest).read_to_end(&mut out).map_err(gz_err)?;
    if out.len() > declared {
        return Err(Error::bad_file(
            path,
            "gzip stream",
            format!(
                "decompressed data is larger than the {declared} bytes the header declares (vox_offset {} + dimensions {:?} of {:?}); refused",
                layout.offset, layout.dims, layout.dtype
            ),
        ));
    }
    Ok((Cow::Owned(out), layout))
}

/// The three dimensions of `dim` (header field `dim`), or an error.
fn dims_of(path: &Path, dim: &[u16; 8]) -> Result<[usize; 3]> {
    let nd = usize::from(dim[0]);
    if !(3..=7).contains(&nd) {
        return Err(Error::bad_file(
            path,
            "header dim",
            format!(
                "{nd} dimensions (dim = {:?}); expected a 3-D volume",
                &dim[..=nd.min(7)]
            ),
        ));
    }
    if let Some(extra) = dim[4..=nd].iter().position(|&d| d != 1) {
        return Err(Error::bad_file(
            path,
            "header dim",
            format!(
                "{nd}-D with dim[{}] = {} (dim = {:?}); expected a 3-D volume (a 4-D file is accepted only when it holds one volume)",
                extra + 4,
                dim[extra + 4],
                &dim[..=nd]
            ),
        ));
    }
    let d = [
        usize::from(dim[1]),
        usize::from(dim[2]),
        usize::from(dim[3]),
    ];
    if d.contains(&0) {
        return Err(Error::bad_file(
            path,
            "header dim",
            format!("dimensions {d:?}; expected every dimension at least 1"),
        ));
    }
    Ok(d)
}

/// Bytes per voxel of the supported (integer and real) datatypes; `None` for
/// the others.
fn voxel_bytes(t: NiftiType) -> Option<usize> {
    Some(match t {
        NiftiType::Uint8 | NiftiType::Int8 => 1,
        NiftiType::Int16 | NiftiType::Uint16 => 2,
        NiftiType::Int32 | NiftiType::Uint32 | NiftiType::Float32 => 4,
        NiftiType::Int64 | NiftiType::Uint64 | NiftiType::Float64 => 8,
        _ => return None,
    })
}

/// Decode `raw` (whole voxels of a supported type `t`) to `f64`.
fn decode(raw: &[u8], t: NiftiType, le: bool) -> Vec<f64> {
    macro_rules! conv {
        ($ty:ty, $size:expr) => {{
            raw.chunks_exact($size)
                .map(|c| {
                    let mut b = [0u8; $size];
                    b.copy_from_slice(c);
                    let v = if le {
                        <$ty>::from_le_bytes(b)
                    } else {
                        <$ty>::from_be_bytes(b)
                    };
                    v as f64
                })
                .collect()
        }};
    }
    match t {
        NiftiType::Uint8 => conv!(u8, 1),
        NiftiType::Int8 => conv!(i8, 1),
        NiftiType::Int16 => conv!(i16, 2),
        NiftiType::Uint16 => conv!(u16, 2),
        NiftiType::Int32 => conv!(i32, 4),
        NiftiType::Uint32 => conv!(u32, 4),
        NiftiType::Int64 => conv!(i64, 8),
        NiftiType::Uint64 => conv!(u64, 8),
        NiftiType::Float32 => conv!(f32, 4),
        NiftiType::Float64 => conv!(f64, 8),
        // Unsupported types are refused by `layout_of` before decoding.
        _ => Vec::new(),
    }
}

/// Voxel types the minimal writer [`encode_nifti1`] can store.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StoreType {
    /// NIFTI_TYPE_UINT8 (values rounded and clamped).
    U8,
    /// NIFTI_TYPE_INT16 (values rounded and clamped).
    I16,
    /// NIFTI_TYPE_FLOAT32.
    F32,
    /// NIFTI_TYPE_FLOAT64.
    F64,
}

/// A single-file NIfTI-1 (`.nii`, little-endian) holding `values` (x
/// fastest) with `dims` (3 to 7 entries), the sform `affine` (sform_code 1,
/// qform_code 0) and pixdim set to the column norms of the affine. Used by
/// tests and synthetic data; not a general writer.
pub fn encode_nifti1(dims: &[usize], values: &[f64], affine: &Affine, store: StoreType) -> Vec<u8> {
    let mut h = vec![0u8; 352];
    let put_i16 =
        |h: &mut Vec<u8>, at: usize, v: i16| h[at..at + 2].copy_from_slice(&v.to_le_bytes());
    let put_i32 =
        |h: &mut Vec<u8>, at: usize, v: i32| h[at..at + 4].copy_from_slice(&v.to_le_bytes());
    let put_f32 =
        |h: &mut Vec<u8>, at: usize, v: f32| h[at..at + 4].copy_from_slice(&v.to_le_bytes());
    put_i32(&mut h, 0, 348);
    put_i16(&mut h, 40, dims.len() as i16);
    for (k, &d) in dims.iter().enumerate().take(7) {
        put_i16(&mut h, 42 + 2 * k, d as i16);
    }
    for k in dims.len()..7 {
        put_i16(&mut h, 42 + 2 * k, 1);
    }
    let (code, bits) = match store {
        StoreType::U8 => (2i16, 8i16),
        StoreType::I16 => (4, 16),
        StoreType::F32 => (16, 32),
        StoreType::F64 => (64, 64),
    };
    put_i16(&mut h, 70, code);
    put_i16(&mut h, 72, bits);
    put_f32(&mut h, 76, 1.0);
    for c in 0..3 {
        let n = (0..3).map(|r| affine.m[r][c].powi(2)).sum::<f64>().sqrt();
        put_f32(&mut h, 80 + 4 * c, n as f32);
    }
    for k in 3..7 {
        put_f32(&mut h, 80 + 4 * k, 1.0);
    }
    put_f32(&mut h, 108, 352.0);
    put_f32(&mut h, 112, 1.0); // scl_slope
    h[123] = 2; // xyzt_units: mm
    put_i16(&mut h, 252, 0); // qform_code
    put_i16(&mut h, 254, 1); // sform_code
    for r in 0..3 {
        for c in 0..4 {
            put_f32(&mut h, 280 + 16 * r + 4 * c, affine.m[r][c] as f32);
        }
    }
    h[344..348].copy_from_slice(b"n+1\0");
    for v in values {
        match store {
            StoreType::U8 => h.push(v.round().clamp(0.0, 255.0) as u8),
            StoreType::I16 => {
                h.extend_from_slice(&(v.round().clamp(-32768.0, 32767.0) as i16).to_le_bytes())
            }
            StoreType::F32 => h.extend_from_slice(&(*v as f32).to_le_bytes()),
            StoreType::F64 => h.extend_from_slice(&v.to_le_bytes()),
        }
    }
    h
}
