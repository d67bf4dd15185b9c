//! The environment-based evaluator: big-step evaluation (natural semantics,
//! Kahn, "Natural semantics", 1987) of closure-converted code with flat
//! closures (Cardelli, "Compiling a functional language", 1984), with an
//! explicit stack of pending work in place of native recursion.
//!
//! Each run first compiles the program once into a code tree in which every
//! variable is resolved to a slot: a local of the current function's frame
//! (argument, `let`-bound value or case field), or one of the values its
//! closure captured (exactly its free variables). Frames and intermediate
//! values share one value stack; a call in tail position (a function body, a
//! `let` body, an `if` branch, a case arm, known at compile time) replaces the
//! caller's frame instead of stacking a return.

use std::rc::Rc;

use crate::value::{
    apply_prim, free_variable, read_back, Closure, Code, ConCell, Meter, Value, Values,
};
use crate::{
    Arena, Counts, ErrorKind, EvalError, LimitError, Limits, Machine, Node, Outcome, Prim, Program,
    Report, Rule, Term,
};

/// The environment-based evaluator. Holds no program state between runs;
/// it records the peak memory of its last run.
///
/// # Examples
///
/// ```
/// use orrery::machines::env::Env;
/// use orrery::{Arena, Limits, Machine, Outcome, Prim, Program};
/// let arena = Arena::new();
/// // let add = λx. λy. x + y in add 40 2
/// let add = arena.lam(arena.lam(arena.prim(Prim::Add, &[arena.var(1), arena.var(0)])));
/// let call = arena.app(arena.app(arena.var(0), arena.int(40)), arena.int(2));
/// let program = Program::new(arena.let_in(add, call)).unwrap();
/// let report = Env::new().run(&program, &Limits::default(), &arena);
/// assert_eq!(report.outcome, Outcome::Value(arena.int(42)));
/// assert_eq!(report.counts.total(), 4); // let, beta, beta, prim
/// ```
#[derive(Debug, Default)]
pub struct Env {
    peak: usize,
}

impl Env {
    /// An environment-based evaluator.
    ///
    /// # Examples
    ///
    /// ```
    /// let _env = orrery::machines::env::Env::new();
    /// ```
    pub fn new() -> Self {
        Env::default()
    }

    /// The most runtime memory the last run held at once, in bytes, sampled
    /// at every contraction and every constructor built: the compiled code,
    /// the value and task stacks (by capacity), and the cells the run made
    /// and still held (closures, constructor cells, strings). This is the
    /// quantity [`Limits::memory`] bounds.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::env::Env;
    /// use orrery::{Arena, Limits, Machine, Program};
    /// let arena = Arena::new();
    /// let program = Program::new(arena.con("Box", &[arena.int(1)])).unwrap();
    /// let mut env = Env::new();
    /// env.run(&program, &Limits::default(), &arena);
    /// assert!(env.peak_bytes() > 0);
    /// ```
    pub fn peak_bytes(&self) -> usize {
        self.peak
    }
}

impl Machine for Env {
    fn name(&self) -> &'static str {
        "env"
    }

    fn run<'a: 'o, 'o>(
        &mut self,
        program: &Program<'a>,
        limits: &Limits,
        out: &'o Arena,
    ) -> Report<'o> {
        let compiled = match compile(program.term()) {
            Ok(compiled) => compiled,
            Err(index) => {
                return Report {
                    outcome: Outcome::Error(free_variable(index)),
                    counts: Counts::default(),
                }
            }
        };
        let meter = Meter::holding(0);
        let mut run = Run {
            code: &compiled,
            stack: Vec::new(),
            tasks: Vec::new(),
            base: 0,
            closure: None,
            fuel: limits.fuel,
            counts: Counts::default(),
            memory: limits.memory,
            code_bytes: compiled.bytes(),
            peak: 0,
            meter,
        };
        let outcome = match run.execute() {
            Ok(value) => Outcome::Value(read_back(&value, out)),
            Err(Halt::Error(error)) => Outcome::Error(error),
            Err(Halt::OutOfFuel) => Outcome::OutOfFuel,
            Err(Halt::Memory) => Outcome::Limit(LimitError::memory(limits.memory)),
        };
        self.peak = run.peak;
        Report {
            outcome,
            counts: run.counts,
        }
    }
}

/// An index into [`Compiled::code`].
type CodeId = u32;

