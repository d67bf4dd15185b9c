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
    apply_prim, cut, free_variable, host_call, int_prim, int_test, read_back, recycle,
    string_bytes, Closure, Code, ConCell, Halt, Meter, Tank, Value, Values, KEEP_STACK_BYTES,
};
use crate::{
    Arena, Counts, ErrorKind, EvalError, HostFunctions, HostId, LimitError, Limits, Machine, Node,
    Outcome, Prim, Program, Report, Rule, Term,
};

/// The environment-based evaluator. Holds no program state between runs:
/// it keeps its emptied stacks for the next run (so a small program run many
/// times allocates little) and records the peak memory of its last run.
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
#[derive(Debug)]
pub struct Env {
    peak: usize,
    /// Whether fuel, memory and cancellation are checked (always, except in
    /// the benchmark-only [`Env::without_accounting`]).
    metered: bool,
    scratch: Scratch,
    code_scratch: CodeScratch,
}

impl Default for Env {
    fn default() -> Self {
        Env {
            peak: 0,
            metered: true,
            scratch: Scratch::default(),
            code_scratch: CodeScratch::default(),
        }
    }
}

/// The emptied stacks of the last run, kept for the next. Their element types
/// borrow a program, so they are kept as vectors of a same-sized stand-in and
/// [`recycle`]d.
#[derive(Debug, Default)]
struct Scratch {
    stack: Vec<[usize; 2]>,
    tasks: Vec<Task>,
    callers: Vec<[usize; 2]>,
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

    /// **For benchmarks only.** An evaluator whose runs skip every fuel,
    /// memory and cancellation check, so a benchmark can measure what the
    /// accounting costs. It computes the same values and counts, but it
    /// ignores [`Limits`] entirely: a divergent program runs forever and a
    /// growing one until allocation fails. Never use it on untrusted input.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::machines::env::Env;
    /// use orrery::{Arena, Limits, Machine, Outcome, Program};
    /// let arena = Arena::new();
    /// let program = Program::new(arena.app(arena.lam(arena.var(0)), arena.int(5))).unwrap();
    /// let report = Env::without_accounting().run(&program, &Limits::default(), &arena);
    /// assert_eq!(report.outcome, Outcome::Value(arena.int(5)));
    /// ```
    #[doc(hidden)]
    pub fn without_accounting() -> Self {
        Env {
            metered: false,
            ..Env::default()
        }
    }

    /// The most runtime memory the last run held at once, in bytes, sampled
    /// whenever it makes a cell (a closure, a constructor cell, a string) and
    /// before the first contraction of every fuel slice (at least every
    /// [`CANCEL_POLL_INTERVAL`](crate::CANCEL_POLL_INTERVAL) contractions): the compiled code,
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
        // Code of up to 64 KiB is always compiled; beyond that the memory
        // limit bounds it (a heavily shared program unfolds here).
        let code_budget = limits.memory.max(CODE_ALWAYS_ALLOWED);
        let compiled = match compile_with(program.term(), &mut self.code_scratch, code_budget) {
            Ok(compiled) => compiled,
            Err(error) => {
                let outcome = match error {
                    CompileError::Open(index) => Outcome::Error(free_variable(index)),
                    CompileError::TooLarge => Outcome::Limit(LimitError::memory(limits.memory)),
                };
                return Report {
                    outcome,
                    counts: Counts::default(),
                };
            }
        };
        let scratch = std::mem::take(&mut self.scratch);
        let host = program.host();
        let (result, counts, peak, scratch) = if self.metered {
            Run::<true>::evaluate(&compiled, limits, host, scratch)
        } else {
            Run::<false>::evaluate(&compiled, limits, host, scratch)
        };
        self.peak = peak;
        self.scratch = scratch;
        // A block, so the run's value is dropped before its code is kept.
        let outcome = {
            let result = result;
            match result {
                Ok(value) => Outcome::Value(read_back(&value, out)),
                Err(Halt::Error(error)) => Outcome::Error(*error),
                Err(Halt::OutOfFuel) => Outcome::OutOfFuel,
                Err(Halt::Memory) => Outcome::Limit(LimitError::memory(limits.memory)),
                Err(Halt::Cancelled) => Outcome::Limit(LimitError::cancelled()),
            }
        };
        self.code_scratch.keep(compiled);
        Report { outcome, counts }
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

/// An operand that costs nothing to evaluate: a variable or a literal.
#[derive(Clone, Copy, Debug)]
enum Atom<'a> {
    /// A local of the current frame.
    Local(u32),
    /// A value captured by the current closure.
    Free(u32),
    Int(i64),
    Bool(bool),
    /// A string literal or a constructor with no fields.
    Lit(&'a Term<'a>),
}

