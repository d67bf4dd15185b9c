//! The one harness every runner of the test suite uses (SEMANTICS §3, the
//! agreement promise): run a program on every machine of the table, check
//! each report against the limits it ran under, compare every machine with
//! the reference (the stepper, or the first machine of the table in a build
//! without it) through [`orrery::disagreement`], and collect every failure —
//! program, machine, fuel and why — before failing once at the end.
//!
//! It depends on orrery alone, so the fuzz targets can include it by path
//! (through `fuzz_checks.rs`).

use orrery::{
    disagreement, parse_term, Arena, Counts, LimitKind, Limits, MachineKind, Outcome, Program,
    Report, Rule,
};

/// How much of a value a failure message shows.
const SHOWN: usize = 200;

/// The machine every other machine is compared with: the stepper, or the
/// first machine of the table when the stepper is not in the build (`None`
/// in a build with no machine).
pub fn reference() -> Option<MachineKind> {
    MachineKind::from_name("stepper").or_else(MachineKind::fastest)
}

/// The machines of the table, in its order, less those named in `skip`.
pub fn machines_but(skip: &[&str]) -> Vec<MachineKind> {
    MachineKind::enabled()
        .iter()
        .copied()
        .filter(|m| !skip.contains(&m.name()))
        .collect()
}

/// One machine's run: its report and the most bytes it held.
pub struct Run {
    /// The machine.
    pub kind: MachineKind,
    /// What it reported.
    pub report: Report,
    /// [`orrery::Machine::peak_bytes`] after the run.
    pub peak: usize,
}

/// A program's runs on several machines under one set of limits.
pub struct Runs {
    /// The program's name in failure messages.
    pub name: String,
    /// The limits every run had.
    pub limits: Limits,
    /// One run per machine, in the table's order.
    pub runs: Vec<Run>,
    /// Which run is the reference.
    reference: usize,
}

impl Runs {
    /// The report every other was compared with: the reference machine's
    /// (see [`reference`]), or when it was left out or stopped at a resource
    /// limit, the first machine's that was not. A program run on no machine
    /// has none.
    pub fn reference(&self) -> Option<&Report> {
        self.runs.get(self.reference).map(|r| &r.report)
    }

    /// The run of `kind`, if it ran.
    pub fn of(&self, kind: MachineKind) -> Option<&Run> {
        self.runs.iter().find(|r| r.kind == kind)
    }
}

/// Failures collected across any number of runs, reported together by
/// [`Harness::finish`] (or, if a test forgets, when the harness is dropped).
#[derive(Default)]
pub struct Harness {
    failures: Vec<String>,
    runs: u64,
}

impl Harness {
    /// A harness with no failures yet.
    pub fn new() -> Self {
        Harness::default()
    }

    /// Record a failure of `name` on `machine` with `fuel`.
    pub fn fail(&mut self, name: &str, machine: &str, fuel: u64, why: impl Into<String>) {
        let why = why.into();
        let fuel = match fuel {
            u64::MAX => "unbounded".to_string(),
            n => n.to_string(),
        };
        self.failures
            .push(format!("{name} on {machine} with fuel {fuel}: {why}"));
    }

    /// Record `why` as a failure of `name` on `machine` unless `ok`.
    pub fn check(
        &mut self,
        ok: bool,
        name: &str,
        machine: &str,
        fuel: u64,
        why: impl Into<String>,
    ) {
        if !ok {
            self.fail(name, machine, fuel, why);
        }
    }

    /// Whether nothing has failed so far.
    pub fn is_clean(&self) -> bool {
        self.failures.is_empty()
    }

    /// Run `program` on every machine of the table under `limits`.
    pub fn run(&mut self, name: &str, program: &Program, limits: &Limits) -> Runs {
        self.run_on(MachineKind::enabled(), name, program, limits)
    }

