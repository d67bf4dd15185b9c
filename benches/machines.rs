//! Criterion benchmarks: each workload on every enabled machine and as a plain
//! Rust function in the same group, so every ratio comes from one run under the
//! same conditions. Groups are named `workload/machine`; see `benches/README.md`.

use std::time::Duration;

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use orrery::{parse, Arena};

mod workloads;
use workloads::*;

/// Workloads the stepper would take minutes on are left to the scaling
/// benches, which run it at sizes it finishes in seconds.
#[derive(Clone, Copy, PartialEq)]
enum Stepper {
    Run,
    Skip,
}

/// Bench `source`, whose value is an integer, on every enabled machine beside
/// its plain Rust twin.
fn int_workload(
    c: &mut Criterion,
    name: &str,
    source: &str,
    stepper: Stepper,
    mut twin: impl FnMut() -> i64,
) {
    let arena = Arena::new();
    let program = program(&arena, source);
    let expected = twin().to_string();
    let mut workload = Workload::new(c, name);
    workload.group().sample_size(10);
    workload.rust(&mut twin);
    let skip: &[&str] = match stepper {
        Stepper::Run => &[],
        Stepper::Skip => &["stepper"],
    };
    workload.every_machine(&program, 1, &expected, skip);
    workload.finish();
}

/// Runs of the configuration-sized program per iteration, from one parse.
const CONFIG_RUNS: u64 = 10_000;

/// The per-run overhead: a small configuration-sized program run
/// [`CONFIG_RUNS`] times per iteration; criterion reports runs per second.
fn config(c: &mut Criterion) {
    let arena = Arena::new();
    let program = program(&arena, WATERING);
    let expected = watering(4, 31).printed();
    let mut workload = Workload::new(c, "watering plan x10^4");
    workload.group().sample_size(20);
    workload
        .group()
        .throughput(Throughput::Elements(CONFIG_RUNS));
    workload.rust(|| {
        for _ in 0..CONFIG_RUNS {
            black_box(watering(black_box(4), black_box(31)));
        }
    });
    workload.every_machine(&program, CONFIG_RUNS, &expected, &[]);
    workload.finish();
}

/// Parser throughput on a generated source of about two megabytes; there is
/// no Rust twin, criterion reports bytes per second.
fn parsing(c: &mut Criterion) {
    let source = large_source(2 << 20);
    let mut group = c.benchmark_group("parse 2 MiB");
    group.sampling_mode(criterion::SamplingMode::Flat);
    group.sample_size(10);
    group.throughput(Throughput::Bytes(source.len() as u64));
    group.bench_function("parser", |b| {
        b.iter(|| {
            let arena = Arena::new();
            let parsed = parse(&arena, black_box(&source));
            assert!(parsed.is_ok(), "the generated source parses");
            black_box(arena.allocated_bytes())
        })
    });
    group.finish();
}

fn benches(c: &mut Criterion) {
    use Stepper::{Run, Skip};
    int_workload(c, "fib 25", &format!("{FIB}25"), Run, || fib(black_box(25)));
    int_workload(c, "fib 30", &format!("{FIB}30"), Skip, || {
        fib(black_box(30))
    });
    int_workload(c, "tak 18 12 6", &format!("{TAK}18 12 6"), Run, || {
        tak(black_box(18), black_box(12), black_box(6))
    });
    int_workload(c, "tak 24 16 8", &format!("{TAK}24 16 8"), Skip, || {
        tak(black_box(24), black_box(16), black_box(8))
    });
    int_workload(c, "ackermann 3 7", &format!("{ACKERMANN}3 7"), Run, || {
        ackermann(black_box(3), black_box(7))
    });
    int_workload(c, "queens 8", QUEENS, Run, || queens(black_box(8)));
    int_workload(c, "church", CHURCH, Run, church);
    int_workload(c, "tail loop 10^6", &tail_loop(1_000_000), Run, || {
        tail(black_box(1_000_000))
    });
    config(c);
    parsing(c);
}

criterion_group! {
    name = machines;
    config = Criterion::default()
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(3));
    targets = benches
}
criterion_main!(machines);
