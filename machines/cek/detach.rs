//! A paused CEK run detached from its thread: its whole machine state
//! (control, environment, locals, continuation frames, operands) as plain
//! data, every runtime cell (string, constructor, closure) numbered once by
//! its address, children before parents, by an iterative post-order walk,
//! so sharing survives and no list is too long for the native stack.
//! Attaching makes the cells again in that order on the new thread, charged
//! to its live-byte meter, and gives the machine state back. What locates
//! a stop (the frames' redex nodes and activations, the environment's call
//! site and entry, an ended run's location) is plain already and goes
//! along unchanged.

use super::{CekRun, ContinuationFrame, Control, Environment};
use crate::machines::runtime::end::End;
use crate::budget::{Budget, Halt};
use crate::image::{Id, Tags};
use crate::machines::runtime::plain::{translate_values, Attacher, Cells, Detacher, Plain, Translate};
use crate::machines::runtime::value::Meter;
use crate::vocabulary::{DetachedRun, Paused};
use crate::Program;

/// The machine state of a paused run as plain data: values are [`Plain`],
/// closures the numbers of their cells. The stacks keep their capacities,
/// so the attached run holds what the paused one held.
struct State {
    control: Option<Control<Plain>>,
    env: Environment<usize>,
    locals: Vec<Plain>,
    kont: Vec<ContinuationFrame<Plain, usize>>,
    operands: Vec<Plain>,
    capacities: [usize; 3],
    floor: usize,
    cells: Cells,
}

/// A paused CEK run in a form that may cross threads (see
/// [`crate::Paused::detach`]). A run that has ended keeps only its end.
pub(super) struct DetachedCek {
    program: Program,
    state: Option<State>,
    budget: Budget,
    tags: Tags,
    fixed: usize,
    metered: bool,
    args_pending: bool,
    stop: Id,
    end: Option<End>,
}

impl DetachedCek {
    /// Detach `run`, in time and space proportional to its state. A broken
    /// invariant found on the way ends the run with a fault.
    pub(super) fn new(run: CekRun) -> Self {
        let state = match &run.end {
            Some(_) => Ok(None),
            None => State::detach(&run).map(Some),
        };
        let (state, end) = match state {
            Ok(state) => (state, run.end),
            Err(halt) => (None, Some(ended(halt))),
        };
        DetachedCek {
            program: run.program,
            state,
            budget: run.budget,
            tags: run.tags,
            fixed: run.fixed,
            metered: run.metered,
            args_pending: run.args_pending,
            stop: run.stop,
            end,
        }
    }

