//! The env machine's compiler: the program image to closure-converted code
//! with flat closures (Cardelli, "Compiling a functional language", 1984),
//! in which every variable is a slot of its function's frame or one of the
//! values its closure captured, as the image's analysis found them.
//!
//! The work is linear in the image: each node of a function body is visited
//! once, each curried function is compiled once (its body under all its
//! parameters), and a closure's captured values are gathered by one range
//! copy per capture run. The compiler's vectors grow only within the memory
//! limit, and it accounts each node visited as fuel-free work, so a cancelled
//! run stops here too. Shared closed subterms other than functions are
//! compiled once per occurrence (their frame slots depend on where they
//! sit), which a heavily shared program pays for in code bytes, up to the
//! limit.

use std::mem::size_of;
use std::ops::Range;

pub(super) use crate::budget::grow;
use crate::budget::{Budget, Halt};
use crate::image::analysis::MAX_CHAIN;
use crate::image::{INode, Id, Image, Capture, LOCAL, NONE};
use crate::prim::Prim;

/// An index into [`Compiled::code`].
pub(super) type CodeId = u32;

/// A function whose body is queued for compilation.
const QUEUED: CodeId = NONE - 1;

/// A stretch of [`Compiled::lists`], [`Compiled::fetches`] or
/// [`Compiled::bodies`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) struct Span {
    pub(super) start: u32,
    pub(super) len: u32,
}

impl Span {
    #[inline(always)]
    pub(super) fn range(self) -> Range<usize> {
        self.start as usize..self.start as usize + self.len as usize
    }
}

/// An operand that costs nothing to evaluate: a variable or a literal.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Atom {
    /// Slot of the current frame.
    Local(u32),
    /// A value the current closure captured.
    Free(u32),
    /// An integer that fits in 32 bits.
    Int(i32),
    /// Any other integer: an index into [`Compiled::ints`].
    BigInt(u32),
    Bool(bool),
    /// A string literal of the program.
    Lit(u32),
    /// A constructor with no fields.
    Tag(u32),
    /// Closed constructor data of the program, read in place: its image
    /// node.
    Data(u32),
}

/// One instruction of compiled code. Everything mirrors the image except
/// that variables are resolved and common shapes whose operands are atoms
/// get instructions of their own (as in A-normal form, Flanagan et al.,
/// "The essence of compiling with continuations", 1993), which skip the
/// task stack.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) enum Instr {
    Atom(Atom),
    /// Make a closure of function `func` ([`Compiled::funs`]), its captured
    /// values gathered by the fetches of `fetch`.
    Closure {
        func: u32,
        fetch: Span,
    },
    App {
        function: CodeId,
        argument: CodeId,
        tail: bool,
    },
    /// An application whose function is an atom.
    AppAtomFunction {
        function: Atom,
        argument: CodeId,
        tail: bool,
    },
    /// An application to an atom: the argument is read once the function's
    /// value is ready (nothing the function's evaluation does changes it).
    AppAtomArgument {
        function: CodeId,
        argument: Atom,
        tail: bool,
    },
    AppAtoms {
        function: Atom,
        argument: Atom,
        tail: bool,
    },
    /// `f a₁ … aₘ` (`2 ≤ m ≤ MAX_CHAIN`) with `f` a variable: when `f` is a
    /// closure that exactly `m` more arguments saturate, the arguments are
    /// evaluated and their applications contracted in the nested calls'
    /// order and the body is entered with all of them, making no partial
    /// application; otherwise `fallback`, the nested calls (which share the
    /// arguments' code).
    AppN {
        function: Atom,
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
    /// `if op(a, b) then … else …` on atoms: two contractions.
    IfPrim2 {
        op: Prim,
        a: Atom,
        b: Atom,
        yes: CodeId,
        no: CodeId,
    },
    Prim {
        op: Prim,
        operands: Span,
    },
    /// A unary built-in primitive on an atom.
    Prim1 {
        op: Prim,
        a: Atom,
    },
    /// A binary built-in primitive on atoms.
    Prim2 {
        op: Prim,
        a: Atom,
        b: Atom,
    },
    Con {
        tag: u32,
        fields: Span,
    },
    /// A case of [`Image::cases`] `case`: the arms' bodies are at `bodies`
    /// in [`Compiled::bodies`], in the image's order, and their fields go to
    /// slots `slot..`.
    Case {
        scrutinee: CodeId,
        case: u32,
        bodies: u32,
        default: CodeId,
        slot: u32,
    },
}

