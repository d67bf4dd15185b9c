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

use std::rc::Rc;

use hashbrown::HashMap;

use super::{broken, CekRun, ContinuationFrame, Control, End, Environment, Fun, Val};
use crate::budget::{Budget, Ended, Halt};
use crate::error::Fault;
use crate::image::{Id, TagId, Tags};
use crate::machines::runtime::value::{Closure, ConCell, Meter, Text, Value, Values};
use crate::vocabulary::{DetachedRun, Paused};
use crate::Program;

/// A value as plain data: an immediate one, or the number of a cell.
#[derive(Clone, Copy, Debug)]
enum Plain {
    Int(i64),
    Bool(bool),
    Tag(TagId),
    Data(Id),
    Lit(u32),
    Cell(usize),
}

/// Where a cell's values are in [`Cells::values`], and the room its array
/// had (0 while the values were inline), so that it is charged the same
/// bytes when it is made again.
#[derive(Clone, Copy, Debug)]
struct Span {
    start: usize,
    len: usize,
    capacity: usize,
}

/// A runtime cell as plain data.
#[derive(Debug)]
enum Cell {
    Str(Box<str>),
    Con {
        tag: TagId,
        fields: Span,
    },
    Fun {
        code: u32,
        applied: u32,
        captured: Span,
    },
}

/// The cells of a detached run, each after every cell it holds, and their
/// values, one array after another.
#[derive(Debug, Default)]
struct Cells {
    cells: Vec<Cell>,
    values: Vec<Plain>,
}

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

/// How a halt while detaching or attaching ends the run (a broken
/// invariant: the walks pay no fuel and ask for no memory).
fn ended(halt: Halt) -> End {
    let ended = halt.ended(usize::MAX).unwrap_or_else(|| {
        Ended::Fault(Fault::new("in the cek machine: detaching ran out of fuel"))
    });
    End::Ended(ended, None)
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

/// The values of `values`, translated by `t`.
fn translate_values<'a, V, F, W, G>(
    values: &'a [V],
    t: &mut impl Translate<'a, V, F, W, G>,
) -> Result<Vec<W>, Halt> {
    let mut out = Vec::with_capacity(values.len());
    for value in values {
        out.push(t.value(value)?);
    }
    Ok(out)
}

