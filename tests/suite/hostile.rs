//! Hostile inputs of SEMANTICS §7: nesting a million deep in the text, in
//! built terms and in evaluation; huge literals; exponential sharing; memory
//! bombs; the largest and smallest limits. Deep runs are on a thread with a
//! 2 MiB stack, so any native recursion on the depth would overflow it.
//! Every run goes through the harness: each machine gives a result or a
//! clear error, checked against its limits and compared with the stepper
//! where the stepper ran the same program.

use orrery::{
    parse, parse_bytes, print_limited, Arena, LimitKind, Limits, MachineKind, Node, Outcome, Prim,
    Program, Report, Rule, Term,
};

use crate::common::harness::{describe, Harness, Runs};
use crate::common::on_small_stack;

const DEEP: usize = 1_000_000;

/// Whether `outcome` is the integer `n`.
fn is_int(outcome: &Outcome, n: usize) -> bool {
    matches!(outcome, Outcome::Value(v) if v.as_int().is_some_and(|m| m as usize == n))
}

/// Whether `outcome` is the boolean `b`.
fn is_bool(outcome: &Outcome, b: bool) -> bool {
    matches!(outcome, Outcome::Value(v) if v.as_bool() == Some(b))
}

/// Whether `outcome` is the string `s`.
fn is_str(outcome: &Outcome, s: &str) -> bool {
    matches!(outcome, Outcome::Value(v) if v.as_str() == Some(s))
}

/// Whether `outcome` is the memory limit.
fn is_memory_limit(outcome: &Outcome) -> bool {
    matches!(outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory)
}

fn made(counts: &orrery::Counts, rule: Rule, n: usize) -> bool {
    counts.get(rule) == n as u64
}

/// Build `source(DEEP)`, parse it and run it on every machine through the
/// harness on a thread with a 2 MiB stack, with `limits`, and insist that
/// every report satisfies `check(DEEP, report)`. Every machine runs every
/// program a million deep: the stepper, once ten times slower than env and
/// cek here, now takes 10 to 650 ms for each (its runs take about as long
/// as env's and cek's; parsing each program takes longer than any run).
/// Then, under each limit of `also_within`, a machine whose run held no
/// more than that limit must give the same report again.
fn run_deep(
    source: impl Fn(usize) -> String,
    limits: Limits,
    also_within: &[usize],
    check: fn(usize, &Report) -> bool,
) {
    let text = source(DEEP);
    let also_within = also_within.to_vec();
    on_small_stack(move || {
        let arena = Arena::new();
        let program = match parse(&arena, &text) {
            Ok(p) => p,
            Err(e) => panic!("{e}"),
        };
        let mut h = Harness::new();
        let name = format!("{}…", text.chars().take(40).collect::<String>());
        let runs = h.run(&name, &program, &limits);
        h.expect(&runs, "the expected end", |r| check(DEEP, r));
        for memory in also_within {
            let within = limits.clone().with_memory(memory);
            for run in runs.runs.iter().filter(|r| r.peak <= memory) {
                let again = h.run_on(&[run.kind], &name, &program, &within);
                let same = again.reference().is_some_and(|r| *r == run.report);
                let why = again.reference().map(describe).unwrap_or_default();
                h.check(
                    same,
                    &name,
                    run.kind.name(),
                    within.fuel,
                    format!(
                        "held {} bytes under a limit of {memory}, yet {why}",
                        run.peak
                    ),
                );
            }
        }
        h.finish();
    });
}

/// Parse `source` and run it on every machine through `h`.
fn parse_and_run(h: &mut Harness, arena: &Arena, source: &str, limits: &Limits) -> Runs {
    let program = parse(arena, source).unwrap_or_else(|e| panic!("{e}"));
    h.run(source, &program, limits)
}

#[test]
fn a_million_nested_parentheses_parse_and_run() {
    on_small_stack(|| {
        let source = format!("{}41 + 1{}", "(".repeat(DEEP), ")".repeat(DEEP));
        let arena = Arena::new();
        let mut h = Harness::new();
        let runs = parse_and_run(&mut h, &arena, &source, &Limits::default());
        h.expect_ending(&runs, "value 42");
        h.finish();
    });
}

