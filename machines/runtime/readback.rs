//! Read-back: a runtime value as the closed de Bruijn term the substitution
//! stepper would hold (Plotkin's `Real` map from closures to terms,
//! "Call-by-name, call-by-value and the λ-calculus", 1975), built into an
//! owned [`crate::Value`]. A constructor is read field by field; a closure as
//! its function's `λ` (or, partly applied, the `λ` of its next parameter)
//! with its captured and bound values substituted. Iterative, memoised on
//! cells held more than once and on the program's closed subterms, and under
//! the run's memory limit and cancellation: the bytes it builds count
//! against the limit.

use std::rc::Rc;

use hashbrown::HashMap;
use smallvec::SmallVec;

use super::value::{Code, Value};
use crate::budget::{Budget, Halt};
use crate::host::HostFunctions;
use crate::image::{children, INode, Id, Image, TagId, Tags, FEW_TAGS, NONE};

/// Bytes a memo entry costs the read-back's accounting (key, value, control
/// byte and the table's spare room).
const MEMO_ENTRY: usize = 48;

/// Read `root` back into a value. The run holds `held` bytes besides what
/// the read-back builds; their sum stays under the limit of `budget`.
///
/// # Errors
///
/// [`Halt::Memory`] when the term would pass the limit, [`Halt::Cancelled`]
/// when the run is cancelled meanwhile.
pub(crate) fn read_back<C: Code>(
    root: &Value<C>,
    image: &Image,
    tags: &Tags,
    host: &HostFunctions,
    budget: &mut Budget,
    held: usize,
) -> Result<crate::Value, Halt> {
    let mut r = ValueReader {
        image,
        tags,
        store: Image::default(),
        strings: 0,
        held,
        cells: HashMap::new(),
        closed: HashMap::new(),
        few_tags: SmallVec::new(),
        tag_ids: HashMap::new(),
    };
    let root = r.value(root, budget)?;
    Ok(crate::Value::new(r.store, root, host))
}

enum ValueJob<'v, C: Code> {
    Visit(&'v Value<C>),
    Build(&'v Value<C>),
}

struct ValueReader<'i> {
    image: &'i Image,
    tags: &'i Tags,
    /// What is built.
    store: Image,
    /// Bytes of the strings copied into the store.
    strings: usize,
    held: usize,
    /// Nodes of cells held more than once, by address.
    cells: HashMap<*const (), Id>,
    /// Nodes of the program's closed subterms, by node.
    closed: HashMap<Id, Id>,
    /// The store's ids of the run's tags: the first few as pairs (a value
    /// usually has one or two tags, and a map would cost more than the
    /// scan), the rest in a map.
    few_tags: SmallVec<[(TagId, TagId); FEW_TAGS]>,
    tag_ids: HashMap<TagId, TagId>,
}

