//! horosphere: a cohort of cortical surface meshes to one common sphere.
//!
//! The library is a chain of stages, each a module of plain functions on
//! plain types (see `docs/ARCHITECTURE.md` for the code map):
//!
//! inspect -> repair -> map -> align -> resample -> stats and report.
//!
//! The shared core is [`mesh`] (indexed meshes and the halfedge
//! Delta-complex) and [`io`] (GIFTI, OBJ, PLY, OFF, tables). Research use
//! only: not a medical device; results need a trained analyst's review.

pub mod align;
pub mod cohort;
pub mod error;
pub mod fuzzing;
pub mod handles;
pub mod inspect;
pub mod io;
pub mod map;
pub mod mesh;
pub mod moebius;
pub mod register;
pub mod repair;
pub mod report;
pub mod resample;
pub mod stats;
pub mod synth;
pub mod volume;

pub use error::{Error, Result};
pub use mesh::TriMesh;
