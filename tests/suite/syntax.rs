//! Tests of the text syntax (SEMANTICS §5): desugarings, precedence, η-expansion,
//! error positions, nesting 200,000 deep on small stacks, printing of shared
//! terms, the nameless forms of Pierce's *TAPL* §6.1, and property tests that
//! printing then parsing gives back the same de Bruijn term.

use orrery::toolkit::terms_equal;
use orrery::{
    parse, parse_bytes, parse_term, print, print_limited, validate, Arena, Arm, Node, Prim,
    SyntaxError, Term, PRINT_LIMIT,
};
use proptest::prelude::*;

use crate::common::on_small_stack;

// ----- helpers -----------------------------------------------------------

/// Parse `source` and compare with the term `build` makes.
#[track_caller]
fn same<F>(source: &str, build: F)
where
    F: for<'a> FnOnce(&'a Arena) -> &'a Term<'a>,
{
    let arena = Arena::new();
    let parsed = parse_term(&arena, source).unwrap_or_else(|e| panic!("{source:?}: {e}"));
    let expected = build(&arena);
    assert!(
        terms_equal(parsed, expected),
        "{source:?} parsed as\n  {}\nexpected\n  {}",
        print(parsed),
        print(expected)
    );
}

/// Parse `a` and `b` and check they are the same term.
#[track_caller]
fn same_as(a: &str, b: &str) {
    let arena = Arena::new();
    let x = parse_term(&arena, a).unwrap_or_else(|e| panic!("{a:?}: {e}"));
    let y = parse_term(&arena, b).unwrap_or_else(|e| panic!("{b:?}: {e}"));
    assert!(terms_equal(x, y), "{a:?} and {b:?} differ");
}

/// The error parsing `source` gives.
#[track_caller]
fn error(source: &str) -> SyntaxError {
    let arena = Arena::new();
    match parse(&arena, source) {
        Ok(p) => panic!("{source:?} parsed, as {}", print(p.to_term(&Arena::new()))),
        Err(e) => e,
    }
}

/// Check the error's line, column and a fragment of its message.
#[track_caller]
fn fails_at(source: &str, line: u32, column: u32, fragment: &str) {
    let e = error(source);
    assert_eq!(
        (e.line, e.column),
        (line, column),
        "{source:?}: wrong place for {e}"
    );
    assert!(
        e.message.contains(fragment),
        "{source:?}: message {:?} lacks {fragment:?}",
        e.message
    );
}

/// Print `term` in full, parse it back and check it is the same term.
#[track_caller]
fn round_trip(term: &Term<'_>) -> String {
    let printed = print_limited(term, usize::MAX);
    assert!(!printed.truncated);
    let arena = Arena::new();
    let back = parse_term(&arena, &printed.text).unwrap_or_else(|e| {
        let start = printed.text.len().min(300);
        panic!("reparse failed: {e}\n{}", &printed.text[..start])
    });
    assert!(
        terms_equal(term, back),
        "round trip changed {}",
        printed.text
    );
    printed.text
}

fn add<'a>(a: &'a Arena, x: &'a Term<'a>, y: &'a Term<'a>) -> &'a Term<'a> {
    a.prim(Prim::Add, &[x, y])
}

// ----- desugarings -------------------------------------------------------

#[test]
fn and_or_not_are_conditionals() {
    same("\\a b. a && b", |a| {
        a.lam(a.lam(a.if_then_else(a.var(1), a.var(0), a.boolean(false))))
    });
    same("\\a b. a || b", |a| {
        a.lam(a.lam(a.if_then_else(a.var(1), a.boolean(true), a.var(0))))
    });
    same("\\a. not a", |a| {
        a.lam(a.if_then_else(a.var(0), a.boolean(false), a.boolean(true)))
    });
}

#[test]
fn minus_signs() {
    same("-7", |a| a.int(-7));
    same("-9223372036854775808", |a| a.int(i64::MIN));
    same("9223372036854775807", |a| a.int(i64::MAX));
    // Not written against the digits: negation.
    same("- 7", |a| a.prim(Prim::Neg, &[a.int(7)]));
    same("-(7)", |a| a.prim(Prim::Neg, &[a.int(7)]));
    same("\\x. -x", |a| a.lam(a.prim(Prim::Neg, &[a.var(0)])));
    same("\\x. x - -7", |a| {
        a.lam(a.prim(Prim::Sub, &[a.var(0), a.int(-7)]))
    });
    same("\\x. x-7", |a| {
        a.lam(a.prim(Prim::Sub, &[a.var(0), a.int(7)]))
    });
    same("--7", |a| a.prim(Prim::Neg, &[a.int(-7)]));
    same("-2 * 3", |a| a.prim(Prim::Mul, &[a.int(-2), a.int(3)]));
    same("- 2 * 3", |a| {
        a.prim(Prim::Mul, &[a.prim(Prim::Neg, &[a.int(2)]), a.int(3)])
    });
    same("2 * -3", |a| a.prim(Prim::Mul, &[a.int(2), a.int(-3)]));
    same("0007", |a| a.int(7));
}

#[test]
fn let_forms() {
    same("let x = 5 in x", |a| a.let_in(a.int(5), a.var(0)));
    same("let f x y = x in f", |a| {
        a.let_in(a.lam(a.lam(a.var(1))), a.var(0))
    });
    // f is not visible in its own definition without `rec`.
    fails_at("let f x = f in 1", 1, 11, "unbound name `f`");
    same("let rec f x y = f x y in f", |a| {
        let call = a.app(a.app(a.var(2), a.var(1)), a.var(0));
        a.let_in(a.rec_lam(a.lam(call)), a.var(0))
    });
    same("let rec f n = f n in 0", |a| {
        a.let_in(a.rec_lam(a.app(a.var(1), a.var(0))), a.int(0))
    });
    same("let _ = 1 in 2", |a| a.let_in(a.int(1), a.int(2)));
}

#[test]
fn lambda_and_rec_forms() {
    same("\\x y. x", |a| a.lam(a.lam(a.var(1))));
    same("λx y. y", |a| a.lam(a.lam(a.var(0))));
    same("\\x x. x", |a| a.lam(a.lam(a.var(0))));
    same("\\_ x. x", |a| a.lam(a.lam(a.var(0))));
    same("\\x _. x", |a| a.lam(a.lam(a.var(1))));
    same("rec f x. x", |a| a.rec_lam(a.var(0)));
    same("rec f x. f", |a| a.rec_lam(a.var(1)));
    same("rec f x y. f x y", |a| {
        a.rec_lam(a.lam(a.app(a.app(a.var(2), a.var(1)), a.var(0))))
    });
}

#[test]
fn conditionals_and_cases() {
    same("if true then 1 else 2", |a| {
        a.if_then_else(a.boolean(true), a.int(1), a.int(2))
    });
    same("case Cons(1, Nil) of { Nil => 0; Cons(h, t) => h; }", |a| {
        let list = a.con("Cons", &[a.int(1), a.con("Nil", &[])]);
        a.case(
            list,
            &[Arm::new("Nil", 0, a.int(0)), Arm::new("Cons", 2, a.var(1))],
            None,
        )
    });
    same("case Cons(1, Nil) of { Cons(_, t) => t; _ => Nil }", |a| {
        let nil = a.con("Nil", &[]);
        a.case(
            a.con("Cons", &[a.int(1), nil]),
            &[Arm::new("Cons", 2, a.var(0))],
            Some(nil),
        )
    });
    same("case 1 of {}", |a| a.case(a.int(1), &[], None));
    same("case 1 of { _ => 2 }", |a| {
        a.case(a.int(1), &[], Some(a.int(2)))
    });
    same("case 1 of { Unit() => 2 }", |a| {
        a.case(a.int(1), &[Arm::new("Unit", 0, a.int(2))], None)
    });
    // A case is closed by its brace, so it can be applied.
    same("case 1 of { _ => \\x. x } 5", |a| {
        a.app(a.case(a.int(1), &[], Some(a.lam(a.var(0)))), a.int(5))
    });
}

