//! Limits that hold against an adversary: each class of hostile program runs
//! on each machine in a child process of its own, which reports its resident
//! memory after parsing and its peak after the run. The peak may exceed the
//! baseline by at most 1.25 times the memory limit (plus a small allowance
//! for the allocator's arenas and the test's own reporting), and the outcome
//! must be the one the class expects: a value, or the memory limit, never an
//! abort or a panic. Linux only: it reads `/proc/self/status`.
//!
//! A test without the default harness: `main` re-runs this executable once
//! per case and machine, as many at once as there are cores, so no other
//! test shares the process being measured.
//! `ORRERY_ADVERSARY=name` runs only the cases whose name contains `name`.

use std::io;
use std::path::Path;
use std::process::{Command, Output};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use orrery::{
    parse_with, Arena, HostFunctions, LimitKind, Limits, MachineKind, Outcome, Program, Report,
};

/// What a case must end with.
#[derive(Clone, Copy, PartialEq, Eq, Debug)]
enum Expect {
    /// The memory limit.
    Memory,
    /// A value (its text checked by the case itself).
    Value,
    /// Either: a machine that can finish within the limit may.
    ValueOrMemory,
    /// Out of fuel (the case gives too little on purpose).
    OutOfFuel,
}

/// A hostile case: its name, the class of issue 9 it exercises, and the
/// memory limit it runs under.
struct Case {
    name: &'static str,
    limit: usize,
    expect: Expect,
}

const MIB: usize = 1 << 20;

const CASES: &[Case] = &[
    // 1. Frames pushed before any contraction, and tens of thousands of
    // frames inside one contraction.
    Case {
        name: "deep-sum-20mb",
        limit: MIB,
        expect: Expect::Memory,
    },
    Case {
        name: "spine-in-one-call",
        limit: MIB,
        expect: Expect::Memory,
    },
    Case {
        name: "nested-apps-1e6",
        limit: 16 * MIB,
        expect: Expect::ValueOrMemory,
    },
    Case {
        name: "nested-cases-1e6",
        limit: 16 * MIB,
        expect: Expect::ValueOrMemory,
    },
    Case {
        name: "nested-nots-1e6",
        limit: 16 * MIB,
        expect: Expect::ValueOrMemory,
    },
    // 2. Read-back of 50,000 closures over one 3,000-node body.
    Case {
        name: "closures-read-back",
        limit: 256 * MIB,
        expect: Expect::Memory,
    },
    // 4. A string shared 64 times handed to a host and to `extract`.
    Case {
        name: "host-shared-string",
        limit: 256 * MIB,
        expect: Expect::Memory,
    },
    Case {
        name: "extract-shared-string",
        limit: 256 * MIB,
        expect: Expect::Value,
    },
    // 5. Pausing 300 times with a 4 MiB string live.
    Case {
        name: "pauses-with-big-string",
        limit: 64 * MIB,
        expect: Expect::Value,
    },
    // 6. 4,000 nested functions, each using every variable above it.
    Case {
        name: "nested-functions-4000",
        limit: 16 * MIB,
        expect: Expect::OutOfFuel,
    },
    // 8. Closures under 20,000 lets capture only what they use.
    Case {
        name: "closures-under-many-lets",
        limit: 8 * MIB,
        expect: Expect::Value,
    },
    // 9. One concatenation of a 64 MiB string, paid by its size.
    Case {
        name: "big-concat",
        limit: 512 * MIB,
        expect: Expect::Value,
    },
    // The usual memory bombs, now with a small limit.
    Case {
        name: "bomb-stack",
        limit: 4 * MIB,
        expect: Expect::Memory,
    },
    Case {
        name: "bomb-closures",
        limit: 4 * MIB,
        expect: Expect::Memory,
    },
];

/// `VmRSS` or `VmHWM` of this process, in bytes.
fn status_bytes(field: &str) -> Option<usize> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with(field))?;
    let kib: usize = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib * 1024)
}

/// `\x. 1 + (1 + (… (1 + x)))`, `depth` additions deep.
fn deep_body(depth: usize) -> String {
    format!("\\x. {}x{}", "1 + (".repeat(depth), ")".repeat(depth))
}

/// A program that builds a string of `2^doublings` bytes at run time.
fn doubled(doublings: u32) -> String {
    format!("let rec dbl n s = if n == 0 then s else dbl (n - 1) (s ++ s) in let big = dbl {doublings} \"x\" in ")
}

