//! A configuration host: an application reads its settings from a file in
//! orrery's text syntax, evaluates it under tight limits, and converts the
//! result into its own Rust structs. Scenario: the climate settings of an
//! imaginary plant nursery (`examples/greenhouse.orr`).
//!
//! Run with `cargo run --example config_host [FILE]`.

use orrery::{ConvertError, Datum, FromDatum, Limits, MachineKind, Outcome, Program};

/// One glasshouse zone, as the application wants it.
#[derive(Debug)]
struct Zone {
    name: String,
    low_tenths: i64,
    high_tenths: i64,
    misting: bool,
    litres_per_day: u32,
}

/// The application's own conversion: `Zone(name, low, high, mist, litres)`.
impl FromDatum for Zone {
    fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError> {
        let (tag, fields) = match datum {
            Datum::Con(c) => (c.tag(), c.fields()),
            other => return Err(ConvertError::new("a Zone", other.describe())),
        };
        let [name, low, high, mist, litres] = fields else {
            return Err(ConvertError::new(
                "Zone with five fields",
                format!("{tag} with {}", fields.len()),
            ));
        };
        if tag != "Zone" {
            return Err(ConvertError::new(
                "a Zone",
                format!("the constructor {tag}"),
            ));
        }
        Ok(Zone {
            name: String::from_datum(name)?,
            low_tenths: i64::from_datum(low)?,
            high_tenths: i64::from_datum(high)?,
            misting: bool::from_datum(mist)?,
            litres_per_day: u32::from_datum(litres)?,
        })
    }
}

fn main() {
    let path = std::env::args().nth(1).unwrap_or_else(|| {
        concat!(env!("CARGO_MANIFEST_DIR"), "/examples/greenhouse.orr").to_string()
    });
    let source = match std::fs::read_to_string(&path) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("cannot read {path}: {e}");
            std::process::exit(1);
        }
    };
    let program = match Program::parse(&source) {
        Ok(p) => p,
        Err(e) => {
            // `FILE:LINE:COL: message`, the line, and a caret.
            eprintln!("{}", e.render(&path, &source));
            std::process::exit(1);
        }
    };
    // A configuration has no business running long or using much memory.
    let limits = Limits::default().with_fuel(100_000).with_memory(4 << 20);
    let Some(machine) = MachineKind::fastest() else {
        eprintln!("no machine enabled in this build");
        std::process::exit(1);
    };
    let report = machine.run(&program, &limits);
    let value = match report.outcome {
        Outcome::Value(v) => v,
        Outcome::Error(e) => {
            eprintln!("{path}: the configuration failed: {e}");
            std::process::exit(1);
        }
        Outcome::OutOfFuel => {
            eprintln!(
                "{path}: the configuration used more than {} contractions",
                limits.fuel
            );
            std::process::exit(1);
        }
        Outcome::Fault(f) => {
            eprintln!("{path}: {f}");
            std::process::exit(1);
        }
        Outcome::Suspended(call) => {
            eprintln!("{path}: waits on {call}, which this tool cannot answer");
            std::process::exit(1);
        }
        Outcome::Limit(l) => {
            eprintln!("{path}: {l}");
            std::process::exit(1);
        }
    };
    let zones: Vec<Zone> = match value.extract() {
        Ok(z) => z,
        Err(e) => {
            eprintln!("{path}: the configuration is not a list of zones: {e}");
            std::process::exit(1);
        }
    };
    println!(
        "{} zones ({} on {}):",
        zones.len(),
        report.counts,
        machine.name()
    );
    for z in &zones {
        println!(
            "  {:<14} {:>5.1}–{:<5.1} °C  misting: {:<3}  {:>3} l/day",
            z.name,
            z.low_tenths as f64 / 10.0,
            z.high_tenths as f64 / 10.0,
            if z.misting { "yes" } else { "no" },
            z.litres_per_day
        );
    }
}
