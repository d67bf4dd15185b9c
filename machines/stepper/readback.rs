//! Read-back for the stepper: image and heap nodes built node by node into
//! a store (the small image an owned [`crate::Value`] keeps), for the
//! result, each traced redex and a single step's next term (those two then
//! made arena terms); iterative and memoised on every node read, so a value
//! that is a graph of exponential tree size reads back in linear size, under
//! the memory limit and cancellation. Also values as host data ([`Datum`])
//! and host data as nodes.

use std::sync::Arc;

use hashbrown::HashMap;

use super::heap::Heap;
use super::{ContextFrame, State, Trace};
use crate::budget::{Budget, Halt};
use crate::datum::{Builder, NotData, DATUM_NODE_BYTES};
use crate::host::HostFunctions;
use crate::image::{INode, Id, Image, TagId, Tags, FEW_TAGS, NONE};
use crate::term::{Arena, Term};
use crate::Datum;
use crate::{Outcome, Rule};

/// Bytes a memo entry costs the accounting (key, value, control byte and
/// the table's spare room).
const MEMO_ENTRY: usize = 48;

/// Bytes [`Image::to_term`] takes per store node, as the accounting
/// estimates them before it runs: the term, its memo entry, its walk's
/// entries, and its share of the child lists.
const TERM_NODE: usize = std::mem::size_of::<Term<'static>>() + MEMO_ENTRY + 48;

enum ReadJob {
    Visit(Id),
    Build(Id),
}

/// What read-back needs of a run: its image, heap and tags.
#[derive(Clone, Copy)]
pub(super) struct View<'a> {
    pub(super) image: &'a Image,
    pub(super) heap: &'a Heap,
    pub(super) tags: &'a Tags,
}

/// Reads image and heap nodes into a store, remembering the store node of
/// every node it has read (the read-back of a node depends on the node
/// alone: de Bruijn terms need no context).
pub(super) struct StoreReader {
    store: Image,
    /// Bytes the run holds besides what the reader builds.
    held: usize,
    memo: HashMap<Id, Id>,
    /// The store's ids of the run's tags: the first few as pairs, the rest
    /// in a map.
    few_tags: smallvec::SmallVec<[(TagId, TagId); FEW_TAGS]>,
    tags: HashMap<TagId, TagId>,
    jobs: Vec<ReadJob>,
    done: Vec<Id>,
}

impl StoreReader {
    /// A reader for a run holding `held` bytes.
    pub(super) fn new(held: usize) -> Self {
        StoreReader {
            store: Image::default(),
            held,
            memo: HashMap::new(),
            few_tags: smallvec::SmallVec::new(),
            tags: HashMap::new(),
            jobs: Vec::new(),
            done: Vec::new(),
        }
    }

    /// Bytes the reader holds.
    fn bytes(&self) -> usize {
        self.store.building_bytes()
            + (self.memo.len() + self.few_tags.len() + self.tags.len()) * MEMO_ENTRY
            + self.jobs.capacity() * std::mem::size_of::<ReadJob>()
            + self.done.capacity() * std::mem::size_of::<Id>()
    }

    /// Account for one more node about to be built; `Err` past the limit or
    /// once cancelled.
    #[inline]
    fn spend(&self, budget: &mut Budget) -> Result<(), Halt> {
        budget.work(1)?;
        budget.check_memory(self.held.saturating_add(self.bytes()))
    }

    /// The store's id of run tag `tag`.
    fn tag(&mut self, view: View<'_>, tag: TagId) -> TagId {
        if let Some(&(_, t)) = self.few_tags.iter().find(|(run, _)| *run == tag) {
            return t;
        }
        if let Some(&t) = self.tags.get(&tag) {
            return t;
        }
        let t = match view.tags.shared_name(view.image, tag) {
            Some(name) => self.store.tag_of_shared(name),
            None => self.store.tag_of("?"),
        };
        if self.few_tags.len() < FEW_TAGS {
            self.few_tags.push((tag, t));
        } else {
            self.tags.insert(tag, t);
        }
        t
    }

