//! What the integration tests share:
//!
//! | module | holds | used by |
//! |---|---|---|
//! | `harness` | the one harness: every machine of the table, compared with the reference stepper, every failure collected | every runner |
//! | `fuzz_checks` | the properties the fuzz targets check (includes `harness` by path, for the fuzz crate) | `fuzz_replay`, `fuzz/` |
//! | `fuzz_snapshot` | the property the `snapshot` fuzz target checks (with the `snapshot` feature) | `fuzz_replay`, `fuzz/` |
//! | `corpus` | the formats of the corpus files: a program's header, a shapes file's blocks | `corpus`, `machines` |
//! | `mixed` | a program of every construct with a costed host call, and its host table (also included by the stepper's unit tests) | `machines` |
//! | `gen` | a proptest generator of closed programs, and all decompositions of a term | `agreement`, `determinism` |
//!
//! and [`on_small_stack`], for tests that would overflow a native stack if
//! anything recursed on the depth of its input.
#![allow(dead_code)]

pub mod corpus;
pub mod fuzz_checks;
#[cfg(feature = "snapshot")]
pub mod fuzz_snapshot;
pub mod gen;

mod mixed {
    use orrery::{Datum, HostFunctions};
    include!("mixed.rs");
}
#[allow(unused_imports)] // not every test binary runs the mixed program
pub use mixed::{mixed_host, MIXED};

#[allow(unused_imports)] // not every test binary marks programs
pub use fuzz_checks::{harness, marks};

/// Run `f` on a thread with a 2 MiB stack, as an embedding application's
/// worker thread might have, and return what it returns; panics (this is a
/// test) if `f` panics.
pub fn on_small_stack<T: Send + 'static>(f: impl FnOnce() -> T + Send + 'static) -> T {
    std::thread::Builder::new()
        .stack_size(2 << 20)
        .spawn(f)
        .expect("spawn a thread with a small stack")
        .join()
        .unwrap_or_else(|panic| std::panic::resume_unwind(panic))
}
