//! The env machine's interpreter: big-step evaluation (natural semantics,
//! Kahn, "Natural semantics", 1987) of the compiled code, with an explicit
//! task stack in place of native recursion, frames and intermediate values
//! on one value stack, tail calls replacing the caller's frame, and curried
//! functions applied eval/apply style (Marlow and Peyton Jones, "Making a
//! fast curry", 2004).
//!
//! Every growth of the value, task and caller stacks is checked against the
//! memory limit before it happens (only when a push would reallocate), every
//! cell when it is made (large ones before), every string before it is made.

use std::mem::size_of;
use std::rc::Rc;

use super::compile::{broken, grow, Atom, CodeId, Compiled, Function, Instr, Span};
use crate::error::EvalError;
use crate::vocabulary::{Counts, Rule};
use crate::budget::{Budget, Halt};
use crate::prim::HostId;
use crate::image::{INode, Id, Image, Tags, NONE};
use crate::machines::runtime::host::host_call;
use crate::machines::runtime::prims::{int_prim, int_test, prim_contraction};
use crate::machines::runtime::readback::read_back;
use crate::machines::runtime::value::{
    cut, data_field, recycle, Closure, Code, ConCell, Meter, Value, Values, KEEP_STACK_BYTES,
};
use crate::prim::Prim;

use crate::span::Trail;
use crate::{HostFunctions, Limits};

/// `$e`'s value, or a return of its halt with the stop recorded at image
/// node `$node` (evaluated only then, off the hot path).
macro_rules! at {
    ($run:ident, $e:expr, $node:expr) => {
        match $e {
            Ok(v) => v,
            Err(halt) => return Err($run.stopped(halt, $node)),
        }
    };
}

impl Code for &Function {
    #[inline(always)]
    fn func(&self) -> u32 {
        self.func
    }
}

/// A runtime value of this machine: closures point at compiled functions.
type Val<'c> = Value<&'c Function>;

/// A closure of this machine.
type Fun<'c> = Closure<&'c Function>;

/// Cells of more values than this are checked against the memory limit
/// before they are made, and their copying is accounted as work.
const LARGE: usize = 64;

/// What a call returns instead of a body when it has pushed its value (a
/// partial application).
const PUSHED: CodeId = crate::image::NONE;

/// Pending work, packed in one word: what to do, and the instruction it
/// concerns (whose operands say the rest).
#[derive(Clone, Copy, Debug)]
pub(super) struct Task(u64);

impl Task {
    /// Evaluate the instruction, leaving its value on the stack.
    const EVAL: u64 = 0;
    /// Apply the function under the argument on top of the stack.
    const CALL: u64 = 1;
    /// The same, in tail position: the callee's frame replaces the caller's.
    const TAIL_CALL: u64 = 2;
    /// `Instr::Let`: bind the value on top and evaluate the body.
    const BIND: u64 = 3;
    /// `Instr::If`: branch on the boolean on top.
    const BRANCH: u64 = 4;
    /// `Instr::Prim`: apply the primitive to the values on top.
    const PRIM: u64 = 5;
    /// `Instr::Con`: make a constructor of the values on top.
    const BUILD: u64 = 6;
    /// `Instr::Case`: match the value on top against the arms.
    const MATCH: u64 = 7;
    /// A call has returned: pop its frame from under the value on top and
    /// make the caller's current again.
    const RETURN: u64 = 8;
    /// `Instr::AppAtomArgument`: apply the function on top to the atom.
    const CALL_ATOM: u64 = 9;
    /// `Instr::AppN`: argument `index` is on top; contract its application
    /// and go on with the next.
    const SPINE_ARG: u64 = 10;
    /// Push argument `code` of the program (see `Program::apply`).
    const PUSH_ARG: u64 = 11;

    #[inline(always)]
    fn new(kind: u64, code: CodeId) -> Task {
        Task(kind | u64::from(code) << 8)
    }

    /// A task that also carries an index below 2²⁴.
    #[inline(always)]
    fn indexed(kind: u64, code: CodeId, index: u32) -> Task {
        Task(kind | u64::from(code) << 8 | u64::from(index) << 40)
    }

    #[inline(always)]
    fn kind(self) -> u64 {
        self.0 & 0xff
    }

    #[inline(always)]
    fn code(self) -> CodeId {
        (self.0 >> 8) as CodeId
    }

    #[inline(always)]
    fn index(self) -> u32 {
        (self.0 >> 40) as u32
    }
}

/// The frame and closure of a caller waiting for a call to return. The
/// application that called the caller (its call mark; [`NONE`] at the top
/// level) is kept by the `RETURN` task pushed with it.
struct Caller<'c> {
    base: usize,
    closure: Option<Rc<Fun<'c>>>,
}

/// The emptied stacks of the last run, kept for the next. Their element
/// types borrow a compiled program, so they are kept as vectors of a
/// same-sized stand-in and [`recycle`]d.
#[derive(Debug, Default)]
pub(super) struct Stacks {
    pub(super) stack: Vec<[usize; 2]>,
    tasks: Vec<Task>,
    callers: Vec<[usize; 2]>,
}

/// The state of one run.
pub(super) struct Interpreter<'c, 'h, const METERED: bool> {
    code: &'c Compiled,
    image: &'c Image,
    host: &'h HostFunctions,
    /// Frames (each its function's `frame` slots, from `base`) and
    /// intermediate values.
    stack: Vec<Val<'c>>,
    tasks: Vec<Task>,
    callers: Vec<Caller<'c>>,
    /// Where the current frame starts.
    base: usize,
    /// The current function's closure (`None` at the top level).
    closure: Option<Rc<Fun<'c>>>,
    /// The application whose call entered the bottom caller's function
    /// (the current one while no caller waits; [`NONE`] at the top level):
    /// the site of every other call is kept in the `RETURN` task that
    /// waits for it (see [`Interpreter::trail`]).
    site: CodeId,
    /// Where the run stopped, once it has: the redex's image node.
    redex: Id,
    /// Whether the second of two contractions paid together is the one
    /// the fuel ran out before.
    second: bool,
    /// The run's budget, moved in for the run (one indirection less on
    /// every contraction) and handed back at its end.
    budget: Budget,
    /// Contractions counted here rather than in the budget (whose counts
    /// saturate): merged into it at the end. Contractions are paid for, so
    /// under a fuel bound they cannot pass `u64::MAX`.
    counts: [u64; 6],
    tags: Tags,
    /// Bytes of tags host functions made up.
    tag_bytes: usize,
    meter: Meter,
    /// The data the program is applied to, as values.
    args: Vec<Val<'c>>,
}

