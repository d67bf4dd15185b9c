//! Scaling benchmarks: how time grows with the number of contractions (fib of
//! growing size, a non-tail sum on the stepper) and with the de Bruijn depth
//! of a variable read in a hot loop. `benches/report.py` fits the slopes.

use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion};
use orrery::MachineKind;

// Each bench target uses a part of the shared workloads.
#[allow(dead_code)]
mod workloads;
use workloads::*;

/// The fast machines: env and cek (each that is enabled).
fn fast_machines() -> impl Iterator<Item = MachineKind> {
    MachineKind::enabled()
        .iter()
        .copied()
        .filter(|kind| kind.name() != "stepper")
}

/// Time `source` (sized `size`) on `kind` as `group/machine/size`.
fn sized(
    workload: &mut Workload<'_>,
    kind: MachineKind,
    size: u64,
    source: &str,
    expected: i64,
    memory: usize,
) {
    let program = program(source);
    let mut machine = kind.machine();
    workload.machine(
        &format!("{}/{size}", kind.name()),
        machine.as_mut(),
        &program,
        &unlimited().with_memory(memory),
        1,
        &expected.to_string(),
    );
}

/// Default memory limit, for runs that need no more.
const MEMORY: usize = orrery::DEFAULT_MEMORY;

/// Time fib of each of `sizes` on `kind`.
fn fib_sizes(workload: &mut Workload<'_>, kind: MachineKind, sizes: impl Iterator<Item = u64>) {
    for n in sizes {
        let source = format!("{FIB}{n}");
        sized(workload, kind, n, &source, fib(n as i64), MEMORY);
    }
}

/// (a) env and cek on fib 18, 20, …, 30: time against contractions.
fn fib_fast(c: &mut Criterion) {
    let mut workload = Workload::new(c, "scaling fib");
    workload.group().sample_size(10);
    for kind in fast_machines() {
        fib_sizes(&mut workload, kind, (18..=30).step_by(2));
    }
    workload.finish();
}

/// (b) the stepper on fib 15, 17, …, 25 and on a non-tail sum of 10^3 … 10^6,
/// whose live term grows to a million pending additions.
fn stepper(c: &mut Criterion) {
    let Some(kind) = MachineKind::from_name("stepper") else {
        return;
    };
    let mut workload = Workload::new(c, "scaling stepper fib");
    workload.group().sample_size(10);
    fib_sizes(&mut workload, kind, (15..=25).step_by(2));
    workload.finish();

    let mut workload = Workload::new(c, "scaling stepper sum");
    workload.group().sample_size(10);
    for n in [1_000u64, 10_000, 100_000, 1_000_000] {
        let source = format!("let rec sum n = if n == 0 then 0 else n + sum (n - 1) in sum {n}");
        // Gauss's closed form, common practice; n (n + 1) / 2 fits in i64 here.
        let expected = (n * (n + 1) / 2) as i64;
        sized(&mut workload, kind, n, &source, expected, 4 << 30);
    }
    workload.finish();
}

/// Iterations of the de Bruijn depth loop.
const DEPTH_ITERATIONS: u64 = 100_000;

/// (c) a hot loop reading a variable bound 0, 8, 16, 32 or 64 lets further
/// out than the loop's own function, on env and cek.
fn depth(c: &mut Criterion) {
    let mut workload = Workload::new(c, "depth");
    workload.group().sample_size(10);
    for kind in fast_machines() {
        for depth in [0u64, 8, 16, 32, 64] {
            let mut source = String::from("let x = 3 in\n");
            for i in 0..depth {
                source.push_str(&format!("let pad{i} = {i} in\n"));
            }
            source.push_str(&format!(
                "let rec walk n acc = if n == 0 then acc else walk (n - 1) (acc + x) \
                 in walk {DEPTH_ITERATIONS} 0"
            ));
            let expected = 3 * DEPTH_ITERATIONS as i64;
            sized(&mut workload, kind, depth, &source, expected, MEMORY);
        }
    }
    workload.finish();
}

criterion_group! {
    name = scaling;
    config = Criterion::default()
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(2));
    targets = fib_fast, stepper, depth
}
criterion_main!(scaling);
