//! Unit tests of what only the CEK machine has: tail calls that push no
//! frame, cancellation during fuel-free work, its stacks kept across runs,
//! closures that capture only their free variables, the memory limit on deep
//! spines, deep sums and read-back, the size of its frames and values, the
//! program's arguments under the root, and paused runs detached to another
//! thread with their sharing. What every machine must do is tested once,
//! over the machine table, in `tests/`.

use super::*;
use crate::{parse, Arena, Cancel, LimitError, LimitKind, Term};

/// Gabriel's tak, curried: in the body z is #0, y #1, x #2, tak #3.
fn tak<'a>(arena: &'a Arena, x: i64, y: i64, z: i64) -> &'a Term<'a> {
    let v = |i| arena.var(i);
    let call = |f: &'a Term<'a>, a, b, c| arena.app(arena.app(arena.app(f, a), b), c);
    let dec = |t| arena.prim(Prim::Sub, &[t, arena.int(1)]);
    let body = arena.if_then_else(
        arena.prim(Prim::Lt, &[v(1), v(2)]),
        call(
            v(3),
            call(v(3), dec(v(2)), v(1), v(0)),
            call(v(3), dec(v(1)), v(0), v(2)),
            call(v(3), dec(v(0)), v(2), v(1)),
        ),
        v(0),
    );
    let f = arena.rec_lam(arena.lam(arena.lam(body)));
    call(f, arena.int(x), arena.int(y), arena.int(z))
}

/// `(μf. λn. if n == 0 then 0 else f (n - 1)) n`: a tail loop.
fn count_down(arena: &Arena, n: i64) -> &Term<'_> {
    let body = arena.if_then_else(
        arena.prim(Prim::Eq, &[arena.var(0), arena.int(0)]),
        arena.int(0),
        arena.app(
            arena.var(1),
            arena.prim(Prim::Sub, &[arena.var(0), arena.int(1)]),
        ),
    );
    arena.app(arena.rec_lam(body), arena.int(n))
}

#[test]
fn tail_calls_push_no_frames() {
    let arena = Arena::new();
    let program = Program::new(count_down(&arena, 100_000)).unwrap();
    let mut run = Cek::start(&program, &Limits::default().with_fuel(0));
    let mut deepest = 0;
    loop {
        let report = run.resume(997);
        deepest = deepest.max(run.kont.len()).max(run.locals.len());
        if report.outcome != Outcome::OutOfFuel {
            assert_eq!(int_of(&report), Some(0));
            break;
        }
    }
    // A frame for the condition's operands and the if, two locals.
    assert!(deepest <= 2, "deepest {deepest}");
}

#[test]
fn fuel_free_work_looks_at_the_cancellation_flag() {
    // A host function cancels the run in the middle of a fuel slice; what
    // follows is a wide constructor (fuel-free work) and then more
    // contractions than are left of the slice: only the work's poll can stop
    // the run before the slice ends.
    let cancel = Cancel::new();
    let mut host = crate::HostFunctions::new();
    let handle = cancel.clone();
    host.register("stop", move |x: i64| {
        handle.cancel();
        Ok::<_, String>(x)
    })
    .unwrap();
    // Fields that name a variable, so the constructor is built at run time
    // (closed constant data is read in place, with no work at all).
    let fields = vec!["a"; 100].join(", ");
    let source = format!(
        "let a = 0 in let u = stop a in let big = K({fields}) in \
         let rec go n = if n == 0 then 0 else go (n - 1) in go 10"
    );
    let arena = Arena::new();
    let program = crate::parse_with(&arena, &source, &host).unwrap();
    let report = Cek::new().run(&program, &Limits::default().with_cancel(cancel));
    assert_eq!(report.outcome, Outcome::Limit(LimitError::cancelled()));
    // Two lets and the host call: nothing after the constructor.
    assert_eq!(report.counts.total(), 3);
}

#[test]
fn stacks_are_kept_across_runs_and_runs_agree() {
    let arena = Arena::new();
    let program = Program::new(tak(&arena, 12, 8, 4)).unwrap();
    let mut cek = Cek::new();
    let first = cek.run(&program, &Limits::default());
    let kept = cek.scratch.kont.as_ptr();
    assert!(cek.scratch.kont.capacity() > 0);
    let second = cek.run(&program, &Limits::default());
    assert_eq!(first, second);
    assert_eq!(cek.scratch.kont.as_ptr(), kept);
}

