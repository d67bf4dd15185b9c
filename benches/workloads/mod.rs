//! The benchmark workloads shared by the bench targets: each program's source
//! text beside the same computation written in plain Rust, and the one generic
//! routine that times a program on any machine behind the `Machine` trait.

use std::cell::Cell;
use std::fs::OpenOptions;
use std::io::Write;
use std::path::PathBuf;
use std::rc::Rc;

use criterion::measurement::WallTime;
use criterion::{black_box, Bencher, BenchmarkGroup, BenchmarkId, Criterion, SamplingMode};
use orrery::{Limits, Machine, MachineKind, Outcome, Program};

/// Naive doubly recursive Fibonacci: call-heavy, two calls per call.
pub const FIB: &str = "let rec fib n = if n < 2 then n else fib (n - 1) + fib (n - 2) in fib ";

/// Takeuchi's function: call-heavy with three arguments.
pub const TAK: &str = "let rec tak x y z = \
    if y < x then tak (tak (x - 1) y z) (tak (y - 1) z x) (tak (z - 1) x y) else z in tak ";

/// Ackermann's function: deep non-tail recursion.
pub const ACKERMANN: &str = "let rec ack m n = \
    if m == 0 then n + 1 \
    else if n == 0 then ack (m - 1) 1 \
    else ack (m - 1) (ack m (n - 1)) in ack ";

/// N-queens counted by backtracking over a list of placed queens built from
/// `Cons` and `Nil` cells.
pub const QUEENS: &str = "
let rec safe q d qs = case qs of {
  Nil => true;
  Cons(h, t) => h != q && h + d != q && h - d != q && safe q (d + 1) t
} in
let rec solve n row qs =
  if row == n then 1 else
  let rec cols c =
    if c == n then 0
    else (if safe c 1 qs then solve n (row + 1) (Cons(c, qs)) else 0) + cols (c + 1)
  in cols 0
in solve 8 0 Nil";

/// Church numerals: every number is a closure, arithmetic is composition.
/// The answer is 3^9 + 5 * 2^5 = 19843.
pub const CHURCH: &str = "
let zero = \\f x. x in
let succ = \\n f x. f (n f x) in
let add = \\m n f x. m f (n f x) in
let mul = \\m n f. m (n f) in
let pow = \\m n. n m in
let to_int = \\n. n (\\k. k + 1) 0 in
let one = succ zero in
let two = succ one in
let three = add two one in
let five = add two three in
to_int (add (pow three (add five (add two two))) (mul five (pow two five)))";

/// A tail-recursive loop whose accumulator mixes in the counter, so that the
/// plain Rust twin cannot be folded into a closed form by the compiler.
pub fn tail_loop(iterations: u64) -> String {
    format!(
        "let rec churn n acc = if n == 0 then acc else churn (n - 1) ((acc * 31 + n) % 1000003) \
         in churn {iterations} 0"
    )
}

