//! Fuzz target `gifti`: runs `horosphere::fuzzing::feed(Target::Gifti, bytes)`.
//! Seeds: fuzz/seeds/gifti/. Command and figures: docs/fuzzing.md.
#![no_main]

use horosphere::fuzzing::{feed, Target};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| feed(Target::Gifti, data));
