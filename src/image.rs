//! The program image: a validated program in the one form every machine
//! runs, built once and shared. Nodes are addressed by `u32` index with
//! children before parents; closed subterms stay shared and open ones are
//! unfolded into a tree, so every variable occurrence has one binding
//! context; constructor tags are interned. [`analysis`] then finds the
//! curried functions and their exact free variables, which the environment
//! machines read.
//!
//! Building an image *is* validation: closedness, primitive arities, one
//! arity per constructor tag, distinct case arms, host functions in the
//! program's table, and the size limits [`MAX_FIELDS`], [`MAX_ARMS`] and
//! [`MAX_NODES`]. The walk is iterative and visits each shared closed node
//! once.
// The analysis and the case lookup serve the environment machines; a build
// without them (the stepper alone, or no machine) leaves them unread.
#![cfg_attr(not(any(feature = "env", feature = "cek")), allow(dead_code))]

pub(crate) mod analysis;
mod store;

use std::sync::Arc;

use hashbrown::HashMap;
use smallvec::SmallVec;

use crate::error::ValidationError;
use crate::host::HostFunctions;
use crate::prim::Prim;
use crate::span::{Backtrace, CallFrame, Location, Span, Trail};
use crate::term::{Node, Term};

/// The index of a node of an [`Image`].
pub(crate) type Id = u32;

/// An interned constructor tag.
pub(crate) type TagId = u32;

/// The slot of a [`INode::Var`] bound inside its own function (a local); any
/// other slot is the variable's place among the function's captured values.
pub(crate) const LOCAL: u32 = u32::MAX;

/// No default arm, or no lookup table.
pub(crate) const NONE: u32 = u32::MAX;

/// The most fields a constructor (and so a case arm) may have.
///
/// # Examples
///
/// ```
/// assert_eq!(orrery::MAX_FIELDS, 65_536);
/// ```
pub const MAX_FIELDS: usize = 1 << 16;

/// The most arms a `case` may have (besides its default arm).
///
/// # Examples
///
/// ```
/// assert_eq!(orrery::MAX_ARMS, 65_536);
/// ```
pub const MAX_ARMS: usize = 1 << 16;

/// The most nodes a program may have once its shared open subterms are
/// unfolded (every node of a parsed program counts once).
///
/// # Examples
///
/// ```
/// assert_eq!(orrery::MAX_NODES, 1 << 30);
/// ```
pub const MAX_NODES: usize = 1 << 30;

/// One node of an image. Sixteen bytes; children are node ids, operand and
/// field lists live in [`Image::lists`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) enum INode {
    /// A variable: its de Bruijn index and, for a variable free in its
    /// function, its place among the function's captured values (else
    /// [`LOCAL`]).
    Var {
        index: u32,
        slot: u32,
    },
    /// `λ. body`, at position `pos` of curried function `func` (0: its head).
    Lam {
        body: Id,
        func: u32,
        pos: u32,
    },
    /// `μλ. body`, the head of function `func`.
    RecLam {
        body: Id,
        func: u32,
    },
    App(Id, Id),
    Let(Id, Id),
    If(Id, Id, Id),
    Int(i64),
    Bool(bool),
    /// A string literal: an index into [`Image::strings`].
    Str(u32),
    /// A primitive and where its operands start in [`Image::lists`].
    Prim(Prim, u32),
    /// A constructor: its tag, where its fields start, and how many.
    Con(TagId, u32, u32),
    /// A case: the scrutinee and an index into [`Image::cases`].
    Case(Id, u32),
}

/// A `case`'s arms ([`Image::arms`]) and default arm.
#[derive(Clone, Copy, Debug)]
pub(crate) struct CaseInfo {
    pub(crate) arms: u32,
    pub(crate) len: u32,
    /// The default arm, or [`NONE`].
    pub(crate) default: Id,
    /// Where this case's arms sorted by tag start in [`Image::lookup`], for
    /// a case with many arms (else [`NONE`]).
    pub(crate) lookup: u32,
}

/// A case arm: its tag, its arity (the fields it binds) and its body.
#[derive(Clone, Copy, Debug)]
pub(crate) struct ArmInfo {
    pub(crate) tag: TagId,
    pub(crate) arity: u32,
    pub(crate) body: Id,
}

/// Cases with more arms than this get a sorted lookup table.
const LOOKUP_AFTER: u32 = 8;