    /// Node `id` (open or closed) in the store.
    pub(super) fn term(&mut self, view: View<'_>, id: Id, budget: &mut Budget) -> Result<Id, Halt> {
        let (image, heap) = (view.image, view.heap);
        // A number or a truth value alone is a value of constant size: read
        // back without a look at the limit (as a run that builds nothing
        // needs).
        if self.store.nodes.is_empty() {
            match heap.node(image, id) {
                INode::Int(n) => return Ok(self.store.push_int(n)),
                INode::Bool(b) => return Ok(self.store.push_bool(b)),
                _ => {}
            }
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
                    let t = match node {
                        INode::Var { index, .. } => {
                            self.spend(budget)?;
                            self.store.push_var(index)
                        }
                        INode::Int(n) => {
                            self.spend(budget)?;
                            self.store.push_int(n)
                        }
                        INode::Bool(b) => {
                            self.spend(budget)?;
                            self.store.push_bool(b)
                        }
                        INode::Str(i) => {
                            // Shared by handle, never copied (so not
                            // worth a memo entry either).
                            self.spend(budget)?;
                            self.store.push_shared_string(heap.shared_string(image, id, i))
                        }
                        _ => {
                            self.jobs.push(ReadJob::Build(id));
                            let at = self.jobs.len();
                            children(image, heap, id, node, |c| self.jobs.push(ReadJob::Visit(c)));
                            self.jobs[at..].reverse();
                            continue;
                        }
                    };
                    self.done.push(t);
                }
                ReadJob::Build(id) => {
                    self.spend(budget)?;
                    let t = self.build(view, id)?;
                    self.memo.insert(id, t);
                    self.done.push(t);
                }
            }
        }
        self.done
            .pop()
            .ok_or_else(|| Halt::fault("the stepper's read-back built nothing"))
    }

    /// The top `n` nodes built, which `done` loses.
    fn take(&mut self, n: usize) -> Result<smallvec::SmallVec<[Id; 4]>, Halt> {
        let at = self
            .done
            .len()
            .checked_sub(n)
            .ok_or_else(|| Halt::fault("the stepper's read-back lost a subterm"))?;
        Ok(self.done.drain(at..).collect())
    }

    /// Node `id` from its children's store nodes on top of `done`.
    fn build(&mut self, view: View<'_>, id: Id) -> Result<Id, Halt> {
        let (image, heap) = (view.image, view.heap);
        let node = heap.node(image, id);
        Ok(match node {
            INode::Lam { .. } => {
                let k = self.take(1)?;
                self.store.push_lam(k[0])
            }
            INode::RecLam { .. } => {
                let k = self.take(1)?;
                self.store.push_rec_lam(k[0])
            }
            INode::App(..) => {
                let k = self.take(2)?;
                self.store.push_app(k[0], k[1])
            }
            INode::Let(..) => {
                let k = self.take(2)?;
                self.store.push_let(k[0], k[1])
            }
            INode::If(..) => {
                let k = self.take(3)?;
                self.store.push_if(k[0], k[1], k[2])
            }
            INode::Prim(op, _) => {
                let k = self.take(op.arity())?;
                self.store.push_prim(op, &k)
            }
            INode::Con(tag, _, len) => {
                let k = self.take(len as usize)?;
                let tag = self.tag(view, tag);
                self.store.push_con(tag, &k)
            }
            INode::Case(_, x) => {
                let (ic, _) = heap.case_of(image, id, x);
                let n = image
                    .cases
                    .get(ic as usize)
                    .map_or(0, |c| c.len as usize + usize::from(c.default != NONE));
                let k = self.take(1 + n)?;
                self.case(view, ic, k[0], &k[1..])?
            }
            INode::Var { .. } | INode::Int(_) | INode::Bool(_) | INode::Str(_) => {
                return Err(Halt::fault("the stepper's read-back rebuilt a leaf"))
            }
        })
    }

    /// A case of image case `ic` on `scrutinee`, with these arm bodies (and
    /// then the default arm).
    fn case(&mut self, view: View<'_>, ic: u32, scrutinee: Id, bodies: &[Id]) -> Result<Id, Halt> {
        let image = view.image;
        let case = image
            .cases
            .get(ic as usize)
            .copied()
            .ok_or_else(|| Halt::fault("the stepper read back a case the image lacks"))?;
        let lost = || Halt::fault("the stepper's read-back lost an arm");
        let mut arms: smallvec::SmallVec<[(TagId, u32, Id); 4]> = smallvec::SmallVec::new();
        for (i, arm) in image.case_arms(&case).iter().enumerate() {
            let body = *bodies.get(i).ok_or_else(lost)?;
            arms.push((self.tag(view, arm.tag), arm.arity, body));
        }
        let default = match case.default {
            NONE => None,
            _ => Some(*bodies.get(case.len as usize).ok_or_else(lost)?),
        };
        Ok(self.store.push_case(scrutinee, &arms, default))
    }

    /// `frame` with `hole` in its hole, in the store; the frame's values are
    /// the ones just below `below` on `stack` (and `below` moves under them).
    pub(super) fn plug(
        &mut self,
        view: View<'_>,
        frame: ContextFrame,
        hole: Id,
        stack: &[Id],
        below: &mut usize,
        budget: &mut Budget,
    ) -> Result<Id, Halt> {
        self.spend(budget)?;
        Ok(match frame {
            ContextFrame::AppFunction { argument: a, .. } => {
                let a = self.term(view, a, budget)?;
                self.store.push_app(hole, a)
            }
            ContextFrame::AppArgument { function: f, .. } => {
                let f = self.term(view, f, budget)?;
                self.store.push_app(f, hole)
            }
            ContextFrame::LetBound { body, .. } => {
                let body = self.term(view, body, budget)?;
                self.store.push_let(hole, body)
            }
            ContextFrame::IfCondition { yes: y, no: n, .. } => {
                let y = self.term(view, y, budget)?;
                let n = self.term(view, n, budget)?;
                self.store.push_if(hole, y, n)
            }
            ContextFrame::Operand { op, next, left, .. } => {
                let args =
                    self.spread(view, op.arity() as u32, next, left, hole, stack, below, budget)?;
                self.store.push_prim(op, &args)
            }
            ContextFrame::Field {
                tag,
                arity,
                next,
                left,
                ..
            } => {
                let args = self.spread(view, arity, next, left, hole, stack, below, budget)?;
                let tag = self.tag(view, tag);
                self.store.push_con(tag, &args)
            }
            ContextFrame::Scrutinee { case, bodies, .. } => {

                let Some(info) = view.image.cases.get(case as usize).copied() else {
                    return Err(Halt::fault("the stepper read back a case the image lacks"));
                };
                let mut arms: Vec<Id> = Vec::new();
                for i in 0..info.len {
                    let body = view.heap.arm_body(view.image, &info, bodies, i);
                    arms.push(self.term(view, body, budget)?);
                }
                if let Some(d) = view.heap.default_body(view.image, &info, bodies) {
                    arms.push(self.term(view, d, budget)?);
                }
                self.case(view, case, hole, &arms)?
            }
            // A mark is no construct: the term is its hole.
            ContextFrame::Mark { .. } => hole,
        })
    }

    /// The operands or fields of a frame of `arity`: its values from the
    /// stack, the hole, and the `left` still to evaluate from `next`.
    #[allow(clippy::too_many_arguments)]
    fn spread(
        &mut self,
        view: View<'_>,
        arity: u32,
        next: u32,
        left: u32,
        hole: Id,
        stack: &[Id],
        below: &mut usize,
        budget: &mut Budget,
    ) -> Result<Vec<Id>, Halt> {
        let evaluated = arity.saturating_sub(left + 1) as usize;
        let from = below.saturating_sub(evaluated);
        let mut args = Vec::with_capacity(arity as usize);
        for &v in stack.get(from..*below).unwrap_or(&[]) {
            args.push(self.term(view, v, budget)?);
        }
        *below = from;
        args.push(hole);
        for k in 0..left {
            args.push(self.term(view, view.heap.list(view.image, next + k), budget)?);
        }
        Ok(args)
    }

    /// Store node `root` as an owned value calling `host`'s functions.
    pub(super) fn into_value(self, root: Id, host: &HostFunctions) -> crate::Value {
        crate::Value::new(self.store, root, host)
    }

    /// Store node `root` as a term in `out`, once the accounting has room
    /// for the estimate of what that takes ([`TERM_NODE`] a node, and the
    /// strings copied) besides the store.
    pub(super) fn into_term<'o>(
        self,
        root: Id,
        out: &'o Arena,
        budget: &mut Budget,
    ) -> Result<&'o Term<'o>, Halt> {
        let nodes = self.store.nodes.len();
        let strings: usize = self.store.strings.iter().map(|s| s.len()).sum();
        let terms = nodes.saturating_mul(TERM_NODE).saturating_add(strings);
        budget.work(nodes as u64)?;
        budget.check_memory(self.held.saturating_add(self.bytes()).saturating_add(terms))?;
        Ok(self.store.to_term(root, out))
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
                let tag = tags.id_or_new(image, &name, new);
                pending.push(Err((tag, fields.len() as u32)));
                pending.extend(fields.into_iter().rev().map(Ok));
            }
        }
    }
    pieces
}

