//! Synthetic cortex: folded hemisphere surfaces, per-vertex maps, planted
//! defects and whole demo cohorts, made by our own code from a seed.
//!
//! In: options ([`SurfaceParams`], [`cohort::CohortParams`]) and a seed. Out:
//! meshes in millimetres with thickness, depth and region maps, landmarks,
//! and the ground truth of what was planted. Invariants: the same options
//! and seed give the same bits on every run and with any number of threads
//! (our own random generator, [`rng`]; parallel work is per element); clean
//! surfaces are closed, genus 0, one piece, outward and free of
//! self-intersections; defects are only where the ground truth says.
//!
//! Layout: [`rng`] (random numbers), [`sphere`] (base sphere with an exact
//! vertex count), [`surface`] (the folded surface), [`maps`] (per-vertex
//! maps and landmarks), [`defects`] (holes, handles, stray pieces,
//! duplicated vertices), [`cohort`] (a study: participants, subjects,
//! ground truth).

pub mod cohort;
pub mod defects;
pub mod maps;
pub mod rng;
pub mod sphere;
pub mod surface;
pub mod write;

pub use surface::{folded_surface, FoldField, FoldedSurface, Hemi, SurfaceParams};

#[cfg(test)]
mod tests;