/// A curried function: the head `λ` (or `μλ`) and the `λ`s directly under
/// it, up to [`analysis::MAX_CHAIN`] parameters. A machine applies it to
/// all its parameters at once, with the partial applications in between as
/// values of their own; its closure captures exactly its free variables.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Func {
    /// The head node (read by the stepper).
    #[cfg_attr(not(feature = "stepper"), allow(dead_code))]
    pub(crate) head: Id,
    /// The body under all the parameters.
    pub(crate) body: Id,
    /// How many `λ`s (parameters, not counting a `μλ`'s self).
    pub(crate) params: u32,
    /// Whether the head is a `μλ` (its self is the first local).
    pub(crate) rec: bool,
    /// How many values its closure captures.
    pub(crate) captured: u32,
    /// Where its capture runs start in [`Image::runs`], and how many.
    pub(crate) runs: u32,
    pub(crate) runs_len: u32,
    /// Where its `λ` nodes, head first, start in [`Image::chains`].
    pub(crate) chain: u32,
}

/// How a closure gathers a stretch of its captured values where it is made.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Capture {
    /// `len` captured values of the enclosing function, from its slot `slot`.
    Free { slot: u32, len: u32 },
    /// `len` locals, the first the variable of de Bruijn index `index` at the
    /// head, the rest each one binder further in (indices `index - 1`, …).
    Local { index: u32, len: u32 },
}

/// A program in the form the machines run; see the module documentation.
#[derive(Debug, Default)]
pub(crate) struct Image {
    pub(crate) nodes: Vec<INode>,
    /// Per node: its scope (one more than its largest free index) in the low
    /// 31 bits, and whether it is a value in the top bit.
    meta: Vec<u32>,
    pub(crate) lists: Vec<Id>,
    pub(crate) cases: Vec<CaseInfo>,
    pub(crate) arms: Vec<ArmInfo>,
    /// Arm indices sorted by tag, for cases with many arms.
    pub(crate) lookup: Vec<u32>,
    pub(crate) strings: Vec<Arc<str>>,
    pub(crate) tags: Vec<Arc<str>>,
    /// The arity every use of a tag has.
    pub(crate) tag_arity: Vec<u32>,
    tag_ids: HashMap<Arc<str>, TagId>,
    pub(crate) funcs: Vec<Func>,
    /// Every function's `λ` nodes, head first, function after function: a
    /// λ at any place of a chain in one look (the stepper's locations).
    pub(crate) chains: Vec<Id>,
    pub(crate) runs: Vec<Capture>,
    /// Whether a node has more than one parent (only closed nodes do).
    shared: Vec<bool>,
    /// Per node: whether it is closed constructor data (a constructor with
    /// fields, all integers, booleans, strings or such data again), which
    /// the environment machines read in place rather than build per run.
    data: Vec<bool>,
    /// Per node, its source span: empty when no node has one, so a program
    /// without spans keeps none.
    spans: Vec<Option<Span>>,
    /// Function names, by λ node (a name also covers the unnamed λs of its
    /// curried chain; see [`Image::name_chains`]).
    names: HashMap<Id, Arc<str>>,
    /// For an image with spans or names, per node its first three children
    /// in evaluation order ([`NONE`] past the last): how the stepper finds
    /// the program node of a copy in one look ([`Image::kid`]).
    kids: Vec<Id>,
    pub(crate) root: Id,
}

const VALUE_BIT: u32 = 1 << 31;

/// A store of at most this many tags finds them by a scan and keeps no map
/// (a run's result usually has one or two).
pub(crate) const FEW_TAGS: usize = 8;

impl Image {
    /// The node `id`.
    #[inline(always)]
    pub(crate) fn node(&self, id: Id) -> INode {
        self.nodes[id as usize]
    }

    /// One more than the largest free index of node `id`.
    #[inline(always)]
    pub(crate) fn scope(&self, id: Id) -> u32 {
        self.meta[id as usize] & !VALUE_BIT
    }

    /// Whether node `id` is closed constructor data (see [`Image::data`]).
    #[inline(always)]
    pub(crate) fn is_data(&self, id: Id) -> bool {
        self.data.get(id as usize).copied().unwrap_or(false)
    }

