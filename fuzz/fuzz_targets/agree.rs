//! Fuzz target `agree`: arbitrary bytes decoded into a closed program (or,
//! after a leading `#`, parsed as text) and run on every machine with small
//! fuel and memory; the machines must agree (SEMANTICS §3). The checks live in
//! `tests/common/fuzz_checks.rs`, shared with the replay test.
#![no_main]

use libfuzzer_sys::fuzz_target;

#[allow(dead_code)] // each target uses one of the checks
#[path = "../../tests/common/fuzz_checks.rs"]
mod fuzz_checks;

fuzz_target!(|data: &[u8]| fuzz_checks::check_agree(data));
