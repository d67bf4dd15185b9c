//! Snapshots: a paused or suspended run as owned data that can wait, travel
//! to another thread or process, and be restored against the same program.
//!
//! **What a snapshot holds.** Not the machine's heap: the run's *inputs* from
//! the start — which machine ran it, the program's fingerprint, the fuel it
//! was given in all, and every answer its suspending host calls took, each
//! with the call it answered — and where it stood: its counts, its fuel left,
//! and the call it waits on. Every machine is deterministic, so restoring
//! starts the program again on the same machine under the caller's limits,
//! feeds it the recorded answers, and checks that it stops exactly where the
//! snapshot says, with the same counts, the same fuel left and the same
//! pending call; then the restored run *is* the snapshotted one, down to its
//! heap, its backtrace and its peak memory. A snapshot that does not replay
//! to its own record is refused with [`SnapshotError::Diverged`], so a
//! corrupted or crafted one is either the state of a real run of this
//! program, reached under the caller's own fuel and memory limits, or an
//! error. Nothing in it is trusted: the machines never see its bytes.
//!
//! The cost of that guarantee is time: restoring remakes the contractions
//! made so far (no more than the fuel the caller's limits allow). Its size is
//! that of the answers it records, a few dozen bytes besides.
//!
//! **Ordinary host functions** (not suspending) are called again while
//! restoring, with the same arguments in the same order. They must answer the
//! same way (a pure lookup, a price table); a function whose answer changed
//! makes the replay diverge, which the checks catch as an error. Anything
//! that must not be asked twice belongs in a suspending function, whose
//! answers the snapshot records.
//!
//! **The fingerprint** is a 64-bit FNV-1a hash (Fowler, Noll and Vo; the
//! parameters of IETF draft-eastlake-fnv, 2019, §2) of the program's
//! canonical text ([`crate::print`] of [`Program::to_term`], arguments
//! included) and of its host table: each function's name, arity and whether
//! it suspends, in registration order.

use std::convert::Infallible;
use std::fmt;

use crate::budget::Budget;
use crate::machines::MachineKind;
use crate::vocabulary::{Answer, Counts, HostCall, Limits, Outcome, Paused};
use crate::Program;

/// A paused or suspended run as owned data (see the module documentation):
/// `Send + Sync`, restored with [`Snapshot::restore`] against the same
/// program, in any thread or process. `Clone` forks a run: each restored
/// copy goes on independently, to the same end.
///
/// # Examples
///
/// ```
/// use orrery::{Datum, HostFunctions, Limits, MachineKind, Outcome, Program};
/// let mut host = HostFunctions::new();
/// host.register_suspending("tide_height", 1).unwrap();
/// let program = Program::parse_with("tide_height \"north quay\" * 2", &host).unwrap();
/// let kind = MachineKind::enabled().iter().copied().find(|k| k.name() != "env").unwrap();
/// let mut run = kind.machine().start(&program, &Limits::default()).unwrap();
/// assert_eq!(run.resume(0).outcome.name(), "suspended");
/// let snapshot = run.snapshot();
/// drop(run);
/// // Later, elsewhere: restore it and answer.
/// let fork = snapshot.clone();
/// let answer = std::thread::spawn(move || {
///     let mut run = fork.restore(&program, &Limits::default()).unwrap();
///     run.resume_with(Ok(Datum::Int(21))).outcome
/// });
/// assert_eq!(answer.join().unwrap().value().unwrap().as_int(), Some(42));
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Snapshot {
    pub(crate) machine: String,
    pub(crate) fingerprint: u64,
    /// Fuel the run was given in all: used and left.
    pub(crate) fuel: u64,
    pub(crate) fuel_left: u64,
    pub(crate) counts: Counts,
    pub(crate) stop: Stop,
    /// The answers the run's suspending calls took, in order.
    pub(crate) journal: Vec<(HostCall, Answer)>,
    /// An answer given to the pending call but not yet taken (the run was
    /// out of fuel for the call when it was answered).
    pub(crate) given: Option<(HostCall, Answer)>,
}

