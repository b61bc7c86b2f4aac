//! The in-memory GIFTI model: what a file holds once its encoding is undone.
//!
//! In: nothing (plain types, built by the reader or by hand). Out: a
//! [`Gifti`] = file metadata, a label table and data arrays. What stays true
//! of a [`DataArray`] built through [`DataArray::new`] (and of every array the
//! reader returns): `dims` has 1 to 6 entries and their product equals the
//! number of values; values are in row-major order (last index fastest)
//! and in native byte order, whatever the file used. Follows "GIFTI Surface
//! Data Format Version 1.0" (NIfTI Data Format Working Group, 2011),
//! sections on MetaData, LabelTable, DataArray and
//! CoordinateSystemTransformMatrix.

use crate::error::{Error, Result};

/// Ordered name/value pairs (`<MetaData><MD><Name>..</Name><Value>..</Value></MD>..`).
///
/// Order is kept as read. Leading and trailing white space of names and
/// values is not significant (the reader trims it, as nibabel does).
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct MetaData(pub Vec<(String, String)>);

impl MetaData {
    /// No pairs.
    pub fn new() -> Self {
        MetaData(Vec::new())
    }

    /// The value of the first pair called `name`.
    pub fn get(&self, name: &str) -> Option<&str> {
        self.0
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, v)| v.as_str())
    }

    /// Set `name` to `value`: replaces the first pair of that name, or appends.
    pub fn set(&mut self, name: impl Into<String>, value: impl Into<String>) {
        let name = name.into();
        let value = value.into();
        match self.0.iter_mut().find(|(n, _)| *n == name) {
            Some(pair) => pair.1 = value,
            None => self.0.push((name, value)),
        }
    }

    /// Number of pairs.
    pub fn len(&self) -> usize {
        self.0.len()
    }

    /// True when there are no pairs.
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// The pairs in file order.
    pub fn iter(&self) -> impl Iterator<Item = (&str, &str)> {
        self.0.iter().map(|(n, v)| (n.as_str(), v.as_str()))
    }
}

/// One entry of a label table: integer key, name and optional colour.
#[derive(Debug, Clone, PartialEq)]
pub struct Label {
    /// The value that label arrays store for this label.
    pub key: i32,
    /// The label's name (text of the `<Label>` element).
    pub name: String,
    /// Red, green, blue, alpha in 0..=1, when the file gives a colour. A file
    /// that gives only some of the four components gets 0 for a missing
    /// colour component and 1 for a missing alpha.
    pub rgba: Option<[f64; 4]>,
}

/// The file's label table (`<LabelTable>`): keys are unique.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct LabelTable {
    /// Labels in file order.
    pub labels: Vec<Label>,
}

impl LabelTable {
    /// The label with key `key`.
    pub fn get(&self, key: i32) -> Option<&Label> {
        self.labels.iter().find(|l| l.key == key)
    }

    /// True when the table has no labels.
    pub fn is_empty(&self) -> bool {
        self.labels.is_empty()
    }

    /// The first key that appears twice, if any.
    pub fn duplicate_key(&self) -> Option<i32> {
        let mut keys: Vec<i32> = self.labels.iter().map(|l| l.key).collect();
        keys.sort_unstable();
        keys.windows(2).find(|w| w[0] == w[1]).map(|w| w[0])
    }
}

/// What the values of a data array mean (the `Intent` attribute).
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Intent {
    /// `NIFTI_INTENT_NONE`.
    None,
    /// `NIFTI_INTENT_POINTSET`: vertex coordinates, `[n, 3]`.
    PointSet,
    /// `NIFTI_INTENT_TRIANGLE`: triangles as vertex indices, `[f, 3]`.
    Triangle,
    /// `NIFTI_INTENT_SHAPE`: one value per vertex (thickness, depth, ...).
    Shape,
    /// `NIFTI_INTENT_LABEL`: one label key per vertex.
    Label,
    /// Any other intent, kept as the file wrote it (e.g. `NIFTI_INTENT_TIME_SERIES`).
    Other(String),
}

impl Intent {
    /// The name written in the file.
    pub fn as_str(&self) -> &str {
        match self {
            Intent::None => "NIFTI_INTENT_NONE",
            Intent::PointSet => "NIFTI_INTENT_POINTSET",
            Intent::Triangle => "NIFTI_INTENT_TRIANGLE",
            Intent::Shape => "NIFTI_INTENT_SHAPE",
            Intent::Label => "NIFTI_INTENT_LABEL",
            Intent::Other(s) => s,
        }
    }

