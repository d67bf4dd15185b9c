//! Read-back for the stepper: image and heap nodes as terms of an arena
//! (the result, each traced redex, a single step's next term), iterative and
//! memoised on shared nodes, so a value that is a graph of exponential tree
//! size reads back in linear size, under the memory limit and cancellation;
//! and values as host data ([`Datum`]) and back.

use std::sync::Arc;

use hashbrown::HashMap;

use super::heap::Heap;
use crate::image::Tags;
use super::{ContextFrame, State, Trace};
use crate::budget::{Budget, Halt};
use crate::datum::{Builder, NotData, DATUM_NODE_BYTES};
use crate::image::{INode, Id, Image, TagId};
use crate::term::{Arena, Arm, Node, Term};
use crate::Datum;
use crate::{Outcome, Rule};

/// Bytes a memo entry costs the accounting (key, value, control byte and
/// the table's spare room).
const MEMO_ENTRY: usize = 48;

enum ReadJob {
    Visit(Id),
    Build(Id),
}

/// Reads nodes into `out`, remembering the terms of shared nodes.
pub(super) struct TermReader<'o> {
    out: &'o Arena,
    /// `out`'s bytes in use when the reader began.
    start: usize,
    /// Bytes the run holds besides what the reader builds.
    held: usize,
    memo: HashMap<Id, &'o Term<'o>>,
    tags: HashMap<TagId, &'o str>,
    jobs: Vec<ReadJob>,
    done: Vec<&'o Term<'o>>,
}

impl<'o> TermReader<'o> {
    /// A reader into `out` for a run holding `held` bytes.
    pub(super) fn new(out: &'o Arena, held: usize) -> Self {
        TermReader {
            out,
            start: out.used_bytes(),
            held,
            memo: HashMap::new(),
            tags: HashMap::new(),
            jobs: Vec::new(),
            done: Vec::new(),
        }
    }

