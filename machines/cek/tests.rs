//! Unit tests of what only the CEK machine has: tail calls that push no
//! frame, cancellation during fuel-free work, its stacks kept across runs,
//! closures that capture only their free variables, the memory limit on deep
//! spines, deep sums and read-back, the size of its frames and values, the
//! program's arguments under the root, and paused runs detached to another
//! thread with their sharing, and where a run stopped: the redex and the
//! call marks read off the continuation, against the stepper's at every
//! fuel bound. What every machine must do is tested once, over the machine
//! table, in `tests/`.

use super::*;
use crate::Outcome;
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


// Where a run stopped. The programs carry spans and names of our own (the
// builder's `Arena::at` and `Arena::named`, as a language lowered onto the
// kernel would), so that each assertion names the node it means whatever
// the text parser attaches.

/// A span that stands for source line `line`.
fn line(line: u32) -> crate::Span {
    crate::Span::new(0, line * 100, line * 100 + 10).with_position(line, 1)
}

/// `t` at line `n`.
fn at<'a>(arena: &'a Arena, n: u32, t: &'a Term<'a>) -> &'a Term<'a> {
    arena.at(line(n), t)
}

/// The location of a report, which every stop but a value must have.
fn location_of(report: &Report) -> &crate::Location {
    report.location.as_ref().expect("a stop has a location")
}

/// The (name, line of the call site) of each frame of a backtrace.
fn frames(location: &crate::Location) -> Vec<(Option<&str>, Option<u32>)> {
    location
        .backtrace
        .frames
        .iter()
        .map(|f| (f.name.as_deref(), f.site.map(|s| s.line)))
        .collect()
}

/// How `source` reads, rebuilt with a span on every node (node `k` in
/// preorder covers byte `k` of file 1, at line `k + 1`) and a name on every
/// function that is not a curried parameter of another, with a table of
/// what each node is: `app1`, `app2`, … for an application the given
/// number of places from the head of its spine, else the construct.
struct Located<'a> {
    term: &'a Term<'a>,
    kinds: Vec<&'static str>,
}

fn located<'a>(arena: &'a Arena, source: &str) -> Located<'a> {
    let parsed = crate::parse_term(arena, source).expect("the test program parses");
    let mut kinds = Vec::new();
    let term = relocate(arena, parsed, false, &mut kinds);
    Located { term, kinds }
}

/// `t` rebuilt as [`located`] says; `in_lambda` when `t` is the body of a
/// λ (a curried parameter, left unnamed).
fn relocate<'a>(
    arena: &'a Arena,
    t: &'a Term<'a>,
    in_lambda: bool,
    kinds: &mut Vec<&'static str>,
) -> &'a Term<'a> {
    const APPS: [&str; 6] = ["app1", "app2", "app3", "app4", "app5", "app6+"];
    let k = kinds.len() as u32;
    kinds.push("");
    let kind;
    let copy = match *t.node() {
        crate::Node::Var(_) | crate::Node::Int(_) | crate::Node::Bool(_) | crate::Node::Str(_) => {
            kind = "atom";
            t
        }
        crate::Node::Lam(b) => {
            kind = "lam";
            arena.lam(relocate(arena, b, true, kinds))
        }
        crate::Node::RecLam(b) => {
            kind = "lam";
            arena.rec_lam(relocate(arena, b, true, kinds))
        }
        crate::Node::App(f, a) => {
            // The innermost application of a spine is `app1`.
            let depth = spine_depth(f);
            kind = APPS[depth.min(APPS.len() - 1)];
            let f = relocate(arena, f, false, kinds);
            arena.app(f, relocate(arena, a, false, kinds))
        }
        crate::Node::Let(a, b) => {
            kind = "let";
            let a = relocate(arena, a, false, kinds);
            arena.let_in(a, relocate(arena, b, false, kinds))
        }
        crate::Node::If(c, y, n) => {
            kind = "if";
            let c = relocate(arena, c, false, kinds);
            let y = relocate(arena, y, false, kinds);
            arena.if_then_else(c, y, relocate(arena, n, false, kinds))
        }
        crate::Node::Prim(op, args) => {
            kind = "prim";
            let args: Vec<&Term<'_>> = args
                .iter()
                .map(|&a| relocate(arena, a, false, kinds))
                .collect();
            arena.prim(op, &args)
        }
        crate::Node::Con(tag, fields) => {
            kind = "con";
            let fields: Vec<&Term<'_>> = fields
                .iter()
                .map(|&f| relocate(arena, f, false, kinds))
                .collect();
            arena.con(tag, &fields)
        }
        crate::Node::Case(s, arms, default) => {
            kind = "case";
            let s = relocate(arena, s, false, kinds);
            let arms: Vec<crate::Arm<'_>> = arms
                .iter()
                .map(|arm| {
                    crate::Arm::new(arm.tag, arm.arity, relocate(arena, arm.body, false, kinds))
                })
                .collect();
            let default = default.map(|d| relocate(arena, d, false, kinds));
            arena.case(s, &arms, default)
        }
    };
    kinds[k as usize] = kind;
    let copy = match copy.node() {
        crate::Node::Lam(_) | crate::Node::RecLam(_) if !in_lambda => {
            arena.named(&format!("f{k}"), copy)
        }
        _ => copy,
    };
    arena.at(
        crate::Span::new(1, k, k + 1).with_position(k + 1, 1),
        copy,
    )
}

