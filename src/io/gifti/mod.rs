//! GIFTI surface and per-vertex data files: read, write, and convert to and
//! from [`TriMesh`].
//!
//! Follows "GIFTI Surface Data Format Version 1.0" (NIfTI Data Format
//! Working Group, 2011); checked against nibabel (see
//! `tests/reference/test_gifti_nibabel.py`).
//!
//! **In:** `.gii` files (`.surf.gii`, `.shape.gii`, `.func.gii`,
//! `.label.gii`) in any of the encodings ASCII, Base64Binary,
//! GZipBase64Binary or ExternalFileBinary (data file in the same folder
//! only), either byte order, either index order; data types UINT8, INT32,
//! FLOAT32 and also FLOAT64. **Out:** a [`Gifti`] (metadata, label table,
//! data arrays, each with its own metadata and coordinate transforms), or a
//! [`TriMesh`], or per-vertex values. **Writes** GZipBase64Binary,
//! little-endian, row-major by default ([`WriteOptions`] changes that),
//! through [`crate::io::atomic`]. **What stays true:** arrays in memory are
//! row-major and in native byte order; writing the same [`Gifti`] twice
//! gives byte-identical files; bad input is an [`Error::BadFile`] naming the
//! file, the element (`DataArray 1 (NIFTI_INTENT_TRIANGLE)`, `XML line 7`,
//! `LabelTable Label 2`, ...) and what was expected, never a panic; no entity
//! is ever expanded and nothing is ever fetched.
//!
//! Layout of a surface, worked example. A tetrahedron with 4 vertices and 4
//! triangles is two arrays:
//!
//! ```text
//! DataArray 0  Intent NIFTI_INTENT_POINTSET  DataType NIFTI_TYPE_FLOAT32  Dim0=4 Dim1=3
//!              data = [x0 y0 z0  x1 y1 z1  x2 y2 z2  x3 y3 z3]   (row-major: vertex i at 3i..3i+3)
//!              one CoordinateSystemTransformMatrix (NIFTI_XFORM_UNKNOWN -> NIFTI_XFORM_UNKNOWN, identity)
//! DataArray 1  Intent NIFTI_INTENT_TRIANGLE  DataType NIFTI_TYPE_INT32    Dim0=4 Dim1=3
//!              data = [0 2 1  0 1 3  0 3 2  1 2 3]                (triangle f at 3f..3f+3)
//! ```
//!
//! In a column-major file the same triangles are stored as
//! `[0 0 0 1  2 1 3 2  1 3 2 3]` (first index fastest); the reader turns that
//! back into the row-major layout above. A shape file is one array
//! `NIFTI_INTENT_SHAPE`, FLOAT32, `Dim0 = n` (one value per vertex); a label
//! file is one array `NIFTI_INTENT_LABEL`, INT32, `Dim0 = n`, whose values
//! are keys of the file's [`LabelTable`].
//!
//! ```no_run
//! use horosphere::io::gifti::{self, LabelTable, Label, MetaData};
//! use std::path::Path;
//! # fn main() -> horosphere::Result<()> {
//! let mesh = gifti::read_mesh(Path::new("sub-01_hemi-L_white.surf.gii"))?;
//! let mut meta = MetaData::new();
//! meta.set("Name", "distance to centroid");
//! let d: Vec<f32> = mesh.positions.iter().map(|p| horosphere::mesh::norm(*p) as f32).collect();
//! gifti::write_shape(Path::new("dist.shape.gii"), &d, &meta)?;
//! let table = LabelTable { labels: vec![
//!     Label { key: 0, name: "background".into(), rgba: Some([0.0, 0.0, 0.0, 0.0]) },
//!     Label { key: 1, name: "patch".into(), rgba: Some([1.0, 0.5, 0.0, 1.0]) },
//! ]};
//! let keys: Vec<i32> = d.iter().map(|&x| i32::from(x > 50.0)).collect();
//! gifti::write_labels(Path::new("patch.label.gii"), &keys, &table)?;
//! let back = gifti::read_labels(Path::new("patch.label.gii"))?;
//! assert_eq!(back.values, keys);
//! # Ok(()) }
//! ```

mod codec;
mod model;
mod reader;
mod writer;

pub use codec::{ByteOrder, IndexOrder, ZLIB_LEVEL};
pub use model::{
    array_element, element_count, CoordTransform, Data, DataArray, DataType, Gifti, Intent, Label,
    LabelTable, MetaData, MAX_DIMS,
};
pub use reader::parse;
pub use writer::{to_bytes, write, Encoding, WriteOptions};