    /// Mark the closed constructor data of the image, children first.
    pub(crate) fn mark_data(&mut self) {
        let mut data = vec![false; self.nodes.len()];
        for id in 0..self.nodes.len() {
            if let INode::Con(_, start, len) = self.nodes[id] {
                data[id] = len > 0
                    && self
                        .list(start, len)
                        .iter()
                        .all(|&f| match self.nodes[f as usize] {
                            INode::Int(_)
                            | INode::Bool(_)
                            | INode::Str(_)
                            | INode::Con(_, _, 0) => true,
                            INode::Con(..) => data[f as usize],
                            _ => false,
                        });
            }
        }
        self.data = data;
    }

    /// Whether node `id` is a value.
    #[cfg_attr(not(feature = "stepper"), allow(dead_code))]
    #[inline(always)]
    pub(crate) fn is_value(&self, id: Id) -> bool {
        self.meta[id as usize] & VALUE_BIT != 0
    }

    /// The operand or field list starting at `start`, `len` long.
    #[inline(always)]
    pub(crate) fn list(&self, start: u32, len: u32) -> &[Id] {
        &self.lists[start as usize..(start + len) as usize]
    }

    /// The operands of primitive node `op` whose list starts at `start`.
    #[inline(always)]
    pub(crate) fn operands(&self, op: Prim, start: u32) -> &[Id] {
        self.list(start, op.arity() as u32)
    }

    /// A case's arms.
    #[inline(always)]
    pub(crate) fn case_arms(&self, case: &CaseInfo) -> &[ArmInfo] {
        &self.arms[case.arms as usize..(case.arms + case.len) as usize]
    }

    /// The arm of `case` for a constructor of `tag` with `arity` fields.
    #[inline]
    pub(crate) fn find_arm(&self, case: &CaseInfo, tag: TagId, arity: usize) -> Option<&ArmInfo> {
        let k = self.find_arm_index(case, tag, arity)?;
        self.case_arms(case).get(k)
    }

    /// [`Image::find_arm`], as the arm's place among the case's arms.
    #[inline]
    pub(crate) fn find_arm_index(
        &self,
        case: &CaseInfo,
        tag: TagId,
        arity: usize,
    ) -> Option<usize> {
        let arms = self.case_arms(case);
        let k = if case.lookup == NONE {
            arms.iter().position(|a| a.tag == tag)
        } else {
            let order = &self.lookup[case.lookup as usize..(case.lookup + case.len) as usize];
            order
                .binary_search_by(|&i| arms[i as usize].tag.cmp(&tag))
                .ok()
                .map(|k| order[k] as usize)
        };
        k.filter(|&k| arms[k].arity as usize == arity)
    }

    /// A constructor tag's name (`"?"` for an id this image did not make).
    pub(crate) fn tag(&self, tag: TagId) -> &str {
        self.tags.get(tag as usize).map_or("?", |t| t)
    }

    /// The id of tag `name`, if the program uses it.
    pub(crate) fn tag_id(&self, name: &str) -> Option<TagId> {
        if self.tag_ids.is_empty() && self.tags.len() <= FEW_TAGS {
            // A store of a few tags (see `Image::tag_of`) keeps no map.
            return self
                .tags
                .iter()
                .position(|t| &**t == name)
                .map(|k| k as TagId);
        }
        self.tag_ids.get(name).copied()
    }

    /// A string literal's text.
    #[inline]
    pub(crate) fn string(&self, index: u32) -> &str {
        self.strings.get(index as usize).map_or("", |s| s)
    }

    /// Whether node `id` has more than one parent.
    pub(crate) fn is_shared(&self, id: Id) -> bool {
        self.shared.get(id as usize).copied().unwrap_or(false)
    }

    /// The node at position `pos` of function `func`'s chain: its head for
    /// 0, else the `λ` taking parameter `pos + 1`.
    #[inline]
    pub(crate) fn chain_node(&self, func: &Func, pos: u32) -> Id {
        if pos >= func.params {
            return NONE;
        }
        let at = func.chain as usize + pos as usize;
        self.chains.get(at).copied().unwrap_or(NONE)
    }

    /// The source span of node `id`, if it has one.
    #[inline]
    pub(crate) fn span(&self, id: Id) -> Option<Span> {
        self.spans.get(id as usize).copied().flatten()
    }

