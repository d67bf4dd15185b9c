//! A proptest generator of closed, valid kernel programs: recursive functions
//! (terminating loops and divergent ones), data and case, primitives that may
//! fail, and deep nesting. Generated as an owned tree, then built in an arena;
//! free variables are folded into range, so every generated term is closed.

use orrery::{Arena, Arm, HostId, Node, Prim, Term};
use proptest::prelude::*;

/// Constructor tags with their fixed arities.
pub const TAGS: [(&str, usize); 5] = [
    ("Nil", 0),
    ("Leaf", 0),
    ("Some", 1),
    ("Cons", 2),
    ("Node", 3),
];

const STRINGS: [&str; 5] = ["", "a", "orrery", "é\u{1F600}", "line\n\"quoted\""];

/// An owned term shape, before closing and building.
#[derive(Clone, Debug)]
pub enum Gen {
    Var(u32),
    Lam(Box<Gen>),
    Rec(Box<Gen>),
    App(Box<Gen>, Box<Gen>),
    Let(Box<Gen>, Box<Gen>),
    If(Box<Gen>, Box<Gen>, Box<Gen>),
    Int(i64),
    Bool(bool),
    Str(u8),
    Prim(u8, Vec<Gen>),
    Con(u8, Vec<Gen>),
    Case(Box<Gen>, Vec<(u8, Gen)>, Option<Box<Gen>>),
    /// `(rec f x. if x < 1 then body else f (x - 1)) n`: a loop of n rounds.
    Loop(u8, Box<Gen>),
    /// `(rec f x. f x) 0`: divergence.
    Diverge,
    /// A chain of `depth` nested `1 + (…)` around the inner term.
    Deep(u16, Box<Gen>),
    /// A call of host function `k` of the table given to [`build_with`]
    /// (`hosted_program` only; without a table, the sum of its arguments).
    Host(u8, Vec<Gen>),
}

fn leaf() -> impl Strategy<Value = Gen> {
    prop_oneof![
        4 => (0u32..6).prop_map(Gen::Var),
        3 => prop_oneof![Just(0i64), Just(1), Just(-1), Just(2), Just(i64::MAX), Just(i64::MIN), -50i64..50].prop_map(Gen::Int),
        2 => any::<bool>().prop_map(Gen::Bool),
        1 => (0u8..5).prop_map(Gen::Str),
        1 => (0u8..5).prop_map(|k| Gen::Con(k, vec![])),
        1 => Just(Gen::Diverge),
    ]
}

/// Closed programs of modest size that call host functions (build them with
/// [`build_with`]): those of [`program`] with every fourth primitive (by its
/// number) a host call instead, each odd integer `n` a call of host function
/// 0 on `n`, and each string a call of host function 3 on it.
pub fn hosted_program() -> impl Strategy<Value = Gen> {
    program().prop_map(|g| with_hosts(&g))
}

/// `g` with each primitive `k` for `k` a multiple of four a host call.
fn with_hosts(g: &Gen) -> Gen {
    let b = |g: &Gen| Box::new(with_hosts(g));
    let all = |gs: &[Gen]| gs.iter().map(with_hosts).collect::<Vec<_>>();
    match g {
        Gen::Prim(k, args) if k % 4 == 0 => Gen::Host(k / 4, all(args)),
        Gen::Int(n) if n % 2 != 0 => Gen::Host(0, vec![Gen::Int(*n)]),
        Gen::Str(k) => Gen::Host(3, vec![Gen::Str(*k)]),
        Gen::Prim(k, args) => Gen::Prim(*k, all(args)),
        Gen::Host(k, args) => Gen::Host(*k, all(args)),
        Gen::Con(k, args) => Gen::Con(*k, all(args)),
        Gen::Lam(t) => Gen::Lam(b(t)),
        Gen::Rec(t) => Gen::Rec(b(t)),
        Gen::App(f, a) => Gen::App(b(f), b(a)),
        Gen::Let(a, t) => Gen::Let(b(a), b(t)),
        Gen::If(c, t, e) => Gen::If(b(c), b(t), b(e)),
        Gen::Case(s, arms, d) => Gen::Case(
            b(s),
            arms.iter().map(|(k, t)| (*k, with_hosts(t))).collect(),
            d.as_ref().map(|d| b(d)),
        ),
        Gen::Loop(n, t) => Gen::Loop(*n, b(t)),
        Gen::Deep(n, t) => Gen::Deep(*n, b(t)),
        leaf => leaf.clone(),
    }
}

