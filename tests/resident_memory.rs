//! The memory limit in resident memory: each memory bomb runs on each machine
//! in a child process of its own, which reports its resident set before the
//! run and its peak after; the peak may exceed the baseline by at most the
//! limit plus 25% (the allocator's overhead on top of the bytes the machines
//! account for). Linux only: it reads `/proc/self/status`.
//!
//! A test without the default harness: `main` re-runs this executable once
//! per machine and bomb, so no other test shares the process being measured.

use std::process::Command;

use orrery::{parse, Arena, LimitKind, Limits, MachineKind, Outcome};

/// The limit every bomb runs under.
const LIMIT: usize = 64 << 20;

/// Programs that grow without bound, each a different kind of runtime data.
const BOMBS: &[(&str, &str)] = &[
    (
        "list",
        "let rec grow n acc = grow (n + 1) (Cons(n, acc)) in grow 0 Nil",
    ),
    (
        "string",
        "let rec double s = double (s ++ s) in double \"seed\"",
    ),
    ("stack", "let rec deep n = 1 + deep (n + 1) in deep 0"),
    (
        "closures",
        "let rec wrap f n = wrap (\\x. f (x + n)) (n + 1) in wrap (\\x. x) 0",
    ),
];

/// `VmRSS` or `VmHWM` of this process, in bytes.
fn status_bytes(field: &str) -> Option<usize> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with(field))?;
    let kib: usize = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib * 1024)
}

/// In the child: run one bomb on one machine and print
/// `baseline peak outcome`.
fn child(machine: &str, bomb: &str) {
    let Some(kind) = MachineKind::from_name(machine) else {
        println!("error unknown machine {machine}");
        return;
    };
    let Some((_, source)) = BOMBS.iter().find(|(name, _)| *name == bomb) else {
        println!("error unknown bomb {bomb}");
        return;
    };
    let arena = Arena::new();
    let program = parse(&arena, source).expect("the bombs parse");
    let limits = Limits::default().with_fuel(u64::MAX).with_memory(LIMIT);
    let baseline = status_bytes("VmRSS:").unwrap_or(0);
    let report = kind.run(&program, &limits);
    let peak = status_bytes("VmHWM:").unwrap_or(usize::MAX);
    let outcome = match report.outcome {
        Outcome::Limit(l) if l.kind() == LimitKind::Memory => "memory".to_string(),
        other => format!("{other:?}").replace(' ', "_"),
    };
    println!("{baseline} {peak} {outcome}");
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if let [_, flag, machine, bomb] = args.as_slice() {
        if flag == "--child" {
            child(machine, bomb);
            return;
        }
    }
    if status_bytes("VmHWM:").is_none() {
        println!("resident_memory: no /proc/self/status here; nothing to measure");
        return;
    }
    let exe = std::env::current_exe().expect("the test knows its own path");
    let mut failures = Vec::new();
    for machine in MachineKind::enabled() {
        for (bomb, _) in BOMBS {
            let output = Command::new(&exe)
                .args(["--child", machine.name(), bomb])
                .output()
                .expect("the test can run itself");
            let text = String::from_utf8_lossy(&output.stdout);
            let fields: Vec<&str> = text.split_whitespace().collect();
            let [baseline, peak, outcome] = fields.as_slice() else {
                failures.push(format!(
                    "{} {bomb}: child said {text:?} {:?}",
                    machine.name(),
                    output.status
                ));
                continue;
            };
            let (baseline, peak): (usize, usize) = (
                baseline.parse().unwrap_or(0),
                peak.parse().unwrap_or(usize::MAX),
            );
            let over = peak.saturating_sub(baseline);
            println!(
                "{:<8} {bomb:<9} baseline {:>6.1} MiB  peak {:>6.1} MiB  growth {:>5.1} MiB ({:.0}% of the limit)  {outcome}",
                machine.name(),
                baseline as f64 / 1048576.0,
                peak as f64 / 1048576.0,
                over as f64 / 1048576.0,
                100.0 * over as f64 / LIMIT as f64
            );
            if *outcome != "memory" {
                failures.push(format!(
                    "{} {bomb}: ended with {outcome}, not the memory limit",
                    machine.name()
                ));
            }
            if over > LIMIT + LIMIT / 4 {
                failures.push(format!(
                    "{} {bomb}: resident memory grew by {over} bytes, more than 125% of the {LIMIT}-byte limit",
                    machine.name()
                ));
            }
        }
    }
    if !failures.is_empty() {
        for f in &failures {
            eprintln!("FAILED: {f}");
        }
        std::process::exit(1);
    }
    println!("resident_memory: every bomb stopped at the memory limit within 125% of it");
}