/// A run of entries in [`Compiled::lists`] or [`Compiled::arms`].
#[derive(Clone, Copy, Debug)]
struct Span {
    start: u32,
    len: u32,
}

impl Span {
    fn range(self) -> std::ops::Range<usize> {
        self.start as usize..self.start as usize + self.len as usize
    }
}

/// One node of compiled code. Variables are resolved to frame slots and
/// captured values; everything else mirrors the term.
#[derive(Clone, Copy, Debug)]
enum Instr<'a> {
    /// A local of the current frame.
    Local(u32),
    /// A value captured by the current closure.
    Free(u32),
    Int(i64),
    Bool(bool),
    /// A string literal or a constructor with no fields.
    Lit(&'a Term<'a>),
    /// Make a closure of function `Compiled::funs[_]`.
    Closure(u32),
    App {
        function: CodeId,
        argument: CodeId,
        tail: bool,
    },
    Let {
        bound: CodeId,
        slot: u32,
        body: CodeId,
    },
    If {
        condition: CodeId,
        yes: CodeId,
        no: CodeId,
    },
    Prim {
        op: Prim,
        operands: Span,
    },
    Con {
        tag: &'a str,
        fields: Span,
    },
    /// `case`: the arms' fields go to slots `slot..slot + arity`.
    Case {
        scrutinee: CodeId,
        arms: Span,
        default: Option<CodeId>,
        slot: u32,
    },
}

/// A compiled case arm.
#[derive(Clone, Copy, Debug)]
struct CaseArm<'a> {
    tag: &'a str,
    arity: u32,
    body: CodeId,
}

/// Where the enclosing function finds a value a new closure captures.
#[derive(Clone, Copy, Debug)]
enum Fetch {
    Local(u32),
    Free(u32),
}

/// A compiled `λ` or `μλ`.
#[derive(Debug)]
struct Function<'a> {
    /// The source term, for read-back.
    term: &'a Term<'a>,
    body: CodeId,
    rec: bool,
    /// Slots in a frame of this function.
    frame: u32,
    /// The free indices (relative to `term`) of the captured values, in
    /// capture order.
    captures: Vec<u32>,
    /// How to fetch each captured value when the closure is made.
    fetch: Vec<Fetch>,
}

impl<'a> Code<'a> for &Function<'a> {
    #[inline]
    fn term(&self) -> &'a Term<'a> {
        self.term
    }

    #[inline]
    fn free_index(&self, slot: usize) -> usize {
        self.captures.get(slot).map_or(usize::MAX, |&i| i as usize)
    }
}

/// A program compiled for one run.
#[derive(Debug)]
struct Compiled<'a> {
    code: Vec<Instr<'a>>,
    lists: Vec<CodeId>,
    arms: Vec<CaseArm<'a>>,
    funs: Vec<Function<'a>>,
    root: CodeId,
    /// Slots in the top level's frame.
    frame: u32,
}

impl Compiled<'_> {
    /// Bytes of compiled code, as the memory limit counts them.
    fn bytes(&self) -> usize {
        self.code.capacity() * std::mem::size_of::<Instr<'_>>()
            + self.lists.capacity() * std::mem::size_of::<CodeId>()
            + self.arms.capacity() * std::mem::size_of::<CaseArm<'_>>()
            + self
                .funs
                .iter()
                .map(|f| {
                    std::mem::size_of::<Function<'_>>()
                        + f.captures.capacity() * std::mem::size_of::<u32>()
                        + f.fetch.capacity() * std::mem::size_of::<Fetch>()
                })
                .sum::<usize>()
    }
}

/// The function being compiled: its captured free indices and frame size.
struct Scope {
    captures: Vec<u32>,
    frame: u32,
}

impl Scope {
    /// The capture slot of free index `index`, adding it if new.
    fn capture(&mut self, index: u32) -> u32 {
        let slot = match self.captures.iter().position(|&c| c == index) {
            Some(slot) => slot,
            None => {
                self.captures.push(index);
                self.captures.len() - 1
            }
        };
        u32::try_from(slot).unwrap_or(u32::MAX)
    }
}

