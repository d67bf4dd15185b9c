//! Embedding: host functions on every machine (calls by name and through the
//! builder, typed conversions, errors and panics, declared fuel costs), values
//! to and from Rust, calling a function value a program produced, one program
//! run on many threads, cancellation from another thread, and pausing.

mod common;

use common::run_program_everywhere;
use orrery::machines::cek::Cek;
use orrery::machines::stepper::Stepper;
use orrery::{
    disagreement, extract, parse, parse_with, print_with, Arena, Cancel, Datum, ErrorKind,
    HostFunctions, IntoDatum, LimitKind, Limits, MachineKind, Outcome, Program, Rule,
    ValidationError, CANCEL_POLL_INTERVAL,
};

/// Host functions of an invented orchard-irrigation scenario.
fn orchard() -> HostFunctions {
    let mut host = HostFunctions::new();
    host.register("litres_for", |trees: i64, dry_days: i64| {
        trees
            .checked_mul(dry_days)
            .and_then(|x| x.checked_mul(12))
            .ok_or("too much water")
    })
    .unwrap();
    host.register("rows", |n: i64| -> Result<Vec<String>, String> {
        if n < 0 {
            return Err(format!("{n} rows"));
        }
        Ok((1..=n).map(|i| format!("row {i}")).collect())
    })
    .unwrap();
    host.register("jammed_valve", |n: i64| -> Result<i64, String> {
        if n > 2 {
            panic!("valve {n} jammed");
        }
        Ok(n)
    })
    .unwrap();
    let id = host
        .register("banner", |text: String, times: i64| {
            usize::try_from(times)
                .map(|n| text.repeat(n))
                .map_err(|_| "negative repeat")
        })
        .unwrap();
    // A cost proportional to the length of the string built.
    host.set_cost(id, |args| match (&args[0], &args[1]) {
        (Datum::Str(s), Datum::Int(n)) => (s.len() as u64).saturating_mul((*n).max(0) as u64),
        _ => 0,
    });
    host
}

fn run_with_host<'a>(
    arena: &'a Arena,
    host: &'a HostFunctions,
    source: &str,
    limits: &Limits,
) -> orrery::Report<'a> {
    let program = match parse_with(arena, source, host) {
        Ok(p) => p,
        Err(e) => panic!("{}", e.render("<test>", source)),
    };
    run_program_everywhere(arena, &program, limits, source)
}

#[test]
fn host_functions_are_called_by_name_on_every_machine() {
    let host = orchard();
    let arena = Arena::new();
    let source = "let need = \\t. litres_for t 3 in need 4 + need 1";
    let report = run_with_host(&arena, &host, source, &Limits::default());
    assert_eq!(report.outcome, Outcome::Value(arena.int(4 * 36 + 36)));
    // let, two betas, two host calls and one addition.
    assert_eq!(report.counts.get(Rule::Prim), 3);
    assert_eq!(report.counts.get(Rule::Beta), 2);
}

#[test]
fn partial_calls_are_functions_and_print_back_by_name() {
    let host = orchard();
    let arena = Arena::new();
    let program = parse_with(&arena, "let per_tree = litres_for 1 in per_tree 5", &host).unwrap();
    let printed = print_with(program.term(), &host);
    assert!(printed.contains("litres_for"), "{printed}");
    let reparsed = parse_with(&arena, &printed, &host).unwrap();
    assert!(reparsed.term() == program.term());
    let report = run_program_everywhere(&arena, &program, &Limits::default(), "partial");
    assert_eq!(report.outcome, Outcome::Value(arena.int(60)));
}

#[test]
fn host_results_are_data_the_program_can_take_apart() {
    let host = orchard();
    let arena = Arena::new();
    let source = "let rec count l = case l of { Nil => 0; Cons(h, t) => length h + count t } in count (rows 12)";
    let report = run_with_host(&arena, &host, source, &Limits::default());
    // "row 1".."row 9" have 5 characters, "row 10".."row 12" have 6.
    assert_eq!(report.outcome, Outcome::Value(arena.int(9 * 5 + 3 * 6)));
}

#[test]
fn host_errors_and_panics_are_host_errors_on_every_machine() {
    let host = orchard();
    for (source, message) in [
        ("rows (0 - 2)", "rows: -2 rows"),
        ("jammed_valve 3", "jammed_valve panicked: valve 3 jammed"),
        (
            "litres_for 9223372036854775807 2",
            "litres_for: too much water",
        ),
    ] {
        let arena = Arena::new();
        let report = run_with_host(&arena, &host, source, &Limits::default());
        match report.outcome {
            Outcome::Error(e) => {
                assert_eq!(e.kind(), ErrorKind::HostError, "{source}");
                assert_eq!(e.message(), message);
            }
            other => panic!("{source}: {other:?}"),
        }
        assert_eq!(
            report.counts.get(Rule::Prim),
            if source.starts_with("rows") { 2 } else { 1 }
        );
    }
}

