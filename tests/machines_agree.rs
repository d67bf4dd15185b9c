//! The agreement promise of DESIGN §2 between the reference stepper and the
//! environment machines (`env`, `cek`): identical reports (value as a de
//! Bruijn term, error kind and message, per-rule counts) on programs with
//! answers from published sources, on every error kind, at every fuel bound
//! of small programs; and the §6 promises on deep recursion, long tail loops
//! and long lists.

use orrery::{
    Arena, Arm, ErrorKind, LimitKind, Limits, Machine, MachineKind, Outcome, Prim, Program, Report,
    Rule, Term,
};

/// The machines under test besides the stepper.
fn fast_machines() -> Vec<MachineKind> {
    MachineKind::enabled()
        .iter()
        .copied()
        .filter(|m| m.name() != "stepper")
        .collect()
}

/// Run `term` on every machine under `limits` and check that each report is
/// the stepper's. Returns the stepper's report.
fn agree<'a>(arena: &'a Arena, term: &'a Term<'a>, limits: &Limits) -> Report<'a> {
    let program = Program::new(term).expect("a valid program");
    let reference = MachineKind::from_name("stepper")
        .expect("the stepper is enabled")
        .run(&program, limits, arena);
    for machine in fast_machines() {
        let report = machine.run(&program, limits, arena);
        assert_eq!(
            report,
            reference,
            "{} disagrees with the stepper (fuel {})",
            machine.name(),
            limits.fuel
        );
    }
    reference
}

/// Term-building shorthands over an arena.
struct B<'a>(&'a Arena);

impl<'a> B<'a> {
    fn v(&self, i: u32) -> &'a Term<'a> {
        self.0.var(i)
    }
    fn n(&self, n: i64) -> &'a Term<'a> {
        self.0.int(n)
    }
    fn app(&self, f: &'a Term<'a>, args: &[&'a Term<'a>]) -> &'a Term<'a> {
        args.iter().fold(f, |f, a| self.0.app(f, a))
    }
    fn op(&self, op: Prim, a: &'a Term<'a>, b: &'a Term<'a>) -> &'a Term<'a> {
        self.0.prim(op, &[a, b])
    }
    fn ite(&self, c: &'a Term<'a>, t: &'a Term<'a>, e: &'a Term<'a>) -> &'a Term<'a> {
        self.0.if_then_else(c, t, e)
    }
    fn lam(&self, body: &'a Term<'a>) -> &'a Term<'a> {
        self.0.lam(body)
    }
    fn rec(&self, body: &'a Term<'a>) -> &'a Term<'a> {
        self.0.rec_lam(body)
    }
    fn let_in(&self, bound: &'a Term<'a>, body: &'a Term<'a>) -> &'a Term<'a> {
        self.0.let_in(bound, body)
    }
    fn con(&self, tag: &str, fields: &[&'a Term<'a>]) -> &'a Term<'a> {
        self.0.con(tag, fields)
    }
    fn nil(&self) -> &'a Term<'a> {
        self.0.con("Nil", &[])
    }
    fn cons(&self, h: &'a Term<'a>, t: &'a Term<'a>) -> &'a Term<'a> {
        self.0.con("Cons", &[h, t])
    }
    /// `case s of { Nil => nil; Cons(h, t) => cons }` (in `cons`, h is #1
    /// and t is #0).
    fn list_case(&self, s: &'a Term<'a>, nil: &'a Term<'a>, cons: &'a Term<'a>) -> &'a Term<'a> {
        self.0.case(
            s,
            &[
                Arm::new(self.0.tag("Nil"), 0, nil),
                Arm::new(self.0.tag("Cons"), 2, cons),
            ],
            None,
        )
    }
}

/// Gabriel's tak, curried: `μtak. λx. λy. λz. if y < x then tak (tak (x-1) y z)
/// (tak (y-1) z x) (tak (z-1) x y) else z`; in the body z is #0, y #1, x #2.
fn tak_fn<'a>(b: &B<'a>) -> &'a Term<'a> {
    let dec = |t| b.op(Prim::Sub, t, b.n(1));
    let tak = b.v(3);
    let body = b.ite(
        b.op(Prim::Lt, b.v(1), b.v(2)),
        b.app(
            tak,
            &[
                b.app(tak, &[dec(b.v(2)), b.v(1), b.v(0)]),
                b.app(tak, &[dec(b.v(1)), b.v(0), b.v(2)]),
                b.app(tak, &[dec(b.v(0)), b.v(2), b.v(1)]),
            ],
        ),
        b.v(0),
    );
    b.rec(b.lam(b.lam(body)))
}

