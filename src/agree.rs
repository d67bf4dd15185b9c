//! The agreement promise of SEMANTICS §3 as a function: two reports agree when
//! they have the same outcome (values compared as de Bruijn terms, errors by
//! kind) and the same per-rule contraction counts, and, when they stopped
//! by an error or at the end of the fuel, the same location: the redex's
//! span and the backtrace ([`crate::Location`]). Resource limits are
//! reported, never compared.

use crate::equal::terms_equal_within;
use crate::error::LimitError;
use crate::vocabulary::{Outcome, Report};

/// Why two reports of one program disagree, or `None` when they agree (or
/// when either stopped at a resource limit, which may trip anywhere).
///
/// # Examples
///
/// ```
/// use orrery::{disagreement, Arena, Counts, Outcome, Report, Value};
/// let arena = Arena::new();
/// let one = Value::from_term(arena.int(1)).unwrap();
/// let two = Value::from_term(arena.int(2)).unwrap();
/// let a = Report { outcome: Outcome::Value(one), counts: Counts::default(), location: None };
/// let b = Report { outcome: Outcome::Value(two), counts: Counts::default(), location: None };
/// assert!(disagreement(&a, &a).is_none());
/// assert!(disagreement(&a, &b).is_some());
/// ```
pub fn disagreement(a: &Report, b: &Report) -> Option<String> {
    disagreement_within(a, b, usize::MAX).unwrap_or(None)
}

/// [`disagreement`], comparing values with at most about `max_bytes` of
/// working memory (the comparison of two large values needs a memo of the
/// pairs of nodes it has compared). The two values are first made terms,
/// each the size of the value (its sharing kept), which that bound does not
/// count.
///
/// # Errors
///
/// The memory limit, if the values cannot be compared within `max_bytes`.
///
/// # Examples
///
/// ```
/// use orrery::{disagreement_within, Arena, Counts, Outcome, Report, Value};
/// let arena = Arena::new();
/// let mut list = arena.con("Nil", &[]);
/// for i in 0..10_000 {
///     list = arena.con("Cons", &[arena.int(i), list]);
/// }
/// let copy = Arena::new();
/// let other = copy.copy_term(list);
/// let (list, other) = (Value::from_term(list).unwrap(), Value::from_term(other).unwrap());
/// let a = Report { outcome: Outcome::Value(list), counts: Counts::default(), location: None };
/// let b = Report { outcome: Outcome::Value(other), counts: Counts::default(), location: None };
/// assert_eq!(disagreement_within(&a, &b, 1 << 24), Ok(None));
/// assert!(disagreement_within(&a, &b, 1 << 10).is_err());
/// ```
pub fn disagreement_within(
    a: &Report,
    b: &Report,
    max_bytes: usize,
) -> Result<Option<String>, LimitError> {
    Ok(match (&a.outcome, &b.outcome) {
        (Outcome::Fault(f), _) | (_, Outcome::Fault(f)) => Some(f.to_string()),
        (Outcome::Limit(_), _) | (_, Outcome::Limit(_)) => return Ok(None),
        (Outcome::Value(x), Outcome::Value(y)) => {
            let arena = crate::term::Arena::new();
            let (x, y) = (x.to_term(&arena), y.to_term(&arena));
            match terms_equal_within(x, y, max_bytes) {
                Some(true) => {}
                Some(false) => return Ok(Some("different values".to_string())),
                None => return Err(LimitError::memory(max_bytes)),
            }
            counts(a, b)
        }
        (Outcome::Error(x), Outcome::Error(y)) => {
            if x.kind() != y.kind() {
                return Ok(Some(format!(
                    "different errors: {} and {}",
                    x.kind().name(),
                    y.kind().name()
                )));
            }
            counts(a, b).or_else(|| locations(a, b))
        }
        (Outcome::OutOfFuel, Outcome::OutOfFuel) => counts(a, b).or_else(|| locations(a, b)),
        (Outcome::Suspended(x), Outcome::Suspended(y)) => {
            if x != y {
                return Ok(Some(format!("suspended at different calls: {x} and {y}")));
            }
            counts(a, b).or_else(|| locations(a, b))
        }
        (x, y) => Some(format!("different outcomes: {} and {}", x.name(), y.name())),
    })
}

/// Why the locations of two reports stopped by an error or the end of the
/// fuel differ, if they do: the redex's span, then the backtrace.
fn locations(a: &Report, b: &Report) -> Option<String> {
    let none = crate::Location::default();
    let (x, y) = (
        a.location.as_ref().unwrap_or(&none),
        b.location.as_ref().unwrap_or(&none),
    );
    if x.span != y.span {
        return Some(format!("different spans: {:?} and {:?}", x.span, y.span));
    }
    if x.backtrace.omitted != y.backtrace.omitted
        || x.backtrace.frames.len() != y.backtrace.frames.len()
    {
        return Some(format!(
            "different backtrace depths: {} and {}",
            x.backtrace.depth(),
            y.backtrace.depth()
        ));
    }
    let k = x
        .backtrace
        .frames
        .iter()
        .zip(&y.backtrace.frames)
        .position(|(p, q)| p != q)?;
    Some(format!(
        "different backtrace frame {k}: {:?} and {:?}",
        x.backtrace.frames[k], y.backtrace.frames[k]
    ))
}

/// Why the counts of two reports differ, if they do (the extra fuel
/// included).
fn counts(a: &Report, b: &Report) -> Option<String> {
    (a.counts != b.counts).then(|| format!("different counts: {} and {}", a.counts, b.counts))
}
