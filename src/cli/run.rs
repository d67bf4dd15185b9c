//! The `run`, `check` and `fmt` subcommands.

use std::io::{IsTerminal, Write};
use std::time::{Duration, Instant};

use orrery::{
    disagreement_within, print_with, Arena, Limits, MachineKind, Outcome, Program, Report,
};

use super::args::{CheckArgs, RunArgs};
use super::source::{read_input, Source};
use super::{
    host_table, json, outcome_status, parse_program, report_syntax, status, text_report, Io,
};

/// A redex in a trace line is cut past this many bytes.
#[cfg_attr(not(feature = "stepper"), allow(dead_code))]
const TRACE_PRINT_LIMIT: usize = 4096;

/// A run shows its progress (on a terminal) once it has taken this long.
const PROGRESS_AFTER: Duration = Duration::from_secs(1);

/// Fuel per slice of a run that may show its progress.
const SLICE: u64 = 1 << 20;

/// The source and program of a subcommand, or the status it already
/// failed with.
fn program_of(
    io: &mut Io,
    input: &super::args::Input,
    common: &super::args::Common,
    listing: bool,
) -> Result<(Source, String, Program), u8> {
    let host = host_table(io, common.host.as_deref(), common.max_source, common.json)?;
    let source = read_input(input, common.max_source).map_err(|message| {
        io.fail(common.json, "input_error", &message, None);
        status::USAGE
    })?;
    let text = String::from_utf8_lossy(&source.bytes).into_owned();
    match parse_program(&source.bytes, &host) {
        Ok(program) => Ok((source, text, program)),
        Err(e) if listing && !common.json && !e.unbound.is_empty() => {
            // `check` names every unbound name on a line of its own.
            for (name, line, col) in &e.unbound {
                let _ = writeln!(
                    io.stdout,
                    "{}:{line}:{col}: unbound name `{name}`",
                    source.name
                );
            }
            Err(status::SYNTAX)
        }
        Err(e) => {
            report_syntax(io, common.json, &source.name, &text, &e);
            Err(status::SYNTAX)
        }
    }
}

/// `orrery run`.
pub fn run(args: &RunArgs, io: &mut Io) -> u8 {
    let kinds = match args.machine.kinds() {
        Ok(kinds) => kinds,
        Err(message) => {
            io.fail(args.common.json, "usage_error", &message, None);
            return status::USAGE;
        }
    };
    if args.trace && !kinds.iter().any(|m| m.name() == "stepper") {
        let message = "--trace shows the stepper's contractions: use --machine stepper or all";
        io.fail(args.common.json, "usage_error", message, None);
        return status::USAGE;
    }
    let (source, text, program) = match program_of(io, &args.input, &args.common, false) {
        Ok(parsed) => parsed,
        Err(code) => return code,
    };
    let limits = Limits::default()
        .with_fuel(args.machine.fuel)
        .with_memory(args.machine.memory);
    let shown = (source.name.as_str(), text.as_str());
    let mut code = None;
    let mut limited = false;
    // Every machine runs within the one memory limit: the first machine's
    // result is kept for the comparison, so the others get what it leaves,
    // and each later result is dropped once compared.
    let mut reference: Option<(MachineKind, Report, usize)> = None;
    for &kind in &kinds {
        let mut limits = limits.clone();
        if let Some((_, _, kept)) = &reference {
            limits.memory = limits.memory.saturating_sub(*kept);
        }
        let started = Instant::now();
        let (report, peak) = run_one(kind, &program, &limits, args.trace, progress_wanted(args));
        let elapsed = started.elapsed();
        let _ = emit(
            args.common.json,
            kind.name(),
            &report,
            (shown, program.host()),
            io,
        );
        if args.stats {
            let _ = stats(io, kind.name(), &report, elapsed, peak);
        }
        limited |= matches!(report.outcome, Outcome::Limit(_));
        let made = match &report.outcome {
            Outcome::Value(v) => v.bytes(),
            _ => 0,
        };
        let Some((first, first_report, _)) = &reference else {
            code = Some(outcome_status(&report.outcome));
            reference = Some((kind, report, made));
            continue;
        };
        let room = limits.memory.saturating_sub(made);
        match disagreement_within(first_report, &report, room) {
            Ok(None) => {}
            Ok(Some(why)) => {
                let _ = writeln!(
                    io.stderr,
                    "orrery: {} and {} disagree: {why}",
                    first.name(),
                    kind.name()
                );
                code = Some(status::DISAGREE);
            }
            Err(limit) => {
                let _ = writeln!(
                    io.stderr,
                    "orrery: {} and {} could not be compared: {limit}",
                    first.name(),
                    kind.name()
                );
                limited = true;
            }
        }
    }
    let code = code.unwrap_or(status::USAGE);
    // When the machines agree but one stopped at a resource limit, say so.
    if limited && code != status::DISAGREE {
        status::LIMIT
    } else {
        code
    }
}

/// Whether a run may show a progress line: only on a terminal, and never
/// under `--json` or `--trace`.
fn progress_wanted(args: &RunArgs) -> bool {
    !args.common.json && !args.trace && std::io::stderr().is_terminal()
}

/// Print one machine's report, as a JSON line or as text.
fn emit(
    json: bool,
    machine: &str,
    report: &Report,
    (source, host): ((&str, &str), &orrery::HostFunctions),
    io: &mut Io,
) -> std::io::Result<()> {
    if json {
        json::report(&mut io.stdout, machine, report, host)
    } else {
        text_report(
            machine,
            report,
            host,
            source,
            &mut io.stdout,
            &mut io.stderr,
        )
    }
}

