//! How a run of an environment machine that pauses ends, and what it
//! reports while paused or ended: kept once made, so that a finished run
//! reports the same outcome however often it is asked.

use crate::budget::{Budget, Ended, Halt};
use crate::error::Fault;
use crate::span::Location;
use crate::vocabulary::{Outcome, Report};

/// The end of a run.
pub(crate) enum End {
    /// The value, read back.
    Value(crate::Value),
    /// How it ended, and where ([`None`] for a fault).
    Ended(Ended, Option<Location>),
}

impl End {
    /// The end `halt` makes of a run under `budget`, located by `locate`
    /// unless it is a fault; `None` when it is a pause (out of fuel, or a
    /// wait on a suspended host call).
    pub(crate) fn of_halt(
        halt: Halt,
        budget: &Budget,
        locate: impl FnOnce() -> Location,
    ) -> Option<End> {
        let located = !matches!(halt, Halt::Fault(_));
        halt.ended(budget.limit())
            .map(|ended| End::Ended(ended, located.then(locate)))
    }

    /// The end of a run whose value was read back as `read`: the value, or
    /// the limit the read-back met (every contraction was made: no redex,
    /// and no call pending).
    pub(crate) fn of_read_back(read: Result<crate::Value, Halt>, budget: &Budget) -> End {
        match read {
            Ok(value) => End::Value(value),
            Err(halt) => match halt.ended(budget.limit()) {
                Some(ended @ Ended::Fault(_)) => End::Ended(ended, None),
                Some(ended) => End::Ended(ended, Some(Location::default())),
                None => End::Ended(Ended::Fault(Fault::new("read-back asked for fuel")), None),
            },
        }
    }

    /// How detaching or attaching a run of `machine` ends it when it meets
    /// `halt` (a broken invariant: the walks pay no fuel and ask for no
    /// memory).
    pub(crate) fn of_detach(halt: Halt, machine: &str) -> End {
        let ended = halt.ended(usize::MAX).unwrap_or_else(|| {
            Ended::Fault(Fault::new(format!(
                "in the {machine} machine: detaching ran out of fuel"
            )))
        });
        End::Ended(ended, None)
    }
}

/// The report of a run under `budget` that has ended with `end`, or, while
/// it is paused (`None`), of its pause, at the place `paused_at` gives.
pub(crate) fn report(
    end: &Option<End>,
    budget: &Budget,
    paused_at: impl FnOnce() -> Location,
) -> Report {
    let (outcome, location) = match end {
        None => (budget.paused(), Some(paused_at())),
        Some(End::Value(value)) => (Outcome::Value(value.clone()), None),
        Some(End::Ended(ended, location)) => (ended.outcome(), location.clone()),
    };
    Report {
        outcome,
        counts: budget.counts,
        location,
    }
}