/// Where a snapshotted run stood.
#[derive(Clone, Debug, PartialEq)]
pub(crate) enum Stop {
    /// Not resumed yet: nothing evaluated.
    Fresh,
    /// Paused, out of fuel.
    OutOfFuel,
    /// Waiting on this call.
    Suspended(HostCall),
    /// Ended (with a value, an error or a limit).
    Ended,
}

/// Why a snapshot could not be read or restored.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum SnapshotError {
    /// The bytes end before the snapshot does.
    #[error("the snapshot is truncated: {0}")]
    Truncated(String),
    /// The bytes are not a snapshot, or were changed since it was written.
    #[error("the snapshot is corrupt: {0}")]
    Corrupt(String),
    /// A snapshot written in another version of the format.
    #[error("the snapshot is in format version {found}; this build reads version {expected}")]
    Version {
        /// The version the bytes declare.
        found: u32,
        /// The version this build reads and writes.
        expected: u32,
    },
    /// The snapshot is of another program or host table.
    #[error("the snapshot is of another program: its fingerprint is {expected:016x}, this program's is {found:016x}")]
    ProgramMismatch {
        /// The fingerprint the snapshot holds.
        expected: u64,
        /// The fingerprint of the program given to restore it.
        found: u64,
    },
    /// The machine it names is not in this build, or cannot pause.
    #[error("the snapshot is of a run on `{0}`, which this build cannot restore")]
    Machine(String),
    /// Replaying it needs more fuel than the limits allow.
    #[error(
        "restoring the snapshot replays {needed} units of fuel, more than the limit of {limit}"
    )]
    Fuel {
        /// The fuel the run was given in all.
        needed: u64,
        /// The caller's fuel limit.
        limit: u64,
    },
    /// Its recorded answers take more than the memory limit.
    #[error("the snapshot's answers take {bytes} bytes, more than the memory limit of {limit}")]
    Memory {
        /// Bytes of the recorded data.
        bytes: usize,
        /// The caller's memory limit.
        limit: usize,
    },
    /// The run did not replay to the state the snapshot records.
    #[error("the snapshot does not replay to its own record: {0}")]
    Diverged(String),
}

impl fmt::Display for HostCall {
    /// `name(arg, …)`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}(", self.name)?;
        for (i, arg) in self.args.iter().enumerate() {
            let sep = if i == 0 { "" } else { ", " };
            write!(f, "{sep}{arg:?}")?;
        }
        f.write_str(")")
    }
}

/// A program's fingerprint, cached on the program.
struct Fingerprint(u64);

/// The fingerprint of `program` (see the module documentation).
///
/// # Examples
///
/// ```
/// use orrery::{fingerprint, HostFunctions, Program};
/// let a = Program::parse("let crates = 4 in crates * 3").unwrap();
/// let b = Program::parse("let boxes = 4 in boxes * 3").unwrap(); // same term
/// let c = Program::parse("let crates = 4 in crates * 5").unwrap();
/// assert_eq!(fingerprint(&a), fingerprint(&b));
/// assert_ne!(fingerprint(&a), fingerprint(&c));
/// let mut host = HostFunctions::new();
/// host.register("unused", |n: i64| Ok::<_, String>(n)).unwrap();
/// let d = Program::parse_with("let crates = 4 in crates * 3", &host).unwrap();
/// assert_ne!(fingerprint(&a), fingerprint(&d));
/// ```
pub fn fingerprint(program: &Program) -> u64 {
    let made = program.prepared(|| {
        let arena = crate::Arena::new();
        let mut hash = Fnv::new();
        hash.write(b"orrery program\0");
        hash.write(crate::print(program.to_term(&arena)).as_bytes());
        let host = program.host();
        for (name, id) in host.iter() {
            hash.write(b"\0host\0");
            hash.write(name.as_bytes());
            hash.write(&(id.arity() as u64).to_le_bytes());
            hash.write(&[u8::from(host.suspends(id))]);
        }
        Ok::<_, Infallible>(Fingerprint(hash.finish()))
    });
    match made {
        Ok(f) => f.0,
        Err(never) => match never {},
    }
}

