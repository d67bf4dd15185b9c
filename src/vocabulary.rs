//! The shared vocabulary of every machine (SEMANTICS §3): limits, the rules and
//! their contraction counts, outcomes, error and limit kinds, and the trait and
//! enum through which a caller picks a machine.

use std::any::Any;
use std::fmt;
use std::sync::Arc;

use crate::error::{EvalError, Fault, LimitError};
use crate::program::Program;
use crate::value::Value;

/// Default fuel: one hundred million contractions (a few seconds on the fast
/// machines).
///
/// # Examples
///
/// ```
/// use orrery::{Limits, DEFAULT_FUEL};
/// assert_eq!(DEFAULT_FUEL, 100_000_000);
/// assert_eq!(Limits::default().fuel, DEFAULT_FUEL);
/// ```
pub const DEFAULT_FUEL: u64 = 100_000_000;

/// Default memory limit: 256 MiB of machine-owned runtime data.
///
/// # Examples
///
/// ```
/// use orrery::{Limits, DEFAULT_MEMORY};
/// assert_eq!(DEFAULT_MEMORY, 256 * 1024 * 1024);
/// assert_eq!(Limits::default().memory, DEFAULT_MEMORY);
/// ```
pub const DEFAULT_MEMORY: usize = 256 << 20;

/// How far a run may go. Both bounds are finite by default.
///
/// * `fuel` — the number of contractions (attempted ones included) the run may
///   make; with none left, the outcome is [`Outcome::OutOfFuel`].
/// * `memory` — bytes of runtime data the machine may hold at once (terms built
///   by substitution, stacks and frames, environments, closures, strings, the
///   data handed to host functions, and the result read back). The program
///   (its image and what the machines prepared for it) is shared by every run
///   and not counted.
/// * `context` — an optional value the run's host functions may read (see
///   [`Limits::with_context`]).
/// * `cancel` — an optional [`Cancel`] handle; once another thread cancels it,
///   the run stops with [`LimitKind::Cancelled`](crate::LimitKind::Cancelled) within
///   [`CANCEL_POLL_INTERVAL`] further contractions.
///
/// # Examples
///
/// ```
/// use orrery::Limits;
/// let limits = Limits::default().with_fuel(1_000).with_memory(1 << 20);
/// assert_eq!(limits.fuel, 1_000);
/// assert_eq!(Limits::default().fuel, orrery::DEFAULT_FUEL);
/// ```
#[derive(Clone, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub struct Limits {
    /// Contractions allowed.
    pub fuel: u64,
    /// Bytes of runtime data allowed.
    pub memory: usize,
    /// A handle another thread may cancel the run through.
    pub cancel: Option<Cancel>,
    /// What the run's host functions are handed: a tenant, a request id, a
    /// deadline (see [`crate::HostFunctions::register_with_context`]).
    pub context: Option<RunContext>,
}

impl Default for Limits {
    fn default() -> Self {
        Limits {
            fuel: DEFAULT_FUEL,
            memory: DEFAULT_MEMORY,
            cancel: None,
            context: None,
        }
    }
}

impl Limits {
    /// These limits with a different fuel bound.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Limits::default().with_fuel(5).fuel, 5);
    /// ```
    pub fn with_fuel(mut self, fuel: u64) -> Self {
        self.fuel = fuel;
        self
    }

    /// These limits with a different memory bound, in bytes.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Limits::default().with_memory(4096).memory, 4096);
    /// ```
    pub fn with_memory(mut self, bytes: usize) -> Self {
        self.memory = bytes;
        self
    }

    /// These limits with a cancellation handle.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Cancel, Limits};
    /// let cancel = Cancel::new();
    /// let limits = Limits::default().with_cancel(cancel.clone());
    /// assert!(limits.cancel.is_some());
    /// ```
    pub fn with_cancel(mut self, cancel: Cancel) -> Self {
        self.cancel = Some(cancel);
        self
    }

