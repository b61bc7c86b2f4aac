//! Fuzz target `obj`: runs `horosphere::fuzzing::feed(Target::Obj, bytes)`.
//! Seeds: fuzz/seeds/obj/. Command and figures: docs/fuzzing.md.
#![no_main]

use horosphere::fuzzing::{feed, Target};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| feed(Target::Obj, data));