/// A configuration-sized expression (about twenty-five nodes: lets, an if,
/// arithmetic, a string concatenation, a constructor): one greenhouse bed's
/// watering plan for the morning.
pub const WATERING: &str = "
let bed = 4 in
let moisture = 31 in
let dry = moisture < 40 in
let minutes = if dry then 6 + (40 - moisture) / 2 else 3 in
Plan(\"bed \" ++ decimal bed, minutes, minutes * 2)";

/// A generated program of at least `bytes` bytes for the parser: a long chain
/// of rules over constructor data, with comments, strings, `case` and `if`.
pub fn large_source(bytes: usize) -> String {
    let mut source = String::from(
        "# Alert rules for a greenhouse's sensor readings, generated.\n\
         let rule_0 reading = Quiet in\n",
    );
    let mut i = 1usize;
    while source.len() < bytes {
        source.push_str(&format!(
            "# rule {i}\nlet rule_{i} reading = case reading of {{\n  \
             Sample(level, note) => if level < {} && level != -{i} then Alert(\"low \" ++ note, level * 3 + {i})\n    \
             else rule_{} reading;\n  _ => Quiet\n}} in\n",
            i % 97,
            i - 1
        ));
        i += 1;
    }
    source.push_str(&format!("rule_{} (Sample(5, \"bed 4\"))\n", i - 1));
    source
}

pub fn fib(n: i64) -> i64 {
    if n < 2 {
        n
    } else {
        fib(n - 1) + fib(n - 2)
    }
}

pub fn tak(x: i64, y: i64, z: i64) -> i64 {
    if y < x {
        tak(tak(x - 1, y, z), tak(y - 1, z, x), tak(z - 1, x, y))
    } else {
        z
    }
}

pub fn ackermann(m: i64, n: i64) -> i64 {
    if m == 0 {
        n + 1
    } else if n == 0 {
        ackermann(m - 1, 1)
    } else {
        ackermann(m - 1, ackermann(m, n - 1))
    }
}

/// A persistent list, the twin of the `Cons`/`Nil` cells of [`QUEENS`].
pub enum List {
    Nil,
    Cons(i64, Rc<List>),
}

pub fn queens(n: i64) -> i64 {
    fn safe(q: i64, d: i64, qs: &List) -> bool {
        match qs {
            List::Nil => true,
            List::Cons(h, t) => *h != q && h + d != q && h - d != q && safe(q, d + 1, t),
        }
    }
    fn solve(n: i64, row: i64, qs: &Rc<List>) -> i64 {
        if row == n {
            return 1;
        }
        (0..n)
            .map(|c| {
                if safe(c, 1, qs) {
                    solve(n, row + 1, &Rc::new(List::Cons(c, qs.clone())))
                } else {
                    0
                }
            })
            .sum()
    }
    solve(n, 0, &Rc::new(List::Nil))
}

/// An untyped value for the Rust twin of [`CHURCH`]: an integer or a boxed
/// closure, as the calculus's values are.
#[derive(Clone)]
pub enum Church {
    Int(i64),
    Fun(Rc<dyn Fn(Church) -> Church>),
}

fn lam(f: impl Fn(Church) -> Church + 'static) -> Church {
    Church::Fun(Rc::new(f))
}

fn app(f: &Church, x: Church) -> Church {
    match f {
        Church::Fun(f) => f(x),
        Church::Int(_) => panic!("the Church workload applied an integer"),
    }
}

fn app2(f: &Church, x: Church, y: Church) -> Church {
    app(&app(f, x), y)
}

pub fn church() -> i64 {
    let zero = lam(|_f| lam(|x| x));
    let succ = lam(|n| {
        lam(move |f| {
            let n = n.clone();
            lam(move |x| app(&f, app2(&n, f.clone(), x)))
        })
    });
    let add = lam(|m| {
        lam(move |n| {
            let m = m.clone();
            lam(move |f| {
                let (m, n) = (m.clone(), n.clone());
                lam(move |x| app2(&m, f.clone(), app2(&n, f.clone(), x)))
            })
        })
    });
    let mul = lam(|m| {
        lam(move |n| {
            let m = m.clone();
            lam(move |f| app(&m, app(&n, f)))
        })
    });
    let pow = lam(|m| lam(move |n| app(&n, m.clone())));
    let increment = lam(|k| match k {
        Church::Int(k) => Church::Int(k + 1),
        Church::Fun(_) => panic!("the Church workload incremented a closure"),
    });
    let to_int = |n: &Church| app2(n, increment.clone(), Church::Int(0));
    let one = app(&succ, zero);
    let two = app(&succ, one.clone());
    let three = app2(&add, two.clone(), one);
    let five = app2(&add, two.clone(), three.clone());
    let four = app2(&add, two.clone(), two.clone());
    let nine = app2(&add, five.clone(), four);
    let big = app2(&pow, three, nine);
    let small = app2(&mul, five.clone(), app2(&pow, two, five));
    match to_int(&app2(&add, big, small)) {
        Church::Int(n) => n,
        Church::Fun(_) => panic!("the Church workload ended in a closure"),
    }
}

pub fn tail(iterations: i64) -> i64 {
    let mut acc = 0i64;
    let mut n = iterations;
    while n != 0 {
        acc = (acc * 31 + n) % 1_000_003;
        n -= 1;
    }
    acc
}

/// The Rust twin of [`WATERING`].
pub struct Plan {
    pub bed: String,
    pub minutes: i64,
    pub litres: i64,
}

pub fn watering(bed: i64, moisture: i64) -> Plan {
    let dry = moisture < 40;
    let minutes = if dry { 6 + (40 - moisture) / 2 } else { 3 };
    Plan {
        bed: format!("bed {bed}"),
        minutes,
        litres: minutes * 2,
    }
}

impl Plan {
    /// The plan as the printer writes the program's value.
    pub fn printed(&self) -> String {
        format!("Plan(\"{}\", {}, {})", self.bed, self.minutes, self.litres)
    }
}

/// Limits that never stop a benchmark for fuel.
pub fn unlimited() -> Limits {
    Limits::default().with_fuel(u64::MAX)
}

/// A parcel-locker fee schedule of `rules` rules, each a size class with
/// its fee, tried in order; a request is a parcel's size class. The rule
/// set evaluates to the schedule, a function made of one closure per rule,
/// each falling through to the next: the way an embedder's compiler lowers
/// an ordered rule list. A request for class 0 touches the first rule.
pub fn locker_schedule(rules: usize) -> String {
    let mut chain = String::from("\\size. 0");
    for class in (0..rules).rev() {
        chain = format!("rule {class} {} ({chain})", 150 + 5 * class);
    }
    format!("let rule = \\class fee next size. if size == class then fee else next size in {chain}")
}

/// The same schedule lowered as one function whose body tests the rules in
/// turn (`if size == 0 && kg < 10 then 150 else if …`) after matching the
/// request: the shape of a compiler that inlines its rules.
pub fn locker_branches(rules: usize) -> String {
    let mut body = String::from("0");
    for class in (0..rules).rev() {
        body = format!(
            "if size == {class} && kg < {} then {} else ({body})",
            10 + class,
            150 + 5 * class
        );
    }
    format!("\\parcel. case parcel of {{ Parcel(size, kg) => {body} }}")
}

/// The same schedule held as data, a list of `Rule(class, fee)` that the
/// function captures and searches: the shape of a compiler that keeps its
/// rules as a table.
pub fn locker_table(rules: usize) -> String {
    let mut list = String::from("Nil");
    for class in (0..rules).rev() {
        list = format!("Cons(Rule({class}, {}), {list})", 150 + 5 * class);
    }
    format!(
        "let rules = {list} in \
         let rec first rs size = case rs of {{ Nil => 0; Cons(r, t) => \
           case r of {{ Rule(class, fee) => if class == size then fee else first t size }} }} in \
         \\parcel. case parcel of {{ Parcel(size, kg) => first rules size }}"
    )
}

/// The fee [`locker_schedule`] charges for a parcel of `class`, in plain
/// Rust (a class past the schedule is free).
pub fn locker_fee(rules: usize, class: i64) -> i64 {
    if (0..rules as i64).contains(&class) {
        150 + 5 * class
    } else {
        0
    }
}

/// Parse a workload's source; a benchmark program that does not parse is a
/// broken benchmark.
pub fn program(source: &str) -> Program {
    Program::parse(source).unwrap_or_else(|e| panic!("benchmark program: {e}"))
}

/// Run `program` once outside any timing, check that it gives the value the
/// plain Rust twin printed as `expected`, and return its contractions.
pub fn check(machine: &mut dyn Machine, program: &Program, limits: &Limits, expected: &str) -> u64 {
    let report = machine.run(program, limits);
    match report.outcome {
        Outcome::Value(v) => assert_eq!(
            v.to_string(),
            expected,
            "{} disagrees with plain Rust",
            machine.name()
        ),
        other => panic!("{} ended in {other:?}", machine.name()),
    }
    report.counts.total()
}

/// A criterion group for one workload, `workload/machine`, remembering its
/// name for the contraction record.
pub struct Workload<'c> {
    name: String,
    group: BenchmarkGroup<'c, WallTime>,
}

