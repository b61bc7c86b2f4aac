//! From NIfTI volumes: a closed surface from a mask (`extract`) and values
//! of a volume at surface vertices (`sample`).
//!
//! In: NIfTI-1 volumes ([`nifti::read_volume`]), a level, smoothing
//! iterations; for sampling, a surface in the volume's mm space. Out: a
//! [`TriMesh`] in scanner millimetres with an [`ExtractReport`]; per-vertex
//! values with the count outside the volume. What stays true: the extracted
//! surface is one closed, consistently oriented 2-manifold with outward
//! normals, whatever the sign of the affine's determinant, and the output
//! is the same for any number of threads.
//!
//! | module | owns |
//! |---|---|
//! | `affine` | voxel-to-mm affine by the NIfTI-1 rule (sform, else qform, else pixdim) |
//! | `nifti` | reading `.nii`/`.nii.gz` through the `nifti` crate; a minimal writer for tests |
//! | `mask` | threshold, cavity filling, largest 6-connected piece |
//! | `table` | the generated marching-cubes case table and its closedness argument |
//! | `mc` | marching cubes over z-slabs with per-plane edge caches (Lorensen and Cline 1987) |
//! | `smooth` | Taubin (1995) lambda/mu smoothing |
//! | `sample` | trilinear and nearest sampling along vertex normals |

pub mod affine;
pub mod mask;
pub mod mc;
pub mod nifti;
pub mod sample;
pub mod smooth;
pub mod table;

#[cfg(test)]
mod tests;

use crate::error::{Error, Result};
use crate::io::gifti::{self, CoordTransform, Data, Gifti, Intent, WriteOptions};
use crate::mesh::TriMesh;
use affine::{Affine, AffineSource};
use mask::MaskReport;
use std::path::Path;

/// A 3-D volume: values (x index fastest), dimensions and the affine.
#[derive(Debug, Clone, PartialEq)]
pub struct Volume {
    /// Voxels along i, j, k.
    pub dims: [usize; 3],
    /// One value per voxel, `i + nx * (j + ny * k)`.
    pub values: Vec<f64>,
    /// Voxel index to mm.
    pub affine: Affine,
    /// Which header fields gave the affine.
    pub affine_source: AffineSource,
    /// The NIfTI name of the mm space (`NIFTI_XFORM_*`).
    pub space: String,
}

/// Options of [`extract`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ExtractOptions {
    /// Foreground: values above this level.
    pub level: f64,
    /// Taubin lambda|mu iterations (0: none).
    pub smooth_iterations: usize,
}

impl Default for ExtractOptions {
    fn default() -> Self {
        ExtractOptions {
            level: 0.5,
            smooth_iterations: 0,
        }
    }
}

/// What [`extract`] did.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ExtractReport {
    /// Volume dimensions.
    pub dims: [usize; 3],
    /// The level used.
    pub level: f64,
    /// Where the affine came from.
    pub affine_source: AffineSource,
    /// The mm space name.
    pub space: String,
    /// Determinant of the affine's 3x3 part (mm^3 per voxel, signed).
    pub affine_determinant: f64,
    /// Faces were reversed because the affine flips orientation.
    pub flipped_for_negative_determinant: bool,
    /// The mask steps.
    pub mask: MaskReport,
    /// Smoothing iterations applied.
    pub smooth_iterations: usize,
    /// Surface vertices.
    pub vertices: usize,
    /// Surface triangles.
    pub faces: usize,
    /// Surface area, mm^2.
    pub area_mm2: f64,
    /// Enclosed volume, mm^3.
    pub volume_mm3: f64,
}

/// The surface of `volume` thresholded at `opts.level`: cavities filled,
/// the largest 6-connected piece kept, marching cubes, coordinates through
/// the affine, faces reversed when the affine's determinant is negative (so
/// normals point out), then optional Taubin smoothing in mm.
pub fn extract(volume: &Volume, opts: &ExtractOptions) -> Result<(TriMesh, ExtractReport)> {
    let (solid, mask) = mask::solidify(&volume.values, volume.dims, opts.level)?;
    let (voxel_pos, mut faces) = mc::march(
        &solid,
        Some(mc::Interp {
            values: &volume.values,
            level: opts.level,
        }),
    );
    drop(solid);
    let det = volume.affine.det();
    let flip = det < 0.0;
    if flip {
        for f in &mut faces {
            f.swap(1, 2);
        }
    }
    let positions: Vec<[f64; 3]> = voxel_pos.iter().map(|&v| volume.affine.apply(v)).collect();
    let mut mesh = TriMesh { positions, faces };
    mesh.validate()?;
    smooth::taubin(
        &mut mesh,
        opts.smooth_iterations,
        smooth::LAMBDA,
        smooth::MU,
    );
    let report = ExtractReport {
        dims: volume.dims,
        level: opts.level,
        affine_source: volume.affine_source,
        space: volume.space.clone(),
        affine_determinant: det,
        flipped_for_negative_determinant: flip,
        mask,
        smooth_iterations: opts.smooth_iterations,
        vertices: mesh.n_vertices(),
        faces: mesh.n_faces(),
        area_mm2: mesh.area(),
        volume_mm3: mesh.signed_volume(),
    };
    Ok((mesh, report))
}

/// The GIFTI of an extracted surface: the POINTSET carries one coordinate
/// transform, the identity from the volume's mm space to itself (the
/// coordinates are already in that space, GIFTI standard section
/// "CoordinateSystemTransformMatrix"), and metadata naming the source
/// volume and its voxel-to-mm affine. `float64` stores the coordinates as
/// FLOAT64 (exact; not one of the GIFTI standard's three types, but read by
/// nibabel and by horosphere) instead of FLOAT32.
pub fn surface_gifti(mesh: &TriMesh, volume: &Volume, source: &Path, float64: bool) -> Gifti {
    let mut g = Gifti::from_mesh(mesh);
    if let Some(p) = g.arrays.iter_mut().find(|a| a.intent == Intent::PointSet) {
        let mut t = CoordTransform::identity_unknown();
        t.data_space = volume.space.clone();
        t.transformed_space = volume.space.clone();
        p.transforms = vec![t];
        if float64 {
            p.data = Data::F64(mesh.positions.iter().flatten().copied().collect());
        }
        let name = source
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        p.meta.set("SourceVolume", name);
        let a = volume.affine.to_4x4();
        let text: Vec<String> = a.iter().flatten().map(|v| format!("{v}")).collect();
        p.meta.set("VoxelToMillimetre", text.join(" "));
    }
    g
}

/// Write a surface GIFTI (see [`surface_gifti`]) atomically.
pub fn write_surface(
    path: &Path,
    mesh: &TriMesh,
    volume: &Volume,
    source: &Path,
    float64: bool,
) -> Result<()> {
    mesh.validate()?;
    if mesh.n_vertices() > i32::MAX as usize {
        return Err(Error::Invalid(format!(
            "surface has {} vertices; GIFTI triangles are 32-bit signed, at most {}",
            mesh.n_vertices(),
            i32::MAX
        )));
    }
    gifti::write(
        path,
        &surface_gifti(mesh, volume, source, float64),
        &WriteOptions::default(),
    )
}
