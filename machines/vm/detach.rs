//! A paused vm run detached from its thread: its registers, frames and
//! closure as plain data (see [`crate::machines::runtime::plain`]),
//! and everything else — the pc, the frames' places and call sites, the
//! budget — as it was. Attaching makes the cells again on the new thread.

use std::sync::Arc;

use super::code::Code;
use super::{Frame, VmRun};
use crate::machines::runtime::end::End;
use crate::budget::{Budget, Halt};
use crate::image::{Id, Tags};
use crate::machines::runtime::plain::{translate_values, Attacher, Cells, Detacher, Plain, Translate};
use crate::machines::runtime::value::Meter;
use crate::vocabulary::{DetachedRun, Paused};
use crate::Program;

/// The values of a paused run as plain data; the stacks keep their
/// capacities, so the attached run holds what the paused one held.
struct State {
    regs: Vec<Plain>,
    frames: Vec<Frame<usize>>,
    closure: Option<usize>,
    capacities: [usize; 2],
    cells: Cells,
}

/// A paused vm run in a form that may cross threads (see
/// [`crate::Paused::detach`]). A run that has ended keeps only its end.
pub(super) struct DetachedVm {
    program: Program,
    code: Option<Arc<Code>>,
    state: Option<State>,
    place: Place,
    budget: Budget,
    tags: Tags,
    fixed: usize,
    metered: bool,
    end: Option<End>,
}

/// Where a run stands, plain already.
#[derive(Clone, Copy)]
struct Place {
    pc: u32,
    base: u32,
    top: u32,
    site: Id,
    slow: bool,
    next_arg: usize,
}

impl DetachedVm {
    /// Detach `run`, in time and space proportional to its state.
    pub(super) fn new(run: VmRun) -> Self {
        let state = match &run.end {
            Some(_) => Ok(None),
            None => State::detach(&run).map(Some),
        };
        let (state, end) = match state {
            Ok(state) => (state, run.end),
            Err(halt) => (None, Some(ended(halt))),
        };
        DetachedVm {
            place: Place {
                pc: run.pc,
                base: run.base,
                top: run.top,
                site: run.site,
                slow: run.slow,
                next_arg: run.next_arg,
            },
            program: run.program,
            code: run.code,
            state,
            budget: run.budget,
            tags: run.tags,
            fixed: run.fixed,
            metered: run.metered,
            end,
        }
    }

    /// The run again, on this thread, exactly where it paused.
    fn into_run(self) -> VmRun {
        let DetachedVm {
            program,
            code,
            state,
            place,
            budget,
            tags,
            fixed,
            metered,
            mut end,
        } = self;
        let mut run = VmRun {
            program,
            code,
            regs: Vec::new(),
            frames: Vec::new(),
            pc: place.pc,
            base: place.base,
            top: place.top,
            closure: None,
            site: place.site,
            slow: place.slow,
            next_arg: place.next_arg,
            budget,
            tags,
            fixed,
            meter: Meter::holding(0),
            metered,
            cells: 0,
            end: None,
        };
        if let Some(state) = state {
            if let Err(halt) = state.attach(&mut run) {
                run.clear();
                end = Some(ended(halt));
            }
        }
        run.end = end;
        run
    }
}

impl DetachedRun for DetachedVm {
    fn attach(self: Box<Self>) -> Box<dyn Paused> {
        Box::new(self.into_run())
    }
}

/// How a halt while detaching or attaching ends the run.
fn ended(halt: Halt) -> End {
    End::of_detach(halt, "vm")
}

impl<F> Frame<F> {
    /// This frame with its closure translated by `t`.
    fn translate<'a, V, W, G>(&'a self, t: &mut impl Translate<'a, V, F, W, G>) -> Result<Frame<G>, Halt> {
        let closure = match &self.closure {
            Some(c) => Some(t.closure(c)?),
            None => None,
        };
        Ok(Frame {
            ret: self.ret,
            base: self.base,
            top: self.top,
            dst: self.dst,
            site: self.site,
            same: self.same,
            closure,
        })
    }
}

impl State {
    fn detach(run: &VmRun) -> Result<Self, Halt> {
        let mut d = Detacher::default();
        let regs = translate_values(&run.regs, &mut d)?;
        let mut frames = Vec::with_capacity(run.frames.len());
        for frame in &run.frames {
            frames.push(frame.translate(&mut d)?);
        }
        let closure = match &run.closure {
            Some(c) => Some(d.closure(c)?),
            None => None,
        };
        Ok(State {
            regs,
            frames,
            closure,
            capacities: [run.regs.capacity(), run.frames.capacity()],
            cells: d.cells,
        })
    }

    fn attach(self, run: &mut VmRun) -> Result<(), Halt> {
        let meter = Meter::holding(0);
        let mut a = Attacher::make(self.cells)?;
        let [regs, frames] = self.capacities;
        run.regs = Vec::with_capacity(regs.max(self.regs.len()));
        for value in &self.regs {
            run.regs.push(a.value(value)?);
        }
        run.frames = Vec::with_capacity(frames.max(self.frames.len()));
        for frame in &self.frames {
            run.frames.push(frame.translate(&mut a)?);
        }
        run.closure = match &self.closure {
            Some(c) => Some(a.closure(c)?),
            None => None,
        };
        drop(a);
        run.cells = meter.cells();
        run.meter = Meter::holding(run.cells);
        Ok(())
    }
}