/// How many applications are under `t` on its function side: 0 for a head.
fn spine_depth(t: &Term<'_>) -> usize {
    let mut depth = 0;
    let mut at = t;
    while let crate::Node::App(f, _) = *at.node() {
        depth += 1;
        at = f;
    }
    depth
}

/// Run `program` on this machine and on the stepper with every fuel bound
/// from 0 to one past what it needs, and check that they stop at the same
/// place each time (and agree in all else); the uninterrupted report, and
/// the lines (node numbers, for [`located`] programs) of each out-of-fuel
/// stop's redex.
#[cfg(feature = "stepper")]
fn same_stops_as_the_stepper(program: &Program) -> (Report, Vec<Option<u32>>) {
    use crate::machines::stepper::Stepper;
    let whole = Cek::new().run(program, &Limits::default());
    let reference = Stepper::new().run(program, &Limits::default());
    assert_eq!(crate::disagreement(&whole, &reference), None);
    assert_eq!(whole.location, reference.location);
    let mut stops = Vec::new();
    for fuel in 0..=whole.counts.total() + 1 {
        let limits = Limits::default().with_fuel(fuel);
        let cek = Cek::new().run(program, &limits);
        let stepper = Stepper::new().run(program, &limits);
        assert_eq!(cek.location, stepper.location, "fuel {fuel}");
        assert_eq!(crate::disagreement(&cek, &stepper), None, "fuel {fuel}");
        if cek.outcome == Outcome::OutOfFuel {
            stops.push(location_of(&cek).span.map(|s| s.start));
        }
    }
    (whole, stops)
}

/// The kinds of node the stops of a [`located`] program were at.
#[cfg(feature = "stepper")]
fn kinds_at(located: &Located<'_>, stops: &[Option<u32>]) -> std::collections::BTreeSet<&'static str> {
    stops
        .iter()
        .map(|s| s.map_or("none", |k| located.kinds[k as usize]))
        .collect()
}

#[test]
fn a_division_by_zero_three_calls_deep_names_each_call_and_its_site() {
    let arena = Arena::new();
    let v = |i| arena.var(i);
    // let share = λcrates. 120 / crates               (line 1: the division)
    // let per_van = λvans. share (vans - 2) + 1       (line 2: the call of share)
    // let route = λstops. 3 * per_van stops           (line 3: the call of per_van)
    // route 2                                         (line 4)
    let share = arena.named(
        "share",
        arena.lam(at(&arena, 1, arena.prim(Prim::Div, &[arena.int(120), v(0)]))),
    );
    let per_van = arena.named(
        "per_van",
        arena.lam(arena.prim(
            Prim::Add,
            &[
                at(&arena, 2, arena.app(v(1), arena.prim(Prim::Sub, &[v(0), arena.int(2)]))),
                arena.int(1),
            ],
        )),
    );
    let route = arena.named(
        "route",
        arena.lam(arena.prim(Prim::Mul, &[arena.int(3), at(&arena, 3, arena.app(v(1), v(0)))])),
    );
    let t = arena.let_in(
        share,
        arena.let_in(per_van, arena.let_in(route, at(&arena, 4, arena.app(v(0), arena.int(2))))),
    );
    let program = Program::new(t).unwrap();
    let report = Cek::new().run(&program, &Limits::default());
    assert!(
        matches!(&report.outcome, Outcome::Error(e) if e.kind() == crate::ErrorKind::DivisionByZero)
    );
    let location = location_of(&report);
    assert_eq!(location.span, Some(line(1)));
    assert_eq!(
        frames(location),
        [
            (Some("share"), Some(2)),
            (Some("per_van"), Some(3)),
            (Some("route"), Some(4))
        ]
    );
    assert_eq!(location.backtrace.omitted, 0);
    // An ended run says so however often it is asked.
    let mut run = Cek::start(&program, &Limits::default());
    let first = run.resume(0);
    assert_eq!(first.location, report.location);
    assert_eq!(run.resume(0).location, report.location);
    assert_eq!(run.resume(100).location, report.location);
    #[cfg(feature = "stepper")]
    same_stops_as_the_stepper(&program);
}

/// `let rec water beds = if beds == 0 then 0 else water (beds - 1)` (the
/// recursive call at line 2) `in water n` (line 3): a tail loop.
fn watering<'a>(arena: &'a Arena, n: i64) -> &'a Term<'a> {
    let v = |i| arena.var(i);
    let water = arena.named(
        "water",
        arena.rec_lam(arena.if_then_else(
            arena.prim(Prim::Eq, &[v(0), arena.int(0)]),
            arena.int(0),
            at(arena, 2, arena.app(v(1), arena.prim(Prim::Sub, &[v(0), arena.int(1)]))),
        )),
    );
    arena.let_in(water, at(arena, 3, arena.app(v(0), arena.int(n))))
}

