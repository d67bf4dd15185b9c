//! An approval workflow that waits for a person. Scenario: the purchasing
//! rule of an imaginary allotment society, "Juniper Lane Growers". A
//! member's order is priced from the society's price list; an order over
//! the treasurer's limit needs the treasurer's yes or no, which may come
//! days later, long after the process that asked has exited.
//!
//! The rule asks through a suspending host function, `treasurer_agrees`.
//! `start` runs the rule until it asks, writes the run's snapshot to the
//! state file, prints the question and exits. `resume` reads the snapshot
//! in a new process, restores the run against the same rule, answers and
//! prints the outcome:
//!
//! ```text
//! cargo run --example approvals -- start STATE_FILE
//! cargo run --example approvals -- resume STATE_FILE yes|no
//! ```
//!
//! The price list is an ordinary host function: restoring a snapshot
//! replays the run, calling it again, so it must answer the same both times
//! (it does: it is a fixed table). The question's answer is recorded in the
//! snapshot, never asked twice.

use std::process::ExitCode;

use orrery::{Datum, HostFunctions, Limits, MachineKind, Outcome, Program, Report, Snapshot};

/// The purchasing rule, in orrery's text syntax: an order is a list of
/// `Line(item, quantity)`; the answer is `Ordered(cents, note)` or
/// `Held(reason)`.
const RULE: &str = r#"
let limit = 15000 in
let rec total lines = case lines of {
  Nil => 0;
  Cons(line, rest) => case line of {
    Line(item, quantity) => price_of item * quantity + total rest
  }
} in
let rec count lines = case lines of { Nil => 0; Cons(_, rest) => 1 + count rest } in
let order = Cons(Line("seed potatoes, 5 kg", 6),
            Cons(Line("rainwater butt", 2),
            Cons(Line("bare-root apple tree", 3), Nil))) in
let cents = total order in
let summary = decimal (count order) ++ " lines for " ++ decimal cents ++ " cents" in
if cents <= limit then Ordered(cents, "within the limit: " ++ summary)
else if treasurer_agrees summary (cents - limit)
  then Ordered(cents, "the treasurer agreed: " ++ summary)
  else Held("the treasurer declined: " ++ summary)
"#;

/// The society's price list, in cents.
fn price_of(item: String) -> Result<i64, String> {
    match item.as_str() {
        "seed potatoes, 5 kg" => Ok(899),
        "rainwater butt" => Ok(4_250),
        "bare-root apple tree" => Ok(2_375),
        other => Err(format!("{other} is not on the price list")),
    }
}

/// The rule with its host table, built alike by every process: the
/// snapshot's fingerprint checks that it is.
fn rule() -> Result<Program, String> {
    let mut host = HostFunctions::new();
    host.register("price_of", price_of)
        .map_err(|e| e.to_string())?;
    host.register_suspending("treasurer_agrees", 2)
        .map_err(|e| e.to_string())?;
    Program::parse_with(RULE, &host).map_err(|e| e.to_string())
}

/// Small limits: the rule needs a few hundred contractions.
fn limits() -> Limits {
    Limits::default().with_fuel(10_000).with_memory(1 << 20)
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    match command(&args) {
        Ok(()) => ExitCode::SUCCESS,
        Err(why) => {
            eprintln!("approvals: {why}");
            ExitCode::FAILURE
        }
    }
}

/// Do what the command line says.
fn command(args: &[String]) -> Result<(), String> {
    match args.iter().map(String::as_str).collect::<Vec<_>>()[..] {
        ["start", state] => start(state),
        ["resume", state, answer @ ("yes" | "no")] => resume(state, answer == "yes"),
        _ => Err("usage: approvals start STATE_FILE | approvals resume STATE_FILE yes|no".into()),
    }
}

/// Run the rule until it asks; keep the run in `state` and print the
/// question (or, if nobody need be asked, the outcome).
fn start(state: &str) -> Result<(), String> {
    let program = rule()?;
    let mut run = MachineKind::enabled()
        .iter()
        .find_map(|kind| kind.machine().start(&program, &limits()))
        .ok_or("this build has no machine that can pause")?;
    let report = run.resume(0);
    let Outcome::Suspended(call) = &report.outcome else {
        return show(&report);
    };
    let bytes = run.snapshot().to_bytes();
    std::fs::write(state, &bytes).map_err(|e| format!("cannot write {state}: {e}"))?;
    let question = match &call.args[..] {
        [Datum::Str(summary), Datum::Int(over)] => {
            format!(
                "Does the treasurer agree to an order of {summary}, {over} cents over the limit?"
            )
        }
        _ => format!("The rule asks {call}."),
    };
    println!("{question}");
    println!(
        "(the run is kept in {state}, {} bytes; answer with `resume {state} yes` or `no`)",
        bytes.len()
    );
    Ok(())
}

