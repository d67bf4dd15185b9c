//! The stepper's own tests: the size of its frames and nodes, the memory
//! limit on deep terms, space per pending frame, strings shared by handle,
//! read-back past the limit, cancellation inside one long contraction,
//! collections at every point of a run, single steps, and a paused run moved
//! between threads. What every machine must do is tested once, over the
//! machine table, in `tests/`.

use super::heap::NODE_BYTES;
use super::*;
use crate::budget::POLL_WORK;
use crate::{parse, parse_with, print, Cancel, Datum, LimitKind};

fn program(arena: &Arena, source: &str) -> Program {
    parse(arena, source).expect("the test programs parse")
}

/// Capture `program` to its end, keeping the state.
fn reduce(program: &Program, limits: &Limits) -> (State, Result<Id, Halt>) {
    let image = program.image();
    let mut state = State::new(image, limits);
    let end = state.reduce(image, program.host(), &mut None);
    (state, end)
}

fn is_memory(outcome: &Outcome) -> bool {
    matches!(outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory)
}

include!("../../tests/common/mixed.rs");

#[test]
fn frames_and_nodes_are_small() {
    assert!(std::mem::size_of::<ContextFrame>() <= 24);
    assert_eq!(NODE_BYTES, 20);
}

fn parse_term_in<'a>(arena: &'a Arena, source: &str) -> &'a Term<'a> {
    crate::parse_term(arena, source).unwrap()
}

/// `depth` nested applications of `wrap` around `leaf`.
fn nest<'a>(
    depth: usize,
    leaf: &'a Term<'a>,
    wrap: impl Fn(&'a Term<'a>) -> &'a Term<'a>,
) -> &'a Term<'a> {
    (0..depth).fold(leaf, |t, _| wrap(t))
}

#[test]
fn deep_terms_stop_at_the_memory_limit() {
    let arena = Arena::new();
    let one = arena.int(1);
    let id = arena.lam(arena.var(0));
    let depth = 1_000_000;
    let terms = [
        nest(depth, one, |t| arena.prim(Prim::Add, &[one, t])),
        nest(depth, one, |t| arena.prim(Prim::Add, &[t, one])),
        nest(depth, one, |t| arena.app(id, t)),
        nest(depth, arena.boolean(true), |t| {
            arena.if_then_else(t, arena.boolean(false), arena.boolean(true))
        }),
        nest(depth, arena.con("Nil", &[]), |t| {
            arena.case(t, &[], Some(arena.con("Nil", &[])))
        }),
    ];
    for (k, &t) in terms.iter().enumerate() {
        let program = Program::new(t).unwrap();
        for memory in [1 << 20, 16 << 20] {
            let limits = Limits::default().with_memory(memory);
            let (state, end) = reduce(&program, &limits);
            assert!(matches!(end, Err(Halt::Memory)), "term {k} under {memory}");
            // What the run itself holds stays under the limit.
            assert!(state.held() <= memory, "term {k}");
        }
        // With room enough, each deep term is evaluated, without recursion.
        let (_, end) = reduce(&program, &Limits::default());
        assert!(end.is_ok(), "term {k}: {end:?}");
    }
    // Depth reached at run time: a million pending additions do not fit in
    // 16 MiB, and the run stops at the limit.
    let program = program(&arena, "let rec deep n = 1 + deep (n + 1) in deep 0");
    for memory in [1 << 20, 16 << 20] {
        let (state, end) = reduce(&program, &Limits::default().with_memory(memory));
        assert!(matches!(end, Err(Halt::Memory)));
        assert!(state.held() <= memory);
        // A good part of the limit went to pending additions.
        assert!(
            state.ctx.len() > memory / 400,
            "{} frames in {memory}",
            state.ctx.len()
        );
    }
}

#[test]
fn a_million_pending_additions_complete() {
    let arena = Arena::new();
    let program = program(
        &arena,
        "let rec sum n = if n == 0 then 0 else n + sum (n - 1) in sum 1000000",
    );
    let (state, end) = reduce(&program, &Limits::default());
    let value = end.unwrap();
    assert_eq!(
        state.heap.node(program.image(), value),
        INode::Int(500_000_500_000)
    );
    // A pending addition costs its frame, its operand, and its share of the
    // heap's garbage and of the room the collector and growing stacks take:
    // under 200 bytes at the peak.
    assert!(
        state.budget.peak < 200_000_000,
        "peak {}",
        state.budget.peak
    );
}

