//! De Bruijn terms of the kernel calculus (SEMANTICS §1) allocated in a bump arena,
//! with the builder API. The nameless representation follows Pierce, *Types and
//! Programming Languages* (2002), ch. 6; index 0 is the nearest enclosing binder.

use bumpalo::Bump;
use hashbrown::HashMap;

use crate::prim::Prim;
use crate::span::Span;

/// A node of a term together with its *scope*: one more than the largest free
/// de Bruijn index (0 when the term is closed).
///
/// Terms live in an [`Arena`] and are handed around as `&'a Term<'a>`; they are
/// `Copy`, `Send` and `Sync`, and never need dropping. The scope is computed by
/// the arena's constructors, so it is always right; substitution uses it to skip
/// subterms that cannot contain the variable being replaced.
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Node};
/// let arena = Arena::new();
/// let id = arena.lam(arena.var(0));
/// assert!(id.is_closed());
/// assert!(matches!(id.node(), Node::Lam(_)));
/// assert_eq!(arena.var(3).scope(), 4);
/// ```
#[derive(Clone, Copy, Debug)]
pub struct Term<'a> {
    node: Node<'a>,
    scope: u32,
    value: bool,
    /// The node's source span and function name, if it has either.
    mark: Option<&'a Mark<'a>>,
}

/// What a term may say about where it came from (see [`Arena::at`] and
/// [`Arena::named`]).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
struct Mark<'a> {
    span: Option<Span>,
    name: Option<&'a str>,
}

/// The shape of a term: one variant per construct of the calculus.
///
/// Binding structure: `Lam` binds 1 in its body; `RecLam` binds 2 (in the body
/// `#0` is the argument and `#1` the function itself); `Let` binds 1 in its
/// second term; a case arm for a constructor of arity `n` binds `n` (field 1
/// outermost, so field `n` is `#0`).
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Node};
/// let arena = Arena::new();
/// let t = arena.app(arena.lam(arena.var(0)), arena.int(5));
/// let Node::App(f, a) = t.node() else { panic!("not an application") };
/// assert!(matches!((f.node(), a.node()), (Node::Lam(_), Node::Int(5))));
/// ```
#[derive(Clone, Copy, Debug)]
pub enum Node<'a> {
    /// A variable, by de Bruijn index.
    Var(u32),
    /// A function `λ. t`.
    Lam(&'a Term<'a>),
    /// A recursive function `μλ. t`.
    RecLam(&'a Term<'a>),
    /// An application `t u`.
    App(&'a Term<'a>, &'a Term<'a>),
    /// `let t in u`.
    Let(&'a Term<'a>, &'a Term<'a>),
    /// `if c then t else u`.
    If(&'a Term<'a>, &'a Term<'a>, &'a Term<'a>),
    /// A 64-bit signed integer literal.
    Int(i64),
    /// A boolean literal.
    Bool(bool),
    /// A string literal.
    Str(&'a str),
    /// A saturated primitive application `op(t, …, t)`.
    Prim(Prim, &'a [&'a Term<'a>]),
    /// A constructor `K(t, …, t)`: its tag and fields.
    Con(&'a str, &'a [&'a Term<'a>]),
    /// `case t of { K ⇒ t; …; _ ⇒ t }`: the scrutinee, the arms, the default arm.
    Case(&'a Term<'a>, &'a [Arm<'a>], Option<&'a Term<'a>>),
}

/// One arm of a `case`: the constructor it matches, with its arity, and the body,
/// in which the `arity` fields are bound (field `arity` is `#0`).
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Arm};
/// let arena = Arena::new();
/// // Cons(h, t) => h   — the head is field 1, so #1 in the body.
/// let arm = Arm::new(arena.tag("Cons"), 2, arena.var(1));
/// assert_eq!(arm.arity, 2);
/// ```
#[derive(Clone, Copy, Debug)]
pub struct Arm<'a> {
    /// The constructor's tag.
    pub tag: &'a str,
    /// The number of fields, all bound in `body`.
    pub arity: u32,
    /// The arm's body.
    pub body: &'a Term<'a>,
}

