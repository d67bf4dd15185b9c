//! The reference machine: substitution-based small-step reduction, one
//! contraction per step, found by decomposing the term into an evaluation
//! context and a redex (Plotkin, 1975; Felleisen and Hieb, 1992). After a
//! contraction the search resumes at the hole just filled rather than at the
//! root: refocusing (Danvy and Nielsen, "Refocusing in reduction semantics",
//! 2004).
//!
//! Memory stays proportional to the live term: terms built by substitution go
//! to a bump arena that is compacted (the live term copied out and back, the
//! arena reset) whenever it has grown to twice the live size.

use smallvec::SmallVec;

use crate::subst::{copy_term, OverBudget, Rebuild};
use crate::{
    delta, Arena, Arm, Counts, EvalError, LimitError, Limits, Machine, Node, Operand, Outcome,
    Prim, PrimValue, Program, Report, Rule, Term,
};

/// The arena is compacted once it holds at least this much beyond the live
/// term (and twice the live term), so small programs never compact.
const MIN_COMPACT: usize = 1 << 20;

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
    OutOfFuel,
    /// The arena needs compacting; reduction continues from this whole term.
    /// Also says how many bytes the context stacks held.
    Compact(&'r Term<'r>, usize),
    /// One contraction was made and the caller asked to stop there.
    Stepped(&'r Term<'r>),
    Limit(LimitError),
}

/// A callback that sees each contraction's rule and redex.
pub type Tracer<'t> = dyn FnMut(Rule, &Term<'_>) + 't;

/// Everything a stretch of reduction reads and updates besides the arena.
struct Budget<'t> {
    fuel: u64,
    counts: Counts,
    memory: usize,
    /// Bytes held outside the main arena (the spare arena).
    elsewhere: usize,
    /// Compact once the main arena has handed out this much.
    compact_at: usize,
    stop_after_one: bool,
    trace: Option<&'t mut Tracer<'t>>,
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
                        Err(end) => return end,
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
            Err(end) => return end,
        }
    }
}

/// Make one contraction: take its unit of fuel, count it, trace it, contract.
fn contract_one<'r>(
    arena: &'r Arena,
    rebuild: &mut Rebuild<'r>,
    redex: Redex<'r, '_>,
    budget: &mut Budget<'_>,
) -> Result<&'r Term<'r>, Segment<'r>> {
    if budget.fuel == 0 {
        return Err(Segment::OutOfFuel);
    }
    budget.fuel -= 1;
    let rule = redex.rule();
    budget.counts.add(rule);
    if let Some(trace) = budget.trace.as_mut() {
        trace(rule, redex.term(arena));
    }
    match contract(arena, rebuild, redex) {
        Ok(Ok(contractum)) => Ok(contractum),
        Ok(Err(error)) => Err(Segment::Error(error)),
        Err(OverBudget) => Err(Segment::Limit(LimitError::memory(budget.memory))),
    }
}

/// The result of [`step`]: one contraction of a closed term.
#[derive(Clone, Debug)]
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
    let mut budget = Budget {
        fuel: 1,
        counts: Counts::default(),
        memory: usize::MAX,
        elsewhere: 0,
        compact_at: usize::MAX,
        stop_after_one: true,
        trace: Some(&mut record),
    };
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

    fn run_with<'a: 'o, 'o, 't>(
        &mut self,
        program: &Program<'a>,
        limits: &Limits,
        out: &'o Arena,
        trace: Option<&'t mut Tracer<'t>>,
    ) -> Report<'o> {
        let main = &mut self.main;
        let spare = &mut self.spare;
        main.reset();
        spare.reset();
        let mut budget = Budget {
            fuel: limits.fuel,
            counts: Counts::default(),
            memory: limits.memory,
            elsewhere: 0,
            compact_at: MIN_COMPACT,
            stop_after_one: false,
            trace,
        };
        let mut live: &Term<'_> = program.term();
        let outcome = loop {
            budget.elsewhere = spare.allocated_bytes();
            match reduce(main, live, &mut budget) {
                Segment::Value(v) => break Outcome::Value(out.copy_term(v)),
                Segment::Error(e) => break Outcome::Error(e),
                Segment::OutOfFuel | Segment::Stepped(_) => break Outcome::OutOfFuel,
                Segment::Limit(l) => break Outcome::Limit(l),
                Segment::Compact(whole, stacks) => {
                    // Both copies and the context exist at this moment: the
                    // peak of the accounting.
                    spare.reset();
                    let (moved, nodes) = copy_term(spare, whole);
                    if main.allocated_bytes() + spare.allocated_bytes() + stacks > limits.memory {
                        break Outcome::Limit(LimitError::memory(limits.memory));
                    }
                    main.reset();
                    live = copy_term(main, moved).0;
                    let live_bytes = nodes * std::mem::size_of::<Term<'_>>();
                    budget.compact_at = MIN_COMPACT.max(2 * live_bytes);
                }
            }
        };
        Report {
            outcome,
            counts: budget.counts,
        }
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