    /// Run `program` on `machines` under `limits`, each on a fresh machine:
    /// check every report against the limits and compare every machine
    /// with the reference.
    pub fn run_on(
        &mut self,
        machines: &[MachineKind],
        name: &str,
        program: &Program,
        limits: &Limits,
    ) -> Runs {
        let runs: Vec<Run> = machines
            .iter()
            .map(|&kind| {
                let mut machine = kind.machine();
                let report = machine.run(program, limits);
                Run {
                    kind,
                    report,
                    peak: machine.peak_bytes(),
                }
            })
            .collect();
        self.runs += runs.len() as u64;
        // The reference, or when a resource limit stopped it (limits are
        // never compared), the first run that ended otherwise.
        let limited = |run: &Run| matches!(run.report.outcome, Outcome::Limit(_));
        let reference = reference()
            .and_then(|r| runs.iter().position(|run| run.kind == r))
            .filter(|&i| !limited(&runs[i]))
            .or_else(|| runs.iter().position(|run| !limited(run)))
            .unwrap_or(0);
        let runs = Runs {
            name: name.to_string(),
            limits: limits.clone(),
            runs,
            reference,
        };
        for run in &runs.runs {
            if let Err(why) = within_limits(&run.report, limits, run.peak) {
                self.fail(name, run.kind.name(), limits.fuel, why);
            }
        }
        if let Some(reference) = runs.runs.get(runs.reference) {
            for run in &runs.runs {
                if run.kind != reference.kind {
                    self.compare(name, reference, run, limits.fuel);
                }
            }
        }
        runs
    }

    /// Compare `run` with the reference run `reference` of the same
    /// program under the same limits.
    fn compare(&mut self, name: &str, reference: &Run, run: &Run, fuel: u64) {
        let machine = format!("{} (against {})", run.kind.name(), reference.kind.name());
        if let Err(why) = same(&reference.report, &run.report) {
            self.fail(name, &machine, fuel, why);
        }
    }

    /// Compare a report a test obtained some other way (a reused machine, a
    /// resumed run, an unaccounted build) with the reference run of `runs`;
    /// `machine` names where it came from.
    pub fn agrees(&mut self, runs: &Runs, machine: &str, report: &Report) {
        let Some(reference) = runs.reference() else {
            return;
        };
        if let Err(why) = within_limits(report, &runs.limits, 0) {
            self.fail(&runs.name, machine, runs.limits.fuel, why);
        }
        if let Err(why) = same(reference, report) {
            self.fail(&runs.name, machine, runs.limits.fuel, why);
        }
    }

    /// Record a failure for every run of `runs` whose report does not
    /// satisfy `want`; `what` says what was wanted.
    pub fn expect(&mut self, runs: &Runs, what: &str, want: impl Fn(&Report) -> bool) {
        for run in &runs.runs {
            if !want(&run.report) {
                let got = describe(&run.report);
                self.fail(
                    &runs.name,
                    run.kind.name(),
                    runs.limits.fuel,
                    format!("expected {what}, got {got}"),
                );
            }
        }
    }

    /// Every run ends as `ending` says: `value TEXT` (the value in the text
    /// syntax, compared as a de Bruijn term), `error KIND`, `out_of_fuel`,
    /// `limit KIND` or `fault`.
    pub fn expect_ending(&mut self, runs: &Runs, ending: &str) {
        for run in &runs.runs {
            if let Err(why) = ends_as(&run.report, ending) {
                self.fail(&runs.name, run.kind.name(), runs.limits.fuel, why);
            }
        }
    }

    /// Every run made `n` contractions under `rule`.
    pub fn expect_count(&mut self, runs: &Runs, rule: Rule, n: u64) {
        self.expect(runs, &format!("{rule} {n}"), |r| r.counts.get(rule) == n);
    }