    /// The intent named `s` in a file. The five intents above are also
    /// recognised by their NIfTI-1 codes (0, 1008, 1009, 2005, 1002);
    /// anything else is kept as [`Intent::Other`].
    pub fn from_name(s: &str) -> Intent {
        match s.trim() {
            "NIFTI_INTENT_NONE" | "0" => Intent::None,
            "NIFTI_INTENT_POINTSET" | "1008" => Intent::PointSet,
            "NIFTI_INTENT_TRIANGLE" | "1009" => Intent::Triangle,
            "NIFTI_INTENT_SHAPE" | "2005" => Intent::Shape,
            "NIFTI_INTENT_LABEL" | "1002" => Intent::Label,
            other => Intent::Other(other.to_string()),
        }
    }
}

impl std::fmt::Display for Intent {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// The numeric type of a data array (the `DataType` attribute).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DataType {
    /// `NIFTI_TYPE_UINT8`.
    U8,
    /// `NIFTI_TYPE_INT32`.
    I32,
    /// `NIFTI_TYPE_FLOAT32`.
    F32,
    /// `NIFTI_TYPE_FLOAT64`: not one of the three types of the GIFTI
    /// standard, but written by some tools; read and written unchanged.
    F64,
}

impl DataType {
    /// The name written in the file.
    pub fn as_str(self) -> &'static str {
        match self {
            DataType::U8 => "NIFTI_TYPE_UINT8",
            DataType::I32 => "NIFTI_TYPE_INT32",
            DataType::F32 => "NIFTI_TYPE_FLOAT32",
            DataType::F64 => "NIFTI_TYPE_FLOAT64",
        }
    }

    /// The type named `s` in a file, if supported.
    pub fn from_name(s: &str) -> Option<DataType> {
        match s.trim() {
            "NIFTI_TYPE_UINT8" => Some(DataType::U8),
            "NIFTI_TYPE_INT32" => Some(DataType::I32),
            "NIFTI_TYPE_FLOAT32" => Some(DataType::F32),
            "NIFTI_TYPE_FLOAT64" => Some(DataType::F64),
            _ => None,
        }
    }

    /// Bytes per value.
    pub fn size(self) -> usize {
        match self {
            DataType::U8 => 1,
            DataType::I32 | DataType::F32 => 4,
            DataType::F64 => 8,
        }
    }
}

/// The values of a data array, row-major, native byte order.
#[derive(Debug, Clone, PartialEq)]
pub enum Data {
    U8(Vec<u8>),
    I32(Vec<i32>),
    F32(Vec<f32>),
    F64(Vec<f64>),
}

impl Data {
    /// The values' type.
    pub fn data_type(&self) -> DataType {
        match self {
            Data::U8(_) => DataType::U8,
            Data::I32(_) => DataType::I32,
            Data::F32(_) => DataType::F32,
            Data::F64(_) => DataType::F64,
        }
    }

    /// Number of values.
    pub fn len(&self) -> usize {
        match self {
            Data::U8(v) => v.len(),
            Data::I32(v) => v.len(),
            Data::F32(v) => v.len(),
            Data::F64(v) => v.len(),
        }
    }