    /// These limits with a context for the run's host functions: any
    /// `Send + Sync` value, shared (not copied) by every run these limits
    /// govern.
    ///
    /// # Examples
    ///
    /// ```
    /// struct Tenant(u32);
    /// let limits = orrery::Limits::default().with_context(Tenant(7));
    /// assert!(limits.context.is_some());
    /// ```
    pub fn with_context<C: Any + Send + Sync>(mut self, context: C) -> Self {
        self.context = Some(RunContext(Arc::new(context)));
        self
    }

    /// Whether the run these limits govern has been cancelled.
    #[inline]
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Cancel, Limits};
    /// let cancel = Cancel::new();
    /// let limits = Limits::default().with_cancel(cancel.clone());
    /// assert!(!limits.is_cancelled());
    /// cancel.cancel();
    /// assert!(limits.is_cancelled());
    /// ```
    pub fn is_cancelled(&self) -> bool {
        self.cancel.as_ref().is_some_and(Cancel::is_cancelled)
    }
}

/// Machines look at the cancellation flag at least once every this many
/// contractions (and before the first), so a cancelled run stops within this
/// many further contractions.
///
/// # Examples
///
/// ```
/// use orrery::{parse, Arena, Cancel, Limits, MachineKind, Outcome, CANCEL_POLL_INTERVAL};
/// let arena = Arena::new();
/// let program = parse(&arena, "let rec pace n = pace (n + 1) in pace 0").unwrap();
/// let cancel = Cancel::new();
/// cancel.cancel();
/// let limits = Limits::default().with_cancel(cancel);
/// for kind in MachineKind::enabled() {
///     let report = kind.run(&program, &limits);
///     assert!(matches!(report.outcome, Outcome::Limit(_)));
///     assert!(report.counts.total() <= CANCEL_POLL_INTERVAL);
/// }
/// ```
pub const CANCEL_POLL_INTERVAL: u64 = 1024;

/// A run's context for its host functions, made by
/// [`Limits::with_context`]. Clones share the one value; two contexts are
/// equal when they are the same value.
#[derive(Clone)]
pub struct RunContext(Arc<dyn Any + Send + Sync>);

impl RunContext {
    /// The context as host functions see it.
    pub(crate) fn get(&self) -> &(dyn Any + Send + Sync) {
        &*self.0
    }
}

impl PartialEq for RunContext {
    fn eq(&self, other: &Self) -> bool {
        Arc::ptr_eq(&self.0, &other.0)
    }
}

impl Eq for RunContext {}

impl fmt::Debug for RunContext {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("RunContext")
    }
}

/// A cancellation handle: cheap to clone, shared between threads. Cancelling
/// it stops every run whose [`Limits`] hold a clone of it, with the
/// [`LimitKind::Cancelled`](crate::LimitKind::Cancelled) limit, within [`CANCEL_POLL_INTERVAL`]
/// contractions. Cancelling is permanent for the handle.
///
/// # Examples
///
/// ```
/// use orrery::{parse, Arena, Cancel, Limits, MachineKind, Outcome, LimitKind};
/// let arena = Arena::new();
/// let program = parse(&arena, "let rec spin n = spin (n + 1) in spin 0").unwrap();
/// let cancel = Cancel::new();
/// let limits = Limits::default().with_fuel(u64::MAX).with_cancel(cancel.clone());
/// let stopper = std::thread::spawn(move || cancel.cancel());
/// stopper.join().unwrap();
/// let report = MachineKind::fastest().unwrap().run(&program, &limits);
/// assert!(matches!(report.outcome, Outcome::Limit(ref e) if e.kind() == LimitKind::Cancelled));
/// ```
#[derive(Clone, Debug, Default)]
pub struct Cancel {
    flag: std::sync::Arc<std::sync::atomic::AtomicBool>,
}

impl Cancel {
    /// A fresh handle, not cancelled.
    ///
    /// # Examples
    ///
    /// ```
    /// assert!(!orrery::Cancel::new().is_cancelled());
    /// ```
    pub fn new() -> Self {
        Cancel::default()
    }

    /// Cancel every run that holds this handle (or a clone of it).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Cancel;
    /// let cancel = Cancel::new();
    /// let held_by_a_run = cancel.clone();
    /// cancel.cancel();
    /// assert!(held_by_a_run.is_cancelled());
    /// ```
    pub fn cancel(&self) {
        self.flag.store(true, std::sync::atomic::Ordering::Relaxed);
    }

