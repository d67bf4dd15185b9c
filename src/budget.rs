//! Fuel, memory and cancellation, for every machine: one place that decides
//! when a run must stop.
//!
//! * **Fuel** is exact. It is handed to the hot loop in slices of at most
//!   [`CANCEL_POLL_INTERVAL`] units, so paying for a contraction tests one
//!   counter; a contraction that needs more than one unit (a data-sized
//!   primitive, a host call with a cost) is paid only if all its units are
//!   left, and otherwise the run is out of fuel *before* it, having used and
//!   counted nothing (the metered-block rule of the cost model).
//! * **Cancellation** is looked at between fuel slices and, for work that
//!   costs no fuel (copying captured values, reading a result back, building
//!   data for a host), after every [`POLL_WORK`] units of such work, so a
//!   cancelled run stops within a bounded amount of work.
//! * **Memory** is enforced where it is spent: machines ask
//!   [`Budget::check_memory`] with what they hold whenever they grow (a
//!   stack's capacity, a runtime cell, a string before it is made), so the
//!   limit is never passed by more than the growth being asked for.
//!
//! Each machine uses the part it needs (only the pausing machines add fuel
//! to a run, only the environment machines stop on a resource limit kept
//! apart from their state), so a build with fewer machines leaves some of it
//! unused.
#![cfg_attr(
    not(all(feature = "stepper", feature = "env", feature = "cek")),
    allow(dead_code)
)]

use crate::error::{EvalError, Fault, LimitError};
use crate::host::Context;
use crate::vocabulary::{
    Answer, Cancel, Counts, HostCall, Limits, Outcome, Rule, RunContext, CANCEL_POLL_INTERVAL,
};

/// Units of fuel-free work between two looks at the cancellation flag.
pub(crate) const POLL_WORK: i64 = 1 << 16;

/// Why a run stopped without a value. Boxed errors keep `Result<_, Halt>`
/// small on the hot path.
#[derive(Debug)]
pub(crate) enum Halt {
    /// An evaluation error.
    Error(Box<EvalError>),
    /// The fuel ran out (a pausable run can resume).
    OutOfFuel,
    /// The memory limit.
    Memory,
    /// The run was cancelled.
    Cancelled,
    /// A broken invariant inside orrery (a bug).
    Fault(Box<Fault>),
}

impl Halt {
    /// An evaluation error, boxed.
    #[cold]
    pub(crate) fn error(error: EvalError) -> Halt {
        Halt::Error(Box::new(error))
    }

    /// A fault: invariant `what` of a machine broke.
    #[cold]
    pub(crate) fn fault(what: impl Into<String>) -> Halt {
        Halt::Fault(Box::new(Fault::new(what)))
    }

    /// How this halt ends a run whose memory limit is `memory`; `None` for
    /// out of fuel, which a pausable run can resume from.
    pub(crate) fn ended(self, memory: usize) -> Option<Ended> {
        Some(match self {
            Halt::Error(e) => Ended::Error(*e),
            Halt::OutOfFuel => return None,
            Halt::Memory => Ended::Limit(LimitError::memory(memory)),
            Halt::Cancelled => Ended::Limit(LimitError::cancelled()),
            Halt::Fault(f) => Ended::Fault(*f),
        })
    }
}

/// How a run ended without a value, kept by a run that can be asked again.
#[derive(Clone, Debug)]
pub(crate) enum Ended {
    Error(EvalError),
    Limit(LimitError),
    Fault(Fault),
}

impl Ended {
    /// The outcome it is.
    pub(crate) fn outcome(&self) -> Outcome {
        match self {
            Ended::Error(e) => Outcome::Error(e.clone()),
            Ended::Limit(l) => Outcome::Limit(l.clone()),
            Ended::Fault(f) => Outcome::Fault(f.clone()),
        }
    }
}

/// Fuel in slices: see the module documentation.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Tank {
    /// Units the hot loop may spend before the next slow check.
    slice: u64,
    /// Units not yet handed out.
    reserve: u64,
}

impl Tank {
    /// A tank holding `fuel`, with an empty slice (so the first contraction
    /// makes the slow checks).
    pub(crate) fn new(fuel: u64) -> Self {
        Tank {
            slice: 0,
            reserve: fuel,
        }
    }

    /// Pay one unit from the slice; `false` when the slice is empty and the
    /// caller must make its slow checks and [`Tank::refill`].
    #[inline(always)]
    pub(crate) fn take(&mut self) -> bool {
        if self.slice == 0 {
            return false;
        }
        self.slice -= 1;
        true
    }

