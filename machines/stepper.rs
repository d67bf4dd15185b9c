//! The reference machine: substitution-based small-step reduction, one
//! contraction per step, found by decomposing the term into an evaluation
//! context and a redex (Plotkin, 1975; Felleisen and Hieb, 1992). After a
//! contraction the search resumes at the hole just filled rather than at the
//! root: refocusing (Danvy and Nielsen, "Refocusing in reduction semantics",
//! 2004).
//!
//! Memory stays proportional to the live term: terms built by substitution go
//! to a bump arena that is compacted (the live term copied out and back, the
//! arena reset) whenever it has handed out eight times the live size, or
//! nears the memory limit.

use smallvec::SmallVec;

use crate::host::{host_step, max_datum_nodes, HostStep, NO_HOST};
use crate::subst::{copy_term, OverBudget, Rebuild};
use crate::{
    delta, Arena, Arm, Cancel, Counts, Datum, EvalError, HostFunctions, HostId, LimitError, Limits,
    Machine, Node, Operand, Outcome, Prim, PrimValue, Program, Report, Rule, Term,
    CANCEL_POLL_INTERVAL,
};

/// The arena is compacted only once it has handed out at least this much (and
/// [`COMPACT_RATIO`] times the live term), so small programs never compact.
const MIN_COMPACT: usize = 1 << 20;

/// The arena is compacted once it has handed out this many times the live
/// term (or when it nears the memory limit, whichever comes first). A
/// contraction allocates several times what the live term grows by (a new
/// copy of a function body, most of it soon garbage), so a small ratio means
/// frequent compactions: at 2 they took 59% of the instructions of a deep
/// non-tail recursion, at 8 about a fifth as many.
const COMPACT_RATIO: usize = 8;

/// Bytes a compaction's memo (a hash map from old node to copy) takes per
/// node: two pointers, a control byte, and the table's spare capacity.
const MEMO_ENTRY_BYTES: usize = 32;

/// The reference substitution stepper. Holds only scratch arenas, reused
/// from run to run.
///
/// # Examples
///
/// ```
/// use orrery::machines::stepper::Stepper;
/// use orrery::{parse, Arena, Limits, Machine, Outcome};
/// let arena = Arena::new();
/// let program = parse(&arena, "let double = \\n. n * 2 in double 21").unwrap();
/// let report = Stepper::new().run(&program, &Limits::default(), &arena);
/// assert_eq!(report.outcome, Outcome::Value(arena.int(42)));
/// assert_eq!(report.counts.total(), 3); // let, beta, prim
/// ```
#[derive(Debug, Default)]
pub struct Stepper {
    main: Arena,
    spare: Arena,
}

/// A frame of the evaluation context, innermost last. Together with the focus
/// they are the decomposition `E[t]` of DESIGN §1.
#[derive(Clone, Copy, Debug)]
enum Frame<'r> {
    /// `□ t`.
    AppFunction(&'r Term<'r>),
    /// `v □`.
    AppArgument(&'r Term<'r>),
    /// `let □ in t`.
    LetBound(&'r Term<'r>),
    /// `if □ then t else u`.
    IfCondition(&'r Term<'r>, &'r Term<'r>),
    /// `op(v…, □, t…)`: the operands and the hole's position; the values to
    /// its left are on the value stack.
    Operand(Prim, &'r [&'r Term<'r>], usize),
    /// `K(v…, □, t…)`: the whole constructor node, its tag and fields, and the
    /// hole's position; the values to its left are on the value stack.
    Field(&'r Term<'r>, &'r str, &'r [&'r Term<'r>], usize),
    /// `case □ of {…}`: the arms and the default arm.
    Scrutinee(&'r [Arm<'r>], Option<&'r Term<'r>>),
}

/// A redex, with the values it was found with.
#[derive(Clone, Copy, Debug)]
enum Redex<'r, 'v> {
    App(&'r Term<'r>, &'r Term<'r>),
    Let(&'r Term<'r>, &'r Term<'r>),
    If(&'r Term<'r>, &'r Term<'r>, &'r Term<'r>),
    Prim(Prim, &'v [&'r Term<'r>]),
    Case(&'r Term<'r>, &'r [Arm<'r>], Option<&'r Term<'r>>),
}

