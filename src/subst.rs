//! Shifting and substitution on de Bruijn terms, open terms included, after
//! Pierce, *Types and Programming Languages* (2002), §6.2. All traversals use an
//! explicit work stack, and skip any subterm whose scope shows it cannot contain
//! the variables being changed, so substituting a closed value never copies it.

use crate::term::{node_with_children, Arena, Node, Term};

/// A shift or substitution would make a de Bruijn index larger than
/// `u32::MAX` (or, for a negative shift, smaller than zero): there is no
/// such term, so none is returned.
///
/// # Examples
///
/// ```
/// use orrery::toolkit::{shift, IndexOutOfRange};
/// use orrery::Arena;
/// let arena = Arena::new();
/// assert_eq!(shift(&arena, arena.var(u32::MAX), 1, 0), Err(IndexOutOfRange));
/// assert_eq!(shift(&arena, arena.var(0), -1, 0), Err(IndexOutOfRange));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, thiserror::Error)]
#[error("a de Bruijn index would leave the range 0..=u32::MAX")]
pub struct IndexOutOfRange;

/// The d-place shift of Pierce §6.2.1, `↑ᵈ_c(t)`: add `d` to every free index
/// `≥ cutoff`.
///
/// # Errors
///
/// [`IndexOutOfRange`] when an index would go below zero (a negative `d` and
/// a free index in `cutoff..cutoff - d`) or above `u32::MAX`.
///
/// # Examples
///
/// ```
/// use orrery::toolkit::shift;
/// use orrery::Arena;
/// let arena = Arena::new();
/// // Pierce, TAPL, exercise 6.2.2(1): ↑²(λ.λ. 1 (0 2)) = λ.λ. 1 (0 4).
/// let t = arena.lam(arena.lam(arena.app(arena.var(1), arena.app(arena.var(0), arena.var(2)))));
/// let expected = arena.lam(arena.lam(arena.app(arena.var(1), arena.app(arena.var(0), arena.var(4)))));
/// assert_eq!(shift(&arena, t, 2, 0).unwrap(), expected);
/// ```
pub fn shift<'a>(
    arena: &'a Arena,
    t: &'a Term<'a>,
    d: i64,
    cutoff: u32,
) -> Result<&'a Term<'a>, IndexOutOfRange> {
    Rebuild::new(arena).run(t, 0, cutoff, |arena, index, depth| {
        if u64::from(index) < u64::from(cutoff) + u64::from(depth) {
            return Ok(arena.var(index));
        }
        i64::from(index)
            .checked_add(d)
            .and_then(|i| u32::try_from(i).ok())
            .map(|i| arena.var(i))
            .ok_or(IndexOutOfRange)
    })
}

/// The substitution of Pierce §6.2.4, `[j ↦ s]t`: replace the free index `j` of
/// `t` by `s`, shifting `s` under each binder crossed. Other indices are left
/// as they are.
///
/// # Errors
///
/// [`IndexOutOfRange`] when shifting `s` under the binders it crosses would
/// take one of its indices past `u32::MAX`.
///
/// # Examples
///
/// ```
/// use orrery::toolkit::subst;
/// use orrery::Arena;
/// let arena = Arena::new();
/// // Pierce, TAPL, exercise 6.2.5(1), context a, b: [0 ↦ 1](0 (λ.λ. 2)) = 1 (λ.λ. 3).
/// let t = arena.app(arena.var(0), arena.lam(arena.lam(arena.var(2))));
/// let expected = arena.app(arena.var(1), arena.lam(arena.lam(arena.var(3))));
/// assert_eq!(subst(&arena, t, 0, arena.var(1)).unwrap(), expected);
/// ```
pub fn subst<'a>(
    arena: &'a Arena,
    t: &'a Term<'a>,
    j: u32,
    s: &'a Term<'a>,
) -> Result<&'a Term<'a>, IndexOutOfRange> {
    let mut inner = Rebuild::new(arena);
    Rebuild::new(arena).run(t, 0, j, |arena, index, depth| {
        if j.checked_add(depth) == Some(index) {
            inner.shift_up(s, depth)
        } else {
            Ok(arena.var(index))
        }
    })
}

/// Instantiate the innermost `values.len()` binders of `body` at once:
/// `#k := values[k]` for `k < values.len()`, and every larger free index
/// decreases by `values.len()`. This is the contractum of beta (`[v]`), of
/// beta_rec (`[v, μλ. t]`), of let, and of a case arm (fields, last first).
/// Values that are not closed are shifted under the binders they cross.
///
/// # Errors
///
/// [`IndexOutOfRange`] when shifting an open value under the binders it
/// crosses would take one of its indices past `u32::MAX`.
///
/// # Examples
///
/// ```
/// use orrery::toolkit::instantiate;
/// use orrery::Arena;
/// let arena = Arena::new();
/// // Pierce, TAPL §6.3: (λ. 1 0 2) applied to v, in a context with two free
/// // variables, gives ↑⁻¹([0 ↦ ↑¹ v] (1 0 2)) = 0 v 1.
/// let body = arena.app(arena.app(arena.var(1), arena.var(0)), arena.var(2));
/// let v = arena.lam(arena.var(0));
/// let expected = arena.app(arena.app(arena.var(0), v), arena.var(1));
/// assert_eq!(instantiate(&arena, body, &[v]).unwrap(), expected);
/// ```
pub fn instantiate<'a>(
    arena: &'a Arena,
    body: &'a Term<'a>,
    values: &[&'a Term<'a>],
) -> Result<&'a Term<'a>, IndexOutOfRange> {
    let n = u32::try_from(values.len()).unwrap_or(u32::MAX);
    let mut inner = Rebuild::new(arena);
    Rebuild::new(arena).run(body, 0, 0, |arena, index, at| {
        if index < at {
            return Ok(arena.var(index));
        }
        let k = index - at;
        match values.get(k as usize).filter(|_| k < n) {
            Some(v) if v.is_closed() => Ok(v),
            Some(v) => inner.shift_up(v, at),
            None => Ok(arena.var(index - n)),
        }
    })
}

