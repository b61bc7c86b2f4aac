//! Fuzz target `participants`: runs `horosphere::fuzzing::feed(Target::Participants, bytes)`.
//! Seeds: fuzz/seeds/participants/. Command and figures: docs/fuzzing.md.
#![no_main]

use horosphere::fuzzing::{feed, Target};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| feed(Target::Participants, data));
