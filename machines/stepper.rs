//! The reference machine: substitution-based small-step reduction, one
//! contraction per step, found by decomposing the term into an evaluation
//! context and a redex (Plotkin, 1975; Felleisen and Hieb, 1992). After a
//! contraction the search resumes at the hole just filled rather than at the
//! root: refocusing (Danvy and Nielsen, "Refocusing in reduction semantics",
//! 2004).
//!
//! Terms are the program image's nodes, never copied, and the nodes a run
//! builds by substitution (`subst`) in its own heap (`heap`), which a
//! copying collector keeps proportional to the live term. The context is a
//! stack of small frames that hold only what is still to be done. Results
//! are read back into owned values, and traced redexes and single steps into
//! arenas (`readback`).

mod heap;
mod readback;
mod subst;
#[cfg(test)]
mod tests;

use std::sync::Arc;

use smallvec::SmallVec;

use heap::{Collector, Heap, NODE_BYTES, STRING_OVERHEAD};
use readback::{flatten, to_datum, Fragment};
use subst::{Binds, SubstJob};

use crate::budget::{growth, Budget, Ended, Halt};
use crate::error::Fault;
use crate::error::Operand;
use crate::host::{host_step, HostStep, NO_HOST};
use crate::span::{Location, Trail};
use crate::image::{CaseInfo, INode, Id, Image, TagId, Tags, NONE};
use crate::prim::PrimValue;
use crate::prim::{delta_polled, fuel_units, Stopped};
use crate::vocabulary::{Build, Detached, DetachedRun, Machine, Paused};
use crate::{
    Arena, Counts, Datum, EvalError, HostFunctions, HostId, Limits, Outcome, Prim, Program, Report,
    Rule, Term,
};

/// The heap is collected only once it has this many bytes of nodes and
/// lists in use, so small runs never collect.
const MIN_COLLECT: usize = 1 << 20;

/// The heap is collected once its nodes and lists take this many times what
/// the last collection kept, plus twice the roots it scanned (the context
/// and the value stack), so that every collection is paid for by at least
/// as much new work as it does; or sooner, when it nears the memory limit.
/// Measured on `ack 3 9` (nodes copied per node built) and on a million
/// pending additions (peak bytes): 2: 0.70 and 109 MB, 3: 0.44 and 126 MB,
/// 4: 0.31 and 130 MB, 8: 0.14 and 153 MB.
const RATIO: usize = 4;

/// Strings are collected once their bytes exceed what the last collection
/// kept by this many times less one (at least [`MIN_COLLECT`], and at least
/// what that collection cost): a string is shared by handle, never copied,
/// so only garbage strings cost memory.
const STRING_RATIO: usize = 2;

/// The reference substitution stepper. Holds only a scratch arena for
/// traces, reused from run to run.
///
/// # Examples
///
/// ```
/// use orrery::machines::stepper::Stepper;
/// use orrery::{parse, Arena, Limits, Machine, Outcome, Value};
/// let arena = Arena::new();
/// let program = parse(&arena, "let double = \\n. n * 2 in double 21").unwrap();
/// let report = Stepper::new().run(&program, &Limits::default());
/// assert_eq!(report.outcome, Outcome::Value(Value::from_term(arena.int(42)).unwrap()));
/// assert_eq!(report.counts.total(), 3); // let, beta, prim
/// ```
#[derive(Debug, Default)]
pub struct Stepper {
    scratch: Arena,
    /// The most bytes the last run held at once.
    peak: usize,
}

/// A frame of the evaluation context, innermost last. Together with the
/// focus they are the decomposition `E[t]` of SEMANTICS §1.1. A frame keeps only
/// what is still to be evaluated: the values to the left of an operand or
/// field hole are on the value stack, and the operands already evaluated are
/// not kept through their list. Each frame keeps `at`, the image node its
/// construct stands for (see [`State::focus_at`]), for the location of a
/// stop there and to follow the program's nodes down into its holes.
#[derive(Clone, Copy, Debug)]
enum ContextFrame {
    /// `□ t`.
    AppFunction { argument: Id, at: Id },
    /// `v □`.
    AppArgument { function: Id, at: Id },
    /// `let □ in t`.
    LetBound { body: Id, at: Id },
    /// `if □ then t else u`.
    IfCondition { yes: Id, no: Id, at: Id },
    /// `op(v…, □, t…)`: the `left` operands still to evaluate start at
    /// absolute list position `next`.
    Operand {
        op: Prim,
        next: u32,
        left: u32,
        at: Id,
    },
    /// `K(v…, □, t…)` with `arity` fields, `left` of them still to evaluate
    /// from position `next`.
    Field {
        tag: TagId,
        arity: u32,
        next: u32,
        left: u32,
        at: Id,
    },
    /// `case □ of {…}`: the image case, and where its arm bodies are
    /// ([`NONE`]: the image case's own).
    Scrutinee { case: u32, bodies: u32, at: Id },
    /// A call mark `⟨site, λ⟩` (see [`crate::span`]): the hole is the
    /// body of a call made at application `site` (an image node, or
    /// [`NONE`]) of image λ `lam` ([`NONE`] for a program without spans or
    /// names). It goes when the hole is a value, and a call made directly
    /// in it replaces it.
    Mark { site: Id, lam: Id },
}

impl ContextFrame {
    /// The image node of the redex this frame makes with a value in its
    /// hole, if it makes one.
    fn redex(self) -> Option<Id> {
        match self {
            ContextFrame::AppArgument { at, .. }
            | ContextFrame::LetBound { at, .. }
            | ContextFrame::IfCondition { at, .. }
            | ContextFrame::Scrutinee { at, .. } => Some(at),
            ContextFrame::Operand { left: 0, at, .. } => Some(at),
            _ => None,
        }
    }
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
/// Stepper::new().run_traced(&program, &Limits::default(), tracer);
/// assert_eq!(rules, [Rule::Let, Rule::Prim]);
/// ```
pub type Tracer<'t> = dyn FnMut(Rule, &Term<'_>) + 't;

/// Where traced redexes are read back, and who sees them.
struct Trace<'t> {
    scratch: &'t mut Arena,
    sink: &'t mut Tracer<'t>,
}

/// Everything a run holds: the heap, the decomposition (focus, context and
/// value stack), substitution's scratch stacks, and the budget.
#[derive(Debug)]
struct State {
    heap: Heap,
    tags: Tags,
    /// The term in the hole: being searched when it is not a value, else
    /// being plugged into the innermost frame.
    focus: Id,
    /// Where the focus stands in the program, for a program with spans or
    /// names: the image node `from` and how to go on from it (see
    /// [`place`]). A node substitution made is a copy of an image node, and
    /// substitution keeps a body's shape, so the image node is followed from
    /// node to child as the search goes down and from a function's body to
    /// its contractum; no node remembers where it came from, and the way is
    /// only walked where the search goes down ([`State::focus_at`]).
    from: Id,
    how: u32,
    /// Whether the program has spans or names.
    tracking: bool,
    ctx: Vec<ContextFrame>,
    /// The evaluated operands and fields of the operand and field frames,
    /// innermost last.
    values: Vec<Id>,
    jobs: Vec<SubstJob>,
    done: Vec<Id>,
    budget: Budget,
    /// Collect once [`Heap::used`] reaches this.
    gc_at: usize,
    /// Collect once the strings' bytes reach this.
    strings_at: usize,
    /// [`Heap::used`] after the last collection.
    live: usize,
    /// The strings' bytes after the last collection.
    string_live: usize,
    /// Collect after the contraction being made.
    due: bool,
    /// Collections made so far.
    collections: u64,
    /// A collection was stopped part way by a limit (memory or a
    /// cancellation): some roots name nodes of a heap that is gone, so the
    /// run, which has ended, must not read its heap again.
    torn: bool,
}