    /// Whether [`Cancel::cancel`] has been called on this handle or a clone.
    #[inline]
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Cancel;
    /// let (first, second) = (Cancel::new(), Cancel::new());
    /// first.cancel();
    /// assert!(first.is_cancelled());
    /// assert!(!second.is_cancelled());
    /// ```
    pub fn is_cancelled(&self) -> bool {
        self.flag.load(std::sync::atomic::Ordering::Relaxed)
    }
}

/// Two handles are equal when they are clones of one another.
impl PartialEq for Cancel {
    fn eq(&self, other: &Self) -> bool {
        std::sync::Arc::ptr_eq(&self.flag, &other.flag)
    }
}

impl Eq for Cancel {}

/// The contraction rules of SEMANTICS §1.2. Every contraction, and every attempted
/// contraction that fails, is counted under exactly one of them.
///
/// # Examples
///
/// ```
/// use orrery::Rule;
/// assert_eq!(Rule::BetaRec.name(), "beta_rec");
/// assert_eq!(Rule::ALL.len(), 6);
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Rule {
    /// `(λ. t) v → t[#0 := v]`; also applying a non-function.
    Beta,
    /// `(μλ. t) v → t[#0 := v, #1 := μλ. t]`.
    BetaRec,
    /// `let v in t → t[#0 := v]`.
    Let,
    /// `if true/false then t else u`; also a non-boolean condition.
    If,
    /// `op(v, …, v) → δ(op, v, …, v)`.
    Prim,
    /// `case v of {…}`.
    Case,
}

impl Rule {
    /// Every rule, in the order of SEMANTICS §1.2 (and of the JSON output).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Rule;
    /// let names = Rule::ALL.map(Rule::name);
    /// assert_eq!(names, ["beta", "beta_rec", "let", "if", "prim", "case"]);
    /// ```
    pub const ALL: [Rule; 6] = [
        Rule::Beta,
        Rule::BetaRec,
        Rule::Let,
        Rule::If,
        Rule::Prim,
        Rule::Case,
    ];

    /// The rule's stable name, as in the JSON output.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Rule::If.name(), "if");
    /// ```
    pub fn name(self) -> &'static str {
        match self {
            Rule::Beta => "beta",
            Rule::BetaRec => "beta_rec",
            Rule::Let => "let",
            Rule::If => "if",
            Rule::Prim => "prim",
            Rule::Case => "case",
        }
    }
}

impl fmt::Display for Rule {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Contractions made, per rule, and the fuel used beyond one unit per
/// contraction (by data-sized primitives and host functions' declared costs).
/// Every count saturates at `u64::MAX` rather than wrapping.
///
/// # Examples
///
/// ```
/// use orrery::{Counts, Rule};
/// let mut counts = Counts::default();
/// counts.add(Rule::Beta);
/// counts.add(Rule::Beta);
/// counts.add(Rule::Prim);
/// assert_eq!(counts.get(Rule::Beta), 2);
/// assert_eq!(counts.total(), 3);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
pub struct Counts {
    by_rule: [u64; 6],
    extra_fuel: u64,
}

impl Counts {
    /// Count one more contraction under `rule`.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Counts, Rule};
    /// let mut counts = Counts::default();
    /// counts.add(Rule::Case);
    /// assert_eq!((counts.get(Rule::Case), counts.get(Rule::Beta)), (1, 0));
    /// ```
    #[inline]
    pub fn add(&mut self, rule: Rule) {
        let n = &mut self.by_rule[rule as usize];
        *n = n.saturating_add(1);
    }

    /// Count one more contraction under `rule`, for a machine that has paid
    /// a unit of fuel for it: no more than `u64::MAX` units are ever paid,
    /// so the count cannot pass `u64::MAX` (and the plain increment is
    /// cheaper on the hot path than [`Counts::add`]'s saturating one).
    #[inline(always)]
    pub(crate) fn tally(&mut self, rule: Rule) {
        self.by_rule[rule as usize] += 1;
    }

