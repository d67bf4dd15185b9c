//! Replays, on stable Rust and without cargo-fuzz, what the fuzz targets of
//! `fuzz/` check: the committed seed corpus (`tests/fuzz-corpus/<target>/`),
//! every failure a fuzzer ever found (`tests/fuzz-crashes/<target>/`, each
//! with its cause written in [`CRASHES`]), and a few thousand inputs from a
//! fixed pseudo-random stream. The checks are `tests/common/fuzz_checks.rs`,
//! the very code the fuzz targets run, which
//! goes through the one harness.

use std::path::{Path, PathBuf};

use crate::common::fuzz_checks::{check_agree, check_parse};
#[cfg(feature = "snapshot")]
use crate::common::fuzz_snapshot::{check_snapshot, SNAPSHOT_MUTATED, SNAPSHOT_UNSIGNED};

/// Every saved fuzzer failure: target, file name under
/// `tests/fuzz-crashes/<target>/`, and what caused it. The test below fails
/// if a file is missing from this table or the table names a missing file.
const CRASHES: &[(&str, &str, &str)] = &[];

/// A fuzz target's check: panics on a failure.
type Check = fn(&[u8]);

/// The fuzz targets and the check each runs (`snapshot` with the feature).
const TARGETS: &[(&str, Check)] = &[
    ("parse", check_parse),
    ("agree", check_agree),
    #[cfg(feature = "snapshot")]
    ("snapshot", check_snapshot),
];

fn check_of(target: &str) -> Check {
    match TARGETS.iter().find(|(name, _)| *name == target) {
        Some((_, check)) => *check,
        None => panic!("no fuzz target named {target}"),
    }
}

/// The files directly under `dir`, sorted (none if it does not exist).
fn files_in(dir: &Path) -> Vec<PathBuf> {
    let mut files: Vec<PathBuf> = match std::fs::read_dir(dir) {
        Ok(entries) => entries
            .map(|e| e.expect("a readable directory entry").path())
            .filter(|p| p.is_file())
            .collect(),
        Err(_) => Vec::new(),
    };
    files.sort();
    files
}

/// Run `check` on `input` on a thread with a 2 MiB stack (as an embedder's
/// worker might have); `Err` with the panic message if the check failed.
fn replay(check: Check, input: Vec<u8>) -> Result<(), String> {
    let thread = std::thread::Builder::new()
        .stack_size(2 << 20)
        .spawn(move || check(&input))
        .expect("spawn a replay thread");
    thread.join().map_err(|panic| {
        panic
            .downcast_ref::<String>()
            .cloned()
            .or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string()))
            .unwrap_or_else(|| "a panic".to_string())
    })
}

/// Replay every file under `tests/<folder>/<target>/` through its target's
/// check, collecting all failures before reporting them.
fn replay_folder(folder: &str) -> Vec<String> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join(folder);
    let mut failures = Vec::new();
    for &(target, check) in TARGETS {
        for file in files_in(&root.join(target)) {
            let input = std::fs::read(&file).expect("a readable input file");
            if let Err(why) = replay(check, input) {
                failures.push(format!("{}: {why}", file.display()));
            }
        }
    }
    failures
}

#[test]
fn the_seed_corpus_passes_the_fuzz_checks() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fuzz-corpus");
    for &(target, _) in TARGETS {
        assert!(
            files_in(&root.join(target)).len() >= 5,
            "the {target} seed corpus has gone missing"
        );
    }
    let failures = replay_folder("fuzz-corpus");
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}

#[test]
fn every_saved_fuzzer_failure_stays_fixed() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fuzz-crashes");
    let mut listed: Vec<(String, String)> = CRASHES
        .iter()
        .map(|(target, name, _)| (target.to_string(), name.to_string()))
        .collect();
    listed.sort();
    let mut present = Vec::new();
    for &(target, _) in TARGETS {
        for file in files_in(&root.join(target)) {
            let name = file.file_name().expect("a file name").to_string_lossy();
            if name != ".gitkeep" {
                present.push((target.to_string(), name.into_owned()));
            }
        }
    }
    present.sort();
    assert_eq!(
        present, listed,
        "every file under tests/fuzz-crashes is listed in CRASHES with its cause, and only those"
    );
    for (target, name, _) in CRASHES {
        check_of(target); // the table names a real target
        assert!(!name.is_empty());
    }
    let failures = replay_folder("fuzz-crashes");
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}

/// A fixed stream of pseudo-random bytes (xorshift64*, Vigna, "An
/// experimental exploration of Marsaglia's xorshift generators, scrambled",
/// 2016), so CI runs the checks on inputs no one wrote by hand.
struct Bytes(u64);

impl Bytes {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }

    fn input(&mut self, max_len: u64, alphabet: &[u8]) -> Vec<u8> {
        let len = self.next() % max_len;
        (0..len)
            .map(|_| match alphabet {
                [] => self.next() as u8,
                _ => alphabet[(self.next() % alphabet.len() as u64) as usize],
            })
            .collect()
    }
}

#[test]
fn pseudo_random_inputs_pass_the_fuzz_checks() {
    // Bytes drawn from the syntax's own characters parse more often than
    // uniform bytes; both are tried.
    let syntax = b"\\x.y =+-*/%<>!&|()\"{};,_#\n01279letrecinifthenelsecaseofNilSome(,)notlength";
    let mut stream = Bytes(0x6F72_7265_7279_2121);
    let mut failures = Vec::new();
    for round in 0..3_000 {
        let (check, input): (Check, Vec<u8>) = match round % 3 {
            0 => (check_parse, stream.input(120, syntax)),
            1 => (check_parse, stream.input(60, &[])),
            _ => (check_agree, stream.input(200, &[])),
        };
        if let Err(why) = replay(check, input.clone()) {
            failures.push(format!("{input:?}: {why}"));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}

/// The `snapshot` check on raw bytes, on bytes after a valid header, and on
/// real snapshots mutated, signed again or left unsigned.
#[cfg(feature = "snapshot")]
#[test]
fn pseudo_random_snapshots_pass_the_snapshot_check() {
    let mut stream = Bytes(0x736E_6170_7368_6F74);
    let mut header = b"orrsnap\0".to_vec();
    header.extend_from_slice(&orrery::FORMAT_VERSION.to_le_bytes());
    let mut failures = Vec::new();
    for round in 0..1_500 {
        let tail = stream.input(48, &[]);
        let input = match round % 5 {
            0 => tail,
            1 => [header.as_slice(), &tail].concat(),
            2 => [&[SNAPSHOT_UNSIGNED][..], &tail].concat(),
            _ => [&[SNAPSHOT_MUTATED][..], &tail].concat(),
        };
        if let Err(why) = replay(check_snapshot, input.clone()) {
            failures.push(format!("{input:?}: {why}"));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}
