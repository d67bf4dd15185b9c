//! Substitution for the stepper (Pierce, *Types and Programming Languages*,
//! 2002, §6.2): the contractum of beta, beta_rec, let and a case arm is the
//! body with its innermost binders instantiated by closed values (SEMANTICS
//! §1.2), so nothing is shifted. The walk is iterative, and each node's
//! recorded scope lets it skip every subterm that holds none of the
//! variables replaced: those are shared by id, as the values are, never
//! copied.

use super::{internal, State};
use crate::budget::Halt;
use crate::image::{INode, Id, Image, NONE};

/// What a contraction puts for the binders it instantiates (`#k`).
#[derive(Clone, Copy, Debug)]
pub(super) enum Binds {
    /// `#0`.
    One(Id),
    /// `#0` and `#1`.
    Two(Id, Id),
    /// The `len` fields of a constructor from list position `start`: field
    /// `len` is `#0`.
    Fields { start: u32, len: u32 },
}

/// Substitution's work: a node to visit under `depth` binders of the body,
/// or a node to rebuild from its children's results.
#[derive(Clone, Copy, Debug)]
pub(super) enum SubstJob {
    Visit(Id, u32),
    Build(Id),
}

impl State {
    /// The value bound to `#k` by `binds`.
    #[inline(always)]
    fn bind(&self, image: &Image, binds: Binds, k: u32) -> Result<Id, Halt> {
        match (binds, k) {
            (Binds::One(v), 0) | (Binds::Two(v, _), 0) | (Binds::Two(_, v), 1) => Ok(v),
            (Binds::Fields { start, len }, k) if k < len => {
                Ok(self.heap.list(image, start + len - 1 - k))
            }
            _ => Err(internal("a variable beyond its binders")),
        }
    }

    /// `body` with its innermost binders instantiated by `binds` (the
    /// contractum of SEMANTICS §1.2; the values are closed, so nothing is
    /// shifted).
    /// Subterms whose scope shows they hold none of those variables are
    /// shared, not copied; only the rest of the body is rebuilt.
    pub(super) fn instantiate(
        &mut self,
        image: &Image,
        body: Id,
        binds: Binds,
    ) -> Result<Id, Halt> {
        if self.heap.scope(image, body) == 0 {
            return Ok(body);
        }
        let done_base = self.done.len();
        self.push_job(SubstJob::Visit(body, 0))?;
        while let Some(job) = self.jobs.pop() {
            match job {
                SubstJob::Visit(id, depth) => {
                    if self.heap.scope(image, id) <= depth {
                        self.push_done(id)?;
                        continue;
                    }
                    self.budget.work(1)?;
                    let node = self.heap.node(image, id);
                    if let INode::Var { index, .. } = node {
                        let v = self.bind(image, binds, index - depth)?;
                        self.push_done(v)?;
                        continue;
                    }
                    self.push_job(SubstJob::Build(id))?;
                    self.visit_children(image, id, node, depth)?;
                }
                SubstJob::Build(id) => {
                    let new = self.rebuild(image, id)?;
                    self.push_done(new)?;
                }
            }
        }
        let result = self
            .done
            .pop()
            .ok_or_else(|| internal("substitution lost its result"))?;
        self.done.truncate(done_base);
        Ok(result)
    }

    /// Push visits of the children of `node` (at binder depth `depth`), last
    /// first, so that they are rebuilt first first.
    fn visit_children(
        &mut self,
        image: &Image,
        id: Id,
        node: INode,
        depth: u32,
    ) -> Result<(), Halt> {
        match node {
            INode::Lam { body, .. } => self.push_job(SubstJob::Visit(body, depth + 1)),
            INode::RecLam { body, .. } => self.push_job(SubstJob::Visit(body, depth + 2)),
            INode::App(a, b) => {
                self.push_job(SubstJob::Visit(b, depth))?;
                self.push_job(SubstJob::Visit(a, depth))
            }
            INode::Let(a, b) => {
                self.push_job(SubstJob::Visit(b, depth + 1))?;
                self.push_job(SubstJob::Visit(a, depth))
            }
            INode::If(c, y, n) => {
                self.push_job(SubstJob::Visit(n, depth))?;
                self.push_job(SubstJob::Visit(y, depth))?;
                self.push_job(SubstJob::Visit(c, depth))
            }
            INode::Prim(op, start) => {
                for k in (0..op.arity() as u32).rev() {
                    let c = self.heap.list(image, start + k);
                    self.push_job(SubstJob::Visit(c, depth))?;
                }
                Ok(())
            }
            INode::Con(_, start, len) => {
                for k in (0..len).rev() {
                    let c = self.heap.list(image, start + k);
                    self.push_job(SubstJob::Visit(c, depth))?;
                }
                Ok(())
            }
            INode::Case(scrutinee, x) => {
                let (ic, bodies) = self.heap.case_of(image, id, x);
                let case = image
                    .cases
                    .get(ic as usize)
                    .copied()
                    .ok_or_else(|| internal("a case the image lacks"))?;
                if let Some(d) = self.heap.default_body(image, &case, bodies) {
                    self.push_job(SubstJob::Visit(d, depth))?;
                }
                for i in (0..case.len).rev() {
                    let arity = image
                        .arms
                        .get((case.arms + i) as usize)
                        .map_or(0, |a| a.arity);
                    let b = self.heap.arm_body(image, &case, bodies, i);
                    self.push_job(SubstJob::Visit(b, depth + arity))?;
                }
                self.push_job(SubstJob::Visit(scrutinee, depth))
            }
            INode::Var { .. } | INode::Int(_) | INode::Bool(_) | INode::Str(_) => Ok(()),
        }
    }