impl<'c, 'h, const METERED: bool> Interpreter<'c, 'h, METERED> {
    /// Run `code` to its value and read it back as an owned value, with the
    /// stacks of `stacks` (emptied and kept again afterwards). The image and
    /// the compiled code are the program's and not counted. A run that
    /// stops without a value also gives where it stopped.
    pub(super) fn evaluate(
        code: &'c Compiled,
        image: &'c Image,
        host: &'h HostFunctions,
        args: &[crate::Datum<'static>],
        budget: &mut Budget,
        stacks: &mut Stacks,
    ) -> (Result<crate::Value, Halt>, Option<Trail>) {
        let kept = std::mem::take(stacks);
        let mut run = Interpreter::<METERED> {
            code,
            image,
            host,
            stack: recycle(kept.stack),
            tasks: kept.tasks,
            callers: recycle(kept.callers),
            base: 0,
            closure: None,
            site: NONE,
            redex: NONE,
            second: false,
            budget: std::mem::replace(budget, Budget::new(&Limits::default())),
            counts: [0; 6],
            tags: Tags::default(),
            tag_bytes: 0,
            meter: Meter::holding(0),
            args: Vec::new(),
        };
        run.tasks.clear();
        let result = run.take_args(args).and_then(|()| run.execute()).and_then(|value| {
            let held = run.held();
            read_back(&value, image, &run.tags, host, &mut run.budget, held)
        });
        let trail = result.is_err().then(|| run.trail());
        *budget = std::mem::replace(&mut run.budget, Budget::new(&Limits::default()));
        let mut by_rule = budget.counts.to_array();
        for (n, mine) in by_rule.iter_mut().zip(run.counts) {
            *n = n.saturating_add(mine);
        }
        let extra = budget.counts.extra_fuel();
        budget.counts = Counts::from_array(by_rule);
        budget.counts.add_extra_fuel(extra);
        // Drop what the run still holds before its stacks are kept.
        run.closure = None;
        run.args.clear();
        run.stack.clear();
        run.callers.clear();
        run.tasks.clear();
        if run.tasks.capacity() * size_of::<Task>() > KEEP_STACK_BYTES {
            run.tasks = Vec::new();
        }
        *stacks = Stacks {
            stack: recycle(run.stack),
            tasks: run.tasks,
            callers: recycle(run.callers),
        };
        (result, trail)
    }

    /// The program's argument data as values, their cells charged like any
    /// other (and their size counted as work).
    fn take_args(&mut self, args: &[crate::Datum<'static>]) -> Result<(), Halt> {
        for arg in args {
            // Refused before any cell is made if it cannot fit.
            let need = crate::machines::runtime::host::cells_bytes::<&'c Function>(arg);
            let held = self.held();
            self.budget.check_memory(held.saturating_add(need))?;
            let (value, new_tags) = crate::machines::runtime::host::from_datum(arg, self.image, &self.tags);
            self.tags.append(new_tags);
            self.tag_bytes = self.tags.bytes();
            self.args.push(value);
            let held = self.held();
            self.budget.check_memory(held)?;
        }
        Ok(())
    }

    /// Bytes held now: stacks by capacity, live cells and made-up tags.
    #[inline]
    fn held(&self) -> usize {
        self.tag_bytes
            + self.stack.capacity() * size_of::<Val<'_>>()
            + self.tasks.capacity() * size_of::<Task>()
            + self.callers.capacity() * size_of::<Caller<'_>>()
            + self.meter.cells()
    }

    /// Record what the run holds now; `Err` past the limit.
    #[inline]
    fn check_memory(&mut self) -> Result<(), Halt> {
        if !METERED {
            return Ok(());
        }
        let held = self.held();
        self.budget.check_memory(held)
    }

    /// `Err` if a cell of `values` values would pass the limit (checked
    /// before a large cell is made), with the copying accounted as work.
    #[cold]
    #[inline(never)]
    fn before_large_cell(&mut self, values: usize) -> Result<(), Halt> {
        if !METERED {
            return Ok(());
        }
        self.budget.work(values as u64)?;
        let bytes = values
            .checked_next_power_of_two()
            .unwrap_or(usize::MAX)
            .saturating_mul(size_of::<Val<'_>>())
            .saturating_add(Fun::cell_bytes());
        let held = self.held().saturating_add(bytes);
        self.budget.check_memory(held)
    }

    /// Pay one unit of fuel for a contraction under `rule`.
    #[inline(always)]
    fn take(&mut self, rule: Rule) -> Result<(), Halt> {
        if METERED && !self.budget.tank.take() {
            return self.next_slice(rule);
        }
        self.count(rule);
        Ok(())
    }

    #[inline(always)]
    fn count(&mut self, rule: Rule) {
        let n = &mut self.counts[rule as usize];
        *n = n.wrapping_add(1);
    }

    /// The budget's slow checks between fuel slices; the contraction is
    /// counted there.
    #[cold]
    #[inline(never)]
    fn next_slice(&mut self, rule: Rule) -> Result<(), Halt> {
        self.budget.take(rule)
    }

    /// Pay for two contractions in a row.
    #[inline(always)]
    fn take2(&mut self, first: Rule, second: Rule) -> Result<(), Halt> {
        if METERED && !self.budget.tank.take2() {
            self.second = false;
            self.take(first)?;
            self.second = true;
            return self.take(second);
        }
        self.count(first);
        self.count(second);
        Ok(())
    }

    /// Push a value, growing the stack within the limit.
    #[inline(always)]
    fn push(&mut self, value: Val<'c>) -> Result<(), Halt> {
        if METERED && self.stack.len() == self.stack.capacity() {
            self.grow_stack(1)?;
        }
        self.stack.push(value);
        Ok(())
    }

    /// Room for `n` more values on the stack.
    #[inline(always)]
    fn reserve(&mut self, n: usize) -> Result<(), Halt> {
        if METERED && self.stack.capacity() - self.stack.len() < n {
            self.grow_stack(n)?;
        }
        Ok(())
    }

    #[cold]
    #[inline(never)]
    fn grow_stack(&mut self, n: usize) -> Result<(), Halt> {
        let held = self.held();
        grow(&mut self.stack, n, held, &mut self.budget)
    }

    /// Push a task, growing the task stack within the limit.
    #[inline(always)]
    fn task(&mut self, task: Task) -> Result<(), Halt> {
        if METERED && self.tasks.len() == self.tasks.capacity() {
            self.grow_tasks(1)?;
        }
        self.tasks.push(task);
        Ok(())
    }

    #[cold]
    #[inline(never)]
    fn grow_tasks(&mut self, n: usize) -> Result<(), Halt> {
        let held = self.held();
        grow(&mut self.tasks, n, held, &mut self.budget)
    }

    /// Keep the current frame and closure for when the call being made
    /// returns.
    #[inline(always)]
    fn save_caller(&mut self, site: CodeId) -> Result<(), Halt> {
        if METERED && self.callers.len() == self.callers.capacity() {
            let held = self.held();
            grow(&mut self.callers, 1, held, &mut self.budget)?;
        }
        self.callers.push(Caller {
            base: self.base,
            closure: self.closure.take(),
        });
        self.task(Task::new(Task::RETURN, site))
    }

    #[inline(always)]
    fn pop(&mut self) -> Result<Val<'c>, Halt> {
        self.stack.pop().ok_or_else(broken)
    }

    /// The first of the top `n` values.
    #[inline(always)]
    fn top(&self, n: u32) -> Result<usize, Halt> {
        self.stack.len().checked_sub(n as usize).ok_or_else(broken)
    }

    /// The value of an atom.
    #[inline(always)]
    fn atom(&self, atom: Atom) -> Option<Val<'c>> {
        match atom {
            Atom::Local(slot) => self.stack.get(self.base + slot as usize).cloned(),
            Atom::Free(slot) => self.closure.as_ref()?.captured.get(slot as usize).cloned(),
            Atom::Int(n) => Some(Value::Int(i64::from(n))),
            Atom::BigInt(i) => self.code.ints.get(i as usize).map(|&n| Value::Int(n)),
            Atom::Bool(b) => Some(Value::Bool(b)),
            Atom::Lit(s) => Some(Value::Lit(s)),
            Atom::Tag(t) => Some(Value::Tag(t)),
            Atom::Data(d) => Some(Value::Data(d)),
        }
    }

    /// The value an atom names, without cloning it.
    #[inline(always)]
    fn atom_ref(&self, atom: Atom) -> Option<&Val<'c>> {
        match atom {
            Atom::Local(slot) => self.stack.get(self.base + slot as usize),
            Atom::Free(slot) => self.closure.as_ref()?.captured.get(slot as usize),
            _ => None,
        }
    }

