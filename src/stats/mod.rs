//! Vertex-wise group statistics on the common sphere.
//!
//! In: a cohort matrix (one map per unit on the same target sphere, see
//! [`crate::resample::matrix`]), a participants table (BIDS
//! `participants.tsv`: `participant_id` plus covariate columns), a model
//! formula in Wilkinson-Rogers notation ([`formula`]) and a contrast.
//! Out: per vertex the contrast effect, its standard error, Student t,
//! two-sided p, Benjamini-Hochberg q and (for a two-level group contrast)
//! Cohen's d ([`glm`], [`fdr`]).
//!
//! What stays true: one factorisation of the design serves every vertex;
//! a vertex with a missing value (NaN) in any unit is excluded and gets NaN
//! in every output; results do not depend on the thread count (vertices
//! are independent and written in vertex order).
//!
//! Methods: ordinary least squares with the general linear hypothesis test
//! of one contrast (e.g. Searle 1971, *Linear Models*, Wiley); formula
//! notation after Wilkinson and Rogers 1973, "Symbolic description of
//! factorial models for analysis of variance", Applied Statistics 22,
//! 392-399; false discovery rate after Benjamini and Hochberg 1995,
//! "Controlling the false discovery rate: a practical and powerful approach
//! to multiple testing", JRSS B 57, 289-300.

pub mod design;
pub mod fdr;
pub mod formula;
pub mod glm;