impl State {
    fn new(image: &Image, limits: &Limits) -> Self {
        State {
            heap: Heap::new(image),
            tags: Tags::default(),
            focus: image.root,
            from: image.root,
            how: HERE,
            tracking: image.is_marked(),
            ctx: Vec::new(),
            values: Vec::new(),
            jobs: Vec::new(),
            done: Vec::new(),
            budget: Budget::new(limits),
            gc_at: MIN_COLLECT,
            strings_at: MIN_COLLECT,
            live: 0,
            string_live: 0,
            due: false,
            collections: 0,
            torn: false,
        }
    }

    /// Bytes the run holds, as the memory limit counts them.
    fn held(&self) -> usize {
        self.heap.bytes()
            + self.tags.bytes()
            + self.ctx.capacity() * std::mem::size_of::<ContextFrame>()
            + self.values.capacity() * 4
            + self.jobs.capacity() * std::mem::size_of::<SubstJob>()
            + self.done.capacity() * 4
    }

    /// After a growth to `held` bytes: collect at the next chance if a
    /// collection (its forwarding table and a copy of what it would keep)
    /// would soon no longer fit, and it is worth making.
    fn near_limit(&mut self, held: usize) {
        let used = self.heap.used();
        let table = self.heap.nodes.len() * 4;
        let copy = used.min(self.live.saturating_mul(2).saturating_add(64 << 10));
        if held.saturating_add(table).saturating_add(copy) > self.budget.memory
            && self.worth_collecting(0)
        {
            self.due = true;
        }
    }

    /// Bytes of the roots a collection scans: the context and value stack.
    fn roots(&self) -> usize {
        self.ctx.len() * std::mem::size_of::<ContextFrame>() + self.values.len() * 4
    }

    /// Whether a collection now would free at least `need` bytes, and at
    /// least half of what it costs (what it keeps and scans), so that
    /// collections near the limit do not follow each other for little gain.
    fn worth_collecting(&self, need: usize) -> bool {
        let garbage = self.heap.used().saturating_sub(self.live)
            + self.heap.string_bytes.saturating_sub(self.string_live);
        let cost = self.live + self.roots();
        garbage >= need.max(cost / 2).max(64 << 10)
    }

    // ---- growth, each checked against the memory limit before it happens

    /// The capacity, in elements of `size` bytes, a vector of `len` of
    /// `cap` should grow to, to take `extra` more: `wanted` (say, double)
    /// if that fits under the limit, else half the room left (so that
    /// growth slows down near the limit and a collection can come first),
    /// else just what is needed; `Err` if even that passes the limit.
    fn capacity_within(
        &mut self,
        len: usize,
        cap: usize,
        extra: usize,
        wanted: usize,
        size: usize,
    ) -> Result<usize, Halt> {
        let need = len.saturating_add(extra);
        // While it moves, the vector is held twice: its old and new
        // buffers both count.
        let held = self.held();
        let fits = |c: usize| held.saturating_add(c.saturating_mul(size)) <= self.budget.memory;
        let wanted = wanted.max(need);
        let new = if fits(wanted) {
            wanted
        } else {
            let room = self.budget.memory.saturating_sub(held) / size.max(1);
            need.max(room / 2)
        };
        self.budget
            .check_memory(held.saturating_add(new.saturating_mul(size)))?;
        let after = held.saturating_sub(cap.saturating_mul(size));
        self.near_limit(after.saturating_add(new.saturating_mul(size)));
        Ok(new)
    }

    #[cold]
    #[inline(never)]
    fn grow<T>(&mut self, which: fn(&mut State) -> &mut Vec<T>, extra: usize) -> Result<(), Halt> {
        let v = which(self);
        let (len, cap) = (v.len(), v.capacity());
        let Some(bytes) = growth(v, extra) else {
            return Ok(());
        };
        let size = std::mem::size_of::<T>().max(1);
        let cap = self.capacity_within(len, cap, extra, bytes / size, size)?;
        let v = which(self);
        v.reserve_exact(cap.saturating_sub(v.len()));
        Ok(())
    }

    /// Make room for one more frame (`values`: one more value) on a stack
    /// the collector scans: if the memory limit refuses the growth and a
    /// collection would free enough, collect and try again. The state is
    /// whole here, but ids read before this call may have moved.
    #[cold]
    #[inline(never)]
    fn room_for_root(&mut self, image: &Image, values: bool) -> Result<(), Halt> {
        let grow = |s: &mut State| {
            if values {
                s.grow(|s| &mut s.values, 1)
            } else {
                s.grow(|s| &mut s.ctx, 1)
            }
        };
        let peak = self.budget.peak;
        match grow(self) {
            Err(Halt::Memory) if self.worth_collecting(0) => {
                // The refused growth was never held: it is not a peak.
                self.budget.peak = peak;
                self.collect(image)?;
                grow(self)
            }
            other => other,
        }
    }

    /// Push the focus onto the value stack.
    #[inline(always)]
    fn push_focus(&mut self, image: &Image) -> Result<(), Halt> {
        if self.values.len() == self.values.capacity() {
            self.room_for_root(image, true)?;
        }
        self.values.push(self.focus);
        Ok(())
    }

    #[inline(always)]
    fn push_job(&mut self, job: SubstJob) -> Result<(), Halt> {
        if self.jobs.len() == self.jobs.capacity() {
            self.grow(|s| &mut s.jobs, 1)?;
        }
        self.jobs.push(job);
        Ok(())
    }

    #[inline(always)]
    fn push_done(&mut self, id: Id) -> Result<(), Halt> {
        if self.done.len() == self.done.capacity() {
            self.grow(|s| &mut s.done, 1)?;
        }
        self.done.push(id);
        Ok(())
    }

    /// Make room for `extra` more list entries.
    #[inline(always)]
    fn list_room(&mut self, extra: usize) -> Result<(), Halt> {
        if self.heap.lists.capacity() - self.heap.lists.len() < extra {
            if self.heap.lists_full(extra) {
                return Err(Halt::Memory);
            }
            self.grow(|s| &mut s.heap.lists, extra)?;
        }
        Ok(())
    }

    /// A new heap node.
    #[inline(always)]
    fn node(&mut self, node: INode, scope: u32, value: bool) -> Result<Id, Halt> {
        if !self.heap.has_room(1) {
            self.grow_nodes()?;
        }
        Ok(self.heap.push(node, scope, value))
    }