#[test]
fn a_big_live_string_is_shared_not_copied() {
    let arena = Arena::new();
    let program = program(
        &arena,
        r#"let rec dbl n s = if n == 0 then s else dbl (n - 1) (s ++ s) in
           let big = dbl 24 "ab" in
           let rec loop n = if n == 0 then length big else loop (n - 1) in loop 300000"#,
    );
    let image = program.image();
    let mut state = State::new(image, &Limits::default().with_fuel(100_000));
    assert!(matches!(
        state.reduce(image, &NO_HOST, &mut None),
        Err(Halt::OutOfFuel)
    ));
    let longest = |state: &State| {
        let s = state.heap.strings.iter().max_by_key(|s| s.len()).unwrap();
        (s.len(), s.as_ptr())
    };
    let (len, at) = longest(&state);
    assert_eq!(len, 2 << 24);
    let collections = state.collections;
    state.budget.resumed(1_000_000);
    assert!(matches!(
        state.reduce(image, &NO_HOST, &mut None),
        Err(Halt::OutOfFuel)
    ));
    assert!(
        state.collections >= collections + 10,
        "{} collections",
        state.collections
    );
    // The same string, never copied, and a heap of nodes small beside it.
    assert_eq!(longest(&state), (len, at));
    assert!(state.heap.bytes() - state.heap.string_bytes < 8 << 20);
    assert!(state.heap.string_bytes < 2 * len + (4 << 20));
}

#[test]
fn a_read_back_past_the_limit_is_the_memory_limit() {
    let arena = Arena::new();
    let program = program(&arena, "let rec build n acc = if n == 0 then acc else build (n - 1) (Cons(n, acc)) in build 100000 Nil");
    let report = Stepper::new().run(&program, &Limits::default());
    assert!(matches!(report.outcome, Outcome::Value(_)));
    let image = program.image();
    let mut state = State::new(image, &Limits::default());
    let value = state.reduce(image, &NO_HOST, &mut None).unwrap();
    // Room for the run, not for its result as terms as well.
    state.budget.memory = state.held() + (1 << 20);
    assert!(is_memory(&state.outcome(image, &NO_HOST, Ok(value))));
}

#[test]
fn a_cancelled_run_stops_within_bounded_work() {
    // One contraction substitutes into a body of a million nodes; the run is
    // cancelled as that contraction begins.
    let arena = Arena::new();
    let x = arena.var(0);
    let body = nest(1_000_000, x, |t| arena.prim(Prim::Add, &[x, t]));
    let program = Program::new(arena.app(arena.lam(body), arena.int(1))).unwrap();
    let cancel = Cancel::new();
    let image = program.image();
    // The trace reads the million-node redex back through a store (room for
    // it, so that the run stops at the cancellation, not the limit).
    let limits = Limits::default().with_cancel(cancel.clone()).with_memory(1 << 30);
    let mut state = State::new(image, &limits);
    let mut scratch = Arena::new();
    let mut sink = |_: Rule, _: &Term<'_>| cancel.cancel();
    let mut trace = Some(Trace {
        scratch: &mut scratch,
        sink: &mut sink,
    });
    let end = state.reduce(image, &NO_HOST, &mut trace);
    assert!(matches!(end, Err(Halt::Cancelled)), "{end:?}");
    assert_eq!(state.budget.counts.total(), 1);
    assert!(
        state.heap.nodes.len() < 2 * POLL_WORK as usize,
        "{} nodes built",
        state.heap.nodes.len()
    );
    // Read-back, too, looks at the flag as it goes.
    let program = self::program(&arena, "let rec build n acc = if n == 0 then acc else build (n - 1) (Cons(n, acc)) in build 300000 Nil");
    let image = program.image();
    let cancel = Cancel::new();
    let mut state = State::new(image, &Limits::default().with_cancel(cancel.clone()));
    let value = state.reduce(image, &NO_HOST, &mut None).unwrap();
    cancel.cancel();
    let outcome = state.outcome(image, &NO_HOST, Ok(value));
    assert!(matches!(outcome, Outcome::Limit(ref l) if l.kind() == LimitKind::Cancelled));
}