/// Closed programs of modest size.
pub fn program() -> impl Strategy<Value = Gen> {
    leaf().prop_recursive(7, 80, 4, |inner| {
        let b = |s: BoxedStrategy<Gen>| s.prop_map(Box::new);
        let inner = inner.boxed();
        prop_oneof![
            3 => b(inner.clone()).prop_map(Gen::Lam),
            1 => b(inner.clone()).prop_map(Gen::Rec),
            4 => (b(inner.clone()), b(inner.clone())).prop_map(|(f, a)| Gen::App(f, a)),
            2 => (b(inner.clone()), b(inner.clone())).prop_map(|(a, t)| Gen::Let(a, t)),
            2 => (b(inner.clone()), b(inner.clone()), b(inner.clone())).prop_map(|(c, t, e)| Gen::If(c, t, e)),
            3 => (0u8..15, prop::collection::vec(inner.clone(), 0..3)).prop_map(|(k, a)| Gen::Prim(k, a)),
            2 => (0u8..5, prop::collection::vec(inner.clone(), 0..4)).prop_map(|(k, a)| Gen::Con(k, a)),
            2 => (
                b(inner.clone()),
                prop::collection::vec((0u8..5, inner.clone()), 0..4),
                prop::option::of(b(inner.clone())),
            )
                .prop_map(|(s, arms, d)| Gen::Case(s, arms, d)),
            1 => (0u8..6, b(inner.clone())).prop_map(|(n, t)| Gen::Loop(n, t)),
            1 => (0u16..200, b(inner)).prop_map(|(n, t)| Gen::Deep(n, t)),
        ]
    })
}

/// Build `g` in `arena` under `depth` binders, folding variables into range.
pub fn build<'a>(arena: &'a Arena, g: &Gen, depth: u32) -> &'a Term<'a> {
    build_with(arena, g, depth, &[])
}