/// One node of compiled code. Variables are resolved to frame slots and
/// captured values; everything else mirrors the term, except that common
/// shapes whose operands are atoms get instructions of their own (as in
/// A-normal form, Flanagan et al., "The essence of compiling with
/// continuations", 1993), which skip the work stack.
#[derive(Clone, Copy, Debug)]
enum Instr<'a> {
    Atom(Atom<'a>),
    /// Make a closure of function `Compiled::funs[_]`.
    Closure(u32),
    App {
        function: CodeId,
        argument: CodeId,
        tail: bool,
    },
    /// An application whose function is an atom.
    AppAtomFunction {
        function: Atom<'a>,
        argument: CodeId,
        tail: bool,
    },
    /// An application to an atom: the argument is read when the function's
    /// value is ready (reading an atom is free and cannot fail, and nothing
    /// the function does changes it).
    AppAtomArgument {
        function: CodeId,
        argument: Atom<'a>,
        tail: bool,
    },
    /// An application of an atom to an atom.
    AppAtoms {
        function: Atom<'a>,
        argument: Atom<'a>,
        tail: bool,
    },
    /// `f a₁ … aₘ` with `f` a variable and `2 ≤ m ≤ MAX_WIDE`: when `f`
    /// turns out to be a curried function of exactly `m` parameters with a
    /// [`Wide`] entry, the arguments are evaluated and their applications
    /// contracted in the order of the nested calls, and the entry is taken
    /// with every argument as a local, making no closure for the partial
    /// applications. Otherwise `fallback`, the nested calls, runs instead.
    AppWide {
        function: Atom<'a>,
        args: Span,
        tail: bool,
        fallback: CodeId,
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
    /// `if op(a, b) then … else …` with atom operands: two contractions.
    IfPrim2 {
        op: Prim,
        a: Atom<'a>,
        b: Atom<'a>,
        yes: CodeId,
        no: CodeId,
    },
    Prim {
        op: Prim,
        operands: Span,
    },
    /// A unary primitive on an atom.
    Prim1 {
        op: Prim,
        a: Atom<'a>,
    },
    /// A binary primitive on atoms.
    Prim2 {
        op: Prim,
        a: Atom<'a>,
        b: Atom<'a>,
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
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
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
    /// The entry taking all the parameters of a curried chain at once.
    wide: Option<Wide>,
}

/// The entry of a curried function `λx₁. … λxₙ. body` (or `μλ`) applied to
/// all `n` arguments at once: `body` compiled with the function itself (if
/// recursive) and `x₁ … xₙ` as its first frame slots, and the function's own
/// captured values. Made for functions outside every `λ` only, so no term is
/// compiled more than twice.
#[derive(Clone, Copy, Debug)]
struct Wide {
    arity: u32,
    body: CodeId,
}

/// Most arguments a [`Instr::AppWide`] call takes (and most parameters of a
/// [`Wide`] entry).
const MAX_WIDE: u32 = 64;

/// `λx₂. … λxₙ. body`, the rest of a curried chain after its first binder:
/// how many more binders (`n - 1`, at least 1) and the innermost body.
fn wide_chain<'a>(body: &'a Term<'a>) -> Option<(u32, &'a Term<'a>)> {
    let mut extra = 0;
    let mut inner = body;
    while let Node::Lam(next) = *inner.node() {
        extra += 1;
        if extra >= MAX_WIDE {
            return None;
        }
        inner = next;
    }
    (extra > 0).then_some((extra, inner))
}

/// How many arguments application `t` gives a variable at the head of its
/// spine, when that is between 2 and [`MAX_WIDE`].
fn wide_spine(t: &Term<'_>) -> Option<u32> {
    let mut m = 0;
    let mut head = t;
    while let Node::App(f, _) = *head.node() {
        m += 1;
        if m > MAX_WIDE {
            return None;
        }
        head = f;
    }
    (m >= 2 && matches!(head.node(), Node::Var(_))).then_some(m)
}

/// The instruction applying code `function` to code `argument`, with the
/// shortcuts for atoms.
fn app_instr<'a>(c: &Compiled<'a>, function: CodeId, argument: CodeId, tail: bool) -> Instr<'a> {
    match (c.atom(function), c.atom(argument)) {
        (Some(function), Some(argument)) => Instr::AppAtoms {
            function,
            argument,
            tail,
        },
        (Some(function), None) => Instr::AppAtomFunction {
            function,
            argument,
            tail,
        },
        (None, Some(argument)) => Instr::AppAtomArgument {
            function,
            argument,
            tail,
        },
        _ => Instr::App {
            function,
            argument,
            tail,
        },
    }
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

impl<'a> Compiled<'a> {
    /// The atom that code `id` is, if it is one.
    fn atom(&self, id: CodeId) -> Option<Atom<'a>> {
        match self.code.get(id as usize) {
            Some(&Instr::Atom(atom)) => Some(atom),
            _ => None,
        }
    }

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
#[derive(Debug)]
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
#[cfg(test)]
fn compile<'a>(root: &'a Term<'a>) -> Result<Compiled<'a>, CompileError> {
    compile_with(root, &mut CodeScratch::default(), usize::MAX)
}

/// The compiler's work: a term to visit (at a depth, in tail position or
/// not), or a node to build from its compiled children.
enum Job<'a> {
    Visit(&'a Term<'a>, u32, bool),
    Build(&'a Term<'a>, u32, bool),
}

/// The compiler's vectors, emptied, kept between runs (see [`Scratch`]).
#[derive(Debug, Default)]
struct CodeScratch {
    code: Vec<Instr<'static>>,
    lists: Vec<CodeId>,
    arms: Vec<CaseArm<'static>>,
    funs: Vec<Function<'static>>,
    jobs: Vec<Job<'static>>,
    done: Vec<CodeId>,
    scopes: Vec<Scope>,
}

impl std::fmt::Debug for Job<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Job")
    }
}

impl CodeScratch {
    /// Keep `compiled`'s vectors for the next compile.
    fn keep(&mut self, compiled: Compiled<'_>) {
        self.code = recycle(compiled.code);
        self.lists = compiled.lists;
        self.lists.clear();
        self.arms = recycle(compiled.arms);
        self.funs = recycle(compiled.funs);
    }
}

/// [`compile`], reusing the vectors of `scratch`.
/// Bytes of compiled code allowed whatever the memory limit: the compile
/// step's budget is the larger of this and the limit. (The code still counts
/// against the limit while the program runs.)
const CODE_ALWAYS_ALLOWED: usize = 64 << 10;

/// Why a term did not compile.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum CompileError {
    /// It has a free variable (this index, counted from the top).
    Open(u32),
    /// Its code would pass the memory limit: a program that shares subterms
    /// heavily unfolds here, since code is made per occurrence.
    TooLarge,
}