/// Naive Fibonacci: `μfib. λn. if n < 2 then n else fib (n-1) + fib (n-2)`.
fn fib_fn<'a>(b: &B<'a>) -> &'a Term<'a> {
    let call = |k| b.app(b.v(1), &[b.op(Prim::Sub, b.v(0), b.n(k))]);
    b.rec(b.ite(
        b.op(Prim::Lt, b.v(0), b.n(2)),
        b.v(0),
        b.op(Prim::Add, call(1), call(2)),
    ))
}

/// Ackermann–Péter, curried: `μack. λm. λn. if m == 0 then n + 1 else if
/// n == 0 then ack (m-1) 1 else ack (m-1) (ack m (n-1))`; n is #0, m #1.
fn ackermann_fn<'a>(b: &B<'a>) -> &'a Term<'a> {
    let ack = b.v(2);
    let dec = |t| b.op(Prim::Sub, t, b.n(1));
    let body = b.ite(
        b.op(Prim::Eq, b.v(1), b.n(0)),
        b.op(Prim::Add, b.v(0), b.n(1)),
        b.ite(
            b.op(Prim::Eq, b.v(0), b.n(0)),
            b.app(ack, &[dec(b.v(1)), b.n(1)]),
            b.app(ack, &[dec(b.v(1)), b.app(ack, &[b.v(1), dec(b.v(0))])]),
        ),
    );
    b.rec(b.lam(body))
}

/// `μcount. λn. if n == 0 then 0 else count (n - 1)`, applied to `n`: a tail
/// loop of `n` iterations.
fn count_down<'a>(b: &B<'a>, n: i64) -> &'a Term<'a> {
    let f = b.rec(b.ite(
        b.op(Prim::Eq, b.v(0), b.n(0)),
        b.n(0),
        b.app(b.v(1), &[b.op(Prim::Sub, b.v(0), b.n(1))]),
    ));
    b.app(f, &[b.n(n)])
}

/// `μdepth. λn. if n == 0 then 0 else 1 + depth (n - 1)`, applied to `n`:
/// `n` pending additions.
fn deep_sum<'a>(b: &B<'a>, n: i64) -> &'a Term<'a> {
    let f = b.rec(b.ite(
        b.op(Prim::Eq, b.v(0), b.n(0)),
        b.n(0),
        b.op(
            Prim::Add,
            b.n(1),
            b.app(b.v(1), &[b.op(Prim::Sub, b.v(0), b.n(1))]),
        ),
    ));
    b.app(f, &[b.n(n)])
}

/// `μupto. λacc. λn. if n == 0 then acc else upto (Cons(n, acc)) (n - 1)`:
/// the list `[1, …, n]`, built by a tail loop. In the body n is #0, acc #1.
fn upto_fn<'a>(b: &B<'a>) -> &'a Term<'a> {
    b.rec(b.lam(b.ite(
        b.op(Prim::Eq, b.v(0), b.n(0)),
        b.v(1),
        b.app(
            b.v(2),
            &[b.cons(b.v(0), b.v(1)), b.op(Prim::Sub, b.v(0), b.n(1))],
        ),
    )))
}

/// `μsum. λl. case l of { Nil => 0; Cons(h, t) => h + sum t }`.
fn sum_fn<'a>(b: &B<'a>) -> &'a Term<'a> {
    b.rec(b.list_case(
        b.v(0),
        b.n(0),
        b.op(Prim::Add, b.v(1), b.app(b.v(3), &[b.v(0)])),
    ))
}

