//! Fuzz target `nifti`: runs `horosphere::fuzzing::feed(Target::Nifti, bytes)`.
//! Seeds: fuzz/seeds/nifti/. Command and figures: docs/fuzzing.md.
#![no_main]

use horosphere::fuzzing::{feed, Target};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| feed(Target::Nifti, data));
