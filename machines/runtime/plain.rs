//! A paused run's values as plain data, for moving it across threads:
//! every runtime cell (string, constructor, closure) numbered once by its
//! address, children before parents, by an iterative post-order walk, so
//! sharing survives and no list is too long for the native stack; and the
//! cells made again from their numbers on the new thread, charged to its
//! live-byte meter. What a machine's own state holds besides values and
//! closures it carries along itself ([`Translate`]).

use std::rc::Rc;

use hashbrown::HashMap;

use super::value::{Closure, ConCell, Text, Value, Values};
use crate::budget::Halt;
use crate::image::{Id, TagId};

/// A runtime value of the machines whose closures are function indices.
type Val = Value<u32>;

/// A closure of those machines.
type Fun = Closure<u32>;

/// A state the walks cannot carry (a bug in orrery), reported as a fault.
#[cold]
fn broken(what: &str) -> Halt {
    Halt::fault(format!("detaching a run: {what}"))
}

/// A value as plain data: an immediate one, or the number of a cell.
#[derive(Clone, Copy, Debug)]
pub(crate) enum Plain {
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
pub(crate) struct Cells {
    cells: Vec<Cell>,
    values: Vec<Plain>,
}

/// The values of `values`, translated by `t`.
pub(crate) fn translate_values<'a, V, F, W, G>(
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
pub(crate) trait Translate<'a, V, F, W, G> {
    /// A value in the other form.
    fn value(&mut self, value: &'a V) -> Result<W, Halt>;
    /// A closure in the other form.
    fn closure(&mut self, closure: &'a F) -> Result<G, Halt>;
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
pub(crate) struct Detacher<'a> {
    numbers: HashMap<*const (), usize>,
    pub(crate) cells: Cells,
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
pub(crate) struct Attacher {
    made: Vec<Val>,
}

impl Attacher {
    /// Make `cells` on this thread, in order (each after the cells it
    /// holds).
    pub(crate) fn make(cells: Cells) -> Result<Self, Halt> {
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