    /// The name of λ node `id`, if it has one.
    #[inline]
    pub(crate) fn name(&self, id: Id) -> Option<&Arc<str>> {
        if self.names.is_empty() {
            return None;
        }
        self.names.get(&id)
    }

    /// Whether any node has a span or a name, so that a machine that must
    /// track where its nodes came from (the stepper) does it only then.
    #[inline]
    pub(crate) fn is_marked(&self) -> bool {
        !self.spans.is_empty() || !self.names.is_empty()
    }

    /// The λ that takes function `func`'s last parameter: the one whose body
    /// a call that saturates it enters, and so the one a call mark names.
    pub(crate) fn last_lam(&self, func: u32) -> Id {
        match self.funcs.get(func as usize) {
            Some(f) => self.chain_node(f, f.params.saturating_sub(1)),
            None => NONE,
        }
    }

    /// Record `t`'s span and name for node `id`, if it has either.
    fn mark(&mut self, id: Id, t: &Term<'_>) {
        if let Some(span) = t.span() {
            if self.spans.len() <= id as usize {
                self.spans.resize(id as usize + 1, None);
            }
            self.spans[id as usize] = Some(span);
        }
        if let Some(name) = t.name() {
            if matches!(t.node(), Node::Lam(_) | Node::RecLam(_)) {
                self.names.insert(id, Arc::from(name));
            }
        }
    }

    /// Give each unnamed λ directly in the body of a named one its name,
    /// outermost first (parents come after their children), so every
    /// parameter of a named curried function carries the name.
    fn name_chains(&mut self) {
        if self.names.is_empty() {
            return;
        }
        for id in (0..self.nodes.len()).rev() {
            let (INode::Lam { body, .. } | INode::RecLam { body, .. }) = self.nodes[id] else {
                continue;
            };
            if !matches!(self.node(body), INode::Lam { .. } | INode::RecLam { .. })
                || self.names.contains_key(&body)
            {
                continue;
            }
            if let Some(name) = self.names.get(&(id as Id)).cloned() {
                self.names.insert(body, name);
            }
        }
    }

    /// The [`Location`] a machine's trail describes.
    pub(crate) fn location(&self, trail: &Trail) -> Location {
        let (marks, omitted) = trail.marks();
        let frames = marks
            .map(|(site, lam)| CallFrame {
                name: self.name(lam).cloned(),
                site: self.span(site),
            })
            .collect();
        Location {
            span: self.span(trail.redex),
            backtrace: Backtrace { frames, omitted },
        }
    }

    /// Validate `root` and build its image, with host calls checked against
    /// `host`.
    ///
    /// # Errors
    ///
    /// The first [`ValidationError`] found.
    pub(crate) fn build(root: &Term<'_>, host: &HostFunctions) -> Result<Image, ValidationError> {
        if !root.is_closed() {
            return Err(ValidationError::Open {
                index: root.scope() - 1,
            });
        }
        let mut image = ImageBuilder::new(host, allowed_nodes(root)).run(root)?;
        if !image.spans.is_empty() {
            image.spans.resize(image.nodes.len(), None);
            image.spans.shrink_to_fit();
        }
        image.name_chains();
        analysis::analyse(&mut image);
        image.mark_data();
        image.list_kids();
        Ok(image)
    }

    /// Fill [`Image::kids`], for an image with spans or names only.
    fn list_kids(&mut self) {
        if !self.is_marked() {
            return;
        }
        let mut kids = vec![NONE; self.nodes.len() * 3];
        for (id, node) in self.nodes.iter().enumerate() {
            let mut put = |k: usize, c: Id| kids[id * 3 + k] = c;
            match *node {
                INode::App(a, b) | INode::Let(a, b) => {
                    put(0, a);
                    put(1, b);
                }
                INode::If(a, b, c) => {
                    put(0, a);
                    put(1, b);
                    put(2, c);
                }
                INode::Case(scrutinee, _) => put(0, scrutinee),
                INode::Lam { body, .. } | INode::RecLam { body, .. } => put(0, body),
                INode::Prim(op, start) => {
                    for (k, &c) in self
                        .list(start, op.arity() as u32)
                        .iter()
                        .take(3)
                        .enumerate()
                    {
                        put(k, c);
                    }
                }
                INode::Con(_, start, len) => {
                    for (k, &c) in self.list(start, len).iter().take(3).enumerate() {
                        put(k, c);
                    }
                }
                _ => {}
            }
        }
        self.kids = kids;
    }