    /// Count a block's contractions at once, `by_rule[r]` under rule `r`.
    #[inline(always)]
    #[cfg_attr(not(feature = "vm"), allow(dead_code))] // the metered blocks' machine
    pub(crate) fn tally_block(&mut self, by_rule: &[u8; 6]) {
        for (count, &n) in self.by_rule.iter_mut().zip(by_rule) {
            *count += u64::from(n);
        }
    }

    /// Take back a block's counts ([`Counts::tally_block`]).
    #[inline]
    #[cfg_attr(not(feature = "vm"), allow(dead_code))] // the metered blocks' machine
    pub(crate) fn untally_block(&mut self, by_rule: &[u8; 6]) {
        for (count, &n) in self.by_rule.iter_mut().zip(by_rule) {
            *count = count.saturating_sub(u64::from(n));
        }
    }

    /// Move `n` contractions counted under `from` to `to`.
    #[inline]
    #[cfg_attr(not(feature = "vm"), allow(dead_code))] // the metered blocks' machine
    pub(crate) fn recount(&mut self, from: Rule, to: Rule, n: u64) {
        let moved = n.min(self.by_rule[from as usize]);
        self.by_rule[from as usize] -= moved;
        self.by_rule[to as usize] += moved;
    }

    /// Count `units` of fuel used beyond one unit per contraction: a
    /// data-sized primitive's (a string operation needs `1 + n / 1024`
    /// units) or a host function's declared cost (see
    /// [`crate::HostFunctions::set_cost`]).
    ///
    /// # Examples
    ///
    /// ```
    /// let mut counts = orrery::Counts::default();
    /// counts.add(orrery::Rule::Prim);
    /// counts.add_extra_fuel(9);
    /// assert_eq!((counts.total(), counts.fuel()), (1, 10));
    /// ```
    #[inline]
    pub fn add_extra_fuel(&mut self, units: u64) {
        self.extra_fuel = self.extra_fuel.saturating_add(units);
    }

    /// Fuel used beyond one unit per contraction.
    ///
    /// # Examples
    ///
    /// ```
    /// let mut counts = orrery::Counts::default();
    /// counts.add_extra_fuel(4);
    /// counts.add_extra_fuel(3);
    /// assert_eq!(counts.extra_fuel(), 7);
    /// ```
    pub fn extra_fuel(&self) -> u64 {
        self.extra_fuel
    }

    /// All fuel used: one unit per contraction, plus the extra units.
    ///
    /// # Examples
    ///
    /// ```
    /// let mut counts = orrery::Counts::from_array([2, 0, 1, 0, 0, 0]);
    /// counts.add_extra_fuel(5);
    /// assert_eq!(counts.fuel(), 3 + 5);
    /// ```
    pub fn fuel(&self) -> u64 {
        self.total().saturating_add(self.extra_fuel)
    }

    /// Contractions made under `rule`.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Counts, Rule};
    /// let counts = Counts::from_array([0, 0, 3, 0, 1, 0]);
    /// assert_eq!(counts.get(Rule::Let), 3);
    /// assert_eq!(counts.get(Rule::Prim), 1);
    /// ```
    #[inline]
    pub fn get(&self, rule: Rule) -> u64 {
        self.by_rule[rule as usize]
    }

    /// All contractions made (saturating at `u64::MAX`).
    ///
    /// # Examples
    ///
    /// ```
    /// let mut counts = orrery::Counts::from_array([1, 2, 3, 0, 0, 4]);
    /// counts.add_extra_fuel(100); // extra fuel is not a contraction
    /// assert_eq!(counts.total(), 10);
    /// assert_eq!(orrery::Counts::from_array([u64::MAX, 1, 0, 0, 0, 0]).total(), u64::MAX);
    /// ```
    pub fn total(&self) -> u64 {
        self.by_rule
            .iter()
            .fold(0u64, |sum, &n| sum.saturating_add(n))
    }

    /// Counts from per-rule numbers in the order of [`Rule::ALL`].
    ///
    /// # Examples
    ///
    /// ```
    /// let c = orrery::Counts::from_array([1, 0, 0, 0, 2, 0]);
    /// assert_eq!(c.total(), 3);
    /// ```
    pub fn from_array(by_rule: [u64; 6]) -> Self {
        Counts {
            by_rule,
            extra_fuel: 0,
        }
    }

