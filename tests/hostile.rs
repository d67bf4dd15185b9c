//! Hostile inputs of DESIGN §6: nesting a million deep in the text, in built
//! terms and in evaluation. Each runs on a thread with a 2 MiB stack, so any
//! native recursion on the depth would overflow it; each must give a result or
//! a clear error on every machine.

mod common;

use orrery::{
    parse, parse_bytes, print_limited, Arena, Counts, LimitKind, Limits, MachineKind, Node,
    Outcome, Prim, Program, Rule,
};

const DEEP: usize = 1_000_000;

/// Run `f` on a thread with a small stack and wait for it.
fn small_stack(f: impl FnOnce() + Send + 'static) {
    std::thread::Builder::new()
        .stack_size(2 << 20)
        .spawn(f)
        .expect("spawn a test thread")
        .join()
        .expect("the test thread finished without panicking");
}

#[test]
fn a_million_nested_parentheses_parse_and_run() {
    small_stack(|| {
        let source = format!("{}41 + 1{}", "(".repeat(DEEP), ")".repeat(DEEP));
        let arena = Arena::new();
        let program = parse(&arena, &source).expect("deep parentheses parse");
        for machine in MachineKind::enabled() {
            let report = machine.run(&program, &Limits::default(), &arena);
            assert_eq!(
                report.outcome,
                Outcome::Value(arena.int(42)),
                "{}",
                machine.name()
            );
        }
    });
}

#[test]
fn a_million_unclosed_parentheses_is_a_clear_error() {
    small_stack(|| {
        let source = "(".repeat(DEEP);
        let arena = Arena::new();
        let err = parse(&arena, &source).unwrap_err();
        assert_eq!(err.line, 1);
        assert!(!err.message.is_empty());
    });
}

#[test]
fn a_million_pending_additions_complete_or_hit_the_memory_limit() {
    for &machine in MachineKind::enabled() {
        // The stepper needs about 20 s for a million pending additions
        // (its live term is rebuilt by substitution), so it gets fewer.
        let n = if machine.name() == "stepper" {
            STEPPER_DEEP
        } else {
            DEEP
        };
        small_stack(move || {
            let source =
                format!("let rec sum n = if n == 0 then 0 else 1 + sum (n - 1) in sum {n}");
            let arena = Arena::new();
            let program = parse(&arena, &source).unwrap();
            let limits = Limits::default().with_memory(1 << 30);
            let report = machine.run(&program, &limits, &arena);
            assert!(is_int(&report.outcome, n), "{}", machine.name());
            // With a small memory limit the same run must stop cleanly.
            let tight = machine.run(&program, &Limits::default().with_memory(1 << 20), &arena);
            assert!(
                matches!(tight.outcome, Outcome::Limit(ref l) if l.kind() == LimitKind::Memory),
                "{}: {:?}",
                machine.name(),
                tight.outcome
            );
        });
    }
}

#[test]
fn a_deep_built_term_validates_prints_compares_and_copies() {
    small_stack(|| {
        let arena = Arena::new();
        // λ. λ. … λ. #0 + 1, a million binders deep.
        let mut t = arena.prim(Prim::Add, &[arena.var(0), arena.int(1)]);
        for _ in 0..DEEP {
            t = arena.lam(t);
        }
        let program = Program::new(t).expect("closed and valid");
        let printed = print_limited(program.term(), 1 << 20);
        assert!(printed.truncated);
        let other = Arena::new();
        let copy = other.copy_term(t);
        assert_eq!(copy, t);
        for machine in MachineKind::enabled() {
            let report = machine.run(&program, &Limits::default(), &arena);
            assert!(
                matches!(report.outcome, Outcome::Value(v) if v == t),
                "{}",
                machine.name()
            );
        }
    });
}