/// `μmap. λf. λl. case l of { Nil => Nil; Cons(h, t) => Cons(f h, map f t) }`.
fn map_fn<'a>(b: &B<'a>) -> &'a Term<'a> {
    // Under the arm: t #0, h #1, l #2, f #3, map #4.
    b.rec(b.lam(b.list_case(
        b.v(0),
        b.nil(),
        b.cons(b.app(b.v(3), &[b.v(1)]), b.app(b.v(4), &[b.v(3), b.v(0)])),
    )))
}

fn value_of<'o>(report: &Report<'o>) -> &'o Term<'o> {
    match report.outcome {
        Outcome::Value(v) => v,
        ref other => panic!("expected a value, got {other:?}"),
    }
}

#[test]
fn tak_18_12_6_is_7_with_63609_calls() {
    // Gabriel, Performance and Evaluation of Lisp Systems (1985), §3.1.
    let arena = Arena::new();
    let b = B(&arena);
    let t = b.app(tak_fn(&b), &[b.n(18), b.n(12), b.n(6)]);
    let report = agree(&arena, t, &Limits::default());
    assert_eq!(report.outcome, Outcome::Value(arena.int(7)));
    assert_eq!(report.counts.get(Rule::BetaRec), 63_609);
    assert_eq!(report.counts.get(Rule::Beta), 2 * 63_609);
}

#[test]
fn fib_20_is_6765_with_21891_calls() {
    // OEIS A000045 (F(20) = 6765) and A001595 (calls: 2 F(21) - 1 = 21891).
    let arena = Arena::new();
    let b = B(&arena);
    let t = b.app(fib_fn(&b), &[b.n(20)]);
    let report = agree(&arena, t, &Limits::default());
    assert_eq!(report.outcome, Outcome::Value(arena.int(6765)));
    assert_eq!(report.counts.get(Rule::BetaRec), 21_891);
    assert_eq!(report.counts.get(Rule::Beta), 0);
    // Per call: one comparison and one if; per inner call, two
    // subtractions and one addition.
    assert_eq!(report.counts.get(Rule::If), 21_891);
    assert_eq!(report.counts.get(Rule::Prim), 21_891 + 3 * 10_945);
}

#[test]
fn ackermann_3_3_is_61_with_2432_calls() {
    // OEIS A143796 (A(3, n) = 2^(n+3) - 3) and A074877 (calls for A(3, n)).
    let arena = Arena::new();
    let b = B(&arena);
    let t = b.app(ackermann_fn(&b), &[b.n(3), b.n(3)]);
    let report = agree(&arena, t, &Limits::default());
    assert_eq!(report.outcome, Outcome::Value(arena.int(61)));
    assert_eq!(report.counts.get(Rule::BetaRec), 2_432);
    assert_eq!(report.counts.get(Rule::Beta), 2_432);
}

#[test]
fn closures_read_back_as_the_steppers_terms() {
    let arena = Arena::new();
    let b = B(&arena);
    // tak 5 3: a closure λz. … capturing x = 5, y = 3 and tak itself.
    let partial = b.app(tak_fn(&b), &[b.n(5), b.n(3)]);
    let report = agree(&arena, partial, &Limits::default());
    let expected_body = {
        // λz. body with y := 3, x := 5 and tak := the recursive function.
        let source = tak_fn(&b);
        let orrery::Node::RecLam(inner) = *source.node() else {
            unreachable!()
        };
        let orrery::Node::Lam(inner) = *inner.node() else {
            unreachable!()
        };
        orrery::instantiate(&arena, inner, &[b.n(3), b.n(5), source]).unwrap()
    };
    assert_eq!(value_of(&report), expected_body);

    // let a = "s" in let l = Cons(1, Nil) in
    //   (λx. λy. Triple(x, y, l, a)) (λz. a ++ z)
    // The value is a closure capturing a closure, a list and a string.
    let t = b.let_in(
        arena.string("s"),
        b.let_in(
            b.cons(b.n(1), b.nil()),
            b.app(
                b.lam(b.lam(b.con("Quad", &[b.v(1), b.v(0), b.v(2), b.v(3)]))),
                &[b.lam(b.op(Prim::Concat, b.v(2), b.v(0)))],
            ),
        ),
    );
    let report = agree(&arena, t, &Limits::default());
    let captured = b.lam(b.op(Prim::Concat, arena.string("s"), b.v(0)));
    let expected = b.lam(b.con(
        "Quad",
        &[captured, b.v(0), b.cons(b.n(1), b.nil()), arena.string("s")],
    ));
    assert_eq!(value_of(&report), expected);
    assert_eq!(report.counts.get(Rule::Let), 2);
    assert_eq!(report.counts.get(Rule::Beta), 1);

    // A recursive closure under a binder: (λk. μf. λn. f k) 7 gives the
    // recursive function with 7 substituted.
    let t = b.app(b.lam(b.rec(b.lam(b.app(b.v(2), &[b.v(3)])))), &[b.n(7)]);
    let report = agree(&arena, t, &Limits::default());
    assert_eq!(value_of(&report), b.rec(b.lam(b.app(b.v(2), &[b.n(7)]))));
}