impl<'a> Arm<'a> {
    /// An arm for constructor `tag` of the given arity.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Arm};
    /// let arena = Arena::new();
    /// let arm = Arm::new("Nil", 0, arena.int(0));
    /// assert_eq!(arm.tag, "Nil");
    /// ```
    pub fn new(tag: &'a str, arity: u32, body: &'a Term<'a>) -> Self {
        Arm { tag, arity, body }
    }
}

impl<'a> Term<'a> {
    /// The term's shape.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Node};
    /// let arena = Arena::new();
    /// assert!(matches!(arena.int(7).node(), Node::Int(7)));
    /// ```
    #[inline]
    pub fn node(&self) -> &Node<'a> {
        &self.node
    }

    /// One more than the largest free de Bruijn index, or 0 for a closed term.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Arena;
    /// let arena = Arena::new();
    /// // λ. #0 #2 has the free index 1 (that is #2 under one binder).
    /// let t = arena.lam(arena.app(arena.var(0), arena.var(2)));
    /// assert_eq!(t.scope(), 2);
    /// ```
    #[inline]
    pub fn scope(&self) -> u32 {
        self.scope
    }

    /// Whether the term has no free variables.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Arena;
    /// let arena = Arena::new();
    /// assert!(!arena.var(0).is_closed());
    /// assert!(arena.lam(arena.var(0)).is_closed());
    /// ```
    #[inline]
    pub fn is_closed(&self) -> bool {
        self.scope == 0
    }

    /// Whether the term is a value: a function, a recursive function, a literal,
    /// or a constructor whose fields are all values. Recorded when the node is
    /// built, so this is one load.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Arena;
    /// let arena = Arena::new();
    /// assert!(arena.con("Pair", &[arena.int(1), arena.boolean(true)]).is_value());
    /// assert!(!arena.app(arena.lam(arena.var(0)), arena.int(1)).is_value());
    /// ```
    #[inline]
    pub fn is_value(&self) -> bool {
        self.value
    }

    /// The direct subterms, in evaluation order, each with the number of
    /// binders it sits under relative to this term.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Arena;
    /// let arena = Arena::new();
    /// let t = arena.let_in(arena.int(1), arena.var(0));
    /// let kids: Vec<u32> = t.children().map(|(_, binders)| binders).collect();
    /// assert_eq!(kids, vec![0, 1]);
    /// ```
    pub fn children(&self) -> Children<'a> {
        Children {
            node: self.node,
            next: 0,
        }
    }

    /// The term's source span, if it has one ([`Arena::at`]; the text
    /// parser gives one to every node).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Span};
    /// let arena = Arena::new();
    /// let t = arena.at(Span::new(1, 0, 3), arena.int(7));
    /// assert_eq!(t.span(), Some(Span::new(1, 0, 3)));
    /// assert_eq!(arena.int(7).span(), None);
    /// ```
    #[inline]
    pub fn span(&self) -> Option<Span> {
        self.mark.and_then(|m| m.span)
    }

    /// The function's name, if it has one ([`Arena::named`]; the text
    /// parser names a function by the `let` or `let rec` that binds it).
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// let f = arena.named("halve", arena.lam(arena.var(0)));
    /// assert_eq!(f.name(), Some("halve"));
    /// ```
    #[inline]
    pub fn name(&self) -> Option<&'a str> {
        self.mark.and_then(|m| m.name)
    }

    /// Whether the term has a span or a name.
    #[inline]
    pub(crate) fn is_marked(&self) -> bool {
        self.mark.is_some()
    }
}

/// Iterator over a term's direct subterms; see [`Term::children`].
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Node};
/// let arena = Arena::new();
/// let t = arena.if_then_else(arena.boolean(true), arena.int(1), arena.int(2));
/// let mut children = t.children();
/// assert!(matches!(children.next(), Some((c, 0)) if matches!(c.node(), Node::Bool(true))));
/// assert_eq!(children.count(), 2); // the two branches
/// ```
#[derive(Clone, Debug)]
pub struct Children<'a> {
    node: Node<'a>,
    next: usize,
}