    /// Per-rule numbers in the order of [`Rule::ALL`].
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Counts, Rule};
    /// let mut counts = Counts::default();
    /// counts.add(Rule::BetaRec);
    /// assert_eq!(counts.to_array(), [0, 1, 0, 0, 0, 0]);
    /// ```
    pub fn to_array(&self) -> [u64; 6] {
        self.by_rule
    }
}

impl fmt::Display for Counts {
    /// `1234 contractions (beta 10, beta_rec 3, …)`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{} contractions (", self.total())?;
        for (i, rule) in Rule::ALL.iter().enumerate() {
            let sep = if i == 0 { "" } else { ", " };
            write!(f, "{sep}{rule} {}", self.get(*rule))?;
        }
        if self.extra_fuel > 0 {
            write!(f, "; extra fuel {}", self.extra_fuel)?;
        }
        f.write_str(")")
    }
}

/// How a run ended.
///
/// # Examples
///
/// ```
/// use orrery::{Limits, MachineKind, Outcome, Program};
/// let program = Program::parse("2 + 1").unwrap();
/// let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
/// assert_eq!(report.outcome.name(), "value");
/// assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(3));
/// ```
#[derive(Clone, Debug, PartialEq)]
pub enum Outcome {
    /// The program reduced to this value.
    Value(Value),
    /// The program got stuck.
    Error(EvalError),
    /// The fuel ran out: the next contraction needed more fuel than was left
    /// (one unit, or a data-sized primitive's or host function's units; see
    /// [`Counts::fuel`]).
    OutOfFuel,
    /// A resource limit stopped the run.
    Limit(LimitError),
    /// A machine found one of its own invariants broken: a bug in orrery,
    /// never the program's doing. No report with a fault agrees with any
    /// other (see [`crate::disagreement`]).
    Fault(Fault),
    /// The run waits for the answer to a call of a suspending host function
    /// (see [`crate::HostFunctions::register_suspending`]): nothing of the
    /// call has been used or counted. A paused run continues with
    /// [`Paused::resume_with`]; a run that cannot pause (any run of
    /// [`Machine::run`]) ends here.
    Suspended(HostCall),
}

/// A call of a suspending host function that a run waits on: the function's
/// name and its arguments, as owned data.
///
/// # Examples
///
/// ```
/// use orrery::{Datum, HostFunctions, Limits, MachineKind, Outcome, Program};
/// let mut host = HostFunctions::new();
/// host.register_suspending("shelf_count", 1).unwrap();
/// let program = Program::parse_with("shelf_count \"aisle 3\" + 1", &host).unwrap();
/// let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
/// let Outcome::Suspended(call) = report.outcome else { panic!() };
/// assert_eq!(call.name, "shelf_count");
/// assert_eq!(call.args, [Datum::Str("aisle 3".into())]);
/// ```
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct HostCall {
    /// The host function's name.
    pub name: String,
    /// Its arguments.
    pub args: Vec<crate::Datum<'static>>,
}

/// What a host answers a suspended call with: a datum, or the message of a
/// `host_error` (see [`Paused::resume_with`]).
pub type Answer = Result<crate::Datum<'static>, String>;

impl Outcome {
    /// `value`, `error`, `out_of_fuel`, `limit`, `fault` or `suspended`, as
    /// in the JSON output.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Limits, MachineKind, Program};
    /// let program = Program::parse("let rec pace n = pace (n + 1) in pace 0").unwrap();
    /// for kind in MachineKind::enabled() {
    ///     let report = kind.run(&program, &Limits::default().with_fuel(25));
    ///     assert_eq!(report.outcome.name(), "out_of_fuel");
    /// }
    /// ```
    pub fn name(&self) -> &'static str {
        match self {
            Outcome::Value(_) => "value",
            Outcome::Error(_) => "error",
            Outcome::OutOfFuel => "out_of_fuel",
            Outcome::Limit(_) => "limit",
            Outcome::Fault(_) => "fault",
            Outcome::Suspended(_) => "suspended",
        }
    }

    /// The value, if the run ended with one.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Limits, MachineKind, Program};
    /// let program = Program::parse("\"pier\" ++ \" 4\"").unwrap();
    /// let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
    /// assert_eq!(report.outcome.value().and_then(|v| v.as_str()), Some("pier 4"));
    /// ```
    pub fn value(&self) -> Option<&Value> {
        match self {
            Outcome::Value(v) => Some(v),
            _ => None,
        }
    }
}

