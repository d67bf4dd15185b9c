//! The formats of the corpus files under `tests/corpus/` (their table is
//! in `tests/corpus.rs`, which runs them): the header of a program file
//! and the blocks of a shapes file.

use std::path::{Path, PathBuf};

use orrery::{Limits, Rule};

/// The files under `tests/corpus/` with this extension whose names contain
/// `ORRERY_CORPUS`, sorted, and the filter.
pub fn corpus_files(extension: &str) -> (Vec<PathBuf>, String) {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/corpus");
    let filter = std::env::var("ORRERY_CORPUS").unwrap_or_default();
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .expect("tests/corpus exists")
        .filter_map(|entry| entry.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == extension))
        .filter(|p| file_name(p).contains(&filter))
        .collect();
    files.sort();
    (files, filter)
}

pub fn file_name(path: &Path) -> String {
    path.file_name()
        .unwrap_or_default()
        .to_string_lossy()
        .into_owned()
}

/// What one program's header says (see the table in `tests/corpus.rs`).
#[derive(Debug, Default)]
pub struct Header {
    pub sources: usize,
    pub ending: Option<String>,
    pub limits: Limits,
    pub steps: Option<u64>,
    pub rules: Vec<(Rule, u64)>,
    pub extra_fuel: Option<u64>,
    /// `(fuel, ending, steps)` of the `with fuel` lines.
    pub cuts: Vec<(u64, String, Option<u64>)>,
    pub skip: Vec<String>,
}

fn number(value: &str, line: &str) -> Result<u64, String> {
    value
        .trim()
        .parse::<u64>()
        .map_err(|_| format!("bad number in `{line}`"))
}

pub fn read_header(source: &str) -> Result<Header, String> {
    let mut h = Header::default();
    for line in source.lines().take_while(|l| l.starts_with('#')) {
        let Some((key, value)) = line[1..].split_once(':') else {
            continue;
        };
        let (key, value) = (key.trim(), value.trim());
        match key {
            "source" => h.sources += 1,
            "expect" => h.ending = Some(value.to_string()),
            "fuel" => h.limits.fuel = number(value, line)?,
            "memory" => {
                h.limits.memory = usize::try_from(number(value, line)?)
                    .map_err(|_| format!("too large: `{line}`"))?
            }
            "steps" => h.steps = Some(number(value, line)?),
            "extra_fuel" => h.extra_fuel = Some(number(value, line)?),
            "skip" => match value.split_once(' ') {
                Some((machine, reason)) if !reason.trim().is_empty() => {
                    h.skip.push(machine.to_string())
                }
                _ => return Err(format!("a skip says why: `{line}`")),
            },
            _ if key.starts_with("with fuel ") => {
                let fuel = number(&key["with fuel ".len()..], line)?;
                let (ending, steps) = match value.split_once(", steps ") {
                    Some((ending, steps)) => (ending, Some(number(steps, line)?)),
                    None => (value, None),
                };
                h.cuts.push((fuel, ending.to_string(), steps));
            }
            rule => match Rule::ALL.iter().find(|r| r.name() == rule) {
                Some(r) => h.rules.push((*r, number(value, line)?)),
                None => return Err(format!("unknown header line `{line}`")),
            },
        }
    }
    if h.sources == 0 {
        return Err("no `# source:` line".to_string());
    }
    if h.ending.is_none() {
        return Err("no `# expect:` line".to_string());
    }
    Ok(h)
}

/// One block of a shapes file.
pub struct Shape {
    pub program: String,
    pub ending: String,
    pub trace: String,
}

/// The blocks of a shapes file, or why it is malformed.
pub fn read_shapes(text: &str) -> Result<Vec<Shape>, String> {
    let mut shapes = Vec::new();
    let mut fields: [Option<String>; 3] = [None, None, None];
    let keys = ["program", "expect", "trace"];
    for (n, line) in text.lines().enumerate() {
        if line.starts_with('#') || line.trim().is_empty() {
            continue;
        }
        let (key, value) = line
            .split_once(": ")
            .ok_or_else(|| format!("line {}: no `key: value`", n + 1))?;
        let k = keys
            .iter()
            .position(|k| *k == key)
            .ok_or_else(|| format!("line {}: unknown key `{key}`", n + 1))?;
        if k != fields.iter().filter(|f| f.is_some()).count() {
            return Err(format!("line {}: `{key}` out of order", n + 1));
        }
        fields[k] = Some(value.to_string());
        if let [Some(_), Some(_), Some(_)] = &fields {
            let [p, e, t] = std::mem::take(&mut fields);
            shapes.push(Shape {
                program: p.unwrap_or_default(),
                ending: e.unwrap_or_default(),
                trace: t.unwrap_or_default(),
            });
        }
    }
    if fields.iter().any(Option::is_some) {
        return Err("the last block is cut short".to_string());
    }
    Ok(shapes)
}