impl<'a> Iterator for Children<'a> {
    type Item = (&'a Term<'a>, u32);

    fn next(&mut self) -> Option<Self::Item> {
        let i = self.next;
        self.next += 1;
        match self.node {
            Node::Var(_) | Node::Int(_) | Node::Bool(_) | Node::Str(_) => None,
            Node::Lam(b) => (i == 0).then_some((b, 1)),
            Node::RecLam(b) => (i == 0).then_some((b, 2)),
            Node::App(f, a) => [(f, 0), (a, 0)].get(i).copied(),
            Node::Let(a, b) => [(a, 0), (b, 1)].get(i).copied(),
            Node::If(c, t, e) => [(c, 0), (t, 0), (e, 0)].get(i).copied(),
            Node::Prim(_, args) | Node::Con(_, args) => args.get(i).map(|t| (*t, 0)),
            Node::Case(s, arms, default) => {
                if i == 0 {
                    Some((s, 0))
                } else if let Some(arm) = arms.get(i - 1) {
                    Some((arm.body, arm.arity))
                } else if i == arms.len() + 1 {
                    default.map(|d| (d, 0))
                } else {
                    None
                }
            }
        }
    }
}

/// A bump arena that owns terms and their strings.
///
/// Every constructor computes the new node's scope, so terms built here are
/// always well formed as trees; [`crate::Program::new`] checks the rest
/// (closedness, arities). Nothing allocated here is freed before the arena is
/// dropped, and dropping is a handful of bulk deallocations, whatever the depth
/// of the terms.
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Prim};
/// let arena = Arena::new();
/// // (λx. x + 1) 41
/// let inc = arena.lam(arena.prim(Prim::Add, &[arena.var(0), arena.int(1)]));
/// let t = arena.app(inc, arena.int(41));
/// assert!(t.is_closed());
/// ```
#[derive(Default)]
pub struct Arena {
    bump: Bump,
}

impl std::fmt::Debug for Arena {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Arena")
            .field("allocated_bytes", &self.allocated_bytes())
            .finish()
    }
}

impl Arena {
    /// An empty arena.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// assert_eq!(arena.allocated_bytes(), 0);
    /// ```
    pub fn new() -> Self {
        Arena { bump: Bump::new() }
    }

    /// Bytes of the arena's chunks already handed out (at most
    /// [`allocated_bytes`](Arena::allocated_bytes)).
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// arena.int(1);
    /// assert!(arena.used_bytes() <= arena.allocated_bytes());
    /// ```
    pub fn used_bytes(&self) -> usize {
        self.bump.allocated_bytes() - self.bump.chunk_capacity()
    }