/// [`build`], with `hosts` the host functions of [`Gen::Host`] calls.
pub fn build_with<'a>(arena: &'a Arena, g: &Gen, depth: u32, hosts: &[HostId]) -> &'a Term<'a> {
    let sub = |g: &Gen, extra: u32| build_with(arena, g, depth + extra, hosts);
    match g {
        Gen::Host(k, args) => match hosts.get(usize::from(*k) % hosts.len().max(1)) {
            Some(&id) => {
                let built = fill(arena, args, id.arity(), depth, hosts);
                arena.prim(Prim::Host(id), &built)
            }
            None => {
                let built = fill(arena, args, 2, depth, hosts);
                arena.prim(Prim::Add, &built)
            }
        },
        Gen::Var(i) if depth == 0 => arena.int(i64::from(*i)),
        Gen::Var(i) => arena.var(i % depth),
        Gen::Lam(b) => arena.lam(sub(b, 1)),
        Gen::Rec(b) => arena.rec_lam(sub(b, 2)),
        Gen::App(f, a) => arena.app(sub(f, 0), sub(a, 0)),
        Gen::Let(a, t) => arena.let_in(sub(a, 0), sub(t, 1)),
        Gen::If(c, t, e) => arena.if_then_else(sub(c, 0), sub(t, 0), sub(e, 0)),
        Gen::Int(n) => arena.int(*n),
        Gen::Bool(v) => arena.boolean(*v),
        Gen::Str(k) => arena.string(STRINGS[usize::from(*k) % STRINGS.len()]),
        Gen::Prim(k, args) => {
            let op = Prim::ALL[usize::from(*k) % Prim::ALL.len()];
            let built = fill(arena, args, op.arity(), depth, hosts);
            arena.prim(op, &built)
        }
        Gen::Con(k, fields) => {
            let (tag, arity) = TAGS[usize::from(*k) % TAGS.len()];
            let built = fill(arena, fields, arity, depth, hosts);
            arena.con(tag, &built)
        }
        Gen::Case(s, arms, default) => {
            let mut seen = Vec::new();
            let mut built = Vec::new();
            for (k, body) in arms {
                let (tag, arity) = TAGS[usize::from(*k) % TAGS.len()];
                if seen.contains(&tag) {
                    continue;
                }
                seen.push(tag);
                built.push(Arm::new(
                    arena.tag(tag),
                    arity as u32,
                    sub(body, arity as u32),
                ));
            }
            arena.case(sub(s, 0), &built, default.as_ref().map(|d| sub(d, 0)))
        }
        Gen::Loop(n, body) => {
            // In the rec body: x is #0, f is #1.
            let x = arena.var(0);
            let step = arena.app(arena.var(1), arena.prim(Prim::Sub, &[x, arena.int(1)]));
            let test = arena.prim(Prim::Lt, &[x, arena.int(1)]);
            let f = arena.rec_lam(arena.if_then_else(test, sub(body, 2), step));
            arena.app(f, arena.int(i64::from(*n)))
        }
        Gen::Diverge => {
            let f = arena.rec_lam(arena.app(arena.var(1), arena.var(0)));
            arena.app(f, arena.int(0))
        }
        Gen::Deep(n, t) => {
            let mut acc = sub(t, 0);
            for _ in 0..*n {
                acc = arena.prim(Prim::Add, &[arena.int(1), acc]);
            }
            acc
        }
    }
}

/// `args` built and cut or padded (with `1`) to exactly `arity` terms.
fn fill<'a>(
    arena: &'a Arena,
    args: &[Gen],
    arity: usize,
    depth: u32,
    hosts: &[HostId],
) -> Vec<&'a Term<'a>> {
    (0..arity)
        .map(|i| match args.get(i) {
            Some(g) => build_with(arena, g, depth, hosts),
            None => arena.int(1),
        })
        .collect()
}

/// Whether `t` is a redex of SEMANTICS §1.2 (a contraction can be attempted on it).
pub fn is_redex(t: &Term<'_>) -> bool {
    match *t.node() {
        Node::App(f, a) => f.is_value() && a.is_value(),
        Node::Let(v, _) | Node::If(v, _, _) | Node::Case(v, _, _) => v.is_value(),
        Node::Prim(_, args) => args.iter().all(|a| a.is_value()),
        _ => false,
    }
}

/// Every redex `r` with `t = E[r]` for an evaluation context `E` of SEMANTICS §1.1,
/// found by trying every production of the grammar of `E` (no determinism
/// assumed: this is what the determinism property checks).
pub fn all_decompositions<'a>(t: &'a Term<'a>) -> Vec<&'a Term<'a>> {
    let mut found = Vec::new();
    if is_redex(t) {
        found.push(t);
    }
    match *t.node() {
        Node::App(f, a) => {
            found.extend(all_decompositions(f)); // E t
            if f.is_value() {
                found.extend(all_decompositions(a)); // v E
            }
        }
        Node::Let(a, _) => found.extend(all_decompositions(a)),
        Node::If(c, _, _) => found.extend(all_decompositions(c)),
        Node::Case(s, _, _) => found.extend(all_decompositions(s)),
        Node::Prim(_, args) | Node::Con(_, args) => {
            // op(v, …, v, E, t, …, t): the hole may sit after any run of values.
            for (i, arg) in args.iter().enumerate() {
                if args[..i].iter().all(|a| a.is_value()) {
                    found.extend(all_decompositions(arg));
                }
            }
        }
        _ => {}
    }
    found
}
