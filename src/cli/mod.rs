//! What the subcommands share: exit statuses, the text reports, the host
//! stubs, parsing a source, and an output that a closed pipe cannot stop.

pub mod args;
pub mod json;
pub mod repl;
pub mod run;
pub mod source;
pub mod stubs;

use std::io::{self, Write};

use orrery::syntax::excerpt;
use orrery::{
    Arena, HostFunctions, Location, Outcome, Program, Report, SyntaxError, BACKTRACE_ENDS,
};

/// Exit statuses of SEMANTICS §6.
pub mod status {
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
pub const VALUE_PRINT_LIMIT: usize = 1 << 20;

/// How a backtrace names a function that has no name (one not bound by a
/// `let` or `rec`).
const UNNAMED: &str = "λ";

/// Standard output, or any writer, that a closed pipe (`| head`) cannot
/// stop: once a write finds the reader gone, the rest is dropped quietly and
/// the command ends with its own status.
pub struct Out<W: Write> {
    inner: W,
    closed: bool,
}

impl<W: Write> Out<W> {
    pub fn new(inner: W) -> Self {
        Out {
            inner,
            closed: false,
        }
    }
}

impl<W: Write> Write for Out<W> {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        if self.closed {
            return Ok(buf.len());
        }
        match self.inner.write(buf) {
            Err(e) if e.kind() == io::ErrorKind::BrokenPipe => {
                self.closed = true;
                Ok(buf.len())
            }
            other => other,
        }
    }

    fn flush(&mut self) -> io::Result<()> {
        match self.inner.flush() {
            Err(e) if e.kind() == io::ErrorKind::BrokenPipe => {
                self.closed = true;
                Ok(())
            }
            other => other,
        }
    }
}

/// The command line's two outputs.
pub struct Io {
    pub stdout: Out<io::StdoutLock<'static>>,
    pub stderr: Out<io::StderrLock<'static>>,
}

impl Io {
    pub fn new() -> Self {
        Io {
            stdout: Out::new(io::stdout().lock()),
            stderr: Out::new(io::stderr().lock()),
        }
    }

    /// Report an error of the command line itself (`kind` is its JSON
    /// outcome: `usage_error`, `input_error`, `host_error`): a JSON object
    /// on stdout under `--json`, else a line on stderr.
    pub fn fail(&mut self, json: bool, kind: &str, message: &str, at: Option<(usize, usize)>) {
        let _ = if json {
            json::plain_error(&mut self.stdout, kind, message, at)
        } else {
            writeln!(self.stderr, "orrery: {message}")
        };
    }
}

/// The host table of `--host FILE` (empty without one), or an error
/// already reported (the status to exit with).
pub fn host_table(
    io: &mut Io,
    path: Option<&str>,
    max: usize,
    json: bool,
) -> Result<HostFunctions, u8> {
    let Some(path) = path else {
        return Ok(HostFunctions::new());
    };
    let bytes = source::read_file(path, max).map_err(|message| {
        io.fail(json, "input_error", &message, None);
        status::USAGE
    })?;
    stubs::load(&bytes).map_err(|e| {
        let message = match (json, e.at) {
            (false, Some((line, col))) => format!("{path}:{line}:{col}: {}", e.message),
            _ => format!("{path}: {}", e.message),
        };
        io.fail(json, "host_error", &message, e.at);
        status::USAGE
    })
}

/// `bytes` parsed as a program calling `host`'s functions.
pub fn parse_program(bytes: &[u8], host: &HostFunctions) -> Result<Program, SyntaxError> {
    // The parser's arena holds the terms only while the program is built:
    // the program owns its image.
    orrery::parse_bytes_with(&Arena::new(), bytes, host)
}

/// Report a syntax error: JSON on stdout, or `FILE:LINE:COL: message` with
/// the line and a caret on stderr.
pub fn report_syntax(io: &mut Io, json: bool, file: &str, text: &str, error: &SyntaxError) {
    let _ = if json {
        json::syntax_error(&mut io.stdout, file, error)
    } else {
        write!(io.stderr, "{}", error.render(file, text))
    };
}

/// A value as text, its host calls by name, cut at [`VALUE_PRINT_LIMIT`].
pub fn printed(value: &orrery::Value, host: &HostFunctions) -> String {
    let arena = Arena::new();
    orrery::print_limited_with(value.to_term(&arena), VALUE_PRINT_LIMIT, host).text
}

/// Where a run stopped, for the outcomes that have a place: an error, out
/// of fuel, a limit, a suspension (a machine that does not say gives `None`).
pub fn stop_location(report: &Report) -> Option<&Location> {
    match report.outcome {
        Outcome::Error(_) | Outcome::OutOfFuel | Outcome::Limit(_) | Outcome::Suspended(_) => {
            report.location.as_ref()
        }
        Outcome::Value(_) | Outcome::Fault(_) => None,
    }
}

/// The exit status of an outcome.
pub fn outcome_status(outcome: &Outcome) -> u8 {
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
pub fn text_report(
    machine: &str,
    report: &Report,
    host: &HostFunctions,
    (file, source): (&str, &str),
    stdout: &mut impl Write,
    stderr: &mut impl Write,
) -> io::Result<()> {
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
        Outcome::Value(v) => writeln!(stdout, "{}", printed(v, host))?,
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