/// Where a closure being made finds a stretch of its captured values: `len`
/// slots of the current frame from `start`, or `len` of the current
/// closure's captured values from `start`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) struct Fetch {
    pub(super) frame: bool,
    pub(super) start: u32,
    pub(super) len: u32,
}

/// A compiled curried function (an entry of [`Image::funcs`]).
#[derive(Clone, Copy, Debug)]
pub(crate) struct Function {
    /// Its index in [`Image::funcs`].
    pub(super) func: u32,
    /// Its body, compiled with self (of a `μλ`) and every parameter as the
    /// first slots of the frame.
    pub(super) body: CodeId,
    pub(super) params: u32,
    pub(super) rec: bool,
    /// How many values its closures capture.
    pub(super) captured: u32,
    /// Slots of its frame.
    pub(super) frame: u32,
}

/// A program compiled for one run; kept, emptied, for the next.
#[derive(Debug, Default)]
pub(super) struct Compiled {
    pub(super) code: Vec<Instr>,
    /// Per instruction, the image node it was compiled from ([`NONE`] for
    /// an atom), read only where a run stops, for its location.
    pub(super) origin: Vec<Id>,
    /// Operand, field and argument lists.
    pub(super) lists: Vec<CodeId>,
    pub(super) fetches: Vec<Fetch>,
    /// Case arm bodies.
    pub(super) bodies: Vec<CodeId>,
    pub(super) ints: Vec<i64>,
    /// By function index of the image.
    pub(super) funs: Vec<Function>,
    pub(super) root: CodeId,
    /// Slots of the top level's frame.
    pub(super) frame: u32,
}

impl Compiled {
    /// Bytes of compiled code, as the memory limit counts them.
    pub(super) fn bytes(&self) -> usize {
        self.code.capacity() * size_of::<Instr>()
            + self.origin.capacity() * size_of::<Id>()
            + self.lists.capacity() * size_of::<CodeId>()
            + self.fetches.capacity() * size_of::<Fetch>()
            + self.bodies.capacity() * size_of::<CodeId>()
            + self.ints.capacity() * size_of::<i64>()
            + self.funs.capacity() * size_of::<Function>()
    }

    /// Free it if it grew large, else empty it, keeping its allocations
    /// for the next compile.
    pub(super) fn trim(&mut self) {
        if self.bytes() > KEEP_BYTES {
            *self = Compiled::default();
        }
        self.clear();
    }

    fn clear(&mut self) {
        self.code.clear();
        self.origin.clear();
        self.lists.clear();
        self.fetches.clear();
        self.bodies.clear();
        self.ints.clear();
        self.funs.clear();
        self.root = 0;
        self.frame = 0;
    }
}

/// Entries the work lists start with.
const FIRST_WORK: usize = 64;

/// Most instructions (and list entries) room is made for before the first
/// is emitted; beyond, the vectors grow as they fill.
const FIRST_CODE: usize = 1 << 10;

/// Code and work lists larger than this are freed once they are done with
/// (the lists after the compile, the code after the run) rather than kept
/// for the next run.
const KEEP_BYTES: usize = 64 << 10;

/// The compiler's work: a node to visit (at a depth, in tail position or
/// not), a node to build from its compiled children, or an application
/// spine of `len` arguments to build.
#[derive(Clone, Copy, Debug)]
pub(super) enum CompileJob {
    Visit { node: Id, depth: u32, tail: bool },
    Build { node: Id, depth: u32 },
    /// A spine of `len` arguments whose outermost application is `node`.
    Spine { len: u32, tail: bool, node: Id },
}

/// A compiled child: an atom not yet emitted (its parent may take it in),
/// or code.
#[derive(Clone, Copy, Debug)]
pub(super) enum CompileItem {
    Atom(Atom),
    Code(CodeId),
}

