//! Checks of the kernel against published sources: textbook exercises,
//! benchmark facts and integer sequences. Each check names its source; every
//! evaluation runs on all enabled machines, which must agree (DESIGN §2).

mod common;

use common::{int_of, run_everywhere};
use orrery::{instantiate, parse_term, shift, subst, Arena, ErrorKind, Limits, Outcome, Rule};

const TAK: &str = "
let rec tak x y z =
  if y < x then tak (tak (x - 1) y z) (tak (y - 1) z x) (tak (z - 1) x y) else z in
";

const FIB: &str = "let rec fib n = if n < 2 then n else fib (n - 1) + fib (n - 2) in ";

const ACK: &str = "
let rec ack m n =
  if m == 0 then n + 1
  else if n == 0 then ack (m - 1) 1
  else ack (m - 1) (ack m (n - 1)) in
";

/// Counts the ways to place `n` queens (one per row, columns kept in a
/// constructor list) so that none attacks another.
const QUEENS: &str = "
let rec safe q d placed =
  case placed of {
    Nil => true;
    Cons(other, rest) => q != other && q != other + d && q != other - d && safe q (d + 1) rest
  } in
let rec queens n rows placed =
  if rows == 0 then 1
  else
    let rec columns c =
      if c > n then 0
      else (if safe c 1 placed then queens n (rows - 1) (Cons(c, placed)) else 0) + columns (c + 1) in
    columns 1 in
";

/// Run `source` everywhere and return its integer value and beta_rec count.
fn value_and_calls(source: &str) -> (i64, u64) {
    let arena = Arena::new();
    let report = run_everywhere(&arena, source, &Limits::default());
    match report.outcome {
        Outcome::Value(v) => match v.node() {
            orrery::Node::Int(n) => (*n, report.counts.get(Rule::BetaRec)),
            other => panic!("not an integer: {other:?}"),
        },
        other => panic!("{source} gave {other:?}"),
    }
}

#[test]
fn tak_18_12_6_makes_63609_calls() {
    // Gabriel, Performance and Evaluation of Lisp Systems (1985), §3.1:
    // (TAK 18 12 6) returns 7 after 63,609 calls to TAK.
    assert_eq!(value_and_calls(&format!("{TAK} tak 18 12 6")), (7, 63_609));
}

#[test]
fn naive_fib_20_and_its_calls() {
    // OEIS A000045 (Fibonacci numbers): F(20) = 6765.
    // OEIS A001595 (a(n) = a(n-1) + a(n-2) + 1, a(0) = a(1) = 1), the number
    // of calls the naive recursion makes: a(20) = 21,891.
    assert_eq!(value_and_calls(&format!("{FIB} fib 20")), (6765, 21_891));
}

#[test]
fn fib_values_follow_a000045() {
    // OEIS A000045: 0, 1, 1, 2, 3, 5, 8, 13, 21, 34, 55, 89, 144.
    let expected = [0, 1, 1, 2, 3, 5, 8, 13, 21, 34, 55, 89, 144];
    for (n, want) in expected.iter().enumerate() {
        assert_eq!(int_of(&format!("{FIB} fib {n}")), *want, "fib {n}");
    }
}

#[test]
fn ackermann_3_3_makes_2432_calls() {
    // OEIS A143796 (Ackermann A(3, n) = 2^(n+3) - 3): A(3,3) = 61.
    // OEIS A074877 (number of calls the recursive definition makes for
    // A(3, n)): 2,432 for n = 3.
    assert_eq!(value_and_calls(&format!("{ACK} ack 3 3")), (61, 2_432));
}

#[test]
fn ackermann_row_3_follows_a143796() {
    // OEIS A143796: A(3, n) = 5, 13, 29, 61, 125 for n = 0..4.
    for (n, want) in [5, 13, 29, 61, 125].iter().enumerate() {
        assert_eq!(int_of(&format!("{ACK} ack 3 {n}")), *want, "ack 3 {n}");
    }
}