#[test]
fn constructors() {
    same_as("Foo()", "Foo");
    same("Foo (1)", |a| a.con("Foo", &[a.int(1)]));
    same("(Foo) 1", |a| a.app(a.con("Foo", &[]), a.int(1)));
    same("Foo() 1", |a| a.app(a.con("Foo", &[]), a.int(1)));
    same("Pair(1, Pair(2, 3))", |a| {
        a.con("Pair", &[a.int(1), a.con("Pair", &[a.int(2), a.int(3)])])
    });
    same("Box(\\x. x, if true then 1 else 2)", |a| {
        a.con(
            "Box",
            &[
                a.lam(a.var(0)),
                a.if_then_else(a.boolean(true), a.int(1), a.int(2)),
            ],
        )
    });
}

#[test]
fn literals_and_comments() {
    same(r#""a\n\t\r\\\"\u{1F600}\u{e9}""#, |a| {
        a.string("a\n\t\r\\\"😀é")
    });
    same("\"two\nlines\"", |a| a.string("two\nlines"));
    same("\"\"", |a| a.string(""));
    same("\"#not a comment\"", |a| a.string("#not a comment"));
    same("1 # one\n + 2 # two", |a| add(a, a.int(1), a.int(2)));
    same("true", |a| a.boolean(true));
    same("false", |a| a.boolean(false));
    same("\\x'. x'", |a| a.lam(a.var(0)));
}

// ----- precedence and associativity --------------------------------------

#[test]
fn arithmetic_precedence() {
    same("1 + 2 * 3", |a| {
        add(a, a.int(1), a.prim(Prim::Mul, &[a.int(2), a.int(3)]))
    });
    same("1 * 2 + 3", |a| {
        add(a, a.prim(Prim::Mul, &[a.int(1), a.int(2)]), a.int(3))
    });
    same("1 - 2 - 3", |a| {
        a.prim(
            Prim::Sub,
            &[a.prim(Prim::Sub, &[a.int(1), a.int(2)]), a.int(3)],
        )
    });
    same("8 / 4 / 2", |a| {
        a.prim(
            Prim::Div,
            &[a.prim(Prim::Div, &[a.int(8), a.int(4)]), a.int(2)],
        )
    });
    same("7 % 3 * 2", |a| {
        a.prim(
            Prim::Mul,
            &[a.prim(Prim::Rem, &[a.int(7), a.int(3)]), a.int(2)],
        )
    });
    same("(1 + 2) * 3", |a| {
        a.prim(Prim::Mul, &[add(a, a.int(1), a.int(2)), a.int(3)])
    });
}

#[test]
fn string_and_comparison_precedence() {
    same(r#""a" ++ "b" ++ "c""#, |a| {
        let bc = a.prim(Prim::Concat, &[a.string("b"), a.string("c")]);
        a.prim(Prim::Concat, &[a.string("a"), bc])
    });
    same(r#""a" ++ "b" == "ab""#, |a| {
        let ab = a.prim(Prim::Concat, &[a.string("a"), a.string("b")]);
        a.prim(Prim::Eq, &[ab, a.string("ab")])
    });
    same("1 + 2 == 3", |a| {
        a.prim(Prim::Eq, &[add(a, a.int(1), a.int(2)), a.int(3)])
    });
    same("1 + 2 <= 3 * 4", |a| {
        a.prim(
            Prim::Le,
            &[
                add(a, a.int(1), a.int(2)),
                a.prim(Prim::Mul, &[a.int(3), a.int(4)]),
            ],
        )
    });
    same("(1 < 2) == true", |a| {
        a.prim(
            Prim::Eq,
            &[a.prim(Prim::Lt, &[a.int(1), a.int(2)]), a.boolean(true)],
        )
    });
    fails_at("1 < 2 < 3", 1, 7, "comparisons do not chain");
    fails_at("1 < 2 == true", 1, 7, "comparisons do not chain");
}

#[test]
fn boolean_precedence() {
    // || is loosest: a || (b && c).
    same("true || false && true", |a| {
        let and = a.if_then_else(a.boolean(false), a.boolean(true), a.boolean(false));
        a.if_then_else(a.boolean(true), a.boolean(true), and)
    });
    same("true && false || true", |a| {
        let and = a.if_then_else(a.boolean(true), a.boolean(false), a.boolean(false));
        a.if_then_else(and, a.boolean(true), a.boolean(true))
    });
    // Right-associative: a && (b && c).
    same_as("true && false && true", "true && (false && true)");
    same_as("true || false || true", "true || (false || true)");
    // not binds tighter than comparison.
    same("not true == false", |a| {
        let not = a.if_then_else(a.boolean(true), a.boolean(false), a.boolean(true));
        a.prim(Prim::Eq, &[not, a.boolean(false)])
    });
    same_as("1 == 1 && 2 == 2", "(1 == 1) && (2 == 2)");
}

#[test]
fn application_and_open_forms() {
    same("\\f x y. f x y", |a| {
        a.lam(a.lam(a.lam(a.app(a.app(a.var(2), a.var(1)), a.var(0)))))
    });
    same("\\f x. - f x", |a| {
        a.lam(a.lam(a.prim(Prim::Neg, &[a.app(a.var(1), a.var(0))])))
    });
    same("\\f x. f x + f x", |a| {
        let fx = a.app(a.var(1), a.var(0));
        a.lam(a.lam(add(a, fx, fx)))
    });
    same("\\f. f \\x. x", |a| a.lam(a.app(a.var(0), a.lam(a.var(0)))));
    same("\\f. f \\x. x 1", |a| {
        a.lam(a.app(a.var(0), a.lam(a.app(a.var(0), a.int(1)))))
    });
    same("1 + if true then 2 else 3 * 4", |a| {
        let mul = a.prim(Prim::Mul, &[a.int(3), a.int(4)]);
        add(a, a.int(1), a.if_then_else(a.boolean(true), a.int(2), mul))
    });
    same("\\f. f let y = 1 in y", |a| {
        a.lam(a.app(a.var(0), a.let_in(a.int(1), a.var(0))))
    });
    same("if \\x. x then 1 else 2", |a| {
        a.if_then_else(a.lam(a.var(0)), a.int(1), a.int(2))
    });
    same("(\\x. x) 1 + 2", |a| {
        add(a, a.app(a.lam(a.var(0)), a.int(1)), a.int(2))
    });
    same("\\f. f (rec g x. g x) 3", |a| {
        let g = a.rec_lam(a.app(a.var(1), a.var(0)));
        a.lam(a.app(a.app(a.var(0), g), a.int(3)))
    });
}

// ----- built-in functions and η-expansion --------------------------------

#[test]
fn named_functions() {
    same(r#"length "abc""#, |a| {
        a.prim(Prim::Length, &[a.string("abc")])
    });
    same("decimal 12", |a| a.prim(Prim::Decimal, &[a.int(12)]));
    same(r#"length "a" "b""#, |a| {
        a.app(a.prim(Prim::Length, &[a.string("a")]), a.string("b"))
    });
    same(r#"decimal 1 ++ "x""#, |a| {
        a.prim(
            Prim::Concat,
            &[a.prim(Prim::Decimal, &[a.int(1)]), a.string("x")],
        )
    });
    same(r#"- length "ab""#, |a| {
        a.prim(Prim::Neg, &[a.prim(Prim::Length, &[a.string("ab")])])
    });
    same(r#"length ("a" ++ "b")"#, |a| {
        let ab = a.prim(Prim::Concat, &[a.string("a"), a.string("b")]);
        a.prim(Prim::Length, &[ab])
    });
    // A local binding shadows a built-in.
    same("\\length. length 1", |a| a.lam(a.app(a.var(0), a.int(1))));
    same("let decimal = 3 in decimal", |a| {
        a.let_in(a.int(3), a.var(0))
    });
}

#[test]
fn eta_expansion() {
    same("length", |a| a.lam(a.prim(Prim::Length, &[a.var(0)])));
    same("(\\f. f 1) decimal", |a| {
        a.app(
            a.lam(a.app(a.var(0), a.int(1))),
            a.lam(a.prim(Prim::Decimal, &[a.var(0)])),
        )
    });
    same("\\g xs. g length xs", |a| {
        let eta = a.lam(a.prim(Prim::Length, &[a.var(0)]));
        a.lam(a.lam(a.app(a.app(a.var(1), eta), a.var(0))))
    });
    same("length ++ 1", |a| {
        let eta = a.lam(a.prim(Prim::Length, &[a.var(0)]));
        a.prim(Prim::Concat, &[eta, a.int(1)])
    });
    same("Box(decimal)", |a| {
        a.con("Box", &[a.lam(a.prim(Prim::Decimal, &[a.var(0)]))])
    });
}