#[test]
fn a_tail_loop_out_of_fuel_has_one_frame() {
    let arena = Arena::new();
    let program = Program::new(watering(&arena, 1_000_000)).unwrap();
    let report = Cek::new().run(&program, &Limits::default().with_fuel(5_000));
    assert_eq!(report.outcome, Outcome::OutOfFuel);
    assert_eq!(frames(location_of(&report)), [(Some("water"), Some(2))]);
    // Paused again and again, the loop's backtrace stays one frame.
    let mut run = Cek::start(&program, &Limits::default().with_fuel(0));
    for _ in 0..200 {
        let report = run.resume(997);
        assert_eq!(report.outcome, Outcome::OutOfFuel);
        assert_eq!(location_of(&report).backtrace.depth(), 1);
    }
    #[cfg(feature = "stepper")]
    {
        use crate::machines::stepper::Stepper;
        for fuel in [1, 2, 3, 4, 5, 6, 7, 5_000] {
            let limits = Limits::default().with_fuel(fuel);
            let stepper = Stepper::new().run(&program, &limits);
            assert_eq!(Cek::new().run(&program, &limits).location, stepper.location);
        }
        let small = Program::new(watering(&arena, 3)).unwrap();
        same_stops_as_the_stepper(&small);
    }
}

#[test]
fn a_deep_recursion_keeps_both_ends_of_its_backtrace() {
    // let rec stack n = if n == 0 then 1 / n else 1 + stack (n - 1)   (line 2: the call)
    // in stack 1000                                                   (line 3)
    let arena = Arena::new();
    let v = |i| arena.var(i);
    let stack = arena.named(
        "stack",
        arena.rec_lam(arena.if_then_else(
            arena.prim(Prim::Eq, &[v(0), arena.int(0)]),
            at(&arena, 1, arena.prim(Prim::Div, &[arena.int(1), v(0)])),
            arena.prim(
                Prim::Add,
                &[
                    arena.int(1),
                    at(&arena, 2, arena.app(v(1), arena.prim(Prim::Sub, &[v(0), arena.int(1)]))),
                ],
            ),
        )),
    );
    let t = arena.let_in(stack, at(&arena, 3, arena.app(v(0), arena.int(1000))));
    let program = Program::new(t).unwrap();
    let report = Cek::new().run(&program, &Limits::default());
    let location = location_of(&report);
    assert_eq!(location.span, Some(line(1)));
    let trace = &location.backtrace;
    assert_eq!(trace.depth(), 1001);
    assert_eq!(trace.frames.len(), 2 * crate::BACKTRACE_ENDS);
    assert_eq!(trace.omitted, 1001 - 2 * crate::BACKTRACE_ENDS as u64);
    let found = frames(location);
    let (last, inner) = found.split_last().unwrap();
    assert_eq!(*last, (Some("stack"), Some(3)));
    assert!(inner.iter().all(|&f| f == (Some("stack"), Some(2))), "{inner:?}");
    #[cfg(feature = "stepper")]
    {
        let stepper = crate::machines::stepper::Stepper::new().run(&program, &Limits::default());
        assert_eq!(report.location, stepper.location);
    }
}

