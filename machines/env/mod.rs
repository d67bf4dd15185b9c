//! The environment-based evaluator: big-step evaluation (natural semantics,
//! Kahn, "Natural semantics", 1987) of closure-converted code with flat
//! closures (Cardelli, "Compiling a functional language", 1984), curried
//! functions applied eval/apply style (Marlow and Peyton Jones, "Making a
//! fast curry", 2004), and an explicit task stack in place of native
//! recursion.
//!
//! | file | holds |
//! |---|---|
//! | `compile.rs` | the program image to code: variables resolved to frame slots and captured values, each function compiled once |
//! | `run.rs` | the interpreter: value, task and caller stacks, calls and partial applications, the memory checks |
//!
//! A program's image is compiled once, by the first env run of it, in time
//! and space linear in the image, from the image's analysis of functions and
//! free variables; the code is kept with the program and shared by every
//! later run of it, of its applications, and on every thread.
//! A function's frame holds self (of a `μλ`), its parameters, then its
//! `let`-bound values and case fields; its closure captures exactly its free
//! variables, gathered by one range copy per capture run. A call in tail
//! position (a function body, a `let` body, an `if` branch, a case arm,
//! known at compile time) replaces the caller's frame instead of stacking a
//! return.
//!
//! **Calls.** Applying a closure of a function of `n` parameters, given `k`
//! of them so far, to one more argument contracts one `beta` (`beta_rec` for
//! a `μλ`'s first): with `k + 1 < n` the result is a partial application, a
//! closure holding the captured values, self (of a `μλ`: the unapplied
//! closure) and the arguments, in the caller's cell when the call holds its
//! only reference; with `k + 1 = n` the body is entered. A call
//! `f a₁ … aₘ` (`m ≤ MAX_CHAIN`) whose head is a variable bound to a closure
//! that exactly `m` more arguments saturate (unapplied with `m` parameters,
//! or partly applied) evaluates each argument and contracts its application
//! in the nested calls' order, then enters the body with all of them,
//! making no partial application; any other callee runs the nested
//! applications. The contractions, their order, the errors and the point
//! where fuel runs out are the stepper's.
//!
//! **Limits.** Fuel and cancellation go through the run's budget; the
//! compiler polls cancellation per node. The compiler and the interpreter
//! grow every vector only within the memory limit (checked when a push
//! would reallocate), which counts the code and the compiler's work lists
//! while the program is being compiled, the stacks by capacity, the live cells and the
//! read-back (the image and the finished code are the program's); near the
//! limit a stack grows by an eighth rather than doubling. The env machine
//! does not pause: out of fuel ends the run.

mod compile;
mod run;

use compile::{Compiled, Workspace};
use run::{Interpreter, Stacks};

use std::sync::Arc;

use crate::budget::{Budget, Halt};
use crate::span::Trail;
use crate::vocabulary::{Build, Machine};
use crate::{Counts, Limits, Outcome, Program, Report};

/// The environment-based evaluator. Holds no program state between runs:
/// it keeps its emptied stacks for the next run (so a small program run
/// many times allocates little) and records the
/// peak memory of its last run. It cannot pause: a run out of fuel is over.
///
/// # Examples
///
/// ```
/// use orrery::machines::env::Env;
/// use orrery::{Arena, Limits, Machine, Outcome, Prim, Program, Value};
/// let arena = Arena::new();
/// // let add = λx. λy. x + y in add 40 2
/// let add = arena.lam(arena.lam(arena.prim(Prim::Add, &[arena.var(1), arena.var(0)])));
/// let call = arena.app(arena.app(arena.var(0), arena.int(40)), arena.int(2));
/// let program = Program::new(arena.let_in(add, call)).unwrap();
/// let report = Env::new().run(&program, &Limits::default());
/// assert_eq!(report.outcome, Outcome::Value(Value::from_term(arena.int(42)).unwrap()));
/// assert_eq!(report.counts.total(), 4); // let, beta, beta, prim
/// ```
#[derive(Debug)]
pub struct Env {
    peak: usize,
    /// Whether fuel, memory and cancellation are checked (always, except in
    /// the benchmark-only [`Env::without_accounting`]).
    metered: bool,
    scratch: Scratch,
}

impl Default for Env {
    fn default() -> Self {
        Env {
            peak: 0,
            metered: true,
            scratch: Scratch::default(),
        }
    }
}

/// What a run leaves for the next: its emptied stacks.
#[derive(Debug, Default)]
struct Scratch {
    stacks: Stacks,
}

impl Env {
    /// An environment-based evaluator.
    ///
    /// # Examples
    ///
    /// ```
    /// let _env = orrery::machines::env::Env::new();
    /// ```
    pub fn new() -> Self {
        Env::default()
    }
}

impl Build for Env {
    fn new() -> Self {
        Env::default()
    }

