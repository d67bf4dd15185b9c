//! Property tests of the limits on the shapes a hostile program takes — deep
//! spines, wide constructors and case arms, heavy sharing, big strings, many
//! bindings — at random sizes, under random memory limits: every machine
//! ends with an outcome (never a panic), the machines that are not stopped by
//! a resource limit agree with the stepper exactly (value, counts, extra fuel),
//! and a memory limit never lets a machine's own accounting pass it: each
//! run goes through the harness.

use orrery::{parse, Arena, Arm, Limits, Outcome, Program};
use proptest::prelude::*;

use crate::common::harness::Harness;

/// Run `program` on every machine under `limits` through the harness: the
/// machines that end without a resource limit agree with the stepper, and
/// each report holds to the limits.
fn check(program: &Program, limits: &Limits) -> Result<(), TestCaseError> {
    let mut h = Harness::new();
    h.run("the shape", program, limits);
    h.into_result().map_err(TestCaseError::fail)
}

/// `\x. 1 + (1 + (… x))`, `depth` deep, applied `calls` times in a sum.
fn spine(depth: usize, calls: u32) -> String {
    format!(
        "let f = \\x. {}x{} in let rec go n = if n == 0 then 0 else f n + go (n - 1) in go {calls}",
        "1 + (".repeat(depth),
        ")".repeat(depth)
    )
}

/// A case with `arms` arms over constructors of `fields` fields, matched in a
/// loop.
fn wide<'a>(arena: &'a Arena, arms: usize, fields: usize, pick: usize) -> &'a orrery::Term<'a> {
    let names: Vec<String> = (0..arms).map(|i| format!("K{i}")).collect();
    let arm_list: Vec<Arm<'_>> = names
        .iter()
        .enumerate()
        .map(|(i, n)| {
            // The arm adds its index to its first field (field 1 is the
            // outermost binder: #(fields - 1)).
            let body = if fields == 0 {
                arena.int(i as i64)
            } else {
                arena.prim(
                    orrery::Prim::Add,
                    &[arena.var(fields as u32 - 1), arena.int(i as i64)],
                )
            };
            Arm::new(arena.tag(n), fields as u32, body)
        })
        .collect();
    let args: Vec<&orrery::Term<'_>> = (0..fields).map(|k| arena.int(k as i64 * 3)).collect();
    let scrutinee = arena.con(&names[pick % arms], &args);
    arena.case(scrutinee, &arm_list, None)
}

/// `Pair(t, t)` nested `levels` deep over a leaf: a small graph whose tree is
/// huge, as a program.
fn shared<'a>(arena: &'a Arena, levels: u32, leaf: &'a orrery::Term<'a>) -> &'a orrery::Term<'a> {
    (0..levels).fold(leaf, |t, _| arena.con("Pair", &[t, t]))
}

/// A string of `2^k` bytes built by doubling, then `rounds` comparisons and
/// concatenations with it.
fn strings(k: u32, rounds: u32) -> String {
    format!(
        "let rec dbl n s = if n == 0 then s else dbl (n - 1) (s ++ s) in let big = dbl {k} \"ab\" in \
         let rec loop n acc = if n == 0 then acc else loop (n - 1) (if big < big ++ \"!\" then acc + length big else acc) in loop {rounds} 0"
    )
}

/// `lets` bindings, then `closures` small closures using one of them, one
/// applied at the end.
fn bindings(lets: usize, closures: u32) -> String {
    let prefix: String = (1..=lets).map(|i| format!("let x{i} = {i} in ")).collect();
    format!(
        "{prefix}let rec mk n acc = if n == 0 then acc else mk (n - 1) (Cons(\\y. y + x1, acc)) in \
         case mk {closures} Nil of {{ Cons(f, r) => f 0; _ => 0 }}"
    )
}

fn limits(memory: usize) -> Limits {
    Limits::default().with_fuel(5_000_000).with_memory(memory)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 24, ..ProptestConfig::default() })]

    #[test]
    fn deep_spines(depth in 1usize..40_000, calls in 1u32..4, memory in 1usize << 16..1 << 26) {
        let arena = Arena::new();
        let program = parse(&arena, &spine(depth, calls)).unwrap();
        check(&program, &limits(memory))?;
    }

    #[test]
    fn wide_constructors_and_arms(arms in 1usize..3_000, fields in 0usize..300, pick in 0usize..3_000, memory in 1usize << 12..1 << 24) {
        let arena = Arena::new();
        let program = Program::new(wide(&arena, arms, fields, pick)).unwrap();
        check(&program, &limits(memory))?;
    }

    #[test]
    fn heavy_sharing(levels in 1u32..64, memory in 1usize << 12..1 << 24, add in any::<bool>()) {
        let arena = Arena::new();
        let leaf = if add {
            arena.prim(orrery::Prim::Add, &[arena.int(1), arena.int(2)])
        } else {
            arena.int(3)
        };
        let program = Program::new(shared(&arena, levels, leaf)).unwrap();
        check(&program, &limits(memory).with_fuel(100_000))?;
    }

    #[test]
    fn big_strings(k in 0u32..22, rounds in 0u32..6, memory in 1usize << 16..1 << 28) {
        let arena = Arena::new();
        let program = parse(&arena, &strings(k, rounds)).unwrap();
        check(&program, &limits(memory))?;
        // Enough of everything: every machine finishes, paying for the sizes.
        if k <= 16 {
            let roomy = Limits::default().with_memory(1 << 28);
            let mut h = Harness::new();
            let runs = h.run("big strings, roomy", &program, &roomy);
            h.expect(&runs, "a value", |r| matches!(r.outcome, Outcome::Value(_)));
            // Each doubling of a string of n bytes pays 1 + 2n/1024; so does
            // each round's ++, and its < and length pay for n bytes.
            let least = u64::from(rounds) * ((2u64 << k) / 1024);
            h.expect(&runs, &format!("extra fuel of at least {least}"), |r| r.counts.extra_fuel() >= least);
            h.into_result().map_err(TestCaseError::fail)?;
        }
    }

    #[test]
    fn many_bindings(lets in 1usize..6_000, closures in 1u32..800, memory in 1usize << 16..1 << 24) {
        let arena = Arena::new();
        let program = parse(&arena, &bindings(lets, closures)).unwrap();
        check(&program, &limits(memory))?;
    }
}

/// Under many bindings, closures that use one of them cost what they use:
/// 2,000 of them under 20,000 lets fit in 8 MiB on every machine.
#[test]
fn closures_under_many_bindings_fit_a_small_limit() {
    let arena = Arena::new();
    let program = parse(&arena, &bindings(20_000, 2_000)).unwrap();
    let mut h = Harness::new();
    let runs = h.run("closures under many lets", &program, &limits(8 << 20));
    h.expect_ending(&runs, "value 1");
    h.finish();
}
