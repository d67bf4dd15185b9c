//! A rule engine: the rules are parsed and evaluated once, to a function
//! value; the application then calls that function once per request, each
//! call under fresh limits and with its own context (the dispatch desk's
//! state when the request came in), and the rules call back into the
//! application through host functions, one of which reads that context.
//! Scenario: quotes for an imaginary bicycle courier
//! (`examples/courier_rules.orr`).
//!
//! Run with `cargo run --example rule_engine`.

use std::collections::HashMap;

use orrery::{Datum, HostFunctions, IntoDatum, Limits, MachineKind, Outcome, Program};

/// A delivery request from the application's own order system.
struct Request {
    postcode: &'static str,
    kilograms: i64,
    hour: i64,
    fragile: bool,
    /// Riders free at the desk when the request came in.
    riders_free: i64,
}

/// What each run's host functions may read: the dispatch desk at the time
/// of one request.
struct Dispatch {
    riders_free: i64,
}

impl Request {
    /// The request as the rules see it.
    fn to_datum(&self) -> Datum<'static> {
        Datum::con(
            "Request",
            vec![
                self.postcode.into_datum(),
                self.kilograms.into_datum(),
                self.hour.into_datum(),
                self.fragile.into_datum(),
            ],
        )
    }
}

/// The application's answers to the rules' questions.
fn host_functions() -> HostFunctions {
    let zones: HashMap<&'static str, i64> = [("RV1", 1), ("RV2", 1), ("MK7", 2), ("TQ9", 3)]
        .into_iter()
        .collect();
    let mut host = HostFunctions::new();
    host.register("zone_of", move |postcode: String| {
        Ok::<_, String>(zones.get(postcode.as_str()).copied().unwrap_or(0))
    })
    .expect("a fresh table takes a lower-case name");
    // The surge reads the run's context: with few riders free, every hour
    // costs 15% more.
    host.register_with_context("surge", |desk: &Dispatch, hour: i64| {
        if !(0..24).contains(&hour) {
            return Err(format!("no hour {hour} in a day"));
        }
        let by_hour = match hour {
            7..=9 | 16..=18 => 25,
            22..=23 | 0..=5 => 40,
            _ => 0,
        };
        Ok(by_hour + if desk.riders_free < 2 { 15 } else { 0 })
    })
    .expect("a fresh table takes a lower-case name");
    host
}

fn main() {
    let host = host_functions();
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/courier_rules.orr");
    let source = std::fs::read_to_string(path).expect("the example's rules file is bundled");
    let rules = match Program::parse_with(&source, &host) {
        Ok(p) => p,
        Err(e) => {
            eprintln!("{}", e.render(path, &source));
            std::process::exit(1);
        }
    };
    let machine = MachineKind::fastest().expect("the example is built with a machine");
    // Evaluate the rules once: the result is the quoting function.
    let setup = machine.run(&rules, &Limits::default().with_fuel(10_000));
    let Outcome::Value(quote) = setup.outcome else {
        eprintln!(
            "the rules did not evaluate to a function: {:?}",
            setup.outcome
        );
        std::process::exit(1);
    };
    // The function, as a program of its own, validated once; each request
    // applies it to data, which checks and copies only the data.
    let quote = Program::from_value(&quote).expect("a value of a valid program is valid");

    let requests = [
        Request {
            postcode: "RV1",
            kilograms: 1,
            hour: 11,
            fragile: false,
            riders_free: 3,
        },
        Request {
            postcode: "MK7",
            kilograms: 6,
            hour: 8,
            fragile: true,
            riders_free: 1,
        },
        Request {
            postcode: "TQ9",
            kilograms: 3,
            hour: 23,
            fragile: false,
            riders_free: 4,
        },
        Request {
            postcode: "ZZ0",
            kilograms: 2,
            hour: 12,
            fragile: false,
            riders_free: 2,
        },
        Request {
            postcode: "RV2",
            kilograms: 45,
            hour: 12,
            fragile: false,
            riders_free: 5,
        },
        Request {
            postcode: "RV2",
            kilograms: 4,
            hour: 25,
            fragile: false,
            riders_free: 0,
        },
    ];
    for request in &requests {
        // Each request: fresh, tight limits, and its own context.
        let limits = Limits::default()
            .with_fuel(5_000)
            .with_memory(1 << 20)
            .with_context(Dispatch {
                riders_free: request.riders_free,
            });
        let program = quote
            .apply(&[request.to_datum()])
            .expect("a request uses the rules' tags with their arities");
        let report = machine.run(&program, &limits);
        let answer = match report.outcome {
            Outcome::Value(v) => match v.to_datum() {
                Ok(Datum::Con(c)) => match (c.tag(), c.fields()) {
                    ("Quote", [Datum::Int(cents), Datum::Str(note)]) => {
                        format!("quote {}.{:02} ({note})", cents / 100, cents % 100)
                    }
                    ("Refuse", [Datum::Str(reason)]) => format!("refused: {reason}"),
                    _ => format!("unexpected answer {c:?}"),
                },
                other => format!("unexpected answer {other:?}"),
            },
            Outcome::Error(e) => format!("rule error: {e}"),
            Outcome::OutOfFuel => "rule ran out of fuel".to_string(),
            Outcome::Limit(l) => format!("stopped: {l}"),
            Outcome::Fault(f) => format!("orrery failed: {f}"),
            Outcome::Suspended(call) => format!("rule waits on {call}"),
        };
        println!(
            "{:<4} {:>3} kg {:>2}h{:<9} → {answer}   [{} contractions]",
            request.postcode,
            request.kilograms,
            request.hour,
            if request.fragile { " fragile" } else { "" },
            report.counts.total()
        );
    }
}