// ----- errors ------------------------------------------------------------

#[test]
fn error_positions() {
    fails_at("foo", 1, 1, "unbound name `foo`");
    fails_at("if true 1 else 2", 1, 11, "expected `then`");
    fails_at("\"abc", 1, 1, "unterminated string");
    fails_at("\"abc\\", 1, 1, "unterminated string");
    fails_at("9223372036854775808", 1, 1, "integer literal out of range");
    fails_at(
        "1 + -9223372036854775809",
        1,
        5,
        "integer literal out of range",
    );
    fails_at("(1 + 2))", 1, 8, "unexpected `)`");
    fails_at("\\x. ", 1, 5, "unexpected end of input");
    fails_at("\"a\\qb\"", 1, 3, "unknown escape `\\q`");
    fails_at("let x = 1 in\n  x +\n  y", 3, 3, "unbound name `y`");
    fails_at(
        "case Nil of { _ => 1; Nil => 2 }",
        1,
        23,
        "`_` arm must be the last",
    );
    fails_at(
        "case 0 of { _ => 1; _ => 2 }",
        1,
        21,
        "`_` arm must be the last",
    );
    fails_at(
        "case Nil of { Nil => 1; Nil => 2 }",
        1,
        25,
        "already has an arm for `Nil`",
    );
    fails_at(
        "Pair(1, 2) == Pair(3)",
        1,
        15,
        "constructor `Pair` has 2 field(s) at 1:1 but 1 here",
    );
    fails_at(
        "case Nil of { Nil(x) => x }",
        1,
        15,
        "constructor `Nil` has 0 field(s)",
    );
    fails_at(
        "let rec f = 1 in f",
        1,
        1,
        "`let rec` needs at least one parameter",
    );
    fails_at("rec f. f", 1, 1, "`rec` needs at least one parameter");
    fails_at("\\_. _", 1, 5, "`_` binds nothing");
    // Columns are display columns: each of 日 and 本 is two wide.
    fails_at("\"日本\" ++ zz", 1, 11, "unbound name `zz`");
    fails_at("\"\\u{D800}\"", 1, 2, "not a Unicode scalar value");
    fails_at("\"\\u{1234567}\"", 1, 2, "1 to 6 hexadecimal digits");
    fails_at("\"\\u41\"", 1, 2, "malformed escape");
    fails_at("1 @ 2", 1, 3, "unexpected character `@`");
    fails_at(
        "Pair(1 2",
        1,
        9,
        "expected `,` or `)` in the fields of `Pair`",
    );
    fails_at("(1 + 2", 1, 7, "expected `)` to close the `(` at 1:1");
    fails_at("12abc", 1, 1, "malformed integer literal");
    fails_at("let x = 1 2", 1, 12, "expected `in`");
    fails_at("let x = 1 x", 1, 11, "unbound name `x`");
    fails_at("\\x y", 1, 5, "expected `.`");
    fails_at("\\. 1", 1, 2, "expected a parameter name");
    fails_at("\\f. f not f", 1, 7, "unexpected `not`");
    fails_at("1 + * 2", 1, 5, "unexpected `*`, expected an expression");
    fails_at("", 1, 1, "unexpected end of input");
    fails_at("  # only a comment\n", 2, 1, "unexpected end of input");
    fails_at("case 1 of { 2 => 3 }", 1, 13, "expected a case arm");
    fails_at("case 1 { }", 1, 8, "expected `of`");
    fails_at("1 ! 2", 1, 3, "did you mean `!=` or `not`?");
    fails_at(
        "if true then 1",
        1,
        15,
        "unexpected end of input, expected `else`",
    );
}

#[test]
fn invalid_utf8_is_located() {
    let arena = Arena::new();
    let e = parse_bytes(&arena, b"1 +\n  \xff 2").unwrap_err();
    assert_eq!(
        (e.line, e.column, e.message.as_str()),
        (2, 3, "invalid UTF-8")
    );
    // The column counts characters before the bad byte, not bytes.
    let e = parse_bytes(
        &arena,
        "\"é"
            .as_bytes()
            .iter()
            .chain(b"\xc3(")
            .copied()
            .collect::<Vec<u8>>()
            .as_slice(),
    )
    .unwrap_err();
    assert_eq!((e.line, e.column), (1, 3));
}

#[test]
fn rendered_errors_show_the_line_and_a_caret() {
    let source = "let rate = 3 in\n\trate * undefined_total";
    let e = error(source);
    assert_eq!(e.to_string(), "2:9: unbound name `undefined_total`");
    assert_eq!(
        e.render("prices.orr", source),
        "prices.orr:2:9: unbound name `undefined_total`\n\trate * undefined_total\n\t       ^\n"
    );
    let crlf = "1 +\r\n)";
    assert_eq!(
        error(crlf).render("f", crlf),
        "f:2:1: unexpected `)`, expected an expression\n)\n^\n"
    );
}

// ----- the printer -------------------------------------------------------

#[test]
fn printer_writes_minimal_parentheses() {
    let a = Arena::new();
    let (x, y, z) = (a.var(2), a.var(1), a.var(0));
    let abc = |body| a.lam(a.lam(a.lam(body)));
    let cases: Vec<(&Term<'_>, &str)> = vec![
        (
            abc(a.prim(Prim::Sub, &[x, a.prim(Prim::Sub, &[y, z])])),
            "\\a b c. a - (b - c)",
        ),
        (
            abc(a.prim(Prim::Sub, &[a.prim(Prim::Sub, &[x, y]), z])),
            "\\a b c. a - b - c",
        ),
        (
            abc(a.prim(Prim::Concat, &[x, a.prim(Prim::Concat, &[y, z])])),
            "\\a b c. a ++ b ++ c",
        ),
        (
            abc(a.prim(Prim::Concat, &[a.prim(Prim::Concat, &[x, y]), z])),
            "\\a b c. (a ++ b) ++ c",
        ),
        (
            abc(a.prim(Prim::Eq, &[a.prim(Prim::Lt, &[x, y]), z])),
            "\\a b c. (a < b) == c",
        ),
        (
            abc(a.prim(Prim::Mul, &[a.prim(Prim::Add, &[x, y]), z])),
            "\\a b c. (a + b) * c",
        ),
        (
            abc(a.prim(Prim::Add, &[x, a.prim(Prim::Mul, &[y, z])])),
            "\\a b c. a + b * c",
        ),
        (
            abc(a.prim(Prim::Neg, &[a.prim(Prim::Add, &[x, y])])),
            "\\a b c. -(a + b)",
        ),
        (abc(a.prim(Prim::Neg, &[a.app(x, y)])), "\\a b c. -a b"),
        (abc(a.app(x, a.prim(Prim::Neg, &[y]))), "\\a b c. a (-b)"),
        (
            abc(a.prim(Prim::Neg, &[a.prim(Prim::Neg, &[z])])),
            "\\a b c. - -c",
        ),
        // Found by the property test: `-5 c` would be the literal −5 applied to c.
        (
            abc(a.prim(Prim::Neg, &[a.app(a.int(5), z)])),
            "\\a b c. - 5 c",
        ),
        (
            abc(a.prim(Prim::Neg, &[a.app(a.int(-5), z)])),
            "\\a b c. --5 c",
        ),
        (abc(a.app(a.app(x, y), z)), "\\a b c. a b c"),
        (abc(a.app(x, a.app(y, z))), "\\a b c. a (b c)"),
        (
            abc(a.prim(Prim::Length, &[a.app(x, y)])),
            "\\a b c. length (a b)",
        ),
        (
            abc(a.app(a.prim(Prim::Decimal, &[x]), y)),
            "\\a b c. decimal a b",
        ),
        (
            abc(a.prim(Prim::Add, &[a.lam(z), x])),
            "\\a b c. (\\d. d) + a",
        ),
        (abc(a.app(x, a.lam(a.var(0)))), "\\a b c. a (\\d. d)"),
        (a.prim(Prim::Neg, &[a.int(7)]), "-(7)"),
        (a.prim(Prim::Neg, &[a.int(-7)]), "-(-7)"),
        (a.app(a.lam(a.var(0)), a.int(-7)), "(\\a. a) (-7)"),
        (a.prim(Prim::Sub, &[a.int(1), a.int(-7)]), "1 - -7"),
        (a.prim(Prim::Mul, &[a.int(-2), a.int(3)]), "-2 * 3"),
        (a.app(a.con("Foo", &[]), a.int(1)), "(Foo) 1"),
        (a.lam(a.app(a.var(0), a.con("Nil", &[]))), "\\a. a Nil"),
        (
            a.lam(a.app(a.app(a.var(0), a.con("Nil", &[])), a.int(1))),
            "\\a. a (Nil) 1",
        ),
        (
            a.con("Foo", &[a.con("Nil", &[]), a.lam(a.var(0))]),
            "Foo(Nil, \\a. a)",
        ),
        (
            a.let_in(a.rec_lam(a.lam(a.app(a.var(2), a.var(0)))), a.var(0)),
            "let rec a b c = a c in a",
        ),
        (
            a.let_in(a.int(1), a.let_in(a.var(0), a.var(1))),
            "let a = 1 in let b = a in a",
        ),
        (a.rec_lam(a.lam(a.var(2))), "rec a b c. a"),
        (
            a.if_then_else(
                a.boolean(true),
                a.lam(a.var(0)),
                a.if_then_else(a.boolean(false), a.int(1), a.int(2)),
            ),
            "if true then \\a. a else if false then 1 else 2",
        ),
        (
            a.case(
                a.con("Nil", &[]),
                &[Arm::new("Nil", 0, a.int(0)), Arm::new("Cons", 2, a.var(1))],
                Some(a.int(1)),
            ),
            "case Nil of { Nil => 0; Cons(a, b) => a; _ => 1 }",
        ),
        (a.case(a.int(1), &[], None), "case 1 of {}"),
        (
            a.case(a.int(1), &[], Some(a.int(2))),
            "case 1 of { _ => 2 }",
        ),
        (
            a.app(a.case(a.int(1), &[], None), a.int(2)),
            "case 1 of {} 2",
        ),
        (
            a.string("q\"\\\n\t\r\u{1}\u{7f}é😀"),
            "\"q\\\"\\\\\\n\\t\\r\\u{1}\\u{7f}é😀\"",
        ),
    ];
    for (term, text) in cases {
        assert_eq!(print(term), text);
        if term.is_closed() && validate(term).is_ok() {
            round_trip(term);
        }
    }
}