/// Compile `root`, giving up with [`CompileError::TooLarge`] once the code
/// and the work list would hold more than `max_bytes`.
fn compile_with<'a>(
    root: &'a Term<'a>,
    scratch: &mut CodeScratch,
    max_bytes: usize,
) -> Result<Compiled<'a>, CompileError> {
    let max_items = max_bytes / std::mem::size_of::<Instr<'_>>().max(1);
    let mut c = Compiled {
        code: recycle(std::mem::take(&mut scratch.code)),
        lists: std::mem::take(&mut scratch.lists),
        arms: recycle(std::mem::take(&mut scratch.arms)),
        funs: recycle(std::mem::take(&mut scratch.funs)),
        root: 0,
        frame: 0,
    };
    // The top level is compiled like a function body with no captures.
    let mut scopes = std::mem::take(&mut scratch.scopes);
    scopes.clear();
    scopes.push(Scope {
        captures: Vec::new(),
        frame: 0,
    });
    let mut jobs: Vec<Job<'a>> = recycle(std::mem::take(&mut scratch.jobs));
    jobs.push(Job::Visit(root, 0, true));
    let mut done = std::mem::take(&mut scratch.done);
    done.clear();
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
                if c.code.len() + c.lists.len() + jobs.len() > max_items {
                    return Err(CompileError::TooLarge);
                }
                let top_level = scopes.len() == 1;
                let Some(scope) = scopes.last_mut() else {
                    break;
                };
                scope.frame = scope.frame.max(depth);
                let leaf = match *t.node() {
                    Node::Var(k) if k < depth => Some(Atom::Local(depth - 1 - k)),
                    Node::Var(k) => {
                        if top_level {
                            return Err(CompileError::Open(k - depth));
                        }
                        Some(Atom::Free(scope.capture(k - depth)))
                    }
                    Node::Int(n) => Some(Atom::Int(n)),
                    Node::Bool(b) => Some(Atom::Bool(b)),
                    Node::Str(_) => Some(Atom::Lit(t)),
                    Node::Con(_, []) => Some(Atom::Lit(t)),
                    _ => None,
                };
                if let Some(atom) = leaf {
                    let id = emit(&mut c, Instr::Atom(atom));
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
                        // The wide entry's body, compiled in this function's
                        // scope after the plain body.
                        if let Some((extra, inner)) = wide_chain(body).filter(|_| top_level) {
                            jobs.push(Job::Visit(inner, binders + extra, true));
                        }
                        jobs.push(Job::Visit(body, binders, true));
                    }
                    Node::App(f, a) => {
                        if wide_spine(t).is_some() {
                            // The head and the arguments, first to last.
                            let mut head = t;
                            while let Node::App(f, a) = *head.node() {
                                jobs.push(Job::Visit(a, depth, false));
                                head = f;
                            }
                            jobs.push(Job::Visit(head, depth, false));
                        } else {
                            jobs.push(Job::Visit(a, depth, false));
                            jobs.push(Job::Visit(f, depth, false));
                        }
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
                        Node::Lam(body) | Node::RecLam(body) => {
                            let chain = wide_chain(body).filter(|_| scopes.len() == 2);
                            let wide = chain.map(|(extra, _)| Wide {
                                arity: extra + 1,
                                body: done.pop().unwrap_or(0),
                            });
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
                                    return Err(CompileError::Open(j - depth));
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
                                wide,
                            });
                            Instr::Closure(u32::try_from(c.funs.len() - 1).unwrap_or(u32::MAX))
                        }
                        Node::App(..) => match wide_spine(t) {
                            Some(m) => {
                                let at = done.len().saturating_sub(m as usize + 1);
                                let head = done.get(at).copied().unwrap_or(0);
                                let Some(function) = c.atom(head) else { break };
                                // The nested calls, for callees without a
                                // matching wide entry.
                                let mut fallback = head;
                                for (k, &argument) in
                                    done.get(at + 1..).unwrap_or(&[]).iter().enumerate()
                                {
                                    let last = k + 1 == m as usize;
                                    let instr = app_instr(&c, fallback, argument, tail && last);
                                    fallback = emit(&mut c, instr);
                                }
                                let args = span(&mut c.lists, &mut done, m as usize);
                                done.pop();
                                Instr::AppWide {
                                    function,
                                    args,
                                    tail,
                                    fallback,
                                }
                            }
                            None => {
                                let argument = done.pop().unwrap_or(0);
                                let function = done.pop().unwrap_or(0);
                                app_instr(&c, function, argument, tail)
                            }
                        },
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
                            match c.code.get(condition as usize) {
                                Some(&Instr::Prim2 { op, a, b }) => {
                                    Instr::IfPrim2 { op, a, b, yes, no }
                                }
                                _ => Instr::If { condition, yes, no },
                            }
                        }
                        Node::Prim(op, operands) => {
                            let at = done.len().saturating_sub(operands.len());
                            let atom = |i: usize| done.get(at + i).and_then(|&id| c.atom(id));
                            // Host calls take the general path, where their
                            // fuel and data are handled.
                            let host = matches!(op, Prim::Host(_));
                            match (operands.len(), atom(0), atom(1)) {
                                (1, Some(a), _) if !host => {
                                    done.truncate(at);
                                    Instr::Prim1 { op, a }
                                }
                                (2, Some(a), Some(b)) if !host => {
                                    done.truncate(at);
                                    Instr::Prim2 { op, a, b }
                                }
                                _ => Instr::Prim {
                                    op,
                                    operands: span(&mut c.lists, &mut done, operands.len()),
                                },
                            }
                        }
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
    scratch.jobs = recycle(jobs);
    scratch.done = done;
    scratch.scopes = scopes;
    Ok(c)
}

/// A runtime value of this machine: closures point at compiled functions.
type Val<'a, 'c> = Value<'a, &'c Function<'a>>;

/// A closure of this machine.
type Fun<'a, 'c> = Closure<'a, &'c Function<'a>>;

/// Pending work, packed in one word (so that pushing it is one store): what
/// to do, and the compiled node it concerns, whose operands say the rest.
#[derive(Clone, Copy, Debug)]
struct Task(u64);

impl Task {
    /// Evaluate the node, leaving its value on the stack.
    const EVAL: u64 = 0;
    /// Apply the function under the argument on top of the stack.
    const CALL: u64 = 1;
    /// The same, in tail position: the callee's frame replaces the caller's.
    const TAIL_CALL: u64 = 2;
    /// `Instr::Let`: bind the value on top and evaluate the body.
    const BIND: u64 = 3;
    /// `Instr::If`: branch on the boolean on top.
    const BRANCH: u64 = 4;
    /// `Instr::Prim`: apply the primitive to the values on top.
    const PRIM: u64 = 5;
    /// `Instr::Con`: make a constructor of the values on top.
    const BUILD: u64 = 6;
    /// `Instr::Case`: match the value on top against the arms.
    const MATCH: u64 = 7;
    /// A call has returned: pop its frame from under the value on top and
    /// make the caller's current again (the caller is on `Run::callers`).
    const RETURN: u64 = 8;
    /// `Instr::AppAtomArgument`: apply the function on top of the stack to
    /// the instruction's atom.
    const CALL_ATOM: u64 = 9;
    /// `Instr::AppWide`: argument `index` is on top; contract its
    /// application and go on with the next argument.
    const WIDE_ARG: u64 = 10;

    /// A task that also carries an index below 2²⁴.
    #[inline]
    fn indexed(kind: u64, code: CodeId, index: u32) -> Task {
        Task(kind | u64::from(code) << 8 | u64::from(index) << 40)
    }

    #[inline]
    fn index(self) -> u32 {
        (self.0 >> 40) as u32
    }

    #[inline]
    fn new(kind: u64, code: CodeId) -> Task {
        Task(kind | u64::from(code) << 8)
    }

    #[inline]
    fn kind(self) -> u64 {
        self.0 & 0xff
    }

    #[inline]
    fn code(self) -> CodeId {
        (self.0 >> 8) as CodeId
    }
}