use crate::error::{Error, Result};
use crate::mesh::TriMesh;
use std::path::Path;

/// Read and parse the GIFTI file at `path`.
pub fn read(path: &Path) -> Result<Gifti> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, e))?;
    parse(&bytes, path)
}

/// Read the surface in the GIFTI file at `path` (see [`Gifti::to_mesh`]).
pub fn read_mesh(path: &Path) -> Result<TriMesh> {
    read(path)?.to_mesh(path)
}

/// Write `mesh` to `path` as a GIFTI surface with the default options
/// (coordinates rounded to `f32`, the GIFTI coordinate type).
pub fn write_mesh(path: &Path, mesh: &TriMesh) -> Result<()> {
    mesh.validate()?;
    if mesh.n_vertices() > i32::MAX as usize {
        return Err(Error::Invalid(format!(
            "mesh has {} vertices; GIFTI triangles are 32-bit signed, at most {}",
            mesh.n_vertices(),
            i32::MAX
        )));
    }
    write(path, &Gifti::from_mesh(mesh), &WriteOptions::default())
}

/// Every data array of the file at `path` that is not part of a surface
/// (intents other than POINTSET and TRIANGLE), in file order.
pub fn read_vertex_data(path: &Path) -> Result<Vec<DataArray>> {
    Ok(read(path)?
        .arrays
        .into_iter()
        .filter(|a| !matches!(a.intent, Intent::PointSet | Intent::Triangle))
        .collect())
}

/// Per-vertex values of a shape file (`NIFTI_INTENT_SHAPE` or any float column).
#[derive(Debug, Clone, PartialEq)]
pub struct Shape {
    /// One value per vertex.
    pub values: Vec<f32>,
    /// The array's metadata (e.g. `Name`).
    pub meta: MetaData,
}

/// Per-vertex label keys with their table.
#[derive(Debug, Clone, PartialEq)]
pub struct Labels {
    /// One key per vertex.
    pub values: Vec<i32>,
    /// The file's label table.
    pub table: LabelTable,
    /// The array's metadata.
    pub meta: MetaData,
}

/// Write one float per vertex as a `NIFTI_INTENT_SHAPE` FLOAT32 array, with
/// `meta` as the array's metadata (put a `Name` there).
pub fn write_shape(path: &Path, values: &[f32], meta: &MetaData) -> Result<()> {
    write(
        path,
        &Gifti::from_shape(values, meta),
        &WriteOptions::default(),
    )
}

/// [`write_shape`] from `f64` values: FLOAT32, or FLOAT64 when `float64`,
/// with `meta` as the array's metadata.
pub fn write_values(path: &Path, values: &[f64], meta: &MetaData, float64: bool) -> Result<()> {
    let data = if float64 {
        Data::F64(values.to_vec())
    } else {
        Data::F32(values.iter().map(|&v| v as f32).collect())
    };
    let mut a = DataArray::new(Intent::Shape, vec![values.len()], data)?;
    a.meta = meta.clone();
    let g = Gifti {
        arrays: vec![a],
        ..Gifti::default()
    };
    write(path, &g, &WriteOptions::default())
}

/// Read the first shape array of the file at `path` (see [`Gifti::to_shape`]).
pub fn read_shape(path: &Path) -> Result<Shape> {
    read(path)?.to_shape(path)
}

/// Write one label key per vertex as a `NIFTI_INTENT_LABEL` INT32 array with
/// `table` as the file's label table. Every key must be in the table.
pub fn write_labels(path: &Path, labels: &[i32], table: &LabelTable) -> Result<()> {
    if let Some((v, k)) = labels
        .iter()
        .enumerate()
        .find(|(_, k)| table.get(**k).is_none())
    {
        return Err(Error::Invalid(format!(
            "vertex {v} has label key {k}, which the label table lacks; expected keys from the table"
        )));
    }
    write(
        path,
        &Gifti::from_labels(labels, table),
        &WriteOptions::default(),
    )
}

/// Read the first label array of the file at `path` (see [`Gifti::to_labels`]).
pub fn read_labels(path: &Path) -> Result<Labels> {
    read(path)?.to_labels(path)
}