/// A host function that refuses loads over 10.
fn scales() -> (crate::HostFunctions, crate::HostId) {
    let mut host = crate::HostFunctions::new();
    let weigh = host
        .register("weigh", |x: i64| {
            if x > 10 {
                Err(format!("{x} crates overload the scale"))
            } else {
                Ok(x)
            }
        })
        .unwrap();
    (host, weigh)
}

#[test]
fn errors_in_each_construct_are_located_at_their_redex() {
    let arena = Arena::new();
    let v = |i| arena.var(i);
    let (host, weigh) = scales();
    // Each program is `let f = λx. BODY in f ARG` (under some lets), the
    // redex of BODY at line 1 and the call of f at line 2.
    let unary = |name: &str, body, arg| {
        arena.let_in(
            arena.named(name, arena.lam(body)),
            at(&arena, 2, arena.app(v(0), arg)),
        )
    };
    let cases: Vec<(&str, &Term<'_>, crate::ErrorKind)> = vec![
        (
            // let tariff = 4 in (λn. tariff n) 3: an atom applied at once
            "bill: an atom applied",
            arena.let_in(
                arena.int(4),
                unary("bill", at(&arena, 1, arena.app(v(1), v(0))), arena.int(3)),
            ),
            crate::ErrorKind::NotAFunction,
        ),
        (
            // tariff (rate n): the argument is a call, the function waits
            "bill: an argument evaluated first",
            arena.let_in(
                arena.lam(arena.prim(Prim::Mul, &[v(0), arena.int(2)])),
                arena.let_in(
                    arena.int(4),
                    unary(
                        "bill",
                        at(&arena, 1, arena.app(v(1), arena.app(v(2), v(0)))),
                        arena.int(3),
                    ),
                ),
            ),
            crate::ErrorKind::NotAFunction,
        ),
        (
            // tariff n 5: the inner application fails
            "bill: a spine headed by a number",
            arena.let_in(
                arena.int(4),
                unary(
                    "bill",
                    at(&arena, 5, arena.app(at(&arena, 1, arena.app(v(1), v(0))), arena.int(5))),
                    arena.int(3),
                ),
            ),
            crate::ErrorKind::NotAFunction,
        ),
        (
            "check: a condition that is a number",
            unary(
                "check",
                at(&arena, 1, arena.if_then_else(v(0), arena.int(1), arena.int(2))),
                arena.int(5),
            ),
            crate::ErrorKind::NotABoolean,
        ),
        (
            "check: a condition computed to a number",
            unary(
                "check",
                at(
                    &arena,
                    1,
                    arena.if_then_else(
                        arena.prim(Prim::Add, &[v(0), arena.int(1)]),
                        arena.int(1),
                        arena.int(2),
                    ),
                ),
                arena.int(5),
            ),
            crate::ErrorKind::NotABoolean,
        ),
        (
            "pick: a case with no arm for the value",
            unary(
                "pick",
                at(
                    &arena,
                    1,
                    arena.case(v(0), &[crate::Arm::new("Van", 1, v(0))], None),
                ),
                arena.con("Bike", &[arena.int(2)]),
            ),
            crate::ErrorKind::NoMatchingCase,
        ),
        (
            "load: a host function that refuses",
            unary(
                "load",
                at(&arena, 1, arena.prim(Prim::Host(weigh), &[v(0)])),
                arena.int(40),
            ),
            crate::ErrorKind::HostError,
        ),
        (
            "split: a division by zero",
            unary(
                "split",
                at(&arena, 1, arena.prim(Prim::Div, &[arena.int(9), v(0)])),
                arena.int(0),
            ),
            crate::ErrorKind::DivisionByZero,
        ),
    ];
    for (what, t, kind) in cases {
        let program = Program::with_host(t, &host).unwrap();
        let report = Cek::new().run(&program, &Limits::default());
        assert!(
            matches!(&report.outcome, Outcome::Error(e) if e.kind() == kind),
            "{what}: {:?}",
            report.outcome
        );
        let location = location_of(&report);
        assert_eq!(location.span, Some(line(1)), "{what}");
        let name = what.split(':').next();
        assert_eq!(frames(location), [(name, Some(2))], "{what}");
        #[cfg(feature = "stepper")]
        same_stops_as_the_stepper(&program);
    }
    // The program's own value applied to an argument: no application node,
    // no call pending.
    let program = Program::new(at(&arena, 1, arena.int(7)))
        .unwrap()
        .apply(&[Datum::Int(1)])
        .unwrap();
    let report = Cek::new().run(&program, &Limits::default());
    assert_eq!(report.location, Some(crate::Location::default()));
    #[cfg(feature = "stepper")]
    same_stops_as_the_stepper(&program);
}