#[test]
fn lists_and_case() {
    let arena = Arena::new();
    let b = B(&arena);
    let list = |n| b.app(upto_fn(&b), &[b.nil(), b.n(n)]);
    // sum (upto 100) = 5050.
    let report = agree(&arena, b.app(sum_fn(&b), &[list(100)]), &Limits::default());
    assert_eq!(report.outcome, Outcome::Value(arena.int(5050)));
    assert_eq!(report.counts.get(Rule::Case), 101);
    // map (λx. x * x) (upto 4) = [1, 4, 9, 16], read back as a list.
    let square = b.lam(b.op(Prim::Mul, b.v(0), b.v(0)));
    let report = agree(
        &arena,
        b.app(map_fn(&b), &[square, list(4)]),
        &Limits::default(),
    );
    let expected = [16, 9, 4, 1]
        .into_iter()
        .fold(b.nil(), |tail, n| b.cons(b.n(n), tail));
    assert_eq!(value_of(&report), expected);
    // A default arm matches anything; arms match tag and arity.
    let t = arena.case(
        b.con("Some", &[b.n(4)]),
        &[Arm::new("None", 0, b.n(0))],
        Some(b.n(9)),
    );
    assert_eq!(
        agree(&arena, t, &Limits::default()).outcome,
        Outcome::Value(arena.int(9))
    );
    let t = arena.case(b.n(3), &[], Some(b.n(1)));
    assert_eq!(
        agree(&arena, t, &Limits::default()).outcome,
        Outcome::Value(arena.int(1))
    );
    // A constructor with a closure field, and fields evaluated left to right.
    let t = b.con(
        "Pair",
        &[
            b.op(Prim::Add, b.n(1), b.n(2)),
            b.let_in(b.n(5), b.lam(b.op(Prim::Mul, b.v(0), b.v(1)))),
        ],
    );
    let report = agree(&arena, t, &Limits::default());
    assert_eq!(
        value_of(&report),
        b.con("Pair", &[b.n(3), b.lam(b.op(Prim::Mul, b.v(0), b.n(5)))])
    );
    // Strings made at run time, compared and measured.
    let t = b.let_in(
        b.op(Prim::Concat, arena.string("héllo, "), arena.string("wörld")),
        b.con(
            "R",
            &[
                b.v(0),
                arena.prim(Prim::Length, &[b.v(0)]),
                b.op(Prim::Lt, b.v(0), arena.string("i")),
                arena.prim(Prim::Decimal, &[b.n(-12)]),
            ],
        ),
    );
    let report = agree(&arena, t, &Limits::default());
    assert_eq!(
        value_of(&report),
        b.con(
            "R",
            &[
                arena.string("héllo, wörld"),
                b.n(12),
                arena.boolean(true),
                arena.string("-12")
            ]
        )
    );
}

