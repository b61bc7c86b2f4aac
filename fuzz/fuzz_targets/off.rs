//! Fuzz target `off`: runs `horosphere::fuzzing::feed(Target::Off, bytes)`.
//! Seeds: fuzz/seeds/off/. Command and figures: docs/fuzzing.md.
#![no_main]

use horosphere::fuzzing::{feed, Target};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| feed(Target::Off, data));
