//! Space benchmark: a ten-million-iteration tail loop on every machine, each in
//! a child process of its own (this executable, re-run), which reads its
//! resident set from `/proc/self/status` before and after the run.

use std::process::{Command, ExitCode};
use std::time::Instant;

use orrery::{MachineKind, Outcome};

// Each bench target uses a part of the shared workloads.
#[allow(dead_code)]
mod workloads;
use workloads::{program, record_line, tail, tail_loop, unlimited};

/// Iterations of the loop.
const ITERATIONS: u64 = 10_000_000;

/// The resident-set target of the benches (a ten-million-iteration tail loop in under 32 MiB), in bytes.
const TARGET: u64 = 32 << 20;

/// A `/proc/self/status` field in bytes (the kernel reports kB). `None` where
/// the file or the field is missing (not Linux).
fn status_bytes(field: &str) -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with(field))?;
    let kb = line[field.len()..].trim().trim_end_matches("kB").trim();
    kb.parse::<u64>().ok().map(|kb| kb * 1024)
}

/// Run the loop on `name` in this process and print one tab-separated line:
/// machine, baseline RSS, peak RSS, contractions, outcome, the machine's own
/// peak of runtime bytes (or `-`), seconds.
fn child(name: &str) -> ExitCode {
    let Some(kind) = MachineKind::from_name(name) else {
        eprintln!("no machine named {name} in this build");
        return ExitCode::FAILURE;
    };
    let program = program(&tail_loop(ITERATIONS));
    let expected = tail(ITERATIONS as i64).to_string();
    let baseline = status_bytes("VmRSS:").unwrap_or(0);
    let started = Instant::now();
    // Each machine reports its own peak of runtime bytes too.
    let mut machine = kind.machine();
    let report = machine.run(&program, &unlimited());
    let peak_bytes = Some(machine.peak_bytes());
    let seconds = started.elapsed().as_secs_f64();
    let peak = status_bytes("VmHWM:").unwrap_or(0);
    let outcome = match &report.outcome {
        Outcome::Value(v) if v.to_string() == expected => "value".to_string(),
        Outcome::Value(v) => format!("wrong value {v}"),
        other => other.name().to_string(),
    };
    let peak_bytes = peak_bytes.map_or("-".to_string(), |b: usize| b.to_string());
    println!(
        "{name}\t{baseline}\t{peak}\t{}\t{outcome}\t{peak_bytes}\t{seconds:.2}",
        report.counts.total()
    );
    ExitCode::SUCCESS
}

fn mib(bytes: &str) -> String {
    bytes.parse::<f64>().map_or("-".to_string(), |b| {
        format!("{:.1} MiB", b / (1 << 20) as f64)
    })
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if let Some(i) = args.iter().position(|a| a == "--child") {
        return match args.get(i + 1) {
            Some(name) => child(name),
            None => ExitCode::FAILURE,
        };
    }
    if args.iter().any(|a| a == "--list") {
        for kind in MachineKind::enabled() {
            println!("space/{}: benchmark", kind.name());
        }
        return ExitCode::SUCCESS;
    }
    // Like criterion: free arguments are filters on the benchmark's name.
    let filters: Vec<&String> = args.iter().filter(|a| !a.starts_with('-')).collect();
    let exe = match std::env::current_exe() {
        Ok(exe) => exe,
        Err(e) => {
            eprintln!("cannot find this executable to re-run it: {e}");
            return ExitCode::FAILURE;
        }
    };
    let mut over = false;
    for kind in MachineKind::enabled() {
        let id = format!("space/{}", kind.name());
        if !filters.is_empty() && !filters.iter().any(|f| id.contains(f.as_str())) {
            continue;
        }
        let output = match Command::new(&exe).args(["--child", kind.name()]).output() {
            Ok(output) => output,
            Err(e) => {
                eprintln!("{id}: cannot start the child: {e}");
                over = true;
                continue;
            }
        };
        let line = String::from_utf8_lossy(&output.stdout).trim().to_string();
        let fields: Vec<&str> = line.split('\t').collect();
        if !output.status.success() || fields.len() != 7 {
            eprintln!(
                "{id}: the child failed ({}): {}",
                output.status,
                String::from_utf8_lossy(&output.stderr)
            );
            over = true;
            continue;
        }
        let peak: u64 = fields[2].parse().unwrap_or(u64::MAX);
        let verdict = if peak < TARGET && fields[4] == "value" {
            "ok"
        } else {
            over = true;
            "OVER TARGET OR WRONG"
        };
        println!(
            "{id:<14} baseline {:>9}  peak {:>9}  {} contractions  {}  machine peak {} bytes  {} s  {verdict}",
            mib(fields[1]),
            mib(fields[2]),
            fields[3],
            fields[4],
            fields[5],
            fields[6],
        );
        record_line("space.tsv", &line);
    }
    if over {
        eprintln!("a machine went over the 32 MiB resident target, or failed");
        ExitCode::FAILURE
    } else {
        ExitCode::SUCCESS
    }
}
