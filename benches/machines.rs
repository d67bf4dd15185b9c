//! Criterion benchmarks: each workload on every enabled machine and as a plain
//! Rust function in the same group, so every ratio comes from one run under the
//! same conditions. Groups are named `workload/machine`; see `benches/README.md`.

use std::time::Duration;

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use orrery::{parse, Arena, Datum, Limits, MachineKind, Outcome, Program};

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
    let program = program(source);
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
    let program = program(WATERING);
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

/// Per-request cost as the rule set grows: the schedule is evaluated once
/// (on the fastest machine) to a function, made a program of its own, and
/// each iteration applies it to one request and runs it on the machine
/// under test. With the program's preparation shared, a request that
/// touches one rule costs the same whatever the size of the rule set.
fn requests(c: &mut Criterion) {
    request_shape(c, "", locker_schedule, Datum::Int(0));
    let parcel = Datum::con("Parcel", vec![Datum::Int(0), Datum::Int(1)]);
    request_shape(c, " (branches)", locker_branches, parcel.clone());
    request_shape(c, " (table)", locker_table, parcel);
}

/// The `request N rules{shape}` groups for the schedule `source(N)`, each
/// request `request`.
fn request_shape(
    c: &mut Criterion,
    shape: &str,
    source: fn(usize) -> String,
    request: Datum<'static>,
) {
    for rules in [10, 1000] {
        let source = source(rules);
        let rule_set = program(&source);
        let setup = MachineKind::fastest()
            .expect("a machine is enabled")
            .run(&rule_set, &unlimited());
        let Outcome::Value(schedule) = &setup.outcome else {
            panic!("the schedule did not evaluate: {:?}", setup.outcome);
        };
        let schedule = Program::from_value(schedule).expect("a value is a valid program");
        let expected = locker_fee(rules, 0);
        let mut group = c.benchmark_group(format!("request {rules} rules{shape}"));
        group.sample_size(20);
        for &kind in MachineKind::enabled() {
            let mut machine = kind.machine();
            let limits = Limits::default().with_fuel(1_000).with_memory(1 << 20);
            group.bench_function(kind.name(), |b| {
                b.iter(|| {
                    let request = schedule
                        .apply(std::slice::from_ref(black_box(&request)))
                        .expect("a request is data");
                    let report = machine.run(&request, &limits);
                    assert_eq!(
                        report.outcome.value().and_then(|v| v.as_int()),
                        Some(expected)
                    );
                    black_box(report)
                })
            });
        }
        group.finish();
    }
}

/// Iterations of the loop a request runs in [`request_loop`].
const REQUEST_LOOP: i64 = 1_000_000;

/// The other per-request shape: a function whose body defines a loop and
/// runs it, applied to its request (the loop is a closure made per call).
/// Its rows decide [`MachineKind::fastest`].
fn request_loop(c: &mut Criterion) {
    let source = "\\n. let rec count i acc = if i == 0 then acc else count (i - 1) (acc + i % 7) in count n 0";
    let function = program(source);
    let expected = (1..=REQUEST_LOOP).map(|i| i % 7).sum::<i64>();
    let mut group = c.benchmark_group("request loop 10^6");
    group.sample_size(10);
    group.bench_function("rust", |b| {
        b.iter(|| (1..=black_box(REQUEST_LOOP)).map(|i| i % 7).sum::<i64>())
    });
    for &kind in MachineKind::enabled() {
        if kind.name() == "stepper" {
            continue;
        }
        let mut machine = kind.machine();
        group.bench_function(kind.name(), |b| {
            b.iter(|| {
                let request = function.apply(&[Datum::Int(REQUEST_LOOP)]).expect("data");
                let report = machine.run(&request, &unlimited());
                assert_eq!(
                    report.outcome.value().and_then(|v| v.as_int()),
                    Some(expected)
                );
                black_box(report)
            })
        });
    }
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
    requests(c);
    request_loop(c);
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