    /// True when there are no values.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Every value as `f64` (exact for all four types).
    pub fn to_f64(&self) -> Vec<f64> {
        match self {
            Data::U8(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Data::I32(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Data::F32(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Data::F64(v) => v.clone(),
        }
    }

    /// Integer values as `i32`: `Some` for `U8` and `I32` data, `None` for floats.
    pub fn to_i32(&self) -> Option<Vec<i32>> {
        match self {
            Data::U8(v) => Some(v.iter().map(|&x| i32::from(x)).collect()),
            Data::I32(v) => Some(v.clone()),
            Data::F32(_) | Data::F64(_) => None,
        }
    }
}

/// A `<CoordinateSystemTransformMatrix>`: the space of the data, the space
/// after the transform, and the 4x4 matrix (row-major, `matrix[row][col]`).
#[derive(Debug, Clone, PartialEq)]
pub struct CoordTransform {
    /// e.g. `NIFTI_XFORM_UNKNOWN`, `NIFTI_XFORM_SCANNER_ANAT`, `NIFTI_XFORM_ALIGNED_ANAT`.
    pub data_space: String,
    /// The space after applying `matrix`.
    pub transformed_space: String,
    /// Homogeneous transform, `matrix[row][col]`.
    pub matrix: [[f64; 4]; 4],
}

impl CoordTransform {
    /// Identity from `NIFTI_XFORM_UNKNOWN` to `NIFTI_XFORM_UNKNOWN`.
    pub fn identity_unknown() -> Self {
        let mut m = [[0.0; 4]; 4];
        for (i, row) in m.iter_mut().enumerate() {
            row[i] = 1.0;
        }
        CoordTransform {
            data_space: "NIFTI_XFORM_UNKNOWN".into(),
            transformed_space: "NIFTI_XFORM_UNKNOWN".into(),
            matrix: m,
        }
    }
}

/// Largest number of dimensions a data array may have (`Dim0` .. `Dim5`).
pub const MAX_DIMS: usize = 6;

/// One `<DataArray>`: intent, shape, values, its own metadata and transforms.
#[derive(Debug, Clone, PartialEq)]
pub struct DataArray {
    /// What the values mean.
    pub intent: Intent,
    /// The shape, row-major: `[n]` or `[n, k]` (up to six entries).
    pub dims: Vec<usize>,
    /// The values, row-major (index `[i, j]` of a 2-D array is `i * dims[1] + j`).
    pub data: Data,
    /// The array's own metadata.
    pub meta: MetaData,
    /// Coordinate transforms (usually one, on POINTSET arrays).
    pub transforms: Vec<CoordTransform>,
}

impl DataArray {
    /// An array with no metadata and no transform; checks that `dims` has 1
    /// to 6 entries whose product is `data.len()`.
    pub fn new(intent: Intent, dims: Vec<usize>, data: Data) -> Result<Self> {
        let a = DataArray {
            intent,
            dims,
            data,
            meta: MetaData::new(),
            transforms: Vec::new(),
        };
        a.check_shape()?;
        Ok(a)
    }

    /// Check that the shape agrees with the number of values.
    pub fn check_shape(&self) -> Result<()> {
        if self.dims.is_empty() || self.dims.len() > MAX_DIMS {
            return Err(Error::Invalid(format!(
                "data array has {} dimensions; expected 1 to {MAX_DIMS}",
                self.dims.len()
            )));
        }
        let n = element_count(&self.dims).ok_or_else(|| {
            Error::Invalid(format!(
                "data array dimensions {:?} overflow the address space",
                self.dims
            ))
        })?;
        if n != self.data.len() {
            return Err(Error::Invalid(format!(
                "data array dimensions {:?} give {n} values but the array holds {}",
                self.dims,
                self.data.len()
            )));
        }
        Ok(())
    }

    /// Number of rows (`dims[0]`).
    pub fn rows(&self) -> usize {
        self.dims.first().copied().unwrap_or(0)
    }

    /// Values per row (product of `dims[1..]`; 1 for a 1-D array;
    /// `usize::MAX` if that product overflows, possible only when `dims[0] == 0`).
    pub fn cols(&self) -> usize {
        element_count(self.dims.get(1..).unwrap_or(&[])).unwrap_or(usize::MAX)
    }

    /// True for a per-vertex column: `[n]` or `[n, 1]`.
    pub fn is_column(&self) -> bool {
        self.dims.len() == 1 || (self.dims.len() == 2 && self.dims[1] == 1)
    }
}

/// Product of `dims`, `None` on overflow.
pub fn element_count(dims: &[usize]) -> Option<usize> {
    dims.iter().try_fold(1usize, |acc, &d| acc.checked_mul(d))
}

/// A whole GIFTI file.
#[derive(Debug, Clone, PartialEq)]
pub struct Gifti {
    /// The `Version` attribute (`"1.0"`).
    pub version: String,
    /// File-level metadata.
    pub meta: MetaData,
    /// The label table (empty when the file has none).
    pub label_table: LabelTable,
    /// The data arrays in file order.
    pub arrays: Vec<DataArray>,
}

impl Default for Gifti {
    fn default() -> Self {
        Gifti {
            version: "1.0".into(),
            meta: MetaData::new(),
            label_table: LabelTable::default(),
            arrays: Vec::new(),
        }
    }
}

impl Gifti {
    /// Index of the first array with intent `intent`.
    pub fn find(&self, intent: &Intent) -> Option<usize> {
        self.arrays.iter().position(|a| &a.intent == intent)
    }
}

/// How `<DataArray>` names itself in error messages: `DataArray 1 (NIFTI_INTENT_TRIANGLE)`.
pub fn array_element(index: usize, intent: &Intent) -> String {
    format!("DataArray {index} ({intent})")
}