/// The frame and closure of a caller waiting for a call to return.
struct Caller<'a, 'c> {
    base: usize,
    closure: Option<Rc<Fun<'a, 'c>>>,
}

/// The state of one run.
struct Run<'a, 'c, 'l, const METERED: bool> {
    code: &'c Compiled<'a>,
    /// Frames (each `frame` slots, from `base`) and intermediate values.
    stack: Vec<Val<'a, 'c>>,
    tasks: Vec<Task>,
    callers: Vec<Caller<'a, 'c>>,
    /// Where the current frame starts.
    base: usize,
    /// The current function's closure (`None` at the top level).
    closure: Option<Rc<Fun<'a, 'c>>>,
    /// Cells of closures that died, emptied, for the next closures made
    /// (saving an allocation and a free per call of a curried function).
    /// Still charged to the live-byte counter, so [`Run::held`] takes them
    /// off: the limit sees them as freed.
    spare: Vec<Rc<Fun<'a, 'c>>>,
    tank: Tank,
    counts: Counts,
    memory: usize,
    limits: &'l Limits,
    host: &'a HostFunctions,
    code_bytes: usize,
    peak: usize,
    meter: Meter,
}

/// Most spare closure cells a run keeps.
const SPARE_CELLS: usize = 16;

/// Move a value out of `place`, leaving an integer (which owns nothing).
#[inline]
fn take<'a, 'c>(place: &mut Val<'a, 'c>) -> Val<'a, 'c> {
    std::mem::replace(place, Value::Int(0))
}

/// The evaluator's own invariants were broken; never expected.
fn inconsistent() -> Halt {
    Halt::error(EvalError::new(
        ErrorKind::TypeMismatch,
        "the evaluator's value stack is inconsistent",
    ))
}

impl<'a, 'c, 'l, const METERED: bool> Run<'a, 'c, 'l, METERED> {
    /// Run `code` to the end with the stacks of `scratch`: the result, the
    /// counts, the peak memory, and the emptied stacks to keep.
    fn evaluate(
        code: &'c Compiled<'a>,
        limits: &'l Limits,
        host: &'a HostFunctions,
        scratch: Scratch,
    ) -> (Result<Val<'a, 'c>, Halt>, Counts, usize, Scratch) {
        let mut run = Run::<METERED> {
            code,
            stack: recycle(scratch.stack),
            tasks: scratch.tasks,
            callers: recycle(scratch.callers),
            base: 0,
            closure: None,
            spare: Vec::new(),
            tank: Tank::new(limits.fuel),
            counts: Counts::default(),
            memory: limits.memory,
            limits,
            host,
            code_bytes: code.bytes(),
            peak: 0,
            meter: Meter::holding(0),
        };
        run.tasks.clear();
        let result = run.execute();
        // Drop what the run still holds before its stacks are kept.
        run.closure = None;
        run.spare.clear();
        run.stack.clear();
        run.callers.clear();
        run.tasks.clear();
        let tasks = if run.tasks.capacity() * std::mem::size_of::<Task>() > KEEP_STACK_BYTES {
            Vec::new()
        } else {
            run.tasks
        };
        let scratch = Scratch {
            stack: recycle(run.stack),
            tasks,
            callers: recycle(run.callers),
        };
        (result, run.counts, run.peak, scratch)
    }

    /// Sample the memory in use; `Err` if it is over the limit.
    #[inline]
    fn check_memory(&mut self) -> Result<(), Halt> {
        if !METERED {
            return Ok(());
        }
        let held = self.held();
        self.peak = self.peak.max(held);
        if held > self.memory {
            Err(Halt::Memory)
        } else {
            Ok(())
        }
    }

    /// Bytes held now: cells, code and stacks.
    #[inline]
    fn held(&self) -> usize {
        self.meter
            .cells()
            .saturating_sub(self.spare.len() * Fun::cell_bytes())
            + self.code_bytes
            + self.stack.capacity() * std::mem::size_of::<Val<'_, '_>>()
            + self.tasks.capacity() * std::mem::size_of::<Task>()
            + self.callers.capacity() * std::mem::size_of::<Caller<'_, '_>>()
    }

    /// Take one unit of fuel for a contraction under `rule`. Memory is
    /// sampled where cells are made (closures, constructors, strings) and,
    /// with cancellation, before the first contraction of every fuel slice,
    /// so the stacks can outgrow the limit by at most a slice's worth of
    /// frames before the run stops.
    #[inline(always)]
    fn take_fuel(&mut self, rule: Rule) -> Result<(), Halt> {
        if METERED && !self.tank.take() {
            self.next_slice()?;
        }
        self.counts.add(rule);
        Ok(())
    }

    /// Take fuel for two contractions in a row, under `first` then `second`.
    #[inline(always)]
    fn take_fuel2(&mut self, first: Rule, second: Rule) -> Result<(), Halt> {
        if METERED && !self.tank.take2() {
            self.take_fuel(first)?;
            return self.take_fuel(second);
        }
        self.counts.add(first);
        self.counts.add(second);
        Ok(())
    }

    /// The slow checks between fuel slices: cancellation, memory, and the
    /// next slice of fuel (whose first unit pays for the pending contraction).
    #[cold]
    #[inline(never)]
    fn next_slice(&mut self) -> Result<(), Halt> {
        if self.limits.is_cancelled() {
            return Err(Halt::Cancelled);
        }
        self.check_memory()?;
        if !self.tank.refill() {
            return Err(Halt::OutOfFuel);
        }
        self.tank.take();
        Ok(())
    }

    /// The value of an atom.
    #[inline]
    fn atom(&self, atom: Atom<'a>) -> Option<Val<'a, 'c>> {
        match atom {
            Atom::Local(slot) => self.local(slot),
            Atom::Free(slot) => self.free(slot),
            Atom::Int(n) => Some(Value::Int(n)),
            Atom::Bool(b) => Some(Value::Bool(b)),
            Atom::Lit(t) => Some(Value::Lit(t)),
        }
    }

    /// Push the value of an atom.
    #[inline]
    fn push_atom(&mut self, atom: Atom<'a>) -> Result<(), Halt> {
        match self.atom(atom) {
            Some(value) => {
                self.stack.push(value);
                Ok(())
            }
            None => Err(inconsistent()),
        }
    }