    fn without_accounting() -> Option<Self> {
        Some(Env {
            metered: false,
            ..Env::default()
        })
    }
}

impl Machine for Env {
    fn name(&self) -> &'static str {
        "env"
    }

    fn peak_bytes(&self) -> usize {
        self.peak
    }

    fn run(&mut self, program: &Program, limits: &Limits) -> Report {
        let mut budget = Budget::for_run(limits, self.metered);
        let (result, trail) = self.evaluate(program, &mut budget);
        self.peak = budget.peak;
        let (outcome, location) = match result {
            Ok(value) => (Outcome::Value(value), None),
            Err(Halt::Fault(f)) => (Outcome::Fault(*f), None),
            Err(halt) => {
                // A run stopped while compiling has no trail: no redex yet.
                let trail = trail.unwrap_or_else(|| Trail::new(crate::image::NONE));
                (budget.outcome(halt), Some(program.image().location(&trail)))
            }
        };
        let counts: Counts = budget.counts;
        Report {
            outcome,
            counts,
            location,
        }
    }
}

impl Env {
    /// Compile `program` (once: the code is kept with the program, for every
    /// run and thread) and run it under `budget`, reading its value back.
    fn evaluate(
        &mut self,
        program: &Program,
        budget: &mut Budget,
    ) -> (Result<crate::Value, Halt>, Option<Trail>) {
        // The image and the code are the program's, prepared once and held
        // by the caller: not this run's memory, except while this run
        // compiles (its budget then bounds the code and the compiler's work).
        let image = program.image();
        // A program is compiled once, so the compiler's work lists live
        // only while it compiles: a run holds only what it uses.
        let code: Result<Arc<Compiled>, Halt> = program.prepared(|| {
            let mut code = Compiled::default();
            let mut workspace = Workspace::default();
            compile::compile(image, &mut code, &mut workspace, budget, 0).map(|()| code)
        });
        let code = match code {
            Ok(code) => code,
            Err(halt) => return (Err(halt), None),
        };
        let scratch = &mut self.scratch;
        let host = program.host();
        let args = program.args();
        let stacks = &mut scratch.stacks;
        if self.metered {
            Interpreter::<true>::evaluate(&code, image, host, args, budget, stacks)
        } else {
            Interpreter::<false>::evaluate(&code, image, host, args, budget, stacks)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::compile::{compile, Fetch, Instr};
    use super::*;
    use crate::image::{INode, LOCAL, NONE};
    use crate::{parse, Arena, LimitError, Prim, Rule};
    use std::sync::Arc;

    /// A budget with no limits but `memory`, and a cancel handle.
    fn budget(memory: usize, cancel: Option<crate::Cancel>) -> Budget {
        let mut limits = Limits::default().with_memory(memory);
        limits.cancel = cancel;
        Budget::new(&limits)
    }

    /// `program`'s image compiled without limits.
    fn compiled(program: &Program) -> Compiled {
        let mut c = Compiled::default();
        let mut w = Workspace::default();
        compile(
            program.image(),
            &mut c,
            &mut w,
            &mut budget(usize::MAX, None),
            0,
        )
        .unwrap();
        c
    }

    /// `let x₀ = 0 in … let x₆₃ = 63 in λy. y + x₀`: the function refers to
    /// de Bruijn index 64 under its binder.
    fn deep_closure(arena: &Arena) -> &crate::Term<'_> {
        let mut body = arena.lam(arena.prim(Prim::Add, &[arena.var(0), arena.var(64)]));
        for i in (0..64).rev() {
            body = arena.let_in(arena.int(i), body);
        }
        body
    }

    #[test]
    fn closures_capture_exactly_their_free_variables() {
        let arena = Arena::new();
        let program = Program::new(deep_closure(&arena)).unwrap();
        let c = compiled(&program);
        assert_eq!(c.funs.len(), 1);
        assert_eq!(c.funs[0].captured, 1);
        // x₀ is slot 0 of the top level's frame, fetched from there.
        assert_eq!(
            c.fetches,
            vec![Fetch {
                frame: true,
                start: 0,
                len: 1
            }]
        );
        assert_eq!(c.frame, 64);
        // Read back, the closure has x₀ substituted.
        let report = Env::new().run(&program, &Limits::default());
        let expected = arena.lam(arena.prim(Prim::Add, &[arena.var(0), arena.int(0)]));
        assert_eq!(
            report.outcome,
            Outcome::Value(crate::Value::from_term(expected).unwrap())
        );
        assert_eq!(report.counts.get(Rule::Let), 64);
    }

    #[test]
    fn a_curried_function_is_compiled_once_with_all_its_parameters() {
        let arena = Arena::new();
        let program = parse(
            &arena,
            "let a = 7 in let f x y z = a * x + y - z in f 1 2 3 + f 4 5 6",
        )
        .unwrap();
        let c = compiled(&program);
        assert_eq!(c.funs.len(), 1);
        let f = c.funs[0];
        assert_eq!((f.params, f.rec, f.captured), (3, false, 1));
        // Self-less frame: x, y, z.
        assert_eq!(f.frame, 3);
        let spines = c
            .code
            .iter()
            .filter(|i| matches!(i, Instr::AppN { .. }))
            .count();
        assert_eq!(spines, 2);
        let report = Env::new().run(&program, &Limits::default());
        assert_eq!(
            report.outcome,
            Outcome::Value(crate::Value::from_term(arena.int(6 + 27)).unwrap())
        );
    }

    #[test]
    fn calls_in_tail_position_are_marked_at_compile_time() {
        let arena = Arena::new();
        // (μf. λn. if n == 0 then g n else (f n) + 1) 3, with g = λx. x
        let call = |f, a| arena.app(f, a);
        let body = arena.if_then_else(
            arena.prim(Prim::Eq, &[arena.var(0), arena.int(0)]),
            call(arena.lam(arena.var(0)), arena.var(0)),
            arena.prim(Prim::Add, &[call(arena.var(1), arena.var(0)), arena.int(1)]),
        );
        let program = Program::new(call(arena.rec_lam(body), arena.int(3))).unwrap();
        let tails: Vec<bool> = compiled(&program)
            .code
            .iter()
            .filter_map(|i| match i {
                Instr::App { tail, .. }
                | Instr::AppAtomArgument { tail, .. }
                | Instr::AppAtomFunction { tail, .. }
                | Instr::AppAtoms { tail, .. } => Some(*tail),
                _ => None,
            })
            .collect();
        // In compile order: the top-level call, then μf's body: g n, f n.
        assert_eq!(tails, vec![true, true, false]);
    }

    #[test]
    fn a_malformed_image_is_a_fault_not_a_panic() {
        // Program::new validates, so an open term cannot reach the machine;
        // the compiler still refuses images the analysis would not make.
        let mut c = Compiled::default();
        let mut w = Workspace::default();
        let mut open = crate::image::Image::default();
        open.root = open.push(
            INode::Var {
                index: 3,
                slot: LOCAL,
            },
            4,
            true,
        );
        let mut no_function = crate::image::Image::default();
        let body = no_function.push(INode::Int(1), 0, true);
        no_function.root = no_function.push(
            INode::Lam {
                body,
                func: NONE,
                pos: 0,
            },
            0,
            true,
        );
        for image in [open, no_function] {
            let result = compile(&image, &mut c, &mut w, &mut budget(usize::MAX, None), 0);
            assert!(matches!(result, Err(Halt::Fault(_))));
        }
    }

    /// `(μf. λn. f (n + 1)) 0`: runs until something stops it.
    fn spin(arena: &Arena) -> &crate::Term<'_> {
        let body = arena.app(
            arena.var(1),
            arena.prim(Prim::Add, &[arena.var(0), arena.int(1)]),
        );
        arena.app(arena.rec_lam(body), arena.int(0))
    }

