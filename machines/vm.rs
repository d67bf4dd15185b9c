//! The vm: register bytecode with metered blocks. A program's image is
//! compiled once (kept with the program, shared by every run and thread)
//! into code for a register machine (`code.rs`): each curried function's
//! body under all its parameters, variables resolved to registers of the
//! function's frame, to the values its flat closure (Cardelli, "Compiling a
//! functional language", 1984) captured, or to constants, and the shapes
//! that dominate given instructions of their own — compare and branch,
//! arithmetic with a constant operand, a call on operands, a saturated
//! curried call, a call and a tail call of a function's own self.
//!
//! The interpreter (`run.rs`) runs the code over an explicit stack of
//! frames and one stack of registers, so a program's depth never becomes
//! native recursion; a call in tail position replaces its caller's frame,
//! so loops run in constant space. Integers and booleans are unboxed in
//! registers. Curried functions are applied eval/apply style (Marlow and
//! Peyton Jones, "Making a fast curry", 2004): a call whose head takes
//! exactly its arguments enters the body with all of them and makes no
//! partial application.
//!
//! **Accounting.** Fuel is paid by metered blocks: a block's contractions
//! are paid and counted, per rule, on entry to it, and when less fuel is in
//! the current slice than the block needs, or an instruction in it cannot
//! take its fast path (an operand of another type, an error, a limit, a
//! closure of another arity), the block goes on per contraction, having
//! given back what its remaining instructions were paid. Every stop —
//! value, error, out of fuel, limit, pause, suspension — counts what the
//! stepper counts, where the stepper stops.
//!
//! **Limits.** The register and frame stacks grow only within the memory
//! limit (checked when a push would reallocate); every cell (closure,
//! partial application, constructor, string) is checked before it is made;
//! the compiler's vectors count against the limit of the run that compiles.
//! Cancellation is looked at with each slice of fuel and after fuel-free
//! work.
//!
//! **Locations.** Each instruction knows the image node it was compiled
//! from; each frame keeps its caller's closure and call site, which is
//! what a backtrace reads (one call mark per frame of a function, as the
//! continuation marks of Clements and Felleisen, TOPLAS 2004).

mod code;
mod detach;
mod run;

use std::rc::Rc;
use std::sync::Arc;

use code::{compile, Code, FINISH};
use run::Leave;

use super::runtime::end::{self, End};
use super::runtime::readback::read_back;
use super::runtime::value::{recycle, Closure, Meter, Value};
use crate::budget::{grow, Budget, Halt};
use crate::image::{Id, Tags, NONE};
use crate::span::{Location, Trail};
use crate::vocabulary::{Build, Detached, Machine, Paused};
use crate::{Counts, Limits, Program, Report};

/// A runtime value of this machine: a closure's code is its function's index
/// in the image.
type Val = Value<u32>;

/// A flat closure of this machine.
type Fun = Closure<u32>;

/// A frame waiting for a call's value: where to go on, its registers, and
/// its activation (for backtraces).
struct Frame<F = Rc<Fun>> {
    /// The pc after the call.
    ret: u32,
    base: u32,
    top: u32,
    /// The caller's register the value goes to.
    dst: u32,
    /// The call site that entered the caller ([`NONE`] at the top level).
    site: Id,
    /// Whether the caller's closure is the callee's (a function calling
    /// itself), kept by the callee rather than here.
    same: bool,
    /// The caller's closure ([`None`] at the top level, or when `same`).
    closure: Option<F>,
}

/// The register bytecode machine. It holds only the emptied stacks of its
/// last run, so it is `Send`; [`Vm::start`] makes a [`VmRun`], which can
/// pause when its fuel runs out and resume with more.
///
/// # Examples
///
/// ```
/// use orrery::machines::vm::Vm;
/// use orrery::{Limits, Machine, Program};
/// let program = Program::parse("let rec stack n = if n == 0 then 0 else 2 + stack (n - 1) in stack 5").unwrap();
/// let report = Vm::new().run(&program, &Limits::default());
/// assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(10));
/// ```
#[derive(Debug)]
pub struct Vm {
    peak: usize,
    /// Whether fuel, memory and cancellation are checked (always, except in
    /// the benchmark-only [`Build::without_accounting`]).
    metered: bool,
    /// The emptied stacks of the last run, as plain words.
    spare: (Vec<[usize; 2]>, Vec<[usize; 4]>),
}