#[test]
fn a_million_unclosed_parentheses_is_a_clear_error() {
    on_small_stack(|| {
        let source = "(".repeat(DEEP);
        let arena = Arena::new();
        let err = parse(&arena, &source).unwrap_err();
        assert_eq!(err.line, 1);
        assert!(!err.message.is_empty());
    });
}

#[test]
fn a_million_pending_additions_complete_or_hit_the_memory_limit() {
    let sum = |n| format!("let rec sum n = if n == 0 then 0 else 1 + sum (n - 1) in sum {n}");
    run_deep(sum, Limits::default(), &[], |n, r| {
        is_int(&r.outcome, n) && made(&r.counts, Rule::BetaRec, n + 1)
    });
    // With a small memory limit the same run stops cleanly.
    for memory in [1 << 20, 4 << 20] {
        run_deep(sum, Limits::default().with_memory(memory), &[], |_, r| {
            is_memory_limit(&r.outcome)
        });
    }
}

#[test]
fn a_deep_built_term_validates_prints_compares_copies_and_reads_back() {
    on_small_stack(|| {
        let arena = Arena::new();
        // λ. λ. … λ. #0 + 1, and λ. λ. … λ. #(n-1), a million binders deep.
        let mut plus = arena.prim(Prim::Add, &[arena.var(0), arena.int(1)]);
        let mut outermost = arena.var(DEEP as u32 - 1);
        for _ in 0..DEEP {
            plus = arena.lam(plus);
            outermost = arena.lam(outermost);
        }
        let mut h = Harness::new();
        for (name, t) in [("λ… #0 + 1", plus), ("λ… #(n-1)", outermost)] {
            let program = Program::new(t).expect("closed and valid");
            let printed = print_limited(program.to_term(&arena), 1 << 20);
            assert!(printed.truncated);
            let other = Arena::new();
            let copy = other.copy_term(t);
            assert_eq!(copy, t);
            let runs = h.run(name, &program, &Limits::default());
            h.expect(
                &runs,
                "the term itself",
                |r| matches!(&r.outcome, Outcome::Value(v) if *v == t),
            );
        }
        h.finish();
    });
}

/// Walk a read-back list: `Cons(1, Cons(2, … Cons(n, Nil)))`.
fn is_list_up_to(list: &Term<'_>, n: usize) -> bool {
    let mut cell = list;
    let mut next = 1;
    while let Node::Con("Cons", [head, tail]) = cell.node() {
        if !matches!(head.node(), Node::Int(k) if *k as usize == next) {
            return false;
        }
        next += 1;
        cell = tail;
    }
    matches!(cell.node(), Node::Con("Nil", [])) && next == n + 1
}

#[test]
fn a_deep_list_value_reads_back_prints_and_drops() {
    let build = |n| {
        format!(
            "let rec build n acc = if n == 0 then acc else build (n - 1) (Cons(n, acc)) in build {n} Nil"
        )
    };
    run_deep(build, Limits::default(), &[64 << 20], |n, r| {
        let Outcome::Value(list) = &r.outcome else {
            return false;
        };
        let arena = Arena::new();
        let list = list.to_term(&arena);
        let printed = print_limited(list, 4096);
        printed.truncated && printed.text.starts_with("Cons(1, Cons(2, ") && is_list_up_to(list, n)
    });
}

#[test]
fn invalid_utf8_and_empty_input_are_syntax_errors() {
    let arena = Arena::new();
    let err = parse_bytes(&arena, b"let x = \"\xff\" in x").unwrap_err();
    assert_eq!((err.line, err.column), (1, 10));
    let err = parse_bytes(&arena, b"").unwrap_err();
    assert_eq!(err.line, 1);
    let err = parse_bytes(&arena, b"# only a comment\n").unwrap_err();
    assert!(err.line >= 1);
}

// ----- every construct a million deep, run on every machine ---------------