/// The compiler's work lists, for one compilation.
#[derive(Debug, Default)]
pub(super) struct Workspace {
    jobs: Vec<CompileJob>,
    done: Vec<CompileItem>,
    pending: Vec<u32>,
}

impl Workspace {
    /// Bytes held, as the memory limit counts them.
    pub(super) fn bytes(&self) -> usize {
        self.jobs.capacity() * size_of::<CompileJob>()
            + self.done.capacity() * size_of::<CompileItem>()
            + self.pending.capacity() * size_of::<u32>()
    }

    /// Free the lists if they grew large.
    pub(super) fn trim(&mut self) {
        if self.bytes() > KEEP_BYTES {
            *self = Workspace::default();
        }
        self.jobs.clear();
        self.done.clear();
        self.pending.clear();
    }
}

/// An image the analysis should not have produced (a variable with no
/// place, a `λ` of no function): a bug in orrery, reported, never a panic.
#[cold]
pub(super) fn broken() -> Halt {
    Halt::fault("the env machine was given code it cannot run")
}

/// Compile `image` into `c`, using the lists of `w`; the run holds `fixed`
/// bytes besides.
///
/// # Errors
///
/// [`Halt::Memory`] once the code and the work lists would pass the limit,
/// [`Halt::Cancelled`] when the run is cancelled meanwhile, and an internal
/// error for an image the analysis should not have made.
pub(super) fn compile(
    image: &Image,
    c: &mut Compiled,
    w: &mut Workspace,
    budget: &mut Budget,
    fixed: usize,
) -> Result<(), Halt> {
    c.trim();
    w.trim();
    let mut k = Compiler {
        image,
        c,
        w,
        budget,
        fixed,
        max_depth: 0,
        captured: 0,
    };
    k.functions()?;
    let (root, frame) = k.body(image.root, 0)?;
    k.c.root = root;
    k.c.frame = frame;
    while let Some(f) = k.w.pending.pop() {
        let func = *image.funcs.get(f as usize).ok_or_else(broken)?;
        k.captured = func.captured;
        let (body, frame) = k.body(func.body, func.params + u32::from(func.rec))?;
        let entry = k.c.funs.get_mut(f as usize).ok_or_else(broken)?;
        entry.body = body;
        entry.frame = frame;
    }
    Ok(())
}

struct Compiler<'i, 'b> {
    image: &'i Image,
    c: &'b mut Compiled,
    w: &'b mut Workspace,
    budget: &'b mut Budget,
    fixed: usize,
    /// The deepest binder depth of the body being compiled.
    max_depth: u32,
    /// How many values the closures of the function being compiled capture.
    captured: u32,
}

impl Compiler<'_, '_> {
    fn held(&self) -> usize {
        self.fixed + self.c.bytes() + self.w.bytes()
    }

    /// One entry per function of the image, its body not yet compiled; and
    /// room, at once, for the code of a small image (about an instruction
    /// and a list entry per node) and the first work.
    fn functions(&mut self) -> Result<(), Halt> {
        let image = self.image;
        let held = self.held();
        grow(
            &mut self.c.code,
            image.nodes.len().min(FIRST_CODE),
            held,
            self.budget,
        )?;
        let held = self.held();
        grow(
            &mut self.c.lists,
            image.lists.len().min(FIRST_CODE),
            held,
            self.budget,
        )?;
        let held = self.held();
        grow(&mut self.w.jobs, FIRST_WORK, held, self.budget)?;
        let held = self.held();
        grow(&mut self.w.done, FIRST_WORK, held, self.budget)?;
        let n = self.image.funcs.len();
        let held = self.held();
        grow(&mut self.c.funs, n, held, self.budget)?;
        self.budget.work(n as u64)?;
        self.c
            .funs
            .extend(self.image.funcs.iter().enumerate().map(|(i, f)| Function {
                func: i as u32,
                body: NONE,
                params: f.params,
                rec: f.rec,
                captured: f.captured,
                frame: 0,
            }));
        Ok(())
    }