    /// Child `k` (0, 1 or 2, in evaluation order: a case's scrutinee, a
    /// λ's body) of node `from`, or [`NONE`] (always for an image without
    /// spans or names). Used by the stepper.
    #[cfg_attr(not(feature = "stepper"), allow(dead_code))]
    #[inline(always)]
    pub(crate) fn kid(&self, from: Id, k: u32) -> Id {
        let at = (from as usize).wrapping_mul(3).wrapping_add(k as usize);
        self.kids.get(at).copied().unwrap_or(NONE)
    }

    /// The λ at place `pos` of function `func`'s chain, or [`NONE`]. Used by
    /// the stepper.
    #[cfg_attr(not(feature = "stepper"), allow(dead_code))]
    #[inline]
    pub(crate) fn lam_at(&self, func: u32, pos: u32) -> Id {
        self.funcs
            .get(func as usize)
            .map_or(NONE, |f| self.chain_node(f, pos))
    }

    /// Append a node with its scope and value flag (for builders of images
    /// and of the stepper's terms alike).
    pub(crate) fn push(&mut self, node: INode, scope: u32, value: bool) -> Id {
        let id = self.nodes.len() as Id;
        self.nodes.push(node);
        self.meta.push(scope | if value { VALUE_BIT } else { 0 });
        id
    }

    /// Intern a constructor tag used with `arity` fields.
    fn intern(&mut self, tag: &str, arity: u32) -> Result<TagId, ValidationError> {
        if let Some(&id) = self.tag_ids.get(tag) {
            let first = self.tag_arity[id as usize];
            if first != arity {
                return Err(ValidationError::ConArity {
                    tag: tag.to_string(),
                    first,
                    second: arity,
                });
            }
            return Ok(id);
        }
        let id = self.tags.len() as TagId;
        let name: Arc<str> = Arc::from(tag);
        self.tags.push(Arc::clone(&name));
        self.tag_arity.push(arity);
        self.tag_ids.insert(name, id);
        Ok(id)
    }
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

/// How many nodes the image of `root` may unfold to: every node of a tree
/// once, and sharing of open subterms (which only the builder API makes)
/// up to sixteen times the distinct nodes, within [`MAX_NODES`].
fn allowed_nodes(root: &Term<'_>) -> usize {
    let mut seen: hashbrown::HashSet<*const Term<'_>> = hashbrown::HashSet::new();
    let mut pending = vec![root];
    let mut distinct = 0usize;
    while let Some(t) = pending.pop() {
        if !seen.insert(t as *const _) {
            continue;
        }
        distinct += 1;
        if distinct > MAX_NODES {
            break;
        }
        pending.extend(t.children().map(|(c, _)| c));
    }
    distinct
        .saturating_mul(16)
        .saturating_add(1 << 20)
        .min(MAX_NODES)
}

/// The builder's work: a term to visit, or a node to build from the ids of
/// its children (on top of `done`).
enum BuildJob<'t> {
    Visit(&'t Term<'t>),
    Build(&'t Term<'t>),
}

/// Builds an image from a term, bottom-up with explicit stacks.
struct ImageBuilder<'h, 't> {
    image: Image,
    host: &'h HostFunctions,
    /// Closed compound terms already built, by address.
    memo: HashMap<*const Term<'t>, Id>,
    strings: HashMap<&'t str, u32>,
    /// How many parents each node has so far.
    parents: Vec<u32>,
    max_nodes: usize,
}

impl<'h, 't> ImageBuilder<'h, 't> {
    fn new(host: &'h HostFunctions, max_nodes: usize) -> Self {
        ImageBuilder {
            image: Image::default(),
            host,
            memo: HashMap::new(),
            strings: HashMap::new(),
            parents: Vec::new(),
            max_nodes,
        }
    }