#[test]
fn queens_counts_follow_a000170() {
    // OEIS A000170 (solutions of the n-queens problem): 1, 0, 0, 2, 10, 4, 40, 92.
    let expected = [1, 0, 0, 2, 10, 4, 40, 92];
    for (i, want) in expected.iter().enumerate() {
        let n = i + 1;
        assert_eq!(
            int_of(&format!("{QUEENS} queens {n} {n} Nil")),
            *want,
            "{n} queens"
        );
    }
}

const CHURCH: &str = "
let c0 = \\s z. z in
let c1 = \\s z. s z in
let scc = \\n s z. s (n s z) in
let plus = \\m n s z. m s (n s z) in
let times = \\m n. m (plus n) c0 in
let power = \\m n. n (times m) c1 in
let c2 = scc c1 in
let c3 = scc c2 in
let c4 = scc c3 in
let decode = \\n. n (\\k. k + 1) 0 in
";

#[test]
fn church_numerals_multiply_and_exponentiate() {
    // Pierce, Types and Programming Languages (2002), §5.2: Church numerals,
    // scc, plus, times = λm. λn. m (plus n) c0; power as in exercise 5.2.4
    // (λm. λn. n (times m) c1, from memory of the book's solution).
    assert_eq!(int_of(&format!("{CHURCH} decode (times c3 c4)")), 12);
    assert_eq!(int_of(&format!("{CHURCH} decode (power c2 c3)")), 8);
    assert_eq!(int_of(&format!("{CHURCH} decode (plus c2 c3)")), 5);
    assert_eq!(int_of(&format!("{CHURCH} decode c0")), 0);
}

#[test]
fn division_truncates_toward_zero() {
    // ISO/IEC 9899:1999 (C99) §6.5.5: the quotient is truncated toward zero
    // and (a/b)*b + a%b == a.
    for (a, b, q, r) in [
        (7, 2, 3, 1),
        (-7, 2, -3, -1),
        (7, -2, -3, 1),
        (-7, -2, 3, -1),
    ] {
        assert_eq!(int_of(&format!("{a} / {b}")), q, "{a} / {b}");
        assert_eq!(int_of(&format!("{a} % {b}")), r, "{a} % {b}");
        assert_eq!(int_of(&format!("({a} / {b}) * {b} + {a} % {b}")), a);
    }
}

#[test]
fn min_divided_by_minus_one_overflows() {
    // C99 §6.5.5 leaves a quotient that is not representable undefined; the
    // kernel reports integer_overflow (DESIGN §1: all arithmetic is checked).
    for source in [
        "-9223372036854775808 / -1",
        "-9223372036854775808 % -1",
        "9223372036854775807 + 1",
        "-(-9223372036854775808)",
    ] {
        let arena = Arena::new();
        let report = run_everywhere(&arena, source, &Limits::default());
        match report.outcome {
            Outcome::Error(e) => assert_eq!(e.kind(), ErrorKind::IntegerOverflow, "{source}"),
            other => panic!("{source} gave {other:?}"),
        }
    }
}

#[test]
fn nameless_forms_of_exercise_6_1_1() {
    // Pierce, TAPL (2002), §6.1, exercise 6.1.1 (solutions from memory):
    // c2 = λs.λz. s (s z) is λ.λ. 1 (1 0); plus = λm.λn.λs.λz. m s (n s z)
    // (§5.2) is λ.λ.λ.λ. 3 1 (2 1 0).
    let a = Arena::new();
    let c2 = parse_term(&a, "\\s z. s (s z)").unwrap();
    assert_eq!(c2, a.lam(a.lam(a.app(a.var(1), a.app(a.var(1), a.var(0))))));
    let plus = parse_term(&a, "\\m n s z. m s (n s z)").unwrap();
    let body = a.app(
        a.app(a.var(3), a.var(1)),
        a.app(a.app(a.var(2), a.var(1)), a.var(0)),
    );
    assert_eq!(plus, a.lam(a.lam(a.lam(a.lam(body)))));
}