impl<'r> Redex<'r, '_> {
    fn rule(&self) -> Rule {
        match self {
            Redex::App(f, _) if matches!(f.node(), Node::RecLam(_)) => Rule::BetaRec,
            Redex::App(..) => Rule::Beta,
            Redex::Let(..) => Rule::Let,
            Redex::If(..) => Rule::If,
            Redex::Prim(..) => Rule::Prim,
            Redex::Case(..) => Rule::Case,
        }
    }

    /// The redex as a term (for traces).
    fn term(&self, arena: &'r Arena) -> &'r Term<'r> {
        match *self {
            Redex::App(f, v) => arena.app(f, v),
            Redex::Let(v, body) => arena.let_in(v, body),
            Redex::If(v, yes, no) => arena.if_then_else(v, yes, no),
            Redex::Prim(op, values) => arena.prim(op, values),
            Redex::Case(v, arms, default) => arena.case(v, arms, default),
        }
    }
}

/// What a value looks like to a primitive or an error message.
fn operand<'v>(value: &'v Term<'v>) -> Operand<'v> {
    match *value.node() {
        Node::Int(n) => Operand::Int(n),
        Node::Bool(b) => Operand::Bool(b),
        Node::Str(s) => Operand::Str(s),
        Node::Con(tag, _) => Operand::Con(tag),
        _ => Operand::Function,
    }
}

/// The contractum of a redex (DESIGN §1), or the error it is stuck on.
fn contract<'r>(
    arena: &'r Arena,
    rebuild: &mut Rebuild<'r>,
    redex: Redex<'r, '_>,
) -> Result<Result<&'r Term<'r>, EvalError>, OverBudget> {
    Ok(Ok(match redex {
        Redex::App(f, v) => match *f.node() {
            Node::Lam(body) => rebuild.instantiate(body, 0, &[v])?,
            Node::RecLam(body) => rebuild.instantiate(body, 0, &[v, f])?,
            _ => return Ok(Err(EvalError::not_a_function(operand(f)))),
        },
        Redex::Let(v, body) => rebuild.instantiate(body, 0, &[v])?,
        Redex::If(v, yes, no) => match *v.node() {
            Node::Bool(true) => yes,
            Node::Bool(false) => no,
            _ => return Ok(Err(EvalError::not_a_boolean(operand(v)))),
        },
        Redex::Prim(op, values) => {
            let operands: SmallVec<[Operand<'_>; 2]> = values.iter().map(|v| operand(v)).collect();
            match delta(op, &operands) {
                Ok(PrimValue::Int(n)) => arena.int(n),
                Ok(PrimValue::Bool(b)) => arena.boolean(b),
                Ok(PrimValue::Str(s)) => arena.string(&s),
                Err(e) => return Ok(Err(e)),
            }
        }
        Redex::Case(v, arms, default) => {
            if let Node::Con(tag, fields) = *v.node() {
                let arm = arms
                    .iter()
                    .find(|arm| arm.tag == tag && arm.arity as usize == fields.len());
                if let Some(arm) = arm {
                    // Field n is #0: the last field is bound innermost.
                    let values: SmallVec<[&'r Term<'r>; 4]> =
                        fields.iter().rev().copied().collect();
                    return Ok(Ok(rebuild.instantiate(arm.body, 0, &values)?));
                }
            }
            match default {
                Some(d) => d,
                None => return Ok(Err(EvalError::no_matching_case(operand(v)))),
            }
        }
    }))
}

/// Put `focus` back into the context, emptying it: the whole term `E[t]`.
fn plug<'r>(
    arena: &'r Arena,
    ctx: &mut Vec<Frame<'r>>,
    values: &mut Vec<&'r Term<'r>>,
    mut focus: &'r Term<'r>,
) -> &'r Term<'r> {
    while let Some(frame) = ctx.pop() {
        focus = match frame {
            Frame::AppFunction(a) => arena.app(focus, a),
            Frame::AppArgument(f) => arena.app(f, focus),
            Frame::LetBound(body) => arena.let_in(focus, body),
            Frame::IfCondition(yes, no) => arena.if_then_else(focus, yes, no),
            Frame::Operand(op, operands, index) => {
                let args = refill(values, index, focus, &operands[index + 1..]);
                arena.prim(op, &args)
            }
            Frame::Field(_, tag, fields, index) => {
                let args = refill(values, index, focus, &fields[index + 1..]);
                arena.term(Node::Con(tag, arena.terms(&args)))
            }
            Frame::Scrutinee(arms, default) => arena.case(focus, arms, default),
        };
    }
    focus
}

