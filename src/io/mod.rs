//! Surface and table I/O.
//!
//! In: paths. Out: [`TriMesh`]es, per-vertex data and tables, or files.
//! Invariants: a reader either returns validated data or an
//! [`Error::BadFile`](crate::error::Error::BadFile) naming the file, the
//! element and what was expected; a writer never leaves a half-written file
//! (everything goes through [`atomic::write_atomic`]: temporary file in the
//! destination folder, then rename).
//!
//! Formats: GIFTI ("GIFTI Surface Data Format Version 1.0", NIfTI Data Format
//! Working Group, 2011), OBJ, PLY and OFF. [`read_mesh`] and [`write_mesh`]
//! dispatch on the file name's extension and, for reading, on magic bytes.

pub mod atomic;
pub mod gifti;
