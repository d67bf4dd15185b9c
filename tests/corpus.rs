//! The shared corpus: every program under `tests/corpus/` runs on every
//! machine of the table through the one harness (`tests/common/harness.rs`),
//! which compares each machine with the reference stepper (SEMANTICS §3),
//! and is checked against the expectations written in its header; then at
//! fuel bounds below its end, and paused. The curried-call shapes of
//! `tests/corpus/*.shapes` run the same way at every fuel bound. Every
//! failure is collected before the test fails. Set `ORRERY_CORPUS` to a part
//! of a file name to run only the matching files
//! (`ORRERY_CORPUS=tak cargo test --test corpus`).
//!
//! A program's header lines are comments, so each file is also a runnable
//! program:
//!
//! | line | says |
//! |---|---|
//! | `# source: …` | where the expectations come from (at least one) |
//! | `# expect: value TEXT` | the value, in the text syntax, compared as a de Bruijn term |
//! | `# expect: error KIND`, `out_of_fuel`, `limit KIND` | the other endings |
//! | `# fuel: N`, `# memory: BYTES` | the limits (default: [`Limits::default`]) |
//! | `# steps: N` | contractions in all |
//! | `# RULE: N` | contractions under one rule (`beta`, `beta_rec`, `let`, `if`, `prim`, `case`) |
//! | `# extra_fuel: N` | units used beyond one per contraction |
//! | `# with fuel N: ENDING, steps M` | the ending (and contractions) with less fuel |
//! | `# skip: MACHINE reason` | leave a machine out, saying why |
//!
//! A shapes file holds blocks of `program:`, `expect:` and `trace:` lines
//! (the rule of every contraction in order, one letter each: `b` beta, `r`
//! beta_rec, `l` let, `i` if, `p` prim, `c` case), after `# source:` lines.

mod common;

use common::corpus::{corpus_files, file_name, read_header, read_shapes, Shape};
use common::harness::{ends_as, machines_but, trace_counts, Harness};
use orrery::{parse, Arena, Limits};

/// A program whose whole run uses at most this much fuel is run at every
/// fuel bound; a longer one at a few.
const EVERY_BOUND_UP_TO: u64 = 400;

/// Run one corpus program and check it against its header.
fn run_program(h: &mut Harness, name: &str, source: &str) {
    let header = match read_header(source) {
        Ok(header) => header,
        Err(why) => return h.fail(name, "the header", 0, why),
    };
    let arena = Arena::new();
    let program = match parse(&arena, source) {
        Ok(p) => p,
        Err(e) => return h.fail(name, "the parser", 0, e.render(name, source)),
    };
    let skip: Vec<&str> = header.skip.iter().map(String::as_str).collect();
    let machines = machines_but(&skip);
    let limits = &header.limits;
    let whole = h.run_on(&machines, name, &program, limits);
    h.expect_ending(&whole, header.ending.as_deref().unwrap_or(""));
    if let Some(steps) = header.steps {
        h.expect(&whole, &format!("{steps} steps"), |r| {
            r.counts.total() == steps
        });
    }
    for &(rule, n) in &header.rules {
        h.expect_count(&whole, rule, n);
    }
    if let Some(extra) = header.extra_fuel {
        h.expect(&whole, &format!("extra fuel {extra}"), |r| {
            r.counts.extra_fuel() == extra
        });
    }
    for (fuel, ending, steps) in &header.cuts {
        let cut = h.run_on(&machines, name, &program, &limits.clone().with_fuel(*fuel));
        h.expect_ending(&cut, ending);
        if let Some(steps) = *steps {
            h.expect(&cut, &format!("{steps} steps"), |r| {
                r.counts.total() == steps
            });
        }
    }
    // Below its end: at every bound for a short program, at a few for a
    // long one (each bound is a run on every machine).
    let Some(used) = whole.reference().map(|r| r.counts.fuel()) else {
        return;
    };
    let limited = whole
        .reference()
        .is_some_and(|r| matches!(r.outcome, orrery::Outcome::Limit(_)));
    if limited {
        return; // a resource limit may trip anywhere: no bound to check
    }
    if used <= EVERY_BOUND_UP_TO {
        h.every_bound_on(&machines, name, &program, limits, |_, _, _| {});
    } else {
        for fuel in [0, 1, used / 2, used - 1] {
            let at = h.run_on(&machines, name, &program, &limits.clone().with_fuel(fuel));
            h.expect(&at, "out of fuel", |r| {
                r.outcome == orrery::Outcome::OutOfFuel
            });
        }
    }
    let slices: &[u64] = if used <= EVERY_BOUND_UP_TO {
        &[1, 7]
    } else {
        &[997]
    };
    for &slice in slices {
        h.pauses(&whole, &program, slice);
    }
}