    /// Append `instr`, compiled from image node `node`.
    fn emit(&mut self, instr: Instr, node: Id) -> Result<CodeId, Halt> {
        if self.c.code.len() == self.c.code.capacity() {
            let held = self.held();
            grow(&mut self.c.code, 1, held, self.budget)?;
        }
        if self.c.origin.len() == self.c.origin.capacity() {
            let held = self.held();
            grow(&mut self.c.origin, 1, held, self.budget)?;
        }
        let id = self.c.code.len() as CodeId;
        self.c.code.push(instr);
        self.c.origin.push(node);
        Ok(id)
    }

    fn job(&mut self, job: CompileJob) -> Result<(), Halt> {
        if self.w.jobs.len() == self.w.jobs.capacity() {
            let held = self.held();
            grow(&mut self.w.jobs, 1, held, self.budget)?;
        }
        self.w.jobs.push(job);
        Ok(())
    }

    fn done(&mut self, item: CompileItem) -> Result<(), Halt> {
        if self.w.done.len() == self.w.done.capacity() {
            let held = self.held();
            grow(&mut self.w.done, 1, held, self.budget)?;
        }
        self.w.done.push(item);
        Ok(())
    }

    /// Room for `n` more entries of `lists` and `bodies`-like vectors.
    fn reserve_lists(&mut self, n: usize) -> Result<(), Halt> {
        if self.c.lists.capacity() - self.c.lists.len() < n {
            let held = self.held();
            grow(&mut self.c.lists, n, held, self.budget)?;
        }
        Ok(())
    }

    /// Code for an item, emitting an atom that was not taken in.
    fn code(&mut self, item: CompileItem) -> Result<CodeId, Halt> {
        match item {
            CompileItem::Code(id) => Ok(id),
            CompileItem::Atom(atom) => self.emit(Instr::Atom(atom), NONE),
        }
    }

    /// Compile the body at `node`, `depth` binders into its function: its
    /// code and its frame's size.
    fn body(&mut self, node: Id, depth: u32) -> Result<(CodeId, u32), Halt> {
        self.max_depth = depth;
        self.job(CompileJob::Visit {
            node,
            depth,
            tail: true,
        })?;
        while let Some(job) = self.w.jobs.pop() {
            match job {
                CompileJob::Visit { node, depth, tail } => self.visit(node, depth, tail)?,
                CompileJob::Build { node, depth } => self.build(node, depth)?,
                CompileJob::Spine { len, tail, node } => self.spine(len, tail, node)?,
            }
        }
        let item = self.w.done.pop().ok_or_else(broken)?;
        let id = self.code(item)?;
        Ok((id, self.max_depth))
    }

