//! The stepper's heap: the nodes a run builds by substitution, numbered on
//! from the program image's own (which are never copied), and its copying
//! collector, Cheney's breadth-first scan ("A nonrecursive list compacting
//! algorithm", 1970), which needs no stack at any depth.
//!
//! Heap nodes are [`INode`]s like the image's, with a scope and a value flag
//! each. Their operand, field and arm lists live in [`Heap::lists`] at
//! *absolute* positions: a position below the image's list count is in the
//! image's lists, any other in the heap's. A heap `case` node's list holds
//! the image case it was copied from, then its arm bodies and default arm.
//! A heap `Str` node indexes [`Heap::strings`], whose strings are shared by
//! handle: substitution never copies them and collection copies the handle.

use std::sync::Arc;

use crate::budget::{growth, Budget, Halt};
use crate::image::{INode, Id, Image, NONE};

/// Bytes one heap node takes: the node and its scope word.
pub(super) const NODE_BYTES: usize = std::mem::size_of::<INode>() + 4;

/// Bytes a heap string costs besides its text: its handle in
/// [`Heap::strings`], the shared allocation's counts, and the allocator's
/// own header.
pub(super) const STRING_OVERHEAD: usize = std::mem::size_of::<Arc<str>>() + 16 + 16;

const VALUE_BIT: u32 = 1 << 31;

/// The nodes, lists and strings a run has built.
#[derive(Debug, Default)]
pub(super) struct Heap {
    /// The id of the first heap node: the image's node count.
    pub(super) base: u32,
    /// The absolute position of the first heap list entry: the image's
    /// list count.
    pub(super) list_base: u32,
    pub(super) nodes: Vec<INode>,
    /// Per node: its scope in the low 31 bits, whether it is a value in the
    /// top bit.
    meta: Vec<u32>,
    pub(super) lists: Vec<Id>,
    pub(super) strings: Vec<Arc<str>>,
    /// Bytes of the strings' text.
    pub(super) string_bytes: usize,
}

impl Heap {
    /// An empty heap for runs of `image`.
    pub(super) fn new(image: &Image) -> Self {
        Heap {
            base: image.nodes.len() as u32,
            list_base: image.lists.len() as u32,
            ..Heap::default()
        }
    }

    /// Node `id`, of the image or of this heap. Ids are made only by this
    /// module and the image, so every id in a run names a node.
    #[inline(always)]
    pub(super) fn node(&self, image: &Image, id: Id) -> INode {
        match id.checked_sub(self.base) {
            None => image.node(id),
            Some(h) => self.nodes[h as usize],
        }
    }

    /// One more than the largest free index of node `id`.
    #[inline(always)]
    pub(super) fn scope(&self, image: &Image, id: Id) -> u32 {
        match id.checked_sub(self.base) {
            None => image.scope(id),
            Some(h) => self.meta[h as usize] & !VALUE_BIT,
        }
    }

    /// Whether node `id` is a value.
    #[inline(always)]
    pub(super) fn is_value(&self, image: &Image, id: Id) -> bool {
        match id.checked_sub(self.base) {
            None => image.is_value(id),
            Some(h) => self.meta[h as usize] & VALUE_BIT != 0,
        }
    }

    /// Whether `id` is a heap node.
    #[inline(always)]
    pub(super) fn is_heap(&self, id: Id) -> bool {
        id >= self.base
    }

    /// The list entry at absolute position `at`.
    #[inline(always)]
    pub(super) fn list(&self, image: &Image, at: u32) -> Id {
        match at.checked_sub(self.list_base) {
            None => image.lists[at as usize],
            Some(h) => self.lists[h as usize],
        }
    }

    /// The absolute position the next list entry will take.
    #[inline(always)]
    pub(super) fn list_end(&self) -> u32 {
        self.list_base + self.lists.len() as u32
    }

    /// The text of string node `id` whose index is `index`.
    #[inline]
    pub(super) fn string<'a>(&'a self, image: &'a Image, id: Id, index: u32) -> &'a str {
        if self.is_heap(id) {
            self.strings.get(index as usize).map_or("", |s| s)
        } else {
            image.string(index)
        }
    }

    /// The handle of the text of string node `id` whose index is `index`.
    pub(super) fn shared_string(&self, image: &Image, id: Id, index: u32) -> Arc<str> {
        let strings = if self.is_heap(id) {
            &self.strings
        } else {
            &image.strings
        };
        strings
            .get(index as usize)
            .cloned()
            .unwrap_or_else(|| Arc::from(""))
    }

    /// The image case and the absolute position of the arm bodies (or
    /// [`NONE`]: the image case's own) of case node `id` with payload `x`.
    #[inline]
    pub(super) fn case_of(&self, image: &Image, id: Id, x: u32) -> (u32, u32) {
        if self.is_heap(id) {
            (self.list(image, x), x + 1)
        } else {
            (x, NONE)
        }
    }

    /// Append a node; the caller has made room ([`Heap::has_room`]).
    #[inline(always)]
    pub(super) fn push(&mut self, node: INode, scope: u32, value: bool) -> Id {
        let id = self.base + self.nodes.len() as u32;
        self.nodes.push(node);
        self.meta.push(scope | if value { VALUE_BIT } else { 0 });
        id
    }

