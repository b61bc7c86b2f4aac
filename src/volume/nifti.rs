//! Reading NIfTI-1 volumes (`.nii`, `.nii.gz`) through the `nifti` crate,
//! and a minimal single-file NIfTI-1 writer (for tests and synthetic data).
//!
//! In: a path. Out: a [`Volume`]: three dimensions, every voxel as `f64`
//! (x index fastest, the file's order), the data scaling applied, the
//! voxel-to-mm [`Affine`] by the NIfTI-1 rule (see `volume::affine`).
//! What is refused, with the file and the header field named: files the
//! crate cannot parse (not NIfTI-1, truncated data), fewer or more than
//! three dimensions (a 4-D or higher file whose extra dimensions are all 1,
//! i.e. a single volume, is accepted as 3-D), a zero dimension, data types
//! other than the integer and real ones (complex, RGB, 128-bit floats), a
//! non-finite scale, a singular or non-finite affine. Follows the NIfTI-1
//! standard (NIfTI Data Format Working Group, 2004; `nifti1.h`).

use super::affine::{xform_name, Affine, AffineSource, XformFields};
use super::Volume;
use crate::error::{Error, Result};
use nifti::{Endianness, NiftiObject, NiftiType};
use std::path::Path;

/// Read the NIfTI-1 volume at `path` (see the module doc for what is refused).
pub fn read_volume(path: &Path) -> Result<Volume> {
    if !path.exists() {
        return Err(Error::io(
            path,
            std::io::Error::new(std::io::ErrorKind::NotFound, "no such file"),
        ));
    }
    let obj = nifti::ReaderOptions::new()
        .read_file(path)
        .map_err(|e| match e {
            nifti::NiftiError::Io(io) => Error::io(path, io),
            other => Error::bad_file(
                path,
                "file",
                format!(
                    "cannot read as NIfTI-1 ({other}); expected a .nii or .nii.gz NIfTI-1 volume"
                ),
            ),
        })?;
    let h = obj.header().clone();
    let dims = dims_of(path, &h.dim)?;
    let dtype = h.data_type().map_err(|_| {
        Error::bad_file(
            path,
            "header datatype",
            format!("unknown datatype code {}", h.datatype),
        )
    })?;
    let le = h.endianness == Endianness::Little;
    let raw = obj.volume().raw_data();
    let n = dims[0] * dims[1] * dims[2];
    let mut values = decode(path, raw, dtype, le, n)?;
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
    Ok(Volume {
        dims,
        values,
        affine,
        affine_source: source,
        space: space.to_string(),
    })
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

/// Decode `n` voxels of type `t` to `f64`.
fn decode(path: &Path, raw: &[u8], t: NiftiType, le: bool, n: usize) -> Result<Vec<f64>> {
    macro_rules! conv {
        ($ty:ty, $size:expr) => {{
            if raw.len() < n * $size {
                return Err(Error::bad_file(
                    path,
                    "data",
                    format!("{} bytes; expected {}", raw.len(), n * $size),
                ));
            }
            raw.chunks_exact($size)
                .take(n)
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
    let v: Vec<f64> = match t {
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
        other => {
            return Err(Error::bad_file(
                path,
                "header datatype",
                format!(
                    "data type {other:?} is not supported; expected an integer or real type (uint8, int8, int16, uint16, int32, uint32, int64, uint64, float32, float64)"
                ),
            ))
        }
    };
    Ok(v)
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