impl Gifti {
    /// A surface file: a POINTSET FLOAT32 `[n, 3]` array (coordinates rounded
    /// to `f32`; with an identity transform from NIFTI_XFORM_UNKNOWN to
    /// NIFTI_XFORM_UNKNOWN, since the standard asks POINTSET arrays for one)
    /// and a TRIANGLE INT32 `[f, 3]` array. Vertex indices above `i32::MAX`
    /// cannot be stored in GIFTI and are saturated; [`write_mesh`] refuses
    /// such meshes first.
    pub fn from_mesh(mesh: &TriMesh) -> Gifti {
        let coords: Vec<f32> = mesh
            .positions
            .iter()
            .flat_map(|p| p.iter().map(|&c| c as f32))
            .collect();
        let tris: Vec<i32> = mesh
            .faces
            .iter()
            .flat_map(|t| t.iter().map(|&v| i32::try_from(v).unwrap_or(i32::MAX)))
            .collect();
        let points = DataArray {
            intent: Intent::PointSet,
            dims: vec![mesh.n_vertices(), 3],
            data: Data::F32(coords),
            meta: MetaData::new(),
            transforms: vec![CoordTransform::identity_unknown()],
        };
        let triangles = DataArray {
            intent: Intent::Triangle,
            dims: vec![mesh.n_faces(), 3],
            data: Data::I32(tris),
            meta: MetaData::new(),
            transforms: Vec::new(),
        };
        Gifti {
            arrays: vec![points, triangles],
            ..Gifti::default()
        }
    }

    /// The surface of this file: the first POINTSET array (`[n, 3]`, FLOAT32
    /// or FLOAT64, converted to `f64` millimetres as stored, transforms not
    /// applied) and the first TRIANGLE array (`[f, 3]`, integer). Validated
    /// with [`TriMesh::validate`]; errors name `path` and the array.
    pub fn to_mesh(&self, path: &Path) -> Result<TriMesh> {
        let pi = self.find(&Intent::PointSet).ok_or_else(|| {
            Error::bad_file(
                path,
                "file",
                "no NIFTI_INTENT_POINTSET array; expected a surface with vertex coordinates",
            )
        })?;
        let ti = self.find(&Intent::Triangle).ok_or_else(|| {
            Error::bad_file(
                path,
                "file",
                "no NIFTI_INTENT_TRIANGLE array; expected a surface with triangles",
            )
        })?;
        let (pa, ta) = match (self.arrays.get(pi), self.arrays.get(ti)) {
            (Some(p), Some(t)) => (p, t),
            _ => return Err(Error::bad_file(path, "file", "array index out of range")),
        };
        let pel = array_element(pi, &pa.intent);
        let tel = array_element(ti, &ta.intent);
        if pa.dims.len() != 2 || pa.dims[1] != 3 {
            return Err(Error::bad_file(
                path,
                pel,
                format!("dimensions {:?}; expected [n, 3]", pa.dims),
            ));
        }
        if ta.dims.len() != 2 || ta.dims[1] != 3 {
            return Err(Error::bad_file(
                path,
                tel,
                format!("dimensions {:?}; expected [f, 3]", ta.dims),
            ));
        }
        if pa.rows() == 0 {
            return Err(Error::bad_file(
                path,
                pel,
                "no vertices; expected at least 3",
            ));
        }
        if ta.rows() == 0 {
            return Err(Error::bad_file(
                path,
                tel,
                "no triangles; expected at least 1",
            ));
        }
        let coords = match &pa.data {
            Data::F32(_) | Data::F64(_) => pa.data.to_f64(),
            other => {
                return Err(Error::bad_file(
                    path,
                    pel,
                    format!(
                        "DataType {}; expected NIFTI_TYPE_FLOAT32 (or FLOAT64)",
                        other.data_type().as_str()
                    ),
                ))
            }
        };
        let positions: Vec<[f64; 3]> = coords.chunks_exact(3).map(|c| [c[0], c[1], c[2]]).collect();
        if let Some((i, p)) = positions
            .iter()
            .enumerate()
            .find(|(_, p)| !p.iter().all(|c| c.is_finite()))
        {
            return Err(Error::bad_file(
                path,
                pel,
                format!(
                    "vertex {i} has a non-finite coordinate ({}, {}, {}); expected finite millimetres",
                    p[0], p[1], p[2]
                ),
            ));
        }
        let idx = ta.data.to_i32().ok_or_else(|| {
            Error::bad_file(
                path,
                tel.clone(),
                format!(
                    "DataType {}; expected NIFTI_TYPE_INT32",
                    ta.data.data_type().as_str()
                ),
            )
        })?;
        let n = positions.len();
        if let Some((k, &v)) = idx
            .iter()
            .enumerate()
            .find(|(_, &v)| v < 0 || v as usize >= n)
        {
            return Err(Error::bad_file(
                path,
                tel,
                format!(
                    "triangle {} has vertex index {v}; expected indices from 0 to {} (the POINTSET has {n} vertices)",
                    k / 3,
                    n.saturating_sub(1)
                ),
            ));
        }
        let faces: Vec<[u32; 3]> = idx
            .chunks_exact(3)
            .map(|c| [c[0] as u32, c[1] as u32, c[2] as u32])
            .collect();
        TriMesh::new(positions, faces).map_err(|e| e.in_file(path, &tel))
    }

