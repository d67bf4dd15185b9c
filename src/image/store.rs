//! An image built node by node: how a run's result is read back into an
//! owned value (a small image of its own, with the same nodes), and how such
//! an image turns back into an arena term for the builder's world (printing,
//! comparing, lowering). Scopes and value flags are computed as nodes are
//! made, from their children, exactly as the arena computes them.

use hashbrown::HashMap;

use super::FEW_TAGS;

use super::{ArmInfo, CaseInfo, INode, Id, Image, TagId, LOCAL, NONE};
use crate::prim::Prim;
use crate::term::{Arena, Arm, Term};

impl Image {
    /// The id of constructor tag `name` in this store, made on first use (a
    /// value may hold one tag with two arities, as a host function can make
    /// it; only programs insist on one).
    pub(crate) fn tag_of(&mut self, name: &str) -> TagId {
        match self.tag_id(name) {
            Some(id) => id,
            None => self.add_tag(std::sync::Arc::from(name)),
        }
    }

    /// [`Image::tag_of`] for a tag held in an `Arc` already (a program's or
    /// a run's), which the store then shares rather than copies.
    pub(crate) fn tag_of_shared(&mut self, name: &std::sync::Arc<str>) -> TagId {
        match self.tag_id(name) {
            Some(id) => id,
            None => self.add_tag(std::sync::Arc::clone(name)),
        }
    }

    /// Add a tag the store does not have. A store of a few tags finds them
    /// by a scan (see [`Image::tag_id`]); past [`FEW_TAGS`] they go in the
    /// map too, all of them at once.
    fn add_tag(&mut self, name: std::sync::Arc<str>) -> TagId {
        let id = self.tags.len() as TagId;
        // A store's tags carry no arity: only a program's image is checked
        // for one arity per tag.
        self.tags.push(name);
        if self.tags.len() > FEW_TAGS {
            if self.tag_ids.is_empty() {
                let all = self.tags.iter().enumerate();
                self.tag_ids
                    .extend(all.map(|(k, t)| (std::sync::Arc::clone(t), k as TagId)));
            } else {
                self.tag_ids
                    .insert(std::sync::Arc::clone(&self.tags[id as usize]), id);
            }
        }
        id
    }

    /// Bytes this store holds, strings aside (its builder counts those as it
    /// copies them).
    pub(crate) fn building_bytes(&self) -> usize {
        use std::mem::size_of;
        self.nodes.capacity() * size_of::<INode>()
            + self.meta.capacity() * 4
            + self.lists.capacity() * 4
            + self.cases.capacity() * size_of::<CaseInfo>()
            + self.arms.capacity() * size_of::<ArmInfo>()
            + self.strings.capacity() * size_of::<std::sync::Arc<str>>()
            + self.tags.capacity() * 64
    }

    /// A string literal node.
    pub(crate) fn push_string(&mut self, text: &str) -> Id {
        let index = self.strings.len() as u32;
        self.strings.push(std::sync::Arc::from(text));
        self.push(INode::Str(index), 0, true)
    }

    /// A string literal node sharing `text`.
    pub(crate) fn push_shared_string(&mut self, text: std::sync::Arc<str>) -> Id {
        let index = self.strings.len() as u32;
        self.strings.push(text);
        self.push(INode::Str(index), 0, true)
    }

    /// The variable `#index`.
    pub(crate) fn push_var(&mut self, index: u32) -> Id {
        self.push(
            INode::Var { index, slot: LOCAL },
            index.saturating_add(1),
            false,
        )
    }

    /// An integer literal.
    pub(crate) fn push_int(&mut self, n: i64) -> Id {
        self.push(INode::Int(n), 0, true)
    }

    /// A boolean literal.
    pub(crate) fn push_bool(&mut self, b: bool) -> Id {
        self.push(INode::Bool(b), 0, true)
    }

    /// `λ. body`.
    pub(crate) fn push_lam(&mut self, body: Id) -> Id {
        let scope = self.scope(body).saturating_sub(1);
        let node = INode::Lam {
            body,
            func: NONE,
            pos: 0,
        };
        self.push(node, scope, true)
    }

    /// `μλ. body`.
    pub(crate) fn push_rec_lam(&mut self, body: Id) -> Id {
        let scope = self.scope(body).saturating_sub(2);
        self.push(INode::RecLam { body, func: NONE }, scope, true)
    }

    /// `f a`.
    pub(crate) fn push_app(&mut self, f: Id, a: Id) -> Id {
        let scope = self.scope(f).max(self.scope(a));
        self.push(INode::App(f, a), scope, false)
    }

    /// `let a in b`.
    pub(crate) fn push_let(&mut self, a: Id, b: Id) -> Id {
        let scope = self.scope(a).max(self.scope(b).saturating_sub(1));
        self.push(INode::Let(a, b), scope, false)
    }

    /// `if c then y else n`.
    pub(crate) fn push_if(&mut self, c: Id, y: Id, n: Id) -> Id {
        let scope = self.scope(c).max(self.scope(y)).max(self.scope(n));
        self.push(INode::If(c, y, n), scope, false)
    }