/// FNV-1a, 64 bits (see the module documentation).
pub(crate) struct Fnv(u64);

impl Fnv {
    pub(crate) fn new() -> Self {
        Fnv(0xcbf2_9ce4_8422_2325)
    }

    pub(crate) fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 ^= u64::from(b);
            self.0 = self.0.wrapping_mul(0x0000_0100_0000_01b3);
        }
    }

    pub(crate) fn finish(&self) -> u64 {
        self.0
    }
}

impl Snapshot {
    /// The snapshot of a run of `program` on `machine` whose budget is
    /// `budget`. (A build whose only machine is env, which cannot pause,
    /// takes no snapshots.)
    #[allow(dead_code)]
    pub(crate) fn of(
        machine: &'static str,
        program: &Program,
        budget: &Budget,
        finished: bool,
    ) -> Snapshot {
        let stop = match (&budget.suspended, finished, budget.started) {
            (_, true, _) => Stop::Ended,
            (Some(call), _, _) => Stop::Suspended((**call).clone()),
            (None, false, false) => Stop::Fresh,
            (None, false, true) => Stop::OutOfFuel,
        };
        let fuel_left = budget.fuel_left();
        Snapshot {
            machine: machine.to_string(),
            fingerprint: fingerprint(program),
            fuel: budget.counts.fuel().saturating_add(fuel_left),
            fuel_left,
            counts: budget.counts,
            stop,
            journal: budget.journal.clone(),
            given: budget.answer.as_deref().cloned(),
        }
    }

    /// The name of the machine the run is on.
    pub fn machine(&self) -> &str {
        &self.machine
    }

    /// The fingerprint of the program the run is of (see [`fingerprint`]).
    pub fn program_fingerprint(&self) -> u64 {
        self.fingerprint
    }

    /// The contractions the run had made.
    pub fn counts(&self) -> Counts {
        self.counts
    }

    /// The fuel the run had left.
    pub fn fuel_left(&self) -> u64 {
        self.fuel_left
    }

    /// The call the run waits on, if it is suspended.
    pub fn pending(&self) -> Option<&HostCall> {
        match &self.stop {
            Stop::Suspended(call) => Some(call),
            _ => None,
        }
    }

    /// The answers the run's suspending calls took, with their calls, in
    /// order.
    pub fn answers(&self) -> &[(HostCall, Answer)] {
        &self.journal
    }

    /// An answer given to the pending call and not yet taken, with the call:
    /// the run takes it when it resumes (see [`Paused::resume_with`]).
    pub fn answer_given(&self) -> Option<&(HostCall, Answer)> {
        self.given.as_ref()
    }