    /// The arena terms are built in.
    pub(super) fn out(&self) -> &'o Arena {
        self.out
    }

    /// Account for one more node built, with `extra` bytes about to be
    /// taken; `Err` past the limit or once cancelled.
    #[inline]
    fn spend(&self, budget: &mut Budget, extra: usize) -> Result<(), Halt> {
        budget.work(1)?;
        let built = self.out.used_bytes().saturating_sub(self.start)
            + (self.memo.len() + self.tags.len()) * MEMO_ENTRY
            + self.jobs.capacity() * std::mem::size_of::<ReadJob>()
            + self.done.capacity() * std::mem::size_of::<&Term<'_>>();
        budget.check_memory(self.held.saturating_add(built).saturating_add(extra))
    }

    /// Tag `tag`'s name in `out`, copied once per read-back.
    pub(super) fn tag(&mut self, image: &Image, tags: &Tags, tag: TagId) -> &'o str {
        let out = self.out;
        self.tags
            .entry(tag)
            .or_insert_with(|| out.tag(tags.name(image, tag)))
    }

    /// Node `id` (open or closed) as a term.
    pub(super) fn term(
        &mut self,
        image: &Image,
        heap: &Heap,
        tags: &Tags,
        id: Id,
        budget: &mut Budget,
    ) -> Result<&'o Term<'o>, Halt> {
        let out = self.out;
        // A number or a truth value is a term of constant size: read back
        // without a look at the limit (as a run that builds nothing needs).
        match heap.node(image, id) {
            INode::Int(n) => return Ok(out.int(n)),
            INode::Bool(b) => return Ok(out.boolean(b)),
            _ => {}
        }
        self.jobs.clear();
        self.done.clear();
        self.jobs.push(ReadJob::Visit(id));
        while let Some(job) = self.jobs.pop() {
            match job {
                ReadJob::Visit(id) => {
                    if let Some(&t) = self.memo.get(&id) {
                        self.done.push(t);
                        continue;
                    }
                    let node = heap.node(image, id);
                    let leaf = match node {
                        INode::Var { index, .. } => Some(out.var(index)),
                        INode::Int(n) => Some(out.int(n)),
                        INode::Bool(b) => Some(out.boolean(b)),
                        INode::Str(i) => {
                            let s = heap.string(image, id, i);
                            // Refuse a string that would pass the limit
                            // before copying it; copy it once however often
                            // the value holds it.
                            self.spend(budget, s.len())?;
                            let t = out.string(s);
                            self.memo.insert(id, t);
                            Some(t)
                        }
                        _ => None,
                    };
                    if let Some(t) = leaf {
                        self.spend(budget, 0)?;
                        self.done.push(t);
                        continue;
                    }
                    self.jobs.push(ReadJob::Build(id));
                    let at = self.jobs.len();
                    children(image, heap, id, node, |c| self.jobs.push(ReadJob::Visit(c)));
                    self.jobs[at..].reverse();
                }
                ReadJob::Build(id) => {
                    self.spend(budget, 0)?;
                    let t = self.build(image, heap, tags, id);
                    if heap.is_heap(id) || image.is_shared(id) {
                        self.memo.insert(id, t);
                    }
                    self.done.push(t);
                }
            }
        }
        Ok(self.done.pop().unwrap_or_else(|| out.int(0)))
    }

    /// Node `id` from its children's terms on top of `done`.
    fn build(&mut self, image: &Image, heap: &Heap, tags: &Tags, id: Id) -> &'o Term<'o> {
        let out = self.out;
        let zero = out.int(0);
        let node = heap.node(image, id);
        let n = match node {
            INode::Lam { .. } | INode::RecLam { .. } => 1,
            INode::App(..) | INode::Let(..) => 2,
            INode::If(..) => 3,
            INode::Prim(op, _) => op.arity(),
            INode::Con(_, _, len) => len as usize,
            INode::Case(_, x) => {
                let (ic, _) = heap.case_of(image, id, x);
                image.cases.get(ic as usize).map_or(1, |c| {
                    1 + c.len as usize + usize::from(c.default != crate::image::NONE)
                })
            }
            _ => 0,
        };
        let at = self.done.len().saturating_sub(n);
        let kids: smallvec::SmallVec<[&'o Term<'o>; 4]> = self.done.drain(at..).collect();
        let kid = |i: usize| kids.get(i).copied().unwrap_or(zero);
        match node {
            INode::Lam { .. } => out.lam(kid(0)),
            INode::RecLam { .. } => out.rec_lam(kid(0)),
            INode::App(..) => out.app(kid(0), kid(1)),
            INode::Let(..) => out.let_in(kid(0), kid(1)),
            INode::If(..) => out.if_then_else(kid(0), kid(1), kid(2)),
            INode::Prim(op, _) => out.prim(op, &kids),
            INode::Con(tag, _, _) => {
                let tag = self.tag(image, tags, tag);
                out.term(Node::Con(tag, out.terms(&kids)))
            }
            INode::Case(_, x) => {
                let (ic, _) = heap.case_of(image, id, x);
                self.case(image, tags, ic, kid(0), &kids[1.min(kids.len())..])
            }
            _ => zero,
        }
    }

    /// A case of image case `ic` on `scrutinee`, with these arm bodies (and
    /// then the default arm).
    pub(super) fn case(
        &mut self,
        image: &Image,
        tags: &Tags,
        ic: u32,
        scrutinee: &'o Term<'o>,
        bodies: &[&'o Term<'o>],
    ) -> &'o Term<'o> {
        let out = self.out;
        let Some(case) = image.cases.get(ic as usize).copied() else {
            return out.int(0);
        };
        let zero = out.int(0);
        let arms: Vec<Arm<'o>> = image
            .case_arms(&case)
            .iter()
            .enumerate()
            .map(|(i, arm)| {
                let tag = self.tag(image, tags, arm.tag);
                Arm::new(tag, arm.arity, bodies.get(i).copied().unwrap_or(zero))
            })
            .collect();
        let default = (case.default != crate::image::NONE)
            .then(|| bodies.get(case.len as usize).copied().unwrap_or(zero));
        out.case(scrutinee, &arms, default)
    }
}

/// Call `visit` with each child of node `id` (which is `node`), first first.
pub(super) fn children(image: &Image, heap: &Heap, id: Id, node: INode, mut visit: impl FnMut(Id)) {
    match node {
        INode::Var { .. } | INode::Int(_) | INode::Bool(_) | INode::Str(_) => {}
        INode::Lam { body, .. } | INode::RecLam { body, .. } => visit(body),
        INode::App(a, b) | INode::Let(a, b) => {
            visit(a);
            visit(b);
        }
        INode::If(a, b, c) => {
            visit(a);
            visit(b);
            visit(c);
        }
        INode::Prim(op, start) => {
            (0..op.arity() as u32).for_each(|k| visit(heap.list(image, start + k)))
        }
        INode::Con(_, start, len) => (0..len).for_each(|k| visit(heap.list(image, start + k))),
        INode::Case(s, x) => {
            visit(s);
            let (ic, bodies) = heap.case_of(image, id, x);
            if let Some(case) = image.cases.get(ic as usize) {
                (0..case.len).for_each(|i| visit(heap.arm_body(image, case, bodies, i)));
                if let Some(d) = heap.default_body(image, case, bodies) {
                    visit(d);
                }
            }
        }
    }
}