/// The source of a case that is text (`None` for the ones built otherwise).
fn source(name: &str) -> Option<String> {
    Some(match name {
        "deep-sum-20mb" => format!("1{}", " + 1".repeat(5_000_000)),
        "spine-in-one-call" => {
            format!("let f = {} in let rec go n = if n == 0 then 0 else f n + go (n - 1) in go 10", deep_body(200_000))
        }
        "nested-apps-1e6" => format!("{}0{}", "(\\x. x) (".repeat(1_000_000), ")".repeat(1_000_000)),
        "nested-cases-1e6" => {
            let n = 1_000_000;
            format!("{}7{}", "case Some(".repeat(n), ") of { Some(v) => v }".repeat(n))
        }
        "nested-nots-1e6" => format!("{}true", "not ".repeat(1_000_000)),
        "closures-read-back" => {
            // Each closure's body is 3,000 nodes over its own `n`: read back,
            // they cannot share, 150 million nodes in all.
            let big = format!("{}y", "n + (".repeat(1_500)) + &")".repeat(1_500);
            format!("let rec mk n acc = if n == 0 then acc else mk (n - 1) (Cons(\\y. {big}, acc)) in mk 50000 Nil")
        }
        "host-shared-string" => format!(
            "{}let rec rep n acc = if n == 0 then acc else rep (n - 1) (Cons(big, acc)) in total_length (rep 64 Nil)",
            doubled(25)
        ),
        "extract-shared-string" => format!(
            "{}let rec rep n acc = if n == 0 then acc else rep (n - 1) (Cons(big, acc)) in rep 64 Nil",
            doubled(25)
        ),
        "pauses-with-big-string" => format!(
            "{}let rec loop n = if n == 0 then length big else loop (n - 1) in loop 3000",
            doubled(22)
        ),
        "nested-functions-4000" => {
            let n = 4_000;
            let params: String = (1..=n).map(|i| format!("\\x{i}. ")).collect();
            let sum: Vec<String> = (1..=n).map(|i| format!("x{i}")).collect();
            let args: Vec<String> = (1..=n).map(|i| i.to_string()).collect();
            format!("({params}{}) {}", sum.join(" + "), args.join(" "))
        }
        "closures-under-many-lets" => {
            let lets: String = (1..=20_000).map(|i| format!("let x{i} = {i} in ")).collect();
            format!("{lets}let rec mk n acc = if n == 0 then acc else mk (n - 1) (Cons(\\y. y + x1, acc)) in case mk 2000 Nil of {{ Cons(f, r) => f 0; _ => 0 }}")
        }
        "big-concat" => format!("{}length (big ++ big)", doubled(26)),
        "bomb-stack" => "let rec deep n = 1 + deep (n + 1) in deep 0".to_string(),
        "bomb-closures" => {
            "let rec wrap f n = wrap (\\x. f (x + n)) (n + 1) in wrap (\\x. x) 0".to_string()
        }
        _ => return None,
    })
}

/// The host functions a case may call.
fn host() -> HostFunctions {
    let mut host = HostFunctions::new();
    host.register("total_length", |words: Vec<String>| {
        Ok::<_, String>(words.iter().map(|w| w.len() as i64).sum::<i64>())
    })
    .expect("a valid host function");
    host
}

/// In the child: run one case on one machine and print
/// `baseline peak outcome detail`.
fn child(name: &str, machine: &str) {
    let Some(kind) = MachineKind::from_name(machine) else {
        println!("0 0 error unknown-machine");
        return;
    };
    let Some(case) = CASES.iter().find(|c| c.name == name) else {
        println!("0 0 error unknown-case");
        return;
    };
    let Some(text) = source(name) else {
        println!("0 0 error no-source");
        return;
    };
    let host = host();
    let arena = Arena::new();
    let program = match parse_with(&arena, &text, &host) {
        Ok(p) => p,
        Err(e) => {
            println!("0 0 error syntax:{}", e.message.replace(' ', "_"));
            return;
        }
    };
    drop(text);
    let fuel = if name == "nested-functions-4000" {
        0
    } else {
        u64::MAX
    };
    let limits = Limits::default().with_fuel(fuel).with_memory(case.limit);
    let baseline = status_bytes("VmRSS:").unwrap_or(0);
    // Reset the high-water mark to the memory resident now, so the peak is
    // the run's, not the parser's (proc(5): writing 5 to clear_refs).
    let _ = std::fs::write("/proc/self/clear_refs", "5");
    let (outcome, detail) = match name {
        "pauses-with-big-string" => pauses(kind, &program, &limits),
        "extract-shared-string" => {
            let report = kind.run(&program, &limits);
            let detail = match &report.outcome {
                Outcome::Value(v) => match v.extract_within::<Vec<String>>(case.limit) {
                    Ok(_) => "extracted".to_string(),
                    Err(_) => "refused".to_string(),
                },
                _ => "no-value".to_string(),
            };
            (describe(&report), detail)
        }
        _ => {
            let report = kind.run(&program, &limits);
            let detail = match &report.outcome {
                Outcome::Value(v) => v.print_limited(64).text.replace(' ', "_"),
                _ => format!("{}", report.counts.total()),
            };
            (describe(&report), detail)
        }
    };
    let peak = status_bytes("VmHWM:").unwrap_or(usize::MAX);
    println!("{baseline} {peak} {outcome} {detail}");
}

/// Run in slices of 10 units of fuel, resuming 300 times into one output
/// arena (machines that cannot pause run whole).
fn pauses(kind: MachineKind, program: &Program, limits: &Limits) -> (String, String) {
    let report: Report = match kind.machine().start(program, &limits.clone().with_fuel(0)) {
        Some(mut run) => {
            for _ in 0..300 {
                run.resume(10);
            }
            run.resume(u64::MAX / 2)
        }
        None => kind.run(program, limits),
    };
    let detail = match &report.outcome {
        Outcome::Value(v) => v.to_string(),
        _ => String::from("-"),
    };
    (describe(&report), detail)
}