    /// Push the value of an atom. A fast path (benches/README.md, "Fast paths"): room made first and a local
    /// cloned straight onto the stack, where through [`Interpreter::atom`] the
    /// value is rebuilt piece by piece (fib 25: 137.8M instructions without
    /// it, 133.5M with).
    #[inline(always)]
    fn push_atom(&mut self, atom: Atom) -> Result<(), Halt> {
        if METERED && self.stack.len() == self.stack.capacity() {
            self.grow_stack(1)?;
        }
        let value = match atom {
            Atom::Local(slot) => match self.stack.get(self.base + slot as usize) {
                Some(v) => v.clone(),
                None => return Err(broken()),
            },
            Atom::Int(n) => Value::Int(i64::from(n)),
            _ => self.atom(atom).ok_or_else(broken)?,
        };
        self.stack.push(value);
        Ok(())
    }

    /// The integer an atom stands for, if it is one, read without making a
    /// value.
    #[inline(always)]
    fn int(&self, atom: Atom) -> Option<i64> {
        match atom {
            Atom::Int(n) => Some(i64::from(n)),
            Atom::Local(_) | Atom::Free(_) => match self.atom_ref(atom) {
                Some(&Value::Int(n)) => Some(n),
                _ => None,
            },
            Atom::BigInt(i) => self.code.ints.get(i as usize).copied(),
            _ => None,
        }
    }