/// Value `id` as a datum of at most `max_bytes` (as [`Builder`] counts
/// them), and the bytes it took; `Ok(Err(_))` if it is not data or too
/// large, `Err` if the run was cancelled meanwhile.
pub(super) fn to_datum<'v>(
    image: &'v Image,
    tags: &'v Tags,
    heap: &Heap,
    id: Id,
    max_bytes: usize,
    budget: &mut Budget,
) -> Result<Result<(Datum<'v>, usize), NotData>, Halt> {
    let mut builder = Builder::new(max_bytes);
    let mut bytes = 0usize;
    let mut pending = vec![id];
    while let Some(id) = pending.pop() {
        budget.work(1)?;
        bytes = bytes.saturating_add(DATUM_NODE_BYTES);
        let step = match heap.node(image, id) {
            INode::Int(n) => builder.leaf(Datum::Int(n)),
            INode::Bool(b) => builder.leaf(Datum::Bool(b)),
            INode::Str(i) => {
                let s = heap.string(image, id, i);
                if !builder.fits(s.len()) {
                    return Ok(Err(NotData::TooLarge));
                }
                bytes = bytes.saturating_add(s.len());
                builder.leaf(Datum::Str(s.to_string()))
            }
            INode::Con(tag, start, len) if heap.is_value(image, id) => {
                let step = builder.open(tags.name(image, tag), len as usize);
                pending.extend((0..len).rev().map(|k| heap.list(image, start + k)));
                step
            }
            INode::Lam { .. } | INode::RecLam { .. } => Err(NotData::Function),
            _ => Err(NotData::NotAValue),
        };
        if let Err(e) = step {
            return Ok(Err(e));
        }
    }
    Ok(builder.finish().map(|d| (d, bytes)))
}

/// One node of a host's result, in post-order: a leaf, or a constructor
/// taking the last `arity` nodes made.
pub(super) enum Fragment {
    Int(i64),
    Bool(bool),
    Str(String),
    Con(TagId, u32),
}

/// A host's result as [`Fragment`]s in post-order (taking the datum apart
/// without recursion), its tags interned: those the image and the run lack
/// are added to `new`, to be appended to `tags` once the datum is gone.
pub(super) fn flatten(
    datum: Datum<'_>,
    image: &Image,
    tags: &Tags,
    new: &mut Vec<Arc<str>>,
) -> Vec<Fragment> {
    let mut pieces = Vec::new();
    let mut pending: Vec<Result<Datum<'_>, (TagId, u32)>> = vec![Ok(datum)];
    while let Some(item) = pending.pop() {
        match item {
            Err((tag, arity)) => pieces.push(Fragment::Con(tag, arity)),
            Ok(Datum::Int(n)) => pieces.push(Fragment::Int(n)),
            Ok(Datum::Bool(b)) => pieces.push(Fragment::Bool(b)),
            Ok(Datum::Str(s)) => pieces.push(Fragment::Str(s)),
            Ok(Datum::Con(c)) => {
                let (name, fields) = c.into_parts();
                let tag = tags.id_or_new(image, name, new);
                pending.push(Err((tag, fields.len() as u32)));
                pending.extend(fields.into_iter().rev().map(Ok));
            }
        }
    }
    pieces
}

impl State {
    /// Show the tracer the redex about to be contracted under `rule`: the
    /// focus plugged into the innermost frame, or (`alone`) the focus itself.
    pub(super) fn traced(
        &mut self,
        image: &Image,
        trace: &mut Option<Trace<'_>>,
        rule: Rule,
        alone: bool,
    ) -> Result<(), Halt> {
        let Some(trace) = trace else { return Ok(()) };
        trace.scratch.reset();
        let held = self.held().saturating_add(trace.scratch.allocated_bytes());
        let mut reader = TermReader::new(trace.scratch, held);
        let view = View {
            image,
            heap: &self.heap,
            tags: &self.tags,
        };
        let hole = view.term(&mut reader, self.focus, &mut self.budget)?;
        let redex = match self.ctx.last().copied() {
            Some(frame) if !alone => {
                let mut below = self.values.len();
                view.plug(
                    &mut reader,
                    frame,
                    hole,
                    &self.values,
                    &mut below,
                    &mut self.budget,
                )?
            }
            _ => hole,
        };
        (trace.sink)(rule, redex);
        Ok(())
    }

