//! Run one workload once on one machine and print its outcome and
//! contractions: a deterministic target for an instruction counter
//! (`valgrind --tool=callgrind`), which a busy machine does not disturb the
//! way it disturbs wall-clock time.

use std::process::ExitCode;

use orrery::{Machine, MachineKind, Outcome};

// Each bench target uses a part of the shared workloads.
#[allow(dead_code)]
mod workloads;
use workloads::*;

/// The workloads by name: the source and the plain Rust twin's value.
fn workload(name: &str) -> Option<(String, String)> {
    let (source, expected) = match name {
        "fib25" => (format!("{FIB}25"), fib(25).to_string()),
        "fib30" => (format!("{FIB}30"), fib(30).to_string()),
        "tak18" => (format!("{TAK}18 12 6"), tak(18, 12, 6).to_string()),
        "tak24" => (format!("{TAK}24 16 8"), tak(24, 16, 8).to_string()),
        "ackermann" => (format!("{ACKERMANN}3 7"), ackermann(3, 7).to_string()),
        "queens" => (QUEENS.to_string(), queens(8).to_string()),
        "church" => (CHURCH.to_string(), church().to_string()),
        "tail" => (tail_loop(1_000_000), tail(1_000_000).to_string()),
        "watering" => (WATERING.to_string(), watering(4, 31).printed()),
        _ => return None,
    };
    Some((source, expected))
}

const NAMES: &str = "fib25 fib30 tak18 tak24 ackermann queens church tail watering";

fn main() -> ExitCode {
    // `cargo bench` passes `--bench`; the free arguments are ours.
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with('-'))
        .collect();
    let (name, machine, times) = match args.as_slice() {
        [name, machine] => (name, machine, 1),
        [name, machine, times] => match times.parse::<u32>() {
            Ok(t) if t > 0 => (name, machine, t),
            _ => {
                eprintln!("TIMES must be a positive count, not {times}");
                return ExitCode::FAILURE;
            }
        },
        _ => {
            // Run as part of a plain `cargo bench`: nothing to do.
            eprintln!("usage: once WORKLOAD MACHINE [TIMES]  (workloads: {NAMES})");
            return ExitCode::SUCCESS;
        }
    };
    let Some((source, expected)) = workload(name) else {
        eprintln!("no workload {name}; workloads: {NAMES}");
        return ExitCode::FAILURE;
    };
    // `env-unaccounted` and `cek-unaccounted` are the machines with their
    // fuel and memory checks compiled out, for the accounting's share in
    // instructions.
    let (name_of_kind, unaccounted) = match machine.strip_suffix("-unaccounted") {
        Some(base) => (base, true),
        None => (machine.as_str(), false),
    };
    let runner = MachineKind::from_name(name_of_kind).and_then(|kind| {
        if unaccounted {
            kind.unaccounted()
        } else {
            Some(kind.machine())
        }
    });
    let Some(mut runner): Option<Box<dyn Machine>> = runner else {
        eprintln!("no machine {machine} in this build");
        return ExitCode::FAILURE;
    };
    let program = program(&source);
    // Run TIMES times (one machine, as a server would): the instructions of
    // TIMES runs less those of one give the cost of a run once the program
    // is prepared.
    let mut report = runner.run(&program, &unlimited());
    for _ in 1..times {
        report = runner.run(&program, &unlimited());
    }
    match report.outcome {
        Outcome::Value(v) if v.to_string() == expected => {
            println!(
                "{name} on {machine}: {} contractions",
                report.counts.total()
            );
            ExitCode::SUCCESS
        }
        other => {
            eprintln!("{name} on {machine}: {other:?}, expected {expected}");
            ExitCode::FAILURE
        }
    }
}
