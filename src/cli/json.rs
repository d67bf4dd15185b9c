//! The command line's JSON, through serde_json: one object per line, with
//! the fields of SEMANTICS §6 in their documented order, and a first-order
//! value's `data`.

use std::io::{self, Write};

use serde::Serialize;
use serde_json::ser::{CharEscape, Formatter};
use serde_json::value::RawValue;

use orrery::{Datum, Location, Outcome, Report, Rule, SyntaxError};

/// A value's data is given only up to this many bytes (as read back).
const DATA_LIMIT: usize = 1 << 20;

/// A value's data is given only when its constructors nest at most this
/// deep: each level is two levels of JSON (an object and its `fields`
/// list), and JSON readers commonly refuse more than 128 (serde_json's
/// default), so that every line stays readable by them.
pub const DATA_DEPTH: usize = 60;

/// One machine's report.
#[derive(Serialize)]
struct Line<'a> {
    machine: &'a str,
    outcome: &'a str,
    #[serde(skip_serializing_if = "Option::is_none")]
    value: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    data: Option<Box<RawValue>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    error: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    limit: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    message: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    call: Option<String>,
    steps: u64,
    fuel: u64,
    rules: Rules<'a>,
    #[serde(flatten, skip_serializing_if = "Option::is_none")]
    place: Option<Place>,
}

/// The per-rule counts, in the order of [`Rule::ALL`].
struct Rules<'a>(&'a Report);

impl Serialize for Rules<'_> {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let mut map = s.serialize_map(Some(Rule::ALL.len()))?;
        for rule in Rule::ALL {
            map.serialize_entry(rule.name(), &self.0.counts.get(rule))?;
        }
        map.end()
    }
}

/// Where a run stopped: `at`, `backtrace`, `omitted`.
#[derive(Serialize)]
struct Place {
    at: Option<At>,
    backtrace: Vec<Frame>,
    omitted: u64,
}

#[derive(Serialize)]
struct At {
    line: u32,
    col: u32,
}

#[derive(Serialize)]
struct Frame {
    name: Option<String>,
    line: Option<u32>,
    col: Option<u32>,
}

/// Write `value` as one line of JSON to `out`.
pub fn write_line(out: &mut impl Write, value: &impl Serialize) -> io::Result<()> {
    let mut bytes = Vec::new();
    let mut serializer = serde_json::Serializer::with_formatter(&mut bytes, Escapes);
    value.serialize(&mut serializer).map_err(io::Error::other)?;
    bytes.push(b'\n');
    out.write_all(&bytes)
}

/// One machine's report as a JSON line.
pub fn report(
    out: &mut impl Write,
    machine: &str,
    report: &Report,
    host: &orrery::HostFunctions,
) -> io::Result<()> {
    let mut line = Line {
        machine,
        outcome: report.outcome.name(),
        value: None,
        data: None,
        error: None,
        limit: None,
        message: None,
        call: None,
        steps: report.counts.total(),
        fuel: report.counts.fuel(),
        rules: Rules(report),
        place: super::stop_location(report).map(place),
    };
    match &report.outcome {
        Outcome::Value(v) => {
            line.value = Some(super::printed(v, host));
            line.data = v.to_datum_within(DATA_LIMIT).ok().and_then(|d| data(&d));
        }
        Outcome::Error(e) => {
            line.error = Some(e.kind().name());
            line.message = Some(e.message());
        }
        Outcome::Limit(l) => {
            line.limit = Some(l.kind().name());
            line.message = Some(l.message());
        }
        Outcome::Fault(f) => line.message = Some(f.message()),
        Outcome::Suspended(call) => line.call = Some(call.to_string()),
        Outcome::OutOfFuel => {}
    }
    write_line(out, &line)
}

fn place(location: &Location) -> Place {
    Place {
        at: location.span.map(|at| At {
            line: at.line,
            col: at.col,
        }),
        backtrace: location
            .backtrace
            .frames
            .iter()
            .map(|frame| Frame {
                name: frame.name.as_deref().map(str::to_string),
                line: frame.site.map(|s| s.line),
                col: frame.site.map(|s| s.col),
            })
            .collect(),
        omitted: location.backtrace.omitted,
    }
}

