//! Spans and names for programs built through the builder, so that the
//! harness compares every machine's locations and backtraces on them. Used
//! by the generated programs of the agreement tests and by the fuzz targets
//! (it depends on orrery alone).

use std::collections::HashMap;

use orrery::{Arena, Arm, Node, Term};

/// Function names the marked programs use (one in four λs stays unnamed).
const NAMES: [&str; 3] = ["sow", "reap", "thresh"];

/// `t` rebuilt with a span on every node — node `k` in preorder gets bytes
/// `k..k + 1` of file 7 at line `k + 1` — and a name on three λs in four, so
/// that every machine's locations and backtraces can be told apart and
/// compared.
pub fn marked<'a>(arena: &'a Arena, t: &'a Term<'a>) -> &'a Term<'a> {
    let mut marks = Marks {
        next: 0,
        done: HashMap::new(),
    };
    marks.mark(arena, t)
}

/// The marking's state: the next node number, and the nodes marked so far
/// (so a shared subterm is marked once and stays shared).
struct Marks<'a> {
    next: u32,
    done: HashMap<*const Term<'a>, &'a Term<'a>>,
}

impl<'a> Marks<'a> {
    fn mark(&mut self, arena: &'a Arena, t: &'a Term<'a>) -> &'a Term<'a> {
        if let Some(&copy) = self.done.get(&(t as *const _)) {
            return copy;
        }
        let copy = self.mark_new(arena, t);
        self.done.insert(t as *const _, copy);
        copy
    }

    fn mark_new(&mut self, arena: &'a Arena, t: &'a Term<'a>) -> &'a Term<'a> {
        let k = self.next;
        self.next += 1;
        let mut sub = |c: &'a Term<'a>| self.mark(arena, c);
        let copy = match *t.node() {
            Node::Var(_) | Node::Int(_) | Node::Bool(_) | Node::Str(_) => t,
            Node::Lam(b) => arena.lam(sub(b)),
            Node::RecLam(b) => arena.rec_lam(sub(b)),
            Node::App(f, a) => {
                let f = sub(f);
                arena.app(f, sub(a))
            }
            Node::Let(a, b) => {
                let a = sub(a);
                arena.let_in(a, sub(b))
            }
            Node::If(c, y, n) => {
                let c = sub(c);
                let y = sub(y);
                arena.if_then_else(c, y, sub(n))
            }
            Node::Prim(op, args) => {
                let args: Vec<&Term<'_>> = args.iter().map(|&a| sub(a)).collect();
                arena.prim(op, &args)
            }
            Node::Con(tag, fields) => {
                let fields: Vec<&Term<'_>> = fields.iter().map(|&f| sub(f)).collect();
                arena.con(tag, &fields)
            }
            Node::Case(s, arms, default) => {
                let s = sub(s);
                let arms: Vec<Arm<'_>> = arms
                    .iter()
                    .map(|arm| Arm::new(arm.tag, arm.arity, sub(arm.body)))
                    .collect();
                let default = default.map(&mut sub);
                arena.case(s, &arms, default)
            }
        };
        let copy = match copy.node() {
            Node::Lam(_) | Node::RecLam(_) if k % 4 != 3 => {
                arena.named(NAMES[k as usize % NAMES.len()], copy)
            }
            _ => copy,
        };
        arena.at(orrery::Span::new(7, k, k + 1).with_position(k + 1, 1), copy)
    }
}