#[test]
fn shifting_of_exercise_6_2_2() {
    // Pierce, TAPL (2002), §6.2, exercise 6.2.2 (solutions from memory):
    // ↑²(λ.λ. 1 (0 2)) = λ.λ. 1 (0 4); ↑²(λ. 0 1 (λ. 0 1 2)) = λ. 0 3 (λ. 0 1 4).
    let a = Arena::new();
    let t1 = a.lam(a.lam(a.app(a.var(1), a.app(a.var(0), a.var(2)))));
    let r1 = a.lam(a.lam(a.app(a.var(1), a.app(a.var(0), a.var(4)))));
    assert_eq!(shift(&a, t1, 2, 0).unwrap(), r1);
    let t2 = a.lam(a.app(
        a.app(a.var(0), a.var(1)),
        a.lam(a.app(a.app(a.var(0), a.var(1)), a.var(2))),
    ));
    let r2 = a.lam(a.app(
        a.app(a.var(0), a.var(3)),
        a.lam(a.app(a.app(a.var(0), a.var(1)), a.var(4))),
    ));
    assert_eq!(shift(&a, t2, 2, 0).unwrap(), r2);
    // A downward shift that would go below zero is refused.
    assert!(shift(&a, a.var(0), -1, 0).is_err());
}

#[test]
fn substitution_of_exercise_6_2_5() {
    // Pierce, TAPL (2002), §6.2, exercise 6.2.5, in the context a, b (so b is
    // 0 and a is 1); solutions from memory.
    let a = Arena::new();
    // [b ↦ a](b (λx.λy.b)) = [0 ↦ 1](0 (λ.λ.2)) = 1 (λ.λ.3)
    let t = a.app(a.var(0), a.lam(a.lam(a.var(2))));
    assert_eq!(
        subst(&a, t, 0, a.var(1)).unwrap(),
        a.app(a.var(1), a.lam(a.lam(a.var(3))))
    );
    // [b ↦ a (λz.a)](b (λx.b)) = (1 (λ.2)) (λ. (2 (λ.3)))
    let t = a.app(a.var(0), a.lam(a.var(1)));
    let s = a.app(a.var(1), a.lam(a.var(2)));
    let want = a.app(
        a.app(a.var(1), a.lam(a.var(2))),
        a.lam(a.app(a.var(2), a.lam(a.var(3)))),
    );
    assert_eq!(subst(&a, t, 0, s).unwrap(), want);
    // [b ↦ a](λb. b a) = [0 ↦ 1](λ. 0 2) = λ. 0 2
    let t = a.lam(a.app(a.var(0), a.var(2)));
    assert_eq!(subst(&a, t, 0, a.var(1)).unwrap(), t);
    // [b ↦ a](λa. b a) = [0 ↦ 1](λ. 1 0) = λ. 2 0
    let t = a.lam(a.app(a.var(1), a.var(0)));
    assert_eq!(
        subst(&a, t, 0, a.var(1)).unwrap(),
        a.lam(a.app(a.var(2), a.var(0)))
    );
}

#[test]
fn beta_as_shift_substitute_shift() {
    // Pierce, TAPL (2002), §6.3: (λ.t) v → ↑⁻¹([0 ↦ ↑¹ v] t). Compare the
    // combined `instantiate` with the three textbook operations.
    let a = Arena::new();
    let body = a.app(a.app(a.var(1), a.var(0)), a.lam(a.app(a.var(1), a.var(3))));
    for v in [a.var(0), a.lam(a.var(1)), a.int(5)] {
        let v_up = shift(&a, v, 1, 0).unwrap();
        let textbook = shift(&a, subst(&a, body, 0, v_up).unwrap(), -1, 0).unwrap();
        assert_eq!(instantiate(&a, body, &[v]).unwrap(), textbook);
    }
}
