//! The reference stepper (being written).
use crate::{Arena, Counts, Limits, Machine, Outcome, Program, Report};

/// The reference substitution stepper.
#[derive(Debug, Default)]
pub struct Stepper;

impl Stepper {
    /// A new stepper.
    pub fn new() -> Self {
        Stepper
    }
}

impl Machine for Stepper {
    fn name(&self) -> &'static str {
        "stepper"
    }
    fn run<'a: 'o, 'o>(
        &mut self,
        program: &Program<'a>,
        limits: &Limits,
        out: &'o Arena,
    ) -> Report<'o> {
        let _ = (program, limits, out);
        Report {
            outcome: Outcome::OutOfFuel,
            counts: Counts::default(),
        }
    }
}
