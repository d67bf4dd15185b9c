//! Where a run stopped (issue 12): the redex's span and the backtrace of
//! pending calls, the same on every machine of the table. The backtrace is
//! the call marks of the evaluation context (Clements and Felleisen, "A
//! tail-recursive machine with stack inspection", TOPLAS 26(6), 2004): a
//! call leaves a mark, a value drops it, a tail call replaces it. Every
//! check runs on every machine, and the harness compares each machine's
//! location with the stepper's at every fuel bound.

use orrery::{
    Arena, Datum, ErrorKind, HostFunctions, Limits, Location, MachineKind, Outcome, Prim, Program,
    Span, BACKTRACE_ENDS,
};

use crate::common::harness::Harness;

/// A division by zero three calls deep.
const TARIFF: &str = "let share n = 100 / n in
let split n = 1 + share n in
let plan n = 2 * split n in
plan 0";

/// Each frame as (name, line, column).
fn frames(location: &Location) -> Vec<(Option<&str>, u32, u32)> {
    location
        .backtrace
        .frames
        .iter()
        .map(|f| {
            let site = f.site.unwrap_or_default();
            (f.name.as_deref(), site.line, site.col)
        })
        .collect()
}

/// The location of `program`'s run on `kind`.
fn located(kind: MachineKind, program: &Program, limits: &Limits) -> Location {
    let report = kind.run(program, limits);
    report
        .location
        .unwrap_or_else(|| panic!("{}: no location for {:?}", kind.name(), report.outcome))
}

#[test]
fn a_division_by_zero_three_calls_deep_names_each_call_and_its_site() {
    let program = Program::parse(TARIFF).unwrap();
    for &kind in MachineKind::enabled() {
        let report = kind.run(&program, &Limits::default());
        assert!(
            matches!(&report.outcome, Outcome::Error(e) if e.kind() == ErrorKind::DivisionByZero),
            "{}",
            kind.name()
        );
        let location = report.location.unwrap();
        let at = location.span.unwrap();
        // `100 / n`, bytes 14..21 of line 1.
        assert_eq!(
            (at.line, at.col, at.start, at.end),
            (1, 15, 14, 21),
            "{}",
            kind.name()
        );
        assert_eq!(
            frames(&location),
            [
                (Some("share"), 2, 19),
                (Some("split"), 3, 18),
                (Some("plan"), 4, 1)
            ],
            "{}",
            kind.name()
        );
        assert_eq!(location.backtrace.omitted, 0);
    }
}

#[test]
fn every_fuel_bound_stops_at_the_same_place_on_every_machine() {
    // The harness compares each machine's location with the stepper's at
    // every bound; the stops also walk into the calls one by one.
    let program = Program::parse(TARIFF).unwrap();
    let mut h = Harness::new();
    let mut depths = Vec::new();
    h.every_bound(
        "the tariff",
        &program,
        &Limits::default(),
        |_, bound, runs| {
            if let Some(location) = runs.reference().and_then(|r| r.location.as_ref()) {
                depths.push((bound, location.backtrace.depth()));
            }
        },
    );
    h.finish();
    // let, let, let, then each call: depth 1, 2, 3, and the division at 3.
    let deepest: Vec<u64> = depths.iter().map(|&(_, d)| d).collect();
    assert_eq!(&deepest[..8], &[0, 0, 0, 0, 1, 2, 3, 3]);
}

#[test]
fn each_kind_of_stuck_redex_is_pointed_at() {
    // (source, the error, the line and column of the redex)
    let cases = [
        ("let fee = 3 in\n  fee 1", ErrorKind::NotAFunction, (2, 3)),
        (
            "let open = 3 in\nif open then 1 else 2",
            ErrorKind::NotABoolean,
            (2, 1),
        ),
        (
            "let bed = Some(2) in\n  case bed of { Nil => 0 }",
            ErrorKind::NoMatchingCase,
            (2, 3),
        ),
        (
            "let tray = \"ab\" in 1 + (tray ++ 2)",
            ErrorKind::TypeMismatch,
            (1, 25),
        ),
    ];
    for (source, kind_of_error, (line, col)) in cases {
        let program = Program::parse(source).unwrap();
        for &kind in MachineKind::enabled() {
            let report = kind.run(&program, &Limits::default());
            assert!(
                matches!(&report.outcome, Outcome::Error(e) if e.kind() == kind_of_error),
                "{source} on {}: {:?}",
                kind.name(),
                report.outcome
            );
            let at = report.location.unwrap().span.unwrap();
            assert_eq!(
                (at.line, at.col),
                (line, col),
                "{source} on {}",
                kind.name()
            );
        }
    }
}

