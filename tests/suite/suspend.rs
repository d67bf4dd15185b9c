//! Host calls that wait, and runs that travel: for generated programs with
//! host calls, a run paused at every contraction index, snapshotted,
//! serialised, restored on a fresh thread and resumed — and at every
//! suspension along the way the same again, answered there — ends exactly as
//! the uninterrupted run whose host functions answer at once: the same
//! outcome, value, counts and location (`orrery::disagreement`). Then the
//! snapshot's own promises: a fingerprint per program and host table, forks
//! that end alike, and bytes that are refused, never trusted.

use std::sync::atomic::{AtomicU64, Ordering};

use orrery::{
    disagreement, Answer, Arena, Datum, HostCall, HostFunctions, HostId, Limits, MachineKind,
    Outcome, Paused, Program, Report, Snapshot, SnapshotError,
};
use proptest::strategy::{Strategy, ValueTree};
use proptest::test_runner::TestRunner;

use crate::common::gen::{build_with, hosted_program, Gen};

/// Fuel of the uninterrupted runs: the bound of every contraction index.
const FUEL: u64 = 300;
const MEMORY: usize = 4 << 20;

/// The answers of the test's host functions, whether they answer at once or
/// are asked through a suspension: `stock n` (a count), `quote a b` (costs
/// two units more), `tick` (no arguments) and `echo x` (its argument).
fn oracle(name: &str, args: &[Datum<'_>]) -> Answer {
    match (name, args) {
        ("stock", [Datum::Int(n)]) => Ok(Datum::Int(n.wrapping_mul(3).wrapping_add(1))),
        ("stock", [Datum::Str(s)]) => Ok(Datum::Int(s.chars().count() as i64)),
        ("stock", [Datum::Bool(b)]) => Ok(Datum::Bool(!b)),
        ("stock", [other]) => Err(format!("no stock for {}", other.describe())),
        ("quote", [Datum::Int(a), Datum::Int(b)]) => Ok(Datum::Int(a.wrapping_add(*b))),
        ("quote", [a, Datum::Bool(true)]) => Ok(Datum::con("Some", vec![a.clone().into_owned()])),
        ("quote", _) => Err("cannot quote that".to_string()),
        ("tick", []) => Ok(Datum::Int(7)),
        ("echo", [x]) => Ok(x.clone().into_owned()),
        _ => Err(format!("{name} is not a host function here")),
    }
}

const HOSTS: [(&str, usize); 4] = [("stock", 1), ("quote", 2), ("tick", 0), ("echo", 1)];

/// How the test's host functions answer.
#[derive(Clone, Copy, PartialEq)]
enum Answering {
    /// At once, as ordinary host functions.
    AtOnce,
    /// Later: every call suspends the run.
    Later,
    /// Through a future (for `run_async`) that is pending once first.
    Awaited,
}

/// The host table, its functions answering as `answering` says.
fn table(answering: Answering) -> (HostFunctions, Vec<HostId>) {
    let mut host = HostFunctions::new();
    let mut ids = Vec::new();
    for (name, arity) in HOSTS {
        let id = match answering {
            Answering::AtOnce => host.register_data(name, arity, move |args| oracle(name, args)),
            Answering::Later => host.register_suspending(name, arity),
            Answering::Awaited => host.register_async(name, arity, move |args| {
                Box::pin(async move {
                    Yield::default().await;
                    oracle(name, &args)
                })
            }),
        };
        ids.push(id.expect("a valid host function"));
    }
    host.set_cost(ids[1], |_| 2);
    (host, ids)
}

/// A future that is pending once (waking itself), then ready: an answer
/// that does not come at the first poll.
#[derive(Default)]
struct Yield(bool);

impl std::future::Future for Yield {
    type Output = ();

    fn poll(
        mut self: std::pin::Pin<&mut Self>,
        cx: &mut std::task::Context<'_>,
    ) -> std::task::Poll<()> {
        if self.0 {
            return std::task::Poll::Ready(());
        }
        self.0 = true;
        cx.waker().wake_by_ref();
        std::task::Poll::Pending
    }
}

fn program(g: &Gen, answering: Answering) -> Program {
    let (host, ids) = table(answering);
    let arena = Arena::new();
    Program::with_host(build_with(&arena, g, 0, &ids), &host).expect("a valid program")
}

fn limits() -> Limits {
    Limits::default().with_fuel(FUEL).with_memory(MEMORY)
}

#[derive(Default)]
struct Tally {
    programs: AtomicU64,
    indices: AtomicU64,
    suspensions: AtomicU64,
    restores: AtomicU64,
    bytes: AtomicU64,
}

/// `run` snapshotted, serialised, read back and restored on a fresh thread,
/// then brought back here.
fn travel(
    run: Box<dyn Paused>,
    program: &Program,
    tally: &Tally,
) -> Result<Box<dyn Paused>, String> {
    let (bytes, size) = to_bytes(&run.snapshot());
    tally.restores.fetch_add(1, Ordering::Relaxed);
    tally.bytes.fetch_add(size as u64, Ordering::Relaxed);
    let program = program.clone();
    let moved = std::thread::spawn(move || {
        let snapshot = from_bytes(bytes)?;
        let restored = snapshot
            .restore(&program, &limits())
            .map_err(|e| e.to_string())?;
        Ok::<_, String>(restored.detach())
    })
    .join()
    .map_err(|_| "the restoring thread panicked".to_string())??;
    Ok(moved.attach())
}

/// A snapshot's bytes, and how many: its serialised form, with the
/// `snapshot` feature.
#[cfg(feature = "snapshot")]
fn to_bytes(snapshot: &Snapshot) -> (Vec<u8>, usize) {
    let bytes = snapshot.to_bytes();
    let size = bytes.len();
    (bytes, size)
}

#[cfg(feature = "snapshot")]
fn from_bytes(bytes: Vec<u8>) -> Result<Snapshot, String> {
    Snapshot::from_bytes(&bytes).map_err(|e| e.to_string())
}

/// Without the feature there is no format: the snapshot travels as itself.
#[cfg(not(feature = "snapshot"))]
fn to_bytes(snapshot: &Snapshot) -> (Snapshot, usize) {
    (snapshot.clone(), 0)
}

#[cfg(not(feature = "snapshot"))]
fn from_bytes(snapshot: Snapshot) -> Result<Snapshot, String> {
    Ok(snapshot)
}

/// The run of `program` on `kind` paused after `index` units of fuel, and at
/// every suspension, each time sent through [`travel`]; answered by
/// [`oracle`] and given the rest of [`FUEL`].
fn interrupted(
    kind: MachineKind,
    program: &Program,
    index: u64,
    tally: &Tally,
) -> Result<Report, String> {
    let start = limits().with_fuel(index);
    let mut run = kind
        .machine()
        .start(program, &start)
        .ok_or("cannot pause")?;
    let mut report = run.resume(0);
    run = travel(run, program, tally)?;
    let mut topped_up = false;
    loop {
        match &report.outcome {
            Outcome::Suspended(HostCall { name, args }) => {
                tally.suspensions.fetch_add(1, Ordering::Relaxed);
                let answer = oracle(name, args);
                run = travel(run, program, tally)?;
                report = run.resume_with(answer);
            }
            Outcome::OutOfFuel if !topped_up => {
                topped_up = true;
                report = run.resume(FUEL - index);
            }
            _ => return Ok(report),
        }
    }
}

/// Every contraction index of `g`'s run, on every machine that can pause.
fn check(g: &Gen, tally: &Tally) -> Result<(), String> {
    let at_once = program(g, Answering::AtOnce);
    let waiting = program(g, Answering::Later);
    let reference = crate::common::harness::reference().ok_or("no reference machine")?;
    let whole = reference.machine().run(&at_once, &limits());
    tally.programs.fetch_add(1, Ordering::Relaxed);
    for &kind in MachineKind::enabled() {
        if kind.machine().start(&waiting, &limits()).is_none() {
            // env cannot pause: its run stops at the first suspending call,
            // as the reference's uninterrupted run does.
            let stops = reference.machine().run(&waiting, &limits());
            let report = kind.machine().run(&waiting, &limits());
            if let Some(why) = disagreement(&stops, &report) {
                return Err(format!(
                    "{} stops otherwise at a suspending call: {why}",
                    kind.name()
                ));
            }
            continue;
        }
        for index in 0..=whole.counts.fuel().min(FUEL) {
            tally.indices.fetch_add(1, Ordering::Relaxed);
            let report = interrupted(kind, &waiting, index, tally)?;
            if let Some(why) = differ(&whole, &report) {
                return Err(format!("{} interrupted at {index}: {why}\n  whole: {whole:?}\n  interrupted: {report:?}", kind.name()));
            }
        }
    }
    Ok(())
}

/// Why two runs of one program, one with its host functions answering at
/// once and one asking through suspensions, end otherwise. A function value
/// names its host calls by table, so values are compared as printed.
fn differ(whole: &Report, report: &Report) -> Option<String> {
    if whole.counts != report.counts {
        return Some(format!("counts {} and {}", whole.counts, report.counts));
    }
    match (&whole.outcome, &report.outcome) {
        (Outcome::Value(a), Outcome::Value(b)) => {
            (a.to_string() != b.to_string()).then(|| format!("values {a} and {b}"))
        }
        (a, b) if a != b => Some(format!("outcomes {} and {}", a.name(), b.name())),
        _ => disagreement(whole, report),
    }
}

#[test]
fn interrupted_at_every_contraction_index_runs_end_as_uninterrupted_ones() {
    let tally = Tally::default();
    let mut runner = TestRunner::deterministic();
    let strategy = hosted_program();
    let mut failures = Vec::new();
    let mut calling = 0;
    for _ in 0..1000 {
        let g = strategy.new_tree(&mut runner).expect("a program").current();
        let before = tally.suspensions.load(Ordering::Relaxed);
        if let Err(why) = check(&g, &tally) {
            failures.push(format!("{g:?}: {why}"));
        }
        calling += u64::from(tally.suspensions.load(Ordering::Relaxed) > before);
    }
    let n = |c: &AtomicU64| c.load(Ordering::Relaxed);
    eprintln!(
        "suspend harness: {} programs ({calling} suspending), {} contraction indices, {} suspensions answered, {} snapshots restored ({} bytes on average)",
        n(&tally.programs),
        n(&tally.indices),
        n(&tally.suspensions),
        n(&tally.restores),
        n(&tally.bytes) / n(&tally.restores).max(1),
    );
    assert!(
        failures.is_empty(),
        "{} failures:\n{}",
        failures.len(),
        failures.join("\n")
    );
    // The generator must really exercise suspensions.
    assert!(calling >= 100, "only {calling} programs suspended");
}

/// `run_async` on generated programs whose host functions answer through
/// futures (each pending once): every machine ends as the stepper's run
/// with the functions answering at once — outcome, value, counts — and env,
/// which cannot pause, stops at the first waiting call as the stepper does.
#[test]
fn awaited_runs_of_generated_programs_end_as_runs_answered_at_once() {
    let Some(reference) = crate::common::harness::reference() else {
        return;
    };
    let mut runner = TestRunner::deterministic();
    let strategy = hosted_program();
    let (mut awaited, mut failures) = (0, Vec::new());
    for _ in 0..400 {
        let g = strategy.new_tree(&mut runner).expect("a program").current();
        let whole = reference
            .machine()
            .run(&program(&g, Answering::AtOnce), &limits());
        let later = program(&g, Answering::Later);
        let waiting = program(&g, Answering::Awaited);
        let asks = reference.machine().run(&later, &limits()).outcome.name() == "suspended";
        awaited += u64::from(asks);
        for &kind in MachineKind::enabled() {
            let report = pollster::block_on(kind.run_async(&waiting, &limits()));
            let why = if kind.machine().start(&waiting, &limits()).is_some() {
                differ(&whole, &report)
            } else {
                differ(&reference.machine().run(&later, &limits()), &report)
            };
            if let Some(why) = why {
                failures.push(format!("{} on {g:?}: {why}", kind.name()));
            }
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
    assert!(
        awaited >= 40,
        "only {awaited} programs awaited a host function"
    );
}

/// A one-shot answer another thread gives: the future is pending until then.
#[derive(Default)]
struct Slot {
    answer: Option<Answer>,
    waker: Option<std::task::Waker>,
}

struct Later(std::sync::Arc<std::sync::Mutex<Slot>>);

impl std::future::Future for Later {
    type Output = Answer;

    fn poll(
        self: std::pin::Pin<&mut Self>,
        cx: &mut std::task::Context<'_>,
    ) -> std::task::Poll<Answer> {
        let mut slot = self.0.lock().expect("an unpoisoned slot");
        match slot.answer.take() {
            Some(answer) => std::task::Poll::Ready(answer),
            None => {
                slot.waker = Some(cx.waker().clone());
                std::task::Poll::Pending
            }
        }
    }
}

/// An awaiting run is `Send`: it is polled on one thread while its host
/// function's answer comes from another, and its fuel for the call is paid
/// as the answer is given.
#[test]
fn an_awaiting_run_moves_between_threads_and_pays_for_its_calls() {
    let mut host = HostFunctions::new();
    let quote = host
        .register_async("berth_quote", 1, |args| {
            let slot = std::sync::Arc::new(std::sync::Mutex::new(Slot::default()));
            let giver = slot.clone();
            let tonnes = match args.first() {
                Some(Datum::Int(n)) => *n,
                _ => 0,
            };
            std::thread::spawn(move || {
                let mut slot = giver.lock().expect("an unpoisoned slot");
                slot.answer = Some(Ok(Datum::Int(tonnes * 11)));
                if let Some(waker) = slot.waker.take() {
                    waker.wake();
                }
            });
            Box::pin(Later(slot))
        })
        .expect("valid");
    host.set_cost(quote, |_| 4);
    let source = "let rec sum n = if n == 0 then 0 else berth_quote n + sum (n - 1) in sum 5";
    let program = Program::parse_with(source, &host).expect("parses");
    let mut at_once = HostFunctions::new();
    let quote = at_once
        .register("berth_quote", |n: i64| Ok::<_, String>(n * 11))
        .expect("valid");
    at_once.set_cost(quote, |_| 4);
    let plain = Program::parse_with(source, &at_once).expect("parses");
    for &kind in MachineKind::enabled() {
        if kind.machine().start(&program, &Limits::default()).is_none() {
            continue;
        }
        let (program, limits) = (program.clone(), Limits::default());
        let moving = async move { kind.run_async(&program, &limits).await };
        let report = std::thread::spawn(move || pollster::block_on(moving))
            .join()
            .expect("the polling thread ends");
        assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(165));
        assert_eq!(
            report,
            kind.run(&plain, &Limits::default()),
            "{}",
            kind.name()
        );
    }
}

/// `run_async` cannot answer a suspending function that has no future: the
/// call gets a `host_error`; `drive_async` lets the caller answer it.
#[test]
fn a_suspending_function_without_a_future_is_answered_by_the_caller() {
    let Some(kind) = pausing() else { return };
    let (program, _) = rental();
    let report = pollster::block_on(kind.run_async(&program, &Limits::default()));
    let Outcome::Error(e) = &report.outcome else {
        panic!("{report:?}")
    };
    assert!(e.message().contains("no future answers approve"), "{e}");
    let run = kind
        .machine()
        .start(&program, &Limits::default())
        .expect("pauses");
    let mut asked = Vec::new();
    let (report, run) = pollster::block_on(orrery::drive_async(run.detach(), |call| {
        asked.push(call.to_string());
        std::future::ready(Ok(Datum::Bool(true)))
    }));
    assert_eq!(asked, ["approve(\"crate rental\", 120)"]);
    assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(125));
    assert_eq!(run.attach().resume(0), report);
}

/// A machine that can pause, if the build has one.
fn pausing() -> Option<MachineKind> {
    let probe = Program::parse("0").ok()?;
    MachineKind::enabled()
        .iter()
        .copied()
        .find(|k| k.machine().start(&probe, &Limits::default()).is_some())
}

/// The crate rental rule of the snapshot tests: one suspending question.
fn rental() -> (Program, HostFunctions) {
    let mut host = HostFunctions::new();
    host.register_suspending("approve", 2).expect("valid");
    host.register("rate", |days: i64| Ok::<_, String>(days * 40))
        .expect("valid");
    let source = "let cost = rate 3 in if approve \"crate rental\" cost then cost + 5 else 0";
    (Program::parse_with(source, &host).expect("parses"), host)
}

/// The rental rule's run on `kind`, waiting on its question, and the call.
fn rental_asking(kind: MachineKind) -> (Program, Box<dyn Paused>, HostCall) {
    let (program, _) = rental();
    let mut run = kind
        .machine()
        .start(&program, &Limits::default())
        .expect("pauses");
    let Outcome::Suspended(call) = run.resume(0).outcome else {
        panic!("no question")
    };
    (program, run, call)
}

#[test]
fn a_fork_and_its_original_end_alike_and_apart() {
    let Some(kind) = pausing() else { return };
    let (program, mut run, call) = rental_asking(kind);
    assert_eq!(
        call.args,
        [Datum::Str("crate rental".into()), Datum::Int(120)]
    );
    let snapshot = run.snapshot();
    let mut fork = snapshot
        .clone()
        .restore(&program, &Limits::default())
        .expect("restores");
    let yes = run.resume_with(Ok(Datum::Bool(true)));
    let no = fork.resume_with(Ok(Datum::Bool(false)));
    assert_eq!(yes.outcome.value().and_then(|v| v.as_int()), Some(125));
    assert_eq!(no.outcome.value().and_then(|v| v.as_int()), Some(0));
    assert_eq!(yes.counts.total(), no.counts.total() + 1); // the sum
    let again = snapshot
        .restore(&program, &Limits::default())
        .expect("restores")
        .resume_with(Ok(Datum::Bool(true)));
    assert_eq!(again, yes);
}

#[test]
fn a_snapshot_is_refused_by_another_program_or_table() {
    let Some(kind) = pausing() else { return };
    let (program, run, _) = rental_asking(kind);
    let snapshot = run.snapshot();
    let other = Program::parse_with(
        "let cost = rate 4 in if approve \"crate rental\" cost then cost + 5 else 0",
        rental().0.host(),
    )
    .expect("parses");
    assert!(matches!(
        snapshot.restore(&other, &Limits::default()),
        Err(SnapshotError::ProgramMismatch { .. })
    ));
    let mut wider = HostFunctions::new();
    wider.register_suspending("approve", 3).expect("valid");
    wider
        .register("rate", |days: i64| Ok::<_, String>(days * 40))
        .expect("valid");
    let same_text = Program::parse_with(
        "let cost = rate 3 in if approve \"crate rental\" cost 1 then cost + 5 else 0",
        &wider,
    )
    .expect("parses");
    let refused = snapshot.restore(&same_text, &Limits::default());
    assert!(matches!(
        refused,
        Err(SnapshotError::ProgramMismatch { .. })
    ));
    let message = refused.err().map(|e| e.to_string()).unwrap_or_default();
    assert!(message.contains("another program"), "{message}");
    // And within the caller's fuel: a replay of 8 units is refused under 7.
    assert!(matches!(
        snapshot.restore(
            &program,
            &Limits::default().with_fuel(snapshot.counts().fuel() - 1)
        ),
        Err(SnapshotError::Fuel { .. })
    ));
}

#[test]
fn the_env_machine_stops_at_a_suspending_call() {
    let (program, _) = rental();
    for &kind in MachineKind::enabled() {
        let report = kind.machine().run(&program, &Limits::default());
        let Outcome::Suspended(call) = &report.outcome else {
            panic!("{}: {report:?}", kind.name())
        };
        assert_eq!(call.name, "approve");
        // The let and the call of `rate`: the question itself is not counted.
        assert_eq!(report.counts.total(), 2, "{}", kind.name());
        assert!(report.location.is_some(), "{}", kind.name());
    }
}

#[test]
fn snapshots_are_send_and_sync() {
    fn shared<T: Send + Sync + 'static>() {}
    shared::<Snapshot>();
}

#[test]
fn a_call_suspends_only_with_the_fuel_for_it_and_its_answer_is_replayed() {
    let Some(kind) = pausing() else { return };
    let (program, _) = rental();
    // The let and `rate` take 2 units; the question needs a third.
    let mut run = kind
        .machine()
        .start(&program, &Limits::default().with_fuel(2))
        .expect("pauses");
    assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
    assert_eq!(run.resume(1).outcome.name(), "suspended");
    // The answer takes the last unit; the `if` then finds none.
    let report = run.resume_with(Ok(Datum::Bool(true)));
    assert_eq!(
        (report.outcome.name(), report.counts.total()),
        ("out_of_fuel", 3)
    );
    let snapshot = run.snapshot();
    assert_eq!(snapshot.answers().len(), 1);
    let restored = from_bytes(to_bytes(&snapshot).0).expect("reads");
    let mut restored = restored
        .restore(&program, &Limits::default())
        .expect("restores");
    let end = restored.resume(10);
    assert_eq!(end.outcome.value().and_then(|v| v.as_int()), Some(125));
    assert_eq!(end, run.resume(10));
}

/// A run's journal of answers (what its snapshots record) is held within its
/// memory limit: a loop that asks without end stops at the limit, and the
/// same loop asking a few times ends with its value.
#[test]
fn the_answers_a_run_records_count_against_its_memory_limit() {
    let Some(kind) = pausing() else { return };
    let mut host = HostFunctions::new();
    host.register_suspending("parcel_weight", 1).expect("valid");
    let answer_all = |asks: i64| {
        let source = format!(
            "let rec weigh n total = if n == 0 then total else weigh (n - 1) (total + parcel_weight n) in weigh {asks} 0"
        );
        let program = Program::parse_with(&source, &host).expect("parses");
        let limits = Limits::default().with_fuel(u64::MAX).with_memory(256 << 10);
        let run = kind.machine().start(&program, &limits).expect("pauses");
        let (report, run) = pollster::block_on(orrery::drive_async(run.detach(), |call| {
            std::future::ready(Ok(call.args[0].clone()))
        }));
        (report, run.attach().snapshot().answers().len())
    };
    let (few, recorded) = answer_all(100);
    assert_eq!(few.outcome.value().and_then(|v| v.as_int()), Some(5050));
    assert_eq!(recorded, 100);
    let (endless, recorded) = answer_all(10_000_000);
    let Outcome::Limit(limit) = &endless.outcome else {
        panic!("{endless:?}")
    };
    assert_eq!(limit.kind(), orrery::LimitKind::Memory, "{limit}");
    // About 256 KiB of answers, each a few dozen bytes: thousands, not millions.
    assert!(
        (1_000..20_000).contains(&recorded),
        "{recorded} answers recorded"
    );
}