/// Compile a closed term. Iterative: a work stack of terms to visit and
/// nodes to build once their children are compiled.
///
/// # Errors
///
/// The de Bruijn index of a variable that escapes every binder (a validated
/// program has none).
fn compile<'a>(root: &'a Term<'a>) -> Result<Compiled<'a>, u32> {
    enum Job<'a> {
        Visit(&'a Term<'a>, u32, bool),
        Build(&'a Term<'a>, u32, bool),
    }
    let mut c = Compiled {
        code: Vec::new(),
        lists: Vec::new(),
        arms: Vec::new(),
        funs: Vec::new(),
        root: 0,
        frame: 0,
    };
    // The top level is compiled like a function body with no captures.
    let mut scopes: Vec<Scope> = vec![Scope {
        captures: Vec::new(),
        frame: 0,
    }];
    let mut jobs = vec![Job::Visit(root, 0, true)];
    let mut done: Vec<CodeId> = Vec::new();
    let emit = |c: &mut Compiled<'a>, instr| {
        c.code.push(instr);
        u32::try_from(c.code.len() - 1).unwrap_or(u32::MAX)
    };
    let span = |list: &mut Vec<CodeId>, done: &mut Vec<CodeId>, n: usize| {
        let at = done.len().saturating_sub(n);
        let start = u32::try_from(list.len()).unwrap_or(u32::MAX);
        list.extend(done.drain(at..));
        Span {
            start,
            len: u32::try_from(n).unwrap_or(u32::MAX),
        }
    };
    while let Some(job) = jobs.pop() {
        match job {
            Job::Visit(t, depth, tail) => {
                let top_level = scopes.len() == 1;
                let Some(scope) = scopes.last_mut() else {
                    break;
                };
                scope.frame = scope.frame.max(depth);
                let leaf = match *t.node() {
                    Node::Var(k) if k < depth => Some(Instr::Local(depth - 1 - k)),
                    Node::Var(k) => {
                        if top_level {
                            return Err(k - depth);
                        }
                        Some(Instr::Free(scope.capture(k - depth)))
                    }
                    Node::Int(n) => Some(Instr::Int(n)),
                    Node::Bool(b) => Some(Instr::Bool(b)),
                    Node::Str(_) => Some(Instr::Lit(t)),
                    Node::Con(_, []) => Some(Instr::Lit(t)),
                    _ => None,
                };
                if let Some(instr) = leaf {
                    let id = emit(&mut c, instr);
                    done.push(id);
                    continue;
                }
                jobs.push(Job::Build(t, depth, tail));
                match *t.node() {
                    Node::Lam(body) | Node::RecLam(body) => {
                        scopes.push(Scope {
                            captures: Vec::new(),
                            frame: 0,
                        });
                        let binders = if matches!(t.node(), Node::RecLam(_)) {
                            2
                        } else {
                            1
                        };
                        jobs.push(Job::Visit(body, binders, true));
                    }
                    Node::App(f, a) => {
                        jobs.push(Job::Visit(a, depth, false));
                        jobs.push(Job::Visit(f, depth, false));
                    }
                    Node::Let(bound, body) => {
                        jobs.push(Job::Visit(body, depth + 1, tail));
                        jobs.push(Job::Visit(bound, depth, false));
                    }
                    Node::If(condition, yes, no) => {
                        jobs.push(Job::Visit(no, depth, tail));
                        jobs.push(Job::Visit(yes, depth, tail));
                        jobs.push(Job::Visit(condition, depth, false));
                    }
                    Node::Prim(_, operands) | Node::Con(_, operands) => {
                        jobs.extend(operands.iter().rev().map(|o| Job::Visit(o, depth, false)));
                    }
                    Node::Case(scrutinee, arms, default) => {
                        if let Some(d) = default {
                            jobs.push(Job::Visit(d, depth, tail));
                        }
                        jobs.extend(
                            arms.iter()
                                .rev()
                                .map(|arm| Job::Visit(arm.body, depth + arm.arity, tail)),
                        );
                        jobs.push(Job::Visit(scrutinee, depth, false));
                    }
                    _ => {}
                }
            }
            Job::Build(t, depth, tail) => {
                let instr =
                    match *t.node() {
                        Node::Lam(_) | Node::RecLam(_) => {
                            let body = done.pop().unwrap_or(0);
                            let Some(inner) = scopes.pop() else { break };
                            let outer_is_top_level = scopes.len() == 1;
                            let Some(outer) = scopes.last_mut() else {
                                break;
                            };
                            let mut fetch = Vec::with_capacity(inner.captures.len());
                            for &j in &inner.captures {
                                fetch.push(if j < depth {
                                    Fetch::Local(depth - 1 - j)
                                } else if outer_is_top_level {
                                    return Err(j - depth);
                                } else {
                                    Fetch::Free(outer.capture(j - depth))
                                });
                            }
                            c.funs.push(Function {
                                term: t,
                                body,
                                rec: matches!(t.node(), Node::RecLam(_)),
                                frame: inner.frame,
                                captures: inner.captures,
                                fetch,
                            });
                            Instr::Closure(u32::try_from(c.funs.len() - 1).unwrap_or(u32::MAX))
                        }
                        Node::App(..) => {
                            let argument = done.pop().unwrap_or(0);
                            let function = done.pop().unwrap_or(0);
                            Instr::App {
                                function,
                                argument,
                                tail,
                            }
                        }
                        Node::Let(..) => {
                            let body = done.pop().unwrap_or(0);
                            let bound = done.pop().unwrap_or(0);
                            Instr::Let {
                                bound,
                                slot: depth,
                                body,
                            }
                        }
                        Node::If(..) => {
                            let no = done.pop().unwrap_or(0);
                            let yes = done.pop().unwrap_or(0);
                            let condition = done.pop().unwrap_or(0);
                            Instr::If { condition, yes, no }
                        }
                        Node::Prim(op, operands) => Instr::Prim {
                            op,
                            operands: span(&mut c.lists, &mut done, operands.len()),
                        },
                        Node::Con(tag, fields) => Instr::Con {
                            tag,
                            fields: span(&mut c.lists, &mut done, fields.len()),
                        },
                        Node::Case(_, arms, default) => {
                            let default = default.and_then(|_| done.pop());
                            let at = done.len().saturating_sub(arms.len());
                            let start = u32::try_from(c.arms.len()).unwrap_or(u32::MAX);
                            c.arms
                                .extend(arms.iter().zip(done.drain(at..)).map(|(arm, body)| {
                                    CaseArm {
                                        tag: arm.tag,
                                        arity: arm.arity,
                                        body,
                                    }
                                }));
                            let scrutinee = done.pop().unwrap_or(0);
                            Instr::Case {
                                scrutinee,
                                arms: Span {
                                    start,
                                    len: u32::try_from(arms.len()).unwrap_or(u32::MAX),
                                },
                                default,
                                slot: depth,
                            }
                        }
                        _ => continue,
                    };
                let id = emit(&mut c, instr);
                done.push(id);
            }
        }
    }
    c.root = done.pop().unwrap_or(0);
    c.frame = scopes.first().map_or(0, |s| s.frame);
    Ok(c)
}