/// A finished run: the outcome and the contractions made, per rule.
///
/// # Examples
///
/// ```
/// # #[cfg(feature = "stepper")] {
/// use orrery::{Limits, MachineKind, Program, Rule};
/// let program = Program::parse("(\\x. x + 1) 41").unwrap();
/// let report = MachineKind::Stepper.run(&program, &Limits::default());
/// assert_eq!(report.outcome.value().unwrap().as_int(), Some(42));
/// assert_eq!(report.counts.get(Rule::Beta), 1);
/// assert_eq!(report.counts.total(), 2);
/// # }
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Report {
    /// How the run ended.
    pub outcome: Outcome,
    /// Contractions made, per rule.
    pub counts: Counts,
    /// Where the run stopped, for every outcome but a value and a fault:
    /// the redex's span and the pending calls (see [`crate::Location`]).
    pub location: Option<crate::Location>,
}

/// An evaluator: one of the machines of SEMANTICS §4. A machine value holds
/// only reusable scratch state (nothing of any program), so it is `Send`:
/// keep one per worker thread. The program and the limits come with each
/// run.
///
/// # Examples
///
/// ```
/// use orrery::{Limits, MachineKind, Program};
/// let program = Program::parse("let tiles = 6 in tiles * 7").unwrap();
/// for kind in MachineKind::enabled() {
///     let mut machine = kind.machine();
///     let report = machine.run(&program, &Limits::default());
///     assert_eq!(report.outcome.value().unwrap().as_int(), Some(42));
///     assert!(machine.peak_bytes() <= Limits::default().memory);
/// }
/// ```
pub trait Machine: Send {
    /// The machine's name (its row in the table).
    fn name(&self) -> &'static str;

    /// Run a program to its outcome.
    fn run(&mut self, program: &Program, limits: &Limits) -> Report;

    /// The most bytes the last run held at once, as the memory limit counts
    /// them.
    fn peak_bytes(&self) -> usize;

    /// Start a run that stops when its fuel runs out and resumes with more,
    /// ending exactly as an uninterrupted run would; `None` for a machine
    /// that cannot pause. Nothing is evaluated until the first resume.
    fn start(&self, program: &Program, limits: &Limits) -> Option<Box<dyn Paused>> {
        let _ = (program, limits);
        None
    }
}

/// A run that pauses when its fuel runs out (see [`Machine::start`]). It
/// owns its state between resumes (and holds its program), so it is
/// `'static`; [`Paused::detach`] makes it [`Detached`], which is `Send`, to
/// move it to another thread.
///
/// # Examples
///
/// ```
/// use orrery::{Limits, MachineKind, Outcome, Program};
/// let program = Program::parse("let rec count n = if n == 0 then 7 else count (n - 1) in count 50").unwrap();
/// for kind in MachineKind::enabled() {
///     let whole = kind.run(&program, &Limits::default());
///     let Some(mut run) = kind.machine().start(&program, &Limits::default().with_fuel(0)) else {
///         continue; // this machine cannot pause
///     };
///     let mut report = run.resume(0);
///     while report.outcome == Outcome::OutOfFuel {
///         report = run.resume(10);
///     }
///     assert_eq!(report, whole);
///     assert!(run.is_finished());
/// }
/// ```
pub trait Paused {
    /// Add `more_fuel` and run until a value, an error, a resource limit, or
    /// the end of the fuel; the report's counts are the run's totals so far.
    /// Once the run has ended, every resume reports the same end.
    fn resume(&mut self, more_fuel: u64) -> Report;