    #[test]
    fn stacks_are_kept_across_runs_and_runs_agree() {
        let arena = Arena::new();
        let program = Program::new(spin(&arena)).unwrap();
        let limits = Limits::default().with_fuel(1_000);
        let mut env = Env::new();
        let first = env.run(&program, &limits);
        assert!(env.scratch.stacks.stack.capacity() > 0);
        let kept = env.scratch.stacks.stack.as_ptr();
        let code = Arc::as_ptr(&program.prepared(|| Err::<Compiled, ()>(())).unwrap());
        let second = env.run(&program, &limits);
        assert_eq!(first, second);
        assert_eq!(env.scratch.stacks.stack.as_ptr(), kept);
        // The program keeps its compiled code: the second run compiled nothing.
        let again = program.prepared(|| Err::<Compiled, ()>(())).unwrap();
        assert_eq!(Arc::as_ptr(&again), code);
    }

    #[test]
    fn deep_pushes_stop_at_a_one_mebibyte_limit() {
        let arena = Arena::new();
        let limit = 1 << 20;
        // Frames pushed call after call.
        let program = parse(&arena, "let rec deep n = 1 + deep (n + 1) in deep 0").unwrap();
        let mut env = Env::new();
        let report = env.run(&program, &Limits::default().with_memory(limit));
        assert_eq!(report.outcome, Outcome::Limit(LimitError::memory(limit)));
        assert!(report.counts.get(Rule::BetaRec) > 2_000);
        // The peak is the growth refused, barely past the limit.
        assert!(env.peak_bytes() < limit + limit / 4, "{}", env.peak_bytes());
        // Values, tasks and cells made inside one contraction: a body of
        // 5,000 nested constructors of 8 fields. With one byte less than the
        // run needs, it stops after the β, before the case.
        let nested = format!(
            "{}x{}",
            "K(1, 2, 3, 4, 5, 6, 7, ".repeat(5_000),
            ")".repeat(5_000)
        );
        let source = format!("(\\x. case {nested} of {{ _ => 0 }}) 1");
        let program = parse(&arena, &source).unwrap();
        let report = env.run(&program, &Limits::default());
        assert_eq!(
            report.outcome,
            Outcome::Value(crate::Value::from_term(arena.int(0)).unwrap())
        );
        assert_eq!(report.counts.total(), 2);
        // The program keeps its compiled code, so a second run's peak is the
        // run's alone.
        env.run(&program, &Limits::default());
        let need = env.peak_bytes();
        let limit = need - 1;
        let report = env.run(&program, &Limits::default().with_memory(limit));
        assert_eq!(report.outcome, Outcome::Limit(LimitError::memory(limit)));
        assert_eq!(report.counts.total(), 1);
    }

