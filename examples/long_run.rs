//! A long computation under the host's control: paused whenever its fuel
//! slice runs out (so the host can report progress or do other work), resumed
//! with more, and — in a second run — cancelled from another thread.
//! Scenario: an imaginary seed bank counting the seed lots whose catalogue
//! numbers are prime, by trial division.
//!
//! Run with `cargo run --release --example long_run`.

use std::sync::mpsc;
use std::time::Duration;

use orrery::{parse, Arena, Cancel, Limits, MachineKind, Outcome};

/// An outcome in a line: the value printed, or what stopped the run.
fn describe(outcome: &Outcome) -> String {
    match outcome {
        Outcome::Value(v) => v.to_string(),
        Outcome::Error(e) => format!("error: {e}"),
        Outcome::OutOfFuel => "out of fuel".to_string(),
        Outcome::Limit(l) => format!("stopped: {l}"),
        Outcome::Fault(f) => format!("orrery failed: {f}"),
        Outcome::Suspended(call) => format!("waits on {call}"),
    }
}

const PRIME_LOTS: &str = "
let rec divides_none n d =
  if d * d > n then true
  else if n % d == 0 then false
  else divides_none n (d + 1) in
let rec count n acc =
  if n < 2 then acc
  else count (n - 1) (if divides_none n 2 then acc + 1 else acc) in
count LOTS 0";

fn main() {
    let arena = Arena::new();

    // 1. Pause and resume, on every machine that can pause: slices of two
    // million contractions (the reference stepper, the slow and simple
    // machine, counts the lots below 3000 in slices of a hundred thousand).
    for kind in MachineKind::enabled() {
        let (lots, slice) = if kind.name() == "stepper" {
            (3000, 100_000)
        } else {
            (60000, 2_000_000)
        };
        let program = parse(&arena, &PRIME_LOTS.replace("LOTS", &lots.to_string()))
            .expect("the example parses");
        let Some(mut run) = kind
            .machine()
            .start(&program, &Limits::default().with_fuel(0))
        else {
            println!("{}: cannot pause", kind.name());
            continue;
        };
        let mut pauses = 0;
        let paused_end = loop {
            let report = run.resume(slice);
            if report.outcome != Outcome::OutOfFuel {
                break report;
            }
            pauses += 1;
        };
        let whole = kind.run(&program, &Limits::default());
        println!(
            "{}, resumed {pauses} times: {} prime lots below {lots}, {} contractions (uninterrupted: {} in {})",
            kind.name(),
            describe(&paused_end.outcome),
            paused_end.counts.total(),
            describe(&whole.outcome),
            whole.counts.total()
        );
        assert_eq!(paused_end.outcome, whole.outcome);
        assert_eq!(paused_end.counts, whole.counts);
    }

    // 2. Cancel: a run with no fuel bound to speak of, stopped from here.
    let cancel = Cancel::new();
    let limits = Limits::default()
        .with_fuel(u64::MAX)
        .with_cancel(cancel.clone());
    let (started, has_started) = mpsc::channel();
    let worker = std::thread::spawn(move || {
        let arena = Arena::new();
        let program =
            parse(&arena, &PRIME_LOTS.replace("LOTS", "100000000")).expect("the example parses");
        let machine = MachineKind::fastest().expect("the example is built with a machine");
        let _ = started.send(());
        let report = machine.run(&program, &limits);
        (
            machine.name(),
            describe(&report.outcome),
            report.counts.total(),
        )
    });
    let _ = has_started.recv();
    std::thread::sleep(Duration::from_millis(200));
    cancel.cancel();
    match worker.join() {
        Ok((machine, outcome, steps)) => {
            println!(
                "{machine}: cancelled from the main thread: {outcome} after {steps} contractions"
            )
        }
        Err(_) => eprintln!("the worker thread failed"),
    }
}
