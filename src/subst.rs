//! Shifting and substitution on de Bruijn terms, open terms included, after
//! Pierce, *Types and Programming Languages* (2002), §6.2. All traversals use an
//! explicit work stack, and skip any subterm whose scope shows it cannot contain
//! the variables being changed, so substituting a closed value never copies it.

use hashbrown::HashMap;

use crate::term::{Arena, Arm, Node, Term};

/// The d-place shift of Pierce §6.2.1, `↑ᵈ_c(t)`: add `d` to every free index
/// `≥ cutoff`.
///
/// Returns `None` when a negative `d` would take an index below zero (the term
/// has a free index in `cutoff..cutoff - d`).
///
/// # Examples
///
/// ```
/// use orrery::{shift, Arena};
/// let arena = Arena::new();
/// // Pierce, TAPL, exercise 6.2.2(1): ↑²(λ.λ. 1 (0 2)) = λ.λ. 1 (0 4).
/// let t = arena.lam(arena.lam(arena.app(arena.var(1), arena.app(arena.var(0), arena.var(2)))));
/// let expected = arena.lam(arena.lam(arena.app(arena.var(1), arena.app(arena.var(0), arena.var(4)))));
/// assert_eq!(shift(&arena, t, 2, 0).unwrap(), expected);
/// ```
pub fn shift<'a>(arena: &'a Arena, t: &'a Term<'a>, d: i64, cutoff: u32) -> Option<&'a Term<'a>> {
    let mut failed = false;
    let result = Rebuild::new(arena, usize::MAX)
        .run(t, 0, cutoff, |arena, index, depth| {
            if index < cutoff.saturating_add(depth) {
                return arena.var(index);
            }
            match u32::try_from(i64::from(index) + d) {
                Ok(shifted) => arena.var(shifted),
                Err(_) => {
                    failed = true;
                    arena.var(index)
                }
            }
        })
        .ok()?;
    (!failed).then_some(result)
}

/// The substitution of Pierce §6.2.4, `[j ↦ s]t`: replace the free index `j` of
/// `t` by `s`, shifting `s` under each binder crossed. Other indices are left
/// as they are.
///
/// # Examples
///
/// ```
/// use orrery::{subst, Arena};
/// let arena = Arena::new();
/// // Pierce, TAPL, exercise 6.2.5(1), context a, b: [0 ↦ 1](0 (λ.λ. 2)) = 1 (λ.λ. 3).
/// let t = arena.app(arena.var(0), arena.lam(arena.lam(arena.var(2))));
/// let expected = arena.app(arena.var(1), arena.lam(arena.lam(arena.var(3))));
/// assert_eq!(subst(&arena, t, 0, arena.var(1)), expected);
/// ```
pub fn subst<'a>(arena: &'a Arena, t: &'a Term<'a>, j: u32, s: &'a Term<'a>) -> &'a Term<'a> {
    let mut rebuild = Rebuild::new(arena, usize::MAX);
    let mut inner = Rebuild::new(arena, usize::MAX);
    // With no budget the rebuild cannot fail.
    rebuild
        .run(t, 0, j, |arena, index, depth| {
            if index == j.saturating_add(depth) {
                inner.shift_up(s, depth).unwrap_or(s)
            } else {
                arena.var(index)
            }
        })
        .unwrap_or(t)
}

/// Instantiate the innermost `values.len()` binders of `body` at once:
/// `#k := values[k]` for `k < values.len()`, and every larger free index
/// decreases by `values.len()`. This is the contractum of beta (`[v]`), of
/// beta_rec (`[v, μλ. t]`), of let, and of a case arm (fields, last first).
/// Values that are not closed are shifted under the binders they cross.
///
/// # Examples
///
/// ```
/// use orrery::{instantiate, Arena};
/// let arena = Arena::new();
/// // Pierce, TAPL §6.3: (λ. 1 0 2) applied to v, in a context with two free
/// // variables, gives ↑⁻¹([0 ↦ ↑¹ v] (1 0 2)) = 0 v 1.
/// let body = arena.app(arena.app(arena.var(1), arena.var(0)), arena.var(2));
/// let v = arena.lam(arena.var(0));
/// let expected = arena.app(arena.app(arena.var(0), v), arena.var(1));
/// assert_eq!(instantiate(&arena, body, &[v]), expected);
/// ```
pub fn instantiate<'a>(
    arena: &'a Arena,
    body: &'a Term<'a>,
    values: &[&'a Term<'a>],
) -> &'a Term<'a> {
    // With no budget the rebuild cannot fail.
    Rebuild::new(arena, usize::MAX)
        .instantiate(body, 0, values)
        .unwrap_or(body)
}

