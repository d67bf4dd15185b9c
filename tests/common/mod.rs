//! Helpers shared by the integration tests: run a program on every enabled
//! machine and insist that they agree (DESIGN §2).
#![allow(dead_code)]

use orrery::{disagreement, parse, Arena, Limits, MachineKind, Outcome, Report};

/// Parse `source` and run it on every enabled machine under `limits`,
/// panicking (this is a test) if it does not parse or the machines disagree.
/// Returns the stepper's report (or the first machine's).
pub fn run_everywhere<'a>(arena: &'a Arena, source: &str, limits: &Limits) -> Report<'a> {
    let program = match parse(arena, source) {
        Ok(p) => p,
        Err(e) => panic!("{}", e.render("<test>", source)),
    };
    run_program_everywhere(arena, &program, limits, source)
}

/// Run `program` on every enabled machine under `limits`, panicking if the
/// machines disagree; `what` names the program in the message. Returns the
/// first machine's report.
pub fn run_program_everywhere<'a>(
    arena: &'a Arena,
    program: &orrery::Program<'a>,
    limits: &Limits,
    what: &str,
) -> Report<'a> {
    let source = what;
    let mut reports: Vec<(&str, Report<'a>)> = MachineKind::enabled()
        .iter()
        .map(|m| (m.name(), m.run(program, limits, arena)))
        .collect();
    let (first_name, first) = reports.remove(0);
    for (name, report) in &reports {
        if let Some(why) = disagreement(&first, report) {
            panic!("{first_name} and {name} disagree on {source:?}: {why}\n{first:?}\n{report:?}");
        }
    }
    first
}

/// The value a program reduces to on every machine.
pub fn value_of<'a>(arena: &'a Arena, source: &str) -> &'a orrery::Term<'a> {
    match run_everywhere(arena, source, &Limits::default()).outcome {
        Outcome::Value(v) => v,
        other => panic!("{source:?} gave {other:?}, not a value"),
    }
}

/// The integer a program reduces to on every machine.
pub fn int_of(source: &str) -> i64 {
    let arena = Arena::new();
    match value_of(&arena, source).node() {
        orrery::Node::Int(n) => *n,
        other => panic!("{source:?} gave {other:?}, not an integer"),
    }
}
pub mod fuzz_checks;
pub mod gen;