/// A syntax or name error: `{"outcome":"syntax_error","file":…,"line":…,
/// "col":…,"message":…}`, with `"unbound":[{"name":…,"line":…,"col":…}]`
/// when it is about unbound names.
pub fn syntax_error(out: &mut impl Write, file: &str, error: &SyntaxError) -> io::Result<()> {
    #[derive(Serialize)]
    struct Unbound<'a> {
        name: &'a str,
        line: u32,
        col: u32,
    }
    #[derive(Serialize)]
    struct Object<'a> {
        outcome: &'static str,
        file: &'a str,
        line: u32,
        col: u32,
        message: &'a str,
        #[serde(skip_serializing_if = "Vec::is_empty")]
        unbound: Vec<Unbound<'a>>,
    }
    let unbound = error
        .unbound
        .iter()
        .map(|(name, line, col)| Unbound {
            name,
            line: *line,
            col: *col,
        })
        .collect();
    write_line(
        out,
        &Object {
            outcome: "syntax_error",
            file,
            line: error.line,
            col: error.column,
            message: &error.message,
            unbound,
        },
    )
}

/// Any other error of the command line itself: `{"outcome":KIND,"message":…}`
/// (`usage_error`, `input_error`, `host_error` for a bad stub file), with
/// the line and column when the error has a place.
pub fn plain_error(
    out: &mut impl Write,
    outcome: &str,
    message: &str,
    at: Option<(usize, usize)>,
) -> io::Result<()> {
    #[derive(Serialize)]
    struct Object<'a> {
        outcome: &'a str,
        message: &'a str,
        #[serde(skip_serializing_if = "Option::is_none")]
        line: Option<usize>,
        #[serde(skip_serializing_if = "Option::is_none")]
        col: Option<usize>,
    }
    write_line(
        out,
        &Object {
            outcome,
            message,
            line: at.map(|a| a.0),
            col: at.map(|a| a.1),
        },
    )
}

/// A datum as JSON text: integers, booleans and strings as scalars, a
/// constructor as `{"tag":…,"fields":[…]}`; `None` past [`DATA_DEPTH`].
/// Written without recursion.
pub fn data(datum: &Datum<'_>) -> Option<Box<RawValue>> {
    enum Task<'d, 't> {
        Datum(&'d Datum<'t>, usize),
        Text(&'static str),
    }
    let mut text = String::new();
    let mut tasks = vec![Task::Datum(datum, 0)];
    while let Some(task) = tasks.pop() {
        match task {
            Task::Datum(_, depth) if depth > DATA_DEPTH => return None,
            Task::Text(t) => text.push_str(t),
            Task::Datum(Datum::Int(n), _) => text.push_str(&n.to_string()),
            Task::Datum(Datum::Bool(b), _) => text.push_str(if *b { "true" } else { "false" }),
            Task::Datum(Datum::Str(s), _) => text.push_str(&quoted(s)?),
            Task::Datum(Datum::Con(c), depth) => {
                text.push_str("{\"tag\":");
                text.push_str(&quoted(c.tag())?);
                text.push_str(",\"fields\":[");
                tasks.push(Task::Text("]}"));
                for (i, field) in c.fields().iter().enumerate().rev() {
                    tasks.push(Task::Datum(field, depth + 1));
                    if i > 0 {
                        tasks.push(Task::Text(","));
                    }
                }
            }
        }
    }
    RawValue::from_string(text).ok()
}

/// A JSON string literal, with the command line's escapes.
fn quoted(s: &str) -> Option<String> {
    let mut bytes = Vec::new();
    s.serialize(&mut serde_json::Serializer::with_formatter(
        &mut bytes, Escapes,
    ))
    .ok()?;
    String::from_utf8(bytes).ok()
}

/// serde_json's escapes, except that a backspace and a form feed are
/// written `\u0008` and `\u000c`, as the command line always wrote them.
struct Escapes;

impl Formatter for Escapes {
    fn write_char_escape<W: ?Sized + Write>(
        &mut self,
        writer: &mut W,
        char_escape: CharEscape,
    ) -> io::Result<()> {
        let escaped: &[u8] = match char_escape {
            CharEscape::Quote => b"\\\"",
            CharEscape::ReverseSolidus => b"\\\\",
            CharEscape::Solidus => b"\\/",
            CharEscape::LineFeed => b"\\n",
            CharEscape::CarriageReturn => b"\\r",
            CharEscape::Tab => b"\\t",
            CharEscape::Backspace => b"\\u0008",
            CharEscape::FormFeed => b"\\u000c",
            CharEscape::AsciiControl(byte) => {
                return write!(writer, "\\u{byte:04x}");
            }
        };
        writer.write_all(escaped)
    }
}