    /// Pay two units from the slice if it holds them; `false` (paying
    /// nothing) otherwise, and the caller pays one at a time.
    #[inline(always)]
    pub(crate) fn take2(&mut self) -> bool {
        if self.slice < 2 {
            return false;
        }
        self.slice -= 2;
        true
    }

    /// Pay `n` units from the slice if it holds them (a metered block's
    /// fuel, paid on entry to it); `false`, paying nothing, otherwise.
    #[inline(always)]
    pub(crate) fn take_block(&mut self, n: u64) -> bool {
        if self.slice < n {
            return false;
        }
        self.slice -= n;
        true
    }

    /// Give back `n` units a block took from the slice and did not use.
    #[inline]
    pub(crate) fn refund(&mut self, n: u64) {
        self.slice = self.slice.saturating_add(n);
    }

    /// Whether `n` units are left in all.
    #[inline(always)]
    pub(crate) fn has(&self, n: u64) -> bool {
        self.slice >= n || self.slice.saturating_add(self.reserve) >= n
    }

    /// Move the next slice out of the reserve; `false` if no fuel is left.
    pub(crate) fn refill(&mut self) -> bool {
        let next = self.reserve.min(CANCEL_POLL_INTERVAL);
        self.reserve -= next;
        self.slice += next;
        self.slice > 0
    }

    /// Units left in all.
    pub(crate) fn left(&self) -> u64 {
        self.slice.saturating_add(self.reserve)
    }

    /// Add `more` units to the reserve.
    pub(crate) fn add(&mut self, more: u64) {
        self.reserve = self.reserve.saturating_add(more);
    }

    /// Pay `n` units from the slice, then the reserve; `false`, paying
    /// nothing, if fewer are left.
    pub(crate) fn spend(&mut self, n: u64) -> bool {
        if !self.has(n) {
            return false;
        }
        let from_slice = n.min(self.slice);
        self.slice -= from_slice;
        self.reserve -= n - from_slice;
        true
    }
}

/// One run's fuel, counts, cancellation and memory limit.
#[derive(Clone, Debug)]
pub(crate) struct Budget {
    pub(crate) tank: Tank,
    pub(crate) counts: Counts,
    cancel: Option<Cancel>,
    /// What the run's host functions are handed.
    context: Option<RunContext>,
    /// Units of fuel-free work until the next look at the cancellation flag.
    until_poll: i64,
    /// Bytes the run's own data may take: the memory limit, less what its
    /// journal of answers holds (see [`crate::Snapshot`] and [`Budget::limit`]).
    pub(crate) memory: usize,
    /// The most bytes held at any check.
    pub(crate) peak: usize,
    /// The suspending host call the run stopped at (its machine paused just
    /// before it, as when out of fuel), until the next resume.
    pub(crate) suspended: Option<Box<HostCall>>,
    /// The answer given for that call, with the call, taken when the run
    /// resumes and makes it.
    pub(crate) answer: Option<Box<(HostCall, Answer)>>,
    /// Every answer the run's suspending calls have taken, in order, with the
    /// call: what a snapshot records (see [`crate::Snapshot`]).
    pub(crate) journal: Vec<(HostCall, Answer)>,
    /// Whether the run has been resumed (so has begun).
    pub(crate) started: bool,
}

impl Budget {
    /// The budget of a run under `limits`.
    pub(crate) fn new(limits: &Limits) -> Self {
        Budget {
            tank: Tank::new(limits.fuel),
            counts: Counts::default(),
            cancel: limits.cancel.clone(),
            context: limits.context.clone(),
            until_poll: 0,
            memory: limits.memory,
            peak: 0,
            suspended: None,
            answer: None,
            journal: Vec::new(),
            started: false,
        }
    }

    /// The budget of a run under `limits`, or, `metered` false (the
    /// benchmark-only builds without accounting), of one with no limit.
    pub(crate) fn for_run(limits: &Limits, metered: bool) -> Self {
        if metered {
            Budget::new(limits)
        } else {
            Budget::new(
                &Limits::default()
                    .with_fuel(u64::MAX)
                    .with_memory(usize::MAX),
            )
        }
    }

    /// What a pause is: a wait on a suspended host call, or the end of the
    /// fuel.
    pub(crate) fn paused(&self) -> Outcome {
        match &self.suspended {
            Some(call) => Outcome::Suspended((**call).clone()),
            None => Outcome::OutOfFuel,
        }
    }

    /// The memory limit the run was given: the room its data has, and what
    /// the journal of answers took from it. (Computed when a limit is
    /// reported, rather than kept, so the budget the machines' loops carry
    /// stays as it was.)
    pub(crate) fn limit(&self) -> usize {
        self.journal
            .iter()
            .map(|(call, answer)| crate::snapshot::entry_bytes(call, answer))
            .fold(self.memory, usize::saturating_add)
    }

