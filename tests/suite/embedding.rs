//! Embedding (SEMANTICS §1.4): host functions on every machine of the table
//! (calls by name and through the builder, typed conversions, errors and
//! panics, declared fuel costs, tags a host makes up), values to and from
//! Rust, calling a function value a program produced, one program run on
//! many threads, and pausing across costly host calls. Every run goes
//! through the harness, which compares each machine with the stepper.

use orrery::{
    parse, parse_with, print_with, Arena, Datum, ErrorKind, HostFunctions, IntoDatum, Limits,
    MachineKind, Outcome, Program, Rule, ValidationError,
};

use crate::common::harness::{describe, Harness, Runs};

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
    // `pad s n`: `s` repeated `n` times, for a cost of `n` units; `wrap` and
    // `some` box their argument in a constructor the host names.
    let pad = host
        .register("pad", |s: String, n: i64| {
            Ok::<_, String>(s.repeat(n.max(0) as usize))
        })
        .unwrap();
    host.set_cost(pad, |args| match &args[1] {
        Datum::Int(n) => (*n).max(0) as u64,
        _ => 0,
    });
    host.register_data("wrap", 1, |args| {
        Ok(Datum::con("Boxed", vec![args[0].clone()]))
    })
    .unwrap();
    host.register_data("some", 1, |args| {
        Ok(Datum::con("Some", vec![args[0].clone()]))
    })
    .unwrap();
    host
}

/// Parse `source` with `host` and run it everywhere through the harness.
fn run_with_host<'a>(
    h: &mut Harness,
    arena: &'a Arena,
    host: &'a HostFunctions,
    source: &str,
    limits: &Limits,
) -> Runs {
    let program = match parse_with(arena, source, host) {
        Ok(p) => p,
        Err(e) => panic!("{}", e.render("<test>", source)),
    };
    h.run(source, &program, limits)
}

#[test]
fn host_functions_are_called_by_name_on_every_machine() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    let source = "let need = \\t. litres_for t 3 in need 4 + need 1";
    let runs = run_with_host(&mut h, &arena, &host, source, &Limits::default());
    h.expect_ending(&runs, "value 180");
    // let, two betas, two host calls and one addition.
    h.expect_count(&runs, Rule::Prim, 3);
    h.expect_count(&runs, Rule::Beta, 2);
    h.finish();
}

#[test]
fn partial_calls_are_functions_and_print_back_by_name() {
    let host = orchard();
    let arena = Arena::new();
    let program = parse_with(&arena, "let per_tree = litres_for 1 in per_tree 5", &host).unwrap();
    let printed = print_with(program.to_term(&arena), &host);
    assert!(printed.contains("litres_for"), "{printed}");
    let reparsed = parse_with(&arena, &printed, &host).unwrap();
    assert!(reparsed.to_term(&arena) == program.to_term(&arena));
    let mut h = Harness::new();
    let runs = h.run("partial", &program, &Limits::default());
    h.expect_ending(&runs, "value 60");
    h.finish();
}

#[test]
fn host_results_are_data_the_program_can_take_apart() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    let source = "let rec count l = case l of { Nil => 0; Cons(h, t) => length h + count t } in count (rows 12)";
    let runs = run_with_host(&mut h, &arena, &host, source, &Limits::default());
    // "row 1".."row 9" have 5 characters, "row 10".."row 12" have 6.
    h.expect_ending(&runs, &format!("value {}", 9 * 5 + 3 * 6));
    h.finish();
}

#[test]
fn host_errors_and_panics_are_host_errors_on_every_machine() {
    let host = orchard();
    let mut h = Harness::new();
    for (source, message, prims) in [
        ("rows (0 - 2)", "rows: -2 rows", 2),
        ("jammed_valve 3", "jammed_valve panicked: valve 3 jammed", 1),
        (
            "litres_for 9223372036854775807 2",
            "litres_for: too much water",
            1,
        ),
    ] {
        let arena = Arena::new();
        let runs = run_with_host(&mut h, &arena, &host, source, &Limits::default());
        h.expect(&runs, &format!("a host error saying {message:?}"), |r| {
            matches!(&r.outcome, Outcome::Error(e) if e.kind() == ErrorKind::HostError && e.message() == message)
        });
        h.expect_count(&runs, Rule::Prim, prims);
    }
    h.finish();
}

