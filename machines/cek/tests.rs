//! Unit tests of what only the CEK machine has: tail calls that push no
//! frame, cancellation during fuel-free work, its stacks kept across runs,
//! closures that capture only their free variables, the memory limit on deep
//! spines, deep sums and read-back, and the size of its frames and values.
//! What every machine must do is tested once, over the machine table, in
//! `tests/`.

use super::*;
use crate::{parse, Cancel, LimitError, LimitKind, Term};

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
        let report = run.resume(997, &arena);
        deepest = deepest.max(run.kont.len()).max(run.locals.len());
        if report.outcome != Outcome::OutOfFuel {
            assert_eq!(report.outcome, Outcome::Value(arena.int(0)));
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
    let fields = vec!["1"; 100].join(", ");
    let source = format!(
        "let a = 0 in let u = stop a in let big = K({fields}) in \
         let rec go n = if n == 0 then 0 else go (n - 1) in go 10"
    );
    let arena = Arena::new();
    let program = crate::parse_with(&arena, &source, &host).unwrap();
    let report = Cek::new().run(&program, &Limits::default().with_cancel(cancel), &arena);
    assert_eq!(report.outcome, Outcome::Limit(LimitError::cancelled()));
    // Two lets and the host call: nothing after the constructor.
    assert_eq!(report.counts.total(), 3);
}

#[test]
fn stacks_are_kept_across_runs_and_runs_agree() {
    let arena = Arena::new();
    let program = Program::new(tak(&arena, 12, 8, 4)).unwrap();
    let mut cek = Cek::new();
    let first = cek.run(&program, &Limits::default(), &arena);
    let kept = cek.scratch.kont.as_ptr();
    assert!(cek.scratch.kont.capacity() > 0);
    let second = cek.run(&program, &Limits::default(), &arena);
    assert_eq!(first, second);
    assert_eq!(cek.scratch.kont.as_ptr(), kept);
}

/// The bytes a finished run still holds (its stacks keep their capacity):
/// what it grew to, as the limit counts it, besides the cells it dropped.
fn held_at_end(run: &CekRun<'_>) -> usize {
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
    let report = run.resume(0, &arena);
    assert_eq!(report.outcome, Outcome::Value(arena.int(42)));
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
    let report = run.resume(0, &arena);
    assert_eq!(report.outcome.name(), "limit");
    assert!(matches!(&report.outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory));
    assert_eq!(report.counts.total(), 1); // the call, then frames only
    assert!(held_at_end(&run) <= limit, "held {}", held_at_end(&run));
    // Given room, the same program runs to its value.
    let report = Cek::new().run(&program, &Limits::default().with_memory(64 << 20), &arena);
    assert_eq!(report.outcome, Outcome::Value(arena.int(depth as i64)));
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
    let report = run.resume(0, &arena);
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
    // read back they cannot share their bodies.
    let big = format!("{}y{}", "n + (".repeat(300), ")".repeat(300));
    let source = format!(
        "let rec mk n acc = if n == 0 then acc else mk (n - 1) (Cons(\\y. {big}, acc)) in mk 200 Nil"
    );
    let arena = Arena::new();
    let program = parse(&arena, &source).unwrap();
    let limit = 2 << 20;
    let mut run = Cek::start(&program, &Limits::default().with_memory(limit));
    let out = Arena::new();
    let report = run.resume(0, &out);
    assert!(matches!(&report.outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory));
    assert!(out.used_bytes() <= limit);
    // It stays so.
    assert_eq!(run.resume(0, &out).outcome, report.outcome);
    // With room, it reads back.
    let report = Cek::new().run(&program, &Limits::default().with_memory(256 << 20), &out);
    assert!(matches!(report.outcome, Outcome::Value(_)));
}

#[test]
fn frames_and_values_stay_small() {
    assert!(size_of::<ContinuationFrame>() <= 56, "{}", size_of::<ContinuationFrame>());
    assert_eq!(size_of::<Val>(), 16);
}