/// The rebuild ran past its allocation budget.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct OverBudget;

enum Work<'a> {
    Visit(&'a Term<'a>, u32),
    Build(&'a Term<'a>),
}

/// Reusable scratch for rebuilding terms bottom-up without native recursion.
pub(crate) struct Rebuild<'a> {
    arena: &'a Arena,
    budget: usize,
    work: Vec<Work<'a>>,
    done: Vec<&'a Term<'a>>,
}

impl<'a> Rebuild<'a> {
    /// Scratch that allocates in `arena` and gives up once the arena holds more
    /// than `budget` bytes.
    pub(crate) fn new(arena: &'a Arena, budget: usize) -> Self {
        Rebuild {
            arena,
            budget,
            work: Vec::new(),
            done: Vec::new(),
        }
    }

    /// `instantiate` starting under `depth` binders: indices below `depth` are
    /// bound inside and stay, `depth + k` becomes `values[k]` (shifted up by
    /// the binders crossed), larger ones drop by `values.len()`.
    pub(crate) fn instantiate(
        &mut self,
        body: &'a Term<'a>,
        depth: u32,
        values: &[&'a Term<'a>],
    ) -> Result<&'a Term<'a>, OverBudget> {
        let n = u32::try_from(values.len()).unwrap_or(u32::MAX);
        let mut inner = Rebuild::new(self.arena, self.budget);
        self.run(body, depth, 0, |arena, index, at| {
            if index < at {
                return arena.var(index);
            }
            let k = index - at;
            if k < n {
                let v = values[k as usize];
                if v.is_closed() {
                    v
                } else {
                    inner.shift_up(v, at).unwrap_or(v)
                }
            } else {
                arena.var(index - n)
            }
        })
    }

    /// `↑ᵈ₀(t)` for `d ≥ 0`.
    fn shift_up(&mut self, t: &'a Term<'a>, d: u32) -> Result<&'a Term<'a>, OverBudget> {
        if d == 0 || t.is_closed() {
            return Ok(t);
        }
        self.run(t, 0, 0, |arena, index, depth| {
            if index < depth {
                arena.var(index)
            } else {
                arena.var(index.saturating_add(d))
            }
        })
    }

