//! The agreement promise of SEMANTICS §3 on programs no one wrote as text:
//! closed programs from two generators (divergent, erroring, recursive, with
//! data and case, deeply nested) run on every machine of the table under
//! many fuel bounds — 0, 1, random ones, one short of the total, the total,
//! and unbounded — and programs built by index (closures read back, lists,
//! every error kind, every fuel bound, pauses). Every run goes through the
//! harness, which compares each machine with the reference stepper. Failures
//! proptest finds are minimised and saved in
//! `tests/suite/agreement.proptest-regressions`, replayed on every run; each
//! also becomes a corpus program with a comment on its cause.

use orrery::{Arena, Arm, ErrorKind, Limits, Outcome, Prim, Program, Report, Rule, Term};
use proptest::prelude::*;

use crate::common::gen::{build, program};
use crate::common::harness::{reference, Harness};
use crate::common::marks::marked;

/// Fuel for the reference run: generated programs that have not ended by
/// then are treated as divergent (they run out of fuel everywhere).
const FUEL: u64 = 20_000;

/// Memory for every run: small, so memory bombs stop quickly.
const MEMORY: usize = 64 << 20;

/// Run `program` with `fuel` on every machine through the harness; the
/// reference's report, if no machine failed.
fn agree_at(h: &mut Harness, program: &Program, fuel: u64) -> Option<Report> {
    let limits = Limits::default().with_fuel(fuel).with_memory(MEMORY);
    let runs = h.run("the generated program", program, &limits);
    runs.reference().cloned().filter(|_| h.is_clean())
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 10_000, ..ProptestConfig::default() })]

    #[test]
    fn machines_agree_under_every_fuel_bound(g in program(), cut in any::<u64>()) {
        let arena = Arena::new();
        // Every node has a span and most functions a name, so the harness
        // compares every machine's location and backtrace too.
        let program = Program::new(marked(&arena, build(&arena, &g, 0))).expect("generated programs are valid");
        let mut h = Harness::new();
        let Some(full) = agree_at(&mut h, &program, FUEL) else {
            return h.into_result().map_err(TestCaseError::fail);
        };
        if matches!(full.outcome, Outcome::Limit(_)) {
            return Ok(()); // limits may trip anywhere: reported, not compared
        }
        let total = full.counts.total();
        let mut bounds = vec![0, 1, total.saturating_sub(1), total];
        if !matches!(full.outcome, Outcome::OutOfFuel) {
            // The run ends by itself: more fuel, even unbounded, changes nothing.
            bounds.extend([total + 1, u64::MAX]);
        }
        if total > 0 {
            bounds.push(cut % total);
        }
        for fuel in bounds {
            let Some(report) = agree_at(&mut h, &program, fuel) else {
                break;
            };
            if matches!(report.outcome, Outcome::Limit(_)) {
                continue;
            }
            if fuel < total || (fuel == total && matches!(full.outcome, Outcome::OutOfFuel)) {
                // Fewer units than the full run used: stop at exactly the bound.
                prop_assert!(matches!(report.outcome, Outcome::OutOfFuel), "fuel {}: {:?}", fuel, report.outcome);
                prop_assert_eq!(report.counts.total(), fuel);
            } else if !matches!(full.outcome, Outcome::OutOfFuel) {
                // Enough fuel: the same end as the reference run.
                prop_assert!(orrery::disagreement(&full, &report).is_none(), "fuel {}: {:?} vs {:?}", fuel, report, full);
            }
        }
        h.into_result().map_err(TestCaseError::fail)?;
    }
}

/// The generator must keep producing every kind of program the harness is
/// for; a generator that drifted to trivial terms would make it vacuous.
#[test]
fn generated_programs_cover_every_outcome() {
    use proptest::strategy::ValueTree;
    use proptest::test_runner::TestRunner;
    let kind = reference().expect("a machine in the build");
    let mut runner = TestRunner::deterministic();
    let (mut values, mut errors, mut diverging, mut long) = (0, 0, 0, 0);
    let samples = 2_000;
    for _ in 0..samples {
        let g = program()
            .new_tree(&mut runner)
            .expect("a generated tree")
            .current();
        let arena = Arena::new();
        let program = Program::new(build(&arena, &g, 0)).expect("valid");
        let limits = Limits::default().with_fuel(FUEL).with_memory(MEMORY);
        let report = kind.run(&program, &limits);
        match report.outcome {
            Outcome::Value(_) => values += 1,
            Outcome::Error(_) => errors += 1,
            Outcome::OutOfFuel => diverging += 1,
            Outcome::Limit(_) => {}
            Outcome::Fault(f) => panic!("{f}"),
            Outcome::Suspended(call) => panic!("no suspending host here: {call}"),
        }
        if report.counts.total() >= 100 {
            long += 1;
        }
    }
    let at_least = samples / 50; // 2% of the samples each
    assert!(
        values >= at_least && errors >= at_least && diverging >= at_least && long >= at_least,
        "values {values}, errors {errors}, diverging {diverging}, 100+ contractions {long}"
    );
}