#[test]
fn a_host_error_reports_its_call_site() {
    let mut host = HostFunctions::new();
    host.register("soil_ph", |bed: i64| {
        if bed > 3 {
            Err(format!("no sensor in bed {bed}"))
        } else {
            Ok(7)
        }
    })
    .unwrap();
    let source = "let read b = soil_ph b in\nread 1 + read 9";
    let program = Program::parse_with(source, &host).unwrap();
    for &kind in MachineKind::enabled() {
        let report = kind.run(&program, &Limits::default());
        assert!(matches!(&report.outcome, Outcome::Error(e) if e.kind() == ErrorKind::HostError));
        let location = report.location.unwrap();
        let at = location.span.unwrap();
        assert_eq!((at.line, at.col), (1, 14), "{}", kind.name()); // `soil_ph b`
        assert_eq!(
            frames(&location),
            [(Some("read"), 2, 10)],
            "{}",
            kind.name()
        );
    }
}

#[test]
fn a_loop_keeps_one_frame_however_long_it_runs() {
    let program = Program::parse("let rec pace n = pace (n + 1) in\npace 0").unwrap();
    for fuel in [5, 6, 7, 1_000, 100_001] {
        let mut h = Harness::new();
        let runs = h.run("a loop", &program, &Limits::default().with_fuel(fuel));
        h.finish();
        for run in &runs.runs {
            let location = run.report.location.as_ref().unwrap();
            assert_eq!(
                frames(location),
                [(Some("pace"), 1, 18)],
                "{} at {fuel}",
                run.kind.name()
            );
        }
    }
}

#[test]
fn a_deep_backtrace_keeps_its_ends_and_counts_the_rest() {
    let source = "let rec sift n = if n == 0 then 1 / n else 1 + sift (n - 1) in\nsift 5000";
    let program = Program::parse(source).unwrap();
    let mut h = Harness::new();
    let runs = h.run("a deep error", &program, &Limits::default());
    h.finish();
    for run in &runs.runs {
        let trace = &run.report.location.as_ref().unwrap().backtrace;
        assert_eq!(trace.depth(), 5001, "{}", run.kind.name());
        assert_eq!(trace.frames.len(), 2 * BACKTRACE_ENDS);
        assert_eq!(trace.omitted, 5001 - 2 * BACKTRACE_ENDS as u64);
        // Innermost first: the recursive call; outermost last: `sift 5000`.
        let site = |k: usize| trace.frames[k].site.unwrap();
        assert_eq!((site(0).line, site(0).col), (1, 48));
        assert_eq!(
            (
                site(2 * BACKTRACE_ENDS - 1).line,
                site(2 * BACKTRACE_ENDS - 1).col
            ),
            (2, 1)
        );
    }
}

#[test]
fn a_curried_call_is_one_frame_at_its_whole_application() {
    let source = "let ratio a b = a / b in\nlet half = ratio 1 in\n(ratio 4 2) + half 0";
    let program = Program::parse(source).unwrap();
    let mut h = Harness::new();
    let runs = h.run("curried calls", &program, &Limits::default());
    h.finish();
    for run in &runs.runs {
        let location = run.report.location.as_ref().unwrap();
        // `half 0` completes the call `ratio 1` began.
        assert_eq!(
            frames(location),
            [(Some("ratio"), 3, 15)],
            "{}",
            run.kind.name()
        );
    }
}

#[test]
fn an_applied_rule_has_a_frame_with_no_site() {
    let rule = Program::parse("let reorder stock = 100 / stock in reorder").unwrap();
    let request = rule.apply(&[Datum::Int(0)]).unwrap();
    for &kind in MachineKind::enabled() {
        let location = located(kind, &request, &Limits::default());
        let frames = &location.backtrace.frames;
        assert_eq!(frames.len(), 1, "{}", kind.name());
        assert_eq!(frames[0].name.as_deref(), Some("reorder"));
        assert_eq!(frames[0].site, None);
    }
}