impl Default for Vm {
    fn default() -> Self {
        Vm {
            peak: 0,
            metered: true,
            spare: (Vec::new(), Vec::new()),
        }
    }
}

impl Vm {
    /// A vm.
    ///
    /// # Examples
    ///
    /// ```
    /// let _vm = orrery::machines::vm::Vm::new();
    /// ```
    pub fn new() -> Self {
        Vm::default()
    }

    /// The initial state for running `program` under `limits`: nothing is
    /// compiled or evaluated until [`VmRun::resume`].
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::vm::Vm;
    /// use orrery::{Limits, Outcome, Program};
    /// let program = Program::parse("(1 + 2) * (3 + 4)").unwrap();
    /// let mut run = Vm::start(&program, &Limits::default().with_fuel(2));
    /// assert_eq!(run.resume(0).outcome, Outcome::OutOfFuel);
    /// let report = run.resume(1);
    /// assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(21));
    /// assert_eq!(report.counts.total(), 3);
    /// ```
    pub fn start(program: &Program, limits: &Limits) -> VmRun {
        VmRun::new(program, limits, true, (Vec::new(), Vec::new()))
    }
}

impl Machine for Vm {
    fn name(&self) -> &'static str {
        "vm"
    }

    fn run(&mut self, program: &Program, limits: &Limits) -> Report {
        let spare = std::mem::take(&mut self.spare);
        let mut run = VmRun::new(program, limits, self.metered, spare);
        let report = run.resume(0);
        self.peak = run.budget.peak;
        self.spare = run.into_spare();
        report
    }

    fn peak_bytes(&self) -> usize {
        self.peak
    }

    fn start(&self, program: &Program, limits: &Limits) -> Option<Box<dyn Paused>> {
        Some(Box::new(Vm::start(program, limits)))
    }
}

impl Build for Vm {
    fn new() -> Self {
        Vm::default()
    }

    fn without_accounting() -> Option<Self> {
        Some(Vm {
            metered: false,
            ..Vm::default()
        })
    }
}

/// The state of one vm run: the program's code, the registers and frames,
/// the pc, and the fuel, counts and memory accounting. Out of fuel, it
/// pauses just before the contraction it could not pay for, and
/// [`VmRun::resume`] goes on with more fuel; a paused run and an
/// uninterrupted one end the same way with the same counts. Its cells are
/// `Rc`s, so it stays on its thread ([`Paused::detach`] moves it).
///
/// # Examples
///
/// ```
/// use orrery::machines::vm::Vm;
/// use orrery::{Limits, Outcome, Paused, Program};
/// let program = Program::parse("let rec drift n = drift (n + 1) in drift 0").unwrap();
/// let mut run = Vm::start(&program, &Limits::default().with_fuel(0));
/// for _ in 0..3 {
///     assert_eq!(run.resume(1_000).outcome, Outcome::OutOfFuel);
/// }
/// assert_eq!(run.counts().total(), 3_000);
/// ```
pub struct VmRun {
    program: Program,
    /// The program's code, once compiled (by the first resume).
    code: Option<Arc<Code>>,
    regs: Vec<Val>,
    frames: Vec<Frame>,
    pc: u32,
    /// The current frame's registers: `regs[base..top]`.
    base: u32,
    top: u32,
    /// The current function's closure ([`None`] at the top level) and the
    /// call site that entered it.
    closure: Option<Rc<Fun>>,
    site: Id,
    /// Whether the current block runs per contraction.
    slow: bool,
    /// The next of the program's arguments to apply the root's value to.
    next_arg: usize,
    budget: Budget,
    tags: Tags,
    /// Bytes held besides stacks and cells: the tags made up.
    fixed: usize,
    meter: Meter,
    metered: bool,
    /// Bytes of cells this run held when it last paused.
    cells: usize,
    end: Option<End>,
}

