//! A worker pool: one rule set, loaded from a file and evaluated once to a
//! function, shared by four worker threads that serve requests, each under
//! its own limits and with its own context; the rules are then reloaded
//! from the file while the workers run, and every request after the swap
//! sees the new rules. A `Program` is owned, `Send + Sync` and cheap to
//! clone, so the shared slot is a plain `RwLock` with no lifetimes and
//! nothing leaked. Scenario: fees for an imaginary network of parcel
//! lockers (`examples/locker_fees.orr`).
//!
//! Run with `cargo run --example worker_pool`.

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::RwLock;

use orrery::{Datum, HostFunctions, Limits, MachineKind, Outcome, Program};

/// Requests the pool serves in all.
const REQUESTS: usize = 4_000;

/// Requests served before the rules are reloaded.
const RELOAD_AFTER: usize = 1_000;

/// The station a request came from: what its run's host functions read.
struct Station {
    /// How full its lockers of each size class are, in percent.
    occupancy: [i64; 4],
}

/// The rules in force: their version and the fee function.
#[derive(Clone)]
struct Rules {
    version: u32,
    fee: Program,
}

/// The application's answers to the rules' questions.
fn host_functions() -> HostFunctions {
    let mut host = HostFunctions::new();
    host.register_with_context("occupancy", |station: &Station, size: i64| {
        usize::try_from(size)
            .ok()
            .and_then(|s| station.occupancy.get(s).copied())
            .ok_or_else(|| format!("no locker size {size}"))
    })
    .expect("a fresh table takes a lower-case name");
    host
}

/// Parse `source` against `host` and evaluate it once to the fee function,
/// a program of its own that each request applies to a parcel.
fn load(source: &str, host: &HostFunctions, version: u32) -> Result<Rules, String> {
    let rules =
        Program::parse_with(source, host).map_err(|e| e.render("locker_fees.orr", source))?;
    let machine = MachineKind::fastest().ok_or("no machine in this build")?;
    let report = machine.run(&rules, &Limits::default().with_fuel(10_000));
    let Outcome::Value(fee) = &report.outcome else {
        return Err(format!("the rules did not evaluate: {:?}", report.outcome));
    };
    let fee = Program::from_value(fee).map_err(|e| e.to_string())?;
    Ok(Rules { version, fee })
}

/// The fee for request `n` at `station` under `rules`, with the version
/// that answered it.
fn serve(rules: &Rules, machine: MachineKind, n: usize, station: Station) -> (u32, String) {
    let parcel = Datum::con(
        "Parcel",
        vec![Datum::Int((n % 4) as i64), Datum::Int((n % 6) as i64)],
    );
    let answer = match rules.fee.apply(&[parcel]) {
        Ok(request) => {
            let limits = Limits::default()
                .with_fuel(2_000)
                .with_memory(1 << 20)
                .with_context(station);
            match machine.run(&request, &limits).outcome {
                Outcome::Value(v) => v.to_string(),
                other => format!("{other:?}"),
            }
        }
        Err(e) => format!("bad request: {e}"),
    };
    (rules.version, answer)
}

fn main() {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/locker_fees.orr");
    let source = std::fs::read_to_string(path).expect("the example's rules file is bundled");
    let host = host_functions();
    let first = load(&source, &host, 1).unwrap_or_else(|e| {
        eprintln!("{e}");
        std::process::exit(1);
    });
    let Some(machine) = MachineKind::fastest() else {
        eprintln!("no machine in this build");
        std::process::exit(1);
    };
    let slot = RwLock::new(first);
    let next = AtomicUsize::new(0);
    let served: Vec<[usize; 3]> = std::thread::scope(|scope| {
        let workers: Vec<_> = (0..4)
            .map(|worker| {
                let (slot, next) = (&slot, &next);
                scope.spawn(move || {
                    // Requests served under versions 1 and 2, and the ones
                    // whose answer was not a fee.
                    let mut counts = [0usize; 3];
                    loop {
                        let n = next.fetch_add(1, Ordering::Relaxed);
                        if n >= REQUESTS {
                            return counts;
                        }
                        // Hold the lock only to clone the program (an `Arc`).
                        let rules = slot.read().map(|r| r.clone());
                        let Ok(rules) = rules else { return counts };
                        let station = Station {
                            occupancy: [40 + 10 * worker as i64, 85, 60, 95 - worker as i64],
                        };
                        let (version, answer) = serve(&rules, machine, n, station);
                        match answer.parse::<i64>() {
                            Ok(_) => counts[version as usize - 1] += 1,
                            Err(_) => counts[2] += 1,
                        }
                    }
                })
            })
            .collect();
        // Reload while the workers run: the season's surcharge goes up.
        while next.load(Ordering::Relaxed) < RELOAD_AFTER {
            std::thread::yield_now();
        }
        let raised = source.replace("let season = 0 in", "let season = 35 in");
        match load(&raised, &host, 2) {
            Ok(rules) => match slot.write() {
                Ok(mut current) => *current = rules,
                Err(_) => eprintln!("a worker panicked; the old rules stay"),
            },
            Err(e) => eprintln!("the new rules were refused, the old ones stay: {e}"),
        }
        workers
            .into_iter()
            .map(|w| w.join().unwrap_or([0; 3]))
            .collect()
    });
    for (worker, [v1, v2, other]) in served.iter().enumerate() {
        println!("worker {worker}: {v1} fees under rules v1, {v2} under v2, {other} not fees");
    }
    let rules = slot
        .read()
        .map(|r| r.clone())
        .expect("no worker holds the lock");
    for n in 0..4 {
        let station = Station {
            occupancy: [40, 85, 60, 95],
        };
        let (version, fee) = serve(&rules, machine, n, station);
        println!(
            "size {} for {} days under v{version}: {fee} cents",
            n % 4,
            n % 6
        );
    }
}