#[test]
fn every_error_kind_agrees() {
    let arena = Arena::new();
    let b = B(&arena);
    let cases: Vec<(&Term<'_>, ErrorKind, Rule)> = vec![
        // The argument is evaluated before the callee is found wanting.
        (
            b.app(b.n(1), &[b.op(Prim::Add, b.n(1), b.n(1))]),
            ErrorKind::NotAFunction,
            Rule::Beta,
        ),
        (
            b.app(b.cons(b.n(1), b.nil()), &[b.n(2)]),
            ErrorKind::NotAFunction,
            Rule::Beta,
        ),
        (
            b.ite(b.nil(), b.n(1), b.n(2)),
            ErrorKind::NotABoolean,
            Rule::If,
        ),
        (
            b.ite(b.lam(b.v(0)), b.n(1), b.n(2)),
            ErrorKind::NotABoolean,
            Rule::If,
        ),
        (
            b.op(Prim::Add, b.n(1), arena.boolean(true)),
            ErrorKind::TypeMismatch,
            Rule::Prim,
        ),
        (
            b.op(Prim::Concat, arena.string("a"), b.lam(b.v(0))),
            ErrorKind::TypeMismatch,
            Rule::Prim,
        ),
        (
            b.op(Prim::Eq, b.nil(), b.nil()),
            ErrorKind::TypeMismatch,
            Rule::Prim,
        ),
        (
            b.op(Prim::Div, b.n(1), b.op(Prim::Sub, b.n(2), b.n(2))),
            ErrorKind::DivisionByZero,
            Rule::Prim,
        ),
        (
            b.op(Prim::Rem, b.n(1), b.n(0)),
            ErrorKind::DivisionByZero,
            Rule::Prim,
        ),
        (
            b.op(Prim::Mul, b.n(i64::MAX), b.n(2)),
            ErrorKind::IntegerOverflow,
            Rule::Prim,
        ),
        (
            b.op(Prim::Div, b.n(i64::MIN), b.n(-1)),
            ErrorKind::IntegerOverflow,
            Rule::Prim,
        ),
        (
            arena.prim(Prim::Neg, &[b.n(i64::MIN)]),
            ErrorKind::IntegerOverflow,
            Rule::Prim,
        ),
        (
            arena.case(b.n(3), &[Arm::new("Nil", 0, b.n(0))], None),
            ErrorKind::NoMatchingCase,
            Rule::Case,
        ),
        (
            b.list_case(b.con("Leaf", &[]), b.n(0), b.n(1)),
            ErrorKind::NoMatchingCase,
            Rule::Case,
        ),
    ];
    for (t, kind, rule) in cases {
        // Errors deep inside a recursion too: (λx. t) 0 under a let.
        let wrapped = b.let_in(b.n(0), b.app(b.lam(t), &[b.v(0)]));
        for t in [t, wrapped] {
            let report = agree(&arena, t, &Limits::default());
            match &report.outcome {
                Outcome::Error(e) => assert_eq!(e.kind(), kind),
                other => panic!("expected {kind:?}, got {other:?}"),
            }
            assert!(report.counts.get(rule) >= 1);
            // With no fuel the attempt is out of fuel, not an error.
            let starved = agree(&arena, t, &Limits::default().with_fuel(0));
            assert_eq!(starved.outcome, Outcome::OutOfFuel);
            // With one unit less than it used, the failing attempt is not
            // made.
            let total = report.counts.total();
            let short = agree(&arena, t, &Limits::default().with_fuel(total - 1));
            assert_eq!(short.outcome, Outcome::OutOfFuel);
            assert_eq!(short.counts.total(), total - 1);
        }
    }
}

#[test]
fn out_of_fuel_at_exactly_every_bound() {
    let arena = Arena::new();
    let b = B(&arena);
    let square = b.lam(b.op(Prim::Mul, b.v(0), b.v(0)));
    let programs = [
        b.app(tak_fn(&b), &[b.n(4), b.n(2), b.n(1)]),
        b.app(fib_fn(&b), &[b.n(6)]),
        b.app(ackermann_fn(&b), &[b.n(1), b.n(2)]),
        b.app(
            map_fn(&b),
            &[square, b.app(upto_fn(&b), &[b.nil(), b.n(3)])],
        ),
        b.app(sum_fn(&b), &[b.app(upto_fn(&b), &[b.nil(), b.n(5)])]),
        b.let_in(
            b.n(1),
            b.op(Prim::Div, b.v(0), b.op(Prim::Sub, b.v(0), b.v(0))),
        ),
    ];
    for t in programs {
        let whole = agree(&arena, t, &Limits::default());
        let total = whole.counts.total();
        assert!(total >= 3);
        for fuel in 0..total {
            let report = agree(&arena, t, &Limits::default().with_fuel(fuel));
            assert_eq!(report.outcome, Outcome::OutOfFuel, "fuel {fuel}");
            assert_eq!(report.counts.total(), fuel);
        }
        assert_eq!(agree(&arena, t, &Limits::default().with_fuel(total)), whole);
    }
}

