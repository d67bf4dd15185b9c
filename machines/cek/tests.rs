//! Unit tests of the CEK machine: published counts, pauses at every fuel
//! bound, tail calls, cancellation, scratch reuse, the curried-call shapes
//! against contraction sequences written down from the previous machine, and
//! the memory limit on the shapes issue 9 names.

use super::*;
use crate::{parse, print, Cancel, Counts, LimitError, LimitKind, Term};

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
fn tak_is_seven_with_gabriels_call_count() {
    let arena = Arena::new();
    let program = Program::new(tak(&arena, 18, 12, 6)).unwrap();
    let report = Cek::new().run(&program, &Limits::default(), &arena);
    assert_eq!(report.outcome, Outcome::Value(arena.int(7)));
    assert_eq!(report.counts.get(Rule::BetaRec), 63_609);
    assert_eq!(report.counts.get(Rule::Beta), 2 * 63_609);
}

#[test]
fn paused_runs_end_as_uninterrupted_ones() {
    let arena = Arena::new();
    let program = Program::new(tak(&arena, 12, 8, 4)).unwrap();
    let whole = Cek::new().run(&program, &Limits::default(), &arena);
    let total = whole.counts.total();
    for slice in [1, 7, 1000, total - 1] {
        let mut run = Cek::start(&program, &Limits::default().with_fuel(slice));
        let mut report = run.resume(0, &arena);
        let mut pauses = 0;
        while report.outcome == Outcome::OutOfFuel {
            assert_eq!(report.counts.total(), slice * (pauses + 1));
            pauses += 1;
            report = run.resume(slice, &arena);
        }
        assert_eq!(report, whole, "slices of {slice}");
        assert_eq!(pauses, total.div_ceil(slice) - 1);
        // A finished run keeps its outcome.
        assert_eq!(run.resume(5, &arena), whole);
    }
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
fn a_cancelled_handle_stops_a_divergent_loop() {
    let arena = Arena::new();
    // (μf. λn. f n) 0 never ends.
    let spin = arena.rec_lam(arena.app(arena.var(1), arena.var(0)));
    let program = Program::new(arena.app(spin, arena.int(0))).unwrap();
    let cancel = Cancel::new();
    let limits = Limits::default()
        .with_fuel(u64::MAX)
        .with_cancel(cancel.clone());
    let runner = std::thread::spawn(move || {
        let arena = Arena::new();
        let spin = arena.rec_lam(arena.app(arena.var(1), arena.var(0)));
        let program = Program::new(arena.app(spin, arena.int(0))).unwrap();
        let report = Cek::new().run(&program, &limits, &arena);
        (report.outcome.name(), report.counts.total())
    });
    std::thread::sleep(std::time::Duration::from_millis(20));
    cancel.cancel();
    let (outcome, contractions) = runner.join().unwrap();
    assert_eq!(outcome, "limit");
    assert!(contractions > 0);
    // Cancelled before it starts: polled before the first contraction.
    let limits = Limits::default().with_cancel(cancel);
    let report = Cek::new().run(&program, &limits, &arena);
    assert_eq!(report.outcome, Outcome::Limit(LimitError::cancelled()));
    assert_eq!(report.counts.total(), 0);
}

#[test]
fn a_paused_run_reports_cancelled_on_resume() {
    let arena = Arena::new();
    let program = Program::new(count_down(&arena, 1_000_000)).unwrap();
    let cancel = Cancel::new();
    let limits = Limits::default().with_fuel(0).with_cancel(cancel.clone());
    let mut run = Cek::start(&program, &limits);
    assert_eq!(run.resume(5_000, &arena).outcome, Outcome::OutOfFuel);
    assert_eq!(run.counts().total(), 5_000);
    cancel.cancel();
    let report = run.resume(5_000, &arena);
    assert_eq!(report.outcome, Outcome::Limit(LimitError::cancelled()));
    assert_eq!(report.counts.total(), 5_000);
    assert!(run.is_finished());
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

#[test]
fn without_accounting_gives_the_same_report() {
    let arena = Arena::new();
    let program = Program::new(tak(&arena, 12, 8, 4)).unwrap();
    let metered = Cek::new().run(&program, &Limits::default(), &arena);
    let unmetered = Cek::without_accounting().expect("cek has an unaccounted build").run(&program, &Limits::default(), &arena);
    assert_eq!(metered.outcome, Outcome::Value(arena.int(5)));
    assert_eq!(metered, unmetered);
    for source in SHAPES.iter().map(|(source, _, _)| source) {
        let program = parse(&arena, source).unwrap();
        let metered = Cek::new().run(&program, &Limits::default(), &arena);
        let unmetered = Cek::without_accounting().expect("cek has an unaccounted build").run(&program, &Limits::default(), &arena);
        assert_eq!(metered, unmetered, "{source}");
    }
}

#[test]
fn curried_calls_count_each_argument_and_partial_applications_escape() {
    let arena = Arena::new();
    let sub = |a, b| arena.prim(Prim::Sub, &[a, b]);
    // λa. λb. λc. a - b - c
    let f = arena.lam(arena.lam(arena.lam(sub(sub(arena.var(2), arena.var(1)), arena.var(0)))));
    let app = |f, a| arena.app(f, a);
    let whole = app(app(app(f, arena.int(10)), arena.int(3)), arena.int(2));
    let report = Cek::new().run(&Program::new(whole).unwrap(), &Limits::default(), &arena);
    assert_eq!(report.outcome, Outcome::Value(arena.int(5)));
    assert_eq!(report.counts.get(Rule::Beta), 3);
    assert_eq!(report.counts.get(Rule::Prim), 2);
    // Given two of its three arguments, it is a closure over both.
    let partial = app(app(f, arena.int(10)), arena.int(3));
    let report = Cek::new().run(&Program::new(partial).unwrap(), &Limits::default(), &arena);
    let expected = arena.lam(sub(sub(arena.int(10), arena.int(3)), arena.var(0)));
    assert_eq!(report.outcome, Outcome::Value(expected));
    assert_eq!(report.counts.get(Rule::Beta), 2);
    // Paused between the arguments, it ends the same way.
    let program = Program::new(whole).unwrap();
    let mut run = Cek::start(&program, &Limits::default().with_fuel(1));
    assert_eq!(run.resume(0, &arena).outcome, Outcome::OutOfFuel);
    assert_eq!(run.resume(1, &arena).outcome, Outcome::OutOfFuel);
    let report = run.resume(3, &arena);
    assert_eq!(report.outcome, Outcome::Value(arena.int(5)));
    assert_eq!(report.counts.total(), 5);
}

/// Curried calls of every shape — whole, partial, over-applied, through
/// partial applications bound to names and held in data, recursive, with
/// arguments that fail and callees that are not functions — with the
/// outcome and the rule of every contraction in order (`b` beta, `r`
/// beta_rec, `l` let, `i` if, `p` prim, `c` case), as the previous CEK
/// machine (which agreed with the stepper at every fuel bound) made them.
const SHAPES: &[(&str, &str, &str)] = &[
    ("let f = \\a b c. a - b * c in f 10 (f 1 2 3) 4", "value 30", "lbbbbppbbpp"),
    ("let f = \\a b c. a - b * c in f 1 2", "value \\a. 1 - 2 * a", "lbb"),
    ("let f = \\a b c. a - b * c in f 1", "value \\a b. 1 - a * b", "lb"),
    ("let f = \\a b c. a - b * c in (f 1) 2 3", "value -5", "lbbbpp"),
    ("let f = \\a b c. a - b * c in let g = f 1 in g 2 3", "value -5", "lblbbpp"),
    ("let f = \\a b c. a - b * c in let g = f 1 2 in g 3", "value -5", "lbblbpp"),
    ("let f = \\a b c. a - b * c in let g = f 1 in let h = g 2 in h 3", "value -5", "lblblbpp"),
    (
        "let f = \\a b c. a - b * c in let g = f 1 in Pair(g (2 + 0) (3 * 1), g (f 1 1 1) 5)",
        "value Pair(-5, 1)",
        "lblpbpbppbbbppbbpp",
    ),
    ("let f = \\a b c. a - b * c in f 1 2 3 4", "error not_a_function", "lbbbppb"),
    ("let f = \\a b c. a + b + c in f 1 (1 / 0) 3", "error division_by_zero", "lbp"),
    (
        "let f = \\a b c. a - b - c in f (f 1 2 3) (f 4 (5 / 0) 6) (f 7 8 9)",
        "error division_by_zero",
        "lbbbppbbp",
    ),
    (
        "let rec t x y z = if y < x then t (t (x - 1) y z) (t (y - 1) z x) (t (z - 1) x y) else z in t 6 3 1",
        "value 3",
        "lrbbpiprbbpiprbbpiprbbpirprbbpiprbbpirprbbpibprbbpiprbbpirprbbpibprbbpibpibpiprbbpiprbbpirprbbpibprbbpibpirprbbpibprbbpibpibprbbpibpirprbbpiprbbpirprbbpibprbbpiprbbpiprbbpirprbbpibprbbpibpirprbbpibprbbpibpibpiprbbpiprbbpiprbbpirprbbpibprbbpibpirprbbpibprbbpibpirprbbpibprbbpibpibprbbpibpiprbbpirprbbpibprbbpibpirprbbpiprbbpirprbbpibprbbpiprbbpiprbbpiprbbpirprbbpibprbbpibpirprbbpibprbbpibpirprbbpibprbbpibpibpiprbbpiprbbpiprbbpiprbbpirprbbpibprbbpibpirprbbpibprbbpibpirprbbpibprbbpibpirprbbpibprbbpibpibprbbpibpi",
    ),
    (
        "let rec f a b c = if a == 0 then b + c else f (a - 1) b c in f 2 3",
        "value \\a. if 2 == 0 then 3 + a else (rec b c d e. if c == 0 then d + e else b (c - 1) d e) (2 - 1) 3 a",
        "lrb",
    ),
    (
        "let rec f a b c = if a == 0 then b + c else f (a - 1) b c in let g = f 2 in g (1 + 1) (2 * 2)",
        "value 6",
        "lrlpbpbpiprbbpiprbbpip",
    ),
    (
        "let rec f a b c = if a == 0 then b + c else f (a - 1) b c in let g = f 2 in Pair(g, g 1)",
        "value Pair(\\a b. if 2 == 0 then a + b else (rec c d e f. if d == 0 then e + f else c (d - 1) e f) (2 - 1) a b, \\a. if 2 == 0 then 1 + a else (rec b c d e. if c == 0 then d + e else b (c - 1) d e) (2 - 1) 1 a)",
        "lrlb",
    ),
    (
        "let rec f a b c = if a == 0 then b + c else let g = f (a - 1) b in g c in f 3 1 4",
        "value 5",
        "lrbbpiprblbpiprblbpiprblbpip",
    ),
    (
        "let rec h a b = if a == 0 then b else h (h (a - 1) b) in h 2 5",
        "value \\a. if (\\b. if 5 == 0 then b else (rec c d e. if d == 0 then e else c (c (d - 1) e)) ((rec c d e. if d == 0 then e else c (c (d - 1) e)) (5 - 1) b)) == 0 then a else (rec b c d. if c == 0 then d else b (b (c - 1) d)) ((rec b c d. if c == 0 then d else b (b (c - 1) d)) ((\\b. if 5 == 0 then b else (rec c d e. if d == 0 then e else c (c (d - 1) e)) ((rec c d e. if d == 0 then e else c (c (d - 1) e)) (5 - 1) b)) - 1) a)",
        "lrbpiprbpiprbpirr",
    ),
    (
        "let rec g a b = if a == 0 then b else g (a - 1) (g (a - 1) (let c = b in c + 1)) in g 3 1",
        "value 8",
        "lrbpiprprlpbpiprprlpbpiprprlpbpibpibpiprprlpbpibpibpiprprlpbpiprprlpbpibpibpiprprlpbpibpi",
    ),
    ("let f = \\a b. let k = a + b in \\c. k * c in f 1 2 3", "value 9", "lbbplbp"),
    ("let f = \\a. \\b. a in f (\\x. x + 1) 2 (40 + 1)", "value 42", "lbbpbp"),
    ("let f = 3 in f 1 2", "error not_a_function", "lb"),
    (
        "let c0 = \\s z. z in let scc = \\n s z. s (n s z) in scc (scc c0) (\\k. k + 1) 0",
        "value 2",
        "llbbbbbbbbbpbp",
    ),
    (
        "let rec f a b = if a == 0 then b else f (a - 1) (\\x. x + b 0) in f 5 (\\y. y) 1",
        "value 1",
        "lrbpiprbpiprbpiprbpiprbpiprbpibbbbbbppppp",
    ),
    ("case Pair(\\a b. a - b, 3) of { Pair(g, n) => g n }", "value \\a. 3 - a", "cb"),
    (
        "let x = 5 in let y = 6 in let f = \\a. \\b. let g = \\c. \\d. a + c + x + d in g in f 1 2 3 4",
        "value 13",
        "lllbblbbppp",
    ),
    (
        "let rec map f xs = case xs of { Nil => Nil; Cons(h, t) => Cons(f h, map f t) } in let add = \\a b c. a + b + c in map (add 10) (Cons(1, Cons(2, Nil)))",
        "value Cons(\\a. 10 + 1 + a, Cons(\\a. 10 + 2 + a, Nil))",
        "llbrbcbrbcbrbc",
    ),
    ("let greet = \\a b. a ++ \", \" ++ b in greet \"hi\"", "value \\a. \"hi\" ++ \", \" ++ a", "lb"),
    ("let f = \\a b. b in f f f f f 3", "value \\a. a", "lbbbbb"),
];

/// The counts of the first `n` contractions of `trace`.
fn prefix_counts(trace: &str, n: usize) -> Counts {
    let mut counts = Counts::default();
    for c in trace.chars().take(n) {
        counts.add(match c {
            'b' => Rule::Beta,
            'r' => Rule::BetaRec,
            'l' => Rule::Let,
            'i' => Rule::If,
            'p' => Rule::Prim,
            _ => Rule::Case,
        });
    }
    counts
}

/// How a report ended, as [`SHAPES`] writes it.
fn ending(report: &Report<'_>) -> String {
    match &report.outcome {
        Outcome::Value(v) => format!("value {}", print(v)),
        Outcome::Error(e) => format!("error {}", e.kind().name()),
        other => other.name().to_string(),
    }
}

#[test]
fn curried_calls_make_the_expected_contractions_at_every_fuel_bound() {
    let mut cek = Cek::new();
    for &(source, end, trace) in SHAPES {
        let arena = Arena::new();
        let program = parse(&arena, source).unwrap();
        let total = trace.len();
        for fuel in 0..=total + 1 {
            let report = cek.run(&program, &Limits::default().with_fuel(fuel as u64), &arena);
            if fuel < total {
                assert_eq!(
                    report.outcome,
                    Outcome::OutOfFuel,
                    "{source} with fuel {fuel}"
                );
                assert_eq!(
                    report.counts,
                    prefix_counts(trace, fuel),
                    "{source} with fuel {fuel}"
                );
            } else {
                assert_eq!(ending(&report), end, "{source} with fuel {fuel}");
                assert_eq!(
                    report.counts,
                    prefix_counts(trace, total),
                    "{source} with fuel {fuel}"
                );
            }
        }
        // One unit at a time, it ends the same way.
        let mut run = Cek::start(&program, &Limits::default().with_fuel(0));
        let mut report = run.resume(0, &arena);
        while report.outcome == Outcome::OutOfFuel {
            report = run.resume(1, &arena);
        }
        assert_eq!(ending(&report), end, "{source} paused");
        assert_eq!(
            report.counts,
            prefix_counts(trace, total),
            "{source} paused"
        );
    }
}

#[test]
fn a_three_parameter_function_at_every_shape() {
    // λa b c. 100·a + 10·b + c, given its arguments in every grouping.
    let f = "let f = \\a b c. 100 * a + 10 * b + c in ";
    let rec = "let rec f a b c = if a == 0 then 10 * b + c else 100 * a + f 0 b c in ";
    for head in [f, rec] {
        for (call, want) in [
            ("f 1 2 3", "123"),
            ("(f 1) 2 3", "123"),
            ("(f 1 2) 3", "123"),
            ("((f 1) 2) 3", "123"),
            ("let g = f 1 in g 2 3", "123"),
            ("let g = f 1 2 in g 3", "123"),
            ("let g = f 1 in let h = g 2 in h 3", "123"),
            ("let g = f 1 in Pair(g 2 3, g 4 5)", "Pair(123, 145)"),
            (
                "case Box(f 1) of { Box(g) => g (1 + 1) (let c = 3 in c) }",
                "123",
            ),
            ("let g = f (0 + 1) in (g 2) (3 * 1)", "123"),
        ] {
            let source = format!("{head}{call}");
            let arena = Arena::new();
            let program = parse(&arena, &source).unwrap();
            let whole = Cek::new().run(&program, &Limits::default(), &arena);
            assert_eq!(ending(&whole), format!("value {want}"), "{source}");
            // Every fuel bound below the total is out of fuel having used
            // all of it; at the total it is the whole run.
            let total = whole.counts.total();
            for fuel in 0..=total {
                let report = Cek::new().run(&program, &Limits::default().with_fuel(fuel), &arena);
                if fuel < total {
                    assert_eq!(report.outcome, Outcome::OutOfFuel, "{source} with {fuel}");
                    assert_eq!(report.counts.total(), fuel, "{source} with {fuel}");
                } else {
                    assert_eq!(report, whole, "{source} with {fuel}");
                }
            }
        }
        // Partial applications read back as the λ of the next parameter,
        // over-application applies the result.
        for (call, want) in [
            ("f 1", "value \\a b. 100 * 1 + 10 * a + b"),
            ("f 1 2", "value \\a. 100 * 1 + 10 * 2 + a"),
            ("f 1 2 3 4", "error not_a_function"),
        ] {
            let source = format!("{head}{call}");
            let arena = Arena::new();
            let program = parse(&arena, &source).unwrap();
            let report = Cek::new().run(&program, &Limits::default(), &arena);
            if head == f {
                assert_eq!(ending(&report), want, "{source}");
            } else {
                assert_eq!(
                    ending(&report).split(' ').next(),
                    want.split(' ').next(),
                    "{source}"
                );
            }
        }
    }
}

#[test]
fn memory_limit_stops_a_growing_run() {
    let arena = Arena::new();
    // μf. λn. Cons(n, f (n + 1)): builds continuation frames forever.
    let body = arena.con(
        "Cons",
        &[
            arena.var(0),
            arena.app(
                arena.var(1),
                arena.prim(Prim::Add, &[arena.var(0), arena.int(1)]),
            ),
        ],
    );
    let program = Program::new(arena.app(arena.rec_lam(body), arena.int(0))).unwrap();
    let limits = Limits::default().with_memory(1 << 20);
    let mut cek = Cek::new();
    let report = cek.run(&program, &limits, &arena);
    assert_eq!(report.outcome, Outcome::Limit(LimitError::memory(1 << 20)));
    assert!(cek.peak_bytes() > 1 << 20);
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
