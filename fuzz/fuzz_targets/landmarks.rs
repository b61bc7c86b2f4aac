//! Fuzz target `landmarks`: runs `horosphere::fuzzing::feed(Target::Landmarks, bytes)`.
//! Seeds: fuzz/seeds/landmarks/. Command and figures: docs/fuzzing.md.
#![no_main]

use horosphere::fuzzing::{feed, Target};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| feed(Target::Landmarks, data));