#[test]
fn arguments_that_are_not_data_are_type_mismatches() {
    let host = orchard();
    let arena = Arena::new();
    let report = run_with_host(&arena, &host, "litres_for (\\x. x) 2", &Limits::default());
    match report.outcome {
        Outcome::Error(e) => assert_eq!(e.kind(), ErrorKind::TypeMismatch),
        other => panic!("{other:?}"),
    }
    assert_eq!(report.counts.total(), 1);
    // With no fuel, the attempt is out of fuel, as for any contraction.
    let report = run_with_host(
        &arena,
        &host,
        "litres_for (\\x. x) 2",
        &Limits::default().with_fuel(0),
    );
    assert_eq!(report.outcome, Outcome::OutOfFuel);
}

#[test]
fn a_declared_cost_is_charged_and_stops_the_run_at_the_same_fuel_everywhere() {
    let host = orchard();
    let arena = Arena::new();
    let source = r#"length (banner "ab" 5) + 1"#;
    let whole = run_with_host(&arena, &host, source, &Limits::default());
    assert_eq!(whole.outcome, Outcome::Value(arena.int(11)));
    // banner: 1 + 10 units; length: 1; +: 1.
    assert_eq!(whole.counts.total(), 3);
    assert_eq!(whole.counts.extra_fuel(), 10);
    assert_eq!(whole.counts.fuel(), 13);
    for fuel in 0..=whole.counts.fuel() + 1 {
        let report = run_with_host(&arena, &host, source, &Limits::default().with_fuel(fuel));
        if fuel < 11 {
            // Not enough for the banner call: nothing is made.
            assert_eq!(report.outcome, Outcome::OutOfFuel, "fuel {fuel}");
            assert_eq!(report.counts.fuel(), 0, "fuel {fuel}");
        } else if fuel < 13 {
            assert_eq!(report.outcome, Outcome::OutOfFuel, "fuel {fuel}");
            assert_eq!(report.counts.fuel(), fuel, "fuel {fuel}");
        } else {
            assert_eq!(report.outcome, whole.outcome, "fuel {fuel}");
        }
    }
}