/// A runtime value of this machine: closures point at compiled functions.
type Val<'a, 'c> = Value<'a, &'c Function<'a>>;

/// A closure of this machine.
type Fun<'a, 'c> = Closure<'a, &'c Function<'a>>;

/// Pending work: evaluate some code, or do something with the values that
/// earlier work left on the value stack.
enum Task<'a, 'c> {
    /// Evaluate code, leaving its value on the stack.
    Eval(CodeId),
    /// Apply the function under the argument on top of the stack.
    Call { tail: bool },
    /// Bind the value on top to a slot and evaluate the body.
    Bind { slot: u32, body: CodeId },
    /// Branch on the boolean on top.
    Branch { yes: CodeId, no: CodeId },
    /// Apply a primitive to the top `n` values.
    Prim { op: Prim, n: u32 },
    /// Make a constructor of the top `n` values.
    Build { tag: &'a str, n: u32 },
    /// Match the value on top against the arms of `Instr::Case` `case`.
    Match { case: CodeId },
    /// A call has returned: pop its frame from under the value on top and
    /// make the caller's frame current again.
    Return {
        base: usize,
        closure: Option<Rc<Fun<'a, 'c>>>,
    },
}

/// Why [`Run::execute`] stopped without a value.
enum Halt {
    Error(EvalError),
    OutOfFuel,
    Memory,
}

/// The state of one run.
struct Run<'a, 'c> {
    code: &'c Compiled<'a>,
    /// Frames (each `frame` slots, from `base`) and intermediate values.
    stack: Vec<Val<'a, 'c>>,
    tasks: Vec<Task<'a, 'c>>,
    /// Where the current frame starts.
    base: usize,
    /// The current function's closure (`None` at the top level).
    closure: Option<Rc<Fun<'a, 'c>>>,
    fuel: u64,
    counts: Counts,
    memory: usize,
    code_bytes: usize,
    peak: usize,
    meter: Meter,
}

/// The evaluator's own invariants were broken; never expected.
fn inconsistent() -> Halt {
    Halt::Error(EvalError::new(
        ErrorKind::TypeMismatch,
        "the evaluator's value stack is inconsistent",
    ))
}

impl<'a, 'c> Run<'a, 'c> {
    /// Sample the memory in use; `Err` if it is over the limit.
    #[inline]
    fn check_memory(&mut self) -> Result<(), Halt> {
        let held = self.meter.cells()
            + self.code_bytes
            + self.stack.capacity() * std::mem::size_of::<Val<'_, '_>>()
            + self.tasks.capacity() * std::mem::size_of::<Task<'_, '_>>();
        self.peak = self.peak.max(held);
        if held > self.memory {
            Err(Halt::Memory)
        } else {
            Ok(())
        }
    }

