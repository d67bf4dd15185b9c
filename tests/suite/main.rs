//! The integration suite, one test binary (one build, one link) with a
//! module per subject. Every run of a program on the machines goes through
//! the one harness of `tests/common/harness.rs`, over the machine table, so
//! the suite builds and passes with any one machine alone. The corpus of
//! programs and curried shapes is `tests/corpus.rs`; the resident-memory
//! measurements, which re-run themselves in child processes, are
//! `tests/resident_memory.rs` and `tests/adversarial.rs`.
//!
//! | module | tests |
//! |---|---|
//! | `agreement` | generated programs and programs built by index agree with the stepper at every fuel bound (SEMANTICS §3) |
//! | `machines` | what every machine of the table must do alike: cancellation, reused scratch, unaccounted builds, pausing, tail calls in constant space, the memory limit |
//! | `embedding` | host functions, values to and from Rust, threads, pausing across host calls |
//! | `hostile` | nesting a million deep, huge literals, exponential sharing, memory bombs, extreme limits (SEMANTICS §7) |
//! | `limit_shapes` | property tests of the limits on hostile shapes |
//! | `syntax` | the text syntax (SEMANTICS §5) |
//! | `toolkit` | shift, substitution and instantiation against Pierce's exercises |
//! | `determinism` | one decomposition per closed non-value (the stepper's single steps) |
//! | `suspend` | host calls that wait (and awaited, through `run_async`), and snapshots: generated programs with host calls interrupted at every contraction index and every suspension, sent through bytes (with the `snapshot` feature) and a fresh thread, end as uninterrupted runs; fingerprints, forks, refusals |
//! | `fuzz_replay` | the fuzz targets' checks on the seed corpus, saved failures and a fixed stream |
//! | `cli` | the command line (SEMANTICS §6), with the `cli` feature |

#[path = "../common/mod.rs"]
mod common;

mod agreement;
#[cfg(feature = "cli")]
mod cli;
#[cfg(feature = "stepper")]
mod determinism;
mod embedding;
mod fuzz_replay;
mod hostile;
mod limit_shapes;
mod locations;
mod machines;
mod suspend;
mod syntax;
mod toolkit;
