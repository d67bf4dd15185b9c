//! Hostile inputs of DESIGN §6: nesting a million deep in the text, in built
//! terms and in evaluation. Each runs on a thread with a 2 MiB stack, so any
//! native recursion on the depth would overflow it; each must give a result or
//! a clear error on every machine.

mod common;

use orrery::{
    parse, parse_bytes, print_limited, Arena, Limits, MachineKind, Outcome, Prim, Program,
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
    small_stack(|| {
        let source = "let rec sum n = if n == 0 then 0 else 1 + sum (n - 1) in sum 1000000";
        let arena = Arena::new();
        let program = parse(&arena, source).unwrap();
        let limits = Limits::default().with_memory(1 << 30);
        for machine in MachineKind::enabled() {
            let report = machine.run(&program, &limits, &arena);
            match report.outcome {
                Outcome::Value(v) => assert_eq!(v, arena.int(1_000_000), "{}", machine.name()),
                Outcome::Limit(l) => assert_eq!(l.kind(), orrery::LimitKind::Memory),
                other => panic!("{}: {other:?}", machine.name()),
            }
            // With a small memory limit the same run must stop cleanly.
            let tight = machine.run(&program, &Limits::default().with_memory(1 << 20), &arena);
            assert!(
                matches!(tight.outcome, Outcome::Limit(_)),
                "{}: {:?}",
                machine.name(),
                tight.outcome
            );
        }
    });
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
    small_stack(|| {
        let source = "let rec build n acc = if n == 0 then acc else build (n - 1) (Cons(n, acc)) in build 1000000 Nil";
        let arena = Arena::new();
        let program = parse(&arena, source).unwrap();
        // The stepper keeps two copies of its live term while compacting
        // (DEVELOPERS.md), so a 10^6-cell list needs more than the default.
        let limits = Limits::default().with_memory(1 << 30);
        let mut values = Vec::new();
        for machine in MachineKind::enabled() {
            let report = machine.run(&program, &limits, &arena);
            match report.outcome {
                Outcome::Value(v) => values.push(v),
                other => panic!("{}: {other:?}", machine.name()),
            }
        }
        for v in &values {
            assert_eq!(*v, values[0]);
            let printed = print_limited(v, 4096);
            assert!(printed.truncated && printed.text.starts_with("Cons(1, Cons(2, "));
        }
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