/// `--stats`, on stderr.
fn stats(
    io: &mut Io,
    machine: &str,
    report: &Report,
    elapsed: Duration,
    peak: usize,
) -> std::io::Result<()> {
    let seconds = elapsed.as_secs_f64();
    let rate = if seconds > 0.0 {
        report.counts.total() as f64 / seconds
    } else {
        0.0
    };
    writeln!(
        io.stderr,
        "{machine}: {:.3} s, {} contractions ({rate:.0} a second), fuel used {}, peak memory {peak} bytes",
        seconds,
        report.counts.total(),
        report.counts.fuel(),
    )
}

/// One line of the REPL, run on `kind` (traced on the stepper if asked).
pub fn run_line(kind: MachineKind, program: &Program, limits: &Limits, trace: bool) -> Report {
    run_one(kind, program, limits, trace, false).0
}

/// Run `program` on one machine: its report and its peak memory. The
/// stepper traces its contractions on stderr if asked (`[N] RULE: REDEX`,
/// or `[N] LINE:COL RULE: REDEX` when the redex has a place in the source);
/// a machine that can pause runs in slices of fuel when `progress` is
/// wanted, and shows a progress line once the run passes a second.
fn run_one(
    kind: MachineKind,
    program: &Program,
    limits: &Limits,
    trace: bool,
    progress: bool,
) -> (Report, usize) {
    #[cfg(feature = "stepper")]
    if trace && kind == MachineKind::Stepper {
        let mut n = 0u64;
        let mut trace_out = std::io::stderr();
        let mut stepper = orrery::machines::stepper::Stepper::new();
        let report = stepper.run_traced(program, limits, &mut |rule, redex| {
            n += 1;
            let printed = orrery::print_limited(redex, TRACE_PRINT_LIMIT);
            let place = match redex.span() {
                Some(at) if at.line > 0 => format!("{}:{} ", at.line, at.col),
                _ => String::new(),
            };
            // A closed stderr cannot stop the run; the outcome still counts.
            let _ = writeln!(trace_out, "[{n}] {place}{rule}: {}", printed.text);
        });
        return (report, orrery::Machine::peak_bytes(&stepper));
    }
    // Without the stepper there is nothing to trace (`run` refuses --trace).
    let _ = trace;
    let sliced = if progress {
        kind.machine().start(program, &limits.clone().with_fuel(0))
    } else {
        None
    };
    let Some(mut paused) = sliced else {
        let mut machine = kind.machine();
        let report = machine.run(program, limits);
        return (report, machine.peak_bytes());
    };
    let started = Instant::now();
    let mut bar: Option<indicatif::ProgressBar> = None;
    let mut left = limits.fuel;
    loop {
        let slice = left.min(SLICE);
        left -= slice;
        let report = paused.resume(slice);
        if report.outcome != Outcome::OutOfFuel || left == 0 {
            if let Some(bar) = bar {
                bar.finish_and_clear();
            }
            return (report, paused.peak_bytes());
        }
        let elapsed = started.elapsed();
        if elapsed >= PROGRESS_AFTER {
            let bar = bar.get_or_insert_with(|| {
                let bar = indicatif::ProgressBar::new_spinner();
                bar.set_draw_target(indicatif::ProgressDrawTarget::stderr());
                bar
            });
            let done = report.counts.total();
            bar.set_message(format!(
                "{}: {done} contractions, {:.0} a second",
                kind.name(),
                done as f64 / elapsed.as_secs_f64()
            ));
            bar.tick();
        }
    }
}

/// `orrery check`: parse and validate; print the host functions the
/// program uses, or every unbound name.
pub fn check(args: &CheckArgs, io: &mut Io) -> u8 {
    let (source, _, program) = match program_of(io, &args.input, &args.common, true) {
        Ok(parsed) => parsed,
        Err(code) => return code,
    };
    let hosts = program.host_names();
    let _ = if args.common.json {
        #[derive(serde::Serialize)]
        struct Checked<'a> {
            outcome: &'static str,
            file: &'a str,
            host_names: &'a [&'a str],
        }
        json::write_line(
            &mut io.stdout,
            &Checked {
                outcome: "ok",
                file: &source.name,
                host_names: &hosts,
            },
        )
    } else if hosts.is_empty() {
        writeln!(io.stdout, "{}: ok, no host functions", source.name)
    } else {
        writeln!(
            io.stdout,
            "{}: ok, host functions: {}",
            source.name,
            hosts.join(", ")
        )
    };
    status::VALUE
}

/// `orrery fmt`: the program in canonical form.
pub fn fmt(args: &CheckArgs, io: &mut Io) -> u8 {
    let (_, _, program) = match program_of(io, &args.input, &args.common, false) {
        Ok(parsed) => parsed,
        Err(code) => return code,
    };
    let arena = Arena::new();
    let text = print_with(program.to_term(&arena), program.host());
    let _ = if args.common.json {
        #[derive(serde::Serialize)]
        struct Formatted<'a> {
            outcome: &'static str,
            text: &'a str,
        }
        json::write_line(
            &mut io.stdout,
            &Formatted {
                outcome: "ok",
                text: &text,
            },
        )
    } else {
        writeln!(io.stdout, "{text}")
    };
    status::VALUE
}