#[test]
fn a_million_applications_nested_left_and_right_run() {
    // f 1 1 … 1, the head nested a million deep: f returns itself.
    run_deep(
        |n| format!("let rec f x = f in f{}", " 1".repeat(n)),
        Limits::default(),
        &[],
        |n, r| {
            matches!(&r.outcome, Outcome::Value(v) if matches!(v.to_term(&Arena::new()).node(), Node::RecLam(_)))
                && made(&r.counts, Rule::BetaRec, n)
        },
    );
    // f (f (… (f 0))), the argument nested a million deep.
    run_deep(
        |n| format!("let f x = x + 1 in {}0{}", "f (".repeat(n), ")".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_int(&r.outcome, n) && made(&r.counts, Rule::Beta, n),
    );
}

#[test]
fn a_million_lambdas_applied_to_a_million_arguments_run() {
    // (\x. \x. … \x. x) 1 1 … 1 7: the innermost x is the last argument.
    run_deep(
        |n| format!("({}x){} 7", "\\x. ".repeat(n), " 1".repeat(n - 1)),
        Limits::default(),
        &[],
        |n, r| {
            is_int(&r.outcome, 7) && made(&r.counts, Rule::Beta, n) && r.counts.total() == n as u64
        },
    );
}

#[test]
fn a_million_nested_lets_run() {
    run_deep(
        |n| format!("let x = 0 in {}x", "let x = x + 1 in ".repeat(n)),
        Limits::default(),
        &[],
        |n, r| {
            is_int(&r.outcome, n)
                && made(&r.counts, Rule::Let, n + 1)
                && made(&r.counts, Rule::Prim, n)
        },
    );
}

#[test]
fn a_million_nested_conditionals_run() {
    // Nested in the then branch, in the else branch, and in the condition
    // (where every level is a pending evaluation context).
    run_deep(
        |n| format!("{}1{}", "if true then ".repeat(n), " else 2".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_int(&r.outcome, 1) && made(&r.counts, Rule::If, n),
    );
    run_deep(
        |n| format!("{}2", "if false then 1 else ".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_int(&r.outcome, 2) && made(&r.counts, Rule::If, n),
    );
    run_deep(
        |n| {
            format!(
                "{}true{}",
                "if ".repeat(n),
                " then true else false".repeat(n)
            )
        },
        Limits::default(),
        &[],
        |n, r| is_bool(&r.outcome, true) && made(&r.counts, Rule::If, n),
    );
}

#[test]
fn a_million_nested_cases_run() {
    // Nested in the scrutinee, and in an arm.
    run_deep(
        |n| format!("{}Z{}", "case ".repeat(n), " of { _ => Z }".repeat(n)),
        Limits::default(),
        &[],
        |n, r| {
            matches!(&r.outcome, Outcome::Value(v) if matches!(v.to_term(&Arena::new()).node(), Node::Con("Z", [])))
                && made(&r.counts, Rule::Case, n)
        },
    );
    run_deep(
        |n| format!("{}1{}", "case Z of { Z => ".repeat(n), " }".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_int(&r.outcome, 1) && made(&r.counts, Rule::Case, n),
    );
}

#[test]
fn a_million_nested_constructors_evaluate_read_back_and_print() {
    // The innermost field needs a contraction, so every level is a pending
    // context; the value is read back, walked, printed and dropped.
    run_deep(
        |n| format!("{}1 + 1{}", "S(".repeat(n), ")".repeat(n)),
        Limits::default(),
        &[],
        |n, r| {
            let Outcome::Value(value) = &r.outcome else {
                return false;
            };
            let arena = Arena::new();
            let mut v = value.to_term(&arena);
            let printed = print_limited(v, 64);
            let mut depth = 0;
            while let Node::Con("S", [inner]) = v.node() {
                v = inner;
                depth += 1;
            }
            depth == n
                && matches!(v.node(), Node::Int(2))
                && printed.truncated
                && printed.text.starts_with("S(S(S(")
                && r.counts.total() == 1
        },
    );
}

#[test]
fn a_million_nested_primitives_run() {
    // Left-nested (+ is left-associative), right-nested, unary minus, `not`.
    run_deep(
        |n| format!("1{}", " + 1".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_int(&r.outcome, n + 1) && made(&r.counts, Rule::Prim, n),
    );
    run_deep(
        |n| format!("{}0{}", "(1 + ".repeat(n), ")".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_int(&r.outcome, n) && made(&r.counts, Rule::Prim, n),
    );
    run_deep(
        |n| format!("{}5", "- ".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_int(&r.outcome, 5) && made(&r.counts, Rule::Prim, n),
    );
    run_deep(
        |n| format!("{}true", "not ".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_bool(&r.outcome, true) && made(&r.counts, Rule::If, n),
    );
}

#[test]
fn a_million_nested_concatenations_run() {
    // Empty strings around one letter: the nesting is hostile, the copying
    // is not (a million copies of a growing string would be quadratic on
    // any machine).
    run_deep(
        |n| format!("{}\"z\"", "\"\" ++ ".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_str(&r.outcome, "z") && made(&r.counts, Rule::Prim, n),
    );
    run_deep(
        |n| format!("{}\"z\"{}", "(".repeat(n), " ++ \"\")".repeat(n)),
        Limits::default(),
        &[],
        |n, r| is_str(&r.outcome, "z") && made(&r.counts, Rule::Prim, n),
    );
}

// ----- literals, encodings, empty input -------------------------------------

/// Parse `source` (bytes) and insist on a syntax error at `line`:`column`
/// whose message contains `fragment`.
fn syntax_error_at(source: &[u8], line: u32, column: u32, fragment: &str) {
    let arena = Arena::new();
    match parse_bytes(&arena, source) {
        Ok(_) => panic!("{:?} parsed", String::from_utf8_lossy(source)),
        Err(e) => assert!(
            (e.line, e.column) == (line, column) && e.message.contains(fragment),
            "{:?}: {e}",
            String::from_utf8_lossy(source)
        ),
    }
}

#[test]
fn integers_beyond_64_bits_are_located_syntax_errors() {
    let out_of_range = "integer literal out of range";
    syntax_error_at(b"9223372036854775808", 1, 1, out_of_range);
    syntax_error_at(b"1 +\n  99999999999999999999999", 2, 3, out_of_range);
    syntax_error_at(b"-9223372036854775809", 1, 1, out_of_range);
    // With a space the minus is negation, and the literal alone is too big.
    syntax_error_at(b"- 9223372036854775808", 1, 3, out_of_range);
    syntax_error_at(&[b'7'; 10_000], 1, 1, out_of_range);
}

#[test]
fn a_string_literal_of_32_mib_parses_runs_and_doubles() {
    on_small_stack(|| {
        let mib32 = 32 << 20;
        let source = format!("let s = \"{}\" in length (s ++ s)", "x".repeat(mib32));
        let arena = Arena::new();
        let limits = Limits::default().with_memory(512 << 20);
        let mut h = Harness::new();
        let runs = parse_and_run(&mut h, &arena, &source, &limits);
        h.expect_ending(&runs, &format!("value {}", 2 * mib32));
        // A million escapes in one literal.
        let source = format!("length \"{}\"", "\\u{1F600}\\n".repeat(DEEP));
        let runs = parse_and_run(&mut h, &arena, &source, &limits);
        h.expect_ending(&runs, &format!("value {}", 2 * DEEP));
        h.finish();
    });
}

#[test]
fn malformed_escapes_and_unterminated_strings_are_located_syntax_errors() {
    let malformed = "malformed escape";
    syntax_error_at(b"\"\\u{110000}\"", 1, 2, "not a Unicode scalar value");
    syntax_error_at(b"\"\\u{D800}\"", 1, 2, "not a Unicode scalar value");
    syntax_error_at(b"\"\\u{}\"", 1, 2, malformed);
    syntax_error_at(b"\"\\u{1234567}\"", 1, 2, malformed);
    syntax_error_at(b"\"\\u{FFFFFFFFFFFFFFFFFFFF}\"", 1, 2, malformed);
    syntax_error_at(b"\"\\u12\"", 1, 2, malformed);
    syntax_error_at(b"\"\\u{12", 1, 2, malformed);
    syntax_error_at(b"\"a\" ++\n  \"ok\\q\"", 2, 6, "unknown escape");
    syntax_error_at(b"x \"abc", 1, 3, "unterminated string");
    syntax_error_at(b"\"abc\\", 1, 1, "unterminated string");
    syntax_error_at(b"1 +\n\"", 2, 1, "unterminated string");
    // An unterminated string of 16 MiB is found, not scanned forever.
    let mut long = b"let s = \"".to_vec();
    long.extend(std::iter::repeat_n(b'y', 16 << 20));
    syntax_error_at(&long, 1, 9, "unterminated string");
}

#[test]
fn invalid_utf8_anywhere_is_a_located_syntax_error() {
    let invalid = "invalid UTF-8";
    syntax_error_at(b"1 # caf\xff\n", 1, 8, invalid); // in a comment
    syntax_error_at(b"let x\xff = 1 in x", 1, 6, invalid); // in a name
    syntax_error_at(b"\x80", 1, 1, invalid); // a lone continuation byte
    syntax_error_at(b"1 +\n\xc3\xa9 \xe2\x82", 2, 3, invalid); // cut short at the end
    syntax_error_at(b"\"\xc0\xaf\"", 1, 2, invalid); // an overlong encoding
    syntax_error_at(b"\"\xed\xa0\x80\"", 1, 2, invalid); // an encoded surrogate
    syntax_error_at(b"\"\xf4\x90\x80\x80\"", 1, 2, invalid); // beyond U+10FFFF
}

#[test]
fn empty_blank_and_comment_only_inputs_are_syntax_errors_at_the_end() {
    let end = "unexpected end of input";
    syntax_error_at(b"", 1, 1, end);
    syntax_error_at(b" \t\r\n ", 2, 2, end);
    syntax_error_at(b"# a\n# b", 2, 4, end);
    syntax_error_at(b"#", 1, 2, end);
    syntax_error_at(b"\n\n   # only a comment", 3, 20, end);
    let blank = " \n".repeat(DEEP);
    syntax_error_at(blank.as_bytes(), 1_000_001, 1, end);
}

// ----- exponential sharing -------------------------------------------------

/// `Pair(t, t)` nested `levels` times over `leaf`: a graph of `levels + 1`
/// nodes whose tree has `2^levels` leaves.
fn shared_pairs<'a>(arena: &'a Arena, leaf: &'a Term<'a>, levels: u32) -> &'a Term<'a> {
    (0..levels).fold(leaf, |t, _| arena.con("Pair", &[t, t]))
}

#[test]
fn a_term_of_tree_size_two_to_the_sixty_validates_compares_prints_copies_and_runs() {
    let arena = Arena::new();
    let t = shared_pairs(&arena, arena.int(1), 60);
    let program = Program::new(t).expect("valid");
    let other = Arena::new();
    let copy = other.copy_term(t);
    assert!(other.used_bytes() < 1 << 16, "the copy keeps the sharing");
    assert!(copy == t);
    // Built apart (no node in common), equal, then different at the bottom.
    assert!(shared_pairs(&other, other.int(1), 60) == t);
    assert!(shared_pairs(&other, other.int(2), 60) != t);
    let printed = print_limited(t, 4096);
    assert!(printed.truncated && printed.text.starts_with("Pair(Pair("));
    // The stepper hands the value back as it is. The program image keeps
    // the closed shared subterms shared, so preparing it costs its size;
    // env and cek then build the value as runtime data, one cell per path,
    // and stop at the memory limit (env's compiler once aborted the process
    // here on an allocation failure).
    let mut h = Harness::new();
    let limits = Limits::default().with_memory(16 << 20);
    let runs = h.run("2^60 pairs", &program, &limits);
    h.expect(&runs, "the term itself or the memory limit", |r| {
        matches!(&r.outcome, Outcome::Value(v) if *v == t) || is_memory_limit(&r.outcome)
    });
    if let Some(stepper) = MachineKind::from_name("stepper").and_then(|k| runs.of(k)) {
        h.check(
            matches!(&stepper.report.outcome, Outcome::Value(v) if *v == t),
            "2^60 pairs",
            "stepper",
            limits.fuel,
            describe(&stepper.report),
        );
    }
    // 1 + 1 at the bottom: evaluating the tree needs 2^60 contractions.
    let work = shared_pairs(
        &arena,
        arena.prim(Prim::Add, &[arena.int(1), arena.int(1)]),
        60,
    );
    let program = Program::new(work).expect("valid");
    let limits = Limits::default().with_fuel(100_000).with_memory(16 << 20);
    let runs = h.run("2^60 additions", &program, &limits);
    h.expect(&runs, "out of fuel or the memory limit", |r| {
        r.outcome == Outcome::OutOfFuel || is_memory_limit(&r.outcome)
    });
    h.finish();
}

#[test]
fn a_value_of_tree_size_two_to_the_sixty_is_built_by_sharing_and_read_back() {
    let grow = "let rec grow n x = if n == 0 then x else grow (n - 1) (Pair(x, x)) in ";
    let arena = Arena::new();
    let expected = shared_pairs(&arena, arena.int(1), 60);
    let limits = Limits::default().with_fuel(1_000_000).with_memory(16 << 20);
    let mut h = Harness::new();
    let source = format!("{grow}grow 60 1");
    let runs = parse_and_run(&mut h, &arena, &source, &limits);
    h.expect(
        &runs,
        "the shared pairs",
        |r| matches!(&r.outcome, Outcome::Value(v) if *v == expected),
    );
    // Read back in linear size: each level one term, reached twice.
    let program = parse(&arena, &source).unwrap();
    for &kind in MachineKind::enabled() {
        let runs = h.run_on(
            &[kind],
            "grow 60 1, read back",
            &program,
            &Limits::default(),
        );
        let Some(Outcome::Value(value)) = runs.reference().map(|r| r.outcome.clone()) else {
            continue; // the harness has said what it ended with
        };
        let out = Arena::new();
        let mut v = value.to_term(&out);
        let mut depth = 0;
        let mut shared = true;
        while let Node::Con("Pair", [l, r]) = v.node() {
            shared &= l.is_closed() && (std::ptr::eq(*l, *r) || depth == 59);
            v = l;
            depth += 1;
        }
        h.check(
            shared && depth == 60 && value.bytes() < 1 << 16 && out.allocated_bytes() < 1 << 20,
            "grow 60 1, read back",
            kind.name(),
            u64::MAX,
            format!(
                "{depth} levels, shared {shared}, {} bytes",
                out.allocated_bytes()
            ),
        );
    }
    // Read back down one path: 60 cases.
    let left = "let rec left t = case t of { Pair(a, b) => left a; _ => t } in left (grow 60 1)";
    let runs = parse_and_run(&mut h, &arena, &format!("{grow}{left}"), &limits);
    h.expect_ending(&runs, "value 1");
    h.expect_count(&runs, Rule::Case, 61);
    // Walking the whole tree needs 2^60 steps: out of fuel, not a hang.
    let size =
        "let rec size t = case t of { Pair(a, b) => size a + size b; _ => 1 } in size (grow 60 1)";
    let runs = parse_and_run(&mut h, &arena, &format!("{grow}{size}"), &limits);
    h.expect_ending(&runs, "out_of_fuel");
    // A primitive given the huge value fails on its type at once.
    let source = format!("{grow}let p = grow 60 1 in p == p");
    let runs = parse_and_run(&mut h, &arena, &source, &limits);
    h.expect_ending(&runs, "error type_mismatch");
    h.finish();
}

// ----- memory bombs and extreme limits --------------------------------------

#[test]
fn memory_bombs_stop_at_a_small_memory_limit() {
    let arena = Arena::new();
    let limits = Limits::default().with_fuel(u64::MAX).with_memory(16 << 20);
    let mut h = Harness::new();
    // A string doubled 64 times would be 2^64 bytes; a list of 10^8 cells.
    let doubling =
        "let rec dbl n s = if n == 0 then s else dbl (n - 1) (s ++ s) in length (dbl 64 \"x\")";
    let list = "let rec build n acc = if n == 0 then acc else build (n - 1) (Cons(n, acc)) in build 100000000 Nil";
    for (source, steps) in [(doubling, 1_000), (list, 10_000_000)] {
        let runs = parse_and_run(&mut h, &arena, source, &limits);
        h.expect(
            &runs,
            &format!("the memory limit within {steps} contractions"),
            |r| is_memory_limit(&r.outcome) && r.counts.total() < steps,
        );
    }
    h.finish();
}

#[test]
fn the_largest_fuel_and_memory_end_quick_programs_normally() {
    let arena = Arena::new();
    let limits = Limits::default()
        .with_fuel(u64::MAX)
        .with_memory(usize::MAX);
    let mut h = Harness::new();
    let runs = parse_and_run(&mut h, &arena, "(\\x. x + 1) 41", &limits);
    h.expect_ending(&runs, "value 42");
    h.expect(&runs, "2 contractions", |r| r.counts.total() == 2);
    let runs = parse_and_run(&mut h, &arena, "case Some(1 / 0) of { _ => 0 }", &limits);
    h.expect_ending(&runs, "error division_by_zero");
    h.finish();
}

#[test]
fn no_fuel_and_no_memory_are_outcomes_too() {
    let arena = Arena::new();
    let mut h = Harness::new();
    let no_fuel = Limits::default().with_fuel(0);
    let runs = parse_and_run(&mut h, &arena, "42", &no_fuel);
    h.expect_ending(&runs, "value 42");
    // Every contraction needs fuel, failed ones included (SEMANTICS §2).
    for source in ["1 + 1", "1 / 0", "(\\x. x) 1"] {
        let runs = parse_and_run(&mut h, &arena, source, &no_fuel);
        h.expect(&runs, "out of fuel after nothing", |r| {
            r.outcome == Outcome::OutOfFuel && r.counts.total() == 0
        });
    }
    let no_memory = Limits::default().with_memory(0);
    // Closures, strings and constructor cells are runtime data.
    for source in ["(\\x. x) 1", "\"a\" ++ \"b\"", "Pair(1 + 1, 2)"] {
        let runs = parse_and_run(&mut h, &arena, source, &no_memory);
        h.expect(&runs, "the memory limit", |r| is_memory_limit(&r.outcome));
    }
    // A literal needs no runtime data, except on env, whose compiled code
    // is runtime data (checked as it is compiled); cek keeps integers
    // inline, while the stepper builds the sum as a term.
    let literal = parse_and_run(&mut h, &arena, "42", &no_memory.clone().with_fuel(0));
    let sum = parse_and_run(&mut h, &arena, "1 + 1", &no_memory);
    for (runs, fits) in [
        (&literal, ["stepper", "cek"].as_slice()),
        (&sum, ["cek"].as_slice()),
    ] {
        for run in &runs.runs {
            let name = run.kind.name();
            let ok = if fits.contains(&name) {
                matches!(run.report.outcome, Outcome::Value(_))
            } else {
                is_memory_limit(&run.report.outcome)
            };
            h.check(
                ok,
                &runs.name,
                name,
                runs.limits.fuel,
                describe(&run.report),
            );
        }
    }
    h.finish();
}

/// A collection that the memory limit stops part way leaves the stepper's
/// heap torn; the run ends at the limit and says where without reading that
/// heap. And a stack growth the limit refuses, then makes after collecting,
/// was never held, so it does not count as the run's peak. (Two shapes
/// proptest found: `limit_shapes::deep_spines` at depth 36,554 with
/// 3,017,568 and 4,540,284 bytes.) Whole runs, and runs paused in slices,
/// whose pauses collect too.
#[test]
fn a_collection_under_the_memory_limit_ends_the_run_cleanly_or_keeps_within_it() {
    let depth = 36_554;
    let source = format!(
        "let f = \\x. {}x{} in let rec go n = if n == 0 then 0 else f n + go (n - 1) in go 1",
        "1 + (".repeat(depth),
        ")".repeat(depth)
    );
    let program = Program::parse(&source).expect("parses");
    for memory in [2_900_000, 3_017_568, 3_100_000, 4_540_284, 4_600_000] {
        let limits = Limits::default().with_fuel(5_000_000).with_memory(memory);
        for &kind in MachineKind::enabled() {
            let program = program.clone();
            let limits = limits.clone();
            let (whole, sliced) = on_small_stack(move || {
                let mut machine = kind.machine();
                let report = machine.run(&program, &limits);
                let whole = (report, machine.peak_bytes());
                let sliced = kind
                    .machine()
                    .start(&program, &limits.clone().with_fuel(0))
                    .map(|mut run| {
                        let mut report = run.resume(1);
                        while report.outcome == Outcome::OutOfFuel
                            && report.counts.fuel() < 5_000_000
                        {
                            report = run.resume(1);
                        }
                        (report, run.peak_bytes())
                    });
                (whole, sliced)
            });
            for (report, peak) in std::iter::once(whole).chain(sliced) {
                match &report.outcome {
                    Outcome::Limit(l) if l.kind() == LimitKind::Memory => {}
                    Outcome::Value(_) => assert!(
                        peak <= memory,
                        "{} held {peak} bytes under {memory} and was not stopped",
                        kind.name()
                    ),
                    other => panic!("{} at {memory}: {}", kind.name(), other.name()),
                }
            }
        }
    }
}