    /// The outcome `halt` stands for in this run.
    pub(crate) fn outcome(&self, halt: Halt) -> Outcome {
        halt.ended(self.limit())
            .map_or_else(|| self.paused(), |e| e.outcome())
    }

    /// Answer the call the run is suspended at; an answer to a run that is
    /// not suspended is dropped.
    pub(crate) fn give(&mut self, answer: Answer) {
        if let Some(call) = &self.suspended {
            self.answer = Some(Box::new(((**call).clone(), answer)));
        }
    }

    /// The context the run's host functions are handed.
    pub(crate) fn context(&self) -> Context<'_> {
        self.context.as_ref().map(RunContext::get)
    }

    /// Pay one unit for a contraction under `rule`.
    #[inline(always)]
    pub(crate) fn take(&mut self, rule: Rule) -> Result<(), Halt> {
        if !self.tank.take() {
            self.next_slice()?;
        }
        self.counts.tally(rule);
        Ok(())
    }

    /// The slow checks between fuel slices: cancellation, then the next slice
    /// of fuel, whose first unit pays for the pending contraction.
    #[cold]
    #[inline(never)]
    fn next_slice(&mut self) -> Result<(), Halt> {
        if self.is_cancelled() {
            return Err(Halt::Cancelled);
        }
        if !self.tank.refill() {
            return Err(Halt::OutOfFuel);
        }
        self.tank.take();
        Ok(())
    }

    /// Move the next slice of fuel in for a shortcut that found the slice
    /// empty: `false`, moving nothing, if the run is cancelled or out of fuel
    /// (the shortcut then leaves the contraction to the general path, which
    /// says so).
    #[cold]
    #[inline(never)]
    pub(crate) fn refill(&mut self) -> bool {
        !self.is_cancelled() && self.tank.refill()
    }

    /// Pay `units` (at least one) for a contraction under `rule`: one unit
    /// as [`Budget::take`] does, more only if all of them are left (else out
    /// of fuel, nothing used); the units beyond the first are counted as
    /// extra fuel. The run is cancelled here if its handle says so.
    #[inline]
    pub(crate) fn pay(&mut self, rule: Rule, units: u64) -> Result<(), Halt> {
        if units <= 1 {
            return self.take(rule);
        }
        self.pay_many(rule, units)
    }

    #[cold]
    fn pay_many(&mut self, rule: Rule, units: u64) -> Result<(), Halt> {
        if self.is_cancelled() {
            return Err(Halt::Cancelled);
        }
        if !self.tank.spend(units) {
            return Err(Halt::OutOfFuel);
        }
        self.counts.tally(rule);
        self.counts.add_extra_fuel(units - 1);
        Ok(())
    }

    /// Whether `n` units of fuel are left.
    #[inline(always)]
    pub(crate) fn has_fuel(&self, n: u64) -> bool {
        self.tank.has(n)
    }

    /// Account for `units` of work that costs no fuel; `Err` once the run
    /// has been cancelled (looked at every [`POLL_WORK`] units).
    #[inline(always)]
    pub(crate) fn work(&mut self, units: u64) -> Result<(), Halt> {
        self.until_poll -= units.min(i64::MAX as u64) as i64;
        if self.until_poll < 0 {
            return self.poll();
        }
        Ok(())
    }

    #[cold]
    #[inline(never)]
    fn poll(&mut self) -> Result<(), Halt> {
        self.until_poll = POLL_WORK;
        if self.is_cancelled() {
            Err(Halt::Cancelled)
        } else {
            Ok(())
        }
    }

    /// Whether the run's handle has been cancelled.
    #[inline]
    pub(crate) fn is_cancelled(&self) -> bool {
        self.cancel.as_ref().is_some_and(Cancel::is_cancelled)
    }

    /// Record that the run holds `held` bytes; `Err` if that is over the
    /// limit.
    #[inline]
    pub(crate) fn check_memory(&mut self, held: usize) -> Result<(), Halt> {
        if held > self.peak {
            self.peak = held;
        }
        if held > self.memory {
            Err(Halt::Memory)
        } else {
            Ok(())
        }
    }

    /// Bytes the run may still take, holding `held`.
    #[inline]
    pub(crate) fn room(&self, held: usize) -> usize {
        self.memory.saturating_sub(held)
    }

    /// Fuel left.
    pub(crate) fn fuel_left(&self) -> u64 {
        self.tank.left()
    }

    /// A paused run resumes: add `more` units of fuel, and end the wait on
    /// a suspended call (made again, it takes its answer or suspends again).
    pub(crate) fn resumed(&mut self, more: u64) {
        self.tank.add(more);
        self.suspended = None;
        self.started = true;
    }
}

