//! Fuzz target `manifest`: runs `horosphere::fuzzing::feed(Target::Manifest, bytes)`.
//! Seeds: fuzz/seeds/manifest/. Command and figures: docs/fuzzing.md.
#![no_main]

use horosphere::fuzzing::{feed, Target};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| feed(Target::Manifest, data));