#[test]
fn printer_names_never_collide_with_keywords_or_functions() {
    // Thirty nested binders: names run past `z` to `a1`, `b1`, …
    let a = Arena::new();
    let mut t = a.var(29);
    for _ in 0..30 {
        t = a.lam(t);
    }
    let text = round_trip(t);
    assert!(
        text.starts_with("\\a b c d e f g h i j k l m n o p q r s t u v w x y z a1 b1 c1 d1. a")
    );
}

#[test]
fn printer_shows_open_and_malformed_terms() {
    let a = Arena::new();
    assert_eq!(print(a.var(3)), "#3");
    // Free indices are counted from outside the whole term.
    assert_eq!(print(a.lam(a.app(a.var(0), a.var(2)))), "\\a. a #1");
    assert_eq!(print(a.prim(Prim::Add, &[a.int(1)])), "#+(1)");
    assert_eq!(print(a.prim(Prim::Neg, &[])), "#neg()");
    assert_eq!(
        print(a.prim(Prim::Length, &[a.int(1), a.int(2)])),
        "#length(1, 2)"
    );
}

#[test]
fn printer_cuts_long_output_at_a_character_boundary() {
    let a = Arena::new();
    let s = a.string(&"é".repeat(10));
    let printed = print_limited(s, 4);
    // `"é` is three bytes and a second é would pass the limit.
    assert_eq!(printed.text, "\"é …[truncated]");
    assert!(printed.truncated);
    let exact = print_limited(a.int(123), 3);
    assert_eq!((exact.text.as_str(), exact.truncated), ("123", false));
}

#[test]
fn shared_dag_prints_truncated_quickly() {
    // Sixty levels of App(t, t) sharing one child: 2^60 leaves if unfolded.
    let a = Arena::new();
    let mut t = a.lam(a.var(0));
    for _ in 0..60 {
        t = a.app(t, t);
    }
    let text = print(t);
    assert!(text.ends_with(" …[truncated]"));
    assert!(text.len() <= PRINT_LIMIT + " …[truncated]".len());
    assert!(
        text.starts_with("(\\a. a) (\\a. a) ((\\a. a) (\\a. a)) ("),
        "{}",
        &text[..60]
    );
    let small = print_limited(t, 100);
    assert!(small.truncated);
    assert!(small.text.len() <= 100 + " …[truncated]".len());
}

// ----- Pierce, TAPL (2002), §6.1, exercise 6.1.1 --------------------------
// The nameless forms below are written from memory of the textbook's solution
// to exercise 6.1.1 (the book could not be consulted); each named term is
// parsed and compared with the de Bruijn term built by index.

#[test]
fn tapl_6_1_1_church_zero() {
    // c0 = λs.λz. z  →  λ.λ.0
    same("λs. λz. z", |a| a.lam(a.lam(a.var(0))));
}

#[test]
fn tapl_6_1_1_church_two() {
    // c2 = λs.λz. s (s z)  →  λ.λ. 1 (1 0)
    same("λs. λz. s (s z)", |a| {
        a.lam(a.lam(a.app(a.var(1), a.app(a.var(1), a.var(0)))))
    });
}

#[test]
fn tapl_6_1_1_plus() {
    // plus = λm.λn.λs.λz. m s (n z s)  →  λ.λ.λ.λ. 3 1 (2 0 1)
    same("λm. λn. λs. λz. m s (n z s)", |a| {
        let n_z_s = a.app(a.app(a.var(2), a.var(0)), a.var(1));
        a.lam(a.lam(a.lam(a.lam(a.app(a.app(a.var(3), a.var(1)), n_z_s)))))
    });
}

#[test]
fn tapl_5_2_plus() {
    // Pierce, TAPL (2002), §6.1, exercise 6.1.1 (solutions from memory), on
    // plus as §5.2 defines it: λm.λn.λs.λz. m s (n s z)  →  λ.λ.λ.λ. 3 1 (2 1 0)
    same("\\m n s z. m s (n s z)", |a| {
        let n_s_z = a.app(a.app(a.var(2), a.var(1)), a.var(0));
        a.lam(a.lam(a.lam(a.lam(a.app(a.app(a.var(3), a.var(1)), n_s_z)))))
    });
}

#[test]
fn tapl_6_1_1_fix() {
    // fix = λf. (λx. f (λy. (x x) y)) (λx. f (λy. (x x) y))
    //     →  λ. (λ. 1 (λ. (1 1) 0)) (λ. 1 (λ. (1 1) 0))
    same(
        "λf. (λx. f (λy. (x x) y)) (λx. f (λy. (x x) y))",
        |a| {
            let half = a.lam(a.app(a.var(1), a.lam(a.app(a.app(a.var(1), a.var(1)), a.var(0)))));
            a.lam(a.app(half, half))
        },
    );
}

#[test]
fn tapl_6_1_1_foo() {
    // foo = (λx. (λx. x)) (λx. x)  →  (λ.λ.0) (λ.0)
    same("(λx. (λx. x)) (λx. x)", |a| {
        a.app(a.lam(a.lam(a.var(0))), a.lam(a.var(0)))
    });
}

// ----- 200,000 levels deep, on a 2 MiB stack -----------------------------

/// How deep the programs below nest. A recursive parser or printer would
/// overflow a 2 MiB stack long before: at 100 bytes a frame it holds about
/// 20,000 levels. (`hostile.rs` parses and runs programs a million deep; here
/// each one is also printed in full and parsed again, so a smaller depth
/// keeps the suite quick.)
const DEEP: usize = 200_000;