/// The operands of a partly evaluated `op(…)` or `K(…)`: the `done` values
/// from the top of the value stack (which loses them), the hole's filler, and
/// the operands still to evaluate.
fn refill<'r>(
    values: &mut Vec<&'r Term<'r>>,
    done: usize,
    hole: &'r Term<'r>,
    rest: &[&'r Term<'r>],
) -> SmallVec<[&'r Term<'r>; 4]> {
    let base = values.len() - done;
    let mut args: SmallVec<[&'r Term<'r>; 4]> = values.drain(base..).collect();
    args.push(hole);
    args.extend_from_slice(rest);
    args
}

/// How a stretch of reduction between two compactions ended.
enum Segment<'r> {
    Value(&'r Term<'r>),
    Error(EvalError),
    /// Out of fuel before contracting a redex: the whole term at that point.
    OutOfFuel(&'r Term<'r>),
    /// The arena needs compacting; reduction continues from this whole term.
    /// Also says how many bytes the context stacks held.
    Compact(&'r Term<'r>, usize),
    /// One contraction was made and the caller asked to stop there.
    Stepped(&'r Term<'r>),
    Limit(LimitError),
}

/// A callback that sees each contraction's rule and redex.
///
/// # Examples
///
/// ```
/// use orrery::machines::stepper::{Stepper, Tracer};
/// use orrery::{parse, Arena, Limits, Rule};
/// let arena = Arena::new();
/// let program = parse(&arena, "let fee = 3 in fee + 1").unwrap();
/// let mut rules = Vec::new();
/// let tracer: &mut Tracer<'_> = &mut |rule, _redex| rules.push(rule);
/// Stepper::new().run_traced(&program, &Limits::default(), &arena, tracer);
/// assert_eq!(rules, [Rule::Let, Rule::Prim]);
/// ```
pub type Tracer<'t> = dyn FnMut(Rule, &Term<'_>) + 't;

/// Everything a stretch of reduction reads and updates besides the arena.
struct Budget<'t> {
    fuel: u64,
    counts: Counts,
    /// The program's host functions.
    host: &'t HostFunctions,
    /// The cancellation handle, if any, and contractions until the next look.
    cancel: Option<&'t Cancel>,
    until_poll: u64,
    memory: usize,
    /// Bytes held outside the main arena (the spare arena).
    elsewhere: usize,
    /// Compact once the main arena has handed out this much.
    compact_at: usize,
    stop_after_one: bool,
    trace: Option<&'t mut Tracer<'t>>,
}

impl<'t> Budget<'t> {
    /// A budget of `fuel` for a run calling `host` under `limits`.
    fn new(host: &'t HostFunctions, limits: &'t Limits, fuel: u64, counts: Counts) -> Self {
        Budget {
            fuel,
            counts,
            host,
            cancel: limits.cancel.as_ref(),
            until_poll: 0,
            memory: limits.memory,
            elsewhere: 0,
            compact_at: MIN_COMPACT,
            stop_after_one: false,
            trace: None,
        }
    }

    /// Whether the run has been cancelled; looks at the handle once every
    /// [`CANCEL_POLL_INTERVAL`] calls (the first included).
    #[inline]
    fn cancelled(&mut self) -> bool {
        if self.until_poll > 0 {
            self.until_poll -= 1;
            return false;
        }
        self.until_poll = CANCEL_POLL_INTERVAL - 1;
        self.cancel.is_some_and(Cancel::is_cancelled)
    }
}