/// The bytes a finished run still holds (its stacks keep their capacity):
/// what it grew to, as the limit counts it, besides the cells it dropped.
fn held_at_end(run: &CekRun) -> usize {
    run.fixed + run.stack_bytes()
}

#[test]
fn closures_capture_only_their_free_variables() {
    // Under 20,000 lets, 2,000 closures that use one of them: a closure that
    // captured every binding in scope would hold 20,000 values (640 MB in
    // all); each holds one.
    let lets: String = (1..=20_000)
        .map(|i| format!("let x{i} = {i} in "))
        .collect();
    let source = format!(
        "{lets}let rec mk n acc = if n == 0 then acc else mk (n - 1) (Cons(\\y. y + x1, acc)) in \
         case mk 2000 Nil of {{ Cons(f, r) => f 41; _ => 0 }}"
    );
    let arena = Arena::new();
    let program = parse(&arena, &source).unwrap();
    let limit = 4 << 20;
    let mut run = Cek::start(&program, &Limits::default().with_memory(limit));
    let report = run.resume(0);
    assert_eq!(int_of(&report), Some(42));
    assert!(run.peak_bytes() <= limit, "peak {}", run.peak_bytes());
    // The image's closure of λy captures exactly x1.
    let image = program.image();
    let captured: Vec<u32> = image.funcs.iter().map(|f| f.captured).collect();
    assert!(captured.iter().all(|&c| c <= 1), "{captured:?}");
}

/// `(λx. 1 + (1 + (… (1 + x)))) 0`, `depth` additions deep, built directly.
fn deep_spine(arena: &Arena, depth: usize) -> &Term<'_> {
    let mut body = arena.var(0);
    for _ in 0..depth {
        body = arena.prim(Prim::Add, &[arena.int(1), body]);
    }
    arena.app(arena.lam(body), arena.int(0))
}

#[test]
fn a_deep_spine_inside_one_call_stops_at_the_limit() {
    // The frames of one call's body, pushed before its first addition, do
    // not fit in the limit.
    let limit = 1 << 20;
    let depth = 15_000;
    let arena = Arena::new();
    let program = Program::new(deep_spine(&arena, depth)).unwrap();
    let mut run = Cek::start(&program, &Limits::default().with_memory(limit));
    let report = run.resume(0);
    assert_eq!(report.outcome.name(), "limit");
    assert!(matches!(&report.outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory));
    assert_eq!(report.counts.total(), 1); // the call, then frames only
    assert!(held_at_end(&run) <= limit, "held {}", held_at_end(&run));
    // Given room, the same program runs to its value.
    let report = Cek::new().run(&program, &Limits::default().with_memory(64 << 20));
    assert_eq!(int_of(&report), Some(depth as i64));
}

#[test]
fn a_twenty_megabyte_sum_stops_at_the_limit() {
    // `1 + 1 + … + 1`, as deep as five million additions (20 MB of text),
    // under a 1 MiB limit: the run stops before it pushes a frame's worth of
    // memory past the limit.
    let limit = 1 << 20;
    let arena = Arena::new();
    let one = arena.int(1);
    let mut sum = one;
    for _ in 0..5_000_000 {
        sum = arena.prim(Prim::Add, &[sum, one]);
    }
    let program = Program::new(sum).unwrap();
    let mut run = Cek::start(&program, &Limits::default().with_memory(limit));
    let report = run.resume(0);
    assert!(matches!(&report.outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory));
    assert_eq!(report.counts.total(), 0);
    // The frames of the descent filled the limit, and no more.
    assert!(run.stack_bytes() <= limit, "stacks {}", run.stack_bytes());
    assert!(
        run.stack_bytes() > limit / 2,
        "stacks {}",
        run.stack_bytes()
    );
}

#[test]
fn a_result_too_big_to_read_back_is_the_memory_limit() {
    // 200 closures over a 600-node body each: small as runtime data, but
    // read back they cannot share their bodies (about 1.9 MB of store).
    let big = format!("{}y{}", "n + (".repeat(300), ")".repeat(300));
    let source = format!(
        "let rec mk n acc = if n == 0 then acc else mk (n - 1) (Cons(\\y. {big}, acc)) in mk 200 Nil"
    );
    let arena = Arena::new();
    let program = parse(&arena, &source).unwrap();
    let roomy = Cek::new().run(&program, &Limits::default().with_memory(256 << 20));
    assert!(matches!(roomy.outcome, Outcome::Value(_)));
    let limit = 1 << 20;
    let mut run = Cek::start(&program, &Limits::default().with_memory(limit));
    let report = run.resume(0);
    assert!(matches!(&report.outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory));
    // Every contraction was made: the read-back is what stopped, where its
    // store outgrew the limit (past it by a doubling of the store's arrays
    // at most).
    assert_eq!(report.counts, roomy.counts);
    assert!(run.peak_bytes() > limit);
    assert!(run.peak_bytes() <= 2 * limit, "peak {}", run.peak_bytes());
    // It stays so.
    assert_eq!(run.resume(0).outcome, report.outcome);
}

