//! What every machine of the table must do alike, each test one loop over
//! [`MachineKind::enabled`]: stop a divergent loop when cancelled (before it
//! starts, from another thread, while paused); give a fresh machine's report
//! when reused, and when built without accounting; pause at every fuel
//! bound and resume to the uninterrupted end, holding nothing of the arenas
//! it is given; run tail calls in constant space; and stop a growing run at
//! the memory limit, barely past it (SEMANTICS §2, §3, §7). Tests of what
//! one machine alone has stay in its own module.

use std::sync::mpsc;

use orrery::{
    parse, parse_with, Arena, Cancel, HostFunctions, LimitError, Limits, MachineKind, Outcome,
    Program, Report, Rule,
};

use crate::common::corpus::{corpus_files, read_shapes};
use crate::common::harness::{describe, Harness};
use crate::common::{mixed_host, MIXED};

/// Never ends: each call makes the next.
const SPIN: &str = "let rec spin n = spin (n + 1) in spin 0";

/// A tail loop of `n` rounds.
fn count_down(n: u64) -> String {
    format!("let rec count n = if n == 0 then 0 else count (n - 1) in count {n}")
}

fn is_cancelled(report: &Report) -> bool {
    report.outcome == Outcome::Limit(LimitError::cancelled())
}

#[test]
fn a_cancelled_handle_stops_every_machine_before_its_first_contraction() {
    let arena = Arena::new();
    let program = parse(&arena, SPIN).unwrap();
    let cancel = Cancel::new();
    let limits = Limits::default()
        .with_fuel(u64::MAX)
        .with_cancel(cancel.clone());
    let mut h = Harness::new();
    // Not cancelled: the fuel ends it, on the exact contraction.
    let runs = h.run("spin", &program, &limits.clone().with_fuel(5_000));
    h.expect(&runs, "out of fuel after 5,000", |r| {
        r.outcome == Outcome::OutOfFuel && r.counts.total() == 5_000
    });
    // Cancelled: polled before the first contraction.
    cancel.cancel();
    let runs = h.run("spin", &program, &limits);
    h.expect(&runs, "cancelled after no contraction", |r| {
        is_cancelled(r) && r.counts.total() == 0
    });
    h.finish();
}

#[test]
fn a_handle_cancelled_from_another_thread_stops_a_running_loop() {
    // Each round of the loop calls `started`, which says so; the test
    // cancels once told of the second call, so the run is running (its
    // first round made) when it is cancelled.
    let mut h = Harness::new();
    for &kind in MachineKind::enabled() {
        let cancel = Cancel::new();
        let limits = Limits::default()
            .with_fuel(u64::MAX)
            .with_cancel(cancel.clone());
        let (started_tx, started_rx) = mpsc::channel();
        let worker = std::thread::spawn(move || {
            let mut host = HostFunctions::new();
            host.register("started", move |n: i64| {
                let _ = started_tx.send(());
                Ok::<_, String>(n)
            })
            .expect("a valid host function");
            let arena = Arena::new();
            let source = "let rec spin n = let u = started n in spin (n + 1) in spin 0";
            let program = parse_with(&arena, source, &host).expect("the program parses");
            let report = kind.run(&program, &limits);
            (
                is_cancelled(&report),
                describe(&report),
                report.counts.total(),
            )
        });
        let told = started_rx.recv().is_ok() && started_rx.recv().is_ok();
        cancel.cancel();
        let (cancelled, described, total) = worker.join().expect("the run does not panic");
        h.check(
            told,
            "spin",
            kind.name(),
            u64::MAX,
            "never started a second round",
        );
        // let rec, spin 0, started 0 and its let: at least four.
        h.check(
            cancelled && total >= 4,
            "spin",
            kind.name(),
            u64::MAX,
            format!("expected cancelled after the first round, got {described}"),
        );
    }
    h.finish();
}

#[test]
fn a_paused_run_that_is_cancelled_reports_it_on_resume() {
    let arena = Arena::new();
    let program = parse(&arena, &count_down(1_000_000)).unwrap();
    let mut h = Harness::new();
    for &kind in MachineKind::enabled() {
        let cancel = Cancel::new();
        let limits = Limits::default().with_fuel(0).with_cancel(cancel.clone());
        let Some(mut run) = kind.machine().start(&program, &limits) else {
            continue;
        };
        let name = "count 1000000";
        let first = run.resume(5_000);
        h.check(
            first.outcome == Outcome::OutOfFuel && run.counts().total() == 5_000,
            name,
            kind.name(),
            5_000,
            format!("expected out of fuel after 5,000, got {}", describe(&first)),
        );
        cancel.cancel();
        let report = run.resume(5_000);
        h.check(
            is_cancelled(&report) && report.counts.total() == 5_000 && run.is_finished(),
            name,
            kind.name(),
            10_000,
            format!(
                "expected cancelled on resume, with nothing more made, got {}",
                describe(&report)
            ),
        );
    }
    h.finish();
}