    /// The integer an atom stands for, if it is one, read without making a
    /// value.
    #[inline]
    fn int(&self, atom: Atom<'a>) -> Option<i64> {
        match atom {
            Atom::Int(n) => Some(n),
            Atom::Local(slot) => match self.stack.get(self.base + slot as usize) {
                Some(&Value::Int(n)) => Some(n),
                _ => None,
            },
            Atom::Free(slot) => match self.closure.as_ref()?.captured.get(slot as usize) {
                Some(&Value::Int(n)) => Some(n),
                _ => None,
            },
            _ => None,
        }
    }

    /// `op(a, b)` on integer atoms, when it is an integer operation that
    /// does not fail (its fuel not taken).
    #[inline]
    fn int_prim(&self, op: Prim, a: Atom<'a>, b: Atom<'a>) -> Option<Val<'a, 'c>> {
        int_prim(op, self.int(a)?, self.int(b)?)
    }

    /// Contract `op(a, b)` on atoms.
    #[inline]
    fn prim2(&mut self, op: Prim, a: Atom<'a>, b: Atom<'a>) -> Result<Val<'a, 'c>, Halt> {
        self.take_fuel(Rule::Prim)?;
        if let (Some(x), Some(y)) = (self.int(a), self.int(b)) {
            if let Some(v) = int_prim(op, x, y) {
                return Ok(v);
            }
        }
        let (Some(a), Some(b)) = (self.atom(a), self.atom(b)) else {
            return Err(inconsistent());
        };
        let args = [a, b];
        self.check_room(string_bytes(op, &args))?;
        self.prim_result(apply_prim(op, &args))
    }

    /// A host function's contraction on the values from `from` up (see
    /// `host::HostStep`); the caller pops them.
    #[cold]
    fn host_call(&mut self, id: HostId, from: usize) -> Result<Val<'a, 'c>, Halt> {
        let room = self.memory.saturating_sub(self.held());
        let args = self.stack.get(from..).unwrap_or(&[]);
        let made = host_call(
            self.host,
            id,
            args,
            &mut self.tank,
            &mut self.counts,
            METERED,
            room,
        );
        let value = made?;
        self.check_memory()?;
        Ok(value)
    }

    /// `Err` if `bytes` more would pass the memory limit (checked before a
    /// primitive makes a string that large).
    #[inline]
    fn check_room(&mut self, bytes: usize) -> Result<(), Halt> {
        if METERED && bytes > 0 && self.held().saturating_add(bytes) > self.memory {
            return Err(Halt::Memory);
        }
        Ok(())
    }

    /// A primitive's result; a new string is sampled against the limit.
    #[inline]
    fn prim_result(&mut self, result: Result<Val<'a, 'c>, EvalError>) -> Result<Val<'a, 'c>, Halt> {
        let value = result.map_err(Halt::error)?;
        if matches!(value, Value::Str(_)) {
            self.check_memory()?;
        }
        Ok(value)
    }

    /// Contract the application of `function` to `argument` (both already
    /// values): enter the function's body in a new frame, which replaces the
    /// caller's when the call is in tail position, and return the body's
    /// code. A body that is itself a `λ` (a curried function given its first
    /// arguments) is not entered: its closure is made at once from the
    /// callee's captured values and the argument, and pushed as the call's
    /// value (`None`).
    #[inline]
    fn call(
        &mut self,
        function: Val<'a, 'c>,
        argument: Val<'a, 'c>,
        tail: bool,
    ) -> Result<Option<CodeId>, Halt> {
        let rule = match &function {
            Value::Fun(f) if f.code.rec => Rule::BetaRec,
            _ => Rule::Beta,
        };
        self.take_fuel(rule)?;
        let closure = match function {
            Value::Fun(closure) => closure,
            // The argument was evaluated before the callee was found
            // wanting, as in the stepper.
            callee => return Err(Halt::error(EvalError::not_a_function(callee.operand()))),
        };
        let code: &'c Function<'a> = closure.code;
        if let Some(&Instr::Closure(index)) = self.code.code.get(code.body as usize) {
            let inner = self
                .code
                .funs
                .get(index as usize)
                .ok_or_else(inconsistent)?;
            // The callee's frame would hold itself (if recursive), then the
            // argument; nothing else is bound before its body. Each slot is
            // fetched at most once (captures are distinct), so the argument
            // and, from a cell about to be reused, the old captured values
            // are moved rather than cloned.
            let mut argument = argument;
            let mut closure = closure;
            let arg_slot = u32::from(code.rec);
            // A call that holds the callee's only reference (the usual case
            // for the middle of a curried call) reuses its cell, unless the
            // new closure captures the callee itself.
            if !code.rec || !inner.fetch.contains(&Fetch::Local(0)) {
                if let Some(cell) = Rc::get_mut(&mut closure) {
                    let grew = cell.reshape(inner, |old| {
                        let mut captured = Values::with_capacity(inner.fetch.len());
                        for fetch in &inner.fetch {
                            let value = match *fetch {
                                Fetch::Local(s) if s == arg_slot => take(&mut argument),
                                Fetch::Free(slot) => {
                                    take(old.get_mut(slot as usize).ok_or_else(inconsistent)?)
                                }
                                Fetch::Local(_) => return Err(inconsistent()),
                            };
                            captured.push(value);
                        }
                        Ok(captured)
                    })?;
                    self.stack.push(Value::Fun(closure));
                    if grew {
                        self.check_memory()?;
                    }
                    return Ok(None);
                }
            }
            let mut captured = Values::with_capacity(inner.fetch.len());
            for fetch in &inner.fetch {
                let value = match *fetch {
                    Fetch::Local(0) if code.rec => Value::Fun(Rc::clone(&closure)),
                    Fetch::Local(s) if s == arg_slot => take(&mut argument),
                    Fetch::Free(slot) => closure
                        .captured
                        .get(slot as usize)
                        .cloned()
                        .ok_or_else(inconsistent)?,
                    Fetch::Local(_) => return Err(inconsistent()),
                };
                captured.push(value);
            }
            let made = self.make_closure(inner, captured);
            self.stack.push(Value::Fun(made));
            self.check_memory()?;
            return Ok(None);
        }
        if tail {
            cut(&mut self.stack, self.base);
        } else {
            self.callers.push(Caller {
                base: self.base,
                closure: self.closure.take(),
            });
            self.tasks.push(Task::new(Task::RETURN, 0));
        }
        self.base = self.stack.len();
        if code.rec {
            self.stack.push(Value::Fun(Rc::clone(&closure)));
        }
        self.stack.push(argument);
        for _ in self.stack.len()..self.base + code.frame as usize {
            self.stack.push(Value::Int(0));
        }
        let done = self.closure.replace(closure);
        self.retire(done);
        Ok(Some(code.body))
    }