#[test]
fn arguments_that_are_not_data_are_type_mismatches() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    for source in ["litres_for (\\x. x) 2", r#"pad (\x. x) 2"#] {
        let runs = run_with_host(&mut h, &arena, &host, source, &Limits::default());
        h.expect_ending(&runs, "error type_mismatch");
        // One unit: the attempt, not the declared cost.
        h.expect(&runs, "one unit of fuel", |r| {
            r.counts.total() == 1 && r.counts.fuel() == 1
        });
        // With no fuel, the attempt is out of fuel, as for any contraction.
        let runs = run_with_host(
            &mut h,
            &arena,
            &host,
            source,
            &Limits::default().with_fuel(0),
        );
        h.expect_ending(&runs, "out_of_fuel");
    }
    h.finish();
}

#[test]
fn a_declared_cost_is_charged_and_stops_the_run_at_the_same_fuel_everywhere() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    let source = r#"length (banner "ab" 5) + 1"#;
    let program = parse_with(&arena, source, &host).unwrap();
    let whole = h.every_bound(source, &program, &Limits::default(), |h, fuel, at| {
        let name = format!("{source} with fuel {fuel}");
        if fuel < 11 {
            // Not enough for the banner call: nothing is made.
            h.expect(at, &format!("{name}: out of fuel, nothing used"), |r| {
                r.outcome == Outcome::OutOfFuel && r.counts.fuel() == 0
            });
        } else if fuel < 13 {
            h.expect(at, &format!("{name}: out of fuel, all used"), |r| {
                r.outcome == Outcome::OutOfFuel && r.counts.fuel() == fuel
            });
        }
    });
    h.expect_ending(&whole, "value 11");
    // banner: 1 + 10 units; length: 1; +: 1.
    h.expect(&whole, "3 contractions and 10 extra units", |r| {
        (r.counts.total(), r.counts.extra_fuel(), r.counts.fuel()) == (3, 10, 13)
    });
    h.finish();
}

#[test]
fn host_calls_pay_their_cost_and_make_their_tags() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    let source = r#"pad "ab" 5"#;
    let call = parse_with(&arena, source, &host).unwrap();
    let runs = h.run(source, &call, &Limits::default().with_fuel(5));
    h.expect(&runs, "out of fuel before the call", |r| {
        r.outcome == Outcome::OutOfFuel && r.counts.total() == 0
    });
    let whole = h.run(source, &call, &Limits::default().with_fuel(6));
    h.expect_ending(&whole, r#"value "ababababab""#);
    h.expect(&whole, "one prim and 5 extra units", |r| {
        (r.counts.get(Rule::Prim), r.counts.extra_fuel()) == (1, 5)
    });
    // Paused short of the call, it keeps the fuel it could not spend.
    for run in &whole.runs {
        let Some(mut paused) = run
            .kind
            .machine()
            .start(&call, &Limits::default().with_fuel(3))
        else {
            continue;
        };
        let first = paused.resume(0);
        let left = paused.fuel_left();
        let end = paused.resume(3);
        h.check(
            first.outcome == Outcome::OutOfFuel && left == 3 && end == run.report,
            source,
            run.kind.name(),
            3,
            format!(
                "paused {} with {left} left, then {}",
                describe(&first),
                describe(&end)
            ),
        );
    }
    // A tag the program lacks is the run's own: no arm matches it, and it
    // reads back by name; a tag the program has is the program's.
    for (source, value) in [
        ("case wrap 5 of { Boxed(x) => x; _ => 0 }", "5"),
        ("case wrap 5 of { Some(x) => x; _ => 0 }", "0"),
        ("case some 5 of { Some(x) => x; _ => 0 }", "5"),
        (
            "Pair(wrap (wrap 1), wrap 2)",
            "Pair(Boxed(Boxed(1)), Boxed(2))",
        ),
    ] {
        let runs = run_with_host(&mut h, &arena, &host, source, &Limits::default());
        h.expect(
            &runs,
            &format!("the value {value}"),
            |r| matches!(&r.outcome, Outcome::Value(v) if v.to_string() == value),
        );
    }
    h.finish();
}

#[test]
fn paused_runs_resume_across_a_costly_host_call() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    let source = r#"length (banner "xyz" 4) * 2"#;
    let program = parse_with(&arena, source, &host).unwrap();
    // Every pausing machine, paused at each bound, pauses where the run cut
    // there stopped, and resumes to the whole run's end.
    let whole = h.run(source, &program, &Limits::default());
    h.every_bound(source, &program, &Limits::default(), |h, _, at| {
        h.pauses_at(at, &whole, &program);
    });
    h.expect_ending(&whole, "value 24");
    h.pauses(&whole, &program, 1);
    h.finish();
}