    /// Run `program` at every fuel bound from 0 to one past what the
    /// reference's run under `limits` used, on every machine, comparing each
    /// bound's runs as [`Harness::run`] does; below what a machine's whole
    /// run used, every run is out of fuel having used no more than the
    /// bound (exactly the bound when no contraction needs more than one
    /// unit) and made no more of any rule than the whole run; from there
    /// on, it is the whole run. `each` may check more of every bound's runs.
    /// Returns the runs under `limits`.
    pub fn every_bound(
        &mut self,
        name: &str,
        program: &Program,
        limits: &Limits,
        each: impl FnMut(&mut Self, u64, &Runs),
    ) -> Runs {
        self.every_bound_on(MachineKind::enabled(), name, program, limits, each)
    }

    /// [`Harness::every_bound`] on `machines`.
    pub fn every_bound_on(
        &mut self,
        machines: &[MachineKind],
        name: &str,
        program: &Program,
        limits: &Limits,
        mut each: impl FnMut(&mut Self, u64, &Runs),
    ) -> Runs {
        let whole = self.run_on(machines, name, program, limits);
        let Some(used) = whole.reference().map(|r| r.counts.fuel()) else {
            return whole;
        };
        for bound in 0..=used.saturating_add(1).min(limits.fuel) {
            let at = self.run_on(machines, name, program, &limits.clone().with_fuel(bound));
            for (run, full) in at.runs.iter().zip(&whole.runs) {
                let (report, counts) = (&run.report, &full.report.counts);
                let machine = run.kind.name();
                if matches!(full.report.outcome, Outcome::Limit(_)) {
                    continue;
                }
                if bound < counts.fuel() {
                    let exact = counts.extra_fuel() == 0;
                    let ok = report.outcome == Outcome::OutOfFuel
                        && report.counts.fuel() <= bound
                        && (!exact || report.counts.total() == bound)
                        && Rule::ALL
                            .iter()
                            .all(|&rule| report.counts.get(rule) <= counts.get(rule));
                    self.check(
                        ok,
                        name,
                        machine,
                        bound,
                        format!(
                            "expected out of fuel within the bound and the whole run's counts ({counts}), got {}",
                            describe(report)
                        ),
                    );
                } else if let Err(why) = same(&full.report, report) {
                    self.fail(name, machine, bound, format!("not the whole run: {why}"));
                }
            }
            each(self, bound, &at);
        }
        whole
    }

    /// For every machine of `whole` that can pause: start `program` with no
    /// fuel, resume it in slices of `slice` units (no more than the fuel of
    /// `whole`'s limits in all), and insist that it ends exactly as that
    /// machine's whole run did; that every pause used all the fuel given so
    /// far (when no contraction needs more than one unit), so that it paused
    /// `⌈total / slice⌉ - 1` times; that it then says it is finished; and
    /// that resuming an ended run reports the same end.
    pub fn pauses(&mut self, whole: &Runs, program: &Program, slice: u64) {
        let limits = &whole.limits;
        let name = format!("{} paused every {slice} units", whole.name);
        for full in &whole.runs {
            let machine = full.kind.name();
            let Some(mut run) = full
                .kind
                .machine()
                .start(program, &limits.clone().with_fuel(0))
            else {
                continue;
            };
            if matches!(full.report.outcome, Outcome::Limit(_)) {
                continue;
            }
            let exact = full.report.counts.extra_fuel() == 0;
            let (mut given, mut pauses) = (0u64, 0u64);
            let mut end = run.resume(0);
            self.check(
                end.outcome == Outcome::OutOfFuel || full.report.counts.fuel() == 0,
                &name,
                machine,
                0,
                format!("resumed with no fuel: {}", describe(&end)),
            );
            while end.outcome == Outcome::OutOfFuel && given < limits.fuel {
                let more = slice.min(limits.fuel - given);
                given += more;
                end = run.resume(more);
                if end.outcome == Outcome::OutOfFuel && given < limits.fuel {
                    pauses += 1;
                    self.check(
                        !exact || end.counts.total() == given,
                        &name,
                        machine,
                        given,
                        format!("paused having made {}", end.counts),
                    );
                }
            }
            if let Err(why) = within_limits(&end, limits, run.peak_bytes()) {
                self.fail(&name, machine, given, why);
            }
            if end != full.report {
                self.fail(
                    &name,
                    machine,
                    given,
                    format!(
                        "ended {}, its whole run {}",
                        describe(&end),
                        describe(&full.report)
                    ),
                );
                continue;
            }
            let total = full.report.counts.total();
            if exact && full.report.outcome != Outcome::OutOfFuel && total > 0 {
                self.check(
                    pauses == total.div_ceil(slice) - 1,
                    &name,
                    machine,
                    given,
                    format!("paused {pauses} times for {total} contractions"),
                );
            }
            if end.outcome != Outcome::OutOfFuel {
                self.check(
                    run.is_finished(),
                    &name,
                    machine,
                    given,
                    "not finished at its end",
                );
                let again = run.resume(5);
                self.check(
                    again == end,
                    &name,
                    machine,
                    given,
                    format!("resumed after its end: {}", describe(&again)),
                );
            }
        }
    }