impl ValueReader<'_> {
    /// Account for one more node built; `Err` past the limit or once
    /// cancelled.
    #[inline]
    fn spend(&self, budget: &mut Budget) -> Result<(), Halt> {
        budget.work(1)?;
        let built = self.store.building_bytes()
            + self.strings
            + (self.cells.len() + self.closed.len() + self.few_tags.len() + self.tag_ids.len())
                * MEMO_ENTRY;
        budget.check_memory(self.held.saturating_add(built))
    }

    /// Refuse a string of `len` bytes that would pass the limit, before it
    /// is copied.
    fn room_for_string(&mut self, len: usize, budget: &mut Budget) -> Result<(), Halt> {
        self.strings = self.strings.saturating_add(len);
        self.spend(budget)
    }

    /// The store's id of run tag `tag`.
    fn tag(&mut self, tag: TagId) -> TagId {
        if let Some(&(_, t)) = self.few_tags.iter().find(|(run, _)| *run == tag) {
            return t;
        }
        if let Some(&t) = self.tag_ids.get(&tag) {
            return t;
        }
        let t = match self.tags.shared_name(self.image, tag) {
            Some(name) => self.store.tag_of_shared(name),
            None => self.store.tag_of("?"),
        };
        if self.few_tags.len() < FEW_TAGS {
            self.few_tags.push((tag, t));
        } else {
            self.tag_ids.insert(tag, t);
        }
        t
    }

    fn value<C: Code>(&mut self, root: &Value<C>, budget: &mut Budget) -> Result<Id, Halt> {
        // Small values (the usual result) are read without allocating work
        // lists.
        let mut jobs: SmallVec<[ValueJob<'_, C>; 16]> = smallvec::smallvec![ValueJob::Visit(root)];
        let mut done: SmallVec<[Id; 16]> = SmallVec::new();
        while let Some(job) = jobs.pop() {
            match job {
                ValueJob::Visit(value) => {
                    let (key, children, shared): (*const (), &[Value<C>], bool) = match value {
                        Value::Int(n) => {
                            self.spend(budget)?;
                            done.push(self.store.push_int(*n));
                            continue;
                        }
                        Value::Bool(b) => {
                            self.spend(budget)?;
                            done.push(self.store.push_bool(*b));
                            continue;
                        }
                        Value::Tag(t) => {
                            self.spend(budget)?;
                            let tag = self.tag(*t);
                            done.push(self.store.push_con(tag, &[]));
                            continue;
                        }
                        Value::Data(d) => {
                            // The program's own closed data, copied as its
                            // subterm (shared nodes once).
                            done.push(self.program_term(*d, budget)?);
                            continue;
                        }
                        Value::Lit(s) => {
                            let text = &self.image.strings[*s as usize];
                            self.room_for_string(text.len(), budget)?;
                            done.push(self.store.push_shared_string(std::sync::Arc::clone(text)));
                            continue;
                        }
                        Value::Str(s) => (Rc::as_ptr(s).cast(), &[], Rc::strong_count(s) > 1),
                        Value::Con(c) => (Rc::as_ptr(c).cast(), &c.fields, Rc::strong_count(c) > 1),
                        Value::Fun(f) => {
                            (Rc::as_ptr(f).cast(), &f.captured, Rc::strong_count(f) > 1)
                        }
                    };
                    if shared {
                        if let Some(&id) = self.cells.get(&key) {
                            done.push(id);
                            continue;
                        }
                    }
                    jobs.push(ValueJob::Build(value));
                    for child in children.iter().rev() {
                        jobs.push(ValueJob::Visit(child));
                    }
                }
                ValueJob::Build(value) => {
                    self.spend(budget)?;
                    let (key, id, shared): (*const (), Id, bool) = match value {
                        Value::Str(s) => {
                            self.room_for_string(s.text.len(), budget)?;
                            let id = self.store.push_string(&s.text);
                            (Rc::as_ptr(s).cast(), id, Rc::strong_count(s) > 1)
                        }
                        Value::Con(c) => {
                            let at = done.len().saturating_sub(c.fields.len());
                            let tag = self.tag(c.tag);
                            let id = self.store.push_con(tag, &done[at..]);
                            done.truncate(at);
                            (Rc::as_ptr(c).cast(), id, Rc::strong_count(c) > 1)
                        }
                        Value::Fun(f) => {
                            let at = done.len().saturating_sub(f.captured.len());
                            let values: Vec<Id> = done.drain(at..).collect();
                            let id = self.closure(f.code.func(), f.applied, &values, budget)?;
                            (Rc::as_ptr(f).cast(), id, Rc::strong_count(f) > 1)
                        }
                        _ => continue,
                    };
                    if shared {
                        self.cells.insert(key, id);
                    }
                    done.push(id);
                }
            }
        }
        match done.pop() {
            Some(id) => Ok(id),
            None => Err(Halt::fault("read-back built nothing")),
        }
    }

    /// The term of a closure of function `func` with `applied` parameters
    /// given, whose captured and bound values read back to `values`.
    fn closure(
        &mut self,
        func: u32,
        applied: u32,
        values: &[Id],
        budget: &mut Budget,
    ) -> Result<Id, Halt> {
        let Some(f) = self.image.funcs.get(func as usize).copied() else {
            return Err(Halt::fault("a closure of no function"));
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
        let lookup = |j: u32| -> Option<Id> {
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
                INode::Var { index, .. } => {
                    out.push(index.saturating_sub(depth).saturating_sub(bound))
                }
                other => children(image, other, depth, |c, d| stack.push((c, d))),
            }
        }
        Ok(out)
    }

    /// `node` in the store, with each variable reaching past it (`#(depth +
    /// j)` under `depth` binders) replaced by `lookup(j)`, a closed value in
    /// the store.
    fn instantiate(
        &mut self,
        node: Id,
        lookup: &dyn Fn(u32) -> Option<Id>,
        budget: &mut Budget,
    ) -> Result<Id, Halt> {
        enum Walk {
            Visit(Id, u32),
            Build(Id),
        }
        let image = self.image;
        let mut steps = vec![Walk::Visit(node, 0)];
        let mut done: Vec<Id> = Vec::new();
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
                            let t = match index.checked_sub(depth) {
                                Some(j) => match lookup(j) {
                                    Some(v) => v,
                                    None => return Err(Halt::fault("a closure lost a value")),
                                },
                                None => self.store.push_var(index),
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
                    let t = self.build(id, &mut done)?;
                    done.push(t);
                }
            }
        }
        done.pop()
            .ok_or_else(|| Halt::fault("read-back of a closure built nothing"))
    }

    /// The program's closed-in-context subterm `id` in the store, memoised.
    fn program_term(&mut self, id: Id, budget: &mut Budget) -> Result<Id, Halt> {
        if let Some(&t) = self.closed.get(&id) {
            return Ok(t);
        }
        enum Walk {
            Visit(Id),
            Build(Id),
        }
        let image = self.image;
        let mut steps = vec![Walk::Visit(id)];
        let mut done: Vec<Id> = Vec::new();
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
                        done.push(self.store.push_var(index));
                        continue;
                    }
                    steps.push(Walk::Build(x));
                    let mut kids = Vec::new();
                    children(image, node, 0, |c, _| kids.push(Walk::Visit(c)));
                    steps.extend(kids.into_iter().rev());
                }
                Walk::Build(x) => {
                    let t = self.build(x, &mut done)?;
                    if image.is_shared(x) || x == id {
                        self.closed.insert(x, t);
                    }
                    done.push(t);
                }
            }
        }
        done.pop()
            .ok_or_else(|| Halt::fault("read-back of a program term built nothing"))
    }

    /// Node `id` of the program in the store, from its children's nodes on
    /// top of `done`.
    fn build(&mut self, id: Id, done: &mut Vec<Id>) -> Result<Id, Halt> {
        let image = self.image;
        let mut take = |n: usize| -> Result<Vec<Id>, Halt> {
            let at = done
                .len()
                .checked_sub(n)
                .ok_or_else(|| Halt::fault("read-back lost a subterm"))?;
            Ok(done.drain(at..).collect())
        };
        let store = &mut self.store;
        Ok(match image.node(id) {
            INode::Var { index, .. } => store.push_var(index),
            INode::Int(n) => store.push_int(n),
            INode::Bool(b) => store.push_bool(b),
            INode::Str(s) => {
                self.strings = self.strings.saturating_add(image.string(s).len());
                store.push_shared_string(std::sync::Arc::clone(&image.strings[s as usize]))
            }
            INode::Lam { .. } => {
                let k = take(1)?;
                store.push_lam(k[0])
            }
            INode::RecLam { .. } => {
                let k = take(1)?;
                store.push_rec_lam(k[0])
            }
            INode::App(..) => {
                let k = take(2)?;
                store.push_app(k[0], k[1])
            }
            INode::Let(..) => {
                let k = take(2)?;
                store.push_let(k[0], k[1])
            }
            INode::If(..) => {
                let k = take(3)?;
                store.push_if(k[0], k[1], k[2])
            }
            INode::Prim(op, _) => {
                let k = take(op.arity())?;
                store.push_prim(op, &k)
            }
            INode::Con(tag, _, len) => {
                let k = take(len as usize)?;
                let tag = store.tag_of(image.tag(tag));
                store.push_con(tag, &k)
            }
            INode::Case(_, c) => {
                let case = image.cases[c as usize];
                let n = 1 + case.len as usize + usize::from(case.default != NONE);
                let k = take(n)?;
                let arms: Vec<(TagId, u32, Id)> = image
                    .case_arms(&case)
                    .iter()
                    .enumerate()
                    .map(|(i, arm)| (store.tag_of(image.tag(arm.tag)), arm.arity, k[1 + i]))
                    .collect();
                let default = (case.default != NONE).then(|| k[n - 1]);
                store.push_case(k[0], &arms, default)
            }
        })
    }
}
