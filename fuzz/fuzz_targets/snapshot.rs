//! Fuzz target `snapshot`: arbitrary bytes, and real snapshots with bytes
//! changed (signed again, or not), read as a snapshot and restored against a
//! fixed rule with small fuel and memory. Reading and restoring must give a
//! clear error or a run within its limits that ends as a real run would; a
//! changed snapshot must fail its checksum. The check lives in
//! `tests/common/fuzz_snapshot.rs`, shared with the replay test.
#![no_main]

use libfuzzer_sys::fuzz_target;

#[path = "../../tests/common/fuzz_snapshot.rs"]
mod fuzz_snapshot;

fuzz_target!(|data: &[u8]| fuzz_snapshot::check_snapshot(data));
