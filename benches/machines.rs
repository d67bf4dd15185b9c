//! Criterion benchmarks: each workload on every enabled machine and as a plain
//! Rust function, in one run, so ratios come from the same conditions. Groups
//! are named `workload/machine`.

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use orrery::{parse, Arena, Limits, MachineKind, Outcome};

const FIB: &str = "let rec fib n = if n < 2 then n else fib (n - 1) + fib (n - 2) in fib ";
const TAK: &str = "let rec tak x y z = if y < x then tak (tak (x - 1) y z) (tak (y - 1) z x) (tak (z - 1) x y) else z in tak ";

fn fib(n: i64) -> i64 {
    if n < 2 {
        n
    } else {
        fib(n - 1) + fib(n - 2)
    }
}

fn tak(x: i64, y: i64, z: i64) -> i64 {
    if y < x {
        tak(tak(x - 1, y, z), tak(y - 1, z, x), tak(z - 1, x, y))
    } else {
        z
    }
}

/// Bench `source` on every enabled machine, and `native` beside them.
fn workload(c: &mut Criterion, name: &str, source: &str, native: &dyn Fn() -> i64) {
    let arena = Arena::new();
    let program = parse(&arena, source).expect("benchmark programs parse");
    let limits = Limits::default().with_fuel(u64::MAX);
    let mut group = c.benchmark_group(name);
    group.sample_size(10);
    group.bench_function("rust", |b| b.iter(|| black_box(native())));
    for machine in MachineKind::enabled() {
        group.bench_function(machine.name(), |b| {
            b.iter(|| {
                let out = Arena::new();
                let report = machine.run(&program, &limits, &out);
                assert!(matches!(report.outcome, Outcome::Value(_)));
                black_box(report.counts.total())
            })
        });
    }
    group.finish();
}

fn benches(c: &mut Criterion) {
    workload(c, "fib 25", &format!("{FIB} 25"), &|| fib(black_box(25)));
    workload(c, "tak 18 12 6", &format!("{TAK} 18 12 6"), &|| {
        tak(black_box(18), black_box(12), black_box(6))
    });
}

criterion_group!(machines, benches);
criterion_main!(machines);