#[test]
fn collections_anywhere_change_nothing() {
    let host = mixed_host();
    let arena = Arena::new();
    let program = parse_with(&arena, MIXED, &host).unwrap();
    let whole = Stepper::new().run(&program, &Limits::default());
    let image = program.image();
    // One contraction at a time, with a collection after each.
    let mut state = State::new(image, &Limits::default().with_fuel(0));
    let end = loop {
        state.budget.resumed(1);
        match state.reduce(image, &host, &mut None) {
            Err(Halt::OutOfFuel) => state.collect(image).unwrap(),
            end => break end,
        }
    };
    assert!(state.collections >= whole.counts.total());
    let outcome = state.outcome(image, &host, end);
    assert_eq!(outcome, whole.outcome);
    assert_eq!(state.budget.counts, whole.counts);
    // Collections made by the policy, in a run that allocates a lot.
    let program = self::program(
        &arena,
        "let rec fib n = if n < 2 then n else fib (n - 1) + fib (n - 2) in fib 22",
    );
    let (state, end) = reduce(&program, &Limits::default());
    assert_eq!(
        state.heap.node(program.image(), end.unwrap()),
        INode::Int(17711)
    );
    assert!(state.collections > 2);
}

#[test]
fn single_steps_show_each_redex() {
    let arena = Arena::new();
    let mut t = parse_term_in(
        &arena,
        "let f = \\x. case x of { Some(y) => y + 1; _ => 0 } in Pair(f (Some(2)), f None)",
    );
    let mut rules = Vec::new();
    loop {
        match step(&arena, t) {
            Step::Contracted { rule, next, .. } => {
                rules.push(rule);
                t = next;
            }
            Step::Value => break,
            Step::Stuck { error, .. } => panic!("{error}"),
        }
    }
    assert_eq!(print(t), "Pair(3, 0)");
    use Rule::{Beta, Case, Let, Prim as P};
    assert_eq!(rules, [Let, Beta, Case, P, Beta, Case]);
    // A term that is not a program has no step.
    assert!(matches!(step(&arena, arena.var(0)), Step::Value));
}

#[test]
fn a_paused_run_can_move_between_threads() {
    fn is_send<T: Send>(_: &T) {}
    let arena = Arena::new();
    let program = program(
        &arena,
        "let rec count n = if n == 0 then 7 else count (n - 1) in count 50",
    );
    let mut run = Stepper::new().start(&program, &Limits::default().with_fuel(10));
    is_send(&run);
    assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
    let report = std::thread::scope(|s| s.spawn(move || run.resume(1000).counts).join().unwrap());
    assert_eq!(report.total(), 204);
}

/// Byte `k` of an embedder's file 9: a span the test can tell apart.
fn at(k: u32) -> crate::Span {
    crate::Span::new(9, k, k + 1)
}

/// `top 0` where `top c = 2 * mid c`, `mid b = 1 + dist b` and
/// `dist a = 100 / a`: a division by zero three calls deep, every call site
/// and the division with a span of its own (bytes 1 to 4).
fn three_deep(arena: &Arena) -> &Term<'_> {
    let dist = arena.named(
        "dist",
        arena.lam(arena.at(at(1), arena.prim(Prim::Div, &[arena.int(100), arena.var(0)]))),
    );
    let mid = arena.named(
        "mid",
        arena.lam(arena.prim(
            Prim::Add,
            &[arena.int(1), arena.at(at(2), arena.app(arena.var(1), arena.var(0)))],
        )),
    );
    let top = arena.named(
        "top",
        arena.lam(arena.prim(
            Prim::Mul,
            &[arena.int(2), arena.at(at(3), arena.app(arena.var(1), arena.var(0)))],
        )),
    );
    let call = arena.at(at(4), arena.app(arena.var(0), arena.int(0)));
    arena.let_in(dist, arena.let_in(mid, arena.let_in(top, call)))
}

