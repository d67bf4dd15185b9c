//! The CEK machine (Felleisen and Friedman, "Control operators, the
//! SECD-machine, and the λ-calculus", 1986): control, environment and
//! continuation as explicit data, advanced by one loop with no native
//! recursion, so a run can stop when its fuel runs out and resume later.
//!
//! The control is a term of the program itself (or a value on its way back).
//! The environment is split for constant-time lookup at any de Bruijn index:
//! the variables bound since the current function was entered (its argument,
//! `let`s and case fields) sit in a segment of a locals stack, and the
//! function's free variables in its flat closure, which captured the indices
//! `0..scope` of its `λ` when it was made. The continuation is a stack of
//! frames; a function body, a `let` body, an `if` branch and a case arm are
//! entered without pushing one (proper tail calls), and a call reuses the
//! locals no frame still needs, so a tail loop runs in constant space.
//! Operands that are atoms (variables and literals) are evaluated in place,
//! as in the atomic evaluation of Van Horn and Might ("Abstracting abstract
//! machines", 2010), so `n - 1`, `if n < 2 …`, `f x` and `f (n - 1)` need no
//! frames; a curried call given all its arguments in a row (`f a b c`) makes
//! no closures for `f a` and `f a b`.

use std::rc::Rc;

use crate::value::{
    apply_prim, cut, free_variable, host_call, int_prim, int_test, read_back, recycle,
    string_bytes, Closure, ConCell, Halt, Meter, Tank, Value, Values,
};
use crate::{
    Arena, Arm, Cancel, Counts, EvalError, HostFunctions, HostId, LimitError, Limits, Machine,
    Node, Operand, Outcome, Prim, Program, Report, Rule, Term,
};

/// A runtime value of this machine: closures keep their source term as code.
type Val<'a> = Value<'a, &'a Term<'a>>;

/// A flat closure of this machine.
type Fun<'a> = Closure<'a, &'a Term<'a>>;

/// The CEK machine. It holds no program state of its own; [`Cek::start`]
/// makes a [`CekRun`], the machine state of one run, which can pause when its
/// fuel runs out and resume with more.
///
/// # Examples
///
/// ```
/// use orrery::machines::cek::Cek;
/// use orrery::{Arena, Limits, Machine, Outcome, Prim, Program};
/// let arena = Arena::new();
/// // (λx. x * 2) 21
/// let double = arena.lam(arena.prim(Prim::Mul, &[arena.var(0), arena.int(2)]));
/// let program = Program::new(arena.app(double, arena.int(21))).unwrap();
/// let report = Cek::new().run(&program, &Limits::default(), &arena);
/// assert_eq!(report.outcome, Outcome::Value(arena.int(42)));
/// assert_eq!(report.counts.total(), 2); // beta, prim
/// ```
#[derive(Debug)]
pub struct Cek {
    peak: usize,
    /// Whether fuel, memory and cancellation are checked (always, except in
    /// the benchmark-only [`Cek::without_accounting`]).
    metered: bool,
    /// The emptied stacks of the last [`Machine::run`], kept for the next.
    scratch: Scratch,
}

impl Default for Cek {
    fn default() -> Self {
        Cek {
            peak: 0,
            metered: true,
            scratch: Scratch::default(),
        }
    }
}

/// A run's stacks, emptied; their element types borrow a program, so they
/// are kept with `'static` in its place and [`recycle`]d.
#[derive(Default)]
struct Scratch {
    locals: Vec<Val<'static>>,
    kont: Vec<Frame<'static>>,
    operands: Vec<Val<'static>>,
}

impl std::fmt::Debug for Scratch {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Scratch").finish_non_exhaustive()
    }
}

impl Cek {
    /// A CEK machine.
    ///
    /// # Examples
    ///
    /// ```
    /// let _cek = orrery::machines::cek::Cek::new();
    /// ```
    pub fn new() -> Self {
        Cek::default()
    }

    /// **For benchmarks only.** A machine whose [`Machine::run`] skips every
    /// fuel, memory and cancellation check, so a benchmark can measure what
    /// the accounting costs. It computes the same values and counts, but it
    /// ignores [`Limits`] entirely: a divergent program runs forever and a
    /// growing one until allocation fails. Never use it on untrusted input.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::cek::Cek;
    /// use orrery::{Arena, Limits, Machine, Outcome, Program};
    /// let arena = Arena::new();
    /// let program = Program::new(arena.app(arena.lam(arena.var(0)), arena.int(5))).unwrap();
    /// let report = Cek::without_accounting().run(&program, &Limits::default(), &arena);
    /// assert_eq!(report.outcome, Outcome::Value(arena.int(5)));
    /// ```
    #[doc(hidden)]
    pub fn without_accounting() -> Self {
        Cek {
            metered: false,
            ..Cek::default()
        }
    }

    /// The initial machine state for running `program` under `limits`:
    /// nothing is evaluated until [`CekRun::resume`].
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::cek::Cek;
    /// use orrery::{Arena, Limits, Outcome, Prim, Program};
    /// let arena = Arena::new();
    /// // (1 + 2) * (3 + 4): three prim contractions.
    /// let sum = |a, b| arena.prim(Prim::Add, &[arena.int(a), arena.int(b)]);
    /// let program = Program::new(arena.prim(Prim::Mul, &[sum(1, 2), sum(3, 4)])).unwrap();
    /// let mut run = Cek::start(&program, &Limits::default().with_fuel(2));
    /// assert_eq!(run.resume(0, &arena).outcome, Outcome::OutOfFuel);
    /// let report = run.resume(1, &arena);
    /// assert_eq!(report.outcome, Outcome::Value(arena.int(21)));
    /// assert_eq!(report.counts.total(), 3);
    /// ```
    pub fn start<'a>(program: &Program<'a>, limits: &Limits) -> CekRun<'a> {
        CekRun::with_stacks(program, limits, Scratch::default(), true)
    }

    /// The most runtime memory the last [`Machine::run`] held at once, in
    /// bytes, as the memory limit counts it (see [`CekRun::peak_bytes`]).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::cek::Cek;
    /// use orrery::{Arena, Limits, Machine, Program};
    /// let arena = Arena::new();
    /// let program = Program::new(arena.con("Box", &[arena.int(1)])).unwrap();
    /// let mut cek = Cek::new();
    /// cek.run(&program, &Limits::default(), &arena);
    /// assert!(cek.peak_bytes() > 0);
    /// ```
    pub fn peak_bytes(&self) -> usize {
        self.peak
    }
}

impl Machine for Cek {
    fn name(&self) -> &'static str {
        "cek"
    }

    fn run<'a: 'o, 'o>(
        &mut self,
        program: &Program<'a>,
        limits: &Limits,
        out: &'o Arena,
    ) -> Report<'o> {
        let scratch = std::mem::take(&mut self.scratch);
        let mut run = CekRun::with_stacks(program, limits, scratch, self.metered);
        let report = run.resume(0, out);
        self.peak = run.peak_bytes();
        self.scratch = run.into_stacks();
        report
    }
}

/// The environment of the control term: the current function's locals,
/// `locals[base .. base + depth]` (the innermost binder last), and its closure,
/// whose captured values are the free variables beyond them.
#[derive(Clone)]
struct Env<'a> {
    closure: Option<Rc<Fun<'a>>>,
    base: usize,
    depth: u32,
}

impl<'a> Env<'a> {
    /// The environment of the program's top level: empty.
    fn top() -> Self {
        Env {
            closure: None,
            base: 0,
            depth: 0,
        }
    }