    /// The image node the focus stands for ([`NONE`] for a program without
    /// spans or names, or where it is not known).
    #[inline(always)]
    pub(super) fn focus_at(&self, image: &Image) -> Id {
        if !self.tracking {
            NONE
        } else if !self.heap.is_heap(self.focus) {
            self.focus
        } else {
            place(image, self.from, self.how)
        }
    }

    /// The focus comes from image node `from` by way `how` (see [`place`]).
    #[inline(always)]
    fn came(&mut self, from: Id, how: u32) {
        self.from = from;
        self.how = how;
    }

    #[cold]
    #[inline(never)]
    fn grow_nodes(&mut self) -> Result<(), Halt> {
        // Up to the next collection's threshold, not past it.
        let soft = self.gc_at / NODE_BYTES + 1;
        if let Some(wanted) = self.heap.node_capacity(1, soft)? {
            let (len, cap) = (self.heap.nodes.len(), self.heap.nodes.capacity());
            let cap = self.capacity_within(len, cap, 1, wanted, NODE_BYTES)?;
            self.heap.grow_nodes(cap);
        }
        Ok(())
    }

    /// A new string node. The string's bytes are checked before it is
    /// shared (which copies it once, so twice its size for a moment).
    fn string(&mut self, s: String) -> Result<Id, Halt> {
        let bytes = s.len().saturating_mul(2).saturating_add(STRING_OVERHEAD);
        self.budget
            .check_memory(self.held().saturating_add(bytes))?;
        if self.heap.strings.len() == self.heap.strings.capacity() {
            self.grow(|s| &mut s.heap.strings, 1)?;
        }
        let index = self.heap.push_string(Arc::from(s));
        if self.heap.string_bytes >= self.strings_at {
            self.due = true;
        }
        self.node(INode::Str(index), 0, true)
    }

    /// A list of the top `n` entries of the substitution's result stack,
    /// which loses them; its position.
    fn list_from_done(&mut self, n: usize) -> Result<u32, Halt> {
        self.list_room(n)?;
        let start = self.heap.list_end();
        let at = self.done.len().saturating_sub(n);
        self.heap.lists.extend_from_slice(&self.done[at..]);
        self.done.truncate(at);
        Ok(start)
    }

    // ---- the collector

    /// Collect the heap: copy what the focus, the context and the value
    /// stack reach into a new heap (image nodes stay where they are), and
    /// set the next collection's thresholds.
    fn collect(&mut self, image: &Image) -> Result<(), Halt> {
        self.due = false;
        let held = self.held();
        let estimate = (self.live / NODE_BYTES)
            .saturating_mul(2)
            .saturating_add(1024);
        let old = std::mem::replace(&mut self.heap, Heap::new(image));
        let mut c = match Collector::new(image, &old, held, estimate, &mut self.budget) {
            Ok(c) => c,
            Err(halt) => {
                // Nothing has moved yet: the run is as it was.
                self.heap = old;
                return Err(halt);
            }
        };
        let budget = &mut self.budget;
        let moved = forward_roots(image, &mut c, &mut self.focus, &mut self.values, &mut self.ctx, budget);
        if let Err(halt) = moved {
            self.torn = true;
            return Err(halt);
        }
        self.heap = c.to;
        drop(old);
        self.collections += 1;
        self.live = self.heap.used();
        self.string_live = self.heap.string_bytes;
        // What the next collection will cost: what it keeps, and the roots
        // it scans. The heap may grow to RATIO times that first.
        let roots = self.roots();
        self.gc_at = MIN_COLLECT.max(
            RATIO
                .saturating_mul(self.live)
                .saturating_add(roots.saturating_mul(2)),
        );
        let allowance = MIN_COLLECT
            .max(self.string_live.saturating_mul(STRING_RATIO - 1))
            .max(self.live.saturating_add(roots));
        self.strings_at = self.string_live.saturating_add(allowance);
        self.budget.check_memory(self.held())
    }

    // ---- the search for the next redex, and its contraction

    /// Reduce until a value (its id), an error, the end of the fuel (the
    /// state left as it was before the contraction that could not be paid,
    /// so a resumed run makes it), or a limit.
    fn reduce(
        &mut self,
        image: &Image,
        host: &HostFunctions,
        trace: &mut Option<Trace<'_>>,
    ) -> Result<Id, Halt> {
        loop {
            let focus = self.focus;
            // Down through the focus while it is not a value...
            if !self.heap.is_value(image, focus) {
                self.descend(image, host, trace)?;
                continue;
            }
            // ... then, with a value in the hole, out through the context.
            let Some(&top) = self.ctx.last() else {
                return Ok(focus);
            };
            let last = self.ctx.len() - 1;
            match top {
                ContextFrame::AppFunction { argument, at } => {
                    self.ctx[last] = ContextFrame::AppArgument {
                        function: focus,
                        at,
                    };
                    self.focus = argument;
                    self.came(at, 1);
                    continue;
                }
                ContextFrame::Mark { .. } => {
                    // The call has returned its value: its mark goes, free.
                    self.ctx.pop();
                    continue;
                }
                ContextFrame::Operand { left, .. } | ContextFrame::Field { left, .. }
                    if left > 0 =>
                {
                    // (A collection may move the frame's list: read it after.)
                    self.push_focus(image)?;
                    let last = self.ctx.len() - 1;
                    match &mut self.ctx[last] {
                        ContextFrame::Operand { next, left, at, .. }
                        | ContextFrame::Field { next, left, at, .. } => {
                            self.focus = self.heap.list(image, *next);
                            *next += 1;
                            *left -= 1;
                            let (from, how) = (*at, FROM_END | *left);
                            self.came(from, how);
                        }
                        _ => return Err(internal("a frame changed under the collector")),
                    }
                    continue;
                }
                ContextFrame::Field { tag, arity, .. } => {
                    // A constructor of values is a value: building it is free.
                    self.construct(tag, arity)?;
                    continue;
                }
                ContextFrame::AppArgument { function, at } => {
                    self.beta(image, function, at, trace)?
                }
                ContextFrame::LetBound { body, at } => self.let_in(image, body, at, trace)?,
                ContextFrame::IfCondition { yes, no, at } => {
                    self.if_then_else(image, yes, no, at, trace)?
                }
                ContextFrame::Operand { op, .. } => self.prim(image, host, op, trace)?,
                ContextFrame::Scrutinee { case, bodies, .. } => {
                    self.case(image, case, bodies, trace)?
                }
            }
            if self.heap.used() >= self.gc_at || self.due {
                self.collect(image)?;
            }
        }
    }