    /// `(λx₁. … λxₙ. x₁ + … + xₙ) 1 … n`: nested functions that each use
    /// every variable above them.
    fn nested_functions(n: usize) -> String {
        let params: String = (1..=n).map(|i| format!("\\x{i}. ")).collect();
        let sum: Vec<String> = (1..=n).map(|i| format!("x{i}")).collect();
        let args: Vec<String> = (1..=n).map(|i| i.to_string()).collect();
        format!("({params}{}) {}", sum.join(" + "), args.join(" "))
    }

    #[test]
    fn nested_functions_compile_to_linear_code() {
        let arena = Arena::new();
        let program = parse(&arena, &nested_functions(4_000)).unwrap();
        let nodes = program.image().nodes.len();
        let c = compiled(&program);
        assert!(
            c.bytes() < 64 * nodes,
            "{} bytes of code for {nodes} nodes",
            c.bytes()
        );
        // One fetch per capture run: each function takes its parent's
        // captured values and locals in two ranges.
        assert!(c.fetches.len() <= 2 * c.funs.len());
        let mut env = Env::new();
        let limits = Limits::default().with_memory(16 << 20);
        let report = env.run(&program, &limits.clone().with_fuel(0));
        assert_eq!(report.outcome, Outcome::OutOfFuel);
        let report = env.run(&program, &limits);
        assert_eq!(
            report.outcome,
            Outcome::Value(crate::Value::from_term(arena.int(4_000 * 4_001 / 2)).unwrap())
        );
        assert_eq!(report.counts.get(Rule::Beta), 4_000);
    }

    #[test]
    fn compilation_stops_at_the_memory_limit_and_when_cancelled() {
        let arena = Arena::new();
        let program = parse(&arena, &nested_functions(4_000)).unwrap();
        let (mut c, mut w) = (Compiled::default(), Workspace::default());
        // Room for a few kilobytes: the code does not fit.
        let limit = 4 << 10;
        let result = compile(program.image(), &mut c, &mut w, &mut budget(limit, None), 0);
        assert!(matches!(result, Err(Halt::Memory)));
        let report = Env::new().run(&program, &Limits::default().with_memory(limit));
        assert_eq!(report.outcome, Outcome::Limit(LimitError::memory(limit)));
        let cancel = crate::Cancel::new();
        cancel.cancel();
        let result = compile(
            program.image(),
            &mut c,
            &mut w,
            &mut budget(usize::MAX, Some(cancel)),
            0,
        );
        assert!(matches!(result, Err(Halt::Cancelled)));
    }

    #[test]
    fn a_shared_closed_function_is_compiled_once() {
        let arena = Arena::new();
        // Pair(f 1 2, f 3 4) with one shared node for f = λx y. x - y, and a
        // shared closed non-function (compiled at each occurrence).
        let f = arena.lam(arena.lam(arena.prim(Prim::Sub, &[arena.var(1), arena.var(0)])));
        let call = |a, b| arena.app(arena.app(f, arena.int(a)), arena.int(b));
        let shared = arena.let_in(
            arena.int(10),
            arena.prim(Prim::Mul, &[arena.var(0), arena.var(0)]),
        );
        let term = arena.con("Four", &[call(1, 2), call(3, 4), shared, shared]);
        let program = Program::new(term).unwrap();
        let c = compiled(&program);
        assert_eq!(c.funs.len(), 1);
        let closures = c
            .code
            .iter()
            .filter(|i| matches!(i, Instr::Closure { .. }))
            .count();
        assert_eq!(closures, 2);
        let report = Env::new().run(&program, &Limits::default());
        let want = crate::parse_term(&arena, "Four(-1, -1, 100, 100)").unwrap();
        assert!(matches!(&report.outcome, Outcome::Value(v) if *v == want));
        assert_eq!(report.counts.to_array(), [4, 0, 2, 0, 4, 0]);
    }
}