    /// One past the last local this environment uses.
    #[inline]
    fn extent(&self) -> usize {
        self.base + self.depth as usize
    }
}

/// A continuation frame: what to do with the value of the current control.
/// Frames that go on to evaluate a term keep the environment to evaluate it
/// in, and `below`: how many locals the frames under them need.
enum Frame<'a> {
    /// `□ t`: evaluate the argument next.
    Argument {
        argument: &'a Term<'a>,
        env: Env<'a>,
        below: usize,
    },
    /// `v □`: apply `function` to the value.
    Call { function: Val<'a> },
    /// `(λ. t) □` inside a curried call whose earlier arguments are taken:
    /// `closure` (a `λ` or `μλ`) has been applied to the `count - 1`
    /// arguments (and, for a `μλ`, itself) on top of the operand stack, each
    /// application contracted, and its body `lam` is a `λ` about to be
    /// applied to the value. No closure is made for the partial application
    /// (see [`CekRun::call`]).
    Partial {
        closure: Rc<Fun<'a>>,
        lam: &'a Term<'a>,
        count: u32,
    },
    /// `f v₁ … vᵢ₋₁ □ aᵢ₊₁ … aₘ` for the spine `term` of a call whose
    /// head `f` is bound to `closure`, a curried function of exactly `m`
    /// parameters: the values to the left (after the function itself, for a
    /// `μλ`) are on the operand stack, each application already contracted.
    /// The next value is applied (a contraction), then the next argument is
    /// evaluated in `env`, and after the last the body is entered with every
    /// value as a local; no closure is made for the partial applications.
    Spine {
        closure: Rc<Fun<'a>>,
        term: &'a Term<'a>,
        index: u32,
        m: u32,
        env: Env<'a>,
        below: usize,
    },
    /// `let □ in t`.
    Let {
        body: &'a Term<'a>,
        env: Env<'a>,
        below: usize,
    },
    /// `if □ then t else u`.
    If {
        yes: &'a Term<'a>,
        no: &'a Term<'a>,
        env: Env<'a>,
        below: usize,
    },
    /// `op(v…, □, t…)` or `K(v…, □, t…)`, the hole at `index`; the values
    /// to its left are on the machine's operand stack.
    Operand {
        head: Head<'a>,
        operands: &'a [&'a Term<'a>],
        index: usize,
        env: Env<'a>,
        below: usize,
    },
    /// `case □ of {…}`.
    Case {
        arms: &'a [Arm<'a>],
        default: Option<&'a Term<'a>>,
        env: Env<'a>,
        below: usize,
    },
}

/// What an [`Frame::Operand`] frame does once its operands are values.
#[derive(Clone, Copy)]
enum Head<'a> {
    /// Apply a primitive: a contraction.
    Prim(Prim),
    /// Build a constructor cell: free.
    Con(&'a str),
}

/// The control: a term to evaluate, or a value to hand to the continuation.
enum Control<'a> {
    Eval(&'a Term<'a>),
    Return(Val<'a>),
}

/// How a run ended, kept so that a finished run reports the same outcome
/// however often it is asked.
enum End<'a> {
    Value(Val<'a>),
    Error(EvalError),
    Limit(LimitError),
}

/// The state of one CEK run: control, environment, continuation, and the
/// fuel, counts and memory accounting. Plain data: when the fuel runs out the
/// run pauses just before the contraction it could not pay for, and
/// [`CekRun::resume`] continues it with more fuel. A paused run and an
/// uninterrupted one end with the same value and the same counts.
///
/// # Examples
///
/// ```
/// use orrery::machines::cek::Cek;
/// use orrery::{Arena, Limits, Outcome, Program};
/// let arena = Arena::new();
/// // (μf. λn. f n) 0 loops forever; give it fuel a little at a time.
/// let spin = arena.rec_lam(arena.app(arena.var(1), arena.var(0)));
/// let program = Program::new(arena.app(spin, arena.int(0))).unwrap();
/// let mut run = Cek::start(&program, &Limits::default().with_fuel(0));
/// for _ in 0..3 {
///     assert_eq!(run.resume(1_000, &arena).outcome, Outcome::OutOfFuel);
/// }
/// assert_eq!(run.counts().total(), 3_000);
/// assert!(!run.is_finished());
/// ```
pub struct CekRun<'a> {
    control: Option<Control<'a>>,
    env: Env<'a>,
    /// Arguments, `let`-bound values and case fields of the active functions.
    locals: Vec<Val<'a>>,
    kont: Vec<Frame<'a>>,
    /// Values of partly evaluated primitive applications and constructors.
    operands: Vec<Val<'a>>,
    /// How many locals the continuation still needs: a call puts the callee's
    /// locals here, reusing any above.
    floor: usize,
    tank: Tank,
    counts: Counts,
    memory: usize,
    cancel: Option<Cancel>,
    host: &'a HostFunctions,
    /// Whether fuel, memory and cancellation are checked.
    metered: bool,
    /// Bytes of cells this run held when it last paused.
    cells: usize,
    peak: usize,
    end: Option<End<'a>>,
}

impl std::fmt::Debug for CekRun<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("CekRun")
            .field("fuel_left", &self.tank.left())
            .field("counts", &self.counts)
            .field("frames", &self.kont.len())
            .field("finished", &self.end.is_some())
            .finish()
    }
}

impl<'a> CekRun<'a> {
    /// The initial state for `program`, with the (empty) stacks of `scratch`.
    fn with_stacks(
        program: &Program<'a>,
        limits: &Limits,
        scratch: Scratch,
        metered: bool,
    ) -> Self {
        CekRun {
            control: Some(Control::Eval(program.term())),
            env: Env::top(),
            locals: recycle(scratch.locals),
            kont: recycle(scratch.kont),
            operands: recycle(scratch.operands),
            floor: 0,
            tank: Tank::new(limits.fuel),
            counts: Counts::default(),
            memory: limits.memory,
            cancel: limits.cancel.clone(),
            host: program.host(),
            metered,
            cells: 0,
            peak: 0,
            end: None,
        }
    }

    /// This run's stacks, emptied, to keep for another run.
    fn into_stacks(mut self) -> Scratch {
        self.control = None;
        self.env = Env::top();
        self.end = None;
        Scratch {
            locals: recycle(std::mem::take(&mut self.locals)),
            kont: recycle(std::mem::take(&mut self.kont)),
            operands: recycle(std::mem::take(&mut self.operands)),
        }
    }

