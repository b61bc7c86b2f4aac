//! Stand-in for the GIFTI module while it is written on its own branch.
//!
//! In: a path. Out: always [`Error::Invalid`] ("GIFTI not yet available").
//! It has exactly the signatures of the real `io::gifti` module so that the
//! dispatch in [`super`] compiles unchanged; the merge replaces this file.

use crate::error::{Error, Result};
use crate::mesh::TriMesh;
use std::path::Path;

/// Stand-in for `gifti::read_mesh`: always refuses.
pub fn read_mesh(path: &Path) -> Result<TriMesh> {
    Err(Error::Invalid(format!(
        "{}: GIFTI not yet available",
        path.display()
    )))
}

/// Stand-in for `gifti::write_mesh`: always refuses and writes nothing.
pub fn write_mesh(path: &Path, _mesh: &TriMesh) -> Result<()> {
    Err(Error::Invalid(format!(
        "{}: GIFTI not yet available",
        path.display()
    )))
}