impl<'c> Workload<'c> {
    /// A group named `name`, sampled flat: every sample runs the same number
    /// of iterations, so a slow workload costs ten iterations, not fifty-five.
    pub fn new(c: &'c mut Criterion, name: &str) -> Self {
        let mut group = c.benchmark_group(name);
        group.sampling_mode(SamplingMode::Flat);
        Workload {
            name: name.to_string(),
            group,
        }
    }

    /// The criterion group, for sample sizes and throughput.
    pub fn group(&mut self) -> &mut BenchmarkGroup<'c, WallTime> {
        &mut self.group
    }

    /// Time the plain Rust twin as `rust`.
    pub fn rust<T>(&mut self, mut twin: impl FnMut() -> T) {
        self.group
            .bench_function("rust", |b| b.iter(|| black_box(twin())));
    }

    /// Time `program` on `machine` as benchmark `id` (`env`, or `env/18`
    /// for a parameter), `runs` runs per iteration. Before the first sample
    /// the run is checked against `expected` (the Rust twin's value, printed)
    /// and its contraction count recorded for `benches/report.py`; inside the
    /// timed loop only the outcome's variant is checked.
    pub fn machine(
        &mut self,
        id: &str,
        machine: &mut dyn Machine,
        program: &Program,
        limits: &Limits,
        runs: u64,
        expected: &str,
    ) {
        let checked = Cell::new(false);
        let full_id = format!("{}/{id}", self.name);
        let mut routine = |b: &mut Bencher<'_>| {
            if !checked.replace(true) {
                let contractions = check(machine, program, limits, expected);
                record_contractions(&full_id, contractions);
            }
            b.iter(|| {
                for _ in 0..runs {
                    let report = machine.run(program, limits);
                    assert!(matches!(report.outcome, Outcome::Value(_)));
                    black_box(report);
                }
            })
        };
        match id.split_once('/') {
            Some((function, parameter)) => self
                .group
                .bench_function(BenchmarkId::new(function, parameter), &mut routine),
            None => self.group.bench_function(id, &mut routine),
        };
    }

    /// Time `program` on every enabled machine but those named in `skip`,
    /// as in [`Workload::machine`].
    pub fn every_machine(&mut self, program: &Program, runs: u64, expected: &str, skip: &[&str]) {
        for &kind in MachineKind::enabled() {
            if skip.contains(&kind.name()) {
                continue;
            }
            let mut machine = kind.machine();
            self.machine(
                kind.name(),
                machine.as_mut(),
                program,
                &unlimited(),
                runs,
                expected,
            );
        }
    }

    /// Write the group's summary.
    pub fn finish(self) {
        self.group.finish();
    }
}

/// Append `id`'s contraction count to `target/criterion/contractions.tsv`,
/// where `benches/report.py` finds it beside criterion's estimates.
pub fn record_contractions(id: &str, contractions: u64) {
    record_line("contractions.tsv", &format!("{id}\t{contractions}"));
}

/// Append `line` to `file` in criterion's output directory, found as
/// criterion finds it: `$CRITERION_HOME`, else `$CARGO_TARGET_DIR/criterion`,
/// else `target/criterion`.
pub fn record_line(file: &str, line: &str) {
    let dir = std::env::var_os("CRITERION_HOME")
        .map(PathBuf::from)
        .or_else(|| {
            std::env::var_os("CARGO_TARGET_DIR").map(|t| PathBuf::from(t).join("criterion"))
        })
        .unwrap_or_else(|| PathBuf::from("target/criterion"));
    let written = std::fs::create_dir_all(&dir).and_then(|()| {
        let mut file = OpenOptions::new()
            .create(true)
            .append(true)
            .open(dir.join(file))?;
        writeln!(file, "{line}")
    });
    if let Err(e) = written {
        eprintln!("could not record {line:?} in {file}: {e}");
    }
}
