//! Accounting overhead: env and cek as shipped beside the same machines built
//! with `without_accounting` (fuel and memory checks compiled out), on
//! call-heavy, constructor-heavy and loop workloads, in one group each.

use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion};
use orrery::Machine;
use orrery::MachineKind;

// Each bench target uses a part of the shared workloads.
#[allow(dead_code)]
mod workloads;
use workloads::*;

/// Bench `source` on env and cek with and without their accounting, as
/// `accounting NAME/env`, `accounting NAME/env unaccounted`, and so for cek.
fn overhead(c: &mut Criterion, name: &str, source: &str, expected: i64) {
    let program = program(source);
    let expected = expected.to_string();
    let mut workload = Workload::new(c, &format!("accounting {name}"));
    workload.group().sample_size(10);
    let mut pairs: Vec<(String, Box<dyn Machine>)> = Vec::new();
    for kind in MachineKind::enabled() {
        if let Some(unaccounted) = kind.unaccounted() {
            pairs.push((kind.name().to_string(), kind.machine()));
            pairs.push((format!("{} unaccounted", kind.name()), unaccounted));
        }
    }
    for (id, machine) in &mut pairs {
        workload.machine(id, machine.as_mut(), &program, &unlimited(), 1, &expected);
    }
    workload.finish();
}

fn benches(c: &mut Criterion) {
    overhead(c, "fib 25", &format!("{FIB}25"), fib(25));
    overhead(c, "tak 18 12 6", &format!("{TAK}18 12 6"), tak(18, 12, 6));
    overhead(c, "queens 8", QUEENS, queens(8));
    overhead(c, "tail loop 10^6", &tail_loop(1_000_000), tail(1_000_000));
}

criterion_group! {
    name = accounting;
    config = Criterion::default()
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(3));
    targets = benches
}
criterion_main!(accounting);