    /// Whether atom `function` is a function with a wide entry of `arity`.
    #[inline]
    fn has_wide(&self, function: Atom<'a>, arity: u32) -> bool {
        let value = match function {
            Atom::Local(slot) => self.stack.get(self.base + slot as usize),
            Atom::Free(slot) => self
                .closure
                .as_ref()
                .and_then(|c| c.captured.get(slot as usize)),
            _ => None,
        };
        matches!(value, Some(Value::Fun(f)) if f.code.wide.is_some_and(|w| w.arity == arity))
    }

    /// Go on with the wide call `Instr::AppWide` at `at` from argument `k`
    /// (the callee and the arguments before `k` on the stack, their
    /// applications contracted): the code to evaluate next, an argument
    /// (with a `WIDE_ARG` task pushed) or the callee's wide body (entered).
    fn wide(&mut self, at: CodeId, mut k: u32) -> Result<CodeId, Halt> {
        let code = self.code;
        let Some(&Instr::AppWide { args, tail, .. }) = code.code.get(at as usize) else {
            return Err(inconsistent());
        };
        let ids = code.lists.get(args.range()).ok_or_else(inconsistent)?;
        while let Some(&id) = ids.get(k as usize) {
            match code.code.get(id as usize) {
                Some(&Instr::Atom(atom)) => self.push_atom(atom)?,
                Some(&Instr::Prim2 { op, a, b }) if self.int_prim(op, a, b).is_some() => {
                    let v = self.int_prim(op, a, b).ok_or_else(inconsistent)?;
                    self.take_fuel(Rule::Prim)?;
                    self.stack.push(v);
                }
                _ => {
                    self.tasks.push(Task::indexed(Task::WIDE_ARG, at, k));
                    return Ok(id);
                }
            }
            self.wide_beta(k)?;
            k += 1;
        }
        self.enter_wide(args.len, tail)
    }

    /// Contract the application to argument `k` (on top of the stack) of a
    /// wide call: `beta_rec` for a recursive callee's first, else `beta`.
    #[inline]
    fn wide_beta(&mut self, k: u32) -> Result<(), Halt> {
        let rule = match (
            k,
            self.stack
                .len()
                .checked_sub(2)
                .and_then(|i| self.stack.get(i)),
        ) {
            (0, Some(Value::Fun(f))) if f.code.rec => Rule::BetaRec,
            _ => Rule::Beta,
        };
        self.take_fuel(rule)
    }

    /// Enter the wide body of the callee under the top `m` values (its
    /// arguments): they become the new frame, after the callee itself if it
    /// is recursive, replacing the caller's in tail position.
    fn enter_wide(&mut self, m: u32, tail: bool) -> Result<CodeId, Halt> {
        let mut at = self.top(m + 1)?;
        let closure = match self.stack.get(at) {
            Some(Value::Fun(f)) => Rc::clone(f),
            _ => return Err(inconsistent()),
        };
        let code: &'c Function<'a> = closure.code;
        let wide = code.wide.ok_or_else(inconsistent)?;
        if tail {
            if at < self.base {
                return Err(inconsistent());
            }
            self.stack.drain(self.base..at);
            at = self.base;
        } else {
            self.callers.push(Caller {
                base: self.base,
                closure: self.closure.take(),
            });
            self.tasks.push(Task::new(Task::RETURN, 0));
        }
        if !code.rec {
            self.stack.remove(at);
        }
        self.base = at;
        for _ in self.stack.len()..at + code.frame as usize {
            self.stack.push(Value::Int(0));
        }
        let done = self.closure.replace(closure);
        self.retire(done);
        Ok(wide.body)
    }

    /// A closure of `code` over `captured`, in a spare cell if there is one.
    #[inline]
    fn make_closure(
        &mut self,
        code: &'c Function<'a>,
        captured: Values<'a, &'c Function<'a>>,
    ) -> Rc<Fun<'a, 'c>> {
        if let Some(mut spare) = self.spare.pop() {
            if let Some(cell) = Rc::get_mut(&mut spare) {
                cell.reuse(code, captured);
                return spare;
            }
        }
        Closure::new(code, captured)
    }

    /// Drop a closure; if this was its last reference, its values are
    /// released and its cell kept for [`Run::make_closure`].
    #[inline(always)]
    fn retire(&mut self, closure: Option<Rc<Fun<'a, 'c>>>) {
        match closure {
            Some(closure) if Rc::strong_count(&closure) == 1 => self.keep_spare(closure),
            _ => {}
        }
    }

    /// The rest of [`Run::retire`], for a closure with no other reference.
    #[inline(never)]
    fn keep_spare(&mut self, mut closure: Rc<Fun<'a, 'c>>) {
        if self.spare.len() < SPARE_CELLS {
            if let Some(cell) = Rc::get_mut(&mut closure) {
                let code = cell.code;
                cell.reuse(code, Values::new());
                self.spare.push(closure);
            }
        }
    }

    #[inline]
    fn pop(&mut self) -> Result<Val<'a, 'c>, Halt> {
        self.stack.pop().ok_or_else(inconsistent)
    }

    /// The value of frame slot `slot`.
    #[inline]
    fn local(&self, slot: u32) -> Option<Val<'a, 'c>> {
        self.stack.get(self.base + slot as usize).cloned()
    }