    /// Add `more_fuel` and run until a value, an error, a resource limit, or
    /// the end of the fuel. The report's counts are the run's totals so far.
    /// Once the run has finished, further calls report the same outcome and
    /// do nothing else.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::cek::Cek;
    /// use orrery::{Arena, Limits, Machine, Outcome, Prim, Program};
    /// let arena = Arena::new();
    /// // let x = 2 + 3 in x * x
    /// let t = arena.let_in(
    ///     arena.prim(Prim::Add, &[arena.int(2), arena.int(3)]),
    ///     arena.prim(Prim::Mul, &[arena.var(0), arena.var(0)]),
    /// );
    /// let program = Program::new(t).unwrap();
    /// let whole = Cek::new().run(&program, &Limits::default(), &arena);
    /// // One unit of fuel at a time ends the same way.
    /// let mut run = Cek::start(&program, &Limits::default().with_fuel(0));
    /// let mut report = run.resume(0, &arena);
    /// while report.outcome == Outcome::OutOfFuel {
    ///     report = run.resume(1, &arena);
    /// }
    /// assert_eq!(report, whole);
    /// ```
    pub fn resume<'o>(&mut self, more_fuel: u64, out: &'o Arena) -> Report<'o>
    where
        'a: 'o,
    {
        self.tank.add(more_fuel);
        if self.end.is_none() {
            let meter = Meter::holding(self.cells);
            let result = if self.metered {
                self.execute::<true>(&meter)
            } else {
                self.execute::<false>(&meter)
            };
            let end = match result {
                Ok(value) => Some(End::Value(value)),
                Err(Halt::Error(error)) => Some(End::Error(*error)),
                Err(Halt::Memory) => Some(End::Limit(LimitError::memory(self.memory))),
                Err(Halt::Cancelled) => Some(End::Limit(LimitError::cancelled())),
                Err(Halt::OutOfFuel) => None,
            };
            if end.is_some() {
                // The machine state is no longer needed; drop what it holds
                // (the stacks stay allocated, for `Cek::run` to keep).
                self.control = None;
                self.env = Env::top();
                self.kont.clear();
                self.locals.clear();
                self.operands.clear();
                self.floor = 0;
            }
            self.end = end;
            self.cells = meter.cells();
        }
        let outcome = match &self.end {
            None => Outcome::OutOfFuel,
            Some(End::Value(value)) => Outcome::Value(read_back(value, out)),
            Some(End::Error(error)) => Outcome::Error(error.clone()),
            Some(End::Limit(limit)) => Outcome::Limit(limit.clone()),
        };
        Report {
            outcome,
            counts: self.counts,
        }
    }

    /// The contractions made so far, per rule.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::cek::Cek;
    /// use orrery::{Arena, Limits, Program};
    /// let arena = Arena::new();
    /// let run = Cek::start(&Program::new(arena.int(1)).unwrap(), &Limits::default());
    /// assert_eq!(run.counts().total(), 0);
    /// ```
    pub fn counts(&self) -> Counts {
        self.counts
    }

    /// The fuel left.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::cek::Cek;
    /// use orrery::{Arena, Limits, Program};
    /// let arena = Arena::new();
    /// let run = Cek::start(&Program::new(arena.int(1)).unwrap(), &Limits::default().with_fuel(9));
    /// assert_eq!(run.fuel_left(), 9);
    /// ```
    pub fn fuel_left(&self) -> u64 {
        self.tank.left()
    }

    /// Whether the run has ended (with a value, an error or a resource
    /// limit); a paused run has not.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::cek::Cek;
    /// use orrery::{Arena, Limits, Program};
    /// let arena = Arena::new();
    /// let mut run = Cek::start(&Program::new(arena.int(1)).unwrap(), &Limits::default());
    /// assert!(!run.is_finished());
    /// run.resume(0, &arena);
    /// assert!(run.is_finished());
    /// ```
    pub fn is_finished(&self) -> bool {
        self.end.is_some()
    }

    /// The most runtime memory this run has held at once, in bytes, sampled
    /// whenever it makes a cell (a closure, a constructor cell, a string) and
    /// before the first contraction of every fuel slice (at least every
    /// [`CANCEL_POLL_INTERVAL`](crate::CANCEL_POLL_INTERVAL) contractions): the cells it made
    /// and still holds (closures, constructor cells, strings; see the memory
    /// limit's accounting) plus the capacity of its locals, operand and
    /// continuation stacks. This is the quantity [`Limits::memory`] bounds.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::cek::Cek;
    /// use orrery::{Arena, Limits, Program};
    /// let arena = Arena::new();
    /// let mut run = Cek::start(&Program::new(arena.int(1)).unwrap(), &Limits::default());
    /// run.resume(0, &arena);
    /// assert_eq!(run.peak_bytes(), 0); // no contraction, nothing built
    /// ```
    pub fn peak_bytes(&self) -> usize {
        self.peak
    }

    /// Bytes held by the machine's stacks.
    fn stack_bytes(&self) -> usize {
        self.kont.capacity() * std::mem::size_of::<Frame<'_>>()
            + (self.locals.capacity() + self.operands.capacity()) * std::mem::size_of::<Val<'_>>()
    }

    /// Sample the memory in use; `Err` if it is over the limit.
    #[inline]
    fn check_memory<const METERED: bool>(&mut self, meter: &Meter) -> Result<(), Halt> {
        if !METERED {
            return Ok(());
        }
        let held = meter.cells() + self.stack_bytes();
        self.peak = self.peak.max(held);
        if held > self.memory {
            Err(Halt::Memory)
        } else {
            Ok(())
        }
    }

    /// The value of variable `#index` in the current environment.
    #[inline]
    fn lookup(&self, index: u32) -> Result<Val<'a>, Halt> {
        self.slot(index)
            .cloned()
            .ok_or_else(|| Halt::error(free_variable(index)))
    }

    /// Where the value of variable `#index` is kept, if it is bound.
    #[inline(always)]
    fn slot(&self, index: u32) -> Option<&Val<'a>> {
        let env = &self.env;
        if index < env.depth {
            self.locals.get(env.extent() - 1 - index as usize)
        } else {
            env.closure
                .as_ref()
                .and_then(|c| c.captured.get((index - env.depth) as usize))
        }
    }

    /// A flat closure for `term` (a `λ` or `μλ`): it captures the indices
    /// below the term's scope.
    fn close(&self, term: &'a Term<'a>) -> Result<Val<'a>, Halt> {
        let mut captured = Values::new();
        for index in 0..term.scope() {
            captured.push(self.lookup(index)?);
        }
        Ok(Value::Fun(Closure::new(term, captured)))
    }

    /// Push a frame that will evaluate in the current environment.
    #[inline]
    fn push(&mut self, frame: impl FnOnce(Env<'a>, usize) -> Frame<'a>) {
        let below = self.floor;
        self.floor = self.env.extent();
        let env = self.env.clone();
        self.kont.push(frame(env, below));
    }

    /// Make `env` current again, dropping any locals above it.
    #[inline]
    fn enter(&mut self, env: Env<'a>) {
        cut(&mut self.locals, env.extent());
        self.env = env;
    }

    /// Take one unit of fuel for a contraction under `rule`. Memory is
    /// sampled where cells are made (closures, constructors, strings) and
    /// before the first contraction of every fuel slice, so the stacks can
    /// outgrow the limit by at most a slice's worth of frames before the run
    /// stops.
    #[inline(always)]
    fn take_fuel<const METERED: bool>(&mut self, rule: Rule, meter: &Meter) -> Result<(), Halt> {
        if METERED && !self.tank.take() {
            self.next_slice(meter)?;
        }
        self.counts.add(rule);
        Ok(())
    }

    /// Take fuel for two contractions in a row, under `first` then `second`.
    #[inline(always)]
    fn take_fuel2<const METERED: bool>(
        &mut self,
        first: Rule,
        second: Rule,
        meter: &Meter,
    ) -> Result<(), Halt> {
        if METERED && !self.tank.take2() {
            self.take_fuel::<METERED>(first, meter)?;
            return self.take_fuel::<METERED>(second, meter);
        }
        self.counts.add(first);
        self.counts.add(second);
        Ok(())
    }

    /// Whether `n` units of fuel are left (always, unmetered).
    #[inline(always)]
    fn has_fuel<const METERED: bool>(&self, n: u64) -> bool {
        !METERED || self.tank.has(n)
    }

    /// The slow checks between fuel slices: cancellation, memory, and the
    /// next slice of fuel (whose first unit pays for the pending contraction).
    #[cold]
    #[inline(never)]
    fn next_slice(&mut self, meter: &Meter) -> Result<(), Halt> {
        if self.cancel.as_ref().is_some_and(Cancel::is_cancelled) {
            return Err(Halt::Cancelled);
        }
        self.check_memory::<true>(meter)?;
        if !self.tank.refill() {
            return Err(Halt::OutOfFuel);
        }
        self.tank.take();
        Ok(())
    }

    /// Contract the application of `function` to `argument`, its fuel
    /// already paid: enter the body with the callee's locals where the
    /// continuation's end (so a tail call reuses the caller's).
    ///
    /// A curried call given its next argument at once (`f a b`, with `f`'s
    /// body a `λ` and the continuation's top frame `□ b`) makes no closure
    /// for `f a`: the bound values go to the operand stack under a
    /// [`Frame::Partial`], and the function is entered when the last argument
    /// arrives, its locals all the values bound along the way. The
    /// contractions and their order are those of the plain calls.
    #[inline]
    fn call<const M: bool>(
        &mut self,
        function: Val<'a>,
        argument: Val<'a>,
        meter: &Meter,
    ) -> Result<Control<'a>, Halt> {
        let Value::Fun(closure) = function else {
            return Err(Halt::error(EvalError::not_a_function(function.operand())));
        };
        if let Node::Lam(body) | Node::RecLam(body) = *closure.code.node() {
            if matches!(body.node(), Node::Lam(_))
                && matches!(self.kont.last(), Some(Frame::Argument { .. }))
            {
                let rec = matches!(closure.code.node(), Node::RecLam(_));
                if rec {
                    self.operands.push(Value::Fun(Rc::clone(&closure)));
                }
                let lam: &'a Term<'a> = closure.code;
                return self.step::<M>(closure, lam, u32::from(rec), argument, meter);
            }
        }
        cut(&mut self.locals, self.floor);
        let base = self.locals.len();
        let (body, depth) = match *closure.code.node() {
            Node::RecLam(body) => {
                self.locals.push(Value::Fun(Rc::clone(&closure)));
                (body, 2)
            }
            Node::Lam(body) => (body, 1),
            _ => return Err(Halt::error(EvalError::not_a_function(Operand::Function))),
        };
        self.locals.push(argument);
        self.env = Env {
            closure: Some(closure),
            base,
            depth,
        };
        Ok(Control::Eval(body))
    }

    /// Go on with a curried call (see [`CekRun::call`]): `lam` (a `λ` or
    /// `μλ` of `closure`'s chain) has just been applied to `value`, its fuel
    /// paid, with the `count` values bound before on top of the operand
    /// stack. While its body is a `λ` and the top frame is `□ b`, keep the
    /// value and go on to `b` (taking an atom `b` at once); otherwise enter
    /// the body with every bound value as a local, the first outermost. A
    /// loop, however long the chain.
    fn step<const M: bool>(
        &mut self,
        closure: Rc<Fun<'a>>,
        mut lam: &'a Term<'a>,
        mut count: u32,
        mut value: Val<'a>,
        meter: &Meter,
    ) -> Result<Control<'a>, Halt> {
        loop {
            let (Node::Lam(body) | Node::RecLam(body)) = *lam.node() else {
                return Err(Halt::error(EvalError::not_a_function(Operand::Function)));
            };
            if matches!(body.node(), Node::Lam(_))
                && matches!(self.kont.last(), Some(Frame::Argument { .. }))
            {
                if let Some(Frame::Argument {
                    argument,
                    env,
                    below,
                }) = self.kont.pop()
                {
                    self.operands.push(value);
                    count += 1;
                    lam = body;
                    self.floor = below;
                    self.enter(env);
                    match self.atom(argument)? {
                        Some(next) if self.has_fuel::<M>(1) => {
                            self.take_fuel::<M>(Rule::Beta, meter)?;
                            value = next;
                            continue;
                        }
                        _ => {
                            self.kont.push(Frame::Partial {
                                closure,
                                lam,
                                count,
                            });
                            return Ok(Control::Eval(argument));
                        }
                    }
                }
            }
            return Ok(self.enter_body(closure, body, count, value));
        }
    }

    /// Enter `body`, the body of `closure`'s curried chain, with the `count`
    /// values on top of the operand stack and then `value` as its locals,
    /// placed where the continuation's locals end.
    #[inline]
    fn enter_body(
        &mut self,
        closure: Rc<Fun<'a>>,
        body: &'a Term<'a>,
        count: u32,
        value: Val<'a>,
    ) -> Control<'a> {
        cut(&mut self.locals, self.floor);
        let base = self.locals.len();
        let at = self.operands.len().saturating_sub(count as usize);
        self.locals.extend(self.operands.drain(at..));
        self.locals.push(value);
        self.env = Env {
            closure: Some(closure),
            base,
            depth: count + 1,
        };
        Control::Eval(body)
    }

    /// Contract `op` applied to the operands from `at` on the operand stack
    /// (their fuel paid), popping them. Every primitive not on an integer
    /// shortcut comes here.
    #[inline]
    fn prim<const M: bool>(&mut self, op: Prim, at: usize, meter: &Meter) -> Result<Val<'a>, Halt> {
        let bytes = string_bytes(op, self.operands.get(at..).unwrap_or(&[]));
        if M && bytes > 0
            && (meter.cells() + self.stack_bytes()).saturating_add(bytes) > self.memory
        {
            self.operands.truncate(at);
            return Err(Halt::Memory);
        }
        let result = apply_prim(op, self.operands.get(at..).unwrap_or(&[]));
        self.operands.truncate(at);
        let value = result.map_err(Halt::error)?;
        if matches!(value, Value::Str(_)) {
            self.check_memory::<M>(meter)?;
        }
        Ok(value)
    }

    /// A host function's contraction on the operands from `at` up (see
    /// `host::HostStep`), popping them if it is made. Out of fuel leaves
    /// everything as it was, so a resume makes the call.
    #[cold]
    fn host_call<const M: bool>(
        &mut self,
        id: HostId,
        at: usize,
        meter: &Meter,
    ) -> Result<Val<'a>, Halt> {
        let room = self
            .memory
            .saturating_sub(meter.cells() + self.stack_bytes());
        let args = self.operands.get(at..).unwrap_or(&[]);
        let made = host_call(
            self.host,
            id,
            args,
            &mut self.tank,
            &mut self.counts,
            M,
            room,
        );
        let value = made?;
        self.operands.truncate(at);
        self.check_memory::<M>(meter)?;
        Ok(value)
    }

    /// The value of an atom (`None` if `term` is not one).
    #[inline]
    fn atom(&self, term: &'a Term<'a>) -> Result<Option<Val<'a>>, Halt> {
        Ok(match *term.node() {
            Node::Var(index) => Some(self.lookup(index)?),
            Node::Int(n) => Some(Value::Int(n)),
            Node::Bool(b) => Some(Value::Bool(b)),
            Node::Str(_) | Node::Con(_, []) => Some(Value::Lit(term)),
            _ => None,
        })
    }

    /// `f a₁ … aₘ` (`2 ≤ m ≤ WIDE_ARGS`) with `f` a variable bound to a
    /// curried function of exactly `m` parameters and each argument an atom
    /// or an integer operation on atoms that does not fail, when the fuel
    /// covers every contraction: the contractions of the nested calls, in
    /// their order, and the body entered with the function (if recursive)
    /// and the arguments as its locals, as [`CekRun::step`] would, without
    /// the frames. `None` (nothing done) otherwise.
    #[inline(always)]
    fn wide_call<const M: bool>(
        &mut self,
        function: &'a Term<'a>,
        term: &'a Term<'a>,
        meter: &Meter,
    ) -> Result<Option<Control<'a>>, Halt> {
        if !matches!(function.node(), Node::App(..)) {
            return Ok(None);
        }
        self.wide_spine::<M>(term, meter)
    }

    /// The rest of [`CekRun::wide_call`], for an application whose function
    /// is an application.
    #[inline(never)]
    fn wide_spine<const M: bool>(
        &mut self,
        term: &'a Term<'a>,
        meter: &Meter,
    ) -> Result<Option<Control<'a>>, Halt> {
        const WIDE_ARGS: usize = 8;
        // The arguments, last first, and which are integer operations.
        let mut args = [term; WIDE_ARGS];
        let mut prims = 0u32;
        let mut m = 0;
        let mut head = term;
        while let Node::App(f, a) = *head.node() {
            let prim = match *a.node() {
                Node::Var(_) | Node::Int(_) | Node::Bool(_) | Node::Str(_) | Node::Con(_, []) => {
                    false
                }
                Node::Prim(_, &[x, y]) => {
                    let int = |t: &Term<'_>| matches!(t.node(), Node::Var(_) | Node::Int(_));
                    if !int(x) || !int(y) {
                        return Ok(None);
                    }
                    true
                }
                _ => return Ok(None),
            };
            let Some(slot) = args.get_mut(m) else {
                return Ok(None);
            };
            *slot = a;
            prims |= u32::from(prim) << m;
            m += 1;
            head = f;
        }
        if !self.has_fuel::<M>((m as u32 + prims.count_ones()).into()) {
            return Ok(None);
        }
        let Ok(Some(Value::Fun(closure))) = self.atom(head) else {
            return Ok(None);
        };
        let rec = matches!(closure.code.node(), Node::RecLam(_));
        let Some(body) = chain_body(closure.code, m as u32) else {
            return Ok(None);
        };
        // The new locals go above the current ones, then down to the floor.
        let old = self.locals.len();
        if rec {
            self.locals.push(Value::Fun(Rc::clone(&closure)));
        }
        for &a in args.get(..m).unwrap_or(&[]).iter().rev() {
            let value = match *a.node() {
                Node::Prim(..) => self.int_prim(a),
                // An integer is read in place; other values by lookup.
                _ => match self.int(a) {
                    Some(n) => Some(Value::Int(n)),
                    None => self.atom(a).ok().flatten(),
                },
            };
            match value {
                Some(value) => self.locals.push(value),
                None => {
                    cut(&mut self.locals, old);
                    return Ok(None);
                }
            }
        }
        for k in (0..m).rev() {
            if prims >> k & 1 == 1 {
                self.take_fuel::<M>(Rule::Prim, meter)?;
            }
            let rule = if k + 1 == m && rec {
                Rule::BetaRec
            } else {
                Rule::Beta
            };
            self.take_fuel::<M>(rule, meter)?;
        }
        let base = self.floor.min(old);
        self.locals.drain(base..old);
        self.env = Env {
            closure: Some(closure),
            base,
            depth: (m + usize::from(rec)) as u32,
        };
        Ok(Some(Control::Eval(body)))
    }

    /// `f a₁ … aₘ` (`2 ≤ m ≤ SPINE_ARGS`, some argument not covered by
    /// [`CekRun::wide_call`]) with `f` a variable bound to a curried function
    /// of exactly `m` parameters: push a [`Frame::Spine`] (and the function,
    /// if recursive, on the operand stack) to evaluate the arguments in turn,
    /// and say so; `false` (nothing done) otherwise.
    #[inline(never)]
    fn spine_call(&mut self, function: &'a Term<'a>, term: &'a Term<'a>) -> bool {
        const SPINE_ARGS: u32 = 8;
        if !matches!(function.node(), Node::App(..)) {
            return false;
        }
        let mut m = 0;
        let mut head = term;
        while let Node::App(f, _) = *head.node() {
            m += 1;
            if m > SPINE_ARGS {
                return false;
            }
            head = f;
        }
        let Ok(Some(Value::Fun(closure))) = self.atom(head) else {
            return false;
        };
        if chain_body(closure.code, m).is_none() {
            return false;
        }
        let rec = matches!(closure.code.node(), Node::RecLam(_));
        if rec {
            self.operands.push(Value::Fun(Rc::clone(&closure)));
        }
        self.push(|env, below| Frame::Spine {
            closure,
            term,
            index: 0,
            m,
            env,
            below,
        });
        true
    }

    /// The integer an atom stands for, read without making a value.
    #[inline]
    fn int(&self, term: &Term<'a>) -> Option<i64> {
        match *term.node() {
            Node::Int(n) => Some(n),
            Node::Var(index) => match self.slot(index) {
                Some(&Value::Int(n)) => Some(n),
                _ => None,
            },
            _ => None,
        }
    }

    /// Both operands as integers, if they are integer atoms.
    #[inline]
    fn int_operands(&self, a: &Term<'a>, b: &Term<'a>) -> Option<(i64, i64)> {
        Some((self.int(a)?, self.int(b)?))
    }

    /// The value of `op(a, b)` on integer atoms, when it is an integer
    /// operation that does not fail.
    #[inline]
    fn int_prim(&self, term: &Term<'a>) -> Option<Val<'a>> {
        match *term.node() {
            Node::Prim(op, &[a, b]) => {
                let (x, y) = self.int_operands(a, b)?;
                int_prim(op, x, y)
            }
            _ => None,
        }
    }

    /// The outcome of a condition `op(a, b)` that compares integer atoms.
    #[inline]
    fn int_test(&self, condition: &Term<'a>) -> Option<bool> {
        match *condition.node() {
            Node::Prim(op, &[a, b]) => {
                let (x, y) = self.int_operands(a, b)?;
                int_test(op, x, y)
            }
            _ => None,
        }
    }

    /// Run the machine until a value, an error, a limit, or the end of the
    /// fuel. On running out of fuel the control is saved (a value about to
    /// meet the top frame), so that execution can continue from there.
    fn execute<const M: bool>(&mut self, meter: &Meter) -> Result<Val<'a>, Halt> {
        let Some(mut control) = self.control.take() else {
            return Err(Halt::OutOfFuel);
        };
        loop {
            control = match control {
                Control::Eval(term) => match *term.node() {
                    Node::Var(index) => Control::Return(self.lookup(index)?),
                    Node::Int(n) => Control::Return(Value::Int(n)),
                    Node::Bool(b) => Control::Return(Value::Bool(b)),
                    Node::Str(_) => Control::Return(Value::Lit(term)),
                    Node::Lam(_) | Node::RecLam(_) => {
                        let closure = self.close(term)?;
                        self.check_memory::<M>(meter)?;
                        Control::Return(closure)
                    }
                    // Shortcuts for operands that are atoms (variables and
                    // literals), whose evaluation is free and cannot fail:
                    // the same contractions in the same order, without the
                    // frames. Each is taken only when the fuel covers all its
                    // contractions, so a pause still falls between frames.
                    Node::App(function, argument) => match self.atom(function)? {
                        Some(f) => match self.atom(argument)? {
                            Some(a) if self.has_fuel::<M>(1) => {
                                self.take_fuel::<M>(call_rule(&f), meter)?;
                                self.call::<M>(f, a, meter)?
                            }
                            // `f (x - 1)`: an integer operation on atoms as
                            // the argument, then the call.
                            None if self.has_fuel::<M>(2) => match self.int_prim(argument) {
                                Some(a) => {
                                    self.take_fuel2::<M>(Rule::Prim, call_rule(&f), meter)?;
                                    self.call::<M>(f, a, meter)?
                                }
                                None => {
                                    self.kont.push(Frame::Call { function: f });
                                    Control::Eval(argument)
                                }
                            },
                            _ => {
                                self.kont.push(Frame::Call { function: f });
                                Control::Eval(argument)
                            }
                        },
                        None => match self.wide_call::<M>(function, term, meter)? {
                            Some(control) => control,
                            None if self.spine_call(function, term) => {
                                Control::Eval(spine_arg(term, spine_width(term) - 1))
                            }
                            None => {
                                self.push(|env, below| Frame::Argument {
                                    argument,
                                    env,
                                    below,
                                });
                                Control::Eval(function)
                            }
                        },
                    },
                    Node::If(condition, yes, no) if self.has_fuel::<M>(2) => {
                        match self.int_test(condition) {
                            Some(holds) => {
                                self.take_fuel2::<M>(Rule::Prim, Rule::If, meter)?;
                                Control::Eval(if holds { yes } else { no })
                            }
                            None => {
                                self.push(|env, below| Frame::If {
                                    yes,
                                    no,
                                    env,
                                    below,
                                });
                                Control::Eval(condition)
                            }
                        }
                    }
                    Node::Prim(op, operands @ &[a, b]) if self.has_fuel::<M>(1) => {
                        match self
                            .int_operands(a, b)
                            .and_then(|(x, y)| int_prim(op, x, y))
                        {
                            Some(value) => {
                                self.take_fuel::<M>(Rule::Prim, meter)?;
                                Control::Return(value)
                            }
                            None => {
                                self.push(|env, below| Frame::Operand {
                                    head: Head::Prim(op),
                                    operands,
                                    index: 0,
                                    env,
                                    below,
                                });
                                Control::Eval(a)
                            }
                        }
                    }
                    Node::Let(bound, body) => {
                        self.push(|env, below| Frame::Let { body, env, below });
                        Control::Eval(bound)
                    }
                    Node::If(condition, yes, no) => {
                        self.push(|env, below| Frame::If {
                            yes,
                            no,
                            env,
                            below,
                        });
                        Control::Eval(condition)
                    }
                    Node::Prim(op, operands) => match operands.first() {
                        Some(first) => {
                            self.push(|env, below| Frame::Operand {
                                head: Head::Prim(op),
                                operands,
                                index: 0,
                                env,
                                below,
                            });
                            Control::Eval(first)
                        }
                        None => {
                            let made = match op {
                                Prim::Host(id) => {
                                    self.host_call::<M>(id, self.operands.len(), meter)
                                }
                                _ => self
                                    .take_fuel::<M>(Rule::Prim, meter)
                                    .and_then(|()| self.prim::<M>(op, self.operands.len(), meter)),
                            };
                            match made {
                                Ok(value) => Control::Return(value),
                                Err(halt) => {
                                    self.control = Some(Control::Eval(term));
                                    return Err(halt);
                                }
                            }
                        }
                    },
                    Node::Con(tag, fields) => match fields.first() {
                        Some(first) => {
                            self.push(|env, below| Frame::Operand {
                                head: Head::Con(tag),
                                operands: fields,
                                index: 0,
                                env,
                                below,
                            });
                            Control::Eval(first)
                        }
                        None => Control::Return(Value::Lit(term)),
                    },
                    Node::Case(scrutinee, arms, default) => {
                        self.push(|env, below| Frame::Case {
                            arms,
                            default,
                            env,
                            below,
                        });
                        Control::Eval(scrutinee)
                    }
                },
                Control::Return(value) => {
                    // Is handing the value to the top frame a contraction?
                    let rule = match self.kont.last() {
                        None => return Ok(value),
                        Some(Frame::Call { function }) => Some(call_rule(function)),
                        Some(Frame::Partial { .. }) => Some(Rule::Beta),
                        Some(Frame::Let { .. }) => Some(Rule::Let),
                        Some(Frame::If { .. }) => Some(Rule::If),
                        Some(Frame::Case { .. }) => Some(Rule::Case),
                        Some(Frame::Operand {
                            head,
                            operands,
                            index,
                            env,
                            ..
                        }) => match operands.get(index + 1) {
                            // Not the last operand: move the hole along,
                            // keeping the frame.
                            Some(&next) => {
                                let env = env.clone();
                                if let Some(Frame::Operand { index, .. }) = self.kont.last_mut() {
                                    *index += 1;
                                }
                                self.operands.push(value);
                                self.enter(env);
                                control = Control::Eval(next);
                                continue;
                            }
                            None => match *head {
                                // The last argument of a host call: its fuel
                                // depends on the arguments (`host::HostStep`).
                                Head::Prim(Prim::Host(id)) => {
                                    let at = self.operands.len().saturating_sub(*index);
                                    self.operands.push(value);
                                    match self.host_call::<M>(id, at, meter) {
                                        Ok(result) => {
                                            if let Some(Frame::Operand { below, .. }) =
                                                self.kont.pop()
                                            {
                                                self.floor = below;
                                            }
                                            control = Control::Return(result);
                                            continue;
                                        }
                                        Err(halt) => {
                                            // Out of fuel leaves the state as
                                            // it was, to resume here.
                                            if let Some(value) = self.operands.pop() {
                                                self.control = Some(Control::Return(value));
                                            }
                                            return Err(halt);
                                        }
                                    }
                                }
                                Head::Prim(_) => Some(Rule::Prim),
                                Head::Con(_) => None,
                            },
                        },
                        Some(Frame::Argument { .. }) => None,
                        Some(Frame::Spine {
                            closure,
                            term,
                            index,
                            m,
                            env,
                            ..
                        }) => {
                            let rule = if *index == 0 {
                                call_rule_fun(closure)
                            } else {
                                Rule::Beta
                            };
                            if *index + 1 < *m {
                                // Not the last argument: contract, keep the
                                // value and go on to the next, keeping the frame.
                                let next = spine_arg(term, *m - 2 - *index);
                                let env = env.clone();
                                if let Err(halt) = self.take_fuel::<M>(rule, meter) {
                                    self.control = Some(Control::Return(value));
                                    return Err(halt);
                                }
                                if let Some(Frame::Spine { index, .. }) = self.kont.last_mut() {
                                    *index += 1;
                                }
                                self.operands.push(value);
                                self.enter(env);
                                control = Control::Eval(next);
                                continue;
                            }
                            Some(rule)
                        }
                    };
                    if let Some(rule) = rule {
                        if let Err(halt) = self.take_fuel::<M>(rule, meter) {
                            self.control = Some(Control::Return(value));
                            return Err(halt);
                        }
                    }
                    let Some(frame) = self.kont.pop() else {
                        return Ok(value);
                    };
                    self.apply::<M>(frame, value, meter)?
                }
            };
        }
    }

    /// Hand `value` to `frame`, whose contraction (if it is one) has been
    /// paid for.
    #[inline]
    fn apply<const M: bool>(
        &mut self,
        frame: Frame<'a>,
        value: Val<'a>,
        meter: &Meter,
    ) -> Result<Control<'a>, Halt> {
        Ok(match frame {
            Frame::Argument {
                argument,
                env,
                below,
            } => {
                self.floor = below;
                self.enter(env);
                match self.atom(argument)? {
                    // An atom argument is taken at once.
                    Some(a) if self.has_fuel::<M>(1) => {
                        self.take_fuel::<M>(call_rule(&value), meter)?;
                        self.call::<M>(value, a, meter)?
                    }
                    _ => {
                        self.kont.push(Frame::Call { function: value });
                        Control::Eval(argument)
                    }
                }
            }
            Frame::Call { function } => self.call::<M>(function, value, meter)?,
            Frame::Partial {
                closure,
                lam,
                count,
            } => self.step::<M>(closure, lam, count, value, meter)?,
            Frame::Spine {
                closure, m, below, ..
            } => {
                // The last argument (the others are taken with the frame in
                // place): enter the body with every value bound.
                let rec = matches!(closure.code.node(), Node::RecLam(_));
                let code: &'a Term<'a> = closure.code;
                let body = chain_body(code, m).unwrap_or(code);
                self.floor = below;
                self.enter_body(closure, body, m - 1 + u32::from(rec), value)
            }
            Frame::Let { body, env, below } => {
                self.floor = below;
                self.enter(env);
                self.locals.push(value);
                self.env.depth += 1;
                Control::Eval(body)
            }
            Frame::If {
                yes,
                no,
                env,
                below,
            } => {
                let Value::Bool(b) = value else {
                    return Err(Halt::error(EvalError::not_a_boolean(value.operand())));
                };
                self.floor = below;
                self.enter(env);
                Control::Eval(if b { yes } else { no })
            }
            Frame::Operand {
                head, index, below, ..
            } => {
                // The last operand: the others are on the operand stack.
                self.floor = below;
                let at = self.operands.len().saturating_sub(index);
                match head {
                    Head::Prim(op) => {
                        // A binary operation on integers: no trip through
                        // the operand stack.
                        if let (1, Some(&Value::Int(x)), Value::Int(y)) =
                            (index, self.operands.last(), &value)
                        {
                            if let Some(result) = int_prim(op, x, *y) {
                                self.operands.truncate(at);
                                return Ok(Control::Return(result));
                            }
                        }
                        self.operands.push(value);
                        Control::Return(self.prim::<M>(op, at, meter)?)
                    }
                    Head::Con(tag) => {
                        // A constructor of values is a value: building it is free.
                        self.operands.push(value);
                        let values: Values<'a, &'a Term<'a>> = self.operands.drain(at..).collect();
                        let cell = Value::Con(ConCell::new(tag, values));
                        self.check_memory::<M>(meter)?;
                        Control::Return(cell)
                    }
                }
            }
            Frame::Case {
                arms,
                default,
                env,
                below,
            } => {
                self.floor = below;
                self.enter(env);
                if let Some((tag, fields)) = value.constructor() {
                    let arm = arms
                        .iter()
                        .find(|arm| arm.tag == tag && arm.arity as usize == fields.len());
                    if let Some(arm) = arm {
                        // Field 1 outermost: the last field ends up as #0.
                        self.locals.extend(fields.iter().cloned());
                        self.env.depth += arm.arity;
                        return Ok(Control::Eval(arm.body));
                    }
                }
                match default {
                    Some(default) => Control::Eval(default),
                    None => return Err(Halt::error(EvalError::no_matching_case(value.operand()))),
                }
            }
        })
    }
}