    /// For every run of `at` (runs cut at a fuel bound) whose machine can
    /// pause: start `program` with that bound and insist that it pauses
    /// where the cut run stopped, then ends, given all the fuel it wants,
    /// as that machine's run in `whole` did, and reports that end again.
    pub fn pauses_at(&mut self, at: &Runs, whole: &Runs, program: &Program) {
        let bound = at.limits.fuel;
        let name = format!("{} paused at its bound", at.name);
        for (cut, full) in at.runs.iter().zip(&whole.runs) {
            let Some(mut run) = cut.kind.machine().start(program, &at.limits) else {
                continue;
            };
            let machine = cut.kind.name();
            let paused = run.resume(0);
            self.check(
                paused == cut.report,
                &name,
                machine,
                bound,
                format!(
                    "paused {}, cut {}",
                    describe(&paused),
                    describe(&cut.report)
                ),
            );
            let more = whole.limits.fuel.saturating_sub(bound);
            let end = run.resume(more);
            let again = run.resume(5);
            let limited = matches!(full.report.outcome, Outcome::Limit(_));
            self.check(
                limited || (end == full.report && again == end),
                &name,
                machine,
                bound,
                format!(
                    "resumed to {}, then {}, its whole run {}",
                    describe(&end),
                    describe(&again),
                    describe(&full.report)
                ),
            );
        }
    }

    /// The failures so far as one message, if any; the harness is then
    /// empty (for property tests, which report a failure themselves).
    pub fn into_result(mut self) -> Result<(), String> {
        let failures = std::mem::take(&mut self.failures);
        if failures.is_empty() {
            Ok(())
        } else {
            Err(summary(&failures, self.runs))
        }
    }

    /// Fail, once, with every failure collected, if there are any.
    pub fn finish(self) {
        if let Err(all) = self.into_result() {
            panic!("{all}");
        }
    }
}

impl Drop for Harness {
    /// A harness dropped with failures it did not report reports them.
    fn drop(&mut self) {
        if !self.failures.is_empty() && !std::thread::panicking() {
            panic!("{}", summary(&self.failures, self.runs));
        }
    }
}

fn summary(failures: &[String], runs: u64) -> String {
    format!(
        "{} failures in {runs} runs:\n{}",
        failures.len(),
        failures.join("\n")
    )
}