    /// Copy a term from any arena into this one, keeping its sharing (a node
    /// reached twice is copied once).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Arena;
    /// let scratch = Arena::new();
    /// let t = scratch.con("Pair", &[scratch.string("left"), scratch.int(2)]);
    /// let keep = Arena::new();
    /// let copy = keep.copy_term(t);
    /// drop(scratch);
    /// assert!(copy.is_value());
    /// ```
    pub fn copy_term<'a>(&'a self, term: &Term<'_>) -> &'a Term<'a> {
        copy_term(self, term).0
    }

    /// Bytes the arena has taken from the allocator so far.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// arena.int(1);
    /// assert!(arena.allocated_bytes() > 0);
    /// ```
    pub fn allocated_bytes(&self) -> usize {
        self.bump.allocated_bytes()
    }

    /// Free everything at once; needs `&mut`, so no term can still point here.
    ///
    /// # Examples
    ///
    /// ```
    /// let mut arena = orrery::Arena::new();
    /// arena.int(1);
    /// arena.reset();
    /// ```
    pub fn reset(&mut self) {
        self.bump.reset();
    }

    #[inline]
    fn node<'a>(&'a self, node: Node<'a>, scope: u32) -> &'a Term<'a> {
        let value = is_value_node(&node);
        self.bump.alloc(Term {
            node,
            scope,
            value,
            mark: None,
        })
    }

    /// A node that carries `span` (and, for a function, `name`) from the
    /// start: what `at` and `named` on a fresh [`Arena::term`] give, without
    /// allocating the term twice. The text parser builds every node so.
    pub(crate) fn term_at<'a>(
        &'a self,
        node: Node<'a>,
        span: Span,
        name: Option<&'a str>,
    ) -> &'a Term<'a> {
        let scope = scope_of(&node);
        let value = is_value_node(&node);
        let mark = self.bump.alloc(Mark {
            span: Some(span),
            name,
        });
        self.bump.alloc(Term {
            node,
            scope,
            value,
            mark: Some(mark),
        })
    }

    /// [`Arena::named`] with a name already in this arena, so a name given to
    /// several nodes is stored once.
    pub(crate) fn named_as<'a>(&'a self, name: &'a str, term: &'a Term<'a>) -> &'a Term<'a> {
        let span = term.span();
        self.marked(
            term,
            Mark {
                span,
                name: Some(name),
            },
        )
    }

    /// A copy of `term` (the same node, the same children) that carries
    /// `span`: a position in the source of a language lowered to terms,
    /// which comes back in the [`crate::Location`] of a run stopped there.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Limits, MachineKind, Prim, Program, Span};
    /// let arena = Arena::new();
    /// // 7 / 0, written at bytes 20..25 of the embedder's file 4.
    /// let div = arena.at(
    ///     Span::new(4, 20, 25),
    ///     arena.prim(Prim::Div, &[arena.int(7), arena.int(0)]),
    /// );
    /// let program = Program::new(div).unwrap();
    /// for kind in MachineKind::enabled() {
    ///     let report = kind.run(&program, &Limits::default());
    ///     assert_eq!(report.location.unwrap().span, Some(Span::new(4, 20, 25)));
    /// }
    /// ```
    pub fn at<'a>(&'a self, span: Span, term: &'a Term<'a>) -> &'a Term<'a> {
        let name = term.name();
        self.marked(
            term,
            Mark {
                span: Some(span),
                name,
            },
        )
    }

    /// A copy of `term` that carries the function name `name`, for
    /// backtraces. A name on anything but a function is kept and not used.
    /// A function's name also names the functions directly in its body
    /// that have none (its curried parameters), so `f a b` is reported as
    /// a call of `f`.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Prim};
    /// let arena = Arena::new();
    /// let inc = arena.named("bump", arena.lam(arena.prim(Prim::Add, &[arena.var(0), arena.int(1)])));
    /// assert_eq!(inc.name(), Some("bump"));
    /// assert!(inc.is_closed());
    /// ```
    pub fn named<'a>(&'a self, name: &str, term: &'a Term<'a>) -> &'a Term<'a> {
        let span = term.span();
        let name = Some(&*self.bump.alloc_str(name));
        self.marked(term, Mark { span, name })
    }

    fn marked<'a>(&'a self, term: &'a Term<'a>, mark: Mark<'a>) -> &'a Term<'a> {
        self.bump.alloc(Term {
            mark: Some(self.bump.alloc(mark)),
            ..*term
        })
    }

    /// Allocate a term of the given shape, computing its scope.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Node};
    /// let arena = Arena::new();
    /// let t = arena.term(Node::Bool(true));
    /// assert!(t.is_closed());
    /// ```
    pub fn term<'a>(&'a self, node: Node<'a>) -> &'a Term<'a> {
        let scope = scope_of(&node);
        self.node(node, scope)
    }

    /// The variable `#index`.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// assert_eq!(arena.var(0).scope(), 1);
    /// ```
    #[inline]
    pub fn var(&self, index: u32) -> &Term<'_> {
        self.node(Node::Var(index), index.saturating_add(1))
    }

    /// The function `λ. body`.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// assert!(arena.lam(arena.var(0)).is_closed());
    /// ```
    #[inline]
    pub fn lam<'a>(&'a self, body: &'a Term<'a>) -> &'a Term<'a> {
        self.node(Node::Lam(body), body.scope.saturating_sub(1))
    }

    /// The recursive function `μλ. body`: in `body`, `#0` is the argument and
    /// `#1` the function itself.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// // μλ. #1 #0 — the function that calls itself forever.
    /// let loop_ = arena.rec_lam(arena.app(arena.var(1), arena.var(0)));
    /// assert!(loop_.is_closed());
    /// ```
    #[inline]
    pub fn rec_lam<'a>(&'a self, body: &'a Term<'a>) -> &'a Term<'a> {
        self.node(Node::RecLam(body), body.scope.saturating_sub(2))
    }

    /// The application `function argument`.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// let t = arena.app(arena.lam(arena.var(0)), arena.int(5));
    /// assert!(t.is_closed());
    /// ```
    #[inline]
    pub fn app<'a>(&'a self, function: &'a Term<'a>, argument: &'a Term<'a>) -> &'a Term<'a> {
        self.node(
            Node::App(function, argument),
            function.scope.max(argument.scope),
        )
    }

    /// `let bound in body`; `body` sees the bound value as `#0`.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// assert!(arena.let_in(arena.int(1), arena.var(0)).is_closed());
    /// ```
    #[inline]
    pub fn let_in<'a>(&'a self, bound: &'a Term<'a>, body: &'a Term<'a>) -> &'a Term<'a> {
        self.node(
            Node::Let(bound, body),
            bound.scope.max(body.scope.saturating_sub(1)),
        )
    }

    /// `if condition then yes else no`.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// let t = arena.if_then_else(arena.boolean(true), arena.int(1), arena.int(2));
    /// assert!(t.is_closed());
    /// ```
    #[inline]
    pub fn if_then_else<'a>(
        &'a self,
        condition: &'a Term<'a>,
        yes: &'a Term<'a>,
        no: &'a Term<'a>,
    ) -> &'a Term<'a> {
        self.node(
            Node::If(condition, yes, no),
            condition.scope.max(yes.scope).max(no.scope),
        )
    }

    /// An integer literal.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// assert!(matches!(arena.int(-7).node(), orrery::Node::Int(-7)));
    /// ```
    #[inline]
    pub fn int(&self, value: i64) -> &Term<'_> {
        self.node(Node::Int(value), 0)
    }

    /// A boolean literal.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// assert!(matches!(arena.boolean(false).node(), orrery::Node::Bool(false)));
    /// ```
    #[inline]
    pub fn boolean(&self, value: bool) -> &Term<'_> {
        self.node(Node::Bool(value), 0)
    }

    /// A string literal, copied into the arena.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// assert!(matches!(arena.string("hi").node(), orrery::Node::Str("hi")));
    /// ```
    #[inline]
    pub fn string(&self, value: &str) -> &Term<'_> {
        let s: &str = self.bump.alloc_str(value);
        self.node(Node::Str(s), 0)
    }

    /// A constructor tag (or any string) copied into the arena.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// let tag = arena.tag("Leaf");
    /// assert_eq!(tag, "Leaf");
    /// ```
    #[inline]
    pub fn tag(&self, name: &str) -> &str {
        self.bump.alloc_str(name)
    }

    /// The primitive application `op(args…)`. The arity is checked by
    /// [`crate::Program::new`], not here.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Prim};
    /// let arena = Arena::new();
    /// let t = arena.prim(Prim::Mul, &[arena.int(6), arena.int(7)]);
    /// assert!(t.is_closed());
    /// ```
    pub fn prim<'a>(&'a self, op: Prim, args: &[&'a Term<'a>]) -> &'a Term<'a> {
        let args: &'a [&'a Term<'a>] = self.bump.alloc_slice_copy(args);
        let scope = max_scope(args);
        self.node(Node::Prim(op, args), scope)
    }

    /// The constructor `tag(fields…)`; the tag is copied into the arena.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// let nil = arena.con("Nil", &[]);
    /// let one = arena.con("Cons", &[arena.int(1), nil]);
    /// assert!(one.is_value());
    /// ```
    pub fn con<'a>(&'a self, tag: &str, fields: &[&'a Term<'a>]) -> &'a Term<'a> {
        let tag: &'a str = self.bump.alloc_str(tag);
        let fields: &'a [&'a Term<'a>] = self.bump.alloc_slice_copy(fields);
        self.node(Node::Con(tag, fields), max_scope(fields))
    }

    /// `case scrutinee of { arms…; _ ⇒ default }`.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Arm};
    /// let arena = Arena::new();
    /// let t = arena.case(
    ///     arena.con("Some", &[arena.int(4)]),
    ///     &[Arm::new("Some", 1, arena.var(0))],
    ///     Some(arena.int(0)),
    /// );
    /// assert!(t.is_closed());
    /// ```
    pub fn case<'a>(
        &'a self,
        scrutinee: &'a Term<'a>,
        arms: &[Arm<'a>],
        default: Option<&'a Term<'a>>,
    ) -> &'a Term<'a> {
        let arms: &'a [Arm<'a>] = self.bump.alloc_slice_copy(arms);
        let node = Node::Case(scrutinee, arms, default);
        let scope = scope_of(&node);
        self.node(node, scope)
    }

    /// Copy a slice of terms into the arena.
    pub(crate) fn terms<'a>(&'a self, terms: &[&'a Term<'a>]) -> &'a [&'a Term<'a>] {
        self.bump.alloc_slice_copy(terms)
    }

    /// Copy a slice of arms into the arena.
    pub(crate) fn arms<'a>(&'a self, arms: &[Arm<'a>]) -> &'a [Arm<'a>] {
        self.bump.alloc_slice_copy(arms)
    }
}

