//! Fuzz target `parse`: arbitrary bytes through `orrery::parse_bytes`; a
//! program that parses must print and parse back to the same term, and an
//! error must point inside the input. The checks live in
//! `tests/common/fuzz_checks.rs`, shared with the replay test.
#![no_main]

use libfuzzer_sys::fuzz_target;

#[allow(dead_code)] // each target uses one of the checks
#[path = "../../tests/common/fuzz_checks.rs"]
mod fuzz_checks;

fuzz_target!(|data: &[u8]| fuzz_checks::check_parse(data));