/// Reduce from `start` with refocusing until a value, an error, the end of
/// the fuel, or the need to compact.
fn reduce<'r>(arena: &'r Arena, start: &'r Term<'r>, budget: &mut Budget<'_>) -> Segment<'r> {
    let mut ctx: Vec<Frame<'r>> = Vec::new();
    let mut values: Vec<&'r Term<'r>> = Vec::new();
    let mut rebuild = Rebuild::new(arena, budget.memory.saturating_sub(budget.elsewhere));
    let mut focus = start;
    loop {
        // Search for the redex, from the hole outward (refocusing): first
        // down through the focus while it is not a value...
        if !focus.is_value() {
            match *focus.node() {
                Node::App(function, argument) => {
                    ctx.push(Frame::AppFunction(argument));
                    focus = function;
                    continue;
                }
                Node::Let(bound, body) => {
                    ctx.push(Frame::LetBound(body));
                    focus = bound;
                    continue;
                }
                Node::If(condition, yes, no) => {
                    ctx.push(Frame::IfCondition(yes, no));
                    focus = condition;
                    continue;
                }
                Node::Prim(op, operands) => {
                    if let Some(first) = operands.first() {
                        ctx.push(Frame::Operand(op, operands, 0));
                        focus = first;
                        continue;
                    }
                    match contract_one(arena, &mut rebuild, Redex::Prim(op, &[]), budget) {
                        Ok(next) => focus = next,
                        Err(Halt::OutOfFuel) => {
                            return Segment::OutOfFuel(plug(arena, &mut ctx, &mut values, focus))
                        }
                        Err(Halt::End(end)) => return end,
                    }
                    continue;
                }
                Node::Con(tag, fields) => {
                    if let Some(first) = fields.first() {
                        ctx.push(Frame::Field(focus, tag, fields, 0));
                        focus = first;
                        continue;
                    }
                }
                Node::Case(scrutinee, arms, default) => {
                    ctx.push(Frame::Scrutinee(arms, default));
                    focus = scrutinee;
                    continue;
                }
                Node::Var(index) => {
                    return Segment::Error(EvalError::new(
                        crate::ErrorKind::TypeMismatch,
                        format!("free variable #{index} in a program that should be closed"),
                    ))
                }
                // Values: handled below.
                Node::Lam(_) | Node::RecLam(_) | Node::Int(_) | Node::Bool(_) | Node::Str(_) => {}
            }
        }
        // ... then, with a value in the hole, out through the context.
        let mut consumed = None;
        let redex = match ctx.pop() {
            None => return Segment::Value(focus),
            Some(Frame::AppFunction(argument)) => {
                ctx.push(Frame::AppArgument(focus));
                focus = argument;
                continue;
            }
            Some(Frame::AppArgument(function)) => Redex::App(function, focus),
            Some(Frame::LetBound(body)) => Redex::Let(focus, body),
            Some(Frame::IfCondition(yes, no)) => Redex::If(focus, yes, no),
            Some(Frame::Scrutinee(arms, default)) => Redex::Case(focus, arms, default),
            Some(Frame::Operand(op, operands, index)) => {
                values.push(focus);
                if let Some(next) = operands.get(index + 1) {
                    ctx.push(Frame::Operand(op, operands, index + 1));
                    focus = next;
                    continue;
                }
                // The operands stay on the value stack until the contraction
                // has read them.
                let base = values.len() - operands.len();
                consumed = Some(base);
                Redex::Prim(op, &values[base..])
            }
            Some(Frame::Field(node, tag, fields, index)) => {
                values.push(focus);
                if let Some(next) = fields.get(index + 1) {
                    ctx.push(Frame::Field(node, tag, fields, index + 1));
                    focus = next;
                    continue;
                }
                // A constructor of values is a value: building it is free.
                let base = values.len() - fields.len();
                let unchanged = values[base..]
                    .iter()
                    .zip(fields)
                    .all(|(v, f)| std::ptr::eq(*v, *f));
                focus = if unchanged {
                    node
                } else {
                    arena.term(Node::Con(tag, arena.terms(&values[base..])))
                };
                values.truncate(base);
                continue;
            }
        };
        let contracted = contract_one(arena, &mut rebuild, redex, budget);
        if let Err(Halt::OutOfFuel) = contracted {
            // Put the redex back where it was found, for a later resume.
            let redex = redex.term(arena);
            if let Some(base) = consumed {
                values.truncate(base);
            }
            return Segment::OutOfFuel(plug(arena, &mut ctx, &mut values, redex));
        }
        if let Some(base) = consumed {
            values.truncate(base);
        }
        match contracted {
            Ok(contractum) => {
                focus = contractum;
                if budget.stop_after_one {
                    return Segment::Stepped(plug(arena, &mut ctx, &mut values, focus));
                }
                let stacks = ctx.capacity() * std::mem::size_of::<Frame<'_>>()
                    + values.capacity() * std::mem::size_of::<&Term<'_>>();
                let held = arena.allocated_bytes() + budget.elsewhere + stacks;
                if arena.used_bytes() > budget.compact_at || held > budget.memory {
                    let whole = plug(arena, &mut ctx, &mut values, focus);
                    return Segment::Compact(whole, stacks);
                }
            }
            Err(Halt::OutOfFuel) => return Segment::OutOfFuel(focus),
            Err(Halt::End(end)) => return end,
        }
    }
}