    fn run(mut self, root: &'t Term<'t>) -> Result<Image, ValidationError> {
        let mut jobs = vec![BuildJob::Visit(root)];
        let mut done: Vec<Id> = Vec::new();
        while let Some(job) = jobs.pop() {
            match job {
                BuildJob::Visit(t) => {
                    if let Some(&id) = self.memo.get(&(t as *const _)) {
                        done.push(id);
                        continue;
                    }
                    if self.image.nodes.len() >= self.max_nodes {
                        return Err(ValidationError::TooLarge {
                            nodes: self.max_nodes,
                        });
                    }
                    match *t.node() {
                        Node::Var(index) => {
                            done.push(self.leaf(INode::Var { index, slot: LOCAL }, t))
                        }
                        Node::Int(n) => done.push(self.leaf(INode::Int(n), t)),
                        Node::Bool(b) => done.push(self.leaf(INode::Bool(b), t)),
                        Node::Str(s) => {
                            let index = match self.strings.get(s) {
                                Some(&i) => i,
                                None => {
                                    let i = self.image.strings.len() as u32;
                                    self.image.strings.push(Arc::from(s));
                                    self.strings.insert(s, i);
                                    i
                                }
                            };
                            done.push(self.leaf(INode::Str(index), t));
                        }
                        _ => {
                            self.check_sizes(t)?;
                            jobs.push(BuildJob::Build(t));
                            // Children last first, so the first is built first.
                            let at = jobs.len();
                            jobs.extend(t.children().map(|(c, _)| BuildJob::Visit(c)));
                            jobs[at..].reverse();
                        }
                    }
                }
                BuildJob::Build(t) => {
                    let id = self.build_node(t, &mut done)?;
                    if t.is_closed() {
                        self.memo.insert(t as *const _, id);
                    }
                    done.push(id);
                }
            }
        }
        let root_id = done.pop().unwrap_or(0);
        self.parents.resize(self.image.nodes.len(), 0);
        if let Some(p) = self.parents.get_mut(root_id as usize) {
            *p += 1;
        }
        let mut image = self.image;
        image.root = root_id;
        image.shared = self.parents.iter().map(|&p| p > 1).collect();
        image.nodes.shrink_to_fit();
        image.meta.shrink_to_fit();
        image.lists.shrink_to_fit();
        Ok(image)
    }

    /// A leaf node, with the scope and value flag its term has.
    fn leaf(&mut self, node: INode, t: &Term<'_>) -> Id {
        let id = self.image.push(node, t.scope(), t.is_value());
        if t.is_marked() {
            self.image.mark(id, t);
        }
        id
    }

    /// The size limits and arities that can be checked before the children.
    fn check_sizes(&self, t: &Term<'_>) -> Result<(), ValidationError> {
        match *t.node() {
            Node::Prim(op, args) if args.len() != op.arity() => Err(ValidationError::PrimArity {
                name: op.name().to_string(),
                expected: op.arity(),
                given: args.len(),
            }),
            Node::Prim(Prim::Host(id), _) if id.table() != self.host.table_id() => {
                Err(ValidationError::ForeignHost { index: id.index() })
            }
            Node::Prim(Prim::Host(id), _) if !self.host.contains(id) => {
                Err(ValidationError::UnknownHost { index: id.index() })
            }
            Node::Con(_, fields) if fields.len() > MAX_FIELDS => Err(ValidationError::TooWide {
                what: "constructor fields",
                given: fields.len(),
                max: MAX_FIELDS,
            }),
            Node::Case(_, arms, _) => {
                if arms.len() > MAX_ARMS {
                    return Err(ValidationError::TooWide {
                        what: "case arms",
                        given: arms.len(),
                        max: MAX_ARMS,
                    });
                }
                match arms.iter().find(|arm| arm.arity as usize > MAX_FIELDS) {
                    Some(arm) => Err(ValidationError::TooWide {
                        what: "case arm fields",
                        given: arm.arity as usize,
                        max: MAX_FIELDS,
                    }),
                    None => Ok(()),
                }
            }
            _ => Ok(()),
        }
    }

    /// Pop `n` child ids off `done` (first child first).
    fn children(&mut self, done: &mut Vec<Id>, n: usize) -> SmallVec<[Id; 4]> {
        let at = done.len().saturating_sub(n);
        let ids: SmallVec<[Id; 4]> = done.drain(at..).collect();
        self.parents.resize(self.image.nodes.len(), 0);
        for &id in &ids {
            self.parents[id as usize] += 1;
        }
        ids
    }

