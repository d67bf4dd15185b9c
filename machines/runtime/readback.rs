//! Read-back: a runtime value as the closed de Bruijn term the substitution
//! stepper would hold (Plotkin's `Real` map from closures to terms,
//! "Call-by-name, call-by-value and the λ-calculus", 1975). A constructor is
//! read field by field; a closure as its function's `λ` (or, partly applied,
//! the `λ` of its next parameter) with its captured and bound values
//! substituted. Iterative, memoised on cells held more than once and on the
//! program's closed subterms, and under the run's memory limit and
//! cancellation: the bytes it builds count against the limit.

use std::rc::Rc;

use hashbrown::HashMap;

use super::value::{Code, Value};
use crate::budget::Budget;
use crate::budget::Halt;
use crate::image::Tags;
use crate::image::{INode, Id, Image, NONE};
use crate::term::{Arena, Arm, Node, Term};

/// Bytes a memo entry costs the read-back's accounting (key, value, control
/// byte and the table's spare room).
const MEMO_ENTRY: usize = 48;

/// Read `root` back into `out`. The run holds `held` bytes besides what the
/// read-back builds; their sum stays under the limit of `budget`.
///
/// # Errors
///
/// [`Halt::Memory`] when the term would pass the limit, [`Halt::Cancelled`]
/// when the run is cancelled meanwhile.
pub(crate) fn read_back<'o, C: Code>(
    root: &Value<C>,
    image: &Image,
    tags: &Tags,
    out: &'o Arena,
    budget: &mut Budget,
    held: usize,
) -> Result<&'o Term<'o>, Halt> {
    match root {
        Value::Int(n) => return Ok(out.int(*n)),
        Value::Bool(b) => return Ok(out.boolean(*b)),
        _ => {}
    }
    let mut r = ValueReader {
        image,
        tags,
        out,
        start: out.used_bytes(),
        held,
        cells: HashMap::new(),
        closed: HashMap::new(),
    };
    r.value(root, budget)
}

