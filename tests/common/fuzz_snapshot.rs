//! The property the `snapshot` fuzz target checks, shared (by path) with the
//! replay test (`tests/suite/fuzz_replay.rs`), like `fuzz_checks.rs`; kept
//! apart because it needs the `snapshot` feature. It depends on orrery alone.

use orrery::{
    Answer, Datum, HostCall, HostFunctions, Limits, MachineKind, Outcome, Paused, Program, Report,
    Snapshot,
};

/// Fuel of the runs the snapshots come from and are restored under.
const FUEL: u64 = 2_000;

/// Memory of those runs.
const MEMORY: usize = 4 << 20;

/// The rule every `snapshot` input is restored against: a loop that asks a
/// suspending host function once a round, between calls of an ordinary one
/// with a fuel cost.
pub const SNAPSHOT_RULE: &str = "let rec tally n acc = if n == 0 then acc else tally (n - 1) (acc + ask (bonus n)) in tally 6 (bonus 0)";

/// The answers the `snapshot` check gives `ask`: `ask n` is `n * n`, and
/// anything else an error.
pub fn snapshot_answer(call: &HostCall) -> Answer {
    match call.args.as_slice() {
        [Datum::Int(n)] => Ok(Datum::Int(n.wrapping_mul(*n))),
        _ => Err(format!("cannot answer {call}")),
    }
}

/// [`SNAPSHOT_RULE`] with its host table: `ask` suspends, `bonus n` is
/// `n + 10` for one unit more.
pub fn snapshot_rule() -> Program {
    let mut host = HostFunctions::new();
    host.register_suspending("ask", 1).expect("valid");
    let bonus = host
        .register("bonus", |n: i64| Ok::<_, String>(n.wrapping_add(10)))
        .expect("valid");
    host.set_cost(bonus, |_| 1);
    Program::parse_with(SNAPSHOT_RULE, &host).expect("the snapshot rule parses")
}

/// Limits of the `snapshot` check.
fn snapshot_limits() -> Limits {
    Limits::default().with_fuel(FUEL).with_memory(MEMORY)
}

/// Fuel a restored run is given after its snapshot's stop.
const TOP_UP: u64 = 500;

/// The machines that can pause, in the table's order.
fn pausing(program: &Program) -> Vec<MachineKind> {
    MachineKind::enabled()
        .iter()
        .copied()
        .filter(|k| k.machine().start(program, &Limits::default()).is_some())
        .collect()
}

/// A run of [`SNAPSHOT_RULE`] on machine `which % 128` (of the pausing
/// ones, in the table's order) stopped after `fuel` units, its suspensions
/// answered by [`snapshot_answer`] until then; or, when `which` is 128 or
/// more, stopped at its first suspension (with more fuel if `fuel` runs
/// out before it).
pub fn real_snapshot(which: u8, fuel: u64) -> Option<Snapshot> {
    let program = snapshot_rule();
    let kinds = pausing(&program);
    let kind = *kinds.get(usize::from(which % 128) % kinds.len().max(1))?;
    let mut run = kind
        .machine()
        .start(&program, &snapshot_limits().with_fuel(fuel))?;
    let mut report = run.resume(0);
    if which >= 128 && report.outcome == Outcome::OutOfFuel {
        report = run.resume(FUEL);
    }
    while let Outcome::Suspended(call) = &report.outcome {
        if which >= 128 {
            break;
        }
        report = run.resume_with(snapshot_answer(call));
    }
    Some(run.snapshot())
}

/// Drive `run` to its end: answer each suspension with `answers` while they
/// last, then with [`snapshot_answer`]; the first time it is out of fuel,
/// give it [`TOP_UP`] more.
fn drive(
    run: &mut dyn Paused,
    mut report: Report,
    answers: &mut dyn Iterator<Item = Answer>,
) -> Report {
    let mut topped_up = false;
    loop {
        report = match &report.outcome {
            Outcome::Suspended(call) => {
                let answer = answers.next().unwrap_or_else(|| snapshot_answer(call));
                run.resume_with(answer)
            }
            Outcome::OutOfFuel if !topped_up => {
                topped_up = true;
                run.resume(TOP_UP)
            }
            _ => return report,
        }
    }
}