fn describe(report: &Report) -> String {
    match &report.outcome {
        Outcome::Limit(l) if l.kind() == LimitKind::Memory => "memory".to_string(),
        Outcome::Limit(l) => l.kind().name().to_string(),
        other => other.name().to_string(),
    }
}

/// The value text a case that ends with one must show, if it says.
fn expected_detail(name: &str) -> Option<&'static str> {
    match name {
        "extract-shared-string" => Some("refused"),
        "pauses-with-big-string" => Some("4194304"),
        "closures-under-many-lets" => Some("1"),
        "big-concat" => Some("134217728"),
        "nested-apps-1e6" | "nested-cases-1e6" => None,
        _ => None,
    }
}

/// Run a child for every job, as many at once as the machine has cores
/// (each child measures its own resident memory, so they do not disturb
/// one another's numbers), and return their outputs in the jobs' order.
fn run_children(exe: &Path, jobs: &[(&Case, MachineKind)]) -> Vec<io::Result<Output>> {
    let workers = std::thread::available_parallelism().map_or(1, |n| n.get());
    let next = AtomicUsize::new(0);
    let slots: Vec<Mutex<Option<io::Result<Output>>>> =
        jobs.iter().map(|_| Mutex::new(None)).collect();
    std::thread::scope(|scope| {
        for _ in 0..workers.min(jobs.len()) {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::Relaxed);
                let Some((case, machine)) = jobs.get(i) else {
                    break;
                };
                let output = Command::new(exe)
                    .args(["--child", case.name, machine.name()])
                    .output();
                if let Some(Ok(mut slot)) = slots.get(i).map(Mutex::lock) {
                    *slot = Some(output);
                }
            });
        }
    });
    slots
        .into_iter()
        .map(|slot| {
            slot.into_inner()
                .ok()
                .flatten()
                .unwrap_or_else(|| Err(io::Error::other("the child was never run")))
        })
        .collect()
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if let [_, flag, name, machine] = args.as_slice() {
        if flag == "--child" {
            child(name, machine);
            return;
        }
    }
    if status_bytes("VmHWM:").is_none() {
        println!("adversarial: no /proc/self/status here; nothing to measure");
        return;
    }
    let filter = std::env::var("ORRERY_ADVERSARY").unwrap_or_default();
    let exe = std::env::current_exe().expect("the test knows its own path");
    let mut failures = Vec::new();
    let jobs: Vec<(&Case, MachineKind)> = CASES
        .iter()
        .filter(|c| c.name.contains(filter.as_str()))
        .flat_map(|case| MachineKind::enabled().iter().map(move |&m| (case, m)))
        .collect();
    for ((case, machine), output) in jobs.iter().zip(run_children(&exe, &jobs)) {
        let output = output.expect("the test can run itself");
        let text = String::from_utf8_lossy(&output.stdout);
        let fields: Vec<&str> = text.split_whitespace().collect();
        let [baseline, peak, outcome, detail] = fields.as_slice() else {
            failures.push(format!(
                "{} on {}: the child said {text:?} and ended {:?}: {}",
                case.name,
                machine.name(),
                output.status,
                String::from_utf8_lossy(&output.stderr)
            ));
            continue;
        };
        let (baseline, peak): (usize, usize) = (
            baseline.parse().unwrap_or(0),
            peak.parse().unwrap_or(usize::MAX),
        );
        let over = peak.saturating_sub(baseline);
        println!(
            "{:<26} {:<8} limit {:>4} MiB  growth {:>7.1} MiB ({:>3.0}% of the limit)  {outcome} {detail}",
            case.name,
            machine.name(),
            case.limit / MIB,
            over as f64 / MIB as f64,
            100.0 * over as f64 / case.limit as f64
        );
        let ok = matches!(
            (case.expect, *outcome),
            (Expect::Memory, "memory")
                | (Expect::Value, "value")
                | (Expect::ValueOrMemory, "value" | "memory")
                | (Expect::OutOfFuel, "out_of_fuel")
        );
        if !ok {
            failures.push(format!(
                "{} on {}: ended {outcome} ({detail}), expected {:?}",
                case.name,
                machine.name(),
                case.expect
            ));
        }
        if let Some(want) = expected_detail(case.name) {
            if *outcome == "value" && *detail != want {
                failures.push(format!(
                    "{} on {}: gave {detail}, expected {want}",
                    case.name,
                    machine.name()
                ));
            }
        }
        // The allocator's own arenas and page rounding: a few MiB at most.
        let allowed = case.limit + case.limit / 4 + 4 * MIB;
        if over > allowed {
            failures.push(format!(
                "{} on {}: resident memory grew by {over} bytes, more than 1.25 × the {}-byte limit",
                case.name,
                machine.name(),
                case.limit
            ));
        }
    }
    if !failures.is_empty() {
        for f in &failures {
            eprintln!("FAILED: {f}");
        }
        std::process::exit(1);
    }
    println!("adversarial: every case ended as expected, within 1.25 × its memory limit");
}