#[test]
fn an_embedders_own_spans_come_back_unchanged() {
    // A language of our own lowered to terms, its positions in file 12.
    let arena = Arena::new();
    let quota = arena.at(
        Span::new(12, 40, 47),
        arena.prim(Prim::Rem, &[arena.int(9), arena.var(0)]),
    );
    let rule = arena.named("quota", arena.lam(quota));
    let call = arena.at(Span::new(12, 60, 68), arena.app(rule, arena.int(0)));
    let program = Program::new(call).unwrap();
    for &kind in MachineKind::enabled() {
        let location = located(kind, &program, &Limits::default());
        assert_eq!(
            location.span,
            Some(Span::new(12, 40, 47)),
            "{}",
            kind.name()
        );
        assert_eq!(
            location.backtrace.frames[0].site,
            Some(Span::new(12, 60, 68))
        );
        assert_eq!(location.backtrace.frames[0].name.as_deref(), Some("quota"));
    }
}

#[test]
fn a_program_without_spans_still_counts_its_calls() {
    let arena = Arena::new();
    // (λ. 1 + (λ. #0 / 0) #0) 5, built with no spans or names.
    let inner = arena.lam(arena.prim(Prim::Div, &[arena.var(0), arena.int(0)]));
    let outer = arena.lam(arena.prim(Prim::Add, &[arena.int(1), arena.app(inner, arena.var(0))]));
    let program = Program::new(arena.app(outer, arena.int(5))).unwrap();
    for &kind in MachineKind::enabled() {
        let location = located(kind, &program, &Limits::default());
        assert_eq!(location.span, None);
        assert_eq!(location.backtrace.depth(), 2, "{}", kind.name());
        assert!(location
            .backtrace
            .frames
            .iter()
            .all(|f| f.name.is_none() && f.site.is_none()));
    }
}

#[test]
fn limits_report_a_location_and_values_none() {
    let program = Program::parse("let rec grow n = Cons(n, grow (n + 1)) in grow 0").unwrap();
    let value = Program::parse("let beds = 4 in beds * 3").unwrap();
    for &kind in MachineKind::enabled() {
        let report = kind.run(&program, &Limits::default().with_memory(1 << 20));
        assert!(
            matches!(report.outcome, Outcome::Limit(_)),
            "{}",
            kind.name()
        );
        let location = report.location.expect("a limit has a location");
        // Where the memory ran out is the machine's own account; the
        // pending calls are many.
        assert!(location.backtrace.depth() > 100, "{}", kind.name());
        assert_eq!(kind.run(&value, &Limits::default()).location, None);
    }
}

#[test]
fn a_paused_run_reports_where_it_paused_and_where_it_ended() {
    let program = Program::parse(TARIFF).unwrap();
    for &kind in MachineKind::enabled() {
        let Some(mut run) = kind
            .machine()
            .start(&program, &Limits::default().with_fuel(0))
        else {
            continue; // a machine that cannot pause
        };
        for fuel in 0..6u64 {
            let paused = run.resume(if fuel == 0 { 0 } else { 1 });
            let whole = kind.run(&program, &Limits::default().with_fuel(fuel));
            assert_eq!(paused.location, whole.location, "{} at {fuel}", kind.name());
        }
        let ended = run.resume(100);
        let again = run.resume(0);
        assert_eq!(ended.location, again.location);
        assert_eq!(
            ended.location,
            kind.run(&program, &Limits::default()).location
        );
    }
}

#[test]
fn a_cancelled_run_says_which_rule_was_running() {
    // The host function cancels the run on its third call; the loop that
    // called it is the one pending call when the run stops.
    use std::sync::atomic::{AtomicU32, Ordering};
    use std::sync::Arc;
    for &kind in MachineKind::enabled() {
        let cancel = orrery::Cancel::new();
        let calls = Arc::new(AtomicU32::new(0));
        let mut host = HostFunctions::new();
        let stop = cancel.clone();
        host.register("tick", move |n: i64| {
            if calls.fetch_add(1, Ordering::Relaxed) == 2 {
                stop.cancel();
            }
            Ok::<_, String>(n)
        })
        .unwrap();
        let source = "let rec churn n = churn (tick (n + 1)) in\nchurn 0";
        let program = Program::parse_with(source, &host).unwrap();
        let limits = Limits::default().with_fuel(u64::MAX).with_cancel(cancel);
        let report = kind.run(&program, &limits);
        assert!(
            matches!(report.outcome, Outcome::Limit(_)),
            "{}",
            kind.name()
        );
        let location = report.location.expect("a cancelled run has a location");
        assert_eq!(
            frames(&location),
            [(Some("churn"), 1, 19)],
            "{}",
            kind.name()
        );
    }
}