#[test]
fn frames_and_values_stay_small() {
    assert!(
        size_of::<ContinuationFrame>() <= 56,
        "{}",
        size_of::<ContinuationFrame>()
    );
    assert_eq!(size_of::<Val>(), 16);
}

/// The integer a run ended with, if it did.
fn int_of(report: &Report) -> Option<i64> {
    report.outcome.value().and_then(crate::Value::as_int)
}

#[test]
fn the_machine_and_a_detached_run_are_send() {
    fn assert_send<T: Send>() {}
    assert_send::<Cek>();
    assert_send::<Detached>();
}

#[test]
fn arguments_are_applied_to_the_root_one_contraction_each() {
    let add = Program::parse("\\a b. a + b").unwrap();
    let sum = add.apply(&[Datum::Int(40), Datum::Int(2)]).unwrap();
    let whole = Cek::new().run(&sum, &Limits::default());
    assert_eq!(int_of(&whole), Some(42));
    assert_eq!(whole.counts.get(Rule::Beta), 2);
    assert_eq!(whole.counts.total(), 3);
    // Out of fuel before each contraction, and the same end one unit at a
    // time.
    for fuel in 0..3 {
        let mut run = Cek::start(&sum, &Limits::default().with_fuel(fuel));
        let mut report = run.resume(0);
        assert_eq!(report.outcome, Outcome::OutOfFuel);
        assert_eq!(report.counts.total(), fuel);
        while report.outcome == Outcome::OutOfFuel {
            report = run.resume(1);
        }
        assert_eq!(report, whole);
    }
    // Detached before the first resume, the arguments still to convert.
    let moved = Paused::detach(Box::new(Cek::start(&sum, &Limits::default())));
    let report = std::thread::spawn(move || moved.attach().resume(0))
        .join()
        .unwrap();
    assert_eq!(report, whole);
    // A recursive root is applied under `beta_rec`.
    let count = Program::parse("let rec count n = if n == 0 then 7 else count (n - 1) in count")
        .unwrap()
        .apply(&[Datum::Int(3)])
        .unwrap();
    let report = Cek::new().run(&count, &Limits::default());
    assert_eq!(int_of(&report), Some(7));
    assert_eq!(report.counts.get(Rule::BetaRec), 4);
    assert_eq!(report.counts.total(), 16);
}

#[test]
fn argument_data_meets_cases_and_reads_back() {
    let pair = Datum::con("Pair", vec![Datum::Int(50), Datum::Int(8)]);
    let program = Program::parse("\\p. case p of { Pair(a, b) => a - b; _ => 0 }")
        .unwrap()
        .apply(&[pair])
        .unwrap();
    let report = Cek::new().run(&program, &Limits::default());
    assert_eq!(int_of(&report), Some(42));
    // A tag the program does not know is made up for the run.
    let fresh = Datum::con("Fresh", vec![Datum::Str("a".into()), Datum::Int(1)]);
    let program = Program::parse("\\p. \\q. Two(q, p)")
        .unwrap()
        .apply(&[Datum::Int(3), fresh])
        .unwrap();
    let report = Cek::new().run(&program, &Limits::default());
    let value = report.outcome.value().map(ToString::to_string);
    assert_eq!(value.as_deref(), Some("Two(Fresh(\"a\", 1), 3)"));
    // Applying a value that is not a function is one `beta`, and the error.
    let program = Program::parse("7")
        .unwrap()
        .apply(&[Datum::Int(1)])
        .unwrap();
    let report = Cek::new().run(&program, &Limits::default());
    assert!(
        matches!(&report.outcome, Outcome::Error(e) if e.kind() == crate::ErrorKind::NotAFunction)
    );
    assert_eq!(report.counts.get(Rule::Beta), 1);
    assert_eq!(report.counts.total(), 1);
}