    /// `op(args…)`.
    pub(crate) fn push_prim(&mut self, op: Prim, args: &[Id]) -> Id {
        let scope = args.iter().map(|&a| self.scope(a)).max().unwrap_or(0);
        let start = self.lists.len() as u32;
        self.lists.extend_from_slice(args);
        self.push(INode::Prim(op, start), scope, false)
    }

    /// `K(fields…)`.
    pub(crate) fn push_con(&mut self, tag: TagId, fields: &[Id]) -> Id {
        let scope = fields.iter().map(|&a| self.scope(a)).max().unwrap_or(0);
        let value = fields.iter().all(|&a| self.is_value(a));
        let start = self.lists.len() as u32;
        self.lists.extend_from_slice(fields);
        self.push(INode::Con(tag, start, fields.len() as u32), scope, value)
    }

    /// `case scrutinee of { arms…; _ ⇒ default }`, each arm its tag, arity
    /// and body.
    pub(crate) fn push_case(
        &mut self,
        scrutinee: Id,
        arms: &[(TagId, u32, Id)],
        default: Option<Id>,
    ) -> Id {
        let mut scope = self.scope(scrutinee);
        for &(_, arity, body) in arms {
            scope = scope.max(self.scope(body).saturating_sub(arity));
        }
        if let Some(d) = default {
            scope = scope.max(self.scope(d));
        }
        let start = self.arms.len() as u32;
        self.arms.extend(
            arms.iter()
                .map(|&(tag, arity, body)| ArmInfo { tag, arity, body }),
        );
        let case = self.cases.len() as u32;
        self.cases.push(CaseInfo {
            arms: start,
            len: arms.len() as u32,
            default: default.unwrap_or(NONE),
            lookup: NONE,
        });
        self.push(INode::Case(scrutinee, case), scope, false)
    }

    /// Node `root` of this image as a term in `arena`, keeping the sharing
    /// of nodes reached more than once. Iterative.
    pub(crate) fn to_term<'a>(&self, root: Id, arena: &'a Arena) -> &'a Term<'a> {
        enum Step {
            Visit(Id),
            Build(Id),
        }
        let mut memo: HashMap<Id, &'a Term<'a>> = HashMap::new();
        let mut steps = vec![Step::Visit(root)];
        let mut done: Vec<&'a Term<'a>> = Vec::new();
        let zero = arena.int(0);
        while let Some(step) = steps.pop() {
            match step {
                Step::Visit(id) => {
                    if let Some(&t) = memo.get(&id) {
                        done.push(t);
                        continue;
                    }
                    let Some(&node) = self.nodes.get(id as usize) else {
                        done.push(zero);
                        continue;
                    };
                    steps.push(Step::Build(id));
                    let mut kids = Vec::new();
                    crate::image::children(self, node, 0, |c, _| kids.push(Step::Visit(c)));
                    steps.extend(kids.into_iter().rev());
                }
                Step::Build(id) => {
                    let t = self.build_term(id, &mut done, arena);
                    memo.insert(id, t);
                    done.push(t);
                }
            }
        }
        done.pop().unwrap_or(zero)
    }

    /// Node `id` as a term, from its children's terms on top of `done`.
    fn build_term<'a>(
        &self,
        id: Id,
        done: &mut Vec<&'a Term<'a>>,
        arena: &'a Arena,
    ) -> &'a Term<'a> {
        let zero = arena.int(0);
        let mut take = |n: usize| -> Vec<&'a Term<'a>> {
            let at = done.len().saturating_sub(n);
            done.drain(at..).collect()
        };
        let at = |k: &[&'a Term<'a>], i: usize| k.get(i).copied().unwrap_or(zero);
        match self.node(id) {
            INode::Var { index, .. } => arena.var(index),
            INode::Int(n) => arena.int(n),
            INode::Bool(b) => arena.boolean(b),
            INode::Str(s) => arena.string(self.string(s)),
            INode::Lam { .. } => arena.lam(at(&take(1), 0)),
            INode::RecLam { .. } => arena.rec_lam(at(&take(1), 0)),
            INode::App(..) => {
                let k = take(2);
                arena.app(at(&k, 0), at(&k, 1))
            }
            INode::Let(..) => {
                let k = take(2);
                arena.let_in(at(&k, 0), at(&k, 1))
            }
            INode::If(..) => {
                let k = take(3);
                arena.if_then_else(at(&k, 0), at(&k, 1), at(&k, 2))
            }
            INode::Prim(op, _) => arena.prim(op, &take(op.arity())),
            INode::Con(tag, _, len) => arena.con(self.tag(tag), &take(len as usize)),
            INode::Case(_, c) => {
                let case = self.cases[c as usize];
                let n = 1 + case.len as usize + usize::from(case.default != NONE);
                let k = take(n);
                let arms: Vec<Arm<'a>> = self
                    .case_arms(&case)
                    .iter()
                    .enumerate()
                    .map(|(i, arm)| {
                        Arm::new(arena.tag(self.tag(arm.tag)), arm.arity, at(&k, 1 + i))
                    })
                    .collect();
                let default = (case.default != NONE).then(|| at(&k, n - 1));
                arena.case(at(&k, 0), &arms, default)
            }
        }
    }
}