/// Every construct, and every way this machine makes a call: a spine made
/// whole (`plant`'s loop), a spine under a frame whose arguments are
/// evaluated one by one (the first `harvest`), a spine whose head is
/// computed, so that the applications are contracted one at a time as the
/// arguments arrive (`(if …) 1 …`), a function whose tail call takes its
/// caller's remaining arguments (`fwd`), and a partial application that
/// escapes (`part`).
const EVERY_CONSTRUCT: &str = "\
let rec plant rows cols depth = if rows == 0 then depth else plant (rows - 1) (cols + 1) (depth * 2) in
let crop = case Seed(3) of { Seed(k) => k + 1; _ => 0 } in
let harvest = \\a b c. a + b * c in
let fwd = \\x. harvest x in
let part = harvest 1 in
harvest (plant 2 crop 1) (if crop > 2 then 5 else 6) (harvest 1 2 3)
  + (if crop > 9 then harvest else harvest) 1 (plant 1 1 1) 3
  + fwd 1 2 (part 2 3)
  + case Pair(crop, 2) of { Pair(p, q) => p * q }";

#[cfg(feature = "stepper")]
#[test]
fn out_of_fuel_before_each_kind_of_redex_is_where_the_stepper_stops() {
    let arena = Arena::new();
    let located = located(&arena, EVERY_CONSTRUCT);
    let program = Program::new(located.term).unwrap();
    let (whole, stops) = same_stops_as_the_stepper(&program);
    assert!(whole.outcome.value().is_some());
    let kinds = kinds_at(&located, &stops);
    for kind in ["app1", "app2", "app3", "let", "if", "prim", "case"] {
        assert!(kinds.contains(kind), "no stop before a {kind}: {kinds:?}");
    }
    // The program as the text parser gives it agrees too, with whatever
    // spans and names it attaches.
    same_stops_as_the_stepper(&Program::parse(EVERY_CONSTRUCT).unwrap());
}

#[cfg(feature = "stepper")]
#[test]
fn nested_calls_at_one_site_are_told_apart() {
    // McCarthy's 91 function: `m (m (n + 11))` enters the inner call while
    // the outer waits without an environment, so the inner one reuses its
    // caller's locals, at the same site: only the continuation's height
    // at entry tells the two activations apart.
    let arena = Arena::new();
    let source = "let rec m n = if n > 100 then n - 10 else m (m (n + 11)) in m 60";
    let located = located(&arena, source);
    let program = Program::new(located.term).unwrap();
    let (whole, _) = same_stops_as_the_stepper(&program);
    assert_eq!(int_of(&whole), Some(91));
    let mut repeated = 0;
    for fuel in 0..whole.counts.total() {
        let report = Cek::new().run(&program, &Limits::default().with_fuel(fuel));
        let sites = frames(location_of(&report));
        repeated = repeated.max(sites.windows(2).filter(|w| w[0] == w[1]).count());
    }
    assert!(repeated >= 2, "{repeated}");
}

#[cfg(feature = "stepper")]
#[test]
fn the_root_applied_to_arguments_is_a_call_with_no_site() {
    let arena = Arena::new();
    let located = located(&arena, "\\load crates. if crates > 3 then load / (crates - 4) else 0");
    let program = Program::new(located.term)
        .unwrap()
        .apply(&[Datum::Int(60), Datum::Int(4)])
        .unwrap();
    let (whole, _) = same_stops_as_the_stepper(&program);
    let location = location_of(&whole);
    assert_eq!(location.span.map(|s| located.kinds[s.start as usize]), Some("prim"));
    // The call of the root's function is pending, named, at no site.
    assert_eq!(frames(location), [(Some("f0"), None)]);
}