#[test]
fn the_builder_api_calls_host_functions_too() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    let call = host
        .call_term(&arena, "litres_for", &[arena.int(2), arena.int(2)])
        .unwrap();
    assert!(host
        .call_term(&arena, "litres_for", &[arena.int(2)])
        .is_none());
    assert!(matches!(
        Program::new(call),
        Err(ValidationError::ForeignHost { .. })
    ));
    let program = Program::with_host(call, &host).unwrap();
    let runs = h.run("builder", &program, &Limits::default());
    h.expect_ending(&runs, "value 48");
    // A host call belongs to the table it was made with: another table is
    // refused, even one registered the same way (same names, order and
    // arities), and so is a table without the function; a clone of the
    // table is the same table.
    let other = orchard();
    assert!(Program::with_host(call, &HostFunctions::new()).is_err());
    assert!(matches!(
        Program::with_host(call, &other),
        Err(ValidationError::ForeignHost { .. })
    ));
    assert!(Program::with_host(call, &host.clone()).is_ok());
    // A call under a binder gets its argument as data: (λx. litres_for x 6) 7.
    let call = host
        .call_term(&arena, "litres_for", &[arena.var(0), arena.int(6)])
        .unwrap();
    let program = Program::with_host(arena.app(arena.lam(call), arena.int(7)), &host).unwrap();
    let runs = h.run("builder under a binder", &program, &Limits::default());
    h.expect_ending(&runs, &format!("value {}", 7 * 6 * 12));
    h.expect(&runs, "one beta and one prim", |r| {
        r.counts.to_array() == [1, 0, 0, 0, 1, 0]
    });
    h.finish();
}

#[test]
fn exponentially_shared_arguments_hit_the_memory_limit_not_the_host() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    // Values whose trees have 2^40 and 2^60 leaves, passed to a host
    // function: as host data they cannot be unfolded within the limit.
    for (source, limits) in [
        (
            "let rec grow n v = if n == 0 then v else grow (n - 1) (Twin(v, v)) in litres_for (grow 40 1) 1",
            Limits::default().with_memory(8 << 20),
        ),
        (
            "let rec dup n t = if n == 0 then t else dup (n - 1) (Pair(t, t)) in wrap (dup 60 1)",
            Limits::default(),
        ),
    ] {
        let runs = run_with_host(&mut h, &arena, &host, source, &limits);
        h.expect_ending(&runs, "limit memory");
    }
    h.finish();
}

#[test]
fn results_convert_to_rust_types_with_clear_errors() {
    let arena = Arena::new();
    let program = parse(
        &arena,
        r#"Cons(Triple("pear", 4, true), Cons(Triple("plum", 0, false), Nil))"#,
    )
    .unwrap();
    let mut h = Harness::new();
    let runs = h.run("orchard rows", &program, &Limits::default());
    for run in &runs.runs {
        let name = run.kind.name();
        let Outcome::Value(v) = &run.report.outcome else {
            h.fail("orchard rows", name, u64::MAX, describe(&run.report));
            continue;
        };
        let trees: Result<Vec<(String, i64, bool)>, _> = v.extract();
        h.check(
            trees.is_ok_and(|t| t == [("pear".into(), 4, true), ("plum".into(), 0, false)]),
            "orchard rows",
            name,
            u64::MAX,
            "not the rows as Rust values",
        );
        let wrong = v
            .extract::<Vec<(String, bool, bool)>>()
            .map_err(|e| e.to_string());
        h.check(
            wrong == Err("expected a boolean, found an integer".to_string()),
            "orchard rows",
            name,
            u64::MAX,
            format!("{wrong:?}"),
        );
        let wrong = v.extract::<i64>().map_err(|e| e.found().to_string());
        h.check(
            wrong == Err("the constructor Cons".to_string()),
            "orchard rows",
            name,
            u64::MAX,
            format!("{wrong:?}"),
        );
    }
    h.finish();
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
    let mut h = Harness::new();
    let runs = h.run("pricing", &config, &Limits::default());
    for run in &runs.runs {
        // The function each machine made, called on every machine.
        let Outcome::Value(price) = &run.report.outcome else {
            h.fail("pricing", run.kind.name(), u64::MAX, describe(&run.report));
            continue;
        };
        let price = Program::from_value(price).unwrap();
        for (kg, expected) in [(0i64, 40i64), (7, 61), (250, 340)] {
            let program = price.apply(&[kg.into_datum()]).unwrap();
            let name = format!("{}'s pricing of {kg} kg", run.kind.name());
            let limits = Limits::default().with_fuel(50);
            let priced = h.run(&name, &program, &limits);
            h.expect_ending(&priced, &format!("value {expected}"));
        }
        // Fresh, tight limits hold for the call alone.
        let program = price.apply(&[3i64.into_datum()]).unwrap();
        let name = format!("{}'s pricing with 2 units", run.kind.name());
        let tight = h.run(&name, &program, &Limits::default().with_fuel(2));
        h.expect_ending(&tight, "out_of_fuel");
    }
    h.finish();
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
    // What each machine reports on this thread, with ample fuel and with
    // too little: the threads must report the same.
    let mut h = Harness::new();
    let fuels = [u64::MAX, 100];
    let expected: Vec<String> = fuels
        .iter()
        .map(|&fuel| {
            let runs = h.run("total", &program, &Limits::default().with_fuel(fuel));
            runs.reference().map(describe).unwrap_or_default()
        })
        .collect();
    h.finish();
    assert!(expected[0].starts_with(&format!("value {}", 12 * 300 * 301 / 2)));
    assert!(expected[1].starts_with("out_of_fuel"));
    let program = &program;
    std::thread::scope(|scope| {
        let handles: Vec<_> = (0..4)
            .flat_map(|i| MachineKind::enabled().iter().map(move |&m| (i, m)))
            .map(|(i, machine)| {
                scope.spawn(move || {
                    // Each run has its own limits: the odd ones too little fuel.
                    let fuel = fuels[i % 2];
                    let report = machine.run(program, &Limits::default().with_fuel(fuel));
                    (i, machine, describe(&report))
                })
            })
            .collect();
        for handle in handles {
            let (i, machine, got) = handle.join().unwrap();
            assert_eq!(got, expected[i % 2], "{} on thread {i}", machine.name());
        }
    });
}