// ----- programs built by index ----------------------------------------------

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

/// Run `term` everywhere with the default limits; every machine must end
/// with the value `expected` having made `counts` (rule, number).
fn ends_with_value<'a>(
    h: &mut Harness,
    name: &str,
    term: &'a Term<'a>,
    expected: &'a Term<'a>,
    counts: &[(Rule, u64)],
) {
    let program = Program::new(term).expect("a valid program");
    let runs = h.run(name, &program, &Limits::default());
    h.expect(
        &runs,
        &format!("the value {}", orrery::print(expected)),
        |r| r.outcome == Outcome::Value(orrery::Value::from_term(expected).unwrap()),
    );
    for &(rule, n) in counts {
        h.expect_count(&runs, rule, n);
    }
}

#[test]
fn closures_read_back_as_the_steppers_terms() {
    let arena = Arena::new();
    let b = B(&arena);
    let mut h = Harness::new();
    // tak 5 3: a closure λz. … capturing x = 5, y = 3 and tak itself:
    // λz. body with y := 3, x := 5 and tak := the recursive function.
    let partial = b.app(tak_fn(&b), &[b.n(5), b.n(3)]);
    let source = tak_fn(&b);
    let orrery::Node::RecLam(inner) = *source.node() else {
        unreachable!("tak is a recursive function")
    };
    let orrery::Node::Lam(inner) = *inner.node() else {
        unreachable!("tak has a second parameter")
    };
    let expected = orrery::toolkit::instantiate(&arena, inner, &[b.n(3), b.n(5), source]).unwrap();
    ends_with_value(&mut h, "tak 5 3", partial, expected, &[]);

    // let a = "s" in let l = Cons(1, Nil) in
    //   (λx. λy. Quad(x, y, l, a)) (λz. a ++ z)
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
    let captured = b.lam(b.op(Prim::Concat, arena.string("s"), b.v(0)));
    let expected = b.lam(b.con(
        "Quad",
        &[captured, b.v(0), b.cons(b.n(1), b.nil()), arena.string("s")],
    ));
    let counts = [(Rule::Let, 2), (Rule::Beta, 1)];
    ends_with_value(&mut h, "a closure over a closure", t, expected, &counts);

    // A recursive closure under a binder: (λk. μf. λn. f k) 7 gives the
    // recursive function with 7 substituted.
    let t = b.app(b.lam(b.rec(b.lam(b.app(b.v(2), &[b.v(3)])))), &[b.n(7)]);
    let expected = b.rec(b.lam(b.app(b.v(2), &[b.n(7)])));
    ends_with_value(&mut h, "a recursive closure", t, expected, &[]);
    h.finish();
}