/// Whether a node of this shape is a value (its fields' flags decide for a
/// constructor).
#[inline]
fn is_value_node(node: &Node<'_>) -> bool {
    match node {
        Node::Lam(_) | Node::RecLam(_) | Node::Int(_) | Node::Bool(_) | Node::Str(_) => true,
        Node::Con(_, fields) => fields.iter().all(|f| f.value),
        _ => false,
    }
}

fn max_scope(terms: &[&Term<'_>]) -> u32 {
    terms.iter().map(|t| t.scope).max().unwrap_or(0)
}

/// The scope of a node from its children's scopes.
fn scope_of(node: &Node<'_>) -> u32 {
    match *node {
        Node::Var(i) => i.saturating_add(1),
        Node::Int(_) | Node::Bool(_) | Node::Str(_) => 0,
        Node::Lam(b) => b.scope.saturating_sub(1),
        Node::RecLam(b) => b.scope.saturating_sub(2),
        Node::App(f, a) => f.scope.max(a.scope),
        Node::Let(a, b) => a.scope.max(b.scope.saturating_sub(1)),
        Node::If(c, t, e) => c.scope.max(t.scope).max(e.scope),
        Node::Prim(_, args) | Node::Con(_, args) => max_scope(args),
        Node::Case(s, arms, default) => arms
            .iter()
            .map(|a| a.body.scope.saturating_sub(a.arity))
            .chain(default.map(|d| d.scope))
            .fold(s.scope, u32::max),
    }
}

/// A node of `t`'s shape with the given children, allocated in `arena`;
/// `text` maps `t`'s strings and tags into `arena`'s lifetime (the identity
/// when `t` already lives there, a copy otherwise).
pub(crate) fn node_with_children<'a, 'b>(
    arena: &'a Arena,
    t: &Term<'b>,
    kids: &[&'a Term<'a>],
    text: impl Fn(&'b str) -> &'a str,
) -> &'a Term<'a> {
    let copy = node_alone(arena, t, kids, &text);
    match t.mark {
        None => copy,
        Some(mark) => arena.marked(
            copy,
            Mark {
                span: mark.span,
                name: mark.name.map(&text),
            },
        ),
    }
}

/// [`node_with_children`] without the mark.
fn node_alone<'a, 'b>(
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
            _ if node.is_marked() => None,
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