#[test]
fn a_paused_or_moved_run_keeps_its_location() {
    let arena = Arena::new();
    let valued = located(&arena, EVERY_CONSTRUCT);
    // Ends with an error deep inside calls: the same program, divided by zero.
    let failing = located_failure(&arena);
    for located in [valued, failing] {
        let program = Program::new(located.term).unwrap();
        let whole = Cek::new().run(&program, &Limits::default());
        let total = whole.counts.total();
        for fuel in [0, 1, 5, total / 3, total / 2, total - 1] {
            let mut run = Cek::start(&program, &Limits::default().with_fuel(fuel));
            let paused = run.resume(0);
            assert_eq!(paused.outcome, Outcome::OutOfFuel);
            // Before a redex: an application, a let, an if, a primitive or
            // a case (this program applies no arguments to its root).
            let at = location_of(&paused).span.expect("every node has a span");
            let kind = located.kinds[at.start as usize];
            assert!(
                kind.starts_with("app") || ["let", "if", "prim", "case"].contains(&kind),
                "fuel {fuel}: paused at a {kind}"
            );
            // Asked again, and as a run given all its fuel at once is at
            // this bound.
            assert_eq!(run.resume(0), paused);
            let direct = Cek::new().run(&program, &Limits::default().with_fuel(fuel));
            assert_eq!(direct, paused, "fuel {fuel}");
            #[cfg(feature = "stepper")]
            {
                let stepper = crate::machines::stepper::Stepper::new()
                    .run(&program, &Limits::default().with_fuel(fuel));
                assert_eq!(paused.location, stepper.location, "fuel {fuel}");
            }
            // Moved to another thread, it is where it was, and ends as an
            // uninterrupted run.
            let moved = Paused::detach(Box::new(run));
            let (again, end) = std::thread::spawn(move || {
                let mut run = moved.attach();
                (run.resume(0), run.resume(total))
            })
            .join()
            .unwrap();
            assert_eq!(again, paused, "fuel {fuel}");
            assert_eq!(end, whole, "fuel {fuel}");
        }
        // An ended run, moved, keeps its end and where it was.
        let mut run = Cek::start(&program, &Limits::default());
        assert_eq!(run.resume(0), whole);
        let moved = Paused::detach(Box::new(run));
        let report = std::thread::spawn(move || moved.attach().resume(0))
            .join()
            .unwrap();
        assert_eq!(report, whole);
    }
}

/// [`EVERY_CONSTRUCT`] with `harvest` dividing by zero when its last
/// argument is 3 (inside two pending calls), relocated.
fn located_failure(arena: &Arena) -> Located<'_> {
    let source = EVERY_CONSTRUCT.replace(
        "\\a b c. a + b * c",
        "\\a b c. if c == 3 then a / (c - 3) else a + b * c",
    );
    let located = located(arena, &source);
    let program = Program::new(located.term).unwrap();
    let report = Cek::new().run(&program, &Limits::default());
    assert!(
        matches!(&report.outcome, Outcome::Error(e) if e.kind() == crate::ErrorKind::DivisionByZero)
    );
    assert!(location_of(&report).backtrace.depth() >= 1);
    located
}

#[test]
fn a_parsed_program_is_located_in_its_text() {
    let source = "let share = \\crates. 120 / crates in\n\
                  let per_van = \\vans. share (vans - 2) + 1 in\n\
                  let route = \\stops. 3 * per_van stops in\n\
                  route 2";
    let program = Program::parse(source).unwrap();
    let report = Cek::new().run(&program, &Limits::default());
    let location = location_of(&report);
    let text = |span: Option<crate::Span>| {
        let span = span.expect("the parser gives every node a span");
        (span.line, &source[span.start as usize..span.end as usize])
    };
    assert_eq!(text(location.span), (1, "120 / crates"));
    let found: Vec<_> = location
        .backtrace
        .frames
        .iter()
        .map(|f| (f.name.as_deref(), text(f.site)))
        .collect();
    assert_eq!(
        found,
        [
            (Some("share"), (2, "share (vans - 2)")),
            (Some("per_van"), (3, "per_van stops")),
            (Some("route"), (4, "route 2"))
        ]
    );
}