#[test]
fn lists_and_case() {
    let arena = Arena::new();
    let b = B(&arena);
    let mut h = Harness::new();
    let list = |n| b.app(upto_fn(&b), &[b.nil(), b.n(n)]);
    // sum (upto 100) = 5050.
    let t = b.app(sum_fn(&b), &[list(100)]);
    ends_with_value(&mut h, "sum", t, b.n(5050), &[(Rule::Case, 101)]);
    // map (λx. x * x) (upto 4) = [1, 4, 9, 16], read back as a list.
    let square = b.lam(b.op(Prim::Mul, b.v(0), b.v(0)));
    let expected = [16, 9, 4, 1]
        .into_iter()
        .fold(b.nil(), |tail, n| b.cons(b.n(n), tail));
    let t = b.app(map_fn(&b), &[square, list(4)]);
    ends_with_value(&mut h, "map", t, expected, &[]);
    // A default arm matches anything; arms match tag and arity.
    let t = arena.case(
        b.con("Some", &[b.n(4)]),
        &[Arm::new("None", 0, b.n(0))],
        Some(b.n(9)),
    );
    ends_with_value(&mut h, "a default arm", t, b.n(9), &[]);
    let t = arena.case(b.n(3), &[], Some(b.n(1)));
    ends_with_value(&mut h, "only a default arm", t, b.n(1), &[]);
    // A constructor with a closure field, and fields evaluated left to right.
    let t = b.con(
        "Pair",
        &[
            b.op(Prim::Add, b.n(1), b.n(2)),
            b.let_in(b.n(5), b.lam(b.op(Prim::Mul, b.v(0), b.v(1)))),
        ],
    );
    let expected = b.con("Pair", &[b.n(3), b.lam(b.op(Prim::Mul, b.v(0), b.n(5)))]);
    ends_with_value(&mut h, "a closure in a field", t, expected, &[]);
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
    let expected = b.con(
        "R",
        &[
            arena.string("héllo, wörld"),
            b.n(12),
            arena.boolean(true),
            arena.string("-12"),
        ],
    );
    ends_with_value(&mut h, "strings", t, expected, &[]);
    h.finish();
}

#[test]
fn every_error_kind_agrees_at_every_fuel_bound() {
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
    let mut h = Harness::new();
    for (k, (t, kind, rule)) in cases.into_iter().enumerate() {
        // Errors deep inside a recursion too: (λx. t) 0 under a let.
        let wrapped = b.let_in(b.n(0), b.app(b.lam(t), &[b.v(0)]));
        for (t, name) in [
            (t, format!("error {k}")),
            (wrapped, format!("error {k}, wrapped")),
        ] {
            let program = Program::new(t).expect("a valid program");
            // At every bound below the total the failing attempt is not made:
            // out of fuel, not an error.
            let runs = h.every_bound(&name, &program, &Limits::default(), |_, _, _| {});
            h.expect_ending(&runs, &format!("error {}", kind.name()));
            h.expect(&runs, &format!("at least one {rule}"), |r| {
                r.counts.get(rule) >= 1
            });
        }
    }
    h.finish();
}

#[test]
fn out_of_fuel_at_exactly_every_bound() {
    let arena = Arena::new();
    let b = B(&arena);
    let square = b.lam(b.op(Prim::Mul, b.v(0), b.v(0)));
    let programs = [
        ("tak 4 2 1", b.app(tak_fn(&b), &[b.n(4), b.n(2), b.n(1)])),
        ("fib 6", b.app(fib_fn(&b), &[b.n(6)])),
        ("ack 1 2", b.app(ackermann_fn(&b), &[b.n(1), b.n(2)])),
        (
            "map square (upto 3)",
            b.app(
                map_fn(&b),
                &[square, b.app(upto_fn(&b), &[b.nil(), b.n(3)])],
            ),
        ),
        (
            "sum (upto 5)",
            b.app(sum_fn(&b), &[b.app(upto_fn(&b), &[b.nil(), b.n(5)])]),
        ),
        (
            "1 / (1 - 1)",
            b.let_in(
                b.n(1),
                b.op(Prim::Div, b.v(0), b.op(Prim::Sub, b.v(0), b.v(0))),
            ),
        ),
    ];
    let mut h = Harness::new();
    for (name, t) in programs {
        let program = Program::new(t).expect("a valid program");
        let whole = h.every_bound(name, &program, &Limits::default(), |_, _, _| {});
        h.expect(&whole, "at least 3 contractions", |r| r.counts.total() >= 3);
    }
    h.finish();
}