#[test]
fn paused_runs_resume_across_a_costly_host_call() {
    let host = orchard();
    let arena = Arena::new();
    let program = parse_with(&arena, r#"length (banner "xyz" 4) * 2"#, &host).unwrap();
    let whole = orrery::Machine::run(&mut Stepper::new(), &program, &Limits::default(), &arena);
    let mut stepper = Stepper::start(&program, &Limits::default().with_fuel(0));
    let mut cek = Cek::start(&program, &Limits::default().with_fuel(0));
    let (mut s_end, mut c_end) = (None, None);
    for _ in 0..100 {
        let s = stepper.resume(1, &arena);
        let c = cek.resume(1, &arena);
        assert!(disagreement(&s, &c).is_none(), "{s:?} {c:?}");
        if s.outcome != Outcome::OutOfFuel {
            s_end = Some(s);
            c_end = Some(c);
            break;
        }
    }
    let (s_end, c_end) = (s_end.unwrap(), c_end.unwrap());
    assert!(disagreement(&whole, &s_end).is_none());
    assert!(disagreement(&whole, &c_end).is_none());
    assert_eq!(s_end.outcome, Outcome::Value(arena.int(24)));
}

#[test]
fn the_builder_api_calls_host_functions_too() {
    let host = orchard();
    let arena = Arena::new();
    let call = host
        .call_term(&arena, "litres_for", &[arena.int(2), arena.int(2)])
        .unwrap();
    assert!(host
        .call_term(&arena, "litres_for", &[arena.int(2)])
        .is_none());
    assert!(matches!(
        Program::new(call),
        Err(ValidationError::UnknownHost { .. })
    ));
    let program = Program::with_host(call, &host).unwrap();
    let report = run_program_everywhere(&arena, &program, &Limits::default(), "builder");
    assert_eq!(report.outcome, Outcome::Value(arena.int(48)));
    // A table without the function is refused; one registered the same way
    // (same names, order and arities) is accepted: a host id is a position.
    let other = orchard();
    assert!(Program::with_host(call, &HostFunctions::new()).is_err());
    assert!(Program::with_host(call, &other).is_ok());
}

#[test]
fn exponentially_shared_arguments_hit_the_memory_limit_not_the_host() {
    let host = orchard();
    let arena = Arena::new();
    // A value whose tree has 2^40 leaves, passed to a host function.
    let source = "let rec grow n v = if n == 0 then v else grow (n - 1) (Twin(v, v)) in litres_for (grow 40 1) 1";
    let report = run_with_host(
        &arena,
        &host,
        source,
        &Limits::default().with_memory(8 << 20),
    );
    match report.outcome {
        Outcome::Limit(l) => assert_eq!(l.kind(), LimitKind::Memory),
        other => panic!("{other:?}"),
    }
}

#[test]
fn results_convert_to_rust_types_with_clear_errors() {
    let arena = Arena::new();
    let program = parse(
        &arena,
        r#"Cons(Triple("pear", 4, true), Cons(Triple("plum", 0, false), Nil))"#,
    )
    .unwrap();
    for machine in MachineKind::enabled() {
        let report = machine.run(&program, &Limits::default(), &arena);
        let Outcome::Value(v) = report.outcome else {
            panic!("{report:?}")
        };
        let trees: Vec<(String, i64, bool)> = extract(v).unwrap();
        assert_eq!(
            trees,
            vec![("pear".into(), 4, true), ("plum".into(), 0, false)]
        );
        let err = extract::<Vec<(String, bool, bool)>>(v).unwrap_err();
        assert_eq!(err.to_string(), "expected a boolean, found an integer");
        let err = extract::<i64>(v).unwrap_err();
        assert_eq!(err.found(), "the constructor Cons");
    }
}

#[test]
fn a_function_value_is_called_per_request_under_fresh_limits() {
    let arena = Arena::new();
    // A configuration that evaluates to a pricing function.
    let config = parse(
        &arena,
        "let base = 40 in let per_kg = 3 in \\kg. if kg > 100 then base + per_kg * 100 else base + per_kg * kg",
    )
    .unwrap();
    for machine in MachineKind::enabled() {
        let report = machine.run(&config, &Limits::default(), &arena);
        let Outcome::Value(price) = report.outcome else {
            panic!("{report:?}")
        };
        for (kg, expected) in [(0i64, 40i64), (7, 61), (250, 340)] {
            let request = Arena::new();
            let call = request.app(request.copy_term(price), kg.into_datum().to_term(&request));
            let program = Program::new(call).unwrap();
            let limits = Limits::default().with_fuel(50);
            let report = machine.run(&program, &limits, &request);
            assert_eq!(
                extract::<i64>(match report.outcome {
                    Outcome::Value(v) => v,
                    other => panic!("{other:?}"),
                })
                .unwrap(),
                expected
            );
        }
        // Fresh, tight limits hold for the call alone.
        let request = Arena::new();
        let call = request.app(request.copy_term(price), request.int(3));
        let report = machine.run(
            &Program::new(call).unwrap(),
            &Limits::default().with_fuel(2),
            &request,
        );
        assert_eq!(report.outcome, Outcome::OutOfFuel);
    }
}

#[test]
fn one_program_runs_on_many_threads_at_once() {
    let host = orchard();
    let arena = Arena::new();
    let program = parse_with(
        &arena,
        "let rec total n = if n == 0 then 0 else litres_for n 1 + total (n - 1) in total 300",
        &host,
    )
    .unwrap();
    fn assert_send_sync<T: Send + Sync>(_: &T) {}
    assert_send_sync(&program);
    let expected = 12 * 300 * 301 / 2;
    let program = &program;
    std::thread::scope(|scope| {
        let handles: Vec<_> = (0..4)
            .flat_map(|i| MachineKind::enabled().iter().map(move |&m| (i, m)))
            .map(|(i, machine)| {
                scope.spawn(move || {
                    let out = Arena::new();
                    // Each run has its own limits: the odd ones too little fuel.
                    let fuel = if i % 2 == 0 { u64::MAX } else { 100 };
                    let report = machine.run(program, &Limits::default().with_fuel(fuel), &out);
                    match report.outcome {
                        Outcome::Value(v) => extract::<i64>(v).ok(),
                        Outcome::OutOfFuel => None,
                        other => panic!("{other:?}"),
                    }
                })
            })
            .collect();
        for (k, handle) in handles.into_iter().enumerate() {
            let got = handle.join().unwrap();
            let i = k / MachineKind::enabled().len();
            assert_eq!(got, if i % 2 == 0 { Some(expected) } else { None });
        }
    });
}

#[test]
fn a_cancelled_handle_stops_every_machine_before_it_starts() {
    let arena = Arena::new();
    let program = parse(&arena, "let rec spin n = spin (n + 1) in spin 0").unwrap();
    let cancel = Cancel::new();
    cancel.cancel();
    let limits = Limits::default().with_fuel(u64::MAX).with_cancel(cancel);
    for machine in MachineKind::enabled() {
        let report = machine.run(&program, &limits, &arena);
        match report.outcome {
            Outcome::Limit(l) => assert_eq!(l.kind(), LimitKind::Cancelled, "{}", machine.name()),
            other => panic!("{}: {other:?}", machine.name()),
        }
        assert!(
            report.counts.total() <= CANCEL_POLL_INTERVAL,
            "{}",
            machine.name()
        );
    }
}

#[test]
fn a_handle_cancelled_from_another_thread_stops_a_divergent_run() {
    for machine in MachineKind::enabled() {
        let cancel = Cancel::new();
        let limits = Limits::default()
            .with_fuel(u64::MAX)
            .with_cancel(cancel.clone());
        let (started_tx, started_rx) = std::sync::mpsc::channel();
        let worker = std::thread::spawn(move || {
            let arena = Arena::new();
            let program = parse(&arena, "let rec spin n = spin (n + 1) in spin 0").unwrap();
            started_tx.send(()).unwrap();
            let report = machine.run(&program, &limits, &arena);
            match report.outcome {
                Outcome::Limit(l) => l.kind(),
                other => panic!("{other:?}"),
            }
        });
        started_rx.recv().unwrap();
        cancel.cancel();
        assert_eq!(
            worker.join().unwrap(),
            LimitKind::Cancelled,
            "{}",
            machine.name()
        );
    }
}

#[test]
fn a_paused_run_that_is_cancelled_reports_it_on_resume() {
    let arena = Arena::new();
    let program = parse(&arena, "let rec spin n = spin (n + 1) in spin 0").unwrap();
    let cancel = Cancel::new();
    let limits = Limits::default()
        .with_fuel(5_000)
        .with_cancel(cancel.clone());
    let mut stepper = Stepper::start(&program, &limits);
    let mut cek = Cek::start(&program, &limits);
    assert_eq!(stepper.resume(0, &arena).outcome, Outcome::OutOfFuel);
    assert_eq!(cek.resume(0, &arena).outcome, Outcome::OutOfFuel);
    cancel.cancel();
    for report in [stepper.resume(5_000, &arena), cek.resume(5_000, &arena)] {
        match report.outcome {
            Outcome::Limit(l) => assert_eq!(l.kind(), LimitKind::Cancelled),
            other => panic!("{other:?}"),
        }
        assert!(report.counts.total() <= 5_000 + CANCEL_POLL_INTERVAL);
    }
}

#[test]
fn every_fuel_bound_agrees_with_costed_host_calls_in_a_loop() {
    let host = orchard();
    let arena = Arena::new();
    // Host calls of growing cost inside a non-tail recursion, with a host
    // error at the end of one branch.
    let source = r#"
        let rec go n = if n == 0 then 0
                       else length (banner "ab" n) + litres_for n 1 + go (n - 1) in
        Pair(go 4, case rows 2 of { Cons(h, t) => h; Nil => "none" })"#;
    let program = parse_with(&arena, source, &host).unwrap();
    let whole = run_program_everywhere(&arena, &program, &Limits::default(), source);
    assert!(matches!(whole.outcome, Outcome::Value(_)));
    // banner costs 2n for n = 4, 3, 2, 1.
    assert_eq!(whole.counts.extra_fuel(), 2 * (4 + 3 + 2 + 1));
    for fuel in 0..=whole.counts.fuel() + 1 {
        let limits = Limits::default().with_fuel(fuel);
        let report = run_program_everywhere(&arena, &program, &limits, source);
        assert!(
            report.counts.fuel() <= fuel,
            "fuel {fuel}: {}",
            report.counts
        );
        if fuel >= whole.counts.fuel() {
            assert_eq!(report.outcome, whole.outcome, "fuel {fuel}");
        } else {
            assert_eq!(report.outcome, Outcome::OutOfFuel, "fuel {fuel}");
        }
    }
    // Paused in slices of 1, 2 and 3 units, both pausing machines end as the
    // uninterrupted run.
    for slice in 1..=3 {
        let none = Limits::default().with_fuel(0);
        let mut stepper = Stepper::start(&program, &none);
        let stepper_end = loop {
            let report = stepper.resume(slice, &arena);
            if report.outcome != Outcome::OutOfFuel {
                break report;
            }
        };
        let mut cek = Cek::start(&program, &none);
        let cek_end = loop {
            let report = cek.resume(slice, &arena);
            if report.outcome != Outcome::OutOfFuel {
                break report;
            }
        };
        for end in [stepper_end, cek_end] {
            assert!(
                disagreement(&whole, &end).is_none(),
                "slices of {slice}: {end:?}"
            );
        }
    }
}