enum Work<'a> {
    Visit(&'a Term<'a>, u32),
    Build(&'a Term<'a>),
}

/// Reusable scratch for rebuilding terms bottom-up without native recursion.
struct Rebuild<'a> {
    arena: &'a Arena,
    work: Vec<Work<'a>>,
    done: Vec<&'a Term<'a>>,
}

impl<'a> Rebuild<'a> {
    fn new(arena: &'a Arena) -> Self {
        Rebuild {
            arena,
            work: Vec::new(),
            done: Vec::new(),
        }
    }

    /// `↑ᵈ₀(t)` for `d ≥ 0`.
    fn shift_up(&mut self, t: &'a Term<'a>, d: u32) -> Result<&'a Term<'a>, IndexOutOfRange> {
        if d == 0 || t.is_closed() {
            return Ok(t);
        }
        self.run(t, 0, 0, |arena, index, depth| {
            if index < depth {
                Ok(arena.var(index))
            } else {
                index
                    .checked_add(d)
                    .map(|i| arena.var(i))
                    .ok_or(IndexOutOfRange)
            }
        })
    }

    /// Rebuild `root`, whose free indices start `depth` binders up, replacing
    /// each free variable `#index` under `depth'` binders by
    /// `var(arena, index, depth')`. A subterm whose scope is at most
    /// `depth' + keep_below` has no variable `var` would change and is shared
    /// (a scope of `u32::MAX` may stand for a larger one, so it is never
    /// trusted).
    fn run(
        &mut self,
        root: &'a Term<'a>,
        depth: u32,
        keep_below: u32,
        mut var: impl FnMut(&'a Arena, u32, u32) -> Result<&'a Term<'a>, IndexOutOfRange>,
    ) -> Result<&'a Term<'a>, IndexOutOfRange> {
        self.work.clear();
        self.done.clear();
        self.work.push(Work::Visit(root, depth));
        while let Some(item) = self.work.pop() {
            match item {
                Work::Visit(t, depth) => {
                    let scope = u64::from(t.scope());
                    if t.scope() != u32::MAX && scope <= u64::from(depth) + u64::from(keep_below) {
                        self.done.push(t);
                        continue;
                    }
                    if let Node::Var(index) = *t.node() {
                        let v = var(self.arena, index, depth)?;
                        self.done.push(v);
                        continue;
                    }
                    self.work.push(Work::Build(t));
                    let first_child = self.work.len();
                    for (child, binders) in t.children() {
                        let Some(d) = depth.checked_add(binders) else {
                            return Err(IndexOutOfRange);
                        };
                        self.work.push(Work::Visit(child, d));
                    }
                    self.work[first_child..].reverse();
                }
                Work::Build(t) => {
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
        let at = self.done.len().saturating_sub(n);
        let kids = &self.done[at..];
        let unchanged = t
            .children()
            .zip(kids.iter())
            .all(|((old, _), new)| std::ptr::eq(old, *new));
        let rebuilt = if unchanged || kids.len() != n {
            t
        } else {
            node_with_children(self.arena, t, kids, |s| s)
        };
        self.done.truncate(at);
        rebuilt
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn indices_at_the_limit_are_errors_not_wrong_terms() {
        let arena = Arena::new();
        let top = arena.var(u32::MAX);
        assert_eq!(shift(&arena, top, 1, 0), Err(IndexOutOfRange));
        assert_eq!(shift(&arena, top, i64::MAX, 0), Err(IndexOutOfRange));
        assert_eq!(shift(&arena, top, 0, 0), Ok(top));
        // Below the cutoff nothing moves; at it, the index would overflow.
        let below = arena.var(u32::MAX - 1);
        assert_eq!(
            shift(&arena, below, 1, u32::MAX).map(|t| t == below),
            Ok(true)
        );
        assert_eq!(shift(&arena, top, 1, u32::MAX), Err(IndexOutOfRange));
        assert_eq!(
            shift(&arena, arena.lam(below), 1, u32::MAX - 1).map(|t| t == arena.lam(below)),
            Ok(true)
        );
        // [u32::MAX ↦ 5] #u32::MAX is 5: the scope saturates, so it is not
        // trusted to skip the variable.
        let five = arena.int(5);
        assert_eq!(subst(&arena, top, u32::MAX, five), Ok(five));
        // Substituting an open term under a binder past the limit.
        let under = arena.lam(arena.var(1));
        assert_eq!(subst(&arena, under, 0, top), Err(IndexOutOfRange));
        assert_eq!(
            instantiate(&arena, arena.lam(arena.var(1)), &[top]),
            Err(IndexOutOfRange)
        );
    }
}