/// The argument `back` places left of the last in the spine of a call
/// `f a₁ … aₘ` (`back < m`); `term` itself if the spine is shorter.
#[inline]
fn spine_arg<'a>(term: &'a Term<'a>, back: u32) -> &'a Term<'a> {
    let mut at = term;
    for _ in 0..back {
        if let Node::App(f, _) = *at.node() {
            at = f;
        }
    }
    match *at.node() {
        Node::App(_, argument) => argument,
        _ => term,
    }
}

/// The body of the curried function `code` (a `λ` or `μλ`) under its
/// first `m` binders, when it has exactly `m` parameters (the body is not a
/// `λ`); `None` otherwise.
#[inline]
fn chain_body<'a>(code: &'a Term<'a>, m: u32) -> Option<&'a Term<'a>> {
    let mut body = code;
    for k in 0..m {
        body = match *body.node() {
            Node::Lam(inner) => inner,
            Node::RecLam(inner) if k == 0 => inner,
            _ => return None,
        };
    }
    (!matches!(body.node(), Node::Lam(_))).then_some(body)
}

/// How many arguments the spine of `term` has.
fn spine_width(term: &Term<'_>) -> u32 {
    let mut m = 0;
    let mut head = term;
    while let Node::App(f, _) = *head.node() {
        m += 1;
        head = f;
    }
    m
}

