//! The spherical conformal mapper (work in progress).
pub mod intrinsic;
pub mod milnor;
pub mod sparse;