impl State {
    /// Show the tracer the redex about to be contracted under `rule`: the
    /// focus plugged into the innermost frame, or (`alone`) the focus itself,
    /// read back into a store and made a term of the trace's scratch arena,
    /// carrying the span of the program node it comes from.
    #[inline(always)]
    pub(super) fn traced(
        &mut self,
        image: &Image,
        trace: &mut Option<Trace<'_>>,
        rule: Rule,
        alone: bool,
    ) -> Result<(), Halt> {
        match trace {
            None => Ok(()),
            Some(trace) => self.show(image, trace, rule, alone),
        }
    }

    /// [`State::traced`] with a tracer.
    #[inline(never)]
    fn show(
        &mut self,
        image: &Image,
        trace: &mut Trace<'_>,
        rule: Rule,
        alone: bool,
    ) -> Result<(), Halt> {
        trace.scratch.reset();
        let held = self.held().saturating_add(trace.scratch.allocated_bytes());
        let mut reader = StoreReader::new(held);
        let view = View {
            image,
            heap: &self.heap,
            tags: &self.tags,
        };
        let budget = &mut self.budget;
        let hole = reader.term(view, self.focus, budget)?;
        let redex = match self.ctx.last().copied() {
            Some(frame) if !alone => {
                let mut below = self.values.len();
                reader.plug(view, frame, hole, &self.values, &mut below, budget)?
            }
            _ => hole,
        };
        let mut redex = reader.into_term(redex, trace.scratch, budget)?;
        // The redex carries its source span, when it has one.
        let origin = match self.ctx.last() {
            Some(frame) if !alone => frame.redex().unwrap_or(NONE),
            _ => self.focus_at(image),
        };
        if let Some(span) = image.span(origin) {
            redex = trace.scratch.at(span, redex);
        }
        (trace.sink)(rule, redex);
        Ok(())
    }