    /// One step down into `focus`, which is not a value: push its frame and
    /// focus on its first subterm (or contract it, a host call without
    /// arguments).
    fn descend(
        &mut self,
        image: &Image,
        host: &HostFunctions,
        trace: &mut Option<Trace<'_>>,
    ) -> Result<(), Halt> {
        if self.ctx.len() == self.ctx.capacity() {
            self.room_for_root(image, false)?;
        }
        // Room is made: the pushes below do not grow the stack.
        let focus = self.focus;
        let at = self.focus_at(image);
        match self.heap.node(image, focus) {
            INode::App(function, argument) => {
                self.ctx.push(ContextFrame::AppFunction { argument, at });
                self.focus = function;
            }
            INode::Let(bound, body) => {
                self.ctx.push(ContextFrame::LetBound { body, at });
                self.focus = bound;
            }
            INode::If(condition, yes, no) => {
                self.ctx.push(ContextFrame::IfCondition { yes, no, at });
                self.focus = condition;
            }
            INode::Prim(op, start) => {
                let arity = op.arity() as u32;
                if arity == 0 {
                    let Prim::Host(id) = op else {
                        return Err(internal("a primitive without operands"));
                    };
                    let base = self.values.len();
                    self.host_call(image, host, id, base, true, trace)?;
                    if self.heap.used() >= self.gc_at || self.due {
                        self.collect(image)?;
                    }
                    return Ok(());
                }
                self.ctx.push(ContextFrame::Operand {
                    op,
                    next: start + 1,
                    left: arity - 1,
                    at,
                });
                self.focus = self.heap.list(image, start);
            }
            INode::Con(tag, start, len) if len > 0 => {
                self.ctx.push(ContextFrame::Field {
                    tag,
                    arity: len,
                    next: start + 1,
                    left: len - 1,
                    at,
                });
                self.focus = self.heap.list(image, start);
            }
            INode::Case(scrutinee, x) => {
                let (case, bodies) = self.heap.case_of(image, focus, x);
                self.ctx.push(ContextFrame::Scrutinee { case, bodies, at });
                self.focus = scrutinee;
            }
            INode::Var { index, .. } => {
                return Err(internal(&format!(
                    "free variable #{index} in a validated program"
                )))
            }
            _ => return Err(internal("a value taken for a redex")),
        }
        // Every construct is entered at its first subterm.
        self.came(at, 0);
        Ok(())
    }

    /// Build the constructor of the innermost field frame from its values.
    fn construct(&mut self, tag: TagId, arity: u32) -> Result<(), Halt> {
        let k = arity as usize - 1;
        self.list_room(arity as usize)?;
        let start = self.heap.list_end();
        let base = self.values.len().saturating_sub(k);
        self.heap.lists.extend_from_slice(&self.values[base..]);
        self.heap.lists.push(self.focus);
        self.values.truncate(base);
        let id = self.node(INode::Con(tag, start, arity), 0, true)?;
        self.ctx.pop();
        self.focus = id;
        Ok(())
    }

    /// The contraction is made: the innermost frame goes, the contractum is
    /// the focus.
    #[inline(always)]
    fn contracted(&mut self, next: Id) {
        self.ctx.pop();
        self.focus = next;
    }

    /// `(λ. t) v` or `(μλ. t) v` at application `site`, with `v` the
    /// focus. The contractum is marked as the body of a call of the λ made
    /// at `site`; directly in another mark (a tail call), it takes that
    /// mark's place, so the context does not grow.
    fn beta(
        &mut self,
        image: &Image,
        function: Id,
        site: Id,
        trace: &mut Option<Trace<'_>>,
    ) -> Result<(), Halt> {
        let v = self.focus;
        let node = self.heap.node(image, function);
        let rule = if matches!(node, INode::RecLam { .. }) {
            Rule::BetaRec
        } else {
            Rule::Beta
        };
        self.budget.take(rule)?;
        self.traced(image, trace, rule, false)?;
        let next = match node {
            INode::Lam { body, .. } => self.instantiate(image, body, Binds::One(v))?,
            INode::RecLam { body, .. } => self.instantiate(image, body, Binds::Two(v, function))?,
            _ => {
                let f = operand(image, &self.heap, &self.tags, function);
                return Err(Halt::error(EvalError::not_a_function(f)));
            }
        };
        // A contractum that is a value leaves no mark: it would go at once.
        if self.heap.is_value(image, next) {
            self.contracted(next);
            return Ok(());
        }
        // The λ applied, as a program node: itself, or for a copy the λ at
        // its place in its function (only looked up for a marked program).
        let lam = match node {
            _ if !self.tracking => NONE,
            _ if !self.heap.is_heap(function) => function,
            INode::Lam { func, pos, .. } => image.lam_at(func, pos),
            INode::RecLam { func, .. } => image.lam_at(func, 0),
            _ => NONE,
        };
        // The contractum is the λ's body.
        self.came(lam, 0);
        // The application's frame becomes the mark (no growth), or goes
        // when a mark is directly under it.
        let mark = ContextFrame::Mark { site, lam };
        let last = self.ctx.len() - 1;
        match last.checked_sub(1).map(|below| &mut self.ctx[below]) {
            Some(below @ ContextFrame::Mark { .. }) => {
                *below = mark;
                self.ctx.pop();
            }
            _ => self.ctx[last] = mark,
        }
        self.focus = next;
        Ok(())
    }

    /// Where the run stopped: the redex of the innermost frame when the
    /// focus is a value it waits for (a contraction that failed or could
    /// not be paid), else the focus itself; and the marks of the context.
    pub(super) fn trail(&self, image: &Image) -> Trail {
        let top = self.ctx.last().copied();
        let redex = match top.and_then(ContextFrame::redex) {
            Some(at) if !self.torn && self.heap.is_value(image, self.focus) => at,
            _ => self.focus_at(image),
        };
        let mut trail = Trail::new(redex);
        for frame in self.ctx.iter().rev() {
            if let ContextFrame::Mark { site, lam } = *frame {
                trail.push(site, lam);
            }
        }
        trail
    }

    /// `let v in t`.
    fn let_in(
        &mut self,
        image: &Image,
        body: Id,
        at: Id,
        trace: &mut Option<Trace<'_>>,
    ) -> Result<(), Halt> {
        self.budget.take(Rule::Let)?;
        self.traced(image, trace, Rule::Let, false)?;
        let next = self.instantiate(image, body, Binds::One(self.focus))?;
        self.came(at, 1);
        self.contracted(next);
        Ok(())
    }

    /// `if v then t else u`.
    fn if_then_else(
        &mut self,
        image: &Image,
        yes: Id,
        no: Id,
        at: Id,
        trace: &mut Option<Trace<'_>>,
    ) -> Result<(), Halt> {
        self.budget.take(Rule::If)?;
        self.traced(image, trace, Rule::If, false)?;
        let next = match self.heap.node(image, self.focus) {
            INode::Bool(true) => {
                self.came(at, 1);
                yes
            }
            INode::Bool(false) => {
                self.came(at, 2);
                no
            }
            _ => {
                let c = operand(image, &self.heap, &self.tags, self.focus);
                return Err(Halt::error(EvalError::not_a_boolean(c)));
            }
        };
        self.contracted(next);
        Ok(())
    }