/// Whether a report is one a run under `limits` may give, having held at
/// most `peak` bytes (0 when unknown): a value, an error after at
/// least one attempted contraction, no more fuel used than given, a
/// cancellation only with a handle, no more bytes held than allowed unless
/// the memory limit stopped it, and never a fault.
pub fn within_limits(report: &Report, limits: &Limits, peak: usize) -> Result<(), String> {
    let counts = &report.counts;
    if counts.fuel() > limits.fuel {
        return Err(format!(
            "used {} of {} units of fuel",
            counts.fuel(),
            limits.fuel
        ));
    }
    match &report.outcome {
        Outcome::Error(e) if counts.total() == 0 => {
            return Err(format!("{} after no contraction", e.kind().name()));
        }
        Outcome::Limit(l) if l.kind() == LimitKind::Cancelled && limits.cancel.is_none() => {
            return Err("cancelled without a handle".to_string());
        }
        Outcome::Fault(f) => return Err(format!("fault: {f}")),
        _ => {}
    }
    let stopped_by_memory =
        matches!(&report.outcome, Outcome::Limit(l) if l.kind() == LimitKind::Memory);
    if !stopped_by_memory && peak > limits.memory {
        return Err(format!(
            "held {peak} bytes under a limit of {} and was not stopped",
            limits.memory
        ));
    }
    Ok(())
}

/// Why two reports of one program under one set of limits differ: as
/// [`orrery::disagreement`] says, and besides (though SEMANTICS §3 does not
/// promise it) when two errors of one kind have different messages.
pub fn same(a: &Report, b: &Report) -> Result<(), String> {
    if let Some(why) = disagreement(a, b) {
        return Err(format!("{why}: {} and {}", describe(a), describe(b)));
    }
    if let (Outcome::Error(x), Outcome::Error(y)) = (&a.outcome, &b.outcome) {
        if x.message() != y.message() {
            return Err(format!(
                "different messages: {:?} and {:?}",
                x.message(),
                y.message()
            ));
        }
    }
    Ok(())
}

/// A report as failure messages show it: its ending and its counts.
pub fn describe(report: &Report) -> String {
    format!("{} after {}", ending(report), report.counts)
}

/// How a report ended, as corpus files write it: `value TEXT`, `error
/// KIND`, `out_of_fuel`, `limit KIND`, `fault MESSAGE`.
pub fn ending(report: &Report) -> String {
    match &report.outcome {
        Outcome::Value(v) => format!("value {}", shown(v)),
        Outcome::Error(e) => format!("error {}", e.kind().name()),
        Outcome::OutOfFuel => "out_of_fuel".to_string(),
        Outcome::Limit(l) => format!("limit {}", l.kind().name()),
        Outcome::Fault(f) => format!("fault {f}"),
        Outcome::Suspended(call) => format!("suspended {call}"),
    }
}

fn shown(v: &orrery::Value) -> String {
    v.print_limited(SHOWN).text
}

/// Whether `report` ends as `ending` says (see [`Harness::expect_ending`]).
pub fn ends_as(report: &Report, ending: &str) -> Result<(), String> {
    let (kind, rest) = ending.split_once(' ').unwrap_or((ending, ""));
    let ok = match (kind, &report.outcome) {
        ("value", Outcome::Value(v)) => {
            let arena = Arena::new();
            let want = parse_term(&arena, rest)
                .map_err(|e| format!("bad expected value `{rest}`: {e}"))?;
            *v == want
        }
        ("value", _) => false,
        _ => self::ending(report) == ending,
    };
    if ok {
        Ok(())
    } else {
        Err(format!("expected {ending}, got {}", describe(report)))
    }
}

/// The counts of the contractions `trace` writes one letter each, in order
/// (`b` beta, `r` beta_rec, `l` let, `i` if, `p` prim, `c` case), up to
/// the first `n`; `Err` names a letter that is none of these.
pub fn trace_counts(trace: &str, n: usize) -> Result<Counts, String> {
    let mut counts = Counts::default();
    for c in trace.chars().take(n) {
        counts.add(match c {
            'b' => Rule::Beta,
            'r' => Rule::BetaRec,
            'l' => Rule::Let,
            'i' => Rule::If,
            'p' => Rule::Prim,
            'c' => Rule::Case,
            other => return Err(format!("`{other}` in a trace is no rule")),
        });
    }
    Ok(counts)
}