/// Run `f` on a thread with a 2 MiB stack, as an embedding application's
/// worker thread might have.
fn on_small_stack<T: Send + 'static>(f: impl FnOnce() -> T + Send + 'static) -> T {
    std::thread::Builder::new()
        .stack_size(2 << 20)
        .spawn(f)
        .expect("spawn a thread")
        .join()
        .expect("no panic or overflow")
}

#[test]
fn a_million_pending_additions_complete_without_native_recursion() {
    for machine in fast_machines() {
        let (outcome, calls) = on_small_stack(move || {
            let arena = Arena::new();
            let b = B(&arena);
            let program = Program::new(deep_sum(&b, 1_000_000)).unwrap();
            let report = machine.run(&program, &Limits::default(), &arena);
            let outcome = match report.outcome {
                Outcome::Value(v) => Ok(v == arena.int(1_000_000)),
                Outcome::Limit(l) => Err(l.kind()),
                other => panic!("{other:?}"),
            };
            (outcome, report.counts.get(Rule::BetaRec))
        });
        match outcome {
            Ok(right) => {
                assert!(right, "{}: wrong sum", machine.name());
                assert_eq!(calls, 1_000_001);
            }
            Err(kind) => assert_eq!(kind, LimitKind::Memory),
        }
        // Under a tight memory limit the same program stops with a memory
        // limit, never a crash.
        let outcome = on_small_stack(move || {
            let arena = Arena::new();
            let b = B(&arena);
            let program = Program::new(deep_sum(&b, 1_000_000)).unwrap();
            let limits = Limits::default().with_memory(4 << 20);
            machine.run(&program, &limits, &arena).outcome.name()
        });
        assert_eq!(outcome, "limit", "{}", machine.name());
    }
}

#[test]
fn a_list_of_a_million_cells_is_built_read_back_and_dropped() {
    for machine in fast_machines() {
        let ok = on_small_stack(move || {
            let arena = Arena::new();
            let b = B(&arena);
            let t = b.app(upto_fn(&b), &[b.nil(), b.n(1_000_000)]);
            let program = Program::new(t).unwrap();
            let report = machine.run(&program, &Limits::default(), &arena);
            let Outcome::Value(list) = report.outcome else {
                return false;
            };
            // Walk the read-back list: 1, 2, …, 1_000_000, Nil.
            let mut cell = list;
            let mut expected = 1;
            while let orrery::Node::Con(tag, fields) = *cell.node() {
                match (tag, fields) {
                    ("Cons", [h, t]) => {
                        if !matches!(h.node(), orrery::Node::Int(n) if *n == expected) {
                            return false;
                        }
                        expected += 1;
                        cell = t;
                    }
                    ("Nil", []) => return expected == 1_000_001,
                    _ => return false,
                }
            }
            false
        });
        assert!(ok, "{}", machine.name());
    }
}

#[test]
fn ten_million_tail_calls_run_in_constant_space() {
    let arena = Arena::new();
    let b = B(&arena);
    let program = Program::new(count_down(&b, 10_000_000)).unwrap();
    #[cfg(feature = "cek")]
    {
        let mut cek = orrery::machines::cek::Cek::new();
        let report = cek.run(&program, &Limits::default(), &arena);
        assert_eq!(report.outcome, Outcome::Value(arena.int(0)));
        assert_eq!(report.counts.get(Rule::BetaRec), 10_000_001);
        assert!(cek.peak_bytes() < 4096, "cek peak {}", cek.peak_bytes());
    }
    #[cfg(feature = "env")]
    {
        let mut env = orrery::machines::env::Env::new();
        let report = env.run(&program, &Limits::default(), &arena);
        assert_eq!(report.outcome, Outcome::Value(arena.int(0)));
        assert_eq!(report.counts.get(Rule::BetaRec), 10_000_001);
        assert!(env.peak_bytes() < 4096, "env peak {}", env.peak_bytes());
    }
}