/// Why [`contract_one`] made no contraction, or ended the segment.
enum Halt<'r> {
    /// Not enough fuel for the contraction; nothing was used.
    OutOfFuel,
    /// The contraction was attempted and ended the run.
    End(Segment<'r>),
}

/// Make one contraction: take its unit of fuel, count it, trace it, contract.
fn contract_one<'r>(
    arena: &'r Arena,
    rebuild: &mut Rebuild<'r>,
    redex: Redex<'r, '_>,
    budget: &mut Budget<'_>,
) -> Result<&'r Term<'r>, Halt<'r>> {
    if budget.cancelled() {
        return Err(Halt::End(Segment::Limit(LimitError::cancelled())));
    }
    if let Redex::Prim(Prim::Host(id), values) = redex {
        return host_contraction(arena, id, values, budget);
    }
    if budget.fuel == 0 {
        return Err(Halt::OutOfFuel);
    }
    budget.fuel -= 1;
    let rule = redex.rule();
    budget.counts.add(rule);
    if let Some(trace) = budget.trace.as_mut() {
        trace(rule, redex.term(arena));
    }
    match contract(arena, rebuild, redex) {
        Ok(Ok(contractum)) => Ok(contractum),
        Ok(Err(error)) => Err(Halt::End(Segment::Error(error))),
        Err(OverBudget) => Err(Halt::End(Segment::Limit(LimitError::memory(budget.memory)))),
    }
}

/// A host function's contraction, in the order [`HostStep`] fixes.
fn host_contraction<'r>(
    arena: &'r Arena,
    id: HostId,
    values: &[&'r Term<'r>],
    budget: &mut Budget<'_>,
) -> Result<&'r Term<'r>, Halt<'r>> {
    let max_nodes = max_datum_nodes(budget.memory);
    let args = if budget.fuel == 0 {
        Ok(Vec::new())
    } else {
        values
            .iter()
            .map(|v| Datum::read_term(v, max_nodes))
            .collect()
    };
    match host_step(budget.host, id, args, budget.fuel) {
        HostStep::OutOfFuel => Err(Halt::OutOfFuel),
        HostStep::TooLarge => Err(Halt::End(Segment::Limit(LimitError::memory(budget.memory)))),
        HostStep::Made { fuel, result } => {
            budget.fuel -= fuel;
            budget.counts.add(Rule::Prim);
            budget.counts.add_extra_fuel(fuel - 1);
            if let Some(trace) = budget.trace.as_mut() {
                trace(Rule::Prim, arena.prim(Prim::Host(id), values));
            }
            match result {
                Ok(datum) => Ok(datum.to_term(arena)),
                Err(error) => Err(Halt::End(Segment::Error(error))),
            }
        }
    }
}

