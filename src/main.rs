//! The `orrery` command line (SEMANTICS §6): run a program file on one machine or
//! on all of them, print the outcome as text or JSON lines, and exit with a
//! status that says how the run ended. A run that stops without a value at
//! a place in the program shows the place (`FILE:LINE:COL`, the line with
//! the redex underlined) and the calls pending there, innermost first.

use std::io::Write;
use std::process::ExitCode;

use orrery::syntax::excerpt;
use orrery::{
    disagreement_within, parse_bytes, print_limited, Arena, Limits, Location, MachineKind, Outcome,
    Program, Report, Rule, BACKTRACE_ENDS, DEFAULT_FUEL, DEFAULT_MEMORY,
};

/// Exit statuses of SEMANTICS §6.
mod status {
    pub const VALUE: u8 = 0;
    pub const ERROR: u8 = 1;
    pub const USAGE: u8 = 2;
    pub const SYNTAX: u8 = 3;
    pub const OUT_OF_FUEL: u8 = 4;
    pub const LIMIT: u8 = 5;
    pub const DISAGREE: u8 = 6;
    /// A machine found its own invariant broken: a bug in orrery.
    pub const FAULT: u8 = 7;
}

/// Printed values longer than this are cut, with a marker.
const VALUE_PRINT_LIMIT: usize = 1 << 20;

/// How a backtrace names a function that has no name (one not bound by a
/// `let` or `rec`).
const UNNAMED: &str = "λ";

/// A redex in a trace line is cut past this many bytes.
#[cfg_attr(not(feature = "stepper"), allow(dead_code))]
const TRACE_PRINT_LIMIT: usize = 4096;

fn usage() -> String {
    let machines: Vec<&str> = MachineKind::enabled().iter().map(|m| m.name()).collect();
    format!(
        "orrery {version} — run a program of the orrery kernel calculus

usage:
  orrery run FILE [--machine NAME] [--fuel N] [--memory BYTES] [--json] [--trace]
  orrery help

options:
  --machine NAME   one of: {names}, or all (every machine, checking that they
                   agree); default: {default}
  --fuel N         contractions allowed; default {fuel}
  --memory BYTES   bytes of runtime data allowed; default {memory} ({mib} MiB)
  --json           one JSON object per machine, one per line, on stdout
  --trace          print each contraction (rule and redex) of the stepper on stderr

exit status: 0 a value, 1 an evaluation error, 2 bad usage, 3 a syntax or name
error, 4 out of fuel, 5 a resource limit, 6 the machines disagree.
Values longer than {limit} bytes are printed cut short, ending in ` …[truncated]`.
",
        version = env!("CARGO_PKG_VERSION"),
        names = machines.join(", "),
        default = MachineKind::fastest().map_or("none", |m| m.name()),
        fuel = DEFAULT_FUEL,
        memory = DEFAULT_MEMORY,
        mib = DEFAULT_MEMORY >> 20,
        limit = VALUE_PRINT_LIMIT,
    )
}

/// What the command line asked for.
struct Request {
    file: String,
    machines: Vec<MachineKind>,
    limits: Limits,
    json: bool,
    trace: bool,
}

/// Parse the arguments after the program name.
fn parse_args(args: &[String]) -> Result<Option<Request>, String> {
    let mut args = args.iter();
    match args.next().map(String::as_str) {
        Some("run") => {}
        Some("help" | "--help" | "-h") => return Ok(None),
        Some(other) => return Err(format!("unknown command `{other}`")),
        None => return Err("missing command".to_string()),
    }
    let mut file = None;
    let mut machine = None;
    let mut limits = Limits::default();
    let (mut json, mut trace) = (false, false);
    while let Some(arg) = args.next() {
        let mut value = |name: &str| {
            args.next()
                .cloned()
                .ok_or_else(|| format!("{name} needs a value"))
        };
        match arg.as_str() {
            "--machine" => machine = Some(value("--machine")?),
            "--fuel" => {
                let v = value("--fuel")?;
                limits.fuel = v
                    .parse()
                    .map_err(|_| format!("--fuel takes a whole number, not `{v}`"))?;
            }
            "--memory" => {
                let v = value("--memory")?;
                limits.memory = v
                    .parse()
                    .map_err(|_| format!("--memory takes a number of bytes, not `{v}`"))?;
            }
            "--json" => json = true,
            "--trace" => trace = true,
            "--help" | "-h" => return Ok(None),
            flag if flag.starts_with("--") => return Err(format!("unknown option `{flag}`")),
            path if file.is_none() => file = Some(path.to_string()),
            extra => return Err(format!("unexpected argument `{extra}`")),
        }
    }
    let file = file.ok_or("run needs a FILE")?;
    let machines = match machine.as_deref() {
        None => vec![MachineKind::fastest().ok_or("this build has no machine")?],
        Some("all") => MachineKind::enabled().to_vec(),
        Some(name) => vec![MachineKind::from_name(name)
            .ok_or_else(|| format!("unknown or disabled machine `{name}`"))?],
    };
    if trace && !machines.iter().any(|m| m.name() == "stepper") {
        return Err(
            "--trace shows the stepper's contractions: use --machine stepper or all".into(),
        );
    }
    Ok(Some(Request {
        file,
        machines,
        limits,
        json,
        trace,
    }))
}