/// The rule under which applying `closure` is counted.
#[inline]
fn call_rule_fun(closure: &Fun<'_>) -> Rule {
    if matches!(closure.code.node(), Node::RecLam(_)) {
        Rule::BetaRec
    } else {
        Rule::Beta
    }
}

/// The rule under which applying `function` is counted.
#[inline]
fn call_rule(function: &Val<'_>) -> Rule {
    match function {
        Value::Fun(f) if matches!(f.code.node(), Node::RecLam(_)) => Rule::BetaRec,
        _ => Rule::Beta,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Gabriel's tak, curried: in the body z is #0, y #1, x #2, tak #3.
    fn tak<'a>(arena: &'a Arena, x: i64, y: i64, z: i64) -> &'a Term<'a> {
        let v = |i| arena.var(i);
        let call = |f: &'a Term<'a>, a, b, c| arena.app(arena.app(arena.app(f, a), b), c);
        let dec = |t| arena.prim(Prim::Sub, &[t, arena.int(1)]);
        let body = arena.if_then_else(
            arena.prim(Prim::Lt, &[v(1), v(2)]),
            call(
                v(3),
                call(v(3), dec(v(2)), v(1), v(0)),
                call(v(3), dec(v(1)), v(0), v(2)),
                call(v(3), dec(v(0)), v(2), v(1)),
            ),
            v(0),
        );
        let f = arena.rec_lam(arena.lam(arena.lam(body)));
        call(f, arena.int(x), arena.int(y), arena.int(z))
    }

    /// `(μf. λn. if n == 0 then 0 else f (n - 1)) n`: a tail loop.
    fn count_down(arena: &Arena, n: i64) -> &Term<'_> {
        let body = arena.if_then_else(
            arena.prim(Prim::Eq, &[arena.var(0), arena.int(0)]),
            arena.int(0),
            arena.app(
                arena.var(1),
                arena.prim(Prim::Sub, &[arena.var(0), arena.int(1)]),
            ),
        );
        arena.app(arena.rec_lam(body), arena.int(n))
    }

    #[test]
    fn tak_is_seven_with_gabriels_call_count() {
        let arena = Arena::new();
        let program = Program::new(tak(&arena, 18, 12, 6)).unwrap();
        let report = Cek::new().run(&program, &Limits::default(), &arena);
        assert_eq!(report.outcome, Outcome::Value(arena.int(7)));
        assert_eq!(report.counts.get(Rule::BetaRec), 63_609);
        assert_eq!(report.counts.get(Rule::Beta), 2 * 63_609);
    }

    #[test]
    fn paused_runs_end_as_uninterrupted_ones() {
        let arena = Arena::new();
        let program = Program::new(tak(&arena, 12, 8, 4)).unwrap();
        let whole = Cek::new().run(&program, &Limits::default(), &arena);
        let total = whole.counts.total();
        for slice in [1, 7, 1000, total - 1] {
            let mut run = Cek::start(&program, &Limits::default().with_fuel(slice));
            let mut report = run.resume(0, &arena);
            let mut pauses = 0;
            while report.outcome == Outcome::OutOfFuel {
                assert_eq!(report.counts.total(), slice * (pauses + 1));
                pauses += 1;
                report = run.resume(slice, &arena);
            }
            assert_eq!(report, whole, "slices of {slice}");
            assert_eq!(pauses, total.div_ceil(slice) - 1);
            // A finished run keeps its outcome.
            assert_eq!(run.resume(5, &arena), whole);
        }
    }

    #[test]
    fn tail_calls_push_no_frames() {
        let arena = Arena::new();
        let program = Program::new(count_down(&arena, 100_000)).unwrap();
        let mut run = Cek::start(&program, &Limits::default().with_fuel(0));
        let mut deepest = 0;
        loop {
            let report = run.resume(997, &arena);
            deepest = deepest.max(run.kont.len()).max(run.locals.len());
            if report.outcome != Outcome::OutOfFuel {
                assert_eq!(report.outcome, Outcome::Value(arena.int(0)));
                break;
            }
        }
        // A frame for the condition's operands and the if, two locals.
        assert!(deepest <= 2, "deepest {deepest}");
    }

    #[test]
    fn a_cancelled_handle_stops_a_divergent_loop() {
        let arena = Arena::new();
        // (μf. λn. f n) 0 never ends.
        let spin = arena.rec_lam(arena.app(arena.var(1), arena.var(0)));
        let program = Program::new(arena.app(spin, arena.int(0))).unwrap();
        let cancel = Cancel::new();
        let limits = Limits::default()
            .with_fuel(u64::MAX)
            .with_cancel(cancel.clone());
        let runner = std::thread::spawn(move || {
            let arena = Arena::new();
            let spin = arena.rec_lam(arena.app(arena.var(1), arena.var(0)));
            let program = Program::new(arena.app(spin, arena.int(0))).unwrap();
            let report = Cek::new().run(&program, &limits, &arena);
            (report.outcome.name(), report.counts.total())
        });
        std::thread::sleep(std::time::Duration::from_millis(20));
        cancel.cancel();
        let (outcome, contractions) = runner.join().unwrap();
        assert_eq!(outcome, "limit");
        assert!(contractions > 0);
        // Cancelled before it starts: polled before the first contraction.
        let limits = Limits::default().with_cancel(cancel);
        let report = Cek::new().run(&program, &limits, &arena);
        assert_eq!(report.outcome, Outcome::Limit(LimitError::cancelled()));
        assert_eq!(report.counts.total(), 0);
    }

    #[test]
    fn a_paused_run_reports_cancelled_on_resume() {
        let arena = Arena::new();
        let program = Program::new(count_down(&arena, 1_000_000)).unwrap();
        let cancel = Cancel::new();
        let limits = Limits::default().with_fuel(0).with_cancel(cancel.clone());
        let mut run = Cek::start(&program, &limits);
        assert_eq!(run.resume(5_000, &arena).outcome, Outcome::OutOfFuel);
        assert_eq!(run.counts().total(), 5_000);
        cancel.cancel();
        let report = run.resume(5_000, &arena);
        assert_eq!(report.outcome, Outcome::Limit(LimitError::cancelled()));
        assert_eq!(report.counts.total(), 5_000);
        assert!(run.is_finished());
    }

    #[test]
    fn stacks_are_kept_across_runs_and_runs_agree() {
        let arena = Arena::new();
        let program = Program::new(tak(&arena, 12, 8, 4)).unwrap();
        let mut cek = Cek::new();
        let first = cek.run(&program, &Limits::default(), &arena);
        let kept = cek.scratch.kont.as_ptr();
        assert!(cek.scratch.kont.capacity() > 0);
        let second = cek.run(&program, &Limits::default(), &arena);
        assert_eq!(first, second);
        assert_eq!(cek.scratch.kont.as_ptr(), kept);
    }

    #[test]
    fn without_accounting_gives_the_same_report() {
        let arena = Arena::new();
        let program = Program::new(tak(&arena, 12, 8, 4)).unwrap();
        let metered = Cek::new().run(&program, &Limits::default(), &arena);
        let unmetered = Cek::without_accounting().run(&program, &Limits::default(), &arena);
        assert_eq!(metered.outcome, Outcome::Value(arena.int(5)));
        assert_eq!(metered, unmetered);
    }

    #[test]
    #[cfg(feature = "stepper")]
    fn wide_calls_agree_with_the_stepper_at_every_fuel() {
        crate::value::tests::curried_calls_agree_with_the_stepper(&mut Cek::new());
    }

    #[test]
    fn curried_calls_count_each_argument_and_partial_applications_escape() {
        let arena = Arena::new();
        let sub = |a, b| arena.prim(Prim::Sub, &[a, b]);
        // λa. λb. λc. a - b - c
        let f = arena.lam(arena.lam(arena.lam(sub(sub(arena.var(2), arena.var(1)), arena.var(0)))));
        let app = |f, a| arena.app(f, a);
        let whole = app(app(app(f, arena.int(10)), arena.int(3)), arena.int(2));
        let report = Cek::new().run(&Program::new(whole).unwrap(), &Limits::default(), &arena);
        assert_eq!(report.outcome, Outcome::Value(arena.int(5)));
        assert_eq!(report.counts.get(Rule::Beta), 3);
        assert_eq!(report.counts.get(Rule::Prim), 2);
        // Given two of its three arguments, it is a closure over both.
        let partial = app(app(f, arena.int(10)), arena.int(3));
        let report = Cek::new().run(&Program::new(partial).unwrap(), &Limits::default(), &arena);
        let expected = arena.lam(sub(sub(arena.int(10), arena.int(3)), arena.var(0)));
        assert_eq!(report.outcome, Outcome::Value(expected));
        assert_eq!(report.counts.get(Rule::Beta), 2);
        // Paused between the arguments, it ends the same way.
        let program = Program::new(whole).unwrap();
        let mut run = Cek::start(&program, &Limits::default().with_fuel(1));
        assert_eq!(run.resume(0, &arena).outcome, Outcome::OutOfFuel);
        assert_eq!(run.resume(1, &arena).outcome, Outcome::OutOfFuel);
        let report = run.resume(3, &arena);
        assert_eq!(report.outcome, Outcome::Value(arena.int(5)));
        assert_eq!(report.counts.total(), 5);
    }

    #[test]
    fn memory_limit_stops_a_growing_run() {
        let arena = Arena::new();
        // μf. λn. Cons(n, f (n + 1)): builds continuation frames forever.
        let body = arena.con(
            "Cons",
            &[
                arena.var(0),
                arena.app(
                    arena.var(1),
                    arena.prim(Prim::Add, &[arena.var(0), arena.int(1)]),
                ),
            ],
        );
        let program = Program::new(arena.app(arena.rec_lam(body), arena.int(0))).unwrap();
        let limits = Limits::default().with_memory(1 << 20);
        let mut cek = Cek::new();
        let report = cek.run(&program, &limits, &arena);
        assert_eq!(report.outcome, Outcome::Limit(LimitError::memory(1 << 20)));
        assert!(cek.peak_bytes() > 1 << 20);
    }
}