#[test]
fn every_fuel_bound_agrees_with_costed_host_calls_in_a_loop() {
    let host = orchard();
    let arena = Arena::new();
    let mut h = Harness::new();
    // Host calls of growing cost inside a non-tail recursion, with a host
    // error at the end of one branch.
    let source = r#"
        let rec go n = if n == 0 then 0
                       else length (banner "ab" n) + litres_for n 1 + go (n - 1) in
        Pair(go 4, case rows 2 of { Cons(h, t) => h; Nil => "none" })"#;
    let program = parse_with(&arena, source, &host).unwrap();
    let whole = h.every_bound("go 4", &program, &Limits::default(), |_, _, _| {});
    h.expect(&whole, "a value", |r| {
        matches!(r.outcome, Outcome::Value(_))
    });
    // banner costs 2n for n = 4, 3, 2, 1.
    h.expect(&whole, "extra fuel 20", |r| r.counts.extra_fuel() == 20);
    // Paused in slices of 1, 2 and 3 units, every pausing machine ends as
    // its uninterrupted run.
    for slice in 1..=3 {
        h.pauses(&whole, &program, slice);
    }
    h.finish();
}

/// What a server needs to hold and move, checked by the compiler: programs
/// and values in shared state, machines and detached runs across threads.
#[test]
fn the_embedding_types_are_send_and_sync_where_servers_need_them() {
    fn shared<T: Clone + Send + Sync + 'static>() {}
    fn movable<T: Send + 'static>() {}
    shared::<orrery::Program>();
    shared::<orrery::Value>();
    shared::<orrery::HostFunctions>();
    shared::<orrery::Limits>();
    shared::<orrery::Report>();
    shared::<orrery::Datum<'static>>();
    movable::<Box<dyn orrery::Machine>>();
    movable::<orrery::Detached>();
    // A program in a `static`, built on first use and run from any thread.
    static RULES: std::sync::OnceLock<Program> = std::sync::OnceLock::new();
    let rules = RULES.get_or_init(|| Program::parse("\\crates. crates * 12 + 5").unwrap());
    let answers: Vec<Option<i64>> = std::thread::scope(|scope| {
        let handles: Vec<_> = (1..=3i64)
            .map(|n| {
                scope.spawn(move || {
                    let request = rules.apply(&[Datum::Int(n)]).unwrap();
                    let report = MachineKind::fastest()?.run(&request, &Limits::default());
                    report.outcome.value().and_then(|v| v.as_int())
                })
            })
            .collect();
        handles.into_iter().map(|h| h.join().unwrap()).collect()
    });
    if MachineKind::fastest().is_some() {
        assert_eq!(answers, [Some(17), Some(29), Some(41)]);
    }
}