    /// `case v of {…}` for image case `ic` with its bodies at `bodies`.
    fn case(
        &mut self,
        image: &Image,
        ic: u32,
        bodies: u32,
        trace: &mut Option<Trace<'_>>,
    ) -> Result<(), Halt> {
        self.budget.take(Rule::Case)?;
        self.traced(image, trace, Rule::Case, false)?;
        let Some(case) = image.cases.get(ic as usize).copied() else {
            return Err(internal("a case the image lacks"));
        };
        let v = self.focus;
        let arm = match self.heap.node(image, v) {
            INode::Con(tag, start, len) => {
                find_arm(image, &case, tag, len).map(|i| (i, start, len))
            }
            _ => None,
        };
        let next = match arm {
            Some((i, start, len)) => {
                let body = self.heap.arm_body(image, &case, bodies, i);
                let next = self.instantiate(image, body, Binds::Fields { start, len })?;
                let arm_body = image.arms.get((case.arms + i) as usize).map_or(NONE, |a| a.body);
                self.came(arm_body, HERE);
                next
            }
            None => match self.heap.default_body(image, &case, bodies) {
                Some(default) => {
                    self.came(case.default, HERE);
                    default
                }
                None => {
                    let s = operand(image, &self.heap, &self.tags, v);
                    return Err(Halt::error(EvalError::no_matching_case(s)));
                }
            },
        };
        self.contracted(next);
        Ok(())
    }

    /// `op(v…)`: the operands are the top `arity - 1` values and the focus.
    fn prim(
        &mut self,
        image: &Image,
        host: &HostFunctions,
        op: Prim,
        trace: &mut Option<Trace<'_>>,
    ) -> Result<(), Halt> {
        let arity = op.arity();
        let base = self.values.len().saturating_sub(arity - 1);
        if let Prim::Host(id) = op {
            return self.host_call(image, host, id, base, false, trace);
        }
        if arity == 2 {
            let x = self.heap.node(image, self.values[base]);
            let y = self.heap.node(image, self.focus);
            if let (INode::Int(x), INode::Int(y)) = (x, y) {
                if let Some(result) = int_prim(op, x, y) {
                    self.budget.take(Rule::Prim)?;
                    self.traced(image, trace, Rule::Prim, false)?;
                    let id = self.node(result, 0, true)?;
                    self.values.truncate(base);
                    self.contracted(id);
                    return Ok(());
                }
            }
        }
        let (units, made) = {
            let operands = operands(
                image,
                &self.heap,
                &self.tags,
                &self.values[base..],
                self.focus,
            );
            let made = match (op, &operands[..]) {
                (Prim::Concat, [Operand::Str(a), Operand::Str(b)]) => {
                    a.len().saturating_add(b.len())
                }
                _ => 0,
            };
            (fuel_units(op, &operands), made)
        };
        // A long string is refused before it is made; garbage strings are
        // collected first if that makes room.
        let bytes = made.saturating_mul(2).saturating_add(STRING_OVERHEAD);
        if made > 0
            && self.held().saturating_add(bytes) > self.budget.memory
            && self.worth_collecting(bytes)
        {
            self.collect(image)?;
        }
        self.budget.pay(Rule::Prim, units)?;
        self.traced(image, trace, Rule::Prim, false)?;
        if made > 0 {
            self.budget
                .check_memory(self.held().saturating_add(bytes))?;
        }
        let base = self.values.len().saturating_sub(arity - 1);
        let result = {
            let operands = operands(
                image,
                &self.heap,
                &self.tags,
                &self.values[base..],
                self.focus,
            );
            let budget = &self.budget;
            delta_polled(op, &operands, &mut || budget.is_cancelled())
        };
        let id = match result {
            Ok(PrimValue::Int(n)) => self.node(INode::Int(n), 0, true)?,
            Ok(PrimValue::Bool(b)) => self.node(INode::Bool(b), 0, true)?,
            Ok(PrimValue::Str(s)) => self.string(s)?,
            Err(Stopped::Error(e)) => return Err(Halt::error(e)),
            Err(Stopped::Cancelled) => return Err(Halt::Cancelled),
            Err(Stopped::Memory) => return Err(Halt::Memory),
        };
        self.values.truncate(base);
        self.contracted(id);
        Ok(())
    }

    /// A host function's contraction, in the order [`host_step`] fixes: its
    /// arguments are the values from `base` and (unless it has none) the
    /// focus, read as data within the room left under the memory limit.
    fn host_call(
        &mut self,
        image: &Image,
        host: &HostFunctions,
        id: HostId,
        base: usize,
        nullary: bool,
        trace: &mut Option<Trace<'_>>,
    ) -> Result<(), Halt> {
        let fuel_left = self.budget.fuel_left();
        let held = self.held();
        let (made, new_tags) = {
            let mut ids: SmallVec<[Id; 4]> = self.values[base..].iter().copied().collect();
            if !nullary {
                ids.push(self.focus);
            }
            let args = if fuel_left > 0 {
                let mut room = self.budget.room(held);
                let mut args = Vec::with_capacity(ids.len());
                let mut refused = None;
                for &arg in &ids {
                    match to_datum(image, &self.tags, &self.heap, arg, room, &mut self.budget)? {
                        Ok((datum, bytes)) => {
                            room = room.saturating_sub(bytes);
                            args.push(datum);
                        }
                        Err(why) => {
                            refused = Some(why);
                            break;
                        }
                    }
                }
                match refused {
                    Some(why) => Err(why),
                    None => Ok(args),
                }
            } else {
                Ok(Vec::new())
            };
            match host_step(host, id, &mut self.budget, args) {
                HostStep::OutOfFuel => return Err(Halt::OutOfFuel),
                HostStep::TooLarge => return Err(Halt::Memory),
                HostStep::Made { fuel, result } => {
                    let mut new = Vec::new();
                    let made = result.map(|datum| flatten(datum, image, &self.tags, &mut new));
                    ((fuel, made), new)
                }
            }
        };
        let (fuel, made) = made;
        self.budget.pay(Rule::Prim, fuel)?;
        self.traced(image, trace, Rule::Prim, nullary)?;
        let pieces = made.map_err(Halt::error)?;
        let tag_bytes: usize = new_tags.iter().map(|t| 2 * t.len() + 96).sum();
        self.budget
            .check_memory(self.held().saturating_add(tag_bytes))?;
        self.tags.append(new_tags);
        let result = self.build_pieces(pieces)?;
        self.values.truncate(base);
        if nullary {
            self.focus = result;
        } else {
            self.contracted(result);
        }
        Ok(())
    }