    /// The run again, exactly where it stood, on the machine it ran on:
    /// replayed under `limits` (their memory limit, cancellation handle and
    /// context; the fuel is the snapshot's own, which must be within
    /// `limits.fuel`) and checked against the snapshot's record (see the
    /// module documentation).
    ///
    /// # Errors
    ///
    /// [`SnapshotError`]: another program or host table, a machine this build
    /// lacks, more fuel or memory than `limits` allow, or a replay that does
    /// not reach the recorded state.
    pub fn restore(
        &self,
        program: &Program,
        limits: &Limits,
    ) -> Result<Box<dyn Paused>, SnapshotError> {
        let found = fingerprint(program);
        if found != self.fingerprint {
            return Err(SnapshotError::ProgramMismatch {
                expected: self.fingerprint,
                found,
            });
        }
        let cannot = || SnapshotError::Machine(self.machine.clone());
        let kind = MachineKind::from_name(&self.machine).ok_or_else(cannot)?;
        if self.fuel > limits.fuel {
            return Err(SnapshotError::Fuel {
                needed: self.fuel,
                limit: limits.fuel,
            });
        }
        let bytes = self.data_bytes();
        if bytes > limits.memory {
            return Err(SnapshotError::Memory {
                bytes,
                limit: limits.memory,
            });
        }
        let mut run = kind
            .machine()
            .start(program, &limits.clone().with_fuel(self.fuel))
            .ok_or_else(cannot)?;
        let diverged = |what: String| Err(SnapshotError::Diverged(what));
        if self.stop == Stop::Fresh {
            if self.counts != Counts::default()
                || self.fuel_left != self.fuel
                || !self.journal.is_empty()
                || self.given.is_some()
            {
                return diverged("a run not yet resumed has made nothing".into());
            }
            return Ok(run);
        }
        let mut report = run.resume(0);
        let mut answers = self.journal.iter();
        while let Outcome::Suspended(call) = &report.outcome {
            let Some((asked, answer)) = answers.next() else {
                break;
            };
            if asked != call {
                return diverged(format!(
                    "the run asked {call} where the snapshot answers {asked}"
                ));
            }
            report = run.resume_with(answer.clone());
        }
        if answers.next().is_some() {
            return diverged(format!(
                "the run stopped ({}) with answers still to take",
                report.outcome.name()
            ));
        }
        if report.counts != self.counts || run.fuel_left() != self.fuel_left {
            return diverged(format!(
                "the run stopped at {} with {} fuel left; the snapshot records {} with {} left",
                report.counts,
                run.fuel_left(),
                self.counts,
                self.fuel_left
            ));
        }
        let stands = match (&self.stop, &report.outcome, &self.given) {
            (Stop::OutOfFuel, Outcome::OutOfFuel, None) => true,
            (Stop::OutOfFuel, Outcome::Suspended(call), Some((asked, _))) => call == asked,
            (Stop::Suspended(asked), Outcome::Suspended(call), None) => call == asked,
            (Stop::Ended, _, None) => run.is_finished(),
            _ => false,
        };
        if !stands {
            return diverged(format!(
                "the run stopped with outcome `{}`, not where the snapshot stands",
                report.outcome.name()
            ));
        }
        if let Some((_, answer)) = &self.given {
            run.answer(answer.clone());
        }
        Ok(run)
    }

    /// Bytes the recorded calls and answers take, about as a run holds them.
    fn data_bytes(&self) -> usize {
        let pending = self.pending().map_or(0, call_bytes);
        let given = self.given.as_ref().map_or(0, |(c, a)| entry_bytes(c, a));
        self.journal
            .iter()
            .map(|(c, a)| entry_bytes(c, a))
            .fold(pending.saturating_add(given), usize::saturating_add)
    }
}

/// Bytes a recorded call and its answer take in a run's journal: what the
/// run's memory limit is charged when the answer is taken.
pub(crate) fn entry_bytes(call: &HostCall, answer: &Answer) -> usize {
    let answer = match answer {
        Ok(d) => datum_bytes(d),
        Err(m) => m.len(),
    };
    call_bytes(call).saturating_add(answer)
}

/// Bytes of a call: its name and its arguments.
fn call_bytes(call: &HostCall) -> usize {
    call.args
        .iter()
        .map(datum_bytes)
        .fold(call.name.len(), usize::saturating_add)
}

/// Bytes of a datum, as [`std::mem::size_of`] its nodes and its text.
fn datum_bytes(datum: &crate::Datum<'_>) -> usize {
    let mut bytes = 0usize;
    let mut pending = vec![datum];
    while let Some(d) = pending.pop() {
        bytes = bytes.saturating_add(std::mem::size_of::<crate::Datum<'_>>());
        match d {
            crate::Datum::Str(s) => bytes = bytes.saturating_add(s.len()),
            crate::Datum::Con(c) => {
                bytes = bytes.saturating_add(c.tag().len());
                pending.extend(c.fields());
            }
            _ => {}
        }
    }
    bytes
}

#[cfg(feature = "snapshot")]
mod bytes;
#[cfg(feature = "snapshot")]
pub use bytes::FORMAT_VERSION;