/// A program of [`varied`]: its name, its text, its limits and how it ends.
struct Varied {
    name: &'static str,
    source: &'static str,
    limits: Limits,
    ending: String,
}

/// Programs of many kinds: tak, a deep recursion, partial applications, an
/// error, data, a run out of fuel and one stopped by the memory limit.
fn varied() -> Vec<Varied> {
    let list = (1..=500)
        .rev()
        .fold("Nil".to_string(), |tail, n| format!("Cons({n}, {tail})"));
    let ample = Limits::default();
    [
        (
            "tak 12 8 4",
            "let rec tak x y z = if y < x then tak (tak (x - 1) y z) (tak (y - 1) z x) (tak (z - 1) x y) else z in tak 12 8 4",
            ample.clone(),
            "value 5".to_string(),
        ),
        (
            "sum 300",
            "let rec sum n = if n == 0 then 0 else n + sum (n - 1) in sum 300",
            ample.clone(),
            "value 45150".to_string(),
        ),
        (
            "partial k",
            "let rec k a b c = if a == 0 then b - c else k (a - 1) c b in let p = k 3 10 in Pair(p 4, p 5)",
            ample.clone(),
            "value Pair(-6, -5)".to_string(),
        ),
        (
            "an error",
            "let f = \\x. x / (x - 3) in f 1 + f 3",
            ample.clone(),
            "error division_by_zero".to_string(),
        ),
        (
            "a list",
            "let rec build n acc = if n == 0 then acc else build (n - 1) (Cons(n, acc)) in build 500 Nil",
            ample.clone(),
            format!("value {list}"),
        ),
        ("spin", SPIN, ample.clone().with_fuel(3_000), "out_of_fuel".to_string()),
        (
            "deep",
            "let rec deep n = 1 + deep (n + 1) in deep 0",
            ample.with_memory(1 << 20),
            "limit memory".to_string(),
        ),
    ]
    .into_iter()
    .map(|(name, source, limits, ending)| Varied {
        name,
        source,
        limits,
        ending,
    })
    .collect()
}

#[test]
fn a_reused_machine_reports_what_a_fresh_one_does() {
    let arena = Arena::new();
    let varied = varied();
    let programs: Vec<(&Varied, Program)> = varied
        .iter()
        .map(|v| (v, parse(&arena, v.source).unwrap()))
        .collect();
    let mut h = Harness::new();
    let fresh: Vec<_> = programs
        .iter()
        .map(|(v, program)| {
            let runs = h.run(v.name, program, &v.limits);
            h.expect_ending(&runs, &v.ending);
            runs
        })
        .collect();
    for &kind in MachineKind::enabled() {
        // One machine for every program, twice over, in turn.
        let mut machine = kind.machine();
        for round in 0..2 {
            for ((v, program), runs) in programs.iter().zip(&fresh) {
                let limits = &v.limits;
                let report = machine.run(program, limits);
                let label = format!("{} reused, round {round}", kind.name());
                h.agrees(runs, &label, &report);
                if let Some(first) = runs.of(kind) {
                    h.check(
                        report == first.report,
                        &runs.name,
                        &label,
                        limits.fuel,
                        format!(
                            "{} where a fresh machine gave {}",
                            describe(&report),
                            describe(&first.report)
                        ),
                    );
                }
            }
        }
    }
    h.finish();
}