/// A helper that owns everything it used returns owned data; a host function
/// returns a constructor whose tag it made up at run time, which every
/// machine hands back, reads by `case` (no arm knows it: the default), and
/// reports in its value.
#[test]
fn data_and_tags_made_at_run_time_are_owned() {
    fn crate_label(n: i64) -> Datum<'static> {
        let program = Program::parse(&format!("Label({n}, \"bay\")")).unwrap();
        let report = MachineKind::fastest()
            .unwrap()
            .run(&program, &Limits::default());
        report
            .outcome
            .value()
            .unwrap()
            .to_datum()
            .unwrap()
            .into_owned()
    }
    if MachineKind::fastest().is_none() {
        return;
    }
    assert_eq!(
        crate_label(4),
        Datum::con("Label", vec![Datum::Int(4), Datum::Str("bay".into())])
    );
    let mut host = HostFunctions::new();
    host.register_data("shelf", 1, |args| match args {
        [Datum::Int(n)] => Ok(Datum::con(format!("Shelf{n}"), vec![Datum::Int(n * 10)])),
        _ => Err("a shelf number".to_string()),
    })
    .unwrap();
    let mut h = Harness::new();
    let program = Program::parse_with(
        "Pair(shelf 3, case shelf 7 of { Shelf3(x) => x; _ => 0 - 1 })",
        &host,
    )
    .unwrap();
    let runs = h.run("made-up tags", &program, &Limits::default());
    h.expect_ending(&runs, "value Pair(Shelf3(30), -1)");
    h.finish();
}

/// A request's run does not grow with the rule set it is applied to: once
/// the program is prepared, the same contractions and the same peak memory
/// against 10 rules as against 1,000, for rules held as a chain of closures, as a table of constant
/// data, and as nested branches (the last on env and cek: the stepper
/// substitutes into every branch, see the README's limits section).
#[test]
fn a_request_costs_the_same_against_ten_rules_and_a_thousand() {
    let chain = |n: usize| {
        let mut rules = String::from("\\size. 0");
        for class in (0..n).rev() {
            rules = format!("rule {class} {} ({rules})", 150 + 5 * class);
        }
        format!(
            "let rule = \\class fee next size. if size == class then fee else next size in {rules}"
        )
    };
    let table = |n: usize| {
        let mut list = String::from("Nil");
        for class in (0..n).rev() {
            list = format!("Cons(Rule({class}, {}), {list})", 150 + 5 * class);
        }
        format!(
            "let rules = {list} in let rec first rs size = case rs of {{ Nil => 0; \
             Cons(r, t) => case r of {{ Rule(class, fee) => if class == size then fee else first t size }} }} \
             in \\size. first rules size"
        )
    };
    let branches = |n: usize| {
        let mut body = String::from("0");
        for class in (0..n).rev() {
            body = format!("if size == {class} then {} else ({body})", 150 + 5 * class);
        }
        format!("\\size. {body}")
    };
    // A shape: its name, its rule set of `n` rules, the machines it skips.
    type Shape<'s> = (&'s str, &'s dyn Fn(usize) -> String, &'s [&'s str]);
    let shapes: [Shape<'_>; 3] = [
        ("chain", &chain, &[]),
        ("table", &table, &[]),
        ("branches", &branches, &["stepper"]),
    ];
    for (name, source, skip) in shapes {
        for &kind in MachineKind::enabled() {
            if skip.contains(&kind.name()) {
                continue;
            }
            let ends: Vec<(Option<i64>, orrery::Counts, usize)> = [10, 1000]
                .iter()
                .map(|&n| {
                    let rules = Program::parse(&source(n)).unwrap();
                    let setup = kind.run(&rules, &Limits::default());
                    let function = Program::from_value(setup.outcome.value().unwrap()).unwrap();
                    let mut machine = kind.machine();
                    // The first request prepares the program (env compiles
                    // it, once); the second is what every later one costs.
                    let first = function.apply(&[Datum::Int(1)]).unwrap();
                    machine.run(&first, &Limits::default());
                    let request = function.apply(&[Datum::Int(0)]).unwrap();
                    let report = machine.run(&request, &Limits::default());
                    let value = report.outcome.value().and_then(|v| v.as_int());
                    (value, report.counts, machine.peak_bytes())
                })
                .collect();
            assert_eq!(ends[0].0, Some(150), "{name} on {}", kind.name());
            assert_eq!(
                ends[0],
                ends[1],
                "{name} on {}: 10 rules, then 1,000",
                kind.name()
            );
        }
    }
}