    /// Rebuild `root`, whose free indices start `depth` binders up, replacing
    /// each free variable `#index` under `depth'` binders by
    /// `var(arena, index, depth')`. A subterm whose scope is at most
    /// `depth' + keep_below` has no variable `var` would change and is shared.
    fn run(
        &mut self,
        root: &'a Term<'a>,
        depth: u32,
        keep_below: u32,
        mut var: impl FnMut(&'a Arena, u32, u32) -> &'a Term<'a>,
    ) -> Result<&'a Term<'a>, OverBudget> {
        let arena = self.arena;
        self.work.clear();
        self.done.clear();
        self.work.push(Work::Visit(root, depth));
        let mut built = 0usize;
        while let Some(item) = self.work.pop() {
            match item {
                Work::Visit(t, depth) => {
                    if t.scope() <= depth.saturating_add(keep_below) {
                        self.done.push(t);
                        continue;
                    }
                    if let Node::Var(index) = *t.node() {
                        self.done.push(var(arena, index, depth));
                        continue;
                    }
                    self.work.push(Work::Build(t));
                    let first_child = self.work.len();
                    for (child, binders) in t.children() {
                        self.work
                            .push(Work::Visit(child, depth.saturating_add(binders)));
                    }
                    self.work[first_child..].reverse();
                }
                Work::Build(t) => {
                    built += 1;
                    if built % 1024 == 0 && arena.allocated_bytes() > self.budget {
                        return Err(OverBudget);
                    }
                    let rebuilt = self.build(t);
                    self.done.push(rebuilt);
                }
            }
        }
        Ok(self.done.pop().unwrap_or(root))
    }

    /// Pop `t`'s rebuilt children from `done` and make the new node, or reuse
    /// `t` itself when no child changed.
    fn build(&mut self, t: &'a Term<'a>) -> &'a Term<'a> {
        let n = t.children().count();
        let at = self.done.len() - n;
        let kids = &self.done[at..];
        let unchanged = t
            .children()
            .zip(kids.iter())
            .all(|((old, _), new)| std::ptr::eq(old, *new));
        let rebuilt = if unchanged {
            t
        } else {
            node_with_children(self.arena, t, kids, |s| s)
        };
        self.done.truncate(at);
        rebuilt
    }
}

/// A node of `t`'s shape with the given children, allocated in `arena`;
/// `text` maps `t`'s strings and tags into `arena`'s lifetime (the identity
/// when `t` already lives there, a copy otherwise).
fn node_with_children<'a, 'b>(
    arena: &'a Arena,
    t: &Term<'b>,
    kids: &[&'a Term<'a>],
    text: impl Fn(&'b str) -> &'a str,
) -> &'a Term<'a> {
    match *t.node() {
        Node::Var(i) => arena.var(i),
        Node::Int(n) => arena.int(n),
        Node::Bool(b) => arena.boolean(b),
        Node::Str(s) => arena.term(Node::Str(text(s))),
        Node::Lam(_) => arena.lam(kids[0]),
        Node::RecLam(_) => arena.rec_lam(kids[0]),
        Node::App(..) => arena.app(kids[0], kids[1]),
        Node::Let(..) => arena.let_in(kids[0], kids[1]),
        Node::If(..) => arena.if_then_else(kids[0], kids[1], kids[2]),
        Node::Prim(op, _) => arena.term(Node::Prim(op, arena.terms(kids))),
        Node::Con(tag, _) => arena.term(Node::Con(text(tag), arena.terms(kids))),
        Node::Case(_, arms, default) => {
            let new_arms: Vec<Arm<'a>> = arms
                .iter()
                .zip(&kids[1..])
                .map(|(arm, body)| Arm::new(text(arm.tag), arm.arity, body))
                .collect();
            let new_default = default.map(|_| kids[kids.len() - 1]);
            arena.term(Node::Case(kids[0], arena.arms(&new_arms), new_default))
        }
    }
}

/// Marks a work item whose children have not been pushed yet.
const NOT_EXPANDED: usize = usize::MAX;

/// Copy `t` into `arena`, node for node, keeping its sharing: a node reached
/// twice is copied once (small leaves excepted: they are copied once per
/// parent), so the copy has the size of `t`'s graph, not of its unfolding.
/// Returns the copy and the number of nodes made.
pub(crate) fn copy_term<'a, 'b>(arena: &'a Arena, t: &'b Term<'b>) -> (&'a Term<'a>, usize) {
    let mut memo: HashMap<*const Term<'b>, &'a Term<'a>> = HashMap::new();
    let mut work: Vec<(&'b Term<'b>, usize)> = vec![(t, NOT_EXPANDED)];
    let mut done: Vec<&'a Term<'a>> = Vec::new();
    // Small leaves are copied afresh wherever they occur, without the memo:
    // a copy per parent edge, so sharing still cannot make the copy blow up,
    // and half the hash-map traffic of a compaction goes.
    let mut leaves = 0;
    while let Some((node, children)) = work.pop() {
        let key = node as *const Term<'b>;
        if children != NOT_EXPANDED {
            let at = done.len() - children;
            let copy = node_with_children(arena, node, &done[at..], |s| arena.tag(s));
            done.truncate(at);
            memo.insert(key, copy);
            done.push(copy);
            continue;
        }
        let leaf = match *node.node() {
            Node::Int(n) => Some(arena.int(n)),
            Node::Bool(b) => Some(arena.boolean(b)),
            Node::Var(i) => Some(arena.var(i)),
            _ => None,
        };
        if let Some(copy) = leaf {
            leaves += 1;
            done.push(copy);
        } else if let Some(copy) = memo.get(&key) {
            done.push(copy);
        } else {
            let first_child = work.len() + 1;
            work.push((node, 0));
            work.extend(node.children().map(|(child, _)| (child, NOT_EXPANDED)));
            let n = work.len() - first_child;
            work[first_child - 1].1 = n;
            work[first_child..].reverse();
        }
    }
    // The walk leaves exactly the root's copy on `done`.
    let copy = done.pop().unwrap_or_else(|| arena.int(0));
    (copy, memo.len() + leaves)
}