/// Parse `source` (built on the small stack), print it in full, parse the
/// print, and compare; return the parsed term's printed text.
fn deep_round_trip(source: String, check: fn(&Term<'_>) -> bool) {
    on_small_stack(move || {
        let arena = Arena::new();
        let t = parse_term(&arena, &source).unwrap_or_else(|e| panic!("{e}"));
        assert!(check(t), "unexpected shape");
        round_trip(t);
        // The default print is cut at the limit, without trouble either.
        let _ = print(t);
    });
}

fn repeat(s: &str, n: usize) -> String {
    s.repeat(n)
}

#[test]
fn deep_parentheses() {
    let source = format!("{}1{}", repeat("(", DEEP), repeat(")", DEEP));
    deep_round_trip(source, |t| matches!(t.node(), orrery::Node::Int(1)));
}

#[test]
fn deep_lambdas() {
    deep_round_trip(format!("{}x", repeat("\\x. ", DEEP)), |t| {
        matches!(t.node(), orrery::Node::Lam(_))
    });
    deep_round_trip(format!("{}f", repeat("rec f x. ", DEEP)), |t| {
        matches!(t.node(), orrery::Node::RecLam(_))
    });
}

#[test]
fn deep_lets() {
    deep_round_trip(format!("{}x", repeat("let x = 1 in ", DEEP)), |t| {
        matches!(t.node(), orrery::Node::Let(..))
    });
    deep_round_trip(
        format!("{}x{}", repeat("let f x = ", DEEP), repeat(" in f", DEEP)),
        |t| matches!(t.node(), orrery::Node::Let(..)),
    );
}

#[test]
fn deep_conditionals() {
    deep_round_trip(
        format!(
            "{}1{}",
            repeat("if true then ", DEEP),
            repeat(" else 2", DEEP)
        ),
        |t| matches!(t.node(), orrery::Node::If(..)),
    );
    deep_round_trip(format!("{}2", repeat("if true then 1 else ", DEEP)), |t| {
        matches!(t.node(), orrery::Node::If(..))
    });
    deep_round_trip(format!("{}true", repeat("true && ", DEEP)), |t| {
        matches!(t.node(), orrery::Node::If(..))
    });
}

#[test]
fn deep_cases() {
    deep_round_trip(
        format!(
            "{}Z{}",
            repeat("case ", DEEP),
            repeat(" of { _ => Z }", DEEP)
        ),
        |t| matches!(t.node(), orrery::Node::Case(..)),
    );
    deep_round_trip(
        format!(
            "{}Z{}",
            repeat("case Z of { Z => ", DEEP),
            repeat(" }", DEEP)
        ),
        |t| matches!(t.node(), orrery::Node::Case(..)),
    );
}

#[test]
fn deep_constructors() {
    deep_round_trip(
        format!("{}Z{}", repeat("S(", DEEP), repeat(")", DEEP)),
        |t| matches!(t.node(), orrery::Node::Con("S", _)),
    );
}

#[test]
fn long_operator_chains() {
    deep_round_trip(format!("1{}", repeat(" + 1", DEEP)), |t| {
        matches!(t.node(), orrery::Node::Prim(Prim::Add, _))
    });
    deep_round_trip(format!("\"a\"{}", repeat(" ++ \"a\"", DEEP)), |t| {
        matches!(t.node(), orrery::Node::Prim(Prim::Concat, _))
    });
    deep_round_trip(format!("{}1", repeat("- ", DEEP)), |t| {
        matches!(t.node(), orrery::Node::Prim(Prim::Neg, _))
    });
    deep_round_trip(format!("{}1", repeat("-", DEEP)), |t| {
        matches!(t.node(), orrery::Node::Prim(Prim::Neg, _))
    });
    deep_round_trip(format!("{}true", repeat("not ", DEEP)), |t| {
        matches!(t.node(), orrery::Node::If(..))
    });
    deep_round_trip(format!("\\f. f{}", repeat(" 1", DEEP)), |t| {
        matches!(t.node(), orrery::Node::Lam(_))
    });
}

#[test]
fn deep_unclosed_input_fails_cleanly() {
    on_small_stack(|| {
        let e = error(&repeat("(", DEEP));
        assert_eq!((e.line, e.column), (1, DEEP as u32 + 1));
        assert!(e.message.contains("unexpected end of input"));
        let e = error(&format!("{}1", repeat("S(", DEEP)));
        assert!(e.message.contains("expected `,` or `)`"), "{e}");
    });
}

// ----- property tests ------------------------------------------------------

/// Constructor tags the generator uses, each with its one arity.
const TAGS: &[(&str, u32)] = &[
    ("Nil", 0),
    ("Leaf", 0),
    ("Some", 1),
    ("Cons", 2),
    ("Node", 3),
];

const STRINGS: &[&str] = &[
    "",
    "plain",
    "quote \" inside",
    "back\\slash",
    "line\nbreak",
    "tab\there",
    "cr\r",
    "\u{0}nul",
    "\u{1b}[0m",
    "\u{7f}\u{85}",
    "é",
    "日本語",
    "😀",
    "#not a comment",
    "\\u{41}",
    "λx. x",
];

const CHARS: &[char] = &[
    'a',
    'Z',
    ' ',
    '"',
    '\\',
    '\n',
    '\t',
    '\r',
    '\u{0}',
    '\u{1}',
    '\u{7f}',
    'é',
    'λ',
    '😀',
    '{',
    '}',
    '#',
    '\u{2028}',
    '\u{10FFFF}',
];

/// Builds a closed, valid term from a list of choices; when the choices run out
/// it builds leaves, so shrinking the list shrinks the term.
struct Gen<'a, 'c> {
    arena: &'a Arena,
    choices: &'c [u32],
    at: usize,
}

impl<'a> Gen<'a, '_> {
    fn pick(&mut self, n: u32) -> u32 {
        let c = self.choices.get(self.at).copied().unwrap_or(0);
        self.at += 1;
        c % n
    }

    fn exhausted(&self) -> bool {
        self.at >= self.choices.len()
    }

    fn int(&mut self) -> i64 {
        match self.pick(8) {
            0 => 0,
            1 => 7,
            2 => -7,
            3 => i64::MIN,
            4 => i64::MAX,
            5 => -1,
            6 => i64::from(self.pick(1 << 20)),
            _ => -i64::from(self.pick(1 << 30)),
        }
    }

    fn string(&mut self) -> &'a Term<'a> {
        if self.pick(2) == 0 {
            let i = self.pick(STRINGS.len() as u32) as usize;
            return self.arena.string(STRINGS[i]);
        }
        let n = self.pick(6);
        let s: String = (0..n)
            .map(|_| CHARS[self.pick(CHARS.len() as u32) as usize])
            .collect();
        self.arena.string(&s)
    }

    fn leaf(&mut self, depth: u32) -> &'a Term<'a> {
        let a = self.arena;
        match self.pick(6) {
            0 => a.int(self.int()),
            1 => a.boolean(self.pick(2) == 1),
            2 => self.string(),
            3 | 4 if depth > 0 => a.var(self.pick(depth)),
            5 => {
                let (tag, _) = TAGS[self.pick(2) as usize];
                a.con(tag, &[])
            }
            _ => a.int(self.int()),
        }
    }

    fn term(&mut self, depth: u32, fuel: u32) -> &'a Term<'a> {
        if fuel == 0 || self.exhausted() {
            return self.leaf(depth);
        }
        let a = self.arena;
        let f = fuel - 1;
        match self.pick(18) {
            0..=2 => self.leaf(depth),
            3 => a.lam(self.term(depth + 1, f)),
            4 => a.rec_lam(self.term(depth + 2, f)),
            5 => {
                let function = self.term(depth, f);
                a.app(function, self.term(depth, f))
            }
            6 => {
                let bound = self.term(depth, f);
                a.let_in(bound, self.term(depth + 1, f))
            }
            7 => {
                // let rec with one or two parameters.
                let params = 1 + self.pick(2);
                let mut body = self.term(depth + 1 + params, f);
                for _ in 1..params {
                    body = a.lam(body);
                }
                let bound = a.rec_lam(body);
                a.let_in(bound, self.term(depth + 1, f))
            }
            8 => {
                let c = self.term(depth, f);
                let t = self.term(depth, f);
                a.if_then_else(c, t, self.term(depth, f))
            }
            9 | 10 => {
                let binary: Vec<Prim> = Prim::ALL.into_iter().filter(|p| p.arity() == 2).collect();
                let op = binary[self.pick(binary.len() as u32) as usize];
                let x = self.term(depth, f);
                a.prim(op, &[x, self.term(depth, f)])
            }
            11 => {
                let op = [Prim::Neg, Prim::Length, Prim::Decimal][self.pick(3) as usize];
                let x = self.term(depth, f);
                a.prim(op, &[x])
            }
            12 => {
                let (tag, arity) = TAGS[self.pick(TAGS.len() as u32) as usize];
                let fields: Vec<&Term<'_>> = (0..arity).map(|_| self.term(depth, f)).collect();
                a.con(tag, &fields)
            }
            13 => {
                let scrutinee = self.term(depth, f);
                let mut arms = Vec::new();
                for &(tag, arity) in TAGS {
                    if self.pick(3) == 0 {
                        arms.push(Arm::new(tag, arity, self.term(depth + arity, f)));
                    }
                }
                let default = if self.pick(2) == 0 {
                    Some(self.term(depth, f))
                } else {
                    None
                };
                a.case(scrutinee, &arms, default)
            }
            14 => {
                // A nullary constructor or a negative literal applied.
                let head = if self.pick(2) == 0 {
                    a.con(TAGS[self.pick(2) as usize].0, &[])
                } else {
                    a.int(-1 - i64::from(self.pick(100)))
                };
                let argument = self.term(depth, f);
                a.app(head, argument)
            }
            15 => {
                let x = if self.pick(2) == 0 {
                    a.int(self.int())
                } else {
                    self.term(depth, f)
                };
                a.prim(Prim::Neg, &[x])
            }
            16 => {
                // Several arguments, so nullary constructors sit between arguments.
                let head = self.term(depth, f);
                let n = 2 + self.pick(3);
                let mut t = head;
                for _ in 0..n {
                    let argument = if self.pick(2) == 0 {
                        a.con("Nil", &[])
                    } else {
                        self.term(depth, f)
                    };
                    t = a.app(t, argument);
                }
                t
            }
            _ => {
                let n = 1 + self.pick(3);
                let mut body = self.term(depth + n, f);
                for _ in 0..n {
                    body = a.lam(body);
                }
                body
            }
        }
    }
}