/// Runs paused whenever their fuel runs out and resumed with a little more
/// end exactly as uninterrupted runs: same value, same counts.
#[test]
fn paused_runs_end_as_uninterrupted_ones() {
    let arena = Arena::new();
    let b = B(&arena);
    let square = b.lam(b.op(Prim::Mul, b.v(0), b.v(0)));
    let programs = [
        ("tak 6 3 1", b.app(tak_fn(&b), &[b.n(6), b.n(3), b.n(1)])),
        ("fib 8", b.app(fib_fn(&b), &[b.n(8)])),
        ("ack 2 2", b.app(ackermann_fn(&b), &[b.n(2), b.n(2)])),
        (
            "map square (upto 5)",
            b.app(
                map_fn(&b),
                &[square, b.app(upto_fn(&b), &[b.nil(), b.n(5)])],
            ),
        ),
        ("tak 5 3", b.app(tak_fn(&b), &[b.n(5), b.n(3)])),
        (
            "fib 5 + true",
            b.op(Prim::Add, b.app(fib_fn(&b), &[b.n(5)]), arena.boolean(true)),
        ),
    ];
    let mut h = Harness::new();
    for (name, t) in programs {
        let program = Program::new(t).expect("a valid program");
        let whole = h.run(name, &program, &Limits::default());
        for slice in [1, 2, 3, 10] {
            h.pauses(&whole, &program, slice);
        }
    }
    h.finish();
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

proptest! {
    #![proptest_config(ProptestConfig::with_cases(3000))]

    /// Terms of the second generator: every machine reports what the
    /// stepper does, with ample fuel and at a bound somewhere inside the run.
    #[test]
    fn generated_terms_agree(seed in any::<u64>(), cut in 0u64..1000) {
        let arena = Arena::new();
        let mut gen = Gen { arena: &arena, state: seed | 1 };
        let program = Program::new(gen.term(0, 7)).expect("closed by construction");
        let mut h = Harness::new();
        let limits = Limits::default().with_fuel(2_000);
        let whole = h.run("the generated term", &program, &limits);
        let total = whole.reference().map_or(0, |r| r.counts.total());
        if total > 0 {
            h.run("the generated term", &program, &limits.with_fuel(cut % total));
        }
        h.into_result().map_err(TestCaseError::fail)?;
    }
}

/// The harness itself: it must find what it is for, or every runner built
/// on it would pass vacuously.
#[test]
fn the_harness_finds_disagreements_broken_limits_and_unmet_expectations() {
    use crate::common::harness::{same, within_limits};
    use orrery::{Counts, EvalError, Fault};
    let arena = Arena::new();
    let report = |outcome, counts: [u64; 6]| Report {
        outcome,
        counts: Counts::from_array(counts),
        location: None,
    };
    let seven = report(
        Outcome::Value(orrery::Value::from_term(arena.int(7)).unwrap()),
        [1, 0, 0, 0, 0, 0],
    );
    let eight = report(
        Outcome::Value(orrery::Value::from_term(arena.int(8)).unwrap()),
        [1, 0, 0, 0, 0, 0],
    );
    let more = report(
        Outcome::Value(orrery::Value::from_term(arena.int(7)).unwrap()),
        [2, 0, 0, 0, 0, 0],
    );
    let error = |message: &str| {
        report(
            Outcome::Error(EvalError::new(ErrorKind::DivisionByZero, message)),
            [0, 0, 0, 0, 1, 0],
        )
    };
    assert!(same(&seven, &seven).is_ok());
    assert!(same(&seven, &eight).is_err());
    assert!(same(&seven, &more).is_err());
    assert!(same(&error("one"), &error("another")).is_err());
    let fault = report(Outcome::Fault(Fault::new("broken")), [0; 6]);
    assert!(same(&fault, &fault).is_err());
    // Reports a run under these limits cannot give.
    let limits = Limits::default().with_fuel(1).with_memory(100);
    assert!(within_limits(&seven, &limits, 100).is_ok());
    assert!(
        within_limits(&more, &limits, 0).is_err(),
        "more fuel than given"
    );
    assert!(
        within_limits(&seven, &limits, 101).is_err(),
        "more memory than allowed"
    );
    let cancelled = report(Outcome::Limit(orrery::LimitError::cancelled()), [0; 6]);
    assert!(within_limits(&cancelled, &limits, 0).is_err(), "no handle");
    // Unmet expectations are collected, and reported together.
    let program = Program::new(arena.prim(Prim::Add, &[arena.int(3), arena.int(4)])).unwrap();
    let mut h = Harness::new();
    let runs = h.run("3 + 4", &program, &Limits::default());
    assert!(h.is_clean());
    h.expect_ending(&runs, "value 8");
    h.expect_count(&runs, Rule::Prim, 2);
    let all = h
        .into_result()
        .expect_err("two unmet expectations per machine");
    let machines = orrery::MachineKind::enabled().len();
    assert!(
        all.starts_with(&format!("{} failures", 2 * machines)),
        "{all}"
    );
}