    /// `op(a, b)` on integer atoms when it is an integer operation that
    /// cannot fail (its fuel not paid); see [`int_arith`].
    #[inline(always)]
    fn int_op(&self, op: Prim, a: Atom, b: Atom) -> Option<Val<'c>> {
        int_prim(op, self.int(a)?, self.int(b)?)
    }

    /// `f (x - 1)`: the value of argument code `argument` when it is an
    /// integer operation on atoms that cannot fail, so the call follows with
    /// no task between. A fast path (fib 25: 162.6M instructions without
    /// it, 133.5M with).
    #[inline(always)]
    fn int_argument(&self, argument: CodeId) -> Option<Val<'c>> {
        match self.code.code.get(argument as usize) {
            Some(&Instr::Prim2 { op, a, b }) => self.int_op(op, a, b),
            _ => None,
        }
    }

    /// `if x < y then …`: the comparison of integer atoms, contracted with
    /// the `if` in one step. A fast path (fib 25: 144.5M instructions
    /// without it, 133.5M with; ackermann: 538.1M, 492.3M).
    #[inline(always)]
    fn int_condition(&self, op: Prim, a: Atom, b: Atom) -> Option<bool> {
        int_test(op, self.int(a)?, self.int(b)?)
    }

    /// `if h + d != q then …`: a comparison whose operands are integer atoms
    /// or integer operations on atoms that cannot fail: whether it holds,
    /// and how many operations its operands make (contracted, with it and
    /// the `if`, in one step). A fast path (queens: 98.3M instructions
    /// without it, 81.0M with), kept out of line (inlined, it cost fib 25
    /// 4M instructions it never runs).
    #[inline(never)]
    fn int_comparison(&self, condition: CodeId) -> Option<(bool, u32)> {
        let code = self.code;
        let Some(&Instr::Prim { op, operands }) = code.code.get(condition as usize) else {
            return None;
        };
        let [first, second] = *code.lists.get(operands.range())? else {
            return None;
        };
        let (x, made_x) = self.int_operand(first)?;
        let (y, made_y) = self.int_operand(second)?;
        Some((int_test(op, x, y)?, made_x + made_y))
    }

    /// The integer code `id` computes when it is an integer atom (making
    /// no contraction) or an integer operation on atoms that cannot fail
    /// (making one).
    #[inline(always)]
    fn int_operand(&self, id: CodeId) -> Option<(i64, u32)> {
        match *self.code.code.get(id as usize)? {
            Instr::Atom(a) => Some((self.int(a)?, 0)),
            Instr::Prim2 { op, a, b } => {
                match int_prim::<&Function>(op, self.int(a)?, self.int(b)?)? {
                    Value::Int(n) => Some((n, 1)),
                    _ => None,
                }
            }
            _ => None,
        }
    }

    /// `fib (n - 1) + fib (n - 2)`: integer arithmetic that cannot fail on
    /// the two computed operands on top of the stack, without the general
    /// path. A fast path (fib 25: 171.9M instructions without it, 133.5M
    /// with).
    #[inline(always)]
    fn int_operands(&self, op: Prim) -> Option<Val<'c>> {
        match self.stack[..] {
            [.., Value::Int(x), Value::Int(y)] => int_prim(op, x, y),
            _ => None,
        }
    }

    /// Contract `op` on `args`, its fuel not yet paid: the shared general
    /// path.
    fn prim(&mut self, op: Prim, args: &[Val<'c>]) -> Result<Val<'c>, Halt> {
        let held = self.held();
        prim_contraction(op, args, self.image, &self.tags, &mut self.budget, held)
    }

    /// Contract `op(a, b)` on atoms.
    #[inline]
    fn prim2(&mut self, op: Prim, a: Atom, b: Atom) -> Result<Val<'c>, Halt> {
        if let Some(v) = self.int_op(op, a, b) {
            self.take(Rule::Prim)?;
            return Ok(v);
        }
        let (a, b) = (
            self.atom(a).ok_or_else(broken)?,
            self.atom(b).ok_or_else(broken)?,
        );
        self.prim(op, &[a, b])
    }

    /// A host function's contraction on the values from `from` up; the
    /// caller pops them.
    #[cold]
    fn host_call(&mut self, id: HostId, from: usize) -> Result<Val<'c>, Halt> {
        let room = self.budget.room(self.held());
        let args = self.stack.get(from..).unwrap_or(&[]);
        let value = host_call(
            self.host,
            id,
            args,
            self.image,
            &mut self.tags,
            &mut self.budget,
            room,
        )?;
        self.tag_bytes = self.tags.bytes();
        self.check_memory()?;
        Ok(value)
    }

    /// Contract the application of `function` to `argument`: the body to
    /// evaluate next, or [`PUSHED`] when the call's value (a partial
    /// application) is on the stack.
    #[inline(always)]
    fn call(
        &mut self,
        function: Val<'c>,
        argument: Val<'c>,
        tail: bool,
        site: CodeId,
    ) -> Result<CodeId, Halt> {
        match function {
            Value::Fun(closure) => self.apply(closure, argument, tail, site),
            callee => self.not_a_function(callee, site),
        }
    }

    /// Applying a value that is not a function: one `beta` attempt, paid
    /// (the argument was evaluated first, as in the stepper), then the error.
    #[cold]
    #[inline(never)]
    fn not_a_function(&mut self, callee: Val<'c>, site: CodeId) -> Result<CodeId, Halt> {
        let halt = match self.take(Rule::Beta) {
            Ok(()) => {
                let operand = callee.operand(self.image, &self.tags);
                Halt::error(EvalError::not_a_function(operand))
            }
            Err(halt) => halt,
        };
        Err(self.stopped_code(halt, site))
    }

    /// [`Interpreter::call`] of a closure, at application `site`.
    #[inline(never)]
    fn apply(
        &mut self,
        closure: Rc<Fun<'c>>,
        argument: Val<'c>,
        tail: bool,
        site: CodeId,
    ) -> Result<CodeId, Halt> {
        let f: &'c Function = closure.code;
        let k = closure.applied;
        let rule = if f.rec && k == 0 {
            Rule::BetaRec
        } else {
            Rule::Beta
        };
        if let Err(halt) = self.take(rule) {
            return Err(self.stopped_code(halt, site));
        }
        if k + 1 < f.params {
            return self.partial(closure, argument);
        }
        if k > 0 {
            return self.enter_partial(closure, argument, tail, site);
        }
        self.enter(closure, argument, tail, site)
    }

    /// Enter the body of an unapplied closure of a function of one
    /// parameter (or, in [`Interpreter::enter_partial`], the last) with `argument`.
    #[inline(always)]
    fn enter(
        &mut self,
        closure: Rc<Fun<'c>>,
        argument: Val<'c>,
        tail: bool,
        site: CodeId,
    ) -> Result<CodeId, Halt> {
        let f: &'c Function = closure.code;
        self.frame_for_call(f, tail, site)?;
        if f.rec {
            self.stack.push(Value::Fun(Rc::clone(&closure)));
        }
        self.stack.push(argument);
        self.pad(f.frame as usize);
        self.closure = Some(closure);
        Ok(f.body)
    }

    /// Start the frame of a call of `f`: the caller's frame dropped (a tail
    /// call) or saved, and room for the new one.
    #[inline(always)]
    fn frame_for_call(&mut self, f: &Function, tail: bool, site: CodeId) -> Result<(), Halt> {
        if tail {
            cut(&mut self.stack, self.base);
            self.tail_site(site);
        } else {
            self.save_caller(site)?;
        }
        self.base = self.stack.len();
        let frame = f.frame as usize;
        if METERED && (frame > LARGE || self.stack.capacity() - self.stack.len() < frame) {
            self.room_for_frame(frame)?;
        }
        Ok(())
    }

    /// Room for a frame of `frame` slots, the filling of a large one
    /// accounted as work.
    #[cold]
    #[inline(never)]
    fn room_for_frame(&mut self, frame: usize) -> Result<(), Halt> {
        if frame > LARGE {
            self.budget.work(frame as u64)?;
        }
        self.reserve(frame)
    }

    /// Enter the body of a partial application given its last argument:
    /// self (of a μλ) and the arguments so far come from the closure.
    #[inline(never)]
    fn enter_partial(
        &mut self,
        closure: Rc<Fun<'c>>,
        argument: Val<'c>,
        tail: bool,
        site: CodeId,
    ) -> Result<CodeId, Halt> {
        let f: &'c Function = closure.code;
        self.frame_for_call(f, tail, site)?;
        self.push_given(&closure, f)?;
        self.stack.push(argument);
        self.pad(f.frame as usize);
        self.closure = Some(closure);
        Ok(f.body)
    }

    /// Push the values a partial application of `f` holds beyond its
    /// captured ones (self of a μλ, the arguments so far), their room
    /// reserved.
    #[inline(always)]
    fn push_given(&mut self, closure: &Fun<'c>, f: &Function) -> Result<(), Halt> {
        let given = closure
            .captured
            .get(f.captured as usize..)
            .ok_or_else(broken)?;
        for value in given {
            self.stack.push(value.clone());
        }
        Ok(())
    }

    /// Fill the new frame's slots beyond its bound values (their room
    /// reserved).
    #[inline(always)]
    fn pad(&mut self, frame: usize) {
        let end = self.base + frame;
        while self.stack.len() < end {
            self.stack.push(Value::Int(0));
        }
    }

    /// The partial application of `closure` to `argument`: its values, then
    /// (for the first argument of a μλ) the closure itself as self, then the
    /// argument. A closure held only here has its cell reused.
    #[inline(never)]
    fn partial(&mut self, mut closure: Rc<Fun<'c>>, argument: Val<'c>) -> Result<CodeId, Halt> {
        let f = closure.code;
        let k = closure.applied;
        let with_self = f.rec && k == 0;
        let n = closure.captured.len() + 1 + usize::from(with_self);
        if n > LARGE {
            self.before_large_cell(n)?;
        }
        if !with_self {
            if let Some(cell) = Rc::get_mut(&mut closure) {
                let mut values = Values::with_capacity(n);
                values.extend(cell.captured.drain(..));
                values.push(argument);
                if cell.reuse(f, k + 1, values) {
                    self.check_memory()?;
                }
                self.push(Value::Fun(closure))?;
                return Ok(PUSHED);
            }
        }
        let mut values = Values::with_capacity(n);
        values.extend(closure.captured.iter().cloned());
        if with_self {
            values.push(Value::Fun(closure));
        }
        values.push(argument);
        let made = Closure::new(f, k + 1, values);
        self.check_memory()?;
        self.push(Value::Fun(made))?;
        Ok(PUSHED)
    }

    /// The closure of function `func`, its captured values gathered by the
    /// fetches of `fetch`.
    fn closure_of(&mut self, func: u32, fetch: Span) -> Result<Val<'c>, Halt> {
        let code = self.code;
        let f = code.funs.get(func as usize).ok_or_else(broken)?;
        let n = f.captured as usize;
        if n > LARGE {
            self.before_large_cell(n)?;
        }
        let mut captured = Values::with_capacity(n);
        for fetch in code.fetches.get(fetch.range()).ok_or_else(broken)? {
            let (start, len) = (fetch.start as usize, fetch.len as usize);
            let values = if fetch.frame {
                self.stack.get(self.base + start..self.base + start + len)
            } else {
                self.closure
                    .as_ref()
                    .and_then(|c| c.captured.get(start..start + len))
            };
            captured.extend(values.ok_or_else(broken)?.iter().cloned());
        }
        let made = Closure::new(f, 0, captured);
        self.check_memory()?;
        Ok(Value::Fun(made))
    }

    /// Whether atom `function` is a closure that `m` more arguments
    /// saturate, which a spine of `m` arguments enters at once: an
    /// unapplied closure of `m` parameters, or a partial application that
    /// lacks `m` (its arguments so far go into the frame first, as the
    /// nested calls would put them; Church numerals: 71.6M instructions
    /// with unapplied closures only, 61.4M with both).
    #[inline(always)]
    fn enters_directly(&self, function: Atom, m: u32) -> bool {
        matches!(self.atom_ref(function), Some(Value::Fun(f)) if f.applied + m == f.code.params)
    }

    /// Go on with the spine `Instr::AppN` at `at` from argument `k` (the
    /// callee and the arguments before `k` on the stack, their applications
    /// contracted): the code to evaluate next, an argument (with a
    /// `SPINE_ARG` task pushed) or the callee's body (entered). An argument
    /// that is an integer operation on atoms is made in place, a fast path
    /// (benches/README.md, "Fast paths"; tak 18 12 6: 56.2M instructions without it, 50.4M with).
    fn spine(&mut self, at: CodeId, mut k: u32) -> Result<CodeId, Halt> {
        let code = self.code;
        let Some(&Instr::AppN { args, tail, .. }) = code.code.get(at as usize) else {
            return Err(broken());
        };
        let ids = code.lists.get(args.range()).ok_or_else(broken)?;
        while let Some(&id) = ids.get(k as usize) {
            let value = match code.code.get(id as usize) {
                Some(&Instr::Atom(atom)) => self.atom(atom).ok_or_else(broken)?,
                Some(&Instr::Prim2 { op, a, b }) => match self.int_op(op, a, b) {
                    Some(v) => {
                        at!(self, self.take(Rule::Prim), self.origin(id));
                        v
                    }
                    None => return self.spine_arg(at, k, id),
                },
                _ => return self.spine_arg(at, k, id),
            };
            at!(self, self.push(value), self.origin(id));
            at!(self, self.spine_beta(k), self.spine_app(at, k));
            k += 1;
        }
        let entered = self.enter_spine(args.len, tail, at);
        Ok(at!(self, entered, self.origin(at)))
    }

    /// The image node of the application to argument `k` of the spine at
    /// `at` (`k` from 0, the innermost): the redex of its contraction.
    #[cold]
    fn spine_app(&self, at: CodeId, k: u32) -> Id {
        let Some(&Instr::AppN { args, .. }) = self.code.code.get(at as usize) else {
            return NONE;
        };
        // The spine's node is the application to its last argument.
        let mut node = self.origin(at);
        for _ in k + 1..args.len {
            match self.image.nodes.get(node as usize) {
                Some(&INode::App(f, _)) => node = f,
                _ => return NONE,
            }
        }
        node
    }

    /// The condition of the `Instr::IfPrim2` at `at`, as an image node:
    /// the redex of its first contraction.
    #[cold]
    fn condition_of(&self, at: CodeId) -> Id {
        match self.image.nodes.get(self.origin(at) as usize) {
            Some(&INode::If(c, ..)) => c,
            _ => NONE,
        }
    }

    /// Of two contractions paid together ([`Interpreter::take2`]), the
    /// redex of the one the fuel ran out before.
    #[cold]
    fn of_pair(&self, first: Id, second: Id) -> Id {
        if self.second {
            second
        } else {
            first
        }
    }

    /// The image node of the `i`-th integer operation (from 0) that the
    /// comparison at `condition` makes in its operands.
    #[cold]
    fn compared(&self, condition: CodeId, i: u32) -> Id {
        let code = self.code;
        let Some(&Instr::Prim { operands, .. }) = code.code.get(condition as usize) else {
            return NONE;
        };
        let made = code
            .lists
            .get(operands.range())
            .unwrap_or(&[])
            .iter()
            .filter(|&&o| matches!(code.code.get(o as usize), Some(Instr::Prim2 { .. })));
        made.copied().nth(i as usize).map_or(NONE, |o| self.origin(o))
    }

    /// The image node instruction `code` was compiled from.
    #[inline]
    fn origin(&self, code: CodeId) -> Id {
        self.code.origin.get(code as usize).copied().unwrap_or(NONE)
    }

    /// [`Interpreter::stopped`] at the node of instruction `code`.
    #[cold]
    #[inline(never)]
    fn stopped_code(&mut self, halt: Halt, code: CodeId) -> Halt {
        let node = self.origin(code);
        self.stopped(halt, node)
    }

    /// Record that the run stopped by `halt` at image node `node` (the
    /// innermost record wins: it is made first).
    #[cold]
    #[inline(never)]
    fn stopped(&mut self, halt: Halt, node: Id) -> Halt {
        if self.redex == NONE {
            self.redex = node;
        }
        halt
    }

    /// Where the run stopped: its redex, then the call marks of the current
    /// function and of each caller waiting, innermost first (the top level
    /// has none).
    fn trail(&self) -> Trail {
        let mut trail = Trail::new(self.redex);
        let mut mark = |closure: &Option<Rc<Fun<'c>>>, site: CodeId| {
            if let Some(c) = closure {
                trail.push(self.origin(site), self.image.last_lam(c.code.func));
            }
        };
        // The site of each call a caller waits for is in the `RETURN` task
        // pushed with the caller; the bottom caller's own, in `site`.
        let mut sites = self
            .tasks
            .iter()
            .rev()
            .filter(|t| t.kind() == Task::RETURN)
            .map(|t| t.code())
            .chain(std::iter::once(self.site));
        let mut closure = &self.closure;
        for caller in self.callers.iter().rev() {
            mark(closure, sites.next().unwrap_or(NONE));
            closure = &caller.closure;
        }
        mark(closure, sites.next().unwrap_or(NONE));
        trail
    }

    /// Evaluate argument `k` of the spine at `at`, code `id`, and come back.
    #[inline(always)]
    fn spine_arg(&mut self, at: CodeId, k: u32, id: CodeId) -> Result<CodeId, Halt> {
        self.task(Task::indexed(Task::SPINE_ARG, at, k))?;
        Ok(id)
    }

    /// Contract the application to argument `k` (on top of the stack) of a
    /// spine entered directly: `beta_rec` for a μλ's first, else `beta`.
    #[inline(always)]
    fn spine_beta(&mut self, k: u32) -> Result<(), Halt> {
        let rule = if k == 0 && self.below_top_is_rec() {
            Rule::BetaRec
        } else {
            Rule::Beta
        };
        self.take(rule)
    }

    /// Whether the value under the top of the stack is an unapplied closure
    /// of a μλ.
    #[inline(always)]
    fn below_top_is_rec(&self) -> bool {
        let below = self
            .stack
            .len()
            .checked_sub(2)
            .and_then(|i| self.stack.get(i));
        matches!(below, Some(Value::Fun(f)) if f.code.rec && f.applied == 0)
    }

    /// Move the values from `from` up down to `to`, dropping those between.
    #[inline(always)]
    fn slide(&mut self, from: usize, to: usize) {
        let n = self.stack.len().saturating_sub(from);
        for i in 0..n {
            self.stack.swap(to + i, from + i);
        }
        cut(&mut self.stack, to + n);
    }

    /// Enter the body of the callee under the top `m` values (its
    /// arguments): they become the new frame, after self (of a μλ) and the
    /// arguments a partial application held, replacing the caller's frame
    /// in tail position.
    fn enter_spine(&mut self, m: u32, tail: bool, site: CodeId) -> Result<CodeId, Halt> {
        let at = self.top(m + 1)?;
        if tail && at < self.base {
            return Err(broken());
        }
        let place = self.stack.get_mut(at).ok_or_else(broken)?;
        let closure = match std::mem::replace(place, Value::Int(0)) {
            Value::Fun(f) => f,
            _ => return Err(broken()),
        };
        let f: &'c Function = closure.code;
        let first = if closure.applied > 0 {
            self.open_given(&closure, f, at)?;
            at + 1
        } else if f.rec {
            *place = Value::Fun(Rc::clone(&closure));
            at
        } else {
            at + 1
        };
        let at = if tail {
            self.slide(first, self.base);
            self.tail_site(site);
            self.base
        } else {
            self.save_caller(site)?;
            if first != at {
                self.slide(first, at);
            }
            at
        };
        self.base = at;
        let frame = f.frame as usize;
        self.reserve((at + frame).saturating_sub(self.stack.len()))?;
        if frame > LARGE {
            self.budget.work(frame as u64)?;
        }
        self.pad(frame);
        self.closure = Some(closure);
        Ok(f.body)
    }

    /// A tail call at `site` replaces the current call's mark: the site
    /// kept in the `RETURN` task of the call it replaces, or, in the calls
    /// the top level made in tail position, [`Interpreter::site`].
    #[inline(always)]
    fn tail_site(&mut self, site: CodeId) {
        match self.tasks.last_mut() {
            Some(task) if task.kind() == Task::RETURN => *task = Task::new(Task::RETURN, site),
            _ => self.site = site,
        }
    }

    /// Put the values a partial application holds beyond its captured ones
    /// just above slot `at` (where the callee was), before the arguments.
    #[inline(never)]
    fn open_given(&mut self, closure: &Fun<'c>, f: &Function, at: usize) -> Result<(), Halt> {
        let given = closure.captured.len().saturating_sub(f.captured as usize);
        self.reserve(given)?;
        self.push_given(closure, f)?;
        // [hole, args…, given…] → [hole, given…, args…]
        let above = self.stack.get_mut(at + 1..).ok_or_else(broken)?;
        above.rotate_right(given);
        Ok(())
    }

    /// Store `value` in frame slot `slot`.
    #[inline(always)]
    fn set_local(&mut self, slot: u32, value: Val<'c>) -> Result<(), Halt> {
        let place = self
            .stack
            .get_mut(self.base + slot as usize)
            .ok_or_else(broken)?;
        *place = value;
        Ok(())
    }

    /// The branch a condition's value takes, or `not_a_boolean`.
    #[inline(always)]
    fn branch(&self, condition: Val<'c>, yes: CodeId, no: CodeId) -> Result<CodeId, Halt> {
        match condition {
            Value::Bool(b) => Ok(if b { yes } else { no }),
            other => {
                let operand = other.operand(self.image, &self.tags);
                Err(Halt::error(EvalError::not_a_boolean(operand)))
            }
        }
    }

    /// Apply primitive `op` to the `arity` values on top of the stack,
    /// leaving its result there (the integer fast path is the caller's).
    #[inline(always)]
    fn apply_prim(&mut self, op: Prim, arity: u32) -> Result<(), Halt> {
        let from = self.top(arity)?;
        let v = if let Prim::Host(id) = op {
            self.host_call(id, from)?
        } else {
            let held = self.held();
            let args = self.stack.get(from..).unwrap_or(&[]);
            prim_contraction(op, args, self.image, &self.tags, &mut self.budget, held)?
        };
        cut(&mut self.stack, from);
        self.push(v)
    }

    /// Build a constructor of `tag` from the `arity` values on top of the
    /// stack. A constructor of values is a value: building it is free.
    #[inline(always)]
    fn build_con(&mut self, tag: crate::image::TagId, arity: u32) -> Result<(), Halt> {
        let from = self.top(arity)?;
        if arity as usize > LARGE {
            self.before_large_cell(arity as usize)?;
        }
        let fields: Values<&'c Function> = self.stack.drain(from..).collect();
        self.stack.push(Value::Con(ConCell::new(tag, fields)));
        self.check_memory()
    }

    /// Match the value on top against case `case` (its contraction paid):
    /// its fields bound from slot `slot` on, the body of its arm (of those
    /// from `bodies`) or the default, or `no_matching_case`.
    #[inline(always)]
    fn match_case(&mut self, case: u32, bodies: u32, default: CodeId, slot: u32) -> Result<CodeId, Halt> {
        let (code, image) = (self.code, self.image);
        let value = self.pop()?;
        let info = image.cases.get(case as usize).ok_or_else(broken)?;
        if let Some((tag, fields)) = value.constructor() {
            if let Some(k) = arm_of(image, info, tag, fields.len()) {
                if fields.len() > LARGE {
                    self.budget.work(fields.len() as u64)?;
                }
                for (i, field) in fields.iter().enumerate() {
                    self.set_local(slot + i as u32, field.clone())?;
                }
                return code.bodies.get(bodies as usize + k).copied().ok_or_else(broken);
            }
        }
        if let Value::Data(d) = value {
            if let INode::Con(tag, start, len) = image.node(d) {
                if let Some(k) = arm_of(image, info, tag, len as usize) {
                    // The program's own data: its fields read in place.
                    if len as usize > LARGE {
                        self.budget.work(u64::from(len))?;
                    }
                    for (i, &field) in image.list(start, len).iter().enumerate() {
                        self.set_local(slot + i as u32, data_field(image, field))?;
                    }
                    return code.bodies.get(bodies as usize + k).copied().ok_or_else(broken);
                }
            }
        }
        if default != crate::image::NONE {
            return Ok(default);
        }
        let operand = value.operand(image, &self.tags);
        Err(Halt::error(EvalError::no_matching_case(operand)))
    }

    /// Evaluate the program to a value.
    fn execute(&mut self) -> Result<Val<'c>, Halt> {
        let code = self.code;
        let frame = code.frame as usize;
        self.reserve(frame)?;
        self.budget.work(frame as u64)?;
        self.pad(frame);
        // The program applied to its arguments: once the root is a value,
        // push the first argument and call, then the next.
        for k in (0..self.args.len()).rev() {
            // Applications the program has no node for: no call site.
            self.tasks.push(Task::new(Task::CALL, NONE));
            self.tasks.push(Task::new(Task::PUSH_ARG, k as CodeId));
        }
        let mut pc = code.root;
        'eval: loop {
            // Evaluate `pc` down its leftmost spine, leaving work for later.
            loop {
                let Some(instr) = code.code.get(pc as usize) else {
                    return Err(broken());
                };
                match *instr {
                    Instr::Atom(atom) => {
                        at!(self, self.push_atom(atom), NONE);
                        break;
                    }
                    Instr::Closure { func, fetch } => {
                        let made = at!(self, self.closure_of(func, fetch), self.origin(pc));
                        at!(self, self.push(made), self.origin(pc));
                        break;
                    }
                    Instr::App {
                        function,
                        argument,
                        tail,
                    } => {
                        let call = if tail { Task::TAIL_CALL } else { Task::CALL };
                        at!(self, self.task(Task::new(call, pc)), self.origin(pc));
                        at!(self, self.task(Task::new(Task::EVAL, argument)), self.origin(pc));
                        pc = function;
                    }
                    Instr::AppAtomArgument { function, .. } => {
                        at!(self, self.task(Task::new(Task::CALL_ATOM, pc)), self.origin(pc));
                        pc = function;
                    }
                    Instr::AppAtomFunction {
                        function,
                        argument,
                        tail,
                    } => {
                        if let Some(v) = self.int_argument(argument) {
                            at!(self, self.take(Rule::Prim), self.origin(argument));
                            let f = self.atom(function).ok_or_else(broken)?;
                            pc = self.call(f, v, tail, pc)?;
                            if pc == PUSHED {
                                break;
                            }
                            continue;
                        }
                        at!(self, self.push_atom(function), self.origin(pc));
                        let call = if tail { Task::TAIL_CALL } else { Task::CALL };
                        at!(self, self.task(Task::new(call, pc)), self.origin(pc));
                        pc = argument;
                    }
                    Instr::AppAtoms {
                        function,
                        argument,
                        tail,
                    } => {
                        let (f, a) = (
                            self.atom(function).ok_or_else(broken)?,
                            self.atom(argument).ok_or_else(broken)?,
                        );
                        pc = self.call(f, a, tail, pc)?;
                        if pc == PUSHED {
                            break;
                        }
                    }
                    Instr::AppN {
                        function,
                        args,
                        fallback,
                        ..
                    } => {
                        if self.enters_directly(function, args.len) {
                            at!(self, self.push_atom(function), self.origin(pc));
                            pc = self.spine(pc, 0)?;
                        } else {
                            pc = fallback;
                        }
                    }
                    Instr::IfPrim2 { op, a, b, yes, no } => {
                        if let Some(holds) = self.int_condition(op, a, b) {
                            at!(
                                self,
                                self.take2(Rule::Prim, Rule::If),
                                self.of_pair(self.condition_of(pc), self.origin(pc))
                            );
                            pc = if holds { yes } else { no };
                            continue;
                        }
                        let condition = at!(self, self.prim2(op, a, b), self.condition_of(pc));
                        at!(self, self.take(Rule::If), self.origin(pc));
                        pc = at!(self, self.branch(condition, yes, no), self.origin(pc));
                    }
                    Instr::Prim1 { op, a } => {
                        let a = self.atom(a).ok_or_else(broken)?;
                        let v = at!(self, self.prim(op, &[a]), self.origin(pc));
                        at!(self, self.push(v), self.origin(pc));
                        break;
                    }
                    Instr::Prim2 { op, a, b } => {
                        let v = at!(self, self.prim2(op, a, b), self.origin(pc));
                        at!(self, self.push(v), self.origin(pc));
                        break;
                    }
                    Instr::Let { bound, .. } => {
                        at!(self, self.task(Task::new(Task::BIND, pc)), self.origin(pc));
                        pc = bound;
                    }
                    Instr::If { condition, yes, no } => {
                        if let Some((holds, inner)) = self.int_comparison(condition) {
                            for i in 0..inner {
                                at!(self, self.take(Rule::Prim), self.compared(condition, i));
                            }
                            at!(
                                self,
                                self.take2(Rule::Prim, Rule::If),
                                self.of_pair(self.origin(condition), self.origin(pc))
                            );
                            pc = if holds { yes } else { no };
                            continue;
                        }
                        at!(self, self.task(Task::new(Task::BRANCH, pc)), self.origin(pc));
                        pc = condition;
                    }
                    Instr::Prim { operands: list, .. } | Instr::Con { fields: list, .. } => {
                        let then = if matches!(instr, Instr::Prim { .. }) {
                            Task::PRIM
                        } else {
                            Task::BUILD
                        };
                        // Evaluate the operands (fields) left to right, then
                        // apply the primitive (build the constructor).
                        let list = code.lists.get(list.range()).ok_or_else(broken)?;
                        if METERED && self.tasks.capacity() - self.tasks.len() < list.len() + 1 {
                            at!(self, self.grow_tasks(list.len() + 1), self.origin(pc));
                        }
                        self.tasks.push(Task::new(then, pc));
                        let Some((&first, rest)) = list.split_first() else {
                            break;
                        };
                        for &o in rest.iter().rev() {
                            self.tasks.push(Task::new(Task::EVAL, o));
                        }
                        pc = first;
                    }
                    Instr::Case { scrutinee, .. } => {
                        at!(self, self.task(Task::new(Task::MATCH, pc)), self.origin(pc));
                        pc = scrutinee;
                    }
                }
            }
            // A value is on top of the stack: do the pending work until some
            // of it needs code evaluated.
            loop {
                let Some(task) = self.tasks.pop() else {
                    return self.pop();
                };
                let at = task.code();
                match task.kind() {
                    Task::EVAL => {
                        pc = at;
                        continue 'eval;
                    }
                    kind @ (Task::CALL | Task::TAIL_CALL) => {
                        let argument = self.pop()?;
                        let function = self.pop()?;
                        let tail = kind == Task::TAIL_CALL;
                        pc = self.call(function, argument, tail, at)?;
                        if pc != PUSHED {
                            continue 'eval;
                        }
                        continue;
                    }
                    Task::PUSH_ARG => {
                        let value = self.args.get(at as usize).cloned().ok_or_else(broken)?;
                        at!(self, self.push(value), NONE);
                        continue;
                    }
                    Task::CALL_ATOM => {
                        let Some(&Instr::AppAtomArgument { argument, tail, .. }) =
                            code.code.get(at as usize)
                        else {
                            return Err(broken());
                        };
                        let function = self.pop()?;
                        let argument = self.atom(argument).ok_or_else(broken)?;
                        pc = self.call(function, argument, tail, at)?;
                        if pc != PUSHED {
                            continue 'eval;
                        }
                        continue;
                    }
                    Task::SPINE_ARG => {
                        let k = task.index();
                        at!(self, self.spine_beta(k), self.spine_app(at, k));
                        pc = self.spine(at, k + 1)?;
                        continue 'eval;
                    }
                    Task::RETURN => {
                        let value = self.pop()?;
                        cut(&mut self.stack, self.base);
                        self.stack.push(value);
                        let caller = self.callers.pop().ok_or_else(broken)?;
                        self.base = caller.base;
                        self.closure = caller.closure;
                        continue;
                    }
                    _ => {}
                }
                let Some(instr) = code.code.get(at as usize) else {
                    return Err(broken());
                };
                match *instr {
                    Instr::Let { slot, body, .. } => {
                        at!(self, self.take(Rule::Let), self.origin(at));
                        let value = self.pop()?;
                        self.set_local(slot, value)?;
                        pc = body;
                        continue 'eval;
                    }
                    Instr::If { yes, no, .. } => {
                        at!(self, self.take(Rule::If), self.origin(at));
                        let condition = self.pop()?;
                        pc = at!(self, self.branch(condition, yes, no), self.origin(at));
                        continue 'eval;
                    }
                    Instr::Prim { op, operands } => {
                        if operands.len == 2 {
                            if let Some(v) = self.int_operands(op) {
                                at!(self, self.take(Rule::Prim), self.origin(at));
                                self.stack.pop();
                                if let Some(top) = self.stack.last_mut() {
                                    *top = v;
                                }
                                continue;
                            }
                        }
                        at!(self, self.apply_prim(op, operands.len), self.origin(at));
                    }
                    Instr::Con { tag, fields } => {
                        at!(self, self.build_con(tag, fields.len), self.origin(at))
                    }
                    Instr::Case {
                        case,
                        bodies,
                        default,
                        slot,
                        ..
                    } => {
                        at!(self, self.take(Rule::Case), self.origin(at));
                        pc = at!(self, self.match_case(case, bodies, default, slot), self.origin(at));
                        continue 'eval;
                    }
                    _ => return Err(broken()),
                }
            }
        }
    }
}

/// The position among `case`'s arms of its arm for a constructor of `tag`
/// with `arity` fields. A fast path (benches/README.md, "Fast paths"): a case without a lookup table scans its
/// few arms here, inlined, the others go through [`Image::find_arm`]
/// (queens: 82.9M instructions without it, 81.0M with).
#[inline(always)]
fn arm_of(image: &Image, case: &crate::image::CaseInfo, tag: u32, arity: usize) -> Option<usize> {
    let arms = image.case_arms(case);
    if case.lookup == crate::image::NONE {
        let k = arms.iter().position(|a| a.tag == tag)?;
        return (arms[k].arity as usize == arity).then_some(k);
    }
    let arm = image.find_arm(case, tag, arity)?;
    Some(arm_index(arms, arm))
}

/// The position of `arm` (an element of `arms`) in `arms`.
#[inline(always)]
fn arm_index(arms: &[crate::image::ArmInfo], arm: &crate::image::ArmInfo) -> usize {
    let size = size_of::<crate::image::ArmInfo>().max(1);
    (arm as *const _ as usize).wrapping_sub(arms.as_ptr() as usize) / size
}