    /// Whether `n` more nodes fit without growing.
    #[inline(always)]
    pub(super) fn has_room(&self, n: usize) -> bool {
        self.nodes.capacity() - self.nodes.len() >= n
    }

    /// The capacity the node vectors should grow to, to take `n` more
    /// nodes: double, but not past `soft` nodes unless more are needed; `None`
    /// if they need no growth, `Err` if the ids would run out.
    pub(super) fn node_capacity(&self, n: usize, soft: usize) -> Result<Option<usize>, Halt> {
        let need = self.nodes.len().saturating_add(n);
        if need <= self.nodes.capacity() {
            return Ok(None);
        }
        let doubled = self.nodes.capacity().saturating_mul(2).max(64);
        let cap = need.max(doubled.min(soft));
        if cap.saturating_add(self.base as usize) > u32::MAX as usize - 1 {
            return Err(Halt::Memory);
        }
        Ok(Some(cap))
    }

    /// Grow the node vectors to `cap` nodes.
    pub(super) fn grow_nodes(&mut self, cap: usize) {
        self.nodes
            .reserve_exact(cap.saturating_sub(self.nodes.len()));
        self.meta.reserve_exact(cap.saturating_sub(self.meta.len()));
    }

    /// Whether the list positions would run out after `n` more entries.
    pub(super) fn lists_full(&self, n: usize) -> bool {
        (self.list_base as usize)
            .saturating_add(self.lists.len())
            .saturating_add(n)
            > u32::MAX as usize - 1
    }

    /// Append a string (room made by the caller), its node's index.
    pub(super) fn push_string(&mut self, s: Arc<str>) -> u32 {
        self.string_bytes += s.len();
        self.strings.push(s);
        (self.strings.len() - 1) as u32
    }

    /// Bytes held, as the memory limit counts them.
    pub(super) fn bytes(&self) -> usize {
        self.nodes.capacity() * std::mem::size_of::<INode>()
            + self.meta.capacity() * 4
            + self.lists.capacity() * 4
            + self.strings.capacity() * std::mem::size_of::<Arc<str>>()
            + self.strings.len() * (STRING_OVERHEAD - std::mem::size_of::<Arc<str>>())
            + self.string_bytes
    }

    /// Bytes of nodes and lists in use (not capacity), the measure the
    /// collection policy compares.
    #[inline(always)]
    pub(super) fn used(&self) -> usize {
        self.nodes.len() * NODE_BYTES + self.lists.len() * 4
    }
}

/// A collection in progress: the old heap, the new one, and where each old
/// node went.
pub(super) struct Collector<'h> {
    image: &'h Image,
    from: &'h Heap,
    pub(super) to: Heap,
    forward: Vec<u32>,
    /// Bytes the run holds besides the new heap and the forwarding table.
    outside: usize,
}

impl<'h> Collector<'h> {
    /// Start a collection of `from`; the run holds `outside` bytes (the old
    /// heap included). The forwarding table and a first to-space of
    /// `estimate` nodes are counted against the limit before they are made.
    pub(super) fn new(
        image: &'h Image,
        from: &'h Heap,
        outside: usize,
        estimate: usize,
        budget: &mut Budget,
    ) -> Result<Self, Halt> {
        let table = from.nodes.len().saturating_mul(4);
        let estimate = estimate.min(from.nodes.len());
        let first = estimate.saturating_mul(NODE_BYTES);
        budget.check_memory(outside.saturating_add(table).saturating_add(first))?;
        let mut to = Heap {
            base: from.base,
            list_base: from.list_base,
            ..Heap::default()
        };
        to.nodes.reserve_exact(estimate);
        to.meta.reserve_exact(estimate);
        Ok(Collector {
            image,
            from,
            to,
            forward: vec![NONE; from.nodes.len()],
            outside: outside.saturating_add(table),
        })
    }

    /// Check that growing a vector of the to-space to `bytes` fits, while
    /// its old buffer is still held.
    fn room(&self, bytes: usize, budget: &mut Budget) -> Result<(), Halt> {
        budget.check_memory(
            self.outside
                .saturating_add(self.to.bytes())
                .saturating_add(bytes),
        )
    }

    /// The new id of `id`, copying the node (not yet its children) if this
    /// is the first time it is reached. Image nodes stay where they are.
    pub(super) fn forward(&mut self, id: Id, budget: &mut Budget) -> Result<Id, Halt> {
        let Some(h) = id.checked_sub(self.from.base) else {
            return Ok(id);
        };
        let h = h as usize;
        let done = self.forward[h];
        if done != NONE {
            return Ok(done);
        }
        budget.work(1)?;
        if !self.to.has_room(1) {
            if let Some(cap) = self.to.node_capacity(1, usize::MAX)? {
                let bytes = cap.saturating_mul(NODE_BYTES);
                self.room(bytes, budget)?;
                self.to.grow_nodes(cap);
            }
        }
        let mut node = self.from.nodes[h];
        let meta = self.from.meta[h];
        if let INode::Str(i) = node {
            let s = self
                .from
                .strings
                .get(i as usize)
                .cloned()
                .unwrap_or_else(|| Arc::from(""));
            if self.to.strings.len() == self.to.strings.capacity() {
                let grow = growth(&self.to.strings, 1).unwrap_or(0);
                self.room(grow.saturating_add(STRING_OVERHEAD), budget)?;
            }
            node = INode::Str(self.to.push_string(s));
        }
        let new = self.to.base + self.to.nodes.len() as u32;
        self.to.nodes.push(node);
        self.to.meta.push(meta);
        self.forward[h] = new;
        Ok(new)
    }

