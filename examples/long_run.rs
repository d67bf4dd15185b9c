//! A long computation under the host's control: paused whenever its fuel
//! slice runs out (so the host can report progress or do other work), resumed
//! with more, and — in a second run — cancelled from another thread.
//! Scenario: an imaginary seed bank counting the seed lots whose catalogue
//! numbers are prime, by trial division.
//!
//! Run with `cargo run --release --example long_run`.

use std::sync::mpsc;
use std::time::Duration;

use orrery::machines::cek::Cek;
use orrery::machines::stepper::Stepper;
use orrery::{parse, print, Arena, Cancel, Limits, Machine, MachineKind, Outcome};

/// An outcome in a line: the value printed, or what stopped the run.
fn describe(outcome: &Outcome<'_>) -> String {
    match outcome {
        Outcome::Value(v) => print(v),
        Outcome::Error(e) => format!("error: {e}"),
        Outcome::OutOfFuel => "out of fuel".to_string(),
        Outcome::Limit(l) => format!("stopped: {l}"),
        Outcome::Fault(f) => format!("orrery failed: {f}"),
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
    let program = parse(&arena, &PRIME_LOTS.replace("LOTS", "60000")).expect("the example parses");

    // 1. Pause and resume: slices of two million contractions on cek.
    let slice = 2_000_000;
    let mut run = Cek::start(&program, &Limits::default().with_fuel(0));
    let mut pauses = 0;
    let paused_end = loop {
        let report = run.resume(slice, &arena);
        match report.outcome {
            Outcome::OutOfFuel => {
                pauses += 1;
                println!("paused after {:>10} contractions", report.counts.total());
            }
            _ => break report,
        }
    };
    let whole = Cek::new().run(&program, &Limits::default(), &arena);
    println!(
        "cek, resumed {pauses} times: {} prime lots, {} contractions (uninterrupted: {} in {})",
        describe(&paused_end.outcome),
        paused_end.counts.total(),
        describe(&whole.outcome),
        whole.counts.total()
    );
    assert_eq!(paused_end.outcome, whole.outcome);
    assert_eq!(paused_end.counts, whole.counts);

    // The reference stepper pauses the same way (a smaller count: it is the
    // slow, simple machine).
    let small = parse(&arena, &PRIME_LOTS.replace("LOTS", "3000")).expect("the example parses");
    let mut stepped = Stepper::start(&small, &Limits::default().with_fuel(0));
    let mut stepper_pauses = 0;
    let stepped_end = loop {
        let report = stepped.resume(100_000, &arena);
        if report.outcome != Outcome::OutOfFuel {
            break report;
        }
        stepper_pauses += 1;
    };
    let reference = Stepper::new().run(&small, &Limits::default(), &arena);
    println!(
        "stepper, resumed {stepper_pauses} times: {} prime lots below 3000, {} contractions, same as uninterrupted: {}",
        describe(&stepped_end.outcome),
        stepped_end.counts.total(),
        stepped_end.outcome == reference.outcome && stepped_end.counts == reference.counts
    );

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
        let report = machine.run(&program, &limits, &arena);
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