#[test]
fn arguments_too_big_for_the_memory_limit_stop_the_run() {
    let long = Datum::Str("x".repeat(1 << 20));
    let program = Program::parse("\\s. 0").unwrap().apply(&[long]).unwrap();
    let limit = 1 << 19;
    let report = Cek::new().run(&program, &Limits::default().with_memory(limit));
    assert_eq!(report.outcome, Outcome::Limit(LimitError::memory(limit)));
    assert_eq!(report.counts.total(), 0);
}

/// A run whose paused state holds a closure shared by a list of 10,000
/// references to it, and a string made at run time shared by that closure
/// and the result.
const SHARING: &str = "let s = \"tide\" ++ \"way\" in \
    let f = \\x. x + length s in \
    let rec mk n acc = if n == 0 then acc else mk (n - 1) (Cons(f, acc)) in \
    let xs = mk 10000 Nil in \
    let rec sum ys a = case ys of { Cons(g, r) => sum r (a + g 1); Nil => a } in \
    Pair(sum xs 0, s)";

#[test]
fn a_run_detached_to_another_thread_ends_as_if_never_paused() {
    let program = Program::parse(SHARING).unwrap();
    let whole = Cek::new().run(&program, &Limits::default());
    let value = whole.outcome.value().map(ToString::to_string);
    assert_eq!(value.as_deref(), Some("Pair(80000, \"tideway\")"));
    let total = whole.counts.total();
    for fuel in [0, 1, 4, 17, total / 7, total / 3, total / 2, total - 1] {
        let mut run = Cek::start(&program, &Limits::default().with_fuel(fuel));
        assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
        let moved = Paused::detach(Box::new(run));
        let report = std::thread::spawn(move || moved.attach().resume(total))
            .join()
            .unwrap();
        assert_eq!(report, whole, "paused at {fuel}");
    }
    // A run that has ended keeps its end.
    let mut run = Cek::start(&program, &Limits::default());
    run.resume(0);
    let moved = Paused::detach(Box::new(run));
    let (finished, report) = std::thread::spawn(move || {
        let mut again = moved.attach();
        (again.is_finished(), again.resume(0))
    })
    .join()
    .unwrap();
    assert!(finished);
    assert_eq!(report, whole);
}

#[test]
fn detaching_keeps_the_cells_shared() {
    let program = Program::parse(SHARING).unwrap();
    let whole = Cek::new().run(&program, &Limits::default());
    // Paused inside `sum`: the list, the closure and the string are live.
    let fuel = whole.counts.total() * 3 / 4;
    let mut run = Cek::start(&program, &Limits::default().with_fuel(fuel));
    assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
    let (cells, held, peak) = (run.cells, run.held(), run.peak_bytes());
    assert!(cells > 2_000 * size_of::<ConCell<u32>>(), "cells {cells}");
    let detached = detach::DetachedCek::new(run);
    let (after, report) = std::thread::spawn(move || {
        let mut run = detached.into_run();
        let after = (run.cells, run.held(), run.peak_bytes());
        (after, run.resume(whole.counts.total()))
    })
    .join()
    .unwrap();
    // The same cells, each made once (a copy of the closure per reference
    // would hold thousands more), charged the same bytes.
    assert_eq!(after, (cells, held, peak));
    assert_eq!(report, whole);
}

/// `len (mk 1000000 Nil)`: a list of a million cells built, then walked.
const MILLION: &str = "let rec mk n acc = if n == 0 then acc else mk (n - 1) (Cons(n, acc)) in \
    let xs = mk 1000000 Nil in \
    let rec len ys a = case ys of { Cons(h, r) => len r (a + 1); Nil => a } in \
    len xs 0";

#[test]
fn a_million_cell_list_detaches_on_a_small_stack() {
    let program = Program::parse(MILLION).unwrap();
    let small = || std::thread::Builder::new().stack_size(2 << 20);
    // Paused just after the list is built, while all of it is live.
    let paused = program.clone();
    let moved = small()
        .spawn(move || {
            let mut run = Cek::start(&paused, &Limits::default().with_fuel(5_000_100));
            assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
            let cells = run.cells;
            (Paused::detach(Box::new(run)), cells)
        })
        .unwrap()
        .join()
        .unwrap();
    let (moved, cells) = moved;
    assert!(
        cells > 1_000_000 * size_of::<ConCell<u32>>(),
        "cells {cells}"
    );
    let report = small()
        .spawn(move || moved.attach().resume(10_000_000))
        .unwrap()
        .join()
        .unwrap();
    assert_eq!(int_of(&report), Some(1_000_000));
    let whole = Cek::new().run(&program, &Limits::default());
    assert_eq!(report, whole);
}