impl std::fmt::Debug for VmRun {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("VmRun")
            .field("fuel_left", &self.budget.fuel_left())
            .field("counts", &self.budget.counts)
            .field("frames", &self.frames.len())
            .field("finished", &self.end.is_some())
            .finish()
    }
}

impl VmRun {
    fn new(
        program: &Program,
        limits: &Limits,
        metered: bool,
        spare: (Vec<[usize; 2]>, Vec<[usize; 4]>),
    ) -> Self {
        let budget = Budget::for_run(limits, metered);
        let tags = Tags::default();
        let fixed = tags.bytes();
        VmRun {
            program: program.clone(),
            code: None,
            regs: even(recycle(spare.0)),
            frames: even(recycle(spare.1)),
            pc: FINISH,
            base: 0,
            top: 0,
            closure: None,
            site: NONE,
            slow: false,
            next_arg: 0,
            budget,
            tags,
            fixed,
            meter: Meter::holding(0),
            metered,
            cells: 0,
            end: None,
        }
    }

    /// This run's stacks, emptied, to keep for another run.
    fn into_spare(mut self) -> (Vec<[usize; 2]>, Vec<[usize; 4]>) {
        self.clear();
        (
            recycle(std::mem::take(&mut self.regs)),
            recycle(std::mem::take(&mut self.frames)),
        )
    }

    /// Drop what the machine state holds (the stacks stay allocated).
    fn clear(&mut self) {
        self.regs.clear();
        self.frames.clear();
        self.closure = None;
    }

    /// Add `more_fuel` and run until a value, an error, a resource limit, or
    /// the end of the fuel; see [`crate::Paused::resume`]. A report of an
    /// error, a limit or the end of the fuel says where the run stopped.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::vm::Vm;
    /// use orrery::{Limits, Outcome, Program};
    /// let source = "let rec sprout n = if n == 0 then 0 else 1 + sprout (n - 1) in sprout 9";
    /// let program = Program::parse(source).unwrap();
    /// let mut run = Vm::start(&program, &Limits::default().with_fuel(30));
    /// let report = run.resume(0);
    /// assert_eq!(report.outcome, Outcome::OutOfFuel);
    /// assert_eq!(report.location.unwrap().backtrace.depth(), 8);
    /// ```
    pub fn resume(&mut self, more_fuel: u64) -> Report {
        self.budget.resumed(more_fuel);
        self.meter = Meter::holding(self.cells);
        if self.end.is_none() {
            let result = if self.metered {
                self.execute::<true>()
            } else {
                self.execute::<false>()
            };
            self.end = match result {
                Ok(value) => {
                    self.clear();
                    Some(self.read_back(value))
                }
                Err(halt) => {
                    let end = End::of_halt(halt, &self.budget, || self.location());
                    if end.is_some() {
                        self.clear();
                    }
                    end
                }
            };
        }
        let report = end::report(&self.end, &self.budget, || self.location());
        self.cells = self.meter.cells();
        report
    }

    /// Compile the program (once for all runs), load its arguments, and run.
    fn execute<const M: bool>(&mut self) -> Result<Val, Halt> {
        // The run holds its program; the loops borrow this handle of it.
        let program = self.program.clone();
        // The code is taken out while the loops borrow it, and put back.
        let code = match self.code.take() {
            Some(code) => code,
            None => {
                let budget = &mut self.budget;
                let code = program.prepared(|| compile(program.image(), budget))?;
                if let Err(halt) = self.load::<M>(&code) {
                    self.code = Some(code);
                    return Err(halt);
                }
                // A first slice of fuel, so that the first block is paid on
                // the fast path (a cancelled run, or one with no fuel, moves
                // none, and its first contraction says so).
                if M {
                    self.budget.refill();
                }
                code
            }
        };
        let result = loop {
            let leave = if self.slow {
                self.exec::<M, true>(&code, &program)
            } else {
                self.exec::<M, false>(&code, &program)
            };
            match leave {
                Leave::Slow => self.slow = true,
                Leave::Fast => self.slow = false,
                Leave::Bail => {
                    self.bail::<M>(&code);
                    self.slow = true;
                }
                Leave::Done(result) => break result,
            }
        };
        self.code = Some(code);
        result
    }