/// How the values (`V` to `W`) and closures (`F` to `G`) of a machine state
/// are carried from one form to the other.
trait Translate<'a, V, F, W, G> {
    /// A value in the other form.
    fn value(&mut self, value: &'a V) -> Result<W, Halt>;
    /// A closure in the other form.
    fn closure(&mut self, closure: &'a F) -> Result<G, Halt>;
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

/// A cell of the running machine, by reference.
#[derive(Clone, Copy)]
enum CellRef<'a> {
    Str(&'a Rc<Text>),
    Con(&'a Rc<ConCell<u32>>),
    Fun(&'a Rc<Fun>),
}

impl<'a> CellRef<'a> {
    /// The cell's address: its identity while the run holds it.
    fn key(self) -> *const () {
        match self {
            CellRef::Str(s) => Rc::as_ptr(s).cast(),
            CellRef::Con(c) => Rc::as_ptr(c).cast(),
            CellRef::Fun(f) => Rc::as_ptr(f).cast(),
        }
    }

    /// The values the cell holds.
    fn values(self) -> &'a [Val] {
        match self {
            CellRef::Str(_) => &[],
            CellRef::Con(c) => &c.fields,
            CellRef::Fun(f) => &f.captured,
        }
    }
}

/// What is left to do in the walk that numbers the cells.
enum Job<'a> {
    /// Number the cells `value` holds, then it.
    Visit(&'a Val),
    /// Number `cell`, whose values are numbered (their plain forms on top of
    /// the done stack).
    Number(CellRef<'a>),
}

/// The walk from the running form to plain data: each cell numbered once,
/// after the cells it holds.
#[derive(Default)]
struct Detacher<'a> {
    numbers: HashMap<*const (), usize>,
    cells: Cells,
    jobs: Vec<Job<'a>>,
    done: Vec<Plain>,
}

impl<'a> Detacher<'a> {
    /// Do the jobs scheduled, leaving the plain form of each value visited
    /// on the done stack.
    fn walk(&mut self) -> Result<(), Halt> {
        while let Some(job) = self.jobs.pop() {
            match job {
                Job::Visit(value) => {
                    let plain = match value {
                        Value::Int(n) => Some(Plain::Int(*n)),
                        Value::Bool(b) => Some(Plain::Bool(*b)),
                        Value::Tag(t) => Some(Plain::Tag(*t)),
                        Value::Data(d) => Some(Plain::Data(*d)),
                        Value::Lit(s) => Some(Plain::Lit(*s)),
                        Value::Str(s) => self.visit(CellRef::Str(s)),
                        Value::Con(c) => self.visit(CellRef::Con(c)),
                        Value::Fun(f) => self.visit(CellRef::Fun(f)),
                    };
                    if let Some(plain) = plain {
                        self.done.push(plain);
                    }
                }
                Job::Number(cell) => {
                    let n = self.number(cell)?;
                    self.done.push(Plain::Cell(n));
                }
            }
        }
        Ok(())
    }

    /// A cell met on the walk: its number if it has one; else `None`, its
    /// numbering scheduled after its values'.
    fn visit(&mut self, cell: CellRef<'a>) -> Option<Plain> {
        if let Some(&n) = self.numbers.get(&cell.key()) {
            return Some(Plain::Cell(n));
        }
        self.jobs.push(Job::Number(cell));
        self.jobs.extend(cell.values().iter().rev().map(Job::Visit));
        None
    }

    /// Number `cell`, its values' plain forms on top of the done stack.
    fn number(&mut self, cell: CellRef<'a>) -> Result<usize, Halt> {
        let len = cell.values().len();
        let Some(at) = self.done.len().checked_sub(len) else {
            return Err(broken("detaching a cell lost its values"));
        };
        let start = self.cells.values.len();
        self.cells.values.extend(self.done.drain(at..));
        let span = |values: &Values<u32>| Span {
            start,
            len,
            capacity: if values.spilled() {
                values.capacity()
            } else {
                0
            },
        };
        let plain = match cell {
            CellRef::Str(s) => Cell::Str(s.text.clone()),
            CellRef::Con(c) => Cell::Con {
                tag: c.tag,
                fields: span(&c.fields),
            },
            CellRef::Fun(f) => Cell::Fun {
                code: f.code,
                applied: f.applied,
                captured: span(&f.captured),
            },
        };
        let n = self.cells.cells.len();
        self.cells.cells.push(plain);
        self.numbers.insert(cell.key(), n);
        Ok(n)
    }

    /// The plain form of the one value the walk just left.
    fn result(&mut self) -> Result<Plain, Halt> {
        self.walk()?;
        match self.done.pop() {
            Some(plain) if self.done.is_empty() => Ok(plain),
            _ => Err(broken("detaching a value made no one plain value")),
        }
    }
}

impl<'a> Translate<'a, Val, Rc<Fun>, Plain, usize> for Detacher<'a> {
    fn value(&mut self, value: &'a Val) -> Result<Plain, Halt> {
        self.jobs.push(Job::Visit(value));
        self.result()
    }

    fn closure(&mut self, closure: &'a Rc<Fun>) -> Result<usize, Halt> {
        if let Some(Plain::Cell(n)) = self.visit(CellRef::Fun(closure)) {
            return Ok(n);
        }
        match self.result()? {
            Plain::Cell(n) => Ok(n),
            _ => Err(broken("detaching a closure made no cell")),
        }
    }
}

/// The cells of a detached run made again, by number.
struct Attacher {
    made: Vec<Val>,
}

impl Attacher {
    /// Make `cells` on this thread, in order (each after the cells it
    /// holds).
    fn make(cells: Cells) -> Result<Self, Halt> {
        let Cells { cells, values } = cells;
        let mut a = Attacher {
            made: Vec::with_capacity(cells.len()),
        };
        for cell in cells {
            let value = match cell {
                Cell::Str(text) => Value::Str(Text::new(String::from(text))),
                Cell::Con { tag, fields } => {
                    Value::Con(ConCell::new(tag, a.values(&values, fields)?))
                }
                Cell::Fun {
                    code,
                    applied,
                    captured,
                } => Value::Fun(Closure::new(code, applied, a.values(&values, captured)?)),
            };
            a.made.push(value);
        }
        Ok(a)
    }

    /// The values of `span` of `values`, in an array of the room it had.
    fn values(&self, values: &[Plain], span: Span) -> Result<Values<u32>, Halt> {
        let Some(plain) = values.get(span.start..span.start.saturating_add(span.len)) else {
            return Err(broken("a detached cell's values are out of range"));
        };
        let mut out = Values::with_capacity(span.capacity.max(span.len));
        for value in plain {
            out.push(self.runtime(*value)?);
        }
        Ok(out)
    }

    /// The runtime value of `value`.
    fn runtime(&self, value: Plain) -> Result<Val, Halt> {
        Ok(match value {
            Plain::Int(n) => Value::Int(n),
            Plain::Bool(b) => Value::Bool(b),
            Plain::Tag(t) => Value::Tag(t),
            Plain::Data(d) => Value::Data(d),
            Plain::Lit(s) => Value::Lit(s),
            Plain::Cell(n) => match self.made.get(n) {
                Some(value) => value.clone(),
                None => return Err(broken("a detached value's cell is not made yet")),
            },
        })
    }
}

impl<'a> Translate<'a, Plain, usize, Val, Rc<Fun>> for Attacher {
    fn value(&mut self, value: &'a Plain) -> Result<Val, Halt> {
        self.runtime(*value)
    }

    fn closure(&mut self, closure: &'a usize) -> Result<Rc<Fun>, Halt> {
        match self.made.get(*closure) {
            Some(Value::Fun(f)) => Ok(Rc::clone(f)),
            _ => Err(broken("a detached closure is not a closure cell")),
        }
    }
}