/// Tokens for the token-soup property: enough to reach every parser state.
const TOKENS: &[&str] = &[
    "x",
    "y",
    "f",
    "_",
    "\\x.",
    "λy.",
    "\\",
    ".",
    "let",
    "rec",
    "in",
    "=",
    "if",
    "then",
    "else",
    "case",
    "of",
    "{",
    "}",
    "=>",
    ";",
    ",",
    "(",
    ")",
    "Nil",
    "Cons",
    "Cons(",
    "-",
    "-7",
    "7",
    "9223372036854775808",
    "\"s\"",
    "\"\\n\"",
    "+",
    "*",
    "==",
    "<",
    "++",
    "&&",
    "||",
    "not",
    "length",
    "decimal",
    "true",
    "false",
    "#c\n",
    "\\x y.",
    "let x =",
    "let rec f x =",
];

proptest! {
    #![proptest_config(ProptestConfig::with_cases(2000))]

    #[test]
    fn printed_terms_parse_back(choices in proptest::collection::vec(any::<u32>(), 0..160)) {
        let arena = Arena::new();
        let term = Gen { arena: &arena, choices: &choices, at: 0 }.term(0, 7);
        prop_assert!(validate(term).is_ok(), "generator made an invalid term");
        let text = print(term);
        let back = Arena::new();
        let parsed = parse_term(&back, &text);
        prop_assert!(parsed.is_ok(), "{:?} did not parse: {:?}", text, parsed.err());
        let parsed = parsed.unwrap();
        prop_assert!(terms_equal(term, parsed), "{:?} parsed as {:?}", text, print(parsed));
        prop_assert_eq!(print(parsed), text, "{:#?}", term);
    }

    #[test]
    fn edited_programs_never_panic_and_round_trip(
        choices in proptest::collection::vec(any::<u32>(), 0..120),
        edits in proptest::collection::vec((any::<usize>(), 0..4usize, 0..TOKENS.len()), 1..4),
    ) {
        // Start from a valid program and damage it a little: most results are
        // near-misses that drive the parser deep before they fail (or parse).
        let arena = Arena::new();
        let term = Gen { arena: &arena, choices: &choices, at: 0 }.term(0, 6);
        let mut text = print(term);
        for (position, kind, token) in edits {
            let boundaries: Vec<usize> = text
                .char_indices()
                .map(|(i, _)| i)
                .chain([text.len()])
                .collect();
            let at = boundaries[position % boundaries.len()];
            let next = boundaries.iter().copied().find(|&b| b > at).unwrap_or(at);
            match kind {
                0 => text.replace_range(at..next, ""),
                1 => text.insert_str(at, TOKENS[token]),
                2 => text.replace_range(at..next, TOKENS[token]),
                _ => {
                    let copy = text[at..next].to_string();
                    text.insert_str(at, &copy);
                }
            }
        }
        let edited = Arena::new();
        match parse_term(&edited, &text) {
            Ok(parsed) => {
                round_trip(parsed);
            }
            Err(e) => {
                prop_assert!(e.line >= 1 && e.column >= 1);
                let _ = e.render("edited", &text);
            }
        }
    }

    #[test]
    fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..300)) {
        let arena = Arena::new();
        if let Err(e) = parse_bytes(&arena, &bytes) {
            prop_assert!(e.line >= 1 && e.column >= 1);
            let _ = e.render("soup", &String::from_utf8_lossy(&bytes));
        }
    }

    #[test]
    fn token_soup_never_panics_and_round_trips(
        picks in proptest::collection::vec((0..TOKENS.len(), any::<bool>()), 0..40)
    ) {
        let mut source = String::new();
        for (i, spaced) in picks {
            source.push_str(TOKENS[i]);
            if spaced {
                source.push(' ');
            }
        }
        let arena = Arena::new();
        match parse_term(&arena, &source) {
            Ok(term) => {
                round_trip(term);
            }
            Err(e) => {
                prop_assert!(e.line >= 1 && e.column >= 1);
                let _ = e.render("soup", &source);
            }
        }
    }
}

#[test]
fn every_unbound_name_is_reported_once_with_where_it_is_first_used() {
    let arena = Arena::new();
    let source = "let fee = rate 3 in\n  fee + surcharge (rate 4) + levy";
    let err = parse(&arena, source).unwrap_err();
    assert_eq!((err.line, err.column), (1, 11));
    assert_eq!(
        err.message,
        "3 unbound names: `rate` (1:11), `surcharge` (2:9), `levy` (2:30)"
    );
    // One name alone keeps the short message.
    let err = parse(&arena, "1 + levy").unwrap_err();
    assert_eq!(err.to_string(), "1:5: unbound name `levy`");
    // Thousands of them: the message names the first few and counts the rest.
    let many: String = (0..5_000).map(|i| format!("n{i} + ")).collect::<String>() + "0";
    let err = parse(&arena, &many).unwrap_err();
    assert!(
        err.message
            .starts_with("5000 unbound names: `n0` (1:1), `n1` (1:6)"),
        "{}",
        err.message
    );
    assert!(err.message.ends_with("and 4968 more"), "{}", err.message);
}

// ----- spans, names and Unicode text -------------------------------------
//
// Sources for the Unicode facts these tests rely on: Unicode Standard Annex
// #31, *Unicode Identifiers and Syntax* (revision 39, 2023), §2 Default
// Identifiers (a name is `XID_Start` then `XID_Continue`; é, ß and CJK
// ideographs are letters, Arabic-Indic digits continue but do not start a
// name); Unicode Standard Annex #11, *East Asian Width* (CJK ideographs are
// Wide, two columns; emoji such as U+1F331 SEEDLING are Wide by their
// Emoji_Presentation); the Unicode Standard, ch. 23.8 (U+FEFF as a
// byte-order mark).

/// A parsed node's span as (start byte, end byte, line, column).
#[track_caller]
fn place_of(t: &Term<'_>) -> (u32, u32, u32, u32) {
    let s = t
        .span()
        .unwrap_or_else(|| panic!("{} has no span", print(t)));
    assert_eq!(s.file, 0);
    (s.start, s.end, s.line, s.col)
}

/// The children of a node, in order.
fn kids<'a>(t: &'a Term<'a>) -> Vec<&'a Term<'a>> {
    t.children().map(|(c, _)| c).collect()
}