    /// Put the program's term `root a1 … an` in the focus: each argument
    /// made heap data (within the memory limit), applied in order.
    fn load(&mut self, image: &Image, args: &[Datum<'static>]) -> Result<(), Halt> {
        let mut term = image.root;
        for arg in args {
            let mut new = Vec::new();
            let pieces = flatten(arg.clone(), image, &self.tags, &mut new);
            let tag_bytes: usize = new.iter().map(|t| 2 * t.len() + 96).sum();
            self.budget
                .check_memory(self.held().saturating_add(tag_bytes))?;
            self.tags.append(new);
            let value = self.build_pieces(pieces)?;
            term = self.node(INode::App(term, value), 0, false)?;
        }
        self.focus = term;
        // The program applied to data has no node of its own.
        self.came(NONE, HERE);
        Ok(())
    }

    /// A host's result as heap nodes.
    fn build_pieces(&mut self, pieces: Vec<Fragment>) -> Result<Id, Halt> {
        let start = self.done.len();
        for piece in pieces {
            self.budget.work(1)?;
            let id = match piece {
                Fragment::Int(n) => self.node(INode::Int(n), 0, true)?,
                Fragment::Bool(b) => self.node(INode::Bool(b), 0, true)?,
                Fragment::Str(s) => self.string(s)?,
                Fragment::Con(tag, arity) => {
                    let at = self.list_from_done(arity as usize)?;
                    self.node(INode::Con(tag, at, arity), 0, true)?
                }
            };
            self.push_done(id)?;
        }
        let result = self
            .done
            .pop()
            .ok_or_else(|| internal("an empty host result"))?;
        self.done.truncate(start);
        Ok(result)
    }
}

/// A way from an image node to where the focus stands ([`State::came`]):
/// the node itself.
const HERE: u32 = u32::MAX;
/// With a count: the operand or field with that many after it.
const FROM_END: u32 = 1 << 31;

/// The image node reached from image node `from` by way `how`: `HERE`, a
/// child (0, 1 or 2, in evaluation order: a case's scrutinee, a λ's body;
/// see [`Image::kid`]), or an operand or field counted from the end
/// (`FROM_END`); [`NONE`] where `from` is not known.
#[inline(always)]
fn place(image: &Image, from: Id, how: u32) -> Id {
    if how < 3 {
        return image.kid(from, how);
    }
    if how == HERE {
        return from;
    }
    from_end(image, from, how & !FROM_END)
}

/// The operand or field of image node `from` with `after` more after it,
/// or [`NONE`].
#[inline(never)]
fn from_end(image: &Image, from: Id, after: u32) -> Id {
    let (start, len) = match image.nodes.get(from as usize) {
        Some(&INode::Prim(op, start)) => (start, op.arity()),
        Some(&INode::Con(_, start, len)) => (start, len as usize),
        _ => return NONE,
    };
    match len.checked_sub(after as usize + 1) {
        Some(k) => image.lists.get(start as usize + k).copied().unwrap_or(NONE),
        None => NONE,
    }
}

/// A bug in orrery, reported as a fault rather than a panic.
#[cold]
fn internal(what: &str) -> Halt {
    Halt::fault(format!("in the stepper: {what}"))
}

/// What value `id` looks like to a primitive or an error message.
fn operand<'a>(image: &'a Image, heap: &'a Heap, tags: &'a Tags, id: Id) -> Operand<'a> {
    match heap.node(image, id) {
        INode::Int(n) => Operand::Int(n),
        INode::Bool(b) => Operand::Bool(b),
        INode::Str(i) => Operand::Str(heap.string(image, id, i)),
        INode::Con(tag, ..) => Operand::Con(tags.name(image, tag)),
        _ => Operand::Function,
    }
}

/// The operands `values` then `last` as a primitive sees them.
fn operands<'a>(
    image: &'a Image,
    heap: &'a Heap,
    tags: &'a Tags,
    values: &[Id],
    last: Id,
) -> SmallVec<[Operand<'a>; 2]> {
    values
        .iter()
        .chain(std::iter::once(&last))
        .map(|&v| operand(image, heap, tags, v))
        .collect()
}

/// `op(x, y)` on integers when it is a comparison or an arithmetic
/// operation that does not fail; `None` sends everything else through the
/// shared δ-rules.
#[inline(always)]
fn int_prim(op: Prim, x: i64, y: i64) -> Option<INode> {
    Some(match op {
        Prim::Add => INode::Int(x.checked_add(y)?),
        Prim::Sub => INode::Int(x.checked_sub(y)?),
        Prim::Mul => INode::Int(x.checked_mul(y)?),
        Prim::Lt => INode::Bool(x < y),
        Prim::Le => INode::Bool(x <= y),
        Prim::Gt => INode::Bool(x > y),
        Prim::Ge => INode::Bool(x >= y),
        Prim::Eq => INode::Bool(x == y),
        Prim::Ne => INode::Bool(x != y),
        _ => return None,
    })
}

/// The index of the arm of `case` for a constructor of `tag` with `arity`
/// fields.
fn find_arm(image: &Image, case: &CaseInfo, tag: TagId, arity: u32) -> Option<u32> {
    let arms = image.case_arms(case);
    let i = if case.lookup == NONE {
        arms.iter().position(|a| a.tag == tag)?
    } else {
        let order = image
            .lookup
            .get(case.lookup as usize..(case.lookup + case.len) as usize)?;
        let k = order
            .binary_search_by(|&i| arms.get(i as usize).map_or(u32::MAX, |a| a.tag).cmp(&tag))
            .ok()?;
        *order.get(k)? as usize
    };
    (arms.get(i)?.arity == arity).then_some(i as u32)
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
/// not re-walk the term from the root after each step. A term that is not a
/// valid program (see [`crate::validate`]) has no step: the result is
/// [`Step::Value`].
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
    let Ok(image) = Image::build(term, &NO_HOST) else {
        return Step::Value;
    };
    let limits = Limits::default().with_memory(usize::MAX).with_fuel(1);
    let mut state = State::new(&image, &limits);
    let mut seen: Option<(Rule, &'r Term<'r>)> = None;
    let mut scratch = Arena::new();
    let end = {
        let mut record = |rule: Rule, redex: &Term<'_>| seen = Some((rule, arena.copy_term(redex)));
        let mut trace = Some(Trace {
            scratch: &mut scratch,
            sink: &mut record,
        });
        state.reduce(&image, &NO_HOST, &mut trace)
    };
    let Some((rule, redex)) = seen else {
        return Step::Value;
    };
    // After one contraction the run has a value (the focus, with no
    // context left) or has paused before the next: either way the whole
    // term is the next one.
    let next = match end {
        Ok(_) | Err(Halt::OutOfFuel) => state.whole(&image, arena),
        Err(halt) => Err(halt),
    };
    match next {
        Ok(next) => Step::Contracted { rule, redex, next },
        Err(halt) => match state.halted(halt) {
            Outcome::Error(error) => Step::Stuck { rule, redex, error },
            _ => Step::Value,
        },
    }
}

impl Stepper {
    /// A stepper with an empty scratch arena.
    ///
    /// # Examples
    ///
    /// ```
    /// let _stepper = orrery::machines::stepper::Stepper::new();
    /// ```
    pub fn new() -> Self {
        Stepper::default()
    }

    /// Run `program` to its outcome (as [`Machine::run`]).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{Limits, Program};
    /// let program = Program::parse("let half = \\n. n / 2 in half 84").unwrap();
    /// let report = Stepper::new().run(&program, &Limits::default());
    /// assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(42));
    /// ```
    pub fn run(&mut self, program: &Program, limits: &Limits) -> Report {
        let (report, peak) = run_with(program, limits, &mut None);
        self.peak = peak;
        report
    }