    fn visit(&mut self, id: Id, depth: u32, tail: bool) -> Result<(), Halt> {
        self.budget.work(1)?;
        self.max_depth = self.max_depth.max(depth);
        let image = self.image;
        let node = *image.nodes.get(id as usize).ok_or_else(broken)?;
        let build = CompileJob::Build { node: id, depth };
        let atom = match node {
            INode::Var { index, slot } => {
                if index < depth {
                    Atom::Local(depth - 1 - index)
                } else if slot != LOCAL && slot < self.captured {
                    Atom::Free(slot)
                } else {
                    return Err(broken());
                }
            }
            INode::Int(n) => match i32::try_from(n) {
                Ok(small) => Atom::Int(small),
                Err(_) => {
                    let held = self.held();
                    grow(&mut self.c.ints, 1, held, self.budget)?;
                    self.c.ints.push(n);
                    Atom::BigInt((self.c.ints.len() - 1) as u32)
                }
            },
            INode::Bool(b) => Atom::Bool(b),
            INode::Str(s) => Atom::Lit(s),
            INode::Con(tag, _, 0) => Atom::Tag(tag),
            INode::Con(..) if image.is_data(id) => Atom::Data(id),
            INode::Lam { func, pos: 0, .. } | INode::RecLam { func, .. } => {
                let code = self.closure(func, depth)?;
                return self.done(CompileItem::Code(code));
            }
            INode::Lam { .. } => return Err(broken()),
            INode::App(..) => return self.visit_spine(id, depth, tail),
            INode::Let(bound, body) => {
                self.job(build)?;
                self.job(CompileJob::Visit {
                    node: body,
                    depth: depth.saturating_add(1),
                    tail,
                })?;
                return self.job(CompileJob::Visit {
                    node: bound,
                    depth,
                    tail: false,
                });
            }
            INode::If(condition, yes, no) => {
                self.job(build)?;
                self.job(CompileJob::Visit {
                    node: no,
                    depth,
                    tail,
                })?;
                self.job(CompileJob::Visit {
                    node: yes,
                    depth,
                    tail,
                })?;
                return self.job(CompileJob::Visit {
                    node: condition,
                    depth,
                    tail: false,
                });
            }
            INode::Prim(op, start) => {
                self.job(build)?;
                let operands = image
                    .lists
                    .get(start as usize..start as usize + op.arity())
                    .ok_or_else(broken)?;
                for &o in operands.iter().rev() {
                    self.job(CompileJob::Visit {
                        node: o,
                        depth,
                        tail: false,
                    })?;
                }
                return Ok(());
            }
            INode::Con(_, start, len) => {
                self.job(build)?;
                self.budget.work(u64::from(len))?;
                let fields = image
                    .lists
                    .get(start as usize..(start + len) as usize)
                    .ok_or_else(broken)?;
                for &f in fields.iter().rev() {
                    self.job(CompileJob::Visit {
                        node: f,
                        depth,
                        tail: false,
                    })?;
                }
                return Ok(());
            }
            INode::Case(scrutinee, c) => {
                self.job(build)?;
                let case = *image.cases.get(c as usize).ok_or_else(broken)?;
                if case.default != NONE {
                    self.job(CompileJob::Visit {
                        node: case.default,
                        depth,
                        tail,
                    })?;
                }
                let arms = image
                    .arms
                    .get(case.arms as usize..(case.arms + case.len) as usize)
                    .ok_or_else(broken)?;
                self.budget.work(u64::from(case.len))?;
                for arm in arms.iter().rev() {
                    let depth = depth.saturating_add(arm.arity);
                    self.job(CompileJob::Visit {
                        node: arm.body,
                        depth,
                        tail,
                    })?;
                }
                return self.job(CompileJob::Visit {
                    node: scrutinee,
                    depth,
                    tail: false,
                });
            }
        };
        self.done(CompileItem::Atom(atom))
    }

    /// An application spine `h a₁ … aₙ`: its head and arguments are
    /// compiled in order, then built by one [`CompileJob::Spine`].
    fn visit_spine(&mut self, id: Id, depth: u32, tail: bool) -> Result<(), Halt> {
        let image = self.image;
        let mut len = 0u32;
        let mut head = id;
        while let Some(&INode::App(f, _)) = image.nodes.get(head as usize) {
            len += 1;
            head = f;
        }
        self.budget.work(u64::from(len))?;
        self.job(CompileJob::Spine {
            len,
            tail,
            node: id,
        })?;
        if self.w.jobs.capacity() - self.w.jobs.len() < len as usize + 1 {
            let held = self.held();
            grow(&mut self.w.jobs, len as usize + 1, held, self.budget)?;
        }
        let mut at = id;
        while let Some(&INode::App(f, a)) = image.nodes.get(at as usize) {
            self.w.jobs.push(CompileJob::Visit {
                node: a,
                depth,
                tail: false,
            });
            at = f;
        }
        self.w.jobs.push(CompileJob::Visit {
            node: head,
            depth,
            tail: false,
        });
        Ok(())
    }

    /// The application of `function` to `argument`, image node `node`, with
    /// the shortcuts for atoms.
    fn app(
        &mut self,
        function: CompileItem,
        argument: CompileItem,
        tail: bool,
        node: Id,
    ) -> Result<CodeId, Halt> {
        let instr = match (function, argument) {
            (CompileItem::Atom(function), CompileItem::Atom(argument)) => Instr::AppAtoms {
                function,
                argument,
                tail,
            },
            (CompileItem::Atom(function), CompileItem::Code(argument)) => Instr::AppAtomFunction {
                function,
                argument,
                tail,
            },
            (CompileItem::Code(function), CompileItem::Atom(argument)) => Instr::AppAtomArgument {
                function,
                argument,
                tail,
            },
            (CompileItem::Code(function), CompileItem::Code(argument)) => Instr::App {
                function,
                argument,
                tail,
            },
        };
        self.emit(instr, node)
    }