#[test]
fn a_machine_without_accounting_gives_the_same_reports() {
    // The varied programs that end by themselves, and every curried shape.
    let arena = Arena::new();
    let mut programs: Vec<(String, String)> = varied()
        .into_iter()
        .filter(|v| v.limits == Limits::default())
        .map(|v| (v.source.to_string(), v.ending))
        .collect();
    for path in corpus_files("shapes").0 {
        let text = std::fs::read_to_string(&path).expect("a readable shapes file");
        let shapes = read_shapes(&text).expect("a well-formed shapes file");
        programs.extend(shapes.into_iter().map(|s| (s.program, s.ending)));
    }
    assert!(programs.len() > 50, "the curried shapes went missing");
    let mut h = Harness::new();
    let mut unaccounted_builds = 0;
    for (source, ending) in &programs {
        let program = parse(&arena, source).unwrap();
        let runs = h.run(source, &program, &Limits::default());
        h.expect_ending(&runs, ending);
        for &kind in MachineKind::enabled() {
            let Some(mut bare) = kind.unaccounted() else {
                continue;
            };
            unaccounted_builds += 1;
            let report = bare.run(&program, &Limits::default());
            let label = format!("{} without accounting", kind.name());
            h.agrees(&runs, &label, &report);
            if let Some(metered) = runs.of(kind) {
                h.check(
                    report == metered.report,
                    source,
                    &label,
                    u64::MAX,
                    format!(
                        "{} where metered {}",
                        describe(&report),
                        describe(&metered.report)
                    ),
                );
            }
        }
    }
    // A build with cek or env has at least one unaccounted machine.
    let expected = MachineKind::enabled()
        .iter()
        .any(|k| matches!(k.name(), "cek" | "env"));
    assert_eq!(unaccounted_builds > 0, expected);
    h.finish();
}

#[test]
fn every_fuel_bound_pauses_and_resumes_to_the_uninterrupted_end() {
    let host = mixed_host();
    let arena = Arena::new();
    let program = parse_with(&arena, MIXED, &host).unwrap();
    let mut h = Harness::new();
    let limits = Limits::default();
    // Paused at each bound, then resumed with the rest at once: the pause
    // is the run cut at the bound, the end the whole run.
    let whole = h.run("mixed", &program, &limits);
    h.every_bound("mixed", &program, &limits, |h, _, at| {
        h.pauses_at(at, &whole, &program);
    });
    h.expect_ending(
        &whole,
        r#"value Triple(Cons(11, Cons(12, Cons(13, Cons(14, Nil)))), "ababab1", false)"#,
    );
    h.expect(&whole, "extra fuel 3", |r| r.counts.extra_fuel() == 3);
    for slice in [1, 2, 3] {
        h.pauses(&whole, &program, slice);
    }
    h.finish();
}

#[test]
fn a_paused_run_holds_nothing_of_the_arenas_it_was_given() {
    let arena = Arena::new();
    let program = parse(&arena, "let rec count n acc = if n == 0 then acc else count (n - 1) (Cons(n, acc)) in count 2000 Nil").unwrap();
    let mut h = Harness::new();
    for &kind in MachineKind::enabled() {
        let Some(mut run) = kind
            .machine()
            .start(&program, &Limits::default().with_fuel(0))
        else {
            continue;
        };
        let out = Arena::new();
        let paused = (0..1000).all(|_| run.resume(7).outcome == Outcome::OutOfFuel);
        h.check(
            paused,
            "count 2000",
            kind.name(),
            7_000,
            "ended before 7,000 units",
        );
        h.check(
            out.allocated_bytes() == 0,
            "count 2000",
            kind.name(),
            7_000,
            format!(
                "copied {} bytes into the arena while paused",
                out.allocated_bytes()
            ),
        );
        let end = run.resume(u64::MAX / 2);
        h.check(
            matches!(end.outcome, Outcome::Value(_)),
            "count 2000",
            kind.name(),
            u64::MAX / 2,
            describe(&end),
        );
    }
    h.finish();
}

#[test]
fn paused_runs_of_tak_end_as_uninterrupted_ones_at_any_slice() {
    let arena = Arena::new();
    let source = "let rec tak x y z = if y < x then tak (tak (x - 1) y z) (tak (y - 1) z x) (tak (z - 1) x y) else z in tak 12 8 4";
    let program = parse(&arena, source).unwrap();
    let mut h = Harness::new();
    let whole = h.run("tak 12 8 4", &program, &Limits::default());
    h.expect_ending(&whole, "value 5");
    let total = whole.reference().map_or(2, |r| r.counts.total());
    for slice in [1, 7, 1000, total - 1] {
        h.pauses(&whole, &program, slice);
    }
    h.finish();
}