#[test]
fn an_error_three_calls_deep_reports_the_redex_and_each_call() {
    let arena = Arena::new();
    let program = Program::new(three_deep(&arena)).unwrap();
    let report = Stepper::new().run(&program, &Limits::default());
    assert!(matches!(report.outcome, Outcome::Error(_)));
    let location = report.location.expect("an error has a location");
    assert_eq!(location.span, Some(at(1)));
    let frames: Vec<(Option<&str>, Option<crate::Span>)> = location
        .backtrace
        .frames
        .iter()
        .map(|f| (f.name.as_deref(), f.site))
        .collect();
    assert_eq!(
        frames,
        [
            (Some("dist"), Some(at(2))),
            (Some("mid"), Some(at(3))),
            (Some("top"), Some(at(4)))
        ]
    );
    assert_eq!(location.backtrace.omitted, 0);
}

#[test]
fn a_stop_at_every_fuel_bound_has_the_marks_of_its_context() {
    // Out of fuel before each contraction of the same program: the marks
    // grow one call at a time, the redex is always one of the program's.
    let arena = Arena::new();
    let program = Program::new(three_deep(&arena)).unwrap();
    let total = Stepper::new().run(&program, &Limits::default()).counts.total();
    let mut depths = Vec::new();
    for fuel in 0..total {
        let report = Stepper::new().run(&program, &Limits::default().with_fuel(fuel));
        assert_eq!(report.outcome, Outcome::OutOfFuel);
        let location = report.location.unwrap();
        depths.push(location.backtrace.depth());
    }
    // let, let, let, then β into top (depth 1), β into mid (2), β into dist
    // (3), and the division (still 3).
    assert_eq!(depths, [0, 0, 0, 0, 1, 2, 3]);
}

#[test]
fn a_tail_call_takes_its_callers_mark() {
    let arena = Arena::new();
    let program = program(&arena, "let rec spin n = spin (n + 1) in spin 0");
    for fuel in [1, 2, 3, 10, 1_001] {
        let report = Stepper::new().run(&program, &Limits::default().with_fuel(fuel));
        let depth = report.location.unwrap().backtrace.depth();
        assert!(depth <= 1, "{depth} marks after {fuel} contractions");
    }
}

#[test]
fn a_deep_backtrace_keeps_its_ends_and_counts_the_middle() {
    let arena = Arena::new();
    let program = program(
        &arena,
        "let rec down n = if n == 0 then 1 / n else 1 + down (n - 1) in down 1000",
    );
    let report = Stepper::new().run(&program, &Limits::default());
    let trace = report.location.unwrap().backtrace;
    assert_eq!(trace.depth(), 1001);
    assert_eq!(trace.frames.len(), 2 * crate::BACKTRACE_ENDS);
    assert_eq!(trace.omitted, 1001 - 2 * crate::BACKTRACE_ENDS as u64);
}

#[test]
fn a_value_has_no_location_and_a_paused_run_has_one() {
    let arena = Arena::new();
    let program = Program::new(three_deep(&arena)).unwrap();
    let mut run = Stepper::new().start(&program, &Limits::default().with_fuel(5));
    let paused = run.resume(0);
    assert_eq!(paused.location.unwrap().backtrace.depth(), 2);
    let ended = run.resume(100);
    assert_eq!(ended.location.as_ref().unwrap().span, Some(at(1)));
    assert_eq!(run.resume(0).location, ended.location);
    let fine = program_value(&arena);
    assert_eq!(Stepper::new().run(&fine, &Limits::default()).location, None);
}

fn program_value(arena: &Arena) -> Program {
    program(arena, "let fee = 3 in fee + 1")
}

#[test]
fn traced_redexes_carry_their_spans() {
    let arena = Arena::new();
    let program = Program::new(three_deep(&arena)).unwrap();
    let mut seen = Vec::new();
    Stepper::new().run_traced(&program, &Limits::default(), &mut |rule, redex| {
        seen.push((rule, redex.span()));
    });
    // The three lets have no spans; the calls and the division do.
    assert_eq!(
        seen,
        [
            (Rule::Let, None),
            (Rule::Let, None),
            (Rule::Let, None),
            (Rule::Beta, Some(at(4))),
            (Rule::Beta, Some(at(3))),
            (Rule::Beta, Some(at(2))),
            (Rule::Prim, Some(at(1))),
        ]
    );
}