#[test]
fn spans_cover_each_construct() {
    let a = Arena::new();
    let parse = |s: &str| parse_term(&a, s).unwrap_or_else(|e| panic!("{s:?}: {e}"));

    // A let spans from `let` to the end of its body, over lines; the
    // function `share n = …` from its name; an operator from its first
    // operand; an application from its head, parentheses included, while
    // what they enclose keeps its own.
    let source = "let share n = 100 / n in\n  share (2 + 1)";
    let t = parse(source);
    assert_eq!(place_of(t), (0, 40, 1, 1));
    let [bound, body] = kids(t)[..] else { panic!() };
    assert!(matches!(bound.node(), Node::Lam(_)));
    assert_eq!(place_of(bound), (4, 21, 1, 5));
    assert_eq!(place_of(kids(bound)[0]), (14, 21, 1, 15)); // 100 / n
    assert_eq!(place_of(body), (27, 40, 2, 3)); // share (2 + 1)
    let [share, sum] = kids(body)[..] else {
        panic!()
    };
    assert_eq!(place_of(share), (27, 32, 2, 3));
    assert_eq!(place_of(sum), (34, 39, 2, 10)); // 2 + 1, without its parentheses

    // `f a b` is `(f a) b`: each application from `f` to its last argument.
    let t = parse("\\f a b. f a b");
    assert_eq!(place_of(t), (0, 13, 1, 1));
    let (mut inner, mut lambdas) = (t, 0);
    while let Node::Lam(body) = inner.node() {
        assert_eq!(place_of(inner), (0, 13, 1, 1), "every λ of `\\f a b.`");
        inner = body;
        lambdas += 1;
    }
    assert_eq!(lambdas, 3);
    assert_eq!(place_of(inner), (8, 13, 1, 9));
    assert_eq!(place_of(kids(inner)[0]), (8, 11, 1, 9));
    assert_eq!(place_of(kids(inner)[1]), (12, 13, 1, 13));

    let t = parse("(\\x. x) (1)");
    assert_eq!(place_of(t), (0, 11, 1, 1));
    assert_eq!(place_of(kids(t)[0]), (1, 6, 1, 2));
    assert_eq!(place_of(kids(t)[1]), (9, 10, 1, 10));

    let t = parse("1 + 2 * 3");
    assert_eq!(place_of(t), (0, 9, 1, 1));
    assert_eq!(place_of(kids(t)[1]), (4, 9, 1, 5));
    let t = parse("(1 + 2) * 3");
    assert_eq!(place_of(t), (0, 11, 1, 1));
    assert_eq!(place_of(kids(t)[0]), (1, 6, 1, 2));

    // Literals: a negative one includes its sign, a string its quotes.
    assert_eq!(place_of(parse("-7")), (0, 2, 1, 1));
    assert_eq!(place_of(parse("  \"a\\nb\"")), (2, 8, 1, 3));
    assert_eq!(place_of(kids(parse("\\x. -x"))[0]), (4, 6, 1, 5));

    // Sugar: `not`, `&&`, `||` are `if`s whose booleans share their span.
    let not = kids(parse("\\b. not b"))[0];
    assert!(matches!(not.node(), Node::If(..)));
    for part in std::iter::once(not).chain(kids(not).into_iter().skip(1)) {
        assert_eq!(place_of(part), (4, 9, 1, 5));
    }
    let and = kids(kids(parse("\\a b. a && b"))[0])[0];
    assert_eq!(place_of(and), (6, 12, 1, 7));
    assert_eq!(place_of(kids(and)[2]), (6, 12, 1, 7)); // the `false`
    let or = kids(kids(parse("\\a b. a || b"))[0])[0];
    assert_eq!(place_of(kids(or)[1]), (6, 12, 1, 7)); // the `true`

    let t = parse("if true then 1 else 2");
    assert_eq!(place_of(t), (0, 21, 1, 1));
    assert_eq!(place_of(kids(t)[0]), (3, 7, 1, 4));
    let t = parse("case Nil of { Nil => 1; _ => 2 }");
    assert!(matches!(t.node(), Node::Case(..)));
    assert_eq!(place_of(t), (0, 32, 1, 1));
    assert_eq!(place_of(kids(t)[0]), (5, 8, 1, 6));
    let t = parse("Pair(1, \"two\")");
    assert_eq!(place_of(t), (0, 14, 1, 1));
    assert_eq!(place_of(kids(t)[1]), (8, 13, 1, 9));

    // A built-in: called, it spans its name and arguments; passed as a
    // value, its η-expansion (λ, call, variable) spans the name.
    assert_eq!(place_of(parse("length \"ab\"")), (0, 11, 1, 1));
    let eta = parse("length");
    assert!(matches!(eta.node(), Node::Lam(_)));
    let call = kids(eta)[0];
    assert!(matches!(call.node(), Node::Prim(Prim::Length, _)));
    for part in [eta, call, kids(call)[0]] {
        assert_eq!(place_of(part), (0, 6, 1, 1));
    }

    // Every node has one, down to the leaves.
    let source =
        "let rec count n = case n of { Z => 0; S(m) => 1 + count m } in\n\tcount (S(S(Z)))";
    let mut stack = vec![parse(source)];
    let mut nodes = 0;
    while let Some(t) = stack.pop() {
        let (start, end, line, col) = place_of(t);
        assert!(start < end && end as usize <= source.len() && line >= 1 && col >= 1);
        stack.extend(kids(t));
        nodes += 1;
    }
    // let, μλ, case, n, 0, +, 1, count m (3), count (S(S(Z))) (5)
    assert_eq!(nodes, 15);
}

#[test]
fn spans_count_display_columns_after_wide_text() {
    let a = Arena::new();
    // 温室 is 6 bytes and 4 columns; "🌱日本" is 10 bytes between its
    // quotes and 6 columns.
    let source = "let 温室 = \"🌱日本\" in\n温室 ++ 温室";
    let t = parse_term(&a, source).unwrap();
    let [bound, body] = kids(t)[..] else { panic!() };
    assert_eq!(place_of(bound), (13, 25, 1, 12));
    assert_eq!(place_of(body), (29, 45, 2, 1));
    assert_eq!(place_of(kids(body)[1]), (39, 45, 2, 9));

    // A seedling emoji is two columns wide: `x` sits at column 13.
    let t = parse_term(&a, "\\x. \"🌱\" ++ x").unwrap();
    let concat = kids(t)[0];
    assert_eq!(place_of(kids(concat)[0]), (4, 10, 1, 5));
    assert_eq!(place_of(kids(concat)[1]), (14, 15, 1, 13));
    // A combining acute accent is as wide as nothing.
    fails_at("\\e\u{301}. e\u{301} + zz", 1, 9, "unbound name `zz`");
}

#[test]
fn let_and_rec_name_their_functions() {
    let a = Arena::new();
    let bound = |s: &str| -> &Term<'_> {
        let t = parse_term(&a, s).unwrap_or_else(|e| panic!("{s:?}: {e}"));
        kids(t)[0]
    };
    // `let f = \x. …`: the λ is named, and no other node.
    let f = bound("let tariff = \\kg. kg * 3 in tariff 2");
    assert_eq!(f.name(), Some("tariff"));
    assert_eq!(kids(f)[0].name(), None);
    // `let f x y = …`: every λ of the curried chain.
    let f = bound("let fee zone kg = zone + kg in fee 1 2");
    assert_eq!(f.name(), Some("fee"));
    assert!(matches!(kids(f)[0].node(), Node::Lam(_)));
    assert_eq!(kids(f)[0].name(), Some("fee"));
    // `let rec f x = …` and `rec f x. …`.
    let f = bound("let rec hops n = if n == 0 then 0 else hops (n - 1) in hops 3");
    assert!(matches!(f.node(), Node::RecLam(_)));
    assert_eq!(f.name(), Some("hops"));
    let t = parse_term(&a, "rec relay stop leg. relay stop leg").unwrap();
    assert!(matches!(t.node(), Node::RecLam(_)));
    assert_eq!(
        (t.name(), kids(t)[0].name()),
        (Some("relay"), Some("relay"))
    );
    // A recursive function keeps its own name under a let.
    assert_eq!(bound("let f = rec g x. g x in f").name(), Some("g"));
    // Only functions are named.
    assert_eq!(bound("let zone = 5 in zone").name(), None);
    assert_eq!(bound("let _ = \\x. x in 0").name(), None);
    assert_eq!(parse_term(&a, "\\x. x").unwrap().name(), None);
    // A name leaves the term what it was.
    same_as(
        "let tariff = \\kg. kg * 3 in tariff 2",
        "let t = \\k. k * 3 in t 2",
    );
}