    /// Node `id` rebuilt from its children's new ids on top of `done`.
    fn rebuild(&mut self, image: &Image, id: Id) -> Result<Id, Halt> {
        let node = self.heap.node(image, id);
        let scope = |s: &State, c: Id| s.heap.scope(image, c);
        match node {
            INode::Lam { func, pos, .. } => {
                let body = self.pop_done()?;
                let s = scope(self, body).saturating_sub(1);
                self.node(INode::Lam { body, func, pos }, s, true)
            }
            INode::RecLam { func, .. } => {
                let body = self.pop_done()?;
                let s = scope(self, body).saturating_sub(2);
                self.node(INode::RecLam { body, func }, s, true)
            }
            INode::App(..) => {
                let a = self.pop_done()?;
                let f = self.pop_done()?;
                let s = scope(self, f).max(scope(self, a));
                self.node(INode::App(f, a), s, false)
            }
            INode::Let(..) => {
                let b = self.pop_done()?;
                let a = self.pop_done()?;
                let s = scope(self, a).max(scope(self, b).saturating_sub(1));
                self.node(INode::Let(a, b), s, false)
            }
            INode::If(..) => {
                let n = self.pop_done()?;
                let y = self.pop_done()?;
                let c = self.pop_done()?;
                let s = scope(self, c).max(scope(self, y)).max(scope(self, n));
                self.node(INode::If(c, y, n), s, false)
            }
            INode::Prim(op, _) => {
                let n = op.arity();
                let s = self.top_scope(image, n);
                let start = self.list_from_done(n)?;
                self.node(INode::Prim(op, start), s, false)
            }
            INode::Con(tag, _, len) => {
                let n = len as usize;
                let s = self.top_scope(image, n);
                let at = self.done.len().saturating_sub(n);
                let value = self.done[at..]
                    .iter()
                    .all(|&f| self.heap.is_value(image, f));
                let start = self.list_from_done(n)?;
                self.node(INode::Con(tag, start, len), s, value)
            }
            INode::Case(_, x) => {
                let (ic, _) = self.heap.case_of(image, id, x);
                let case = image
                    .cases
                    .get(ic as usize)
                    .copied()
                    .ok_or_else(|| internal("a case the image lacks"))?;
                let bodies = case.len as usize + usize::from(case.default != NONE);
                let at = self
                    .done
                    .len()
                    .checked_sub(1 + bodies)
                    .ok_or_else(|| internal("substitution lost a case"))?;
                let scrutinee = self.done[at];
                let mut s = scope(self, scrutinee);
                for (i, arm) in image.case_arms(&case).iter().enumerate() {
                    s = s.max(scope(self, self.done[at + 1 + i]).saturating_sub(arm.arity));
                }
                if case.default != NONE {
                    s = s.max(scope(self, self.done[at + bodies]));
                }
                self.list_room(1 + bodies)?;
                let start = self.heap.list_end();
                self.heap.lists.push(ic);
                self.heap.lists.extend_from_slice(&self.done[at + 1..]);
                self.done.truncate(at);
                self.node(INode::Case(scrutinee, start), s, false)
            }
            INode::Var { .. } | INode::Int(_) | INode::Bool(_) | INode::Str(_) => {
                Err(internal("a leaf to rebuild"))
            }
        }
    }

    #[inline(always)]
    fn pop_done(&mut self) -> Result<Id, Halt> {
        self.done
            .pop()
            .ok_or_else(|| internal("substitution lost a node"))
    }

    /// The largest scope of the top `n` results.
    fn top_scope(&self, image: &Image, n: usize) -> u32 {
        let at = self.done.len().saturating_sub(n);
        self.done[at..]
            .iter()
            .map(|&c| self.heap.scope(image, c))
            .max()
            .unwrap_or(0)
    }
}