#[test]
fn a_growing_structure_hits_the_memory_limit() {
    let arena = Arena::new();
    let b = B(&arena);
    // upto with no end: builds a list forever.
    let t = b.app(upto_fn(&b), &[b.nil(), b.n(-1)]);
    let program = Program::new(t).unwrap();
    for machine in fast_machines() {
        let limits = Limits::default().with_memory(1 << 20);
        let report = machine.run(&program, &limits, &arena);
        assert_eq!(report.outcome.name(), "limit", "{}", machine.name());
        // Stopped soon after the limit, not at the end of the fuel.
        assert!(report.counts.total() < 1_000_000);
    }
}

/// A small deterministic generator of closed terms (xorshift64*, Vigna
/// 2016), driven by a proptest seed so failures shrink to a seed.
struct Gen<'a> {
    arena: &'a Arena,
    state: u64,
}

impl<'a> Gen<'a> {
    fn next(&mut self) -> u64 {
        self.state ^= self.state >> 12;
        self.state ^= self.state << 25;
        self.state ^= self.state >> 27;
        self.state.wrapping_mul(0x2545_f491_4f6c_dd1d)
    }

    fn below(&mut self, n: u64) -> u64 {
        self.next() % n
    }

    /// A term whose free indices are below `binders`, at most `fuel` deep.
    fn term(&mut self, binders: u32, fuel: u32) -> &'a Term<'a> {
        let a = self.arena;
        let leaf = fuel == 0 || self.below(5) == 0;
        if leaf {
            return match self.below(if binders > 0 { 8 } else { 4 }) {
                0 => a.int(self.below(5) as i64 - 2),
                1 => a.boolean(self.below(2) == 0),
                2 => a.string(["", "a", "b"][self.below(3) as usize]),
                3 => a.con("A", &[]),
                _ => a.var(self.below(u64::from(binders)) as u32),
            };
        }
        let f = fuel - 1;
        match self.below(16) {
            0 => a.lam(self.term(binders + 1, f)),
            1 => a.rec_lam(self.term(binders + 2, f)),
            2 | 3 => a.app(self.term(binders, f), self.term(binders, f)),
            // A redex more often than chance would make one.
            4 | 5 => a.app(a.lam(self.term(binders + 1, f)), self.term(binders, f)),
            // A recursive function that counts its argument down to zero.
            6 => {
                let n = a.var(0);
                let step = a.prim(Prim::Sub, &[n, a.int(1)]);
                let recurse = match self.below(3) {
                    0 => a.app(a.var(1), step),
                    1 => a.prim(Prim::Add, &[a.app(a.var(1), step), a.int(1)]),
                    _ => a.con("C", &[self.term(binders + 2, f), a.app(a.var(1), step)]),
                };
                let body = a.if_then_else(
                    a.prim(Prim::Le, &[n, a.int(0)]),
                    self.term(binders + 2, f),
                    recurse,
                );
                a.app(a.rec_lam(body), a.int(self.below(6) as i64))
            }
            7 => a.let_in(self.term(binders, f), self.term(binders + 1, f)),
            8 => a.if_then_else(
                self.term(binders, f),
                self.term(binders, f),
                self.term(binders, f),
            ),
            9 => {
                let op = [Prim::Lt, Prim::Eq, Prim::Ge][self.below(3) as usize];
                a.if_then_else(
                    a.prim(op, &[self.term(binders, f), self.term(binders, f)]),
                    self.term(binders, f),
                    self.term(binders, f),
                )
            }
            10 | 11 => {
                let op = Prim::ALL[self.below(Prim::ALL.len() as u64) as usize];
                let args: Vec<_> = (0..op.arity()).map(|_| self.term(binders, f)).collect();
                a.prim(op, &args)
            }
            12 | 13 => match self.below(2) {
                0 => a.con("B", &[self.term(binders, f)]),
                _ => a.con("C", &[self.term(binders, f), self.term(binders, f)]),
            },
            _ => {
                let scrutinee = self.term(binders, f);
                let mut arms = Vec::new();
                for (tag, arity) in [("A", 0), ("B", 1), ("C", 2)] {
                    if self.below(3) != 0 {
                        arms.push(Arm::new(a.tag(tag), arity, self.term(binders + arity, f)));
                    }
                }
                let default = (self.below(2) == 0).then(|| self.term(binders, f));
                a.case(scrutinee, &arms, default)
            }
        }
    }
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(3000))]

    /// Generated closed terms: every machine reports what the stepper does,
    /// with ample fuel and at a bound somewhere inside the run.
    #[test]
    fn generated_terms_agree(seed in proptest::prelude::any::<u64>(), cut in 0u64..1000) {
        let arena = Arena::new();
        let mut gen = Gen { arena: &arena, state: seed | 1 };
        let t = gen.term(0, 7);
        let whole = agree(&arena, t, &Limits::default().with_fuel(2_000));
        let total = whole.counts.total();
        if total > 0 {
            agree(&arena, t, &Limits::default().with_fuel(cut % total));
        }
    }
}

