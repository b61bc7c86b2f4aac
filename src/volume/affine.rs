//! Voxel-to-millimetre affines of NIfTI-1 volumes.
//!
//! In: the header fields of a NIfTI-1 file. Out: an [`Affine`] (the 3x4
//! matrix `mm = A [i, j, k, 1]^T`, voxel indices counted from 0), its
//! inverse, and which header method gave it. What stays true: a returned
//! affine is finite and invertible (|det| of the 3x3 part above 1e-12 times
//! the cube of its largest entry).
//!
//! The rule is the NIfTI-1 standard's (Cox et al., "A (sort of) new image
//! data format standard: NIfTI-1", NIfTI Data Format Working Group, 2004;
//! the comments of `nifti1.h`, "METHOD 1/2/3"):
//!
//! * `sform_code > 0`: method 3, the rows `srow_x`, `srow_y`, `srow_z`.
//! * else `qform_code > 0`: method 2, the rotation of the unit quaternion
//!   `(a, b, c, d)` with `a = sqrt(1 - b^2 - c^2 - d^2)` (0 when rounding
//!   makes the radicand negative, and then `(b, c, d)` renormalised), the
//!   spacings `pixdim[1..=3]` and `qfac = pixdim[0]` (-1 when negative,
//!   else +1) scaling the third index, plus `quatern_x/y/z`.
//! * else method 1: `pixdim[1..=3]` scaling, no offset and no rotation.
//!   (nibabel's fallback for this case differs: it centres the grid; this
//!   is from memory, and the tests do not use the case against nibabel.)
//!
//! The method-1 and method-2 spacings must be positive and finite.

use crate::error::{Error, Result};

/// Which header fields the affine came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum AffineSource {
    /// `sform_code > 0`: the `srow_*` rows.
    Sform,
    /// `qform_code > 0` (and no sform): quaternion, spacings and offset.
    Qform,
    /// Neither code set: the spacings only.
    Pixdim,
}

/// A voxel-to-mm affine: `mm[r] = m[r][0] i + m[r][1] j + m[r][2] k + m[r][3]`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Affine {
    /// The top three rows of the 4x4 homogeneous matrix.
    pub m: [[f64; 4]; 3],
}

/// The fields of a NIfTI-1 header that define the affine.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct XformFields {
    /// `pixdim[0..=3]` (`pixdim[0]` is `qfac`).
    pub pixdim: [f64; 4],
    /// `qform_code`.
    pub qform_code: i16,
    /// `sform_code`.
    pub sform_code: i16,
    /// `quatern_b`, `quatern_c`, `quatern_d`.
    pub quatern: [f64; 3],
    /// `quatern_x`, `quatern_y`, `quatern_z`.
    pub qoffset: [f64; 3],
    /// `srow_x`, `srow_y`, `srow_z`.
    pub srow: [[f64; 4]; 3],
}

impl Affine {
    /// The affine of the header fields `x` by the NIfTI-1 rule (module doc).
    /// Errors (`Invalid`, naming the field): non-finite entries,
    /// non-positive spacings where they are used, a singular matrix.
    pub fn from_header(x: &XformFields) -> Result<(Affine, AffineSource)> {
        let (a, src) = if x.sform_code > 0 {
            (Affine { m: x.srow }, AffineSource::Sform)
        } else {
            let d = spacings(x)?;
            if x.qform_code > 0 {
                let [b, c, dq] = x.quatern;
                let mut s = 1.0 - (b * b + c * c + dq * dq);
                let (mut b, mut c, mut dq) = (b, c, dq);
                if s < 0.0 {
                    let n = (b * b + c * c + dq * dq).sqrt();
                    b /= n;
                    c /= n;
                    dq /= n;
                    s = 0.0;
                }
                let a = s.sqrt();
                let r = [
                    [
                        a * a + b * b - c * c - dq * dq,
                        2.0 * (b * c - a * dq),
                        2.0 * (b * dq + a * c),
                    ],
                    [
                        2.0 * (b * c + a * dq),
                        a * a + c * c - b * b - dq * dq,
                        2.0 * (c * dq - a * b),
                    ],
                    [
                        2.0 * (b * dq - a * c),
                        2.0 * (c * dq + a * b),
                        a * a + dq * dq - c * c - b * b,
                    ],
                ];
                let qfac = if x.pixdim[0] < 0.0 { -1.0 } else { 1.0 };
                let scale = [d[0], d[1], d[2] * qfac];
                let mut m = [[0.0; 4]; 3];
                for (row, (rr, off)) in m.iter_mut().zip(r.iter().zip(x.qoffset)) {
                    for col in 0..3 {
                        row[col] = rr[col] * scale[col];
                    }
                    row[3] = off;
                }
                (Affine { m }, AffineSource::Qform)
            } else {
                let mut m = [[0.0; 4]; 3];
                for (r, row) in m.iter_mut().enumerate() {
                    row[r] = d[r];
                }
                (Affine { m }, AffineSource::Pixdim)
            }
        };
        a.check(match src {
            AffineSource::Sform => "srow_x/srow_y/srow_z (sform)",
            AffineSource::Qform => "quaternion and pixdim (qform)",
            AffineSource::Pixdim => "pixdim",
        })?;
        Ok((a, src))
    }