/// The result of [`step`]: one contraction of a closed term.
#[derive(Clone, Debug)]
///
/// # Examples
///
/// ```
/// use orrery::machines::stepper::{step, Step};
/// use orrery::{parse_term, Arena, ErrorKind, Rule};
/// let arena = Arena::new();
/// assert!(matches!(step(&arena, arena.int(5)), Step::Value));
/// let t = parse_term(&arena, "let boxes = 0 in 12 / boxes").unwrap();
/// let Step::Contracted { next, .. } = step(&arena, t) else { panic!() };
/// let Step::Stuck { rule, error, .. } = step(&arena, next) else { panic!() };
/// assert_eq!((rule, error.kind()), (Rule::Prim, ErrorKind::DivisionByZero));
/// ```
pub enum Step<'r> {
    /// The term is a value: nothing to contract.
    Value,
    /// One contraction under `rule` of `redex` gave the whole term `next`.
    Contracted {
        /// The rule applied.
        rule: Rule,
        /// The redex, as a term.
        redex: &'r Term<'r>,
        /// The whole term after the contraction.
        next: &'r Term<'r>,
    },
    /// The redex is stuck: the contraction under `rule` failed.
    Stuck {
        /// The rule attempted.
        rule: Rule,
        /// The redex, as a term.
        redex: &'r Term<'r>,
        /// Why it is stuck.
        error: EvalError,
    },
}

/// Make one contraction of the closed term `term`, decomposing it from the
/// root. New nodes go to `arena`. For long runs use [`Stepper`], which does
/// not re-walk the term from the root after each step.
///
/// # Examples
///
/// ```
/// use orrery::machines::stepper::{step, Step};
/// use orrery::{parse_term, print, Arena, Rule};
/// let arena = Arena::new();
/// let t = parse_term(&arena, "(\\x. x * x) (1 + 2)").unwrap();
/// let Step::Contracted { rule, next, .. } = step(&arena, t) else { panic!() };
/// assert_eq!(rule, Rule::Prim);
/// assert_eq!(print(next), "(\\a. a * a) 3");
/// ```
pub fn step<'r>(arena: &'r Arena, term: &'r Term<'r>) -> Step<'r> {
    let mut seen: Option<(Rule, &'r Term<'r>)> = None;
    let mut record = |rule: Rule, redex: &Term<'_>| {
        seen = Some((rule, arena.copy_term(redex)));
    };
    let limits = Limits::default().with_memory(usize::MAX);
    let mut budget = Budget::new(&NO_HOST, &limits, 1, Counts::default());
    budget.compact_at = usize::MAX;
    budget.stop_after_one = true;
    budget.trace = Some(&mut record);
    let end = reduce(arena, term, &mut budget);
    match (end, seen) {
        (Segment::Stepped(next), Some((rule, redex))) => Step::Contracted { rule, redex, next },
        (Segment::Error(error), Some((rule, redex))) => Step::Stuck { rule, redex, error },
        _ => Step::Value,
    }
}

impl Stepper {
    /// A stepper with empty scratch arenas.
    ///
    /// # Examples
    ///
    /// ```
    /// let _stepper = orrery::machines::stepper::Stepper::new();
    /// ```
    pub fn new() -> Self {
        Stepper::default()
    }

