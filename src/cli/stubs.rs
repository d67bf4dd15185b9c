//! Host function stubs from a JSON file (`--host FILE`), so that programs
//! calling host functions can be run, checked and tested from the command
//! line:
//!
//! ```json
//! {"functions": [
//!   {"name": "zone_of", "arity": 1, "table": [
//!     {"args": ["N1 4AB"], "answer": 1},
//!     {"args": ["E2 7CD"], "answer": 2}]},
//!   {"name": "surge", "arity": 1, "answer": 15},
//!   {"name": "depot_open", "arity": 0, "error": "the depot is closed"}
//! ]}
//! ```
//!
//! Each function answers with a constant (`answer`), looks its arguments up
//! in a table (`table`; arguments not in it get a `host_error`), or always
//! fails with a message (`error`). A datum is an integer, a boolean, a
//! string, or `{"tag": "Cons", "fields": [...]}`: the shape of the `data`
//! field of `--json`. A malformed file is an error with its line and column.

use serde::Deserialize;

use orrery::{Datum, HostFunctions};

/// The stub file.
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct StubFile {
    functions: Vec<Stub>,
}

/// One function, checked as it is read.
#[derive(Deserialize)]
#[serde(try_from = "RawStub")]
struct Stub {
    name: String,
    arity: usize,
    answers: Answers,
}

enum Answers {
    Constant(Datum<'static>),
    Table(Vec<(Vec<Datum<'static>>, Datum<'static>)>),
    Failing(String),
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawStub {
    name: String,
    arity: usize,
    answer: Option<JsonDatum>,
    table: Option<Vec<Row>>,
    error: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Row {
    args: Vec<JsonDatum>,
    answer: JsonDatum,
}

/// A datum as JSON (serde_json's parser bounds its depth).
#[derive(Deserialize)]
#[serde(try_from = "serde_json::Value")]
struct JsonDatum(Datum<'static>);

impl TryFrom<serde_json::Value> for JsonDatum {
    type Error = String;

    fn try_from(value: serde_json::Value) -> Result<Self, String> {
        datum(&value).map(JsonDatum)
    }
}

/// The datum a JSON value stands for.
fn datum(value: &serde_json::Value) -> Result<Datum<'static>, String> {
    use serde_json::Value;
    match value {
        Value::Bool(b) => Ok(Datum::Bool(*b)),
        Value::Number(n) => n
            .as_i64()
            .map(Datum::Int)
            .ok_or_else(|| format!("{n} is not a 64-bit integer")),
        Value::String(s) => Ok(Datum::Str(s.clone())),
        Value::Object(fields) => {
            let tag = match fields.get("tag") {
                Some(Value::String(tag)) => tag,
                _ => return Err("a constructor needs a string \"tag\"".into()),
            };
            if !tag.chars().next().is_some_and(char::is_uppercase) {
                return Err(format!(
                    "constructor tag `{tag}` must start with a capital letter"
                ));
            }
            let items = match fields.get("fields") {
                None => Vec::new(),
                Some(Value::Array(items)) => items.iter().map(datum).collect::<Result<_, _>>()?,
                Some(_) => return Err("a constructor's \"fields\" is a list".into()),
            };
            if let Some(other) = fields.keys().find(|k| *k != "tag" && *k != "fields") {
                return Err(format!("unknown field `{other}` in a constructor"));
            }
            Ok(Datum::con(tag.clone(), items))
        }
        Value::Null => Err("null is not a datum".into()),
        Value::Array(_) => Err("a list is not a datum: write a constructor".into()),
    }
}

impl TryFrom<RawStub> for Stub {
    type Error = String;

    fn try_from(raw: RawStub) -> Result<Self, String> {
        let name = raw.name;
        let answers = match (raw.answer, raw.table, raw.error) {
            (Some(answer), None, None) => Answers::Constant(answer.0),
            (None, Some(rows), None) => {
                let mut table = Vec::with_capacity(rows.len());
                for row in rows {
                    if row.args.len() != raw.arity {
                        return Err(format!(
                            "`{name}` takes {} arguments, but a table row has {}",
                            raw.arity,
                            row.args.len()
                        ));
                    }
                    table.push((row.args.into_iter().map(|a| a.0).collect(), row.answer.0));
                }
                Answers::Table(table)
            }
            (None, None, Some(message)) => Answers::Failing(message),
            _ => {
                return Err(format!(
                    "`{name}` needs exactly one of \"answer\", \"table\" or \"error\""
                ))
            }
        };
        Ok(Stub {
            name,
            arity: raw.arity,
            answers,
        })
    }
}

/// A stub file that cannot be used: why, and where (line and column).
pub struct StubError {
    pub message: String,
    pub at: Option<(usize, usize)>,
}

/// The host table of the stub file whose text is `bytes`.
pub fn load(bytes: &[u8]) -> Result<HostFunctions, StubError> {
    let file: StubFile = serde_json::from_slice(bytes).map_err(|e| {
        // serde_json ends its message with the place; the place is given apart.
        let text = e.to_string();
        let place = format!(" at line {} column {}", e.line(), e.column());
        StubError {
            message: text.strip_suffix(&place).unwrap_or(&text).to_string(),
            at: (e.line() > 0).then(|| (e.line(), e.column())),
        }
    })?;
    let mut host = HostFunctions::new();
    for stub in file.functions {
        let Stub {
            name,
            arity,
            answers,
        } = stub;
        let registered = host.register_data(&name, arity, move |args| match &answers {
            Answers::Constant(answer) => Ok(answer.clone()),
            Answers::Failing(message) => Err(message.clone()),
            Answers::Table(rows) => rows
                .iter()
                .find(|(row, _)| row.as_slice() == args)
                .map(|(_, answer)| answer.clone())
                .ok_or_else(|| {
                    let shown: Vec<String> = args
                        .iter()
                        .map(|a| orrery::Value::from_datum(a).print_limited(200).text)
                        .collect();
                    format!("no stub answer for ({})", shown.join(", "))
                }),
        });
        registered.map_err(|e| StubError {
            message: format!("stub `{name}`: {e}"),
            at: None,
        })?;
    }
    Ok(host)
}