    /// Run like [`Stepper::run`], calling `trace` with each contraction's
    /// rule and redex as it is made (attempts that fail included). The redex
    /// is a term of the stepper's scratch arena, valid for the call.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{print, Limits, Program, Rule};
    /// let program = Program::parse("if 1 < 2 then \"yes\" else \"no\"").unwrap();
    /// let mut lines = Vec::new();
    /// Stepper::new().run_traced(&program, &Limits::default(), &mut |rule, redex| {
    ///     lines.push(format!("{rule}: {}", print(redex)));
    /// });
    /// assert_eq!(lines, ["prim: 1 < 2", "if: if true then \"yes\" else \"no\""]);
    /// ```
    pub fn run_traced(
        &mut self,
        program: &Program,
        limits: &Limits,
        trace: &mut dyn FnMut(Rule, &Term<'_>),
    ) -> Report {
        let (report, peak) = {
            let mut trace = Some(Trace {
                scratch: &mut self.scratch,
                sink: trace,
            });
            run_with(program, limits, &mut trace)
        };
        self.peak = peak;
        // Keep a small scratch arena for the next run, not a big one.
        if self.scratch.allocated_bytes() > 1 << 20 {
            self.scratch = Arena::new();
        } else {
            self.scratch.reset();
        }
        report
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
    /// use orrery::{Limits, Outcome, Program};
    /// let program = Program::parse("let rec count n = if n == 0 then 7 else count (n - 1) in count 50").unwrap();
    /// let whole = Stepper::new().run(&program, &Limits::default());
    /// let mut run = Stepper::new().start(&program, &Limits::default().with_fuel(0));
    /// let mut pauses = 0;
    /// let outcome = loop {
    ///     match run.resume(10).outcome {
    ///         Outcome::OutOfFuel => pauses += 1,
    ///         other => break other,
    ///     }
    /// };
    /// assert_eq!(outcome, whole.outcome);
    /// assert_eq!(run.counts(), whole.counts);
    /// assert_eq!(pauses as u64, whole.counts.total() / 10);
    /// ```
    pub fn start(&self, program: &Program, limits: &Limits) -> StepperRun {
        StepperRun {
            state: State::new(program.image(), limits),
            program: program.clone(),
            loaded: false,
            end: None,
            location: None,
        }
    }
}

/// Run `program` to its end, with a tracer if given: the report and the
/// run's peak bytes.
fn run_with(program: &Program, limits: &Limits, trace: &mut Option<Trace<'_>>) -> (Report, usize) {
    let image = program.image();
    let host = program.host();
    let mut state = State::new(image, limits);
    let end = match state.load(image, program.args()) {
        Ok(()) => state.reduce(image, host, trace),
        Err(halt) => Err(halt),
    };
    let location = match &end {
        Err(halt) => state.located(image, halt),
        Ok(_) => None,
    };
    let outcome = state.outcome(image, host, end);
    let location = location.or_else(|| stopped_without_redex(&outcome));
    let report = Report {
        outcome,
        counts: state.budget.counts,
        location,
    };
    (report, state.budget.peak)
}

/// How a [`StepperRun`] ended.
#[derive(Debug)]
enum End {
    /// With a value, read back.
    Value(crate::Value),
    Ended(Ended),
}

/// A stepper run that pauses when its fuel runs out (see [`Stepper::start`]).
/// It owns its state between resumes — its program (shared), its heap and
/// its context — so it is `'static` and `Send`. When paused, a heap that has
/// grown past twice what its last collection kept is collected first, so a
/// paused run holds its live state and little more; once ended, it holds
/// only its value.
///
/// # Examples
///
/// ```
/// use orrery::machines::stepper::Stepper;
/// use orrery::{Limits, Outcome, Program};
/// let program = Program::parse("let stock = 40 in stock - 15").unwrap();
/// let mut run = Stepper::new().start(&program, &Limits::default().with_fuel(1));
/// assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
/// assert_eq!(run.resume(1).outcome.value().and_then(|v| v.as_int()), Some(25));
/// ```
#[derive(Debug)]
pub struct StepperRun {
    program: Program,
    state: State,
    /// Whether the term `root a1 … an` is in the heap yet (it is put there
    /// by the first resume).
    loaded: bool,
    end: Option<End>,
    /// Where the run stopped, once it has ended without a value.
    location: Option<Location>,
}

impl StepperRun {
    /// Add `more_fuel` and run on until the program ends or the fuel runs out
    /// again. Once the run has ended, every resume reports the same end.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{Limits, Outcome, Program};
    /// let program = Program::parse("(1 + 2) * (3 + 4)").unwrap();
    /// let mut run = Stepper::new().start(&program, &Limits::default().with_fuel(2));
    /// assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
    /// assert_eq!(run.resume(1).outcome.value().and_then(|v| v.as_int()), Some(21));
    /// assert_eq!(run.counts().total(), 3);
    /// ```
    pub fn resume(&mut self, more_fuel: u64) -> Report {
        if self.end.is_none() {
            let image = self.program.image();
            let state = &mut self.state;
            state.budget.resumed(more_fuel);
            let loaded = if self.loaded {
                Ok(())
            } else {
                self.loaded = true;
                state.load(image, self.program.args())
            };
            let end = match loaded {
                Ok(()) => state.reduce(image, self.program.host(), &mut None),
                Err(halt) => Err(halt),
            };
            if let Err(halt) = &end {
                self.location = state.located(image, halt);
            }
            match end {
                Err(Halt::OutOfFuel) => match state.pause(image) {
                    Ok(()) => {
                        return Report {
                            outcome: state.budget.paused(),
                            counts: state.budget.counts,
                            location: self.location.take(),
                        }
                    }
                    Err(halt) => {
                        self.location = state.located(image, &halt);
                        self.end = Some(state.ended(halt));
                    }
                },
                Ok(value) => {
                    state.focus = value;
                    state.ctx = Vec::new();
                    state.values = Vec::new();
                    state.jobs = Vec::new();
                    state.done = Vec::new();
                    self.end = Some(match state.read_back(image, self.program.host(), value) {
                        Ok(v) => {
                            state.heap = Heap::default();
                            End::Value(v)
                        }
                        Err(halt) => state.ended(halt),
                    });
                }
                Err(halt) => self.end = Some(state.ended(halt)),
            }
        }
        let outcome = match &self.end {
            Some(End::Value(value)) => Outcome::Value(value.clone()),
            Some(End::Ended(ended)) => ended.outcome(),
            None => self.state.budget.paused(),
        };
        if self.location.is_none() {
            self.location = stopped_without_redex(&outcome);
        }
        Report {
            outcome,
            counts: self.state.budget.counts,
            location: self.location.clone(),
        }
    }

    /// Contractions made so far.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{Limits, Program, Rule};
    /// let program = Program::parse("(1 + 2) * (3 + 4)").unwrap();
    /// let mut run = Stepper::new().start(&program, &Limits::default().with_fuel(2));
    /// run.resume(0);
    /// assert_eq!(run.counts().get(Rule::Prim), 2);
    /// ```
    pub fn counts(&self) -> Counts {
        self.state.budget.counts
    }

    /// Fuel not yet used.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{Limits, Program};
    /// let program = Program::parse("(1 + 2) * (3 + 4)").unwrap();
    /// let mut run = Stepper::new().start(&program, &Limits::default().with_fuel(10));
    /// run.resume(0);
    /// assert_eq!(run.fuel_left(), 10 - 3);
    /// ```
    pub fn fuel_left(&self) -> u64 {
        self.state.budget.fuel_left()
    }

    /// Whether the run has ended (with a value, an error or a limit).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{Limits, Program};
    /// let program = Program::parse("if 2 < 3 then 1 else 0").unwrap();
    /// let mut run = Stepper::new().start(&program, &Limits::default().with_fuel(1));
    /// run.resume(0);
    /// assert!(!run.is_finished());
    /// run.resume(1);
    /// assert!(run.is_finished());
    /// ```
    pub fn is_finished(&self) -> bool {
        self.end.is_some()
    }

    /// The most bytes the run has held at once.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::stepper::Stepper;
    /// use orrery::{Limits, Program};
    /// let program = Program::parse("Pair(1 + 2, \"dock\")").unwrap();
    /// let mut run = Stepper::new().start(&program, &Limits::default());
    /// run.resume(0);
    /// assert!(run.peak_bytes() <= Limits::default().memory);
    /// ```
    pub fn peak_bytes(&self) -> usize {
        self.state.budget.peak
    }
}

/// Forward every root of a collection — the focus, the value stack, the
/// context — and scan what they reach into `c`'s new heap. A limit may stop
/// it part way (see `State::torn`).
fn forward_roots(
    image: &Image,
    c: &mut Collector<'_>,
    focus: &mut Id,
    values: &mut [Id],
    ctx: &mut [ContextFrame],
    budget: &mut Budget,
) -> Result<(), Halt> {
        *focus = c.forward(*focus, budget)?;
        for v in values.iter_mut() {
            budget.work(1)?;
            *v = c.forward(*v, budget)?;
        }
        for frame in ctx.iter_mut() {
            budget.work(1)?;
            match frame {
                ContextFrame::AppFunction { argument: t, .. }
                | ContextFrame::AppArgument { function: t, .. }
                | ContextFrame::LetBound { body: t, .. } => {
                    *t = c.forward(*t, budget)?;
                }
                ContextFrame::IfCondition { yes, no, .. } => {
                    *yes = c.forward(*yes, budget)?;
                    *no = c.forward(*no, budget)?;
                }
                ContextFrame::Mark { .. } => {}
                ContextFrame::Operand { next, left, .. }
                | ContextFrame::Field { next, left, .. } => {
                    *next = c.list(*next, *left, budget)?;
                }
                ContextFrame::Scrutinee { case, bodies, .. } => {
                    if *bodies != NONE {
                        let n = image
                            .cases
                            .get(*case as usize)
                            .map_or(0, |k| k.len + u32::from(k.default != NONE));
                        *bodies = c.list(*bodies, n, budget)?;
                    }
                }
            }
        }
        c.scan(budget)?;
        Ok(())
}

/// The location of a run that stopped with no redex to point at (its value
/// was too big to read back): no span and no calls. `None` for a value or a
/// fault.
fn stopped_without_redex(outcome: &Outcome) -> Option<Location> {
    match outcome {
        Outcome::Value(_) | Outcome::Fault(_) => None,
        _ => Some(Location::default()),
    }
}

impl State {
    /// Where a run stopped by `halt` is, unless it is a fault.
    fn located(&self, image: &Image, halt: &Halt) -> Option<Location> {
        (!matches!(halt, Halt::Fault(_))).then(|| image.location(&self.trail(image)))
    }

    /// Before a pause: collect a heap that has grown past twice what the
    /// last collection kept, and give back stack space far beyond what is
    /// in use, so a paused run holds its live state and little more.
    fn pause(&mut self, image: &Image) -> Result<(), Halt> {
        let slack = 64 << 10;
        let used = self.heap.used();
        // Only when the collection fits whatever it keeps.
        let worst = self
            .held()
            .saturating_add(self.heap.nodes.len() * 4)
            .saturating_add(used.saturating_mul(2));
        if used > self.live.saturating_mul(2).saturating_add(slack) && worst <= self.budget.memory {
            self.collect(image)?;
        }
        fn trim<T>(v: &mut Vec<T>) {
            if v.capacity() > 2 * v.len() + 1024 {
                v.shrink_to(v.len() * 2);
            }
        }
        trim(&mut self.ctx);
        trim(&mut self.values);
        trim(&mut self.jobs);
        trim(&mut self.done);
        Ok(())
    }

    /// The end a halt makes of a run; the heap and stacks are let go.
    fn ended(&mut self, halt: Halt) -> End {
        self.heap = Heap::default();
        self.ctx = Vec::new();
        self.values = Vec::new();
        self.jobs = Vec::new();
        self.done = Vec::new();
        // Out of fuel is no end: a paused run resumes from it.
        End::Ended(
            halt.ended(self.budget.limit())
                .unwrap_or_else(|| Ended::Fault(Fault::new("the stepper ended a run out of fuel"))),
        )
    }
}

impl Machine for Stepper {
    fn name(&self) -> &'static str {
        "stepper"
    }

    fn run(&mut self, program: &Program, limits: &Limits) -> Report {
        Stepper::run(self, program, limits)
    }

    fn peak_bytes(&self) -> usize {
        self.peak
    }

    fn start(&self, program: &Program, limits: &Limits) -> Option<Box<dyn Paused>> {
        Some(Box::new(Stepper::start(self, program, limits)))
    }
}

impl Build for Stepper {
    fn new() -> Self {
        Stepper::default()
    }
}

impl Paused for StepperRun {
    fn resume(&mut self, more_fuel: u64) -> Report {
        StepperRun::resume(self, more_fuel)
    }

    fn counts(&self) -> Counts {
        StepperRun::counts(self)
    }

    fn fuel_left(&self) -> u64 {
        StepperRun::fuel_left(self)
    }

    fn is_finished(&self) -> bool {
        StepperRun::is_finished(self)
    }

    fn peak_bytes(&self) -> usize {
        StepperRun::peak_bytes(self)
    }

    fn answer(&mut self, answer: crate::Answer) {
        self.state.budget.give(answer);
    }

    fn snapshot(&self) -> crate::Snapshot {
        crate::Snapshot::of("stepper", &self.program, &self.state.budget, StepperRun::is_finished(self))
    }

    /// The run itself: it owns all its state and is `Send` already.
    fn detach(self: Box<Self>) -> Detached {
        Detached::new(self)
    }
}

impl DetachedRun for StepperRun {
    fn attach(self: Box<Self>) -> Box<dyn Paused> {
        self
    }
}