    /// Run like [`Machine::run`], calling `trace` with each contraction's rule
    /// and redex as it is made (attempts that fail included).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{parse, print, Arena, Limits, Rule};
    /// let arena = Arena::new();
    /// let program = parse(&arena, "if 1 < 2 then \"yes\" else \"no\"").unwrap();
    /// let mut lines = Vec::new();
    /// Stepper::new().run_traced(&program, &Limits::default(), &arena, &mut |rule, redex| {
    ///     lines.push(format!("{rule}: {}", print(redex)));
    /// });
    /// assert_eq!(lines, ["prim: 1 < 2", "if: if true then \"yes\" else \"no\""]);
    /// ```
    pub fn run_traced<'a: 'o, 'o>(
        &mut self,
        program: &Program<'a>,
        limits: &Limits,
        out: &'o Arena,
        trace: &mut dyn FnMut(Rule, &Term<'_>),
    ) -> Report<'o> {
        self.run_with(program, limits, out, Some(trace))
    }

    fn run_with<'a: 'o + 't, 'o, 't>(
        &mut self,
        program: &Program<'a>,
        limits: &'t Limits,
        out: &'o Arena,
        trace: Option<&'t mut Tracer<'t>>,
    ) -> Report<'o> {
        let mut budget = Budget::new(program.host(), limits, limits.fuel, Counts::default());
        budget.trace = trace;
        let outcome = match self.drive(program.term(), &mut budget, out) {
            Drive::Done(outcome) => outcome,
            Drive::Paused(_) => Outcome::OutOfFuel,
        };
        Report {
            outcome,
            counts: budget.counts,
        }
    }

    /// Reduce `start` under `budget`, compacting as needed, until it ends or
    /// runs out of fuel; a paused term is copied into `out`.
    fn drive<'o, 's>(
        &mut self,
        start: &'s Term<'s>,
        budget: &mut Budget<'_>,
        out: &'o Arena,
    ) -> Drive<'o> {
        let main = &mut self.main;
        let spare = &mut self.spare;
        main.reset();
        spare.reset();
        let memory = budget.memory;
        let mut live: &Term<'_> = start;
        let outcome = loop {
            budget.elsewhere = spare.allocated_bytes();
            match reduce(main, live, budget) {
                Segment::Value(v) => break Outcome::Value(out.copy_term(v)),
                Segment::Error(e) => break Outcome::Error(e),
                Segment::OutOfFuel(whole) => return Drive::Paused(out.copy_term(whole)),
                Segment::Stepped(_) => break Outcome::OutOfFuel,
                Segment::Limit(l) => break Outcome::Limit(l),
                Segment::Compact(whole, stacks) => {
                    // Both copies and the context exist at this moment: the
                    // peak of the accounting.
                    spare.reset();
                    let (moved, nodes) = copy_term(spare, whole);
                    // The copy's memo of shared nodes lives until now too.
                    let memo = nodes.saturating_mul(MEMO_ENTRY_BYTES);
                    if main.allocated_bytes() + spare.allocated_bytes() + stacks + memo > memory {
                        break Outcome::Limit(LimitError::memory(memory));
                    }
                    main.reset();
                    live = copy_term(main, moved).0;
                    let live_bytes = nodes * std::mem::size_of::<Term<'_>>();
                    // Compact again after COMPACT_RATIO times the live term,
                    // but by half the limit at the latest, so the arena that
                    // is compacted and its copy fit under the limit together.
                    budget.compact_at = MIN_COMPACT.max(COMPACT_RATIO * live_bytes).min(memory / 2);
                }
            }
        };
        Drive::Done(outcome)
    }

    /// Start a run of `program` that stops when its fuel runs out and can be
    /// resumed with more, ending exactly as an uninterrupted run would (the
    /// same outcome and counts). Nothing runs until
    /// [`StepperRun::resume`].
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{parse, Arena, Limits, Machine, Outcome};
    /// let arena = Arena::new();
    /// let program = parse(&arena, "let rec count n = if n == 0 then 7 else count (n - 1) in count 50").unwrap();
    /// let whole = Stepper::new().run(&program, &Limits::default(), &arena);
    /// let mut run = Stepper::start(&program, &Limits::default().with_fuel(0));
    /// let mut pauses = 0;
    /// let outcome = loop {
    ///     match run.resume(10, &arena).outcome {
    ///         Outcome::OutOfFuel => pauses += 1,
    ///         other => break other,
    ///     }
    /// };
    /// assert_eq!(outcome, whole.outcome);
    /// assert_eq!(run.counts(), whole.counts);
    /// assert_eq!(pauses as u64, whole.counts.total() / 10);
    /// ```
    pub fn start<'r>(program: &Program<'r>, limits: &Limits) -> StepperRun<'r> {
        StepperRun {
            scratch: Stepper::new(),
            host: program.host(),
            limits: limits.clone(),
            live: program.term(),
            fuel_left: limits.fuel,
            counts: Counts::default(),
            end: None,
        }
    }
}

/// How [`Stepper::drive`] stopped.
enum Drive<'o> {
    Done(Outcome<'o>),
    /// Out of fuel, with the whole term at that point.
    Paused(&'o Term<'o>),
}