    /// Copy `len` list entries from absolute position `at` into the new
    /// heap, forwarding each; the new position. Image lists stay.
    pub(super) fn list(&mut self, at: u32, len: u32, budget: &mut Budget) -> Result<u32, Halt> {
        if at < self.from.list_base {
            return Ok(at);
        }
        let start = self.to.list_end();
        let len = len as usize;
        if let Some(bytes) = growth(&self.to.lists, len) {
            self.room(bytes, budget)?;
            self.to.lists.reserve_exact(bytes / 4 - self.to.lists.len());
        }
        budget.work(len as u64)?;
        let from = (at - self.from.list_base) as usize;
        for k in 0..len {
            let old = self.from.lists.get(from + k).copied().unwrap_or(0);
            let new = self.forward(old, budget)?;
            self.to.lists.push(new);
        }
        Ok(start)
    }

    /// Copy a heap case's list at absolute position `at` (its image case,
    /// then its bodies); the new position.
    pub(super) fn case_list(&mut self, at: u32, budget: &mut Budget) -> Result<u32, Halt> {
        let image = self.image;
        let ic = self.from.list(image, at);
        let case = image.cases.get(ic as usize).copied();
        let bodies = case.map_or(0, |c| c.len + u32::from(c.default != NONE));
        let start = self.to.list_end();
        if self.to.lists.len() == self.to.lists.capacity() {
            let bytes = growth(&self.to.lists, 1).unwrap_or(0);
            self.room(bytes, budget)?;
            self.to.lists.reserve_exact(bytes / 4 - self.to.lists.len());
        }
        self.to.lists.push(ic);
        self.list(at + 1, bodies, budget)?;
        Ok(start)
    }

    /// Copy everything reachable from the nodes copied so far: Cheney's scan
    /// over the new heap, forwarding each node's children in turn.
    pub(super) fn scan(&mut self, budget: &mut Budget) -> Result<(), Halt> {
        let mut at = 0;
        while at < self.to.nodes.len() {
            let node = self.to.nodes[at];
            let new = match node {
                INode::Var { .. } | INode::Int(_) | INode::Bool(_) | INode::Str(_) => None,
                INode::Lam { body, func, pos } => Some(INode::Lam {
                    body: self.forward(body, budget)?,
                    func,
                    pos,
                }),
                INode::RecLam { body, func } => Some(INode::RecLam {
                    body: self.forward(body, budget)?,
                    func,
                }),
                INode::App(a, b) => Some(INode::App(
                    self.forward(a, budget)?,
                    self.forward(b, budget)?,
                )),
                INode::Let(a, b) => Some(INode::Let(
                    self.forward(a, budget)?,
                    self.forward(b, budget)?,
                )),
                INode::If(c, y, n) => Some(INode::If(
                    self.forward(c, budget)?,
                    self.forward(y, budget)?,
                    self.forward(n, budget)?,
                )),
                INode::Prim(op, start) => Some(INode::Prim(
                    op,
                    self.list(start, op.arity() as u32, budget)?,
                )),
                INode::Con(tag, start, len) => {
                    Some(INode::Con(tag, self.list(start, len, budget)?, len))
                }
                INode::Case(s, x) => {
                    let s = self.forward(s, budget)?;
                    Some(INode::Case(s, self.case_list(x, budget)?))
                }
            };
            if let Some(new) = new {
                self.to.nodes[at] = new;
            }
            at += 1;
        }
        Ok(())
    }
}

impl Heap {
    /// The body of arm `i` of `case`, whose bodies are at absolute position
    /// `bodies` ([`NONE`]: the image case's own).
    #[inline]
    pub(super) fn arm_body(
        &self,
        image: &Image,
        case: &crate::image::CaseInfo,
        bodies: u32,
        i: u32,
    ) -> Id {
        if bodies == NONE {
            image
                .arms
                .get((case.arms + i) as usize)
                .map_or(0, |a| a.body)
        } else {
            self.list(image, bodies + i)
        }
    }

    /// The default arm of `case`, if it has one.
    #[inline]
    pub(super) fn default_body(
        &self,
        image: &Image,
        case: &crate::image::CaseInfo,
        bodies: u32,
    ) -> Option<Id> {
        if case.default == NONE {
            None
        } else if bodies == NONE {
            Some(case.default)
        } else {
            Some(self.list(image, bodies + case.len))
        }
    }
}
