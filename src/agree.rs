//! The agreement promise of DESIGN §2 as a function: two reports agree when
//! they have the same outcome (values compared as de Bruijn terms, errors by
//! kind) and the same per-rule contraction counts. Resource limits are
//! reported, never compared.

use crate::api::{Outcome, Report};

/// Why two reports of one program disagree, or `None` when they agree (or
/// when either stopped at a resource limit, which may trip anywhere).
///
/// # Examples
///
/// ```
/// use orrery::{disagreement, Arena, Counts, Outcome, Report};
/// let arena = Arena::new();
/// let a = Report { outcome: Outcome::Value(arena.int(1)), counts: Counts::default() };
/// let b = Report { outcome: Outcome::Value(arena.int(2)), counts: Counts::default() };
/// assert!(disagreement(&a, &a).is_none());
/// assert!(disagreement(&a, &b).is_some());
/// ```
pub fn disagreement(a: &Report<'_>, b: &Report<'_>) -> Option<String> {
    match (&a.outcome, &b.outcome) {
        (Outcome::Limit(_), _) | (_, Outcome::Limit(_)) => return None,
        (Outcome::Value(x), Outcome::Value(y)) => {
            if x != y {
                return Some("different values".to_string());
            }
        }
        (Outcome::Error(x), Outcome::Error(y)) => {
            if x.kind() != y.kind() {
                return Some(format!(
                    "different errors: {} and {}",
                    x.kind().name(),
                    y.kind().name()
                ));
            }
        }
        (Outcome::OutOfFuel, Outcome::OutOfFuel) => {}
        (x, y) => {
            return Some(format!("different outcomes: {} and {}", x.name(), y.name()));
        }
    }
    if a.counts != b.counts {
        return Some(format!("different counts: {} and {}", a.counts, b.counts));
    }
    None
}