/// A CEK run paused whenever its fuel runs out and resumed with a little
/// more ends exactly as an uninterrupted run: same value, same counts.
#[cfg(feature = "cek")]
#[test]
fn paused_cek_runs_end_as_uninterrupted_ones() {
    use orrery::machines::cek::Cek;
    let arena = Arena::new();
    let b = B(&arena);
    let square = b.lam(b.op(Prim::Mul, b.v(0), b.v(0)));
    let programs = [
        b.app(tak_fn(&b), &[b.n(6), b.n(3), b.n(1)]),
        b.app(fib_fn(&b), &[b.n(8)]),
        b.app(ackermann_fn(&b), &[b.n(2), b.n(2)]),
        b.app(
            map_fn(&b),
            &[square, b.app(upto_fn(&b), &[b.nil(), b.n(5)])],
        ),
        b.app(tak_fn(&b), &[b.n(5), b.n(3)]),
        b.op(Prim::Add, b.app(fib_fn(&b), &[b.n(5)]), arena.boolean(true)),
    ];
    for t in programs {
        let program = Program::new(t).unwrap();
        let whole = Cek::new().run(&program, &Limits::default(), &arena);
        for slice in [1, 2, 3, 10] {
            let mut run = Cek::start(&program, &Limits::default().with_fuel(0));
            let mut resumes = 0;
            let report = loop {
                let report = run.resume(slice, &arena);
                if report.outcome != Outcome::OutOfFuel {
                    break report;
                }
                assert_eq!(report.counts.total(), slice * (resumes + 1));
                resumes += 1;
            };
            assert_eq!(report, whole, "slices of {slice}");
            assert_eq!(resumes, whole.counts.total().div_ceil(slice) - 1);
        }
    }
}

/// Programs a million nodes deep (not deep recursion: deep text) compile,
/// run, read back and drop without native recursion.
#[test]
fn million_node_deep_terms_run_on_a_small_stack() {
    for machine in fast_machines() {
        let results = on_small_stack(move || {
            let arena = Arena::new();
            let b = B(&arena);
            let n = 1_000_000;
            // 1 + (1 + (… + 0)): a million pending operands.
            let mut sum = b.n(0);
            for _ in 0..n {
                sum = b.op(Prim::Add, b.n(1), sum);
            }
            // let x = 0 in let x = x + 1 in …: a million nested binders.
            let mut lets = b.v(0);
            for _ in 0..n {
                lets = b.let_in(b.op(Prim::Add, b.v(0), b.n(1)), lets);
            }
            let lets = b.let_in(b.n(0), lets);
            // λ. λ. … λ. #(n-1): a closure nested a million deep, read back.
            let mut lams = b.v(n as u32 - 1);
            for _ in 0..n {
                lams = b.lam(lams);
            }
            let limits = Limits::default();
            let mut outcomes = Vec::new();
            let count = arena.int(n as i64);
            for (t, expected) in [(sum, count), (lets, count), (lams, lams)] {
                let program = Program::new(t).unwrap();
                let report = machine.run(&program, &limits, &arena);
                outcomes.push(report.outcome == Outcome::Value(expected));
            }
            outcomes
        });
        assert_eq!(results, vec![true, true, true], "{}", machine.name());
    }
}