    fn build_node(&mut self, t: &'t Term<'t>, done: &mut Vec<Id>) -> Result<Id, ValidationError> {
        let scope = t.scope();
        let value = t.is_value();
        let node = match *t.node() {
            Node::Lam(_) => {
                let [body] = self.children(done, 1)[..] else {
                    unreachable_shape()?
                };
                INode::Lam {
                    body,
                    func: NONE,
                    pos: 0,
                }
            }
            Node::RecLam(_) => {
                let [body] = self.children(done, 1)[..] else {
                    unreachable_shape()?
                };
                INode::RecLam { body, func: NONE }
            }
            Node::App(..) => {
                let [f, a] = self.children(done, 2)[..] else {
                    unreachable_shape()?
                };
                INode::App(f, a)
            }
            Node::Let(..) => {
                let [a, b] = self.children(done, 2)[..] else {
                    unreachable_shape()?
                };
                INode::Let(a, b)
            }
            Node::If(..) => {
                let [c, y, n] = self.children(done, 3)[..] else {
                    unreachable_shape()?
                };
                INode::If(c, y, n)
            }
            Node::Prim(op, args) => {
                let ids = self.children(done, args.len());
                let start = self.image.lists.len() as u32;
                self.image.lists.extend(ids);
                INode::Prim(op, start)
            }
            Node::Con(tag, fields) => {
                let tag = self.image.intern(tag, fields.len() as u32)?;
                let ids = self.children(done, fields.len());
                let start = self.image.lists.len() as u32;
                self.image.lists.extend(ids);
                INode::Con(tag, start, fields.len() as u32)
            }
            Node::Case(_, arms, default) => {
                let n = 1 + arms.len() + usize::from(default.is_some());
                let ids = self.children(done, n);
                let mut tags: Vec<TagId> = Vec::with_capacity(arms.len());
                for arm in arms {
                    tags.push(self.image.intern(arm.tag, arm.arity)?);
                }
                let start = self.image.arms.len() as u32;
                for (k, arm) in arms.iter().enumerate() {
                    self.image.arms.push(ArmInfo {
                        tag: tags[k],
                        arity: arm.arity,
                        body: ids[1 + k],
                    });
                }
                let mut order: Vec<u32> = (0..arms.len() as u32).collect();
                order.sort_by_key(|&k| tags[k as usize]);
                if let Some(w) = order
                    .windows(2)
                    .find(|w| tags[w[0] as usize] == tags[w[1] as usize])
                {
                    return Err(ValidationError::DuplicateArm {
                        tag: arms[w[0] as usize].tag.to_string(),
                    });
                }
                let lookup = if arms.len() as u32 > LOOKUP_AFTER {
                    let at = self.image.lookup.len() as u32;
                    self.image.lookup.extend(order);
                    at
                } else {
                    NONE
                };
                let case = self.image.cases.len() as u32;
                self.image.cases.push(CaseInfo {
                    arms: start,
                    len: arms.len() as u32,
                    default: if default.is_some() { ids[n - 1] } else { NONE },
                    lookup,
                });
                INode::Case(ids[0], case)
            }
            Node::Var(_) | Node::Int(_) | Node::Bool(_) | Node::Str(_) => unreachable_shape()?,
        };
        let id = self.image.push(node, scope, value);
        if t.is_marked() {
            self.image.mark(id, t);
        }
        Ok(id)
    }
}

/// A node of a shape its own builder arm handles, or a child missing from
/// the builder's stack: a bug in orrery, reported rather than panicking.
fn unreachable_shape<T>() -> Result<T, ValidationError> {
    Err(ValidationError::Internal("the image builder lost a node"))
}

/// Constructor tags of a run: the image's, then any a host function made up.
#[derive(Debug, Default)]
pub(crate) struct Tags {
    extra: Vec<Arc<str>>,
    ids: hashbrown::HashMap<Arc<str>, u32>,
}

impl Tags {
    /// The id of tag `name`: the image's, this run's, or else the next of
    /// the ids `new` (tags not yet appended) stands for.
    pub(crate) fn id_or_new(&self, image: &Image, name: &str, new: &mut Vec<Arc<str>>) -> TagId {
        if let Some(id) = image.tag_id(name) {
            return id;
        }
        let own = image.tags.len() as u32;
        if let Some(&k) = self.ids.get(name) {
            return own + k;
        }
        let k = match new.iter().position(|t| &**t == name) {
            Some(k) => k,
            None => {
                new.push(Arc::from(name));
                new.len() - 1
            }
        };
        own + (self.extra.len() + k) as u32
    }