    /// The current closure's captured value `slot`.
    #[inline]
    fn free(&self, slot: u32) -> Option<Val<'a, 'c>> {
        self.closure
            .as_ref()
            .and_then(|c| c.captured.get(slot as usize))
            .cloned()
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

    /// The first value of the top `n` on the stack.
    #[inline]
    fn top(&self, n: u32) -> Result<usize, Halt> {
        self.stack
            .len()
            .checked_sub(n as usize)
            .ok_or_else(inconsistent)
    }

    /// Evaluate the program to a value.
    fn execute(&mut self) -> Result<Val<'a, 'c>, Halt> {
        let code = self.code;
        self.stack.resize(code.frame as usize, Value::Int(0));
        let mut pc = code.root;
        'eval: loop {
            // Evaluate `pc` down its leftmost spine, leaving work for later.
            loop {
                let Some(instr) = code.code.get(pc as usize) else {
                    return Err(inconsistent());
                };
                match *instr {
                    Instr::Atom(atom) => {
                        self.push_atom(atom)?;
                        break;
                    }
                    Instr::Closure(index) => {
                        let Some(function) = code.funs.get(index as usize) else {
                            return Err(inconsistent());
                        };
                        let mut captured = Values::with_capacity(function.fetch.len());
                        for fetch in &function.fetch {
                            let value = match *fetch {
                                Fetch::Local(slot) => self.local(slot),
                                Fetch::Free(slot) => self.free(slot),
                            };
                            captured.push(value.ok_or_else(inconsistent)?);
                        }
                        let made = self.make_closure(function, captured);
                        self.stack.push(Value::Fun(made));
                        self.check_memory()?;
                        break;
                    }
                    Instr::App {
                        function,
                        argument,
                        tail,
                    } => {
                        let call = if tail { Task::TAIL_CALL } else { Task::CALL };
                        self.tasks.push(Task::new(call, 0));
                        self.tasks.push(Task::new(Task::EVAL, argument));
                        pc = function;
                    }
                    Instr::AppAtomArgument { function, .. } => {
                        self.tasks.push(Task::new(Task::CALL_ATOM, pc));
                        pc = function;
                    }
                    Instr::AppAtomFunction {
                        function,
                        argument,
                        tail,
                    } => {
                        // `f (x - 1)`: an integer operation on atoms as the
                        // argument, then the call, with no task between.
                        if let Some(&Instr::Prim2 { op, a, b }) = code.code.get(argument as usize) {
                            if let Some(v) = self.int_prim(op, a, b) {
                                self.take_fuel(Rule::Prim)?;
                                let f = self.atom(function).ok_or_else(inconsistent)?;
                                match self.call(f, v, tail)? {
                                    Some(body) => {
                                        pc = body;
                                        continue;
                                    }
                                    None => break,
                                }
                            }
                        }
                        self.push_atom(function)?;
                        let call = if tail { Task::TAIL_CALL } else { Task::CALL };
                        self.tasks.push(Task::new(call, 0));
                        pc = argument;
                    }
                    Instr::AppAtoms {
                        function,
                        argument,
                        tail,
                    } => {
                        let (Some(f), Some(a)) = (self.atom(function), self.atom(argument)) else {
                            return Err(inconsistent());
                        };
                        match self.call(f, a, tail)? {
                            Some(body) => pc = body,
                            None => break,
                        }
                    }
                    Instr::IfPrim2 { op, a, b, yes, no } => {
                        if let (Some(x), Some(y)) = (self.int(a), self.int(b)) {
                            if let Some(holds) = int_test(op, x, y) {
                                self.take_fuel2(Rule::Prim, Rule::If)?;
                                pc = if holds { yes } else { no };
                                continue;
                            }
                        }
                        let condition = self.prim2(op, a, b)?;
                        self.take_fuel(Rule::If)?;
                        match condition {
                            Value::Bool(b) => pc = if b { yes } else { no },
                            other => {
                                return Err(Halt::error(EvalError::not_a_boolean(other.operand())))
                            }
                        }
                    }
                    Instr::Prim1 { op, a } => {
                        self.take_fuel(Rule::Prim)?;
                        let a = self.atom(a).ok_or_else(inconsistent)?;
                        let v = self.prim_result(apply_prim(op, &[a]))?;
                        self.stack.push(v);
                        break;
                    }
                    Instr::Prim2 { op, a, b } => {
                        let v = self.prim2(op, a, b)?;
                        self.stack.push(v);
                        break;
                    }
                    Instr::AppWide {
                        function,
                        args,
                        fallback,
                        ..
                    } => {
                        if self.has_wide(function, args.len) {
                            self.push_atom(function)?;
                            pc = self.wide(pc, 0)?;
                        } else {
                            pc = fallback;
                        }
                    }
                    Instr::Let { bound, .. } => {
                        self.tasks.push(Task::new(Task::BIND, pc));
                        pc = bound;
                    }
                    Instr::If { condition, .. } => {
                        self.tasks.push(Task::new(Task::BRANCH, pc));
                        pc = condition;
                    }
                    Instr::Prim { operands: list, .. } | Instr::Con { fields: list, .. } => {
                        // Evaluate the operands (fields) left to right, then
                        // apply the primitive (build the constructor).
                        let then = if matches!(instr, Instr::Prim { .. }) {
                            Task::PRIM
                        } else {
                            Task::BUILD
                        };
                        self.tasks.push(Task::new(then, pc));
                        let Some(list) = code.lists.get(list.range()) else {
                            return Err(inconsistent());
                        };
                        let Some((&first, rest)) = list.split_first() else {
                            break;
                        };
                        self.tasks
                            .extend(rest.iter().rev().map(|&o| Task::new(Task::EVAL, o)));
                        pc = first;
                    }
                    Instr::Case { scrutinee, .. } => {
                        self.tasks.push(Task::new(Task::MATCH, pc));
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
                let at = task.code();
                match task.kind() {
                    Task::EVAL => {
                        pc = at;
                        continue 'eval;
                    }
                    kind @ (Task::CALL | Task::TAIL_CALL) => {
                        let argument = self.pop()?;
                        let function = self.pop()?;
                        if let Some(body) =
                            self.call(function, argument, kind == Task::TAIL_CALL)?
                        {
                            pc = body;
                            continue 'eval;
                        }
                        continue;
                    }
                    Task::CALL_ATOM => {
                        let Some(&Instr::AppAtomArgument { argument, tail, .. }) =
                            code.code.get(at as usize)
                        else {
                            return Err(inconsistent());
                        };
                        let function = self.pop()?;
                        let argument = self.atom(argument).ok_or_else(inconsistent)?;
                        if let Some(body) = self.call(function, argument, tail)? {
                            pc = body;
                            continue 'eval;
                        }
                        continue;
                    }
                    Task::WIDE_ARG => {
                        let k = task.index();
                        self.wide_beta(k)?;
                        pc = self.wide(at, k + 1)?;
                        continue 'eval;
                    }
                    Task::RETURN => {
                        let value = self.pop()?;
                        cut(&mut self.stack, self.base);
                        self.stack.push(value);
                        let caller = self.callers.pop().ok_or_else(inconsistent)?;
                        self.base = caller.base;
                        let done = std::mem::replace(&mut self.closure, caller.closure);
                        self.retire(done);
                        continue;
                    }
                    _ => {}
                }
                let Some(instr) = code.code.get(at as usize) else {
                    return Err(inconsistent());
                };
                match *instr {
                    Instr::Let { slot, body, .. } => {
                        self.take_fuel(Rule::Let)?;
                        let value = self.pop()?;
                        self.set_local(slot, value)?;
                        pc = body;
                        continue 'eval;
                    }
                    Instr::If { yes, no, .. } => {
                        self.take_fuel(Rule::If)?;
                        match self.pop()? {
                            Value::Bool(b) => {
                                pc = if b { yes } else { no };
                                continue 'eval;
                            }
                            other => {
                                return Err(Halt::error(EvalError::not_a_boolean(other.operand())))
                            }
                        }
                    }
                    Instr::Prim { op, operands } => {
                        // `fib (n - 1) + fib (n - 2)`: integer arithmetic on
                        // two computed operands, without the general path.
                        if let [.., Value::Int(x), Value::Int(y)] = self.stack[..] {
                            if operands.len == 2 {
                                if let Some(v) = int_prim(op, x, y) {
                                    self.take_fuel(Rule::Prim)?;
                                    self.stack.pop();
                                    if let Some(top) = self.stack.last_mut() {
                                        *top = v;
                                    }
                                    continue;
                                }
                            }
                        }
                        let from = self.top(operands.len)?;
                        if let Prim::Host(id) = op {
                            let v = self.host_call(id, from)?;
                            self.stack.truncate(from);
                            self.stack.push(v);
                            continue;
                        }
                        self.take_fuel(Rule::Prim)?;
                        self.check_room(string_bytes(op, &self.stack[from..]))?;
                        let result = apply_prim(op, &self.stack[from..]);
                        self.stack.truncate(from);
                        let v = self.prim_result(result)?;
                        self.stack.push(v);
                    }
                    Instr::Con { tag, fields } => {
                        // A constructor of values is a value: building it is free.
                        let from = self.top(fields.len)?;
                        let fields: Values<'a, &'c Function<'a>> =
                            self.stack.drain(from..).collect();
                        self.stack.push(Value::Con(ConCell::new(tag, fields)));
                        self.check_memory()?;
                    }
                    Instr::Case {
                        arms,
                        default,
                        slot,
                        ..
                    } => {
                        self.take_fuel(Rule::Case)?;
                        let value = self.pop()?;
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
                                return Err(Halt::error(EvalError::no_matching_case(
                                    value.operand(),
                                )))
                            }
                        }
                    }
                    _ => return Err(inconsistent()),
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
                Instr::App { tail, .. }
                | Instr::AppAtomArgument { tail, .. }
                | Instr::AppAtomFunction { tail, .. }
                | Instr::AppAtoms { tail, .. } => Some(*tail),
                _ => None,
            })
            .collect();
        // In build order: g n (tail), f n (not), the top-level call (tail).
        assert_eq!(tails, vec![true, false, true]);
    }

    #[test]
    fn an_open_term_is_an_error_not_a_panic() {
        let arena = Arena::new();
        assert_eq!(
            compile(arena.lam(arena.var(3))).err(),
            Some(CompileError::Open(2))
        );
        assert_eq!(compile(arena.var(0)).err(), Some(CompileError::Open(0)));
    }

    /// `(μf. λn. f (n + 1)) 0`: runs until something stops it.
    fn spin(arena: &Arena) -> &Term<'_> {
        let body = arena.app(
            arena.var(1),
            arena.prim(Prim::Add, &[arena.var(0), arena.int(1)]),
        );
        arena.app(arena.rec_lam(body), arena.int(0))
    }