enum ValueJob<'v, C: Code> {
    Visit(&'v Value<C>),
    Build(&'v Value<C>),
}

struct ValueReader<'o, 'i> {
    image: &'i Image,
    tags: &'i Tags,
    out: &'o Arena,
    /// `out`'s bytes when the read-back began.
    start: usize,
    held: usize,
    /// Terms of cells held more than once, by address.
    cells: HashMap<*const (), &'o Term<'o>>,
    /// Terms of the program's closed subterms, by node.
    closed: HashMap<Id, &'o Term<'o>>,
}

impl<'o> ValueReader<'o, '_> {
    /// Account for one more node built; `Err` past the limit or once
    /// cancelled.
    #[inline]
    fn spend(&self, budget: &mut Budget) -> Result<(), Halt> {
        budget.work(1)?;
        let built = self.out.used_bytes().saturating_sub(self.start)
            + (self.cells.len() + self.closed.len()) * MEMO_ENTRY;
        budget.check_memory(self.held.saturating_add(built))
    }

    fn value<C: Code>(
        &mut self,
        root: &Value<C>,
        budget: &mut Budget,
    ) -> Result<&'o Term<'o>, Halt> {
        let mut jobs: Vec<ValueJob<'_, C>> = vec![ValueJob::Visit(root)];
        let mut done: Vec<&'o Term<'o>> = Vec::new();
        while let Some(job) = jobs.pop() {
            match job {
                ValueJob::Visit(value) => {
                    let (key, children, shared): (*const (), &[Value<C>], bool) = match value {
                        Value::Int(n) => {
                            done.push(self.out.int(*n));
                            continue;
                        }
                        Value::Bool(b) => {
                            done.push(self.out.boolean(*b));
                            continue;
                        }
                        Value::Tag(t) => {
                            self.spend(budget)?;
                            done.push(self.out.con(self.tags.name(self.image, *t), &[]));
                            continue;
                        }
                        Value::Lit(s) => {
                            self.spend(budget)?;
                            done.push(self.out.string(self.image.string(*s)));
                            continue;
                        }
                        Value::Str(s) => (Rc::as_ptr(s).cast(), &[], Rc::strong_count(s) > 1),
                        Value::Con(c) => (Rc::as_ptr(c).cast(), &c.fields, Rc::strong_count(c) > 1),
                        Value::Fun(f) => {
                            (Rc::as_ptr(f).cast(), &f.captured, Rc::strong_count(f) > 1)
                        }
                    };
                    if shared {
                        if let Some(&term) = self.cells.get(&key) {
                            done.push(term);
                            continue;
                        }
                    }
                    jobs.push(ValueJob::Build(value));
                    jobs.extend(children.iter().rev().map(ValueJob::Visit));
                }
                ValueJob::Build(value) => {
                    self.spend(budget)?;
                    let (key, term, shared): (*const (), &'o Term<'o>, bool) = match value {
                        Value::Str(s) => {
                            // Refuse a string that would pass the limit
                            // before copying it.
                            self.held = self.held.saturating_add(s.text.len());
                            self.spend(budget)?;
                            self.held -= s.text.len();
                            (
                                Rc::as_ptr(s).cast(),
                                self.out.string(&s.text),
                                Rc::strong_count(s) > 1,
                            )
                        }
                        Value::Con(c) => {
                            let at = done.len().saturating_sub(c.fields.len());
                            let fields = self.out.terms(&done[at..]);
                            done.truncate(at);
                            let tag = self.tags.name(self.image, c.tag);
                            let term = self.out.term(Node::Con(self.out.tag(tag), fields));
                            (Rc::as_ptr(c).cast(), term, Rc::strong_count(c) > 1)
                        }
                        Value::Fun(f) => {
                            let at = done.len().saturating_sub(f.captured.len());
                            let values: Vec<&'o Term<'o>> = done.drain(at..).collect();
                            let term = self.closure(f.code.func(), f.applied, &values, budget)?;
                            (Rc::as_ptr(f).cast(), term, Rc::strong_count(f) > 1)
                        }
                        _ => continue,
                    };
                    if shared {
                        self.cells.insert(key, term);
                    }
                    done.push(term);
                }
            }
        }
        Ok(done.pop().unwrap_or_else(|| self.out.int(0)))
    }

    /// The term of a closure of function `func` with `applied` parameters
    /// given, whose captured and bound values read back to `values`.
    fn closure(
        &mut self,
        func: u32,
        applied: u32,
        values: &[&'o Term<'o>],
        budget: &mut Budget,
    ) -> Result<&'o Term<'o>, Halt> {
        let Some(f) = self.image.funcs.get(func as usize).copied() else {
            return Ok(self.out.int(0));
        };
        let node = self.image.chain_node(&f, applied);
        // Binders between the head's outside and `node`: none for an
        // unapplied closure, else the self of a μλ and the parameters given.
        let bound = if applied == 0 {
            0
        } else {
            applied + u32::from(f.rec)
        };
        let (captured, given) = values.split_at((f.captured as usize).min(values.len()));
        // The function's free variables, as indices outside its head: its
        // captured values are these, outermost (largest index) first.
        let mut free = self.free_indices(node, bound, budget)?;
        free.sort_unstable_by(|a, b| b.cmp(a));
        free.dedup();
        let lookup = |j: u32| -> Option<&'o Term<'o>> {
            if j < bound {
                // Index 0 is the last parameter given; `bound - 1` the first
                // binder (a μλ's self, or the first parameter).
                given.get(given.len().checked_sub(1 + j as usize)?).copied()
            } else {
                let h = j - bound;
                let slot = free.iter().position(|&x| x == h)?;
                captured.get(slot).copied()
            }
        };
        self.instantiate(node, &lookup, budget)
    }

    /// The distinct indices `h` of the variables of `node` that reach `bound`
    /// binders beyond it: `#(h + bound)` at `node`.
    fn free_indices(
        &mut self,
        node: Id,
        bound: u32,
        budget: &mut Budget,
    ) -> Result<Vec<u32>, Halt> {
        let image = self.image;
        let mut out = Vec::new();
        let mut stack = vec![(node, 0u32)];
        while let Some((id, depth)) = stack.pop() {
            if image.scope(id) <= depth.saturating_add(bound) {
                continue;
            }
            budget.work(1)?;
            match image.node(id) {
                INode::Var { index, .. } => out.push(index - depth - bound),
                other => children(image, other, depth, |c, d| stack.push((c, d))),
            }
        }
        Ok(out)
    }

    /// `node` as a term in `out`, with each variable reaching past it
    /// (`#(depth + j)` under `depth` binders) replaced by `lookup(j)`, a
    /// closed term.
    fn instantiate(
        &mut self,
        node: Id,
        lookup: &dyn Fn(u32) -> Option<&'o Term<'o>>,
        budget: &mut Budget,
    ) -> Result<&'o Term<'o>, Halt> {
        enum Walk {
            Visit(Id, u32),
            Build(Id),
        }
        let image = self.image;
        let out = self.out;
        let mut steps = vec![Walk::Visit(node, 0)];
        let mut done: Vec<&'o Term<'o>> = Vec::new();
        while let Some(step) = steps.pop() {
            match step {
                Walk::Visit(id, depth) => {
                    if image.scope(id) <= depth {
                        // Nothing reaches past `node` here: the program's own
                        // subterm, unchanged.
                        let t = self.program_term(id, budget)?;
                        done.push(t);
                        continue;
                    }
                    self.spend(budget)?;
                    match image.node(id) {
                        INode::Var { index, .. } => {
                            let t = if index < depth {
                                out.var(index)
                            } else {
                                lookup(index - depth).unwrap_or_else(|| out.var(index))
                            };
                            done.push(t);
                        }
                        other => {
                            steps.push(Walk::Build(id));
                            let mut kids = Vec::new();
                            children(image, other, depth, |c, d| kids.push(Walk::Visit(c, d)));
                            steps.extend(kids.into_iter().rev());
                        }
                    }
                }
                Walk::Build(id) => {
                    let t = self.build(id, &mut done);
                    done.push(t);
                }
            }
        }
        Ok(done.pop().unwrap_or_else(|| out.int(0)))
    }

    /// The program's closed-in-context subterm `id` as a term, memoised.
    fn program_term(&mut self, id: Id, budget: &mut Budget) -> Result<&'o Term<'o>, Halt> {
        if let Some(&t) = self.closed.get(&id) {
            return Ok(t);
        }
        enum Walk {
            Visit(Id),
            Build(Id),
        }
        let image = self.image;
        let mut steps = vec![Walk::Visit(id)];
        let mut done: Vec<&'o Term<'o>> = Vec::new();
        while let Some(step) = steps.pop() {
            match step {
                Walk::Visit(x) => {
                    if let Some(&t) = self.closed.get(&x) {
                        done.push(t);
                        continue;
                    }
                    self.spend(budget)?;
                    let node = image.node(x);
                    if let INode::Var { index, .. } = node {
                        done.push(self.out.var(index));
                        continue;
                    }
                    steps.push(Walk::Build(x));
                    let mut kids = Vec::new();
                    children(image, node, 0, |c, _| kids.push(Walk::Visit(c)));
                    steps.extend(kids.into_iter().rev());
                }
                Walk::Build(x) => {
                    let t = self.build(x, &mut done);
                    if image.is_shared(x) || x == id {
                        self.closed.insert(x, t);
                    }
                    done.push(t);
                }
            }
        }
        Ok(done.pop().unwrap_or_else(|| self.out.int(0)))
    }

    /// Node `id` as a term, from its children's terms on top of `done`.
    fn build(&self, id: Id, done: &mut Vec<&'o Term<'o>>) -> &'o Term<'o> {
        let image = self.image;
        let out = self.out;
        let zero = out.int(0);
        match image.node(id) {
            INode::Var { index, .. } => out.var(index),
            INode::Int(n) => out.int(n),
            INode::Bool(b) => out.boolean(b),
            INode::Str(s) => out.string(image.string(s)),
            INode::Lam { .. } => {
                let [body] = take(done, zero);
                out.lam(body)
            }
            INode::RecLam { .. } => {
                let [body] = take(done, zero);
                out.rec_lam(body)
            }
            INode::App(..) => {
                let [f, a] = take(done, zero);
                out.app(f, a)
            }
            INode::Let(..) => {
                let [a, b] = take(done, zero);
                out.let_in(a, b)
            }
            INode::If(..) => {
                let [c, y, n] = take(done, zero);
                out.if_then_else(c, y, n)
            }
            INode::Prim(op, _) => {
                let k = take_vec(done, op.arity());
                out.prim(op, &k)
            }
            INode::Con(tag, _, len) => {
                let k = take_vec(done, len as usize);
                out.con(image.tag(tag), &k)
            }
            INode::Case(_, c) => {
                let case = image.cases[c as usize];
                let n = 1 + case.len as usize + usize::from(case.default != NONE);
                let k = take_vec(done, n);
                let at = |i: usize| k.get(i).copied().unwrap_or(zero);
                let arms: Vec<Arm<'o>> = image
                    .case_arms(&case)
                    .iter()
                    .enumerate()
                    .map(|(i, arm)| Arm::new(out.tag(image.tag(arm.tag)), arm.arity, at(1 + i)))
                    .collect();
                let default = (case.default != NONE).then(|| at(n - 1));
                out.case(at(0), &arms, default)
            }
        }
    }
}

