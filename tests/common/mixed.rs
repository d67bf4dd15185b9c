// The program and host table of "every construct" tests, shared by the
// stepper's unit tests (`machines/stepper/tests.rs`, through `include!`) and
// the suite (`tests/common/mod.rs`); it names `HostFunctions` and `Datum`
// unqualified, so each includer imports them.

/// Every construct, a host call with a cost, and each kind of frame.
pub const MIXED: &str = r#"
let rec map f xs = case xs of { Nil => Nil; Cons(h, t) => Cons(f h, map f t) } in
let rec range a b = if a > b then Nil else Cons(a, range (a + 1) b) in
let add = \a b. a + b in
let pick = \x. case x of { A => 1; B(y) => y; _ => 0 } in
Triple(map (add 10) (range 1 4), pad "ab" (pick (B(3))) ++ decimal (pick A), not (pick C == 0))"#;

/// The host functions of [`MIXED`]: `pad s n` repeats `s` `n` times, for a
/// cost of `n` units.
pub fn mixed_host() -> HostFunctions {
    let mut host = HostFunctions::new();
    let pad = host
        .register("pad", |s: String, n: i64| {
            Ok::<_, String>(s.repeat(n.max(0) as usize))
        })
        .expect("a valid host function");
    host.set_cost(pad, |args| match &args[1] {
        Datum::Int(n) => (*n).max(0) as u64,
        _ => 0,
    });
    host
}