    /// The whole term `E[t]` this state stands for, in `out`.
    pub(super) fn whole<'o>(
        &mut self,
        image: &Image,
        out: &'o Arena,
    ) -> Result<&'o Term<'o>, Halt> {
        let mut reader = TermReader::new(out, self.held());
        let view = View {
            image,
            heap: &self.heap,
            tags: &self.tags,
        };
        let mut term = view.term(&mut reader, self.focus, &mut self.budget)?;
        let mut below = self.values.len();
        for &frame in self.ctx.iter().rev() {
            term = view.plug(
                &mut reader,
                frame,
                term,
                &self.values,
                &mut below,
                &mut self.budget,
            )?;
        }
        Ok(term)
    }

    /// The outcome of a run that ended with `end`, its value read back into
    /// `out` under the memory limit.
    pub(super) fn outcome<'o>(
        &mut self,
        image: &Image,
        end: Result<Id, Halt>,
        out: &'o Arena,
    ) -> Outcome<'o> {
        let value = end.and_then(|v| {
            let mut reader = TermReader::new(out, self.held());
            let view = View {
                image,
                heap: &self.heap,
                tags: &self.tags,
            };
            view.term(&mut reader, v, &mut self.budget)
        });
        match value {
            Ok(v) => Outcome::Value(v),
            Err(halt) => self.halted(halt),
        }
    }

    /// The outcome a halt stands for.
    pub(super) fn halted<'o>(&self, halt: Halt) -> Outcome<'o> {
        halt.outcome(self.budget.memory)
    }
}

/// What read-back needs of a run: its image, heap and tags.
#[derive(Clone, Copy)]
pub(super) struct View<'a> {
    image: &'a Image,
    heap: &'a Heap,
    tags: &'a Tags,
}

impl View<'_> {
    fn term<'o>(
        &self,
        r: &mut TermReader<'o>,
        id: Id,
        budget: &mut Budget,
    ) -> Result<&'o Term<'o>, Halt> {
        r.term(self.image, self.heap, self.tags, id, budget)
    }

    /// `frame` with `hole` in its hole, as a term; the frame's values are
    /// the ones just below `below` on `stack` (and `below` moves under them).
    fn plug<'o>(
        &self,
        r: &mut TermReader<'o>,
        frame: ContextFrame,
        hole: &'o Term<'o>,
        stack: &[Id],
        below: &mut usize,
        budget: &mut Budget,
    ) -> Result<&'o Term<'o>, Halt> {
        let out = r.out();
        Ok(match frame {
            ContextFrame::AppFunction(a) => out.app(hole, self.term(r, a, budget)?),
            ContextFrame::AppArgument(f) => out.app(self.term(r, f, budget)?, hole),
            ContextFrame::LetBound(body) => out.let_in(hole, self.term(r, body, budget)?),
            ContextFrame::IfCondition(y, n) => {
                let y = self.term(r, y, budget)?;
                out.if_then_else(hole, y, self.term(r, n, budget)?)
            }
            ContextFrame::Operand { op, next, left } => {
                let args =
                    self.spread(r, op.arity() as u32, next, left, hole, stack, below, budget)?;
                out.prim(op, &args)
            }
            ContextFrame::Field {
                tag,
                arity,
                next,
                left,
            } => {
                let args = self.spread(r, arity, next, left, hole, stack, below, budget)?;
                let tag = r.tag(self.image, self.tags, tag);
                out.term(crate::Node::Con(tag, out.terms(&args)))
            }
            ContextFrame::Scrutinee { case, bodies } => {
                let Some(info) = self.image.cases.get(case as usize).copied() else {
                    return Ok(hole);
                };
                let mut arms: Vec<&'o Term<'o>> = Vec::new();
                for i in 0..info.len {
                    arms.push(self.term(
                        r,
                        self.heap.arm_body(self.image, &info, bodies, i),
                        budget,
                    )?);
                }
                if let Some(d) = self.heap.default_body(self.image, &info, bodies) {
                    arms.push(self.term(r, d, budget)?);
                }
                r.case(self.image, self.tags, case, hole, &arms)
            }
        })
    }

    /// The operands or fields of a frame of `arity`: its values from the
    /// stack, the hole, and the `left` still to evaluate from `next`.
    #[allow(clippy::too_many_arguments)]
    fn spread<'o>(
        &self,
        r: &mut TermReader<'o>,
        arity: u32,
        next: u32,
        left: u32,
        hole: &'o Term<'o>,
        stack: &[Id],
        below: &mut usize,
        budget: &mut Budget,
    ) -> Result<Vec<&'o Term<'o>>, Halt> {
        let evaluated = arity.saturating_sub(left + 1) as usize;
        let from = below.saturating_sub(evaluated);
        let mut args = Vec::with_capacity(arity as usize);
        for &v in stack.get(from..*below).unwrap_or(&[]) {
            args.push(self.term(r, v, budget)?);
        }
        *below = from;
        args.push(hole);
        for k in 0..left {
            args.push(self.term(r, self.heap.list(self.image, next + k), budget)?);
        }
        Ok(args)
    }
}