    /// The initial state: the bottom frame and the top level's frame. (The
    /// program's arguments are converted as the bottom frame applies the
    /// root's value to them, one by one.)
    fn load<const M: bool>(&mut self, code: &Code) -> Result<(), Halt> {
        let top = 1 + code.root_frame as usize;
        if M {
            let held = self.held();
            grow(&mut self.regs, top.next_power_of_two(), held, &mut self.budget)?;
            let held = self.held();
            grow(&mut self.frames, 1, held, &mut self.budget)?;
        }
        self.regs.resize(top, Value::Int(0));
        self.frames.push(Frame {
            ret: FINISH,
            base: 0,
            top: 1,
            dst: 0,
            site: NONE,
            same: false,
            closure: None,
        });
        self.base = 1;
        self.top = top as u32;
        self.pc = code.root;
        Ok(())
    }

    /// Where the run stands, as a location.
    #[cold]
    fn location(&self) -> Location {
        let image = self.program.image();
        let redex = match &self.code {
            Some(code) => run::origin(code, self.pc),
            None => NONE,
        };
        let mut trail = Trail::new(redex);
        let mut lam = (NONE, NONE);
        let mut mark = |trail: &mut Trail, closure: &Option<Rc<Fun>>, site: Id| {
            if let Some(c) = closure {
                if lam.0 != c.code {
                    lam = (c.code, image.last_lam(c.code));
                }
                trail.push(site, lam.1);
            }
        };
        mark(&mut trail, &self.closure, self.site);
        // A frame of a function calling itself has the closure of the
        // activation above it.
        let mut above = &self.closure;
        for frame in self.frames.iter().rev() {
            if !frame.same {
                above = &frame.closure;
            }
            mark(&mut trail, above, frame.site);
        }
        image.location(&trail)
    }

    /// The end of a run whose value is `value`: read back under the limit.
    fn read_back(&mut self, value: Val) -> End {
        let held = self.held();
        let program = &self.program;
        let read = read_back(
            &value,
            program.image(),
            &self.tags,
            program.host(),
            &mut self.budget,
            held,
        );
        End::of_read_back(read, &self.budget)
    }
}

/// `v` if its room is a power of two (as the stacks grow), else a new
/// vector: a reused machine's run then grows its stacks where a fresh one's
/// does, and stops at the same point of the memory limit.
fn even<T>(v: Vec<T>) -> Vec<T> {
    if v.capacity().is_power_of_two() {
        v
    } else {
        Vec::new()
    }
}

impl Paused for VmRun {
    fn resume(&mut self, more_fuel: u64) -> Report {
        VmRun::resume(self, more_fuel)
    }

    fn counts(&self) -> Counts {
        self.budget.counts
    }

    fn fuel_left(&self) -> u64 {
        self.budget.fuel_left()
    }

    fn is_finished(&self) -> bool {
        self.end.is_some()
    }

    /// The most memory this run has held at once, as the memory limit
    /// counts it: the register and frame stacks by capacity, the cells it
    /// holds, the tags it made up, what its read-back built, and, while it
    /// compiled the program, the code and the compiler's lists.
    fn peak_bytes(&self) -> usize {
        self.budget.peak
    }

    fn answer(&mut self, answer: crate::Answer) {
        self.budget.give(answer);
    }

    fn snapshot(&self) -> crate::Snapshot {
        crate::Snapshot::of("vm", &self.program, &self.budget, self.end.is_some())
    }

    fn detach(self: Box<Self>) -> Detached {
        Detached::new(Box::new(detach::DetachedVm::new(*self)))
    }
}