/// The top `N` terms of `done`, first first (padded with `zero` should the
/// stack be short, which the walks that fill it never leave it).
fn take<'o, const N: usize>(done: &mut Vec<&'o Term<'o>>, zero: &'o Term<'o>) -> [&'o Term<'o>; N] {
    let mut out = [zero; N];
    let at = done.len().saturating_sub(N);
    for (slot, t) in out.iter_mut().zip(done.drain(at..)) {
        *slot = t;
    }
    out
}

/// The top `n` terms of `done`, first first.
fn take_vec<'o>(done: &mut Vec<&'o Term<'o>>, n: usize) -> Vec<&'o Term<'o>> {
    let at = done.len().saturating_sub(n);
    done.drain(at..).collect()
}

/// Call `visit` with each child of `node` (first first) and the binder depth
/// it sits at, `depth` being the node's own.
pub(crate) fn children(image: &Image, node: INode, depth: u32, mut visit: impl FnMut(Id, u32)) {
    match node {
        INode::Var { .. } | INode::Int(_) | INode::Bool(_) | INode::Str(_) => {}
        INode::Lam { body, .. } => visit(body, depth + 1),
        INode::RecLam { body, .. } => visit(body, depth + 2),
        INode::App(a, b) => {
            visit(a, depth);
            visit(b, depth);
        }
        INode::Let(a, b) => {
            visit(a, depth);
            visit(b, depth + 1);
        }
        INode::If(a, b, c) => {
            visit(a, depth);
            visit(b, depth);
            visit(c, depth);
        }
        INode::Prim(op, start) => image
            .operands(op, start)
            .iter()
            .for_each(|&c| visit(c, depth)),
        INode::Con(_, start, len) => image.list(start, len).iter().for_each(|&c| visit(c, depth)),
        INode::Case(s, c) => {
            let case = image.cases[c as usize];
            visit(s, depth);
            for arm in image.case_arms(&case) {
                visit(arm.body, depth + arm.arity);
            }
            if case.default != NONE {
                visit(case.default, depth);
            }
        }
    }
}