    /// Take one unit of fuel for a contraction under `rule`.
    #[inline]
    fn take_fuel(&mut self, rule: Rule) -> Result<(), Halt> {
        if self.fuel == 0 {
            return Err(Halt::OutOfFuel);
        }
        self.fuel -= 1;
        self.counts.add(rule);
        self.check_memory()
    }

    #[inline]
    fn pop(&mut self) -> Result<Val<'a, 'c>, Halt> {
        self.stack.pop().ok_or_else(inconsistent)
    }

    /// The value of frame slot `slot`.
    #[inline]
    fn local(&self, slot: u32) -> Result<Val<'a, 'c>, Halt> {
        self.stack
            .get(self.base + slot as usize)
            .cloned()
            .ok_or_else(inconsistent)
    }

    /// The current closure's captured value `slot`.
    #[inline]
    fn free(&self, slot: u32) -> Result<Val<'a, 'c>, Halt> {
        self.closure
            .as_ref()
            .and_then(|c| c.captured.get(slot as usize))
            .cloned()
            .ok_or_else(inconsistent)
    }

    /// Store `value` in frame slot `slot`.
    #[inline]
    fn set_local(&mut self, slot: u32, value: Val<'a, 'c>) -> Result<(), Halt> {
        let place = self
            .stack
            .get_mut(self.base + slot as usize)
            .ok_or_else(inconsistent)?;
        *place = value;
        Ok(())
    }

