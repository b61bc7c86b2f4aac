//! Values of a volume at the vertices of a surface.
//!
//! In: a [`Volume`], a surface (mm, the volume's space), an offset in mm
//! along the vertex normals and a [`Method`]. Out: one value per vertex and
//! the number of vertices outside the volume (their value is NaN).
//! Positions go from mm to voxel indices through the inverse of the
//! volume's affine. What stays true: trilinear interpolation reproduces
//! any function linear in position exactly (up to rounding) at every point
//! inside the grid of voxel centres, and agrees with
//! `scipy.ndimage.map_coordinates(order=1)` there; a voxel value with zero
//! weight never enters (a NaN neighbour does not spoil a point on a voxel).
//!
//! Vertex normals are area-weighted means of the incident face normals;
//! with an outward surface, a positive offset samples outside it (e.g. a
//! negative half thickness from the outer surface for mid-thickness).
//!
//! Inside: trilinear needs `0 <= index <= n - 1` on every axis (within
//! 1e-9 voxel, for rounding); nearest needs `-1/2 <= index < n - 1/2`
//! (the voxel whose centre is nearest, halves rounded up).

use super::Volume;
use crate::mesh::TriMesh;

/// Interpolation method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// Trilinear interpolation between the eight surrounding voxel centres.
    Trilinear,
    /// The value of the voxel whose centre is nearest.
    Nearest,
}

/// Sampled values.
#[derive(Debug, Clone, PartialEq)]
pub struct Sampled {
    /// One value per vertex (NaN outside).
    pub values: Vec<f64>,
    /// Vertices outside the volume.
    pub outside: usize,
}

/// Rounding slack at the faces of the grid, in voxels.
const EPS: f64 = 1e-9;

/// Sample `volume` at the vertices of `mesh`, moved `offset_mm` along their
/// unit normals.
pub fn sample(volume: &Volume, mesh: &TriMesh, offset_mm: f64, method: Method) -> Sampled {
    let inv = volume.affine.inverse();
    let normals = if offset_mm != 0.0 {
        mesh.vertex_normals()
    } else {
        Vec::new()
    };
    let mut outside = 0usize;
    let values = mesh
        .positions
        .iter()
        .enumerate()
        .map(|(i, &p)| {
            let mut q = p;
            if let Some(n) = normals.get(i) {
                for k in 0..3 {
                    q[k] += offset_mm * n[k];
                }
            }
            let v = inv.apply(q);
            let r = match method {
                Method::Trilinear => trilinear(volume, v),
                Method::Nearest => nearest(volume, v),
            };
            r.unwrap_or_else(|| {
                outside += 1;
                f64::NAN
            })
        })
        .collect();
    Sampled { values, outside }
}

/// Trilinear value at fractional voxel index `v`, `None` outside.
pub fn trilinear(volume: &Volume, v: [f64; 3]) -> Option<f64> {
    let mut i0 = [0usize; 3];
    let mut f = [0.0f64; 3];
    for a in 0..3 {
        let n = volume.dims[a];
        let top = (n - 1) as f64;
        let x = v[a];
        if !(x >= -EPS && x <= top + EPS) {
            return None;
        }
        let x = x.clamp(0.0, top);
        let i = (x.floor() as usize).min(n.saturating_sub(2));
        i0[a] = i;
        f[a] = x - i as f64;
    }
    let [nx, ny, _] = volume.dims;
    let mut sum = 0.0;
    for c in 0..8 {
        let mut w = 1.0;
        let mut idx = [0usize; 3];
        for a in 0..3 {
            let up = (c >> a) & 1 == 1;
            w *= if up { f[a] } else { 1.0 - f[a] };
            idx[a] = i0[a] + usize::from(up);
        }
        if w == 0.0 {
            continue;
        }
        sum += w * volume.values[idx[0] + nx * (idx[1] + ny * idx[2])];
    }
    Some(sum)
}

/// Nearest-voxel value at fractional voxel index `v`, `None` outside.
pub fn nearest(volume: &Volume, v: [f64; 3]) -> Option<f64> {
    let mut idx = [0usize; 3];
    for a in 0..3 {
        let n = volume.dims[a] as f64;
        if !(v[a] >= -0.5 && v[a] < n - 0.5) {
            return None;
        }
        idx[a] = ((v[a] + 0.5).floor().max(0.0) as usize).min(volume.dims[a] - 1);
    }
    let [nx, ny, _] = volume.dims;
    Some(volume.values[idx[0] + nx * (idx[1] + ny * idx[2])])
}