#[test]
fn a_deep_list_value_reads_back_prints_and_drops() {
    for &machine in MachineKind::enabled() {
        // The stepper takes about 30 s to build a million cells, so it
        // builds fewer.
        let n = if machine.name() == "stepper" {
            STEPPER_DEEP
        } else {
            DEEP
        };
        small_stack(move || {
            let source = format!(
                "let rec build n acc = if n == 0 then acc else build (n - 1) (Cons(n, acc)) in build {n} Nil"
            );
            let arena = Arena::new();
            let program = parse(&arena, &source).unwrap();
            // The stepper keeps two copies of its live term while compacting
            // (DEVELOPERS.md), so a long list needs more than the default.
            let limits = Limits::default().with_memory(1 << 30);
            let report = machine.run(&program, &limits, &arena);
            let Outcome::Value(list) = report.outcome else {
                panic!("{}: {:?}", machine.name(), report.outcome);
            };
            let printed = print_limited(list, 4096);
            assert!(printed.truncated && printed.text.starts_with("Cons(1, Cons(2, "));
            // Walk it: 1, 2, …, n, Nil.
            let mut cell = list;
            let mut next = 1;
            while let Node::Con("Cons", [head, tail]) = cell.node() {
                assert!(matches!(head.node(), Node::Int(k) if *k as usize == next));
                next += 1;
                cell = tail;
            }
            assert!(matches!(cell.node(), Node::Con("Nil", [])) && next == n + 1);
        });
    }
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

#[test]
fn a_long_tail_loop_runs_in_small_memory_on_every_machine() {
    // Each round builds new terms (the stepper substitutes into the body), so
    // without reclaiming, a million rounds would need hundreds of MiB.
    let source = "let rec spin n = if n == 0 then \"done\" else spin (n - 1) in spin 1000000";
    let arena = Arena::new();
    let program = parse(&arena, source).unwrap();
    let limits = Limits::default().with_memory(8 << 20);
    for machine in MachineKind::enabled() {
        let report = machine.run(&program, &limits, &arena);
        assert_eq!(
            report.outcome,
            Outcome::Value(arena.string("done")),
            "{}",
            machine.name()
        );
        assert_eq!(report.counts.get(orrery::Rule::BetaRec), 1_000_001);
    }
}

// ----- every construct a million deep, run on every machine ---------------

/// How deep the stepper's programs below nest. The stepper rebuilds its
/// million-node live term by substitution and takes 5 to 30 seconds for each
/// million-deep program here (about ten times env or cek), so it runs them a
/// hundred thousand deep: still fifty times deeper than native recursion on
/// a 2 MiB stack could go.
const STEPPER_DEEP: usize = 100_000;

/// Limits for the deep programs: the stepper's live term is rebuilt by
/// substitution and it keeps about three copies while compacting
/// (DEVELOPERS.md), and env compiles a million-node program; both need more
/// than the default 256 MiB.
fn deep_limits() -> Limits {
    Limits::default().with_memory(1 << 30)
}

/// For each enabled machine: build the program `source(n)` with `n` levels
/// (a million, or [`STEPPER_DEEP`] for the stepper), parse it and run it on
/// a thread with a 2 MiB stack, and insist that `check(n, outcome, counts)`.
/// Machines that share a depth share one parse.
fn run_deep(source: fn(usize) -> String, check: fn(usize, &Outcome<'_>, &Counts) -> bool) {
    let depth = |m: &MachineKind| {
        if m.name() == "stepper" {
            STEPPER_DEEP
        } else {
            DEEP
        }
    };
    for n in [DEEP, STEPPER_DEEP] {
        let machines: Vec<MachineKind> = MachineKind::enabled()
            .iter()
            .copied()
            .filter(|m| depth(m) == n)
            .collect();
        if machines.is_empty() {
            continue;
        }
        let text = source(n);
        small_stack(move || {
            let arena = Arena::new();
            let program = match parse(&arena, &text) {
                Ok(p) => p,
                Err(e) => panic!("{e}"),
            };
            for machine in machines {
                let report = machine.run(&program, &deep_limits(), &arena);
                assert!(
                    check(n, &report.outcome, &report.counts),
                    "{} at depth {n}: {} after {}",
                    machine.name(),
                    report.outcome.name(),
                    report.counts
                );
            }
        });
    }
}

/// Whether `outcome` is the integer `n`.
fn is_int(outcome: &Outcome<'_>, n: usize) -> bool {
    matches!(outcome, Outcome::Value(v) if matches!(v.node(), Node::Int(m) if *m as usize == n))
}

/// Whether `outcome` is the boolean `b`.
fn is_bool(outcome: &Outcome<'_>, b: bool) -> bool {
    matches!(outcome, Outcome::Value(v) if matches!(v.node(), Node::Bool(x) if *x == b))
}

/// Whether `outcome` is the string `s`.
fn is_str(outcome: &Outcome<'_>, s: &str) -> bool {
    matches!(outcome, Outcome::Value(v) if matches!(v.node(), Node::Str(x) if *x == s))
}

fn made(counts: &Counts, rule: Rule, n: usize) -> bool {
    counts.get(rule) == n as u64
}

#[test]
fn a_million_applications_nested_left_and_right_run() {
    // f 1 1 … 1, the head nested a million deep: f returns itself.
    run_deep(
        |n| format!("let rec f x = f in f{}", " 1".repeat(n)),
        |n, o, c| {
            matches!(o, Outcome::Value(v) if matches!(v.node(), Node::RecLam(_)))
                && made(c, Rule::BetaRec, n)
        },
    );
    // f (f (… (f 0))), the argument nested a million deep.
    run_deep(
        |n| format!("let f x = x + 1 in {}0{}", "f (".repeat(n), ")".repeat(n)),
        |n, o, c| is_int(o, n) && made(c, Rule::Beta, n),
    );
}

#[test]
fn a_million_lambdas_applied_to_a_million_arguments_run() {
    // (\x. \x. … \x. x) 1 1 … 1 7: the innermost x is the last argument.
    run_deep(
        |n| format!("({}x){} 7", "\\x. ".repeat(n), " 1".repeat(n - 1)),
        |n, o, c| is_int(o, 7) && made(c, Rule::Beta, n) && c.total() == n as u64,
    );
}

#[test]
fn a_million_nested_lets_run() {
    run_deep(
        |n| format!("let x = 0 in {}x", "let x = x + 1 in ".repeat(n)),
        |n, o, c| is_int(o, n) && made(c, Rule::Let, n + 1) && made(c, Rule::Prim, n),
    );
}

#[test]
fn a_million_nested_conditionals_run() {
    // Nested in the then branch, in the else branch, and in the condition
    // (where every level is a pending evaluation context).
    run_deep(
        |n| format!("{}1{}", "if true then ".repeat(n), " else 2".repeat(n)),
        |n, o, c| is_int(o, 1) && made(c, Rule::If, n),
    );
    run_deep(
        |n| format!("{}2", "if false then 1 else ".repeat(n)),
        |n, o, c| is_int(o, 2) && made(c, Rule::If, n),
    );
    run_deep(
        |n| {
            format!(
                "{}true{}",
                "if ".repeat(n),
                " then true else false".repeat(n)
            )
        },
        |n, o, c| is_bool(o, true) && made(c, Rule::If, n),
    );
}

#[test]
fn a_million_nested_cases_run() {
    // Nested in the scrutinee, and in an arm.
    run_deep(
        |n| format!("{}Z{}", "case ".repeat(n), " of { _ => Z }".repeat(n)),
        |n, o, c| {
            matches!(o, Outcome::Value(v) if matches!(v.node(), Node::Con("Z", [])))
                && made(c, Rule::Case, n)
        },
    );
    run_deep(
        |n| format!("{}1{}", "case Z of { Z => ".repeat(n), " }".repeat(n)),
        |n, o, c| is_int(o, 1) && made(c, Rule::Case, n),
    );
}

#[test]
fn a_million_nested_constructors_evaluate_read_back_and_print() {
    // The innermost field needs a contraction, so every level is a pending
    // context; the value is read back, walked, printed and dropped.
    run_deep(
        |n| format!("{}1 + 1{}", "S(".repeat(n), ")".repeat(n)),
        |n, o, c| {
            let Outcome::Value(mut v) = o else {
                return false;
            };
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
                && c.total() == 1
        },
    );
}

#[test]
fn a_million_nested_primitives_run() {
    // Left-nested (+ is left-associative), right-nested, unary minus, `not`.
    run_deep(
        |n| format!("1{}", " + 1".repeat(n)),
        |n, o, c| is_int(o, n + 1) && made(c, Rule::Prim, n),
    );
    run_deep(
        |n| format!("{}0{}", "(1 + ".repeat(n), ")".repeat(n)),
        |n, o, c| is_int(o, n) && made(c, Rule::Prim, n),
    );
    run_deep(
        |n| format!("{}5", "- ".repeat(n)),
        |n, o, c| is_int(o, 5) && made(c, Rule::Prim, n),
    );
    run_deep(
        |n| format!("{}true", "not ".repeat(n)),
        |n, o, c| is_bool(o, true) && made(c, Rule::If, n),
    );
}

#[test]
fn a_million_nested_concatenations_run() {
    // Empty strings around one letter: the nesting is hostile, the copying
    // is not (a million copies of a growing string would be quadratic on
    // any machine).
    run_deep(
        |n| format!("{}\"z\"", "\"\" ++ ".repeat(n)),
        |n, o, c| is_str(o, "z") && made(c, Rule::Prim, n),
    );
    run_deep(
        |n| format!("{}\"z\"{}", "(".repeat(n), " ++ \"\")".repeat(n)),
        |n, o, c| is_str(o, "z") && made(c, Rule::Prim, n),
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

/// Run `source` on every enabled machine under `limits`, returning each
/// machine's name with its report.
fn run_everywhere<'a>(
    arena: &'a Arena,
    source: &str,
    limits: &Limits,
) -> Vec<(&'static str, orrery::Report<'a>)> {
    let program = parse(arena, source).unwrap_or_else(|e| panic!("{e}"));
    MachineKind::enabled()
        .iter()
        .map(|m| (m.name(), m.run(&program, limits, arena)))
        .collect()
}

/// Whether `outcome` is an evaluation error of `kind`.
fn is_error(outcome: &Outcome<'_>, kind: orrery::ErrorKind) -> bool {
    matches!(outcome, Outcome::Error(e) if e.kind() == kind)
}

/// Whether `outcome` is the memory limit.
fn is_memory_limit(outcome: &Outcome<'_>) -> bool {
    matches!(outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory)
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
fn the_smallest_integer_is_a_literal_and_overflows_where_it_should() {
    let arena = Arena::new();
    let none = Limits::default();
    for (name, r) in run_everywhere(&arena, "-9223372036854775808", &none) {
        assert_eq!(r.outcome, Outcome::Value(arena.int(i64::MIN)), "{name}");
        assert_eq!(r.counts.total(), 0, "{name}");
    }
    for (name, r) in run_everywhere(&arena, "decimal (-9223372036854775808)", &none) {
        assert_eq!(
            r.outcome,
            Outcome::Value(arena.string("-9223372036854775808")),
            "{name}"
        );
    }
    for source in [
        "-9223372036854775808 / -1",
        "-9223372036854775808 % -1",
        "-(-9223372036854775808)",
        "-9223372036854775808 - 1",
        "-9223372036854775808 * -1",
    ] {
        for (name, r) in run_everywhere(&arena, source, &none) {
            assert!(
                is_error(&r.outcome, orrery::ErrorKind::IntegerOverflow),
                "{name}: {source}: {:?}",
                r.outcome
            );
        }
    }
}

#[test]
fn a_string_literal_of_32_mib_parses_runs_and_doubles() {
    small_stack(|| {
        let mib32 = 32 << 20;
        let source = format!("let s = \"{}\" in length (s ++ s)", "x".repeat(mib32));
        let arena = Arena::new();
        let limits = Limits::default().with_memory(512 << 20);
        for (name, r) in run_everywhere(&arena, &source, &limits) {
            assert!(
                is_int(&r.outcome, 2 * mib32),
                "{name}: {:?}",
                r.outcome.name()
            );
        }
        // A million escapes in one literal.
        let source = format!("length \"{}\"", "\\u{1F600}\\n".repeat(DEEP));
        for (name, r) in run_everywhere(&arena, &source, &limits) {
            assert!(
                is_int(&r.outcome, 2 * DEEP),
                "{name}: {:?}",
                r.outcome.name()
            );
        }
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
fn shared_pairs<'a>(
    arena: &'a Arena,
    leaf: &'a orrery::Term<'a>,
    levels: u32,
) -> &'a orrery::Term<'a> {
    (0..levels).fold(leaf, |t, _| arena.con("Pair", &[t, t]))
}

#[test]
fn a_term_of_tree_size_two_to_the_sixty_validates_compares_prints_and_copies() {
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
    // The stepper hands the value back as it is; cek makes it runtime data
    // (a tree) and stops at the memory limit. env is tested apart (below).
    for &machine in MachineKind::enabled() {
        let limits = Limits::default().with_memory(16 << 20);
        let outcome = match machine.name() {
            "env" => continue,
            _ => machine.run(&program, &limits, &arena).outcome,
        };
        match machine.name() {
            "stepper" => assert!(matches!(outcome, Outcome::Value(v) if v == t)),
            _ => assert!(
                matches!(outcome, Outcome::Value(v) if v == t) || is_memory_limit(&outcome),
                "{}: {:?}",
                machine.name(),
                outcome.name()
            ),
        }
    }
    // 1 + 1 at the bottom: evaluating the tree needs 2^60 contractions.
    let work = shared_pairs(
        &arena,
        arena.prim(Prim::Add, &[arena.int(1), arena.int(1)]),
        60,
    );
    let program = Program::new(work).expect("valid");
    let limits = Limits::default().with_fuel(100_000).with_memory(16 << 20);
    for &machine in MachineKind::enabled() {
        if machine.name() == "env" {
            continue;
        }
        let report = machine.run(&program, &limits, &arena);
        assert!(
            report.outcome == Outcome::OutOfFuel || is_memory_limit(&report.outcome),
            "{}: {:?}",
            machine.name(),
            report.outcome.name()
        );
    }
}

/// env compiles a program's shared subterms once per path to them, so a
/// program whose graph is small but whose tree is huge would unfold in its
/// tree size; its compiler stops at the memory limit instead (this test once
/// aborted the process on an allocation failure).
#[test]
#[cfg(feature = "env")]
fn env_runs_a_program_of_tree_size_two_to_the_sixty() {
    let arena = Arena::new();
    let program = Program::new(shared_pairs(&arena, arena.int(1), 60)).expect("valid");
    let limits = Limits::default().with_memory(16 << 20);
    let outcome = MachineKind::Env.run(&program, &limits, &arena).outcome;
    assert!(matches!(outcome, Outcome::Value(_)) || is_memory_limit(&outcome));
}

#[test]
fn a_value_of_tree_size_two_to_the_sixty_is_built_by_sharing_and_read_back() {
    let grow = "let rec grow n x = if n == 0 then x else grow (n - 1) (Pair(x, x)) in ";
    let arena = Arena::new();
    let expected = shared_pairs(&arena, arena.int(1), 60);
    let limits = Limits::default().with_fuel(1_000_000).with_memory(16 << 20);
    for (name, r) in run_everywhere(&arena, &format!("{grow}grow 60 1"), &limits) {
        assert!(
            matches!(r.outcome, Outcome::Value(v) if v == expected),
            "{name}: {:?}",
            r.outcome.name()
        );
    }
    // Read back down one path: 60 cases.
    let left = "let rec left t = case t of { Pair(a, b) => left a; _ => t } in left (grow 60 1)";
    for (name, r) in run_everywhere(&arena, &format!("{grow}{left}"), &limits) {
        assert!(is_int(&r.outcome, 1), "{name}: {:?}", r.outcome.name());
        assert_eq!(r.counts.get(Rule::Case), 61, "{name}");
    }
    // Walking the whole tree needs 2^60 steps: out of fuel, not a hang.
    let size =
        "let rec size t = case t of { Pair(a, b) => size a + size b; _ => 1 } in size (grow 60 1)";
    for (name, r) in run_everywhere(&arena, &format!("{grow}{size}"), &limits) {
        assert_eq!(r.outcome, Outcome::OutOfFuel, "{name}");
    }
    // A primitive given the huge value fails on its type at once.
    for (name, r) in run_everywhere(
        &arena,
        &format!("{grow}let p = grow 60 1 in p == p"),
        &limits,
    ) {
        assert!(
            is_error(&r.outcome, orrery::ErrorKind::TypeMismatch),
            "{name}"
        );
    }
}

// ----- memory bombs and extreme limits --------------------------------------

#[test]
fn memory_bombs_stop_at_a_small_memory_limit() {
    let arena = Arena::new();
    let limits = Limits::default().with_fuel(u64::MAX).with_memory(16 << 20);
    // A string doubled 64 times would be 2^64 bytes.
    let doubling =
        "let rec dbl n s = if n == 0 then s else dbl (n - 1) (s ++ s) in length (dbl 64 \"x\")";
    stops_at_memory_limit_within(&arena, doubling, &limits, 1_000);
    // A list of 10^8 cells.
    let list = "let rec build n acc = if n == 0 then acc else build (n - 1) (Cons(n, acc)) in build 100000000 Nil";
    stops_at_memory_limit_within(&arena, list, &limits, 10_000_000);
}

/// Every machine stops `source` at the memory limit, within `steps`
/// contractions.
fn stops_at_memory_limit_within(arena: &Arena, source: &str, limits: &Limits, steps: u64) {
    for (name, r) in run_everywhere(arena, source, limits) {
        assert!(
            is_memory_limit(&r.outcome),
            "{name}: {:?}",
            r.outcome.name()
        );
        assert!(r.counts.total() < steps, "{name}: stopped late");
    }
}

#[test]
fn the_largest_fuel_and_memory_end_quick_programs_normally() {
    let arena = Arena::new();
    let limits = Limits::default()
        .with_fuel(u64::MAX)
        .with_memory(usize::MAX);
    for (name, r) in run_everywhere(&arena, "(\\x. x + 1) 41", &limits) {
        assert_eq!(r.outcome, Outcome::Value(arena.int(42)), "{name}");
        assert_eq!(r.counts.total(), 2, "{name}");
    }
    for (name, r) in run_everywhere(&arena, "case Some(1 / 0) of { _ => 0 }", &limits) {
        assert!(
            is_error(&r.outcome, orrery::ErrorKind::DivisionByZero),
            "{name}"
        );
    }
}

#[test]
fn no_fuel_and_no_memory_are_outcomes_too() {
    let arena = Arena::new();
    let no_fuel = Limits::default().with_fuel(0);
    for (name, r) in run_everywhere(&arena, "42", &no_fuel) {
        assert_eq!(r.outcome, Outcome::Value(arena.int(42)), "{name}");
    }
    // Every contraction needs fuel, failed ones included (DESIGN §1).
    for source in ["1 + 1", "1 / 0", "(\\x. x) 1"] {
        for (name, r) in run_everywhere(&arena, source, &no_fuel) {
            assert_eq!(r.outcome, Outcome::OutOfFuel, "{name}: {source}");
            assert_eq!(r.counts.total(), 0, "{name}");
        }
    }
    let no_memory = Limits::default().with_memory(0);
    // A literal needs no runtime data, except on env, whose compiled code is
    // runtime data (checked as it is compiled).
    for (name, r) in run_everywhere(&arena, "42", &no_memory.clone().with_fuel(0)) {
        match name {
            "env" => assert!(is_memory_limit(&r.outcome), "{name}: {:?}", r.outcome),
            _ => assert_eq!(r.outcome, Outcome::Value(arena.int(42)), "{name}"),
        }
    }
    // Closures, strings and constructor cells are runtime data.
    for source in ["(\\x. x) 1", "\"a\" ++ \"b\"", "Pair(1 + 1, 2)"] {
        for (name, r) in run_everywhere(&arena, source, &no_memory) {
            assert!(
                is_memory_limit(&r.outcome),
                "{name}: {source}: {:?}",
                r.outcome
            );
        }
    }
    // cek keeps integers inline; the stepper builds the sum as a term, and
    // env counts its compiled code as runtime data.
    for (name, r) in run_everywhere(&arena, "1 + 1", &no_memory) {
        match name {
            "cek" => assert_eq!(r.outcome, Outcome::Value(arena.int(2)), "{name}"),
            _ => assert!(is_memory_limit(&r.outcome), "{name}: {:?}", r.outcome),
        }
    }
}