    /// Build a spine of `len` arguments, outermost application `node`,
    /// from its compiled head and arguments (on top of `done`).
    fn spine(&mut self, len: u32, tail: bool, node: Id) -> Result<(), Halt> {
        // The applications, innermost (`h a₁`) first, counted while held.
        let held = self.held().saturating_add(len as usize * size_of::<Id>());
        self.budget.check_memory(held)?;
        let mut apps: Vec<Id> = Vec::with_capacity(len as usize);
        let mut at_node = node;
        while let Some(&INode::App(f, _)) = self.image.nodes.get(at_node as usize) {
            apps.push(at_node);
            at_node = f;
        }
        apps.reverse();
        let app_node = |k: u32| apps.get(k as usize).copied().unwrap_or(NONE);
        let at = self
            .w
            .done
            .len()
            .checked_sub(len as usize + 1)
            .ok_or_else(broken)?;
        let arg = |w: &Workspace, k: u32| w.done[at + 1 + k as usize];
        let head = self.w.done[at];
        let mut next = 0;
        let mut function = head;
        if let CompileItem::Atom(atom @ (Atom::Local(_) | Atom::Free(_))) = head {
            if len >= 2 {
                let m = len.min(MAX_CHAIN);
                let mut fallback = head;
                for k in 0..m {
                    let a = arg(self.w, k);
                    fallback = CompileItem::Code(self.app(
                        fallback,
                        a,
                        tail && k + 1 == len,
                        app_node(k),
                    )?);
                }
                self.reserve_lists(m as usize)?;
                let start = self.c.lists.len() as u32;
                for k in 0..m {
                    let a = arg(self.w, k);
                    let id = self.code(a)?;
                    self.c.lists.push(id);
                }
                let CompileItem::Code(fallback) = fallback else {
                    return Err(broken());
                };
                let instr = Instr::AppN {
                    function: atom,
                    args: Span { start, len: m },
                    tail: tail && m == len,
                    fallback,
                };
                function = CompileItem::Code(self.emit(instr, app_node(m - 1))?);
                next = m;
            }
        }
        for k in next..len {
            let a = arg(self.w, k);
            function = CompileItem::Code(self.app(
                function,
                a,
                tail && k + 1 == len,
                app_node(k),
            )?);
        }
        self.w.done.truncate(at);
        self.done(function)
    }

    /// The top `n` items of `done` as a list of code.
    fn list(&mut self, n: usize) -> Result<Span, Halt> {
        let at = self.w.done.len().checked_sub(n).ok_or_else(broken)?;
        self.reserve_lists(n)?;
        let start = self.c.lists.len() as u32;
        for k in 0..n {
            let item = self.w.done[at + k];
            let id = self.code(item)?;
            self.c.lists.push(id);
        }
        self.w.done.truncate(at);
        Ok(Span {
            start,
            len: n as u32,
        })
    }

    fn pop(&mut self) -> Result<CompileItem, Halt> {
        self.w.done.pop().ok_or_else(broken)
    }

    fn pop_code(&mut self) -> Result<CodeId, Halt> {
        let item = self.pop()?;
        self.code(item)
    }