#[test]
fn every_corpus_program_ends_as_its_header_says_on_every_machine() {
    let (files, filter) = corpus_files("orr");
    assert!(
        !files.is_empty() || filter.is_empty() || !corpus_files("shapes").0.is_empty(),
        "ORRERY_CORPUS={filter} matches no file"
    );
    assert!(
        files.len() >= 28 || !filter.is_empty(),
        "the corpus went missing"
    );
    let mut h = Harness::new();
    for path in &files {
        let name = file_name(path);
        match std::fs::read_to_string(path) {
            Ok(source) => run_program(&mut h, &name, &source),
            Err(e) => h.fail(&name, "the reader", 0, e.to_string()),
        }
    }
    h.finish();
}

/// Run one shape at every fuel bound and paused one unit at a time.
fn run_shape(h: &mut Harness, name: &str, shape: &Shape) {
    let arena = Arena::new();
    let program = match parse(&arena, &shape.program) {
        Ok(p) => p,
        Err(e) => return h.fail(name, "the parser", 0, e.render(name, &shape.program)),
    };
    let total = shape.trace.chars().count();
    let trace = &shape.trace;
    let whole = h.every_bound(name, &program, &Limits::default(), |h, bound, at| {
        let n = usize::try_from(bound).unwrap_or(usize::MAX).min(total);
        match trace_counts(trace, n) {
            Ok(want) => h.expect(
                at,
                &format!("the counts of {n} letters of the trace"),
                |r| r.counts == want,
            ),
            Err(why) => h.fail(name, "the trace", bound, why),
        }
    });
    h.expect_ending(&whole, &shape.ending);
    h.expect(&whole, &format!("{total} contractions"), |r| {
        r.counts.total() == total as u64
    });
    h.pauses(&whole, &program, 1);
}

#[test]
fn every_curried_shape_makes_its_trace_at_every_fuel_bound_on_every_machine() {
    let (files, _) = corpus_files("shapes");
    let mut h = Harness::new();
    let mut count = 0;
    for path in &files {
        let file = file_name(path);
        let shapes = std::fs::read_to_string(path)
            .map_err(|e| e.to_string())
            .and_then(|text| read_shapes(&text));
        match shapes {
            Ok(shapes) => {
                for (i, shape) in shapes.iter().enumerate() {
                    count += 1;
                    run_shape(
                        &mut h,
                        &format!("{file} #{} `{}`", i + 1, shape.program),
                        shape,
                    );
                }
            }
            Err(why) => h.fail(&file, "the reader", 0, why),
        }
    }
    let filtered = std::env::var("ORRERY_CORPUS").is_ok_and(|f| !f.is_empty());
    assert!(count >= 75 || filtered, "the shapes went missing");
    h.finish();
}

/// A corpus file must say where its expectations come from, and a skip
/// must say why: the reader refuses headers that do not.
#[test]
fn headers_without_a_source_or_a_reason_are_refused() {
    assert!(read_header("# expect: value 1\n1").is_err());
    assert!(read_header("# source: x\n# skip: env\n# expect: value 1\n1").is_err());
    assert!(read_header("# source: x\n# speed: 3\n# expect: value 1\n1").is_err());
    let h = read_header("# source: x\n# skip: env too slow\n# with fuel 3: out_of_fuel, steps 2\n# expect: value 1\n1");
    let h = h.expect("a good header");
    assert_eq!(h.skip, ["env"]);
    assert_eq!(h.cuts, [(3, "out_of_fuel".to_string(), Some(2))]);
    assert!(ends_as(
        &orrery::Report {
            outcome: orrery::Outcome::OutOfFuel,
            counts: orrery::Counts::default(),
            location: None,
        },
        "out_of_fuel"
    )
    .is_ok());
}