/// A JSON string literal.
fn json_string(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            '\r' => out.push_str("\\r"),
            '\t' => out.push_str("\\t"),
            c if (c as u32) < 0x20 => out.push_str(&format!("\\u{:04x}", c as u32)),
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// One JSON line for a machine's report (SEMANTICS §6).
fn json_line(machine: &str, report: &Report) -> String {
    let mut line = format!(
        "{{\"machine\":{},\"outcome\":\"{}\"",
        json_string(machine),
        report.outcome.name()
    );
    match &report.outcome {
        Outcome::Value(v) => {
            let printed = v.print_limited(VALUE_PRINT_LIMIT);
            line.push_str(&format!(",\"value\":{}", json_string(&printed.text)));
        }
        Outcome::Error(e) => line.push_str(&format!(
            ",\"error\":\"{}\",\"message\":{}",
            e.kind().name(),
            json_string(e.message())
        )),
        Outcome::OutOfFuel => {}
        Outcome::Limit(l) => line.push_str(&format!(
            ",\"limit\":\"{}\",\"message\":{}",
            l.kind().name(),
            json_string(l.message())
        )),
        Outcome::Fault(f) => line.push_str(&format!(",\"message\":{}", json_string(f.message()))),
        Outcome::Suspended(call) => {
            line.push_str(&format!(",\"call\":{}", json_string(&call.to_string())))
        }
    }
    let rules: Vec<String> = Rule::ALL
        .iter()
        .map(|r| format!("\"{}\":{}", r.name(), report.counts.get(*r)))
        .collect();
    line.push_str(&format!(
        ",\"steps\":{},\"fuel\":{},\"rules\":{{{}}}",
        report.counts.total(),
        report.counts.fuel(),
        rules.join(",")
    ));
    if let Some(location) = stop_location(report) {
        line.push_str(&json_location(location));
    }
    line.push('}');
    line
}

/// Where a run stopped, for the outcomes that have a place: an error, out
/// of fuel, a limit (a machine that does not say gives `None`).
fn stop_location(report: &Report) -> Option<&Location> {
    match report.outcome {
        Outcome::Error(_) | Outcome::OutOfFuel | Outcome::Limit(_) | Outcome::Suspended(_) => {
            report.location.as_ref()
        }
        Outcome::Value(_) | Outcome::Fault(_) => None,
    }
}

/// The JSON fields of a location, each with its leading comma:
/// `"at":{"line":L,"col":C}` (or `null`), `"backtrace":[{"name":…,"line":…,"col":…}, …]`
/// innermost first, and `"omitted":N`, the frames left out between the
/// innermost and the outermost [`BACKTRACE_ENDS`].
fn json_location(location: &Location) -> String {
    let at = location.span.map_or_else(
        || "null".to_string(),
        |at| format!("{{\"line\":{},\"col\":{}}}", at.line, at.col),
    );
    let frames: Vec<String> = location
        .backtrace
        .frames
        .iter()
        .map(|frame| {
            let name = frame
                .name
                .as_deref()
                .map_or_else(|| "null".to_string(), json_string);
            let (line, col) = frame.site.map_or_else(
                || ("null".to_string(), "null".to_string()),
                |site| (site.line.to_string(), site.col.to_string()),
            );
            format!("{{\"name\":{name},\"line\":{line},\"col\":{col}}}")
        })
        .collect();
    format!(
        ",\"at\":{at},\"backtrace\":[{}],\"omitted\":{}",
        frames.join(","),
        location.backtrace.omitted
    )
}

/// A stop at a place, for a person: `FILE:LINE:COL: KIND: MESSAGE`, the
/// source line with the redex underlined, then one line per pending call,
/// innermost first, `    NAME at FILE:LINE:COL`, with a line counting the
/// calls left out between the two ends of a deep backtrace.
fn location_text(
    file: &str,
    source: &str,
    kind: &str,
    message: &str,
    location: &Location,
) -> String {
    let mut out = match location.span {
        Some(at) if at.line > 0 => format!(
            "{file}:{}:{}: {kind}: {message}\n{}",
            at.line,
            at.col,
            excerpt(source, at)
        ),
        _ => format!("{file}: {kind}: {message}\n"),
    };
    let backtrace = &location.backtrace;
    for (i, frame) in backtrace.frames.iter().enumerate() {
        if i == BACKTRACE_ENDS && backtrace.omitted > 0 {
            let calls = if backtrace.omitted == 1 {
                "call"
            } else {
                "calls"
            };
            out.push_str(&format!("    … {} more {calls} …\n", backtrace.omitted));
        }
        let name = frame.name.as_deref().unwrap_or(UNNAMED);
        match frame.site {
            Some(site) if site.line > 0 => out.push_str(&format!(
                "    {name} at {file}:{}:{}\n",
                site.line, site.col
            )),
            _ => out.push_str(&format!("    {name} at ?\n")),
        }
    }
    out
}

/// The human-readable report: the value on stdout, the rest on stderr. A
/// stop with a location names its place in `file` (whose text is `source`)
/// and the pending calls.
fn text_report(
    machine: &str,
    report: &Report,
    (file, source): (&str, &str),
    stdout: &mut impl Write,
    stderr: &mut impl Write,
) -> std::io::Result<()> {
    if let Some(location) = stop_location(report) {
        let (kind, message) = match &report.outcome {
            Outcome::Error(e) => (e.kind().name(), e.message().to_string()),
            Outcome::Limit(l) => (l.kind().name(), l.message().to_string()),
            Outcome::Suspended(call) => ("suspended", format!("waits for an answer to {call}")),
            _ => (
                "out_of_fuel",
                format!("out of fuel after {} contractions", report.counts.total()),
            ),
        };
        let text = location_text(file, source, kind, &message, location);
        write!(stderr, "{text}")?;
        return writeln!(stderr, "{machine}: {}", report.counts);
    }
    match &report.outcome {
        Outcome::Value(v) => writeln!(stdout, "{}", v.print_limited(VALUE_PRINT_LIMIT).text)?,
        Outcome::Error(e) => writeln!(
            stderr,
            "{machine}: error {}: {}",
            e.kind().name(),
            e.message()
        )?,
        Outcome::OutOfFuel => writeln!(
            stderr,
            "{machine}: out of fuel after {} contractions",
            report.counts.total()
        )?,
        Outcome::Limit(l) => writeln!(
            stderr,
            "{machine}: limit {}: {}",
            l.kind().name(),
            l.message()
        )?,
        Outcome::Fault(f) => writeln!(stderr, "{machine}: {f}")?,
        Outcome::Suspended(call) => writeln!(stderr, "{machine}: suspended at {call}")?,
    }
    writeln!(stderr, "{machine}: {}", report.counts)
}

fn outcome_status(outcome: &Outcome) -> u8 {
    match outcome {
        Outcome::Value(_) => status::VALUE,
        Outcome::Error(_) => status::ERROR,
        Outcome::OutOfFuel => status::OUT_OF_FUEL,
        Outcome::Limit(_) => status::LIMIT,
        Outcome::Fault(_) => status::FAULT,
        // The command line has no way to answer a waiting call.
        Outcome::Suspended(_) => status::ERROR,
    }
}

fn run(request: &Request) -> std::io::Result<u8> {
    let stdout = std::io::stdout();
    let stderr = std::io::stderr();
    let (mut stdout, mut stderr) = (stdout.lock(), stderr.lock());
    let source = match std::fs::read(&request.file) {
        Ok(bytes) => bytes,
        Err(e) => {
            writeln!(stderr, "orrery: cannot read {}: {e}", request.file)?;
            return Ok(status::USAGE);
        }
    };
    // The parser's arena holds the terms only while the program is built:
    // the program owns its image, and the arena goes before the run.
    let parsed = {
        let arena = Arena::new();
        parse_bytes(&arena, &source)
    };
    let text = String::from_utf8_lossy(&source);
    let program = match parsed {
        Ok(program) => program,
        Err(e) => {
            write!(stderr, "{}", e.render(&request.file, &text))?;
            return Ok(status::SYNTAX);
        }
    };
    let source = (request.file.as_str(), &*text);
    // Every machine runs within the one memory limit: the first machine's
    // result is kept for the comparison, so the others get what it leaves,
    // and each later result is dropped once compared.
    let mut machines = request.machines.iter();
    let Some(&first) = machines.next() else {
        return Ok(status::USAGE);
    };
    let reference = run_one(first, &program, &request.limits, request.trace);
    let kept = match &reference.outcome {
        Outcome::Value(v) => v.bytes(),
        _ => 0,
    };
    emit(
        request.json,
        first.name(),
        &reference,
        source,
        &mut stdout,
        &mut stderr,
    )?;
    let mut code = outcome_status(&reference.outcome);
    let mut limited = matches!(reference.outcome, Outcome::Limit(_)).then_some(code);
    for &machine in machines {
        let mut limits = request.limits.clone();
        limits.memory = limits.memory.saturating_sub(kept);
        let report = run_one(machine, &program, &limits, request.trace);
        emit(
            request.json,
            machine.name(),
            &report,
            source,
            &mut stdout,
            &mut stderr,
        )?;
        if matches!(report.outcome, Outcome::Limit(_)) {
            limited.get_or_insert(status::LIMIT);
        }
        let made = match &report.outcome {
            Outcome::Value(v) => v.bytes(),
            _ => 0,
        };
        let room = limits.memory.saturating_sub(made);
        match disagreement_within(&reference, &report, room) {
            Ok(None) => {}
            Ok(Some(why)) => {
                writeln!(
                    stderr,
                    "orrery: {} and {} disagree: {why}",
                    first.name(),
                    machine.name()
                )?;
                code = status::DISAGREE;
            }
            Err(limit) => {
                writeln!(
                    stderr,
                    "orrery: {} and {} could not be compared: {limit}",
                    first.name(),
                    machine.name()
                )?;
                limited.get_or_insert(status::LIMIT);
            }
        }
    }
    if code != status::DISAGREE {
        // When the machines agree but one stopped at a resource limit, say so.
        if let Some(limit) = limited {
            code = limit;
        }
    }
    Ok(code)
}

/// Print one machine's report, as a JSON line or as text.
fn emit(
    json: bool,
    machine: &str,
    report: &Report,
    source: (&str, &str),
    stdout: &mut impl Write,
    stderr: &mut impl Write,
) -> std::io::Result<()> {
    if json {
        writeln!(stdout, "{}", json_line(machine, report))
    } else {
        text_report(machine, report, source, stdout, stderr)
    }
}

/// Run `program` on one machine, tracing the stepper's contractions on
/// stderr if asked: `[N] RULE: REDEX`, or `[N] LINE:COL RULE: REDEX` when
/// the redex has a place in the source.
fn run_one(machine: MachineKind, program: &Program, limits: &Limits, trace: bool) -> Report {
    #[cfg(feature = "stepper")]
    if trace && machine == MachineKind::Stepper {
        let mut n = 0u64;
        let mut trace_out = std::io::stderr();
        return orrery::machines::stepper::Stepper::new().run_traced(
            program,
            limits,
            &mut |rule, redex| {
                n += 1;
                let printed = print_limited(redex, TRACE_PRINT_LIMIT);
                let place = match redex.span() {
                    Some(at) if at.line > 0 => format!("{}:{} ", at.line, at.col),
                    _ => String::new(),
                };
                // A closed stderr cannot stop the run; the outcome still counts.
                let _ = writeln!(trace_out, "[{n}] {place}{rule}: {}", printed.text);
            },
        );
    }
    let _ = trace;
    machine.run(program, limits)
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let code = match parse_args(&args) {
        Ok(None) => {
            print!("{}", usage());
            status::VALUE
        }
        Ok(Some(request)) => run(&request).unwrap_or(status::USAGE),
        Err(message) => {
            eprintln!("orrery: {message}\n\n{}", usage());
            status::USAGE
        }
    };
    ExitCode::from(code)
}