#[test]
fn tail_calls_run_in_constant_space() {
    // Ten times the rounds, no more than a page more memory; under 8 MiB.
    let loops = [
        (
            "churn",
            "let rec churn n acc = if n == 0 then acc else churn (n - 1) ((acc * 31 + n) % 1000003) in churn N 0",
            "value 632919",
        ),
        (
            "spin",
            "let rec spin n = if n == 0 then \"done\" else spin (n - 1) in spin N",
            "value \"done\"",
        ),
    ];
    let limits = Limits::default().with_memory(8 << 20);
    let mut h = Harness::new();
    for (name, head, ending) in loops {
        let arena = Arena::new();
        let short = parse(&arena, &head.replace('N', "100000")).unwrap();
        let long = parse(&arena, &head.replace('N', "1000000")).unwrap();
        let before = h.run(name, &short, &limits);
        let after = h.run(name, &long, &limits);
        h.expect_ending(&after, ending);
        h.expect_count(&after, Rule::BetaRec, 1_000_001);
        for (a, b) in before.runs.iter().zip(&after.runs) {
            h.check(
                b.peak <= a.peak + 4096,
                name,
                b.kind.name(),
                limits.fuel,
                format!(
                    "held {} bytes after a million rounds, {} after 100,000",
                    b.peak, a.peak
                ),
            );
        }
    }
    h.finish();
}

#[test]
fn a_growing_run_stops_at_the_memory_limit_barely_past_it() {
    // Frames of pending calls, constructors waiting for their fields, and
    // the cells of a list that grows forever, each with the most bytes a
    // call of it may cost (the stepper's collector keeps copies of a live
    // list, and its context holds a call mark besides each pending frame).
    let growing = [
        ("pending additions", "let rec deep n = 1 + deep (n + 1) in deep 0", 384),
        ("pending additions of one", "let rec f n = 1 + f n in f 0", 384),
        ("pending fields", "let rec f n = Cons(n, f (n + 1)) in f 0", 384),
        (
            "a list",
            "let rec upto n acc = if n == 0 then acc else upto (n - 1) (Cons(n, acc)) in upto (0 - 1) Nil",
            1024,
        ),
    ];
    let mut h = Harness::new();
    for (name, source, per_call) in growing {
        let arena = Arena::new();
        let program = parse(&arena, source).unwrap();
        for limit in [256 << 10, 1 << 20] {
            let runs = h.run(name, &program, &Limits::default().with_memory(limit));
            h.expect(&runs, "the memory limit, soon", |r| {
                r.outcome == Outcome::Limit(LimitError::memory(limit))
                    && r.counts.total() < 1_000_000
            });
            let calls = (limit / per_call) as u64;
            h.expect(&runs, &format!("more than {calls} calls"), |r| {
                r.counts.get(Rule::BetaRec) > calls
            });
            for run in &runs.runs {
                // The growth refused is recorded, and it is small.
                h.check(
                    run.peak > limit && run.peak < limit + limit / 4,
                    name,
                    run.kind.name(),
                    u64::MAX,
                    format!("peak {} under a limit of {limit}", run.peak),
                );
            }
        }
    }
    h.finish();
}

/// A table held as closed constant data (which env and cek read in place
/// rather than build): matched field by field, searched, handed to a host
/// function, and returned, shared, in the value; every machine agrees with
/// the stepper at every fuel bound, and pauses and resumes through it.
#[test]
fn constant_tables_are_matched_searched_passed_and_returned_alike() {
    let mut host = HostFunctions::new();
    host.register("rows", |table: Vec<(i64, String)>| {
        Ok::<_, String>(table.len() as i64)
    })
    .unwrap();
    let source = r#"
        let table = Cons(Pair(1, "pine"), Cons(Pair(2, "oak"), Cons(Pair(3, "ash"), Nil))) in
        let rec find k t = case t of {
          Nil => "none";
          Cons(row, rest) => case row of { Pair(key, name) => if key == k then name else find k rest }
        } in
        Pair(find 2 table ++ find 9 table, Pair(rows table, Pair(table, table)))"#;
    let program = Program::parse_with(source, &host).unwrap();
    let mut h = Harness::new();
    let whole = h.every_bound("constant table", &program, &Limits::default(), |_, _, _| {});
    h.expect_ending(
        &whole,
        r#"value Pair("oaknone", Pair(3, Pair(Cons(Pair(1, "pine"), Cons(Pair(2, "oak"), Cons(Pair(3, "ash"), Nil))), Cons(Pair(1, "pine"), Cons(Pair(2, "oak"), Cons(Pair(3, "ash"), Nil))))))"#,
    );
    h.pauses(&whole, &program, 3);
    // A case on constant data with no matching arm reports it as a
    // constructor, on every machine alike.
    let program = Program::parse("case Pair(1, 2) of { Cons(h, t) => h }").unwrap();
    let runs = h.run("no arm for constant data", &program, &Limits::default());
    h.expect_ending(&runs, "error no_matching_case");
    h.finish();
}
