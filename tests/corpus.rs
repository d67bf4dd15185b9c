//! The shared corpus: every program under `tests/corpus/` runs on every enabled
//! machine and is checked against the expectations written in its header
//! comments, and the machines are checked against each other (DESIGN §2).
//! All failures are collected before the test fails. Set `ORRERY_CORPUS` to a
//! part of a file name to run only the matching programs.
//!
//! Header lines (comments, so each file is also a runnable program):
//! `# expect: value TEXT` (the value, in the text syntax), `# expect: error
//! KIND`, `# expect: out_of_fuel`, `# expect: limit KIND`; `# fuel: N`,
//! `# memory: BYTES`; `# steps: N` (total) or `# RULE: N` (one rule's count);
//! `# skip: MACHINE reason` to leave a machine out, with the reason; and
//! `# source:` naming where the expectation comes from.

use std::path::Path;

use orrery::{disagreement, parse, parse_term, Arena, Limits, MachineKind, Outcome, Report, Rule};

/// The expectations read from one file's header.
#[derive(Default)]
struct Expectations {
    outcome: Option<String>,
    limits: Limits,
    steps: Option<u64>,
    rules: Vec<(Rule, u64)>,
    skip: Vec<String>,
}

fn read_header(source: &str) -> Result<Expectations, String> {
    let mut e = Expectations::default();
    for line in source.lines().take_while(|l| l.starts_with('#')) {
        let Some((key, value)) = line[1..].split_once(':') else {
            continue;
        };
        let (key, value) = (key.trim(), value.trim());
        let number = || {
            value
                .parse::<u64>()
                .map_err(|_| format!("bad number in `{line}`"))
        };
        match key {
            "expect" => e.outcome = Some(value.to_string()),
            "fuel" => e.limits.fuel = number()?,
            "memory" => e.limits.memory = number()? as usize,
            "steps" => e.steps = Some(number()?),
            "skip" => e
                .skip
                .push(value.split_whitespace().next().unwrap_or("").to_string()),
            "source" => {}
            rule => match Rule::ALL.iter().find(|r| r.name() == rule) {
                Some(r) => e.rules.push((*r, number()?)),
                None => return Err(format!("unknown header key `{rule}`")),
            },
        }
    }
    if e.outcome.is_none() {
        return Err("no `# expect:` line".to_string());
    }
    Ok(e)
}

/// Check one report against the expectations; `Err` says what is wrong.
fn check(report: &Report<'_>, e: &Expectations) -> Result<(), String> {
    let expect = e.outcome.as_deref().unwrap_or("");
    let (kind, rest) = expect.split_once(' ').unwrap_or((expect, ""));
    let got = match &report.outcome {
        Outcome::Value(v) => format!("value {}", orrery::print(v)),
        Outcome::Error(err) => format!("error {}", err.kind().name()),
        Outcome::OutOfFuel => "out_of_fuel".to_string(),
        Outcome::Limit(l) => format!("limit {}", l.kind().name()),
        Outcome::Fault(f) => format!("fault {f}"),
    };
    let ok = match (kind, &report.outcome) {
        ("value", Outcome::Value(v)) => {
            let arena = Arena::new();
            let want =
                parse_term(&arena, rest).map_err(|err| format!("bad expected value: {err}"))?;
            want == *v
        }
        _ => got == expect,
    };
    if !ok {
        return Err(format!("expected {expect}, got {got}"));
    }
    if let Some(steps) = e.steps {
        if report.counts.total() != steps {
            return Err(format!("expected {steps} steps, got {}", report.counts));
        }
    }
    for (rule, n) in &e.rules {
        if report.counts.get(*rule) != *n {
            return Err(format!("expected {rule} {n}, got {}", report.counts));
        }
    }
    Ok(())
}

#[test]
fn corpus() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/corpus");
    let filter = std::env::var("ORRERY_CORPUS").unwrap_or_default();
    let mut files: Vec<_> = std::fs::read_dir(&dir)
        .expect("tests/corpus exists")
        .filter_map(|entry| entry.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "orr"))
        .filter(|p| p.to_string_lossy().contains(&filter))
        .collect();
    files.sort();
    let mut failures = Vec::new();
    let mut runs = 0;
    for path in &files {
        let name = path
            .file_name()
            .unwrap_or_default()
            .to_string_lossy()
            .to_string();
        let source = std::fs::read_to_string(path).unwrap_or_default();
        let e = match read_header(&source) {
            Ok(e) => e,
            Err(why) => {
                failures.push(format!("{name}: {why}"));
                continue;
            }
        };
        let arena = Arena::new();
        let program = match parse(&arena, &source) {
            Ok(p) => p,
            Err(err) => {
                failures.push(err.render(&name, &source));
                continue;
            }
        };
        let mut reports: Vec<(&str, Report<'_>)> = Vec::new();
        for machine in MachineKind::enabled() {
            if e.skip.iter().any(|s| s == machine.name()) {
                continue;
            }
            let report = machine.run(&program, &e.limits, &arena);
            runs += 1;
            if let Err(why) = check(&report, &e) {
                failures.push(format!("{name} on {}: {why}", machine.name()));
            }
            reports.push((machine.name(), report));
        }
        for pair in reports.windows(2) {
            if let Some(why) = disagreement(&pair[0].1, &pair[1].1) {
                failures.push(format!(
                    "{name}: {} and {} disagree: {why}",
                    pair[0].0, pair[1].0
                ));
            }
        }
    }
    assert!(
        filter.is_empty() || !files.is_empty(),
        "ORRERY_CORPUS={filter} matches no file"
    );
    assert!(
        files.len() >= 15 || !filter.is_empty(),
        "the corpus went missing"
    );
    assert!(
        failures.is_empty(),
        "{} of {runs} runs failed:\n{}",
        failures.len(),
        failures.join("\n")
    );
}