    /// The run again, on this thread: its cells made here, exactly where it
    /// paused (a broken invariant found on the way ends it with a fault).
    pub(super) fn into_run(self) -> CekRun {
        let DetachedCek {
            program,
            state,
            budget,
            tags,
            fixed,
            metered,
            args_pending,
            stop,
            mut end,
        } = self;
        let mut run = CekRun {
            control: None,
            env: Environment::top(),
            locals: Vec::new(),
            kont: Vec::new(),
            operands: Vec::new(),
            floor: 0,
            program,
            budget,
            tags,
            fixed,
            meter: Meter::holding(0),
            metered,
            cells: 0,
            args_pending,
            stop,
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

impl DetachedRun for DetachedCek {
    fn attach(self: Box<Self>) -> Box<dyn Paused> {
        Box::new(self.into_run())
    }
}

/// How a halt while detaching or attaching ends the run.
fn ended(halt: Halt) -> End {
    End::of_detach(halt, "cek")
}

impl State {
    /// The machine state of `run` as plain data.
    fn detach(run: &CekRun) -> Result<Self, Halt> {
        let mut d = Detacher::default();
        let control = match &run.control {
            Some(control) => Some(control.translate(&mut d)?),
            None => None,
        };
        let env = run.env.translate(&mut d)?;
        let locals = translate_values(&run.locals, &mut d)?;
        let operands = translate_values(&run.operands, &mut d)?;
        let mut kont = Vec::with_capacity(run.kont.len());
        for frame in &run.kont {
            kont.push(frame.translate(&mut d)?);
        }
        Ok(State {
            control,
            env,
            locals,
            kont,
            operands,
            capacities: [
                run.locals.capacity(),
                run.kont.capacity(),
                run.operands.capacity(),
            ],
            floor: run.floor,
            cells: d.cells,
        })
    }

    /// Put this state in `run` (whose stacks are empty), making its cells
    /// on this thread and measuring what they hold.
    fn attach(self, run: &mut CekRun) -> Result<(), Halt> {
        let meter = Meter::holding(0);
        let mut a = Attacher::make(self.cells)?;
        let [locals, kont, operands] = self.capacities;
        run.locals = Vec::with_capacity(locals.max(self.locals.len()));
        for value in &self.locals {
            run.locals.push(a.value(value)?);
        }
        run.kont = Vec::with_capacity(kont.max(self.kont.len()));
        for frame in &self.kont {
            run.kont.push(frame.translate(&mut a)?);
        }
        run.operands = Vec::with_capacity(operands.max(self.operands.len()));
        for value in &self.operands {
            run.operands.push(a.value(value)?);
        }
        run.env = self.env.translate(&mut a)?;
        run.control = match &self.control {
            Some(control) => Some(control.translate(&mut a)?),
            None => None,
        };
        run.floor = self.floor;
        // The cells are held by the state now; the table's references go.
        drop(a);
        run.cells = meter.cells();
        run.meter = Meter::holding(run.cells);
        Ok(())
    }
}

impl<F> Environment<F> {
    /// This environment with its closure translated by `t`.
    fn translate<'a, V, W, G>(
        &'a self,
        t: &mut impl Translate<'a, V, F, W, G>,
    ) -> Result<Environment<G>, Halt> {
        let closure = match &self.closure {
            Some(closure) => Some(t.closure(closure)?),
            None => None,
        };
        Ok(Environment {
            closure,
            top: self.top,
            depth: self.depth,
            site: self.site,
            entry: self.entry,
        })
    }
}

impl<V> Control<V> {
    /// This control with its value translated by `t`.
    fn translate<'a, F, W, G>(
        &'a self,
        t: &mut impl Translate<'a, V, F, W, G>,
    ) -> Result<Control<W>, Halt> {
        Ok(match self {
            Control::Eval(id) => Control::Eval(*id),
            Control::Return(value) => Control::Return(t.value(value)?),
        })
    }
}

impl<V, F> ContinuationFrame<V, F> {
    /// This frame with its values and closures translated by `t`.
    fn translate<'a, W, G>(
        &'a self,
        t: &mut impl Translate<'a, V, F, W, G>,
    ) -> Result<ContinuationFrame<W, G>, Halt> {
        use ContinuationFrame as K;
        Ok(match self {
            K::Arg {
                argument,
                app,
                env,
                below,
            } => K::Arg {
                argument: *argument,
                app: *app,
                env: env.translate(t)?,
                below: *below,
            },
            K::Call {
                function,
                app,
                caller,
            } => K::Call {
                function: t.value(function)?,
                app: *app,
                caller: *caller,
            },
            K::Apply { argument } => K::Apply {
                argument: t.value(argument)?,
            },
            K::Partial {
                closure,
                applied,
                app,
                caller,
            } => K::Partial {
                closure: t.closure(closure)?,
                applied: *applied,
                app: *app,
                caller: *caller,
            },
            K::Spine {
                closure,
                term,
                index,
                m,
                env,
                below,
            } => K::Spine {
                closure: t.closure(closure)?,
                term: *term,
                index: *index,
                m: *m,
                env: env.translate(t)?,
                below: *below,
            },
            K::Let {
                node,
                body,
                env,
                below,
            } => K::Let {
                node: *node,
                body: *body,
                env: env.translate(t)?,
                below: *below,
            },
            K::If {
                node,
                yes,
                no,
                env,
                below,
            } => K::If {
                node: *node,
                yes: *yes,
                no: *no,
                env: env.translate(t)?,
                below: *below,
            },
            K::Operand {
                node,
                start,
                len,
                index,
                env,
                below,
            } => K::Operand {
                node: *node,
                start: *start,
                len: *len,
                index: *index,
                env: env.translate(t)?,
                below: *below,
            },
            K::Case {
                node,
                case,
                env,
                below,
            } => K::Case {
                node: *node,
                case: *case,
                env: env.translate(t)?,
                below: *below,
            },
        })
    }
}