/// A stepper run that pauses when its fuel runs out (see [`Stepper::start`]).
/// Between resumes it holds the whole current term in the arena the last
/// resume was given, so each pause costs a copy of the live term there.
#[derive(Debug)]
///
/// # Examples
///
/// ```
/// use orrery::machines::stepper::Stepper;
/// use orrery::{parse, Arena, Limits, Outcome};
/// let arena = Arena::new();
/// let program = parse(&arena, "let stock = 40 in stock - 15").unwrap();
/// let mut run = Stepper::start(&program, &Limits::default().with_fuel(1));
/// assert_eq!(run.resume(0, &arena).outcome, Outcome::OutOfFuel);
/// assert_eq!(run.resume(1, &arena).outcome, Outcome::Value(arena.int(25)));
/// ```
pub struct StepperRun<'r> {
    scratch: Stepper,
    host: &'r HostFunctions,
    limits: Limits,
    live: &'r Term<'r>,
    fuel_left: u64,
    counts: Counts,
    end: Option<Outcome<'r>>,
}

impl<'r> StepperRun<'r> {
    /// Add `more_fuel` and run on until the program ends or the fuel runs out
    /// again. Once the run has ended, every resume reports the same end.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{parse, Arena, Limits, Outcome};
    /// let arena = Arena::new();
    /// let program = parse(&arena, "(1 + 2) * (3 + 4)").unwrap();
    /// let mut run = Stepper::start(&program, &Limits::default().with_fuel(2));
    /// assert_eq!(run.resume(0, &arena).outcome, Outcome::OutOfFuel);
    /// assert_eq!(run.resume(1, &arena).outcome, Outcome::Value(arena.int(21)));
    /// assert_eq!(run.counts().total(), 3);
    /// ```
    pub fn resume(&mut self, more_fuel: u64, out: &'r Arena) -> Report<'r> {
        if let Some(outcome) = &self.end {
            return Report {
                outcome: outcome.clone(),
                counts: self.counts,
            };
        }
        self.fuel_left = self.fuel_left.saturating_add(more_fuel);
        let mut budget = Budget::new(self.host, &self.limits, self.fuel_left, self.counts);
        let outcome = match self.scratch.drive(self.live, &mut budget, out) {
            Drive::Paused(whole) => {
                self.live = whole;
                Outcome::OutOfFuel
            }
            Drive::Done(outcome) => {
                self.end = Some(outcome.clone());
                outcome
            }
        };
        self.fuel_left = budget.fuel;
        self.counts = budget.counts;
        Report {
            outcome,
            counts: self.counts,
        }
    }

    /// Contractions made so far.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{parse, Arena, Limits, Rule};
    /// let arena = Arena::new();
    /// let program = parse(&arena, "(1 + 2) * (3 + 4)").unwrap();
    /// let mut run = Stepper::start(&program, &Limits::default().with_fuel(2));
    /// run.resume(0, &arena);
    /// assert_eq!(run.counts().get(Rule::Prim), 2);
    /// ```
    pub fn counts(&self) -> Counts {
        self.counts
    }

    /// Fuel not yet used.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{parse, Arena, Limits};
    /// let arena = Arena::new();
    /// let program = parse(&arena, "(1 + 2) * (3 + 4)").unwrap();
    /// let mut run = Stepper::start(&program, &Limits::default().with_fuel(10));
    /// run.resume(0, &arena);
    /// assert_eq!(run.fuel_left(), 10 - 3);
    /// ```
    pub fn fuel_left(&self) -> u64 {
        self.fuel_left
    }

    /// Whether the run has ended (with a value, an error or a limit).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{parse, Arena, Limits};
    /// let arena = Arena::new();
    /// let program = parse(&arena, "if 2 < 3 then 1 else 0").unwrap();
    /// let mut run = Stepper::start(&program, &Limits::default().with_fuel(1));
    /// run.resume(0, &arena);
    /// assert!(!run.is_finished());
    /// run.resume(1, &arena);
    /// assert!(run.is_finished());
    /// ```
    pub fn is_finished(&self) -> bool {
        self.end.is_some()
    }
}

impl Machine for Stepper {
    fn name(&self) -> &'static str {
        "stepper"
    }

    fn run<'a: 'o, 'o>(
        &mut self,
        program: &Program<'a>,
        limits: &Limits,
        out: &'o Arena,
    ) -> Report<'o> {
        self.run_with(program, limits, out, None)
    }
}