    /// A shape file: one `NIFTI_INTENT_SHAPE` FLOAT32 `[n]` array with `meta`.
    pub fn from_shape(values: &[f32], meta: &MetaData) -> Gifti {
        let a = DataArray {
            intent: Intent::Shape,
            dims: vec![values.len()],
            data: Data::F32(values.to_vec()),
            meta: meta.clone(),
            transforms: Vec::new(),
        };
        Gifti {
            arrays: vec![a],
            ..Gifti::default()
        }
    }

    /// The first SHAPE array, or else the first float array that is not a
    /// POINTSET; it must be a column (`[n]` or `[n, 1]`). FLOAT64 values are
    /// rounded to `f32`.
    pub fn to_shape(&self, path: &Path) -> Result<Shape> {
        let i = self
            .find(&Intent::Shape)
            .or_else(|| {
                self.arrays.iter().position(|a| {
                    !matches!(a.intent, Intent::PointSet | Intent::Triangle)
                        && matches!(a.data, Data::F32(_) | Data::F64(_))
                })
            })
            .ok_or_else(|| {
                Error::bad_file(
                    path,
                    "file",
                    "no NIFTI_INTENT_SHAPE (or other float) array; expected per-vertex values",
                )
            })?;
        let a = self
            .arrays
            .get(i)
            .ok_or_else(|| Error::bad_file(path, "file", "array index out of range"))?;
        let el = array_element(i, &a.intent);
        if !a.is_column() {
            return Err(Error::bad_file(
                path,
                el,
                format!("dimensions {:?}; expected [n] or [n, 1]", a.dims),
            ));
        }
        let values = match &a.data {
            Data::F32(v) => v.clone(),
            Data::F64(v) => v.iter().map(|&x| x as f32).collect(),
            other => {
                return Err(Error::bad_file(
                    path,
                    el,
                    format!(
                        "DataType {}; expected NIFTI_TYPE_FLOAT32",
                        other.data_type().as_str()
                    ),
                ))
            }
        };
        Ok(Shape {
            values,
            meta: a.meta.clone(),
        })
    }

    /// A label file: one `NIFTI_INTENT_LABEL` INT32 `[n]` array and `table`.
    pub fn from_labels(labels: &[i32], table: &LabelTable) -> Gifti {
        let a = DataArray {
            intent: Intent::Label,
            dims: vec![labels.len()],
            data: Data::I32(labels.to_vec()),
            meta: MetaData::new(),
            transforms: Vec::new(),
        };
        Gifti {
            label_table: table.clone(),
            arrays: vec![a],
            ..Gifti::default()
        }
    }

    /// The first LABEL array (a column of INT32 or UINT8 keys) and the
    /// file's label table. Keys missing from the table are allowed (the
    /// table may be partial); look them up with [`LabelTable::get`].
    pub fn to_labels(&self, path: &Path) -> Result<Labels> {
        let i = self.find(&Intent::Label).ok_or_else(|| {
            Error::bad_file(
                path,
                "file",
                "no NIFTI_INTENT_LABEL array; expected per-vertex label keys",
            )
        })?;
        let a = self
            .arrays
            .get(i)
            .ok_or_else(|| Error::bad_file(path, "file", "array index out of range"))?;
        let el = array_element(i, &a.intent);
        if !a.is_column() {
            return Err(Error::bad_file(
                path,
                el,
                format!("dimensions {:?}; expected [n] or [n, 1]", a.dims),
            ));
        }
        let values = a.data.to_i32().ok_or_else(|| {
            Error::bad_file(
                path,
                el,
                format!(
                    "DataType {}; expected NIFTI_TYPE_INT32",
                    a.data.data_type().as_str()
                ),
            )
        })?;
        Ok(Labels {
            values,
            table: self.label_table.clone(),
            meta: a.meta.clone(),
        })
    }
}
