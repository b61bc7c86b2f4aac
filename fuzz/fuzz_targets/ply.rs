//! Fuzz target `ply`: runs `horosphere::fuzzing::feed(Target::Ply, bytes)`.
//! Seeds: fuzz/seeds/ply/. Command and figures: docs/fuzzing.md.
#![no_main]

use horosphere::fuzzing::{feed, Target};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| feed(Target::Ply, data));
