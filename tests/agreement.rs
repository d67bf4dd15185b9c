//! The agreement harness of DESIGN §2: generated closed programs (divergent,
//! erroring, recursive, with data and case, deeply nested) run on every enabled
//! machine under many fuel bounds — 0, 1, small random ones, one short of the
//! total, the total, and large — and every machine must return the same
//! outcome, value, error kind, total and per-rule counts, and run out of fuel
//! at exactly the bound. Failures proptest finds are minimised and saved in
//! `tests/agreement.proptest-regressions`, replayed on every run; each also
//! becomes a corpus program with a comment on its cause.

mod common;

use common::gen::{build, program};
use orrery::{disagreement, Arena, Limits, MachineKind, Outcome, Program, Report};
use proptest::prelude::*;

/// Fuel for the reference run: generated programs that have not ended by
/// then are treated as divergent (they run out of fuel everywhere).
const FUEL: u64 = 20_000;

/// Memory for every run: small, so memory bombs stop quickly.
const MEMORY: usize = 64 << 20;

/// Run `program` with `fuel` on every machine; check they agree and that out
/// of fuel comes at exactly the bound. Returns the first machine's report.
fn agree_at<'a>(
    program: &Program<'a>,
    fuel: u64,
    arena: &'a Arena,
) -> Result<Report<'a>, TestCaseError> {
    let limits = Limits::default().with_fuel(fuel).with_memory(MEMORY);
    let mut reports = MachineKind::enabled()
        .iter()
        .map(|m| (m.name(), m.run(program, &limits, arena)));
    let (first_name, first) = reports.next().expect("at least one machine");
    for (name, report) in reports {
        if let Some(why) = disagreement(&first, &report) {
            return Err(TestCaseError::fail(format!(
                "fuel {fuel}: {first_name} and {name} disagree: {why}\n{first_name}: {first:?}\n{name}: {report:?}"
            )));
        }
    }
    if matches!(first.outcome, Outcome::OutOfFuel) {
        prop_assert_eq!(first.counts.total(), fuel, "out of fuel before the bound");
    }
    prop_assert!(first.counts.total() <= fuel);
    Ok(first)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 10_000, ..ProptestConfig::default() })]

    #[test]
    fn machines_agree_under_every_fuel_bound(g in program(), cut in any::<u64>()) {
        let arena = Arena::new();
        let program = Program::new(build(&arena, &g, 0)).expect("generated programs are valid");
        let full = agree_at(&program, FUEL, &arena)?;
        if matches!(full.outcome, Outcome::Limit(_)) {
            return Ok(()); // limits may trip anywhere: reported, not compared
        }
        let total = full.counts.total();
        let mut bounds = vec![0, 1, total.saturating_sub(1), total];
        if !matches!(full.outcome, Outcome::OutOfFuel) {
            // The run ends by itself: more fuel, even unbounded, changes nothing.
            bounds.extend([total + 1, u64::MAX]);
        }
        if total > 0 {
            bounds.push(cut % total);
        }
        for fuel in bounds {
            let report = agree_at(&program, fuel, &arena)?;
            if matches!(report.outcome, Outcome::Limit(_)) {
                continue;
            }
            if fuel < total || (fuel == total && matches!(full.outcome, Outcome::OutOfFuel)) {
                // Fewer units than the full run used: stop at exactly the bound.
                prop_assert!(matches!(report.outcome, Outcome::OutOfFuel), "fuel {}: {:?}", fuel, report.outcome);
                prop_assert_eq!(report.counts.total(), fuel);
            } else if !matches!(full.outcome, Outcome::OutOfFuel) {
                // Enough fuel: the same end as the reference run.
                prop_assert!(disagreement(&full, &report).is_none(), "fuel {}: {:?} vs {:?}", fuel, report, full);
            }
        }
    }
}

/// The generator must keep producing every kind of program the harness is
/// for; a generator that drifted to trivial terms would make it vacuous.
#[test]
fn generated_programs_cover_every_outcome() {
    use proptest::strategy::ValueTree;
    use proptest::test_runner::TestRunner;
    let mut runner = TestRunner::deterministic();
    let (mut values, mut errors, mut diverging, mut long) = (0, 0, 0, 0);
    let samples = 2_000;
    for _ in 0..samples {
        let g = program()
            .new_tree(&mut runner)
            .expect("a generated tree")
            .current();
        let arena = Arena::new();
        let program = Program::new(build(&arena, &g, 0)).expect("valid");
        let limits = Limits::default().with_fuel(FUEL).with_memory(MEMORY);
        let report = MachineKind::enabled()[0].run(&program, &limits, &arena);
        match report.outcome {
            Outcome::Value(_) => values += 1,
            Outcome::Error(_) => errors += 1,
            Outcome::OutOfFuel => diverging += 1,
            Outcome::Limit(_) => {}
            Outcome::Fault(f) => panic!("{f}"),
        }
        if report.counts.total() >= 100 {
            long += 1;
        }
    }
    let at_least = samples / 50; // 2% of the samples each
    assert!(
        values >= at_least && errors >= at_least && diverging >= at_least && long >= at_least,
        "values {values}, errors {errors}, diverging {diverging}, 100+ contractions {long}"
    );
    eprintln!("values {values}, errors {errors}, diverging {diverging}, 100+ contractions {long} of {samples}");
}
