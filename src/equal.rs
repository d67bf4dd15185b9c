//! Structural equality of de Bruijn terms (which is α-equivalence of the named
//! terms they stand for, Pierce, TAPL §6.1). Iterative, and linear in the size
//! of the shared graph: a pair of nodes is compared once however often it is
//! reached, so values with heavy sharing compare fast.

use hashbrown::HashSet;

use crate::term::{Node, Term};

/// Pairs compared before the memo of visited pairs switches on; small
/// comparisons stay allocation-free.
const MEMO_AFTER: usize = 64;

impl PartialEq for Term<'_> {
    /// Structural equality on de Bruijn terms; see [`terms_equal`].
    fn eq(&self, other: &Self) -> bool {
        terms_equal(self, other)
    }
}

/// Whether two terms are the same de Bruijn term.
///
/// # Examples
///
/// ```
/// use orrery::toolkit::terms_equal;
/// use orrery::Arena;
/// let a = Arena::new();
/// let b = Arena::new();
/// // λx. x and λy. y are one de Bruijn term.
/// assert!(terms_equal(a.lam(a.var(0)), b.lam(b.var(0))));
/// assert!(!terms_equal(a.lam(a.var(0)), a.lam(a.lam(a.var(0)))));
/// ```
pub fn terms_equal(a: &Term<'_>, b: &Term<'_>) -> bool {
    terms_equal_within(a, b, usize::MAX).unwrap_or(false)
}

/// [`terms_equal`] using at most about `max_bytes` for its work list and its
/// memo of compared pairs; `None` if that is not enough.
pub(crate) fn terms_equal_within(a: &Term<'_>, b: &Term<'_>, max_bytes: usize) -> Option<bool> {
    const PAIR: usize = 2 * std::mem::size_of::<usize>();
    let mut pending: Vec<(&Term<'_>, &Term<'_>)> = vec![(a, b)];
    let mut seen: HashSet<(*const Term<'_>, *const Term<'_>)> = HashSet::new();
    let mut compared = 0usize;
    while let Some((x, y)) = pending.pop() {
        if std::ptr::eq(x, y) {
            continue;
        }
        if x.scope() != y.scope() {
            return Some(false);
        }
        let same_head = match (*x.node(), *y.node()) {
            (Node::Var(i), Node::Var(j)) => i == j,
            (Node::Int(i), Node::Int(j)) => i == j,
            (Node::Bool(i), Node::Bool(j)) => i == j,
            (Node::Str(s), Node::Str(u)) => s == u,
            (Node::Lam(_), Node::Lam(_))
            | (Node::RecLam(_), Node::RecLam(_))
            | (Node::App(..), Node::App(..))
            | (Node::Let(..), Node::Let(..))
            | (Node::If(..), Node::If(..)) => true,
            (Node::Prim(p, xs), Node::Prim(q, ys)) => p == q && xs.len() == ys.len(),
            (Node::Con(k, xs), Node::Con(l, ys)) => k == l && xs.len() == ys.len(),
            (Node::Case(_, xs, xd), Node::Case(_, ys, yd)) => {
                xs.len() == ys.len()
                    && xd.is_some() == yd.is_some()
                    && xs
                        .iter()
                        .zip(ys.iter())
                        .all(|(p, q)| p.tag == q.tag && p.arity == q.arity)
            }
            _ => false,
        };
        if !same_head {
            return Some(false);
        }
        compared += 1;
        if compared > MEMO_AFTER && !seen.insert((x as *const _, y as *const _)) {
            continue;
        }
        pending.extend(
            x.children()
                .zip(y.children())
                .map(|((p, _), (q, _))| (p, q)),
        );
        // The memo's table takes about twice its entries.
        let bytes = (pending.capacity() + 2 * seen.capacity()).saturating_mul(PAIR);
        if bytes > max_bytes {
            return None;
        }
    }
    Some(true)
}