    /// The whole term `E[t]` this state stands for, in `out`.
    pub(super) fn whole<'o>(
        &mut self,
        image: &Image,
        out: &'o Arena,
    ) -> Result<&'o Term<'o>, Halt> {
        let mut reader = StoreReader::new(self.held());
        let view = View {
            image,
            heap: &self.heap,
            tags: &self.tags,
        };
        let budget = &mut self.budget;
        let mut term = reader.term(view, self.focus, budget)?;
        let mut below = self.values.len();
        for &frame in self.ctx.iter().rev() {
            term = reader.plug(view, frame, term, &self.values, &mut below, budget)?;
        }
        reader.into_term(term, out, budget)
    }

    /// Value `v` read back into an owned value under the memory limit.
    pub(super) fn read_back(
        &mut self,
        image: &Image,
        host: &HostFunctions,
        v: Id,
    ) -> Result<crate::Value, Halt> {
        let mut reader = StoreReader::new(self.held());
        let view = View {
            image,
            heap: &self.heap,
            tags: &self.tags,
        };
        let root = reader.term(view, v, &mut self.budget)?;
        Ok(reader.into_value(root, host))
    }

    /// The outcome of a run that ended with `end`, its value read back.
    pub(super) fn outcome(
        &mut self,
        image: &Image,
        host: &HostFunctions,
        end: Result<Id, Halt>,
    ) -> Outcome {
        match end.and_then(|v| self.read_back(image, host, v)) {
            Ok(v) => Outcome::Value(v),
            Err(halt) => self.halted(halt),
        }
    }

    /// The outcome a halt stands for.
    pub(super) fn halted(&self, halt: Halt) -> Outcome {
        self.budget.outcome(halt)
    }
}