    /// Add the tags [`Tags::id_or_new`] made up.
    pub(crate) fn append(&mut self, new: Vec<Arc<str>>) {
        for name in new {
            self.ids.insert(Arc::clone(&name), self.extra.len() as u32);
            self.extra.push(name);
        }
    }

    /// Bytes this table holds.
    pub(crate) fn bytes(&self) -> usize {
        self.extra.iter().map(|t| 2 * t.len() + 96).sum()
    }

    /// The name of `tag`, as the `Arc` the image or this table holds.
    pub(crate) fn shared_name<'i>(&'i self, image: &'i Image, tag: TagId) -> Option<&'i Arc<str>> {
        let own = image.tags.len() as u32;
        if tag < own {
            image.tags.get(tag as usize)
        } else {
            self.extra.get((tag - own) as usize)
        }
    }

    /// The name of `tag`.
    pub(crate) fn name<'i>(&'i self, image: &'i Image, tag: TagId) -> &'i str {
        let own = image.tags.len() as u32;
        if tag < own {
            image.tag(tag)
        } else {
            self.extra.get((tag - own) as usize).map_or("?", |t| t)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::term::Arena;
    use crate::HostFunctions;

    #[test]
    fn nodes_are_sixteen_bytes() {
        assert_eq!(std::mem::size_of::<INode>(), 16);
    }

    #[test]
    fn closed_subterms_stay_shared_and_open_ones_unfold() {
        let arena = Arena::new();
        let closed = arena.con("Pair", &[arena.int(1), arena.int(2)]);
        let open = arena.app(arena.var(0), arena.var(0));
        let t = arena.lam(arena.con("Two", &[closed, closed, open, open]));
        let image = Image::build(t, &HostFunctions::new()).unwrap();
        let INode::Lam { body, .. } = image.node(image.root) else {
            panic!()
        };
        let INode::Con(_, start, 4) = image.node(body) else {
            panic!()
        };
        let f = image.list(start, 4);
        assert_eq!(f[0], f[1]);
        assert_ne!(f[2], f[3]);
        assert!(image.is_shared(f[0]));
        assert!(!image.is_shared(f[2]));
    }

    #[test]
    fn validation_errors_are_found() {
        let arena = Arena::new();
        let host = HostFunctions::new();
        let bad_arity = arena.prim(Prim::Add, &[arena.int(1)]);
        assert!(matches!(
            Image::build(bad_arity, &host),
            Err(ValidationError::PrimArity { .. })
        ));
        let two_arities = arena.con("P", &[arena.con("K", &[]), arena.con("K", &[arena.int(1)])]);
        assert!(matches!(
            Image::build(two_arities, &host),
            Err(ValidationError::ConArity { .. })
        ));
        let arm = |tag| crate::Arm::new(tag, 0, arena.int(0));
        let dup = arena.case(arena.int(1), &[arm("A"), arm("B"), arm("A")], None);
        assert!(matches!(
            Image::build(dup, &host),
            Err(ValidationError::DuplicateArm { .. })
        ));
        let wide = arena.case(
            arena.int(1),
            &[crate::Arm::new("W", 1 << 31, arena.int(0))],
            None,
        );
        assert!(matches!(
            Image::build(wide, &host),
            Err(ValidationError::TooWide { .. })
        ));
    }

    #[test]
    fn many_arms_are_found_by_lookup() {
        let arena = Arena::new();
        let names: Vec<String> = (0..40).map(|i| format!("K{i}")).collect();
        let arms: Vec<crate::Arm<'_>> = names
            .iter()
            .enumerate()
            .map(|(i, n)| crate::Arm::new(arena.tag(n), 0, arena.int(i as i64)))
            .collect();
        let t = arena.case(arena.con("K17", &[]), &arms, None);
        let image = Image::build(t, &HostFunctions::new()).unwrap();
        let INode::Case(_, c) = image.node(image.root) else {
            panic!()
        };
        let case = image.cases[c as usize];
        assert_ne!(case.lookup, NONE);
        for (i, n) in names.iter().enumerate() {
            let tag = image.tag_id(n).unwrap();
            let arm = image.find_arm(&case, tag, 0).unwrap();
            assert_eq!(image.node(arm.body), INode::Int(i as i64));
            assert!(image.find_arm(&case, tag, 1).is_none());
        }
    }
}