#[test]
fn names_are_unicode_identifiers() {
    // UAX #31 §2: é, ß and CJK ideographs are XID_Start and XID_Continue.
    same_as(
        "let café = 2 in let größe = 3 in café * größe",
        "let a = 2 in let b = 3 in a * b",
    );
    same_as("let 温室 = 4 in 温室 + 温室", "let g = 4 in g + g");
    same_as("\\e\u{301}. e\u{301}", "\\x. x"); // e and a combining accent
                                               // An upper-case first letter makes a constructor, in any script.
    same("Épi(1)", |a| a.con("Épi", &[a.int(1)]));
    same("case Ωmega of { Ωmega => 1 }", |a| {
        a.case(a.con("Ωmega", &[]), &[Arm::new("Ωmega", 0, a.int(1))], None)
    });
    // λ is always the lambda, never part of a name.
    same_as("λx. x", "\\x. x");
    same_as("λcafé. café", "\\x. x");
    same("\\a. aλb. b", |a| a.lam(a.app(a.var(0), a.lam(a.var(0)))));
    // An Arabic-Indic digit continues a name but cannot start one.
    fails_at("1 + ٣", 1, 5, "unexpected character `٣`");
    same_as("\\x٣. x٣", "\\x. x");
    fails_at("12é", 1, 1, "malformed integer literal");
}

#[test]
fn a_byte_order_mark_is_skipped() {
    let a = Arena::new();
    let t = parse_term(&a, "\u{feff}1 + 2").unwrap();
    // Offsets count from the text's first byte, the mark's three included;
    // the mark takes no column.
    assert_eq!(place_of(t), (3, 8, 1, 1));
    let source = "\u{feff}1 + zz";
    let e = error(source);
    assert_eq!((e.line, e.column), (1, 5));
    assert_eq!(
        e.render("bom.orr", source),
        "bom.orr:1:5: unbound name `zz`\n1 + zz\n    ^\n"
    );
    // Anywhere else it is a character out of place.
    fails_at("1 +\u{feff} 2", 1, 4, "unexpected character");
    assert!(parse_bytes(&a, b"\xef\xbb\xbfdecimal 7").is_ok());
}

#[test]
fn a_rendered_error_ends_its_caret_line_with_a_newline() {
    let source = "let fee = 12 in fee +";
    let shown = error(source).render("fee.orr", source);
    assert!(shown.ends_with("^\n"), "{shown:?}");
    assert_eq!(shown.lines().count(), 3);
}

#[test]
fn an_emoji_before_an_error_moves_its_column_by_two() {
    // U+1F331 SEEDLING: Wide (UAX #11), so `oops` is at column 9, not 8.
    let source = "\"🌱\" ++ oops";
    let e = error(source);
    assert_eq!((e.line, e.column), (1, 9));
    assert_eq!(
        e.render("seed.orr", source),
        format!(
            "seed.orr:1:9: unbound name `oops`\n{source}\n{}^\n",
            " ".repeat(8)
        )
    );
}

/// The display column (0-based) where `needle` starts in `line`, counting
/// 日 and 本 two wide and everything else in these tests one.
fn column_of(line: &str, needle: &str) -> usize {
    let byte = line
        .find(needle)
        .unwrap_or_else(|| panic!("{needle:?} not in {line:?}"));
    line[..byte]
        .chars()
        .map(|c| if matches!(c, '日' | '本') { 2 } else { 1 })
        .sum()
}

#[test]
fn a_long_line_is_cut_to_a_window_with_the_caret_under_its_character() {
    let window = orrery::syntax::EXCERPT_COLUMNS;
    // The place near the end of a long line: cut at the start only.
    let source = format!("let total = 0 in {}oops", "total + ".repeat(40));
    let e = error(&source);
    assert_eq!((e.line, e.column), (1, 17 + 320 + 1));
    let shown = e.render("long.orr", &source);
    let lines: Vec<&str> = shown.lines().collect();
    assert_eq!(lines.len(), 3);
    assert!(
        lines[1].starts_with('…') && lines[1].ends_with("oops"),
        "{shown}"
    );
    assert!(lines[1].chars().count() <= window + 2);
    assert_eq!(lines[2].trim_start(), "^");
    assert_eq!(lines[2].find('^'), Some(column_of(lines[1], "oops")));

    // In the middle: cut at both ends.
    let source = format!("{}oops{}", "12 + ".repeat(60), " + 1".repeat(60));
    let shown = error(&source).render("long.orr", &source);
    let lines: Vec<&str> = shown.lines().collect();
    assert!(
        lines[1].starts_with('…') && lines[1].ends_with('…'),
        "{shown}"
    );
    assert!(lines[1].chars().count() <= window + 2);
    assert_eq!(lines[2].find('^'), Some(column_of(lines[1], "oops")));

    // Wide characters before the place: the caret still lines up by width.
    let source = format!("\"{}\" ++ oops", "日本".repeat(60));
    let e = error(&source);
    assert_eq!(e.column, 1 + 1 + 240 + 1 + 4);
    let shown = e.render("wide.orr", &source);
    let lines: Vec<&str> = shown.lines().collect();
    assert!(lines[1].starts_with('…'), "{shown}");
    assert_eq!(lines[2].find('^'), Some(column_of(lines[1], "oops")));
}

#[test]
fn an_excerpt_underlines_a_span_to_the_end_of_its_line() {
    use orrery::syntax::excerpt;
    use orrery::Span;
    let source = "let courier =\n  \\parcel. parcel / 0 in\ncourier 3";
    // The whole let: three lines, underlined to the end of the first.
    let whole = Span::new(0, 0, source.len() as u32).with_position(1, 1);
    assert_eq!(excerpt(source, whole), "let courier =\n^^^^^^^^^^^^^\n");
    // `parcel / 0` on line 2.
    let start = source.find("parcel /").unwrap() as u32;
    let div = Span::new(0, start, start + 10).with_position(2, 12);
    assert_eq!(
        excerpt(source, div),
        "  \\parcel. parcel / 0 in\n           ^^^^^^^^^^\n"
    );
    // A position alone has one caret; a span with no line is placed by its
    // first byte, and one outside the text has no excerpt.
    let at = Span::new(0, 0, 0).with_position(3, 9);
    assert_eq!(excerpt(source, at), "courier 3\n        ^\n");
    assert_eq!(excerpt(source, Span::new(0, 0, 4)), "let courier =\n^^^^\n");
    let three = source.find("3").unwrap() as u32;
    assert_eq!(
        excerpt(source, Span::new(0, three, three + 1)),
        "courier 3\n        ^\n"
    );
    assert_eq!(excerpt(source, Span::new(0, 900, 904)), "");
    // A column past the line's end, or a byte range past the text's, is
    // held to the line.
    let far = Span::new(0, 0, u32::MAX).with_position(3, u32::MAX);
    assert_eq!(excerpt(source, far), "courier 3\n         ^\n");
    // Tabs are copied into the caret line; control characters are shown
    // as U+FFFD, one column wide like the character they stand for.
    let source = "\t\"\u{1b}[0m\"\t++ oops";
    let e = error(source);
    assert_eq!(e.column, 12);
    assert_eq!(
        e.render("tab.orr", source),
        "tab.orr:1:12: unbound name `oops`\n\t\"\u{FFFD}[0m\"\t++ oops\n\t      \t   ^\n"
    );
}

/// Every unbound name is reported with its place, even fifty thousand of
/// them on one line (placed in one pass over the source, not one each).
#[test]
fn every_unbound_name_has_its_place_on_a_long_line() {
    let names: Vec<String> = (0..50_000).map(|i| format!("crate{i}")).collect();
    let source = format!("1 + {}", names.join(" + "));
    let error = error(&source);
    assert_eq!(error.unbound.len(), names.len());
    let (first, last) = (&error.unbound[0], &error.unbound[names.len() - 1]);
    assert_eq!(first, &("crate0".to_string(), 1, 5));
    let last_col = source.rfind("crate49999").expect("the last name") as u32 + 1;
    assert_eq!(last, &("crate49999".to_string(), 1, last_col));
    assert!(
        error
            .message
            .starts_with("50000 unbound names: `crate0` (1:5)"),
        "{}",
        &error.message[..80]
    );
}