    /// Answer the host call the run is suspended at ([`Outcome::Suspended`])
    /// and resume it: `Ok(datum)` as if the function had returned the datum,
    /// `Err(message)` as if it had failed with that message (a `host_error`).
    /// Fuel for the call is paid now, as for any host call. The answer to a
    /// run that is not suspended is dropped (and this is `resume(0)`).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, HostFunctions, Limits, MachineKind, Outcome, Program};
    /// let mut host = HostFunctions::new();
    /// host.register_suspending("approve", 1).unwrap();
    /// let program = Program::parse_with("if approve \"pallet 12\" then 1 else 0", &host).unwrap();
    /// for kind in MachineKind::enabled() {
    ///     let Some(mut run) = kind.machine().start(&program, &Limits::default()) else {
    ///         continue; // env cannot pause, so it cannot wait
    ///     };
    ///     assert_eq!(run.resume(0).outcome.name(), "suspended");
    ///     let report = run.resume_with(Err("nobody on shift".into()));
    ///     let Outcome::Error(e) = report.outcome else { panic!() };
    ///     assert_eq!(e.message(), "approve: nobody on shift");
    /// }
    /// ```
    fn resume_with(&mut self, answer: Answer) -> Report {
        self.answer(answer);
        self.resume(0)
    }

    /// Give the answer [`Paused::resume_with`] resumes with.
    #[doc(hidden)]
    fn answer(&mut self, answer: Answer);

    /// The run as a [`crate::Snapshot`]: owned data that can be kept,
    /// serialised (with the `snapshot` feature) and restored against the same
    /// program, in this thread or another process. The run itself goes on
    /// unchanged.
    fn snapshot(&self) -> crate::Snapshot;

    /// The contractions made so far.
    fn counts(&self) -> Counts;

    /// The fuel not yet used.
    fn fuel_left(&self) -> u64;

    /// Whether the run has ended (with a value, an error or a limit).
    fn is_finished(&self) -> bool;

    /// The most bytes the run has held at once.
    fn peak_bytes(&self) -> usize;

    /// This run in a form that can move to another thread, in time
    /// proportional to its state; [`Detached::attach`] gives it back.
    fn detach(self: Box<Self>) -> Detached;
}

/// A paused run on its way to another thread (see [`Paused::detach`]):
/// `Send`, holding the run's whole state in a form tied to no thread.
///
/// # Examples
///
/// ```
/// use orrery::{Limits, MachineKind, Outcome, Program};
/// let program = Program::parse("let rec count n = if n == 0 then 7 else count (n - 1) in count 50").unwrap();
/// for kind in MachineKind::enabled() {
///     let Some(mut run) = kind.machine().start(&program, &Limits::default().with_fuel(30)) else {
///         continue;
///     };
///     assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
///     let moved = run.detach();
///     let report = std::thread::spawn(move || moved.attach().resume(1_000)).join().unwrap();
///     assert_eq!(report.outcome.value().unwrap().as_int(), Some(7));
/// }
/// ```
pub struct Detached {
    run: Box<dyn DetachedRun>,
}

impl Detached {
    /// Wrap a machine's detached state.
    #[cfg_attr(not(any(feature = "stepper", feature = "cek")), allow(dead_code))] // env cannot pause
    pub(crate) fn new(run: Box<dyn DetachedRun>) -> Detached {
        Detached { run }
    }

    /// The run again, on this thread, exactly where it paused.
    pub fn attach(self) -> Box<dyn Paused> {
        self.run.attach()
    }
}

impl std::fmt::Debug for Detached {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Detached")
    }
}

/// A machine's paused state in a form that can cross threads.
pub(crate) trait DetachedRun: Send {
    /// The run again, on the calling thread.
    fn attach(self: Box<Self>) -> Box<dyn Paused>;
}

/// How the machine table makes a machine.
///
/// # Examples
///
/// ```
/// # #[cfg(feature = "cek")] {
/// use orrery::machines::{cek::Cek, Build, Machine};
/// assert_eq!(Cek::new().name(), "cek");
/// # }
/// ```
pub trait Build: Machine + Sized + 'static {
    /// A fresh machine.
    fn new() -> Self;

    /// **For benchmarks only.** The machine with every fuel, memory and
    /// cancellation check compiled out, if it has such a build, so a
    /// benchmark can measure what the accounting costs. It computes the same
    /// values and counts but ignores every limit: never give it untrusted
    /// input.
    #[doc(hidden)]
    fn without_accounting() -> Option<Self> {
        None
    }
}