/// FNV-1a, 64 bits (the snapshot format's checksum): used to sign mutated
/// snapshots again so that their bodies, not their checksums, are tested.
fn fnv(bytes: &[u8]) -> u64 {
    bytes.iter().fold(0xcbf2_9ce4_8422_2325, |h, &b| {
        (h ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01b3)
    })
}

/// An input that starts with this byte is a real snapshot, mutated and then
/// signed again: `S`, the machine, the fuel it stopped at, then pairs of a
/// position and a byte to exclusive-or there. `U` is the same, left unsigned.
/// Any other input is decoded as it is.
pub const SNAPSHOT_MUTATED: u8 = b'S';
pub const SNAPSHOT_UNSIGNED: u8 = b'U';

/// Bytes read as a snapshot and restored against [`SNAPSHOT_RULE`]: reading
/// and restoring give a clear error or a run; never a panic, and never more
/// than the limits. A restored run is a real run: it stands where its
/// snapshot says, and ends exactly as a fresh run of the rule given the
/// snapshot's recorded answers. A real snapshot with a changed byte and the
/// old checksum is refused.
pub fn check_snapshot(bytes: &[u8]) {
    let input = match bytes {
        [marker @ (SNAPSHOT_MUTATED | SNAPSHOT_UNSIGNED), which, fuel, edits @ ..] => {
            let Some(real) = real_snapshot(*which, u64::from(*fuel) * 3) else {
                return;
            };
            let mut input = real.to_bytes();
            let mut changed = false;
            for edit in edits.chunks_exact(2) {
                let at = usize::from(edit[0]) % input.len();
                input[at] ^= edit[1];
                changed |= edit[1] != 0;
            }
            if *marker == SNAPSHOT_MUTATED {
                let body = input.len() - 8;
                let sum = fnv(&input[..body]).to_le_bytes();
                input[body..].copy_from_slice(&sum);
            } else if changed && input != real.to_bytes() {
                let read = Snapshot::from_bytes(&input);
                assert!(
                    read.is_err(),
                    "a changed snapshot passed its checksum: {read:?}"
                );
                return;
            }
            input
        }
        _ => bytes.to_vec(),
    };
    let snapshot = match Snapshot::from_bytes(&input) {
        Ok(snapshot) => snapshot,
        Err(e) => return assert!(!e.to_string().is_empty()),
    };
    let again = Snapshot::from_bytes(&snapshot.to_bytes());
    assert_eq!(
        again.as_ref(),
        Ok(&snapshot),
        "a snapshot's bytes read back otherwise"
    );
    let program = snapshot_rule();
    let limits = snapshot_limits();
    let mut run = match snapshot.restore(&program, &limits) {
        Ok(run) => run,
        Err(e) => return assert!(!e.to_string().is_empty()),
    };
    assert_eq!(
        run.counts(),
        snapshot.counts(),
        "restored elsewhere than recorded"
    );
    assert_eq!(
        run.fuel_left(),
        snapshot.fuel_left(),
        "restored with other fuel"
    );
    let kind = MachineKind::from_name(snapshot.machine()).expect("restored on it");
    let stood = match snapshot.pending() {
        Some(call) => Outcome::Suspended(call.clone()),
        None if snapshot.answer_given().is_some() || run.is_finished() => run.resume(0).outcome,
        None => Outcome::OutOfFuel,
    };
    let at = Report {
        outcome: stood,
        counts: run.counts(),
        location: None,
    };
    let restored = drive(&mut *run, at, &mut std::iter::empty());
    assert!(
        run.peak_bytes() <= limits.memory,
        "a restored run passed its memory limit"
    );
    // The fresh run: the snapshot's fuel, its answers, then the same drive.
    let fuel = snapshot.counts().fuel() + snapshot.fuel_left();
    let mut fresh = kind
        .machine()
        .start(&program, &limits.clone().with_fuel(fuel))
        .expect("pauses");
    let mut recorded = snapshot
        .answers()
        .iter()
        .chain(snapshot.answer_given())
        .map(|(_, answer)| answer.clone());
    let first = fresh.resume(0);
    let fresh_end = drive(&mut *fresh, first, &mut recorded);
    assert_eq!(
        restored.outcome, fresh_end.outcome,
        "a restored run ended otherwise than a real one"
    );
    assert_eq!(
        restored.counts, fresh_end.counts,
        "a restored run counted otherwise than a real one"
    );
}