/// The bytes a vector would hold after growing to take `extra` more elements
/// (its capacity doubles, as `Vec` grows), or `None` if it needs no growth.
#[inline]
pub(crate) fn growth<T>(v: &Vec<T>, extra: usize) -> Option<usize> {
    let need = v.len().saturating_add(extra);
    if need <= v.capacity() {
        return None;
    }
    let cap = need.max(v.capacity().saturating_mul(2)).max(4);
    Some(cap.saturating_mul(std::mem::size_of::<T>()))
}

/// Grow `v` to take `extra` more elements, within the limit of `budget`
/// for a run holding `held` bytes (`v`'s capacity among them): doubling,
/// or, when that would pass the limit, by an eighth (or `extra`), so that a
/// stack can fill the limit rather than stop at half of it.
#[cold]
#[inline(never)]
pub(crate) fn grow<T>(
    v: &mut Vec<T>,
    extra: usize,
    held: usize,
    budget: &mut Budget,
) -> Result<(), Halt> {
    let Some(doubled) = growth(v, extra) else {
        return Ok(());
    };
    let size = std::mem::size_of::<T>().max(1);
    let now = v.capacity() * size;
    let others = held.saturating_sub(now);
    let bytes = if others.saturating_add(doubled) > budget.memory {
        let least = v.len().saturating_add(extra.max(v.capacity() / 8));
        least.saturating_mul(size).min(doubled)
    } else {
        doubled
    };
    budget.check_memory(others.saturating_add(bytes))?;
    let cap = bytes / size;
    v.reserve_exact(cap.saturating_sub(v.len()));
    Ok(())
}

/// Grow `v` to take `extra` more elements, within `room` bytes beyond what
/// its current capacity holds; `false` (nothing done) if it would not fit.
#[inline(never)]
pub(crate) fn reserve_within<T>(v: &mut Vec<T>, extra: usize, room: usize) -> bool {
    let Some(bytes) = growth(v, extra) else {
        return true;
    };
    let now = v.capacity() * std::mem::size_of::<T>();
    if bytes.saturating_sub(now) > room {
        return false;
    }
    let cap = bytes / std::mem::size_of::<T>().max(1);
    v.reserve_exact(cap - v.len());
    true
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_tank_pays_exactly_its_fuel_in_slices() {
        let mut tank = Tank::new(2_500);
        let (mut paid, mut slices) = (0, 0);
        loop {
            if !tank.take() {
                if !tank.refill() {
                    break;
                }
                slices += 1;
                continue;
            }
            paid += 1;
        }
        assert_eq!(paid, 2_500);
        assert_eq!(slices, 3); // 1024 + 1024 + 452
        assert_eq!(tank.left(), 0);
        tank.add(1);
        assert!(tank.has(1) && !tank.has(2) && !tank.take2());
    }

    #[test]
    fn a_contraction_of_many_units_is_paid_whole_or_not_at_all() {
        let mut budget = Budget::new(&Limits::default().with_fuel(10));
        budget.take(Rule::Beta).unwrap();
        assert!(matches!(budget.pay(Rule::Prim, 10), Err(Halt::OutOfFuel)));
        assert_eq!((budget.counts.total(), budget.fuel_left()), (1, 9));
        budget.pay(Rule::Prim, 9).unwrap();
        assert_eq!(budget.counts.total(), 2);
        assert_eq!(budget.counts.extra_fuel(), 8);
        assert_eq!(budget.fuel_left(), 0);
    }

    #[test]
    fn work_looks_at_the_cancellation_flag() {
        let cancel = Cancel::new();
        let mut budget = Budget::new(&Limits::default().with_cancel(cancel.clone()));
        budget.work(10).unwrap();
        cancel.cancel();
        let mut stopped = false;
        for _ in 0..4 {
            if budget.work(POLL_WORK as u64 / 2).is_err() {
                stopped = true;
                break;
            }
        }
        assert!(stopped);
    }

    #[test]
    fn growth_is_refused_beyond_the_room() {
        let mut v: Vec<u64> = Vec::with_capacity(4);
        v.extend([1, 2, 3, 4]);
        assert!(!reserve_within(&mut v, 1, 8));
        assert_eq!(v.capacity(), 4);
        assert!(reserve_within(&mut v, 1, 64));
        assert!(v.capacity() >= 5);
    }
}