    /// Evaluate the program to a value.
    fn execute(&mut self) -> Result<Val<'a, 'c>, Halt> {
        let code = self.code;
        self.stack.resize(code.frame as usize, Value::Int(0));
        let mut pc = code.root;
        'eval: loop {
            // Evaluate `pc` down its leftmost spine, leaving work for later.
            loop {
                let Some(&instr) = code.code.get(pc as usize) else {
                    return Err(inconsistent());
                };
                match instr {
                    Instr::Local(slot) => {
                        let v = self.local(slot)?;
                        self.stack.push(v);
                        break;
                    }
                    Instr::Free(slot) => {
                        let v = self.free(slot)?;
                        self.stack.push(v);
                        break;
                    }
                    Instr::Int(n) => {
                        self.stack.push(Value::Int(n));
                        break;
                    }
                    Instr::Bool(b) => {
                        self.stack.push(Value::Bool(b));
                        break;
                    }
                    Instr::Lit(t) => {
                        self.stack.push(Value::Lit(t));
                        break;
                    }
                    Instr::Closure(index) => {
                        let Some(function) = code.funs.get(index as usize) else {
                            return Err(inconsistent());
                        };
                        let mut captured = Values::with_capacity(function.fetch.len());
                        for fetch in &function.fetch {
                            captured.push(match *fetch {
                                Fetch::Local(slot) => self.local(slot)?,
                                Fetch::Free(slot) => self.free(slot)?,
                            });
                        }
                        self.stack
                            .push(Value::Fun(Closure::new(function, captured)));
                        break;
                    }
                    Instr::App {
                        function,
                        argument,
                        tail,
                    } => {
                        self.tasks.push(Task::Call { tail });
                        self.tasks.push(Task::Eval(argument));
                        pc = function;
                    }
                    Instr::Let { bound, slot, body } => {
                        self.tasks.push(Task::Bind { slot, body });
                        pc = bound;
                    }
                    Instr::If { condition, yes, no } => {
                        self.tasks.push(Task::Branch { yes, no });
                        pc = condition;
                    }
                    Instr::Prim { op, operands } => {
                        self.tasks.push(Task::Prim {
                            op,
                            n: operands.len,
                        });
                        let Some(operands) = code.lists.get(operands.range()) else {
                            return Err(inconsistent());
                        };
                        let Some((&first, rest)) = operands.split_first() else {
                            break;
                        };
                        self.tasks.extend(rest.iter().rev().map(|&o| Task::Eval(o)));
                        pc = first;
                    }
                    Instr::Con { tag, fields } => {
                        self.tasks.push(Task::Build { tag, n: fields.len });
                        let Some(fields) = code.lists.get(fields.range()) else {
                            return Err(inconsistent());
                        };
                        let Some((&first, rest)) = fields.split_first() else {
                            break;
                        };
                        self.tasks.extend(rest.iter().rev().map(|&f| Task::Eval(f)));
                        pc = first;
                    }
                    Instr::Case { scrutinee, .. } => {
                        self.tasks.push(Task::Match { case: pc });
                        pc = scrutinee;
                    }
                }
            }
            // A value is on top of the stack: do the pending work until some
            // of it needs code evaluated.
            loop {
                let Some(task) = self.tasks.pop() else {
                    return self.pop();
                };
                match task {
                    Task::Eval(next) => {
                        pc = next;
                        continue 'eval;
                    }
                    Task::Call { tail } => {
                        let callee = self
                            .stack
                            .len()
                            .checked_sub(2)
                            .and_then(|i| self.stack.get(i));
                        let rule = match callee {
                            Some(Value::Fun(f)) if f.code.rec => Rule::BetaRec,
                            _ => Rule::Beta,
                        };
                        self.take_fuel(rule)?;
                        let argument = self.pop()?;
                        let closure = match self.pop()? {
                            Value::Fun(closure) => closure,
                            // The argument was evaluated before the callee
                            // was found wanting, as in the stepper.
                            callee => {
                                return Err(Halt::Error(EvalError::not_a_function(
                                    callee.operand(),
                                )))
                            }
                        };
                        let function: &'c Function<'a> = closure.code;
                        if tail {
                            self.stack.truncate(self.base);
                        } else {
                            self.tasks.push(Task::Return {
                                base: self.base,
                                closure: self.closure.take(),
                            });
                        }
                        self.base = self.stack.len();
                        if function.rec {
                            self.stack.push(Value::Fun(Rc::clone(&closure)));
                        }
                        self.stack.push(argument);
                        self.stack
                            .resize(self.base + function.frame as usize, Value::Int(0));
                        self.closure = Some(closure);
                        pc = function.body;
                        continue 'eval;
                    }
                    Task::Bind { slot, body } => {
                        self.take_fuel(Rule::Let)?;
                        let value = self.pop()?;
                        self.set_local(slot, value)?;
                        pc = body;
                        continue 'eval;
                    }
                    Task::Branch { yes, no } => {
                        self.take_fuel(Rule::If)?;
                        match self.pop()? {
                            Value::Bool(b) => {
                                pc = if b { yes } else { no };
                                continue 'eval;
                            }
                            other => {
                                return Err(Halt::Error(EvalError::not_a_boolean(other.operand())))
                            }
                        }
                    }
                    Task::Prim { op, n } => {
                        self.take_fuel(Rule::Prim)?;
                        let at = self
                            .stack
                            .len()
                            .checked_sub(n as usize)
                            .ok_or_else(inconsistent)?;
                        let result = apply_prim(op, &self.stack[at..]);
                        self.stack.truncate(at);
                        self.stack.push(result.map_err(Halt::Error)?);
                    }
                    Task::Build { tag, n } => {
                        // A constructor of values is a value: building it is free.
                        let at = self
                            .stack
                            .len()
                            .checked_sub(n as usize)
                            .ok_or_else(inconsistent)?;
                        let fields: Values<'a, &'c Function<'a>> = self.stack.drain(at..).collect();
                        self.stack.push(Value::Con(ConCell::new(tag, fields)));
                        self.check_memory()?;
                    }
                    Task::Match { case } => {
                        self.take_fuel(Rule::Case)?;
                        let value = self.pop()?;
                        let Some(&Instr::Case {
                            arms,
                            default,
                            slot,
                            ..
                        }) = code.code.get(case as usize)
                        else {
                            return Err(inconsistent());
                        };
                        let arms = code.arms.get(arms.range()).ok_or_else(inconsistent)?;
                        if let Some((tag, fields)) = value.constructor() {
                            let arm = arms
                                .iter()
                                .find(|arm| arm.tag == tag && arm.arity as usize == fields.len());
                            if let Some(arm) = arm {
                                for (i, field) in fields.iter().enumerate() {
                                    self.set_local(slot + i as u32, field.clone())?;
                                }
                                pc = arm.body;
                                continue 'eval;
                            }
                        }
                        match default {
                            Some(default) => {
                                pc = default;
                                continue 'eval;
                            }
                            None => {
                                return Err(Halt::Error(EvalError::no_matching_case(
                                    value.operand(),
                                )))
                            }
                        }
                    }
                    Task::Return { base, closure } => {
                        let value = self.pop()?;
                        self.stack.truncate(self.base);
                        self.stack.push(value);
                        self.base = base;
                        self.closure = closure;
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `let x₀ = 0 in … let x₆₃ = 63 in λy. y + x₀`: the function refers to
    /// de Bruijn index 64 under its binder.
    fn deep_closure(arena: &Arena) -> &Term<'_> {
        let mut body = arena.lam(arena.prim(Prim::Add, &[arena.var(0), arena.var(64)]));
        for i in (0..64).rev() {
            body = arena.let_in(arena.int(i), body);
        }
        body
    }

    #[test]
    fn closures_capture_exactly_their_free_variables() {
        let arena = Arena::new();
        let compiled = compile(deep_closure(&arena)).unwrap();
        assert_eq!(compiled.funs.len(), 1);
        assert_eq!(compiled.funs[0].captures, vec![63]);
        assert!(matches!(compiled.funs[0].fetch[..], [Fetch::Local(0)]));
        assert_eq!(compiled.frame, 64);
        // Read back, the closure has x₀ substituted.
        let program = Program::new(deep_closure(&arena)).unwrap();
        let report = Env::new().run(&program, &Limits::default(), &arena);
        let expected = arena.lam(arena.prim(Prim::Add, &[arena.var(0), arena.int(0)]));
        assert_eq!(report.outcome, Outcome::Value(expected));
        assert_eq!(report.counts.get(Rule::Let), 64);
    }

    #[test]
    fn calls_in_tail_position_are_marked_at_compile_time() {
        let arena = Arena::new();
        // μf. λn. if n == 0 then g n else (f n) + 1, with g = λx. x
        let call = |f, a| arena.app(f, a);
        let body = arena.if_then_else(
            arena.prim(Prim::Eq, &[arena.var(0), arena.int(0)]),
            call(arena.lam(arena.var(0)), arena.var(0)),
            arena.prim(Prim::Add, &[call(arena.var(1), arena.var(0)), arena.int(1)]),
        );
        let compiled = compile(arena.app(arena.rec_lam(body), arena.int(3))).unwrap();
        let tails: Vec<bool> = compiled
            .code
            .iter()
            .filter_map(|i| match i {
                Instr::App { tail, .. } => Some(*tail),
                _ => None,
            })
            .collect();
        // In build order: g n (tail), f n (not), the top-level call (tail).
        assert_eq!(tails, vec![true, false, true]);
    }

    #[test]
    fn an_open_term_is_an_error_not_a_panic() {
        let arena = Arena::new();
        assert_eq!(compile(arena.lam(arena.var(3))).err(), Some(2));
        assert_eq!(compile(arena.var(0)).err(), Some(0));
    }

    #[test]
    fn the_memory_limit_counts_the_value_stack() {
        let arena = Arena::new();
        // μf. λn. 1 + f n: pending additions forever.
        let body = arena.prim(
            Prim::Add,
            &[arena.int(1), arena.app(arena.var(1), arena.var(0))],
        );
        let program = Program::new(arena.app(arena.rec_lam(body), arena.int(0))).unwrap();
        let mut env = Env::new();
        let limits = Limits::default().with_memory(256 << 10);
        let report = env.run(&program, &limits, &arena);
        assert_eq!(
            report.outcome,
            Outcome::Limit(LimitError::memory(256 << 10))
        );
        assert!(env.peak_bytes() > 256 << 10);
        assert!(report.counts.get(Rule::BetaRec) > 1_000);
    }
}