    #[test]
    fn a_cancelled_handle_stops_a_divergent_loop() {
        let arena = Arena::new();
        let program = Program::new(spin(&arena)).unwrap();
        let cancel = crate::Cancel::new();
        let limits = Limits::default()
            .with_fuel(u64::MAX)
            .with_cancel(cancel.clone());
        let mut env = Env::new();
        // Not cancelled: the fuel ends it, on the exact contraction.
        let report = env.run(&program, &limits.clone().with_fuel(5_000), &arena);
        assert_eq!(report.outcome, Outcome::OutOfFuel);
        assert_eq!(report.counts.total(), 5_000);
        cancel.cancel();
        // Polled before the first contraction.
        let report = env.run(&program, &limits, &arena);
        assert_eq!(report.outcome, Outcome::Limit(LimitError::cancelled()));
        assert_eq!(report.counts.total(), 0);
    }

    #[test]
    fn cancelling_from_another_thread_stops_a_running_loop() {
        let cancel = crate::Cancel::new();
        let limits = Limits::default()
            .with_fuel(u64::MAX)
            .with_cancel(cancel.clone());
        let runner = std::thread::spawn(move || {
            let arena = Arena::new();
            let program = Program::new(spin(&arena)).unwrap();
            let report = Env::new().run(&program, &limits, &arena);
            (report.outcome.name(), report.counts.total())
        });
        std::thread::sleep(std::time::Duration::from_millis(20));
        cancel.cancel();
        let (outcome, contractions) = runner.join().unwrap();
        assert_eq!(outcome, "limit");
        assert!(contractions > 0);
    }

    #[test]
    fn stacks_are_kept_across_runs_and_runs_agree() {
        let arena = Arena::new();
        let program = Program::new(spin(&arena)).unwrap();
        let limits = Limits::default().with_fuel(1_000);
        let mut env = Env::new();
        let first = env.run(&program, &limits, &arena);
        assert!(env.scratch.stack.capacity() > 0);
        let kept = env.scratch.stack.as_ptr();
        let second = env.run(&program, &limits, &arena);
        assert_eq!(first, second);
        assert_eq!(env.scratch.stack.as_ptr(), kept);
    }

    #[test]
    fn without_accounting_gives_the_same_report() {
        let arena = Arena::new();
        // The doc example's sum, then a 300-deep non-tail recursion.
        let body = arena.if_then_else(
            arena.prim(Prim::Eq, &[arena.var(0), arena.int(0)]),
            arena.int(0),
            arena.prim(
                Prim::Add,
                &[
                    arena.var(0),
                    arena.app(
                        arena.var(1),
                        arena.prim(Prim::Sub, &[arena.var(0), arena.int(1)]),
                    ),
                ],
            ),
        );
        let program = Program::new(arena.app(arena.rec_lam(body), arena.int(300))).unwrap();
        let metered = Env::new().run(&program, &Limits::default(), &arena);
        let unmetered = Env::without_accounting().run(&program, &Limits::default(), &arena);
        assert_eq!(metered.outcome, Outcome::Value(arena.int(45_150)));
        assert_eq!(metered, unmetered);
    }

    #[test]
    #[cfg(feature = "stepper")]
    fn wide_calls_agree_with_the_stepper_at_every_fuel() {
        crate::value::tests::curried_calls_agree_with_the_stepper(&mut Env::new());
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