/// Restore the run kept in `state`, answer its question and print the
/// outcome.
fn resume(state: &str, agrees: bool) -> Result<(), String> {
    let bytes = std::fs::read(state).map_err(|e| format!("cannot read {state}: {e}"))?;
    let snapshot = Snapshot::from_bytes(&bytes).map_err(|e| format!("{state}: {e}"))?;
    let program = rule()?;
    let mut run = snapshot
        .restore(&program, &limits())
        .map_err(|e| format!("{state}: {e}"))?;
    let Some(call) = snapshot.pending() else {
        return Err(format!(
            "{state} holds a run that is not waiting for an answer"
        ));
    };
    println!(
        "Answering {call} with {}.",
        if agrees { "yes" } else { "no" }
    );
    show(&run.resume_with(Ok(Datum::Bool(agrees))))
}

/// Print the rule's outcome.
fn show(report: &Report) -> Result<(), String> {
    match &report.outcome {
        Outcome::Value(value) => {
            println!("{value}");
            println!("({} contractions)", report.counts.total());
            Ok(())
        }
        Outcome::Error(e) => Err(format!("the rule failed: {e}")),
        other => Err(format!("the rule did not give an answer: {}", other.name())),
    }
}

/// The two-process flow, as the command line runs it: each step is a child
/// process (this test binary, run again with the step in `APPROVALS_STEP`),
/// so the run is restored in a process that did not start it.
#[cfg(test)]
mod tests {
    use std::process::Command;

    /// In a child process: the step `APPROVALS_STEP` names (its words split
    /// by spaces), printing what the example prints. In the parent: nothing.
    #[test]
    fn step() {
        if let Ok(step) = std::env::var("APPROVALS_STEP") {
            let args: Vec<String> = step.split(' ').map(String::from).collect();
            if let Err(why) = super::command(&args) {
                println!("approvals: {why}");
            }
        }
    }

    /// What the step prints, run in a child process.
    fn child(step: &str) -> String {
        let exe = std::env::current_exe().expect("the test knows its own path");
        let output = Command::new(exe)
            .args(["--exact", "tests::step", "--nocapture", "--test-threads=1"])
            .env("APPROVALS_STEP", step)
            .output()
            .expect("the test can run itself");
        assert!(output.status.success(), "{output:?}");
        String::from_utf8_lossy(&output.stdout).into_owned()
    }

    #[test]
    fn a_question_asked_in_one_process_is_answered_in_another() {
        let dir = std::env::temp_dir().join(format!("approvals-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("a scratch directory");
        let state = dir.join("order.state");
        let state = state.to_str().expect("a UTF-8 path");
        let asked = child(&format!("start {state}"));
        // 6 × 899 + 2 × 4250 + 3 × 2375 = 21,019 cents, 6,019 over 15,000.
        assert!(
            asked.contains("an order of 3 lines for 21019 cents, 6019 cents over the limit?"),
            "{asked}"
        );
        let kept = std::fs::read(state).expect("the state file was written");
        let yes = child(&format!("resume {state} yes"));
        assert!(
            yes.contains(r#"Ordered(21019, "the treasurer agreed: 3 lines for 21019 cents")"#),
            "{yes}"
        );
        // The state file is the run as it waited: it can be answered again.
        let no = child(&format!("resume {state} no"));
        assert!(
            no.contains(r#"Held("the treasurer declined: 3 lines for 21019 cents")"#),
            "{no}"
        );
        // A damaged state file is a clear error, not an answer.
        let mut damaged = kept.clone();
        let middle = damaged.len() / 2;
        damaged[middle] ^= 0x20;
        std::fs::write(state, &damaged).expect("rewrite the state file");
        let refused = child(&format!("resume {state} yes"));
        assert!(
            refused.contains("approvals: ") && !refused.contains("Ordered("),
            "{refused}"
        );
        std::fs::remove_dir_all(&dir).expect("remove the scratch directory");
    }
}