    fn build(&mut self, id: Id, depth: u32) -> Result<(), Halt> {
        let image = self.image;
        let instr = match image.node(id) {
            INode::Let(..) => {
                let body = self.pop_code()?;
                let bound = self.pop_code()?;
                Instr::Let {
                    bound,
                    slot: depth,
                    body,
                }
            }
            INode::If(..) => {
                let no = self.pop_code()?;
                let yes = self.pop_code()?;
                match self.pop()? {
                    CompileItem::Code(c) => match self.c.code.get(c as usize) {
                        Some(&Instr::Prim2 { op, a, b }) => Instr::IfPrim2 { op, a, b, yes, no },
                        _ => Instr::If {
                            condition: c,
                            yes,
                            no,
                        },
                    },
                    atom => {
                        let condition = self.code(atom)?;
                        Instr::If { condition, yes, no }
                    }
                }
            }
            INode::Prim(op, _) => {
                let n = op.arity();
                let at = self.w.done.len().checked_sub(n).ok_or_else(broken)?;
                let atom = |w: &Workspace, i: usize| match w.done.get(at + i) {
                    Some(&CompileItem::Atom(a)) => Some(a),
                    _ => None,
                };
                // Host calls take the general path, where their fuel and
                // data are handled.
                let host = matches!(op, Prim::Host(_));
                match (n, atom(self.w, 0), atom(self.w, 1)) {
                    (1, Some(a), _) if !host => {
                        self.w.done.truncate(at);
                        Instr::Prim1 { op, a }
                    }
                    (2, Some(a), Some(b)) if !host => {
                        self.w.done.truncate(at);
                        Instr::Prim2 { op, a, b }
                    }
                    _ => Instr::Prim {
                        op,
                        operands: self.list(n)?,
                    },
                }
            }
            INode::Con(tag, _, len) => Instr::Con {
                tag,
                fields: self.list(len as usize)?,
            },
            INode::Case(_, c) => {
                let case = *image.cases.get(c as usize).ok_or_else(broken)?;
                let default = if case.default != NONE {
                    self.pop_code()?
                } else {
                    NONE
                };
                let n = case.len as usize;
                let at = self.w.done.len().checked_sub(n).ok_or_else(broken)?;
                if self.c.bodies.capacity() - self.c.bodies.len() < n {
                    let held = self.held();
                    grow(&mut self.c.bodies, n, held, self.budget)?;
                }
                let bodies = self.c.bodies.len() as u32;
                for k in 0..n {
                    let item = self.w.done[at + k];
                    let id = self.code(item)?;
                    self.c.bodies.push(id);
                }
                self.w.done.truncate(at);
                let scrutinee = self.pop_code()?;
                Instr::Case {
                    scrutinee,
                    case: c,
                    bodies,
                    default,
                    slot: depth,
                }
            }
            _ => return Err(broken()),
        };
        let code = self.emit(instr, id)?;
        self.done(CompileItem::Code(code))
    }

    /// A closure of function `func` made at `depth`: its fetches, from the
    /// function's capture runs, and its body queued if it is new.
    fn closure(&mut self, func: u32, depth: u32) -> Result<CodeId, Halt> {
        let image = self.image;
        let f = *image.funcs.get(func as usize).ok_or_else(broken)?;
        let runs = image
            .runs
            .get(f.runs as usize..(f.runs + f.runs_len) as usize)
            .ok_or_else(broken)?;
        if self.c.fetches.capacity() - self.c.fetches.len() < runs.len() {
            let held = self.held();
            grow(&mut self.c.fetches, runs.len(), held, self.budget)?;
        }
        let start = self.c.fetches.len() as u32;
        for run in runs {
            let fetch = match *run {
                Capture::Free { slot, len } => {
                    if slot
                        .checked_add(len)
                        .map_or(true, |end| end > self.captured)
                    {
                        return Err(broken());
                    }
                    Fetch {
                        frame: false,
                        start: slot,
                        len,
                    }
                }
                Capture::Local { index, len } => {
                    let first = depth
                        .checked_sub(index.saturating_add(1))
                        .ok_or_else(broken)?;
                    if first.checked_add(len).map_or(true, |end| end > depth) {
                        return Err(broken());
                    }
                    Fetch {
                        frame: true,
                        start: first,
                        len,
                    }
                }
            };
            self.c.fetches.push(fetch);
        }
        let entry = self.c.funs.get_mut(func as usize).ok_or_else(broken)?;
        if entry.body == NONE {
            entry.body = QUEUED;
            if self.w.pending.len() == self.w.pending.capacity() {
                let held = self.held();
                grow(&mut self.w.pending, 1, held, self.budget)?;
            }
            self.w.pending.push(func);
        }
        self.emit(
            Instr::Closure {
                func,
                fetch: Span {
                    start,
                    len: runs.len() as u32,
                },
            },
            f.head,
        )
    }
}