    /// Scaling by `spacing` (method 1).
    pub fn scaling(spacing: [f64; 3]) -> Affine {
        let mut m = [[0.0; 4]; 3];
        for r in 0..3 {
            m[r][r] = spacing[r];
        }
        Affine { m }
    }

    /// Determinant of the 3x3 part.
    pub fn det(&self) -> f64 {
        let m = &self.m;
        m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1])
            - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
            + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0])
    }

    /// Check finiteness and invertibility; `what` names the header fields.
    pub fn check(&self, what: &str) -> Result<()> {
        if self.m.iter().flatten().any(|v| !v.is_finite()) {
            return Err(Error::Invalid(format!(
                "{what}: the voxel-to-mm affine {:?} has a non-finite entry; expected finite numbers",
                self.m
            )));
        }
        let big = self
            .m
            .iter()
            .flat_map(|r| r[..3].iter())
            .fold(0.0f64, |a, &v| a.max(v.abs()));
        let det = self.det();
        if big == 0.0 || det.abs() <= 1e-12 * big * big * big {
            return Err(Error::Invalid(format!(
                "{what}: the voxel-to-mm affine {:?} is singular (determinant {det:e}); expected an invertible matrix",
                self.m
            )));
        }
        Ok(())
    }

    /// Millimetres of the (fractional) voxel index `v`.
    #[inline]
    pub fn apply(&self, v: [f64; 3]) -> [f64; 3] {
        let m = &self.m;
        [
            m[0][0] * v[0] + m[0][1] * v[1] + m[0][2] * v[2] + m[0][3],
            m[1][0] * v[0] + m[1][1] * v[1] + m[1][2] * v[2] + m[1][3],
            m[2][0] * v[0] + m[2][1] * v[1] + m[2][2] * v[2] + m[2][3],
        ]
    }

    /// The inverse affine (mm to voxel index), by the adjugate. The caller
    /// has checked invertibility ([`Affine::check`]).
    pub fn inverse(&self) -> Affine {
        let m = &self.m;
        let det = self.det();
        let c = |r0: usize, r1: usize, c0: usize, c1: usize| {
            m[r0][c0] * m[r1][c1] - m[r0][c1] * m[r1][c0]
        };
        let inv3 = [
            [
                c(1, 2, 1, 2) / det,
                -c(0, 2, 1, 2) / det,
                c(0, 1, 1, 2) / det,
            ],
            [
                -c(1, 2, 0, 2) / det,
                c(0, 2, 0, 2) / det,
                -c(0, 1, 0, 2) / det,
            ],
            [
                c(1, 2, 0, 1) / det,
                -c(0, 2, 0, 1) / det,
                c(0, 1, 0, 1) / det,
            ],
        ];
        let t = [m[0][3], m[1][3], m[2][3]];
        let mut out = [[0.0; 4]; 3];
        for r in 0..3 {
            out[r][..3].copy_from_slice(&inv3[r]);
            out[r][3] = -(inv3[r][0] * t[0] + inv3[r][1] * t[1] + inv3[r][2] * t[2]);
        }
        Affine { m: out }
    }

    /// The 4x4 homogeneous matrix, row-major.
    pub fn to_4x4(&self) -> [[f64; 4]; 4] {
        [self.m[0], self.m[1], self.m[2], [0.0, 0.0, 0.0, 1.0]]
    }
}

/// The spacings `pixdim[1..=3]`, checked positive and finite.
fn spacings(x: &XformFields) -> Result<[f64; 3]> {
    let d = [x.pixdim[1], x.pixdim[2], x.pixdim[3]];
    if d.iter().any(|v| !(v.is_finite() && *v > 0.0)) {
        return Err(Error::Invalid(format!(
            "pixdim[1..=3] = {d:?}; expected positive, finite voxel spacings (used by the {} affine)",
            if x.qform_code > 0 { "qform" } else { "pixdim-only" }
        )));
    }
    Ok(d)
}

/// The NIfTI-1 name of an xform code (`NIFTI_XFORM_*`), as GIFTI writes it.
/// Code 3 (a coordinate atlas space) is written as `NIFTI_XFORM_UNKNOWN`,
/// like any unknown code.
pub fn xform_name(code: i16) -> &'static str {
    match code {
        1 => "NIFTI_XFORM_SCANNER_ANAT",
        2 => "NIFTI_XFORM_ALIGNED_ANAT",
        4 => "NIFTI_XFORM_MNI_152",
        5 => "NIFTI_XFORM_TEMPLATE_OTHER",
        _ => "NIFTI_XFORM_UNKNOWN",
    }
}
