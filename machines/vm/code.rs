//! The vm's code and its compiler: the program image to register bytecode,
//! one stretch of code per curried function and one for the top level, cut
//! into metered blocks.
//!
//! **Registers.** A function's frame is a window of the register stack:
//! its parameters, then its `let`-bound values, case fields and
//! temporaries (a `μλ`'s self is the current closure, [`Src::me`]), allocated as a stack while its body is compiled
//! (a construct's registers are free again once its value is made). A
//! variable is resolved at compile time to a register, one of the values
//! its closure captured, or a constant: an operand ([`Src`]) that costs
//! nothing to read. A `let` of an operand binds the operand itself.
//!
//! **Metered blocks.** Code is cut into blocks, each opened by a
//! [`Instr::Meter`] that pays the fuel of every contraction in it and
//! counts them, per rule, at once (the metered blocks of gas-metering
//! instrumentation). A block runs straight to its last instruction, which
//! is the only one that may leave it: a call, a branch, a return. Every
//! place control arrives at other than from the instruction before it (a
//! function's entry, a branch's target, the instruction after a call) ends
//! the block before it, and the first instruction after it that contracts
//! or may fail opens the next (moves, jumps and returns need none). Host
//! calls pay for themselves and stand alone between blocks.
//! The interpreter runs a block per contraction instead when the fuel left
//! in its slice is short of the block's, or when an instruction of it cannot
//! take its fast path; [`Instr::contractions`] is what each instruction's
//! share of its block is.
//!
//! The work is linear in the image: each node is visited once by an
//! explicit job stack (no native recursion on the program's depth), each
//! function compiled once. The code's vectors grow within the memory limit
//! of the run that compiles, and every node visited is fuel-free work (a
//! cancelled run stops here too).

use std::mem::size_of;

use crate::budget::{grow, Budget, Halt};
use crate::image::analysis::MAX_CHAIN;
use crate::image::{Capture, INode, Id, Image, TagId, LOCAL, NONE};
use crate::prim::Prim;
use crate::Rule;

/// A register: a slot of the current frame.
pub(super) type Reg = u32;

/// An operand, read without evaluation, packed in 32 bits: its kind in the
/// top two, its register, captured value, small integer or constant in the
/// rest ([`Src::get`] unpacks it).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) struct Src(u32);

/// An operand unpacked.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Operand {
    /// A register of the current frame.
    Reg(Reg),
    /// A value the current closure captured (or, [`PAYLOAD`], the closure
    /// itself: [`Src::me`]).
    Cap(u32),
    /// An integer of 30 bits.
    Int(i32),
    /// Any other literal: an index into [`Code::konsts`].
    Konst(u32),
}

/// The bits of a packed operand that hold its payload.
pub(super) const PAYLOAD: u32 = (1 << 30) - 1;

/// The most registers a frame may have: past it the operands could not
/// name them, and the compile stops at the memory limit.
const MAX_REGS: u32 = PAYLOAD;

impl Src {
    #[inline(always)]
    pub(super) fn reg(r: Reg) -> Src {
        Src(r & PAYLOAD)
    }

    fn cap(slot: u32) -> Src {
        Src(1 << 30 | (slot & PAYLOAD))
    }

    /// The current closure itself: a `μλ`'s self (the one captured slot no
    /// closure has).
    pub(super) fn me() -> Src {
        Src(1 << 30 | PAYLOAD)
    }

    /// `n` as an operand, if it fits in 30 bits.
    fn int(n: i64) -> Option<Src> {
        (-(1 << 29)..1 << 29)
            .contains(&n)
            .then_some(Src(2 << 30 | (n as u32 & PAYLOAD)))
    }

    fn konst(k: u32) -> Src {
        Src(3 << 30 | (k & PAYLOAD))
    }

    /// The operand unpacked.
    #[inline(always)]
    pub(super) fn get(self) -> Operand {
        match self.0 >> 30 {
            0 => Operand::Reg(self.0),
            1 => Operand::Cap(self.0 & PAYLOAD),
            2 => Operand::Int(((self.0 << 2) as i32) >> 2),
            _ => Operand::Konst(self.0 & PAYLOAD),
        }
    }
}

/// A literal operand other than a small integer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Konst {
    Int(i64),
    Bool(bool),
    /// A string literal of the program.
    Lit(u32),
    /// A constructor with no fields.
    Tag(TagId),
    /// Closed constructor data of the program, read in place.
    Data(Id),
}

/// A primitive of [`Prim::ALL`], by its place there.
pub(super) type Op = u8;

/// The place of built-in primitive `op` in [`Prim::ALL`].
fn op_index(op: Prim) -> Option<Op> {
    Prim::ALL.iter().position(|&p| p == op).map(|i| i as Op)
}

/// The primitive at place `op` of [`Prim::ALL`].
#[inline(always)]
pub(super) fn op_prim(op: Op) -> Prim {
    Prim::ALL.get(op as usize).copied().unwrap_or(Prim::Add)
}

/// Per-rule contraction counts of a block, in [`Rule`] order.
pub(super) type Rules = [u8; 6];

/// One instruction, sixteen bytes. Registers are the current frame's;
/// `dst` receives the value made; a list of operands is where it starts in
/// [`Code::srcs`] (its length is known where it is read). The node an
/// instruction was compiled from (where a run that stops at it stopped) is
/// in [`Code::origin`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) enum Instr {
    /// Open a block: pay `cost` units and count `rules`, or run the block
    /// per contraction.
    Meter { cost: u32, rules: Rules },
    Move { dst: Reg, src: Src },
    /// A contraction that does nothing but count: a `let` of a value, or
    /// an application of a saturated spine before its last.
    Count { rule: Rule },
    Prim1 { op: Op, dst: Reg, a: Src },
    Prim2 { op: Op, dst: Reg, a: Src, b: Src },
    /// Arithmetic with a constant operand.
    Prim2Imm { op: Op, dst: Reg, a: Reg, imm: i32 },
    /// Host function [`Code::hosts`] `host` on the operands from `args`
    /// (as many as it takes); it pays for itself.
    Host { host: u32, dst: Reg, args: u32 },
    /// `if`: on to the next instruction, or to `no`.
    Branch { cond: Src, no: u32 },
    /// Compare and branch: the comparison's `prim` and the `if`'s
    /// contractions, on to the instruction after next or to `no`. Per
    /// contraction, it leaves the comparison in the register the
    /// [`Instr::Branch`] after it reads, which goes on from there.
    Test { op: Op, a: Src, b: Src, no: u32 },
    /// [`Instr::Test`] of a register against a constant.
    TestImm { op: Op, a: Reg, imm: i32, no: u32 },
    Jump { to: u32 },
    /// Make a closure of function `func`, capturing the operands from
    /// `captures` (as many as it captures).
    Closure { dst: Reg, func: u32, captures: u32 },
    /// Make a constructor of `tag` with the operands from `fields` (its
    /// arity's worth).
    Con { dst: Reg, tag: TagId, fields: u32 },
    /// A case: [`Code::targets`] at `targets` holds its index in
    /// [`Image::cases`], then its arms' code in the image's order, then
    /// the default arm's (or [`NONE`]); the fields go to registers
    /// `fields..`.
    Case { scrutinee: Src, targets: u32, fields: Reg },
    /// An application of `f` to `a`: its value to `dst`.
    Apply { dst: Reg, f: Src, a: Src },
    /// An application in tail position.
    TailApply { f: Src, a: Src },
    /// `f a₁ … aₘ` on the operands from `args`: entered whole when `f` is a
    /// closure that exactly `m` more arguments saturate; else (and per
    /// contraction) the applications one by one, which follow it, a block
    /// each (so the code after the call starts `2m + 1` on).
    CallN { dst: Reg, f: Src, args: u32, m: u8 },
    /// [`Instr::CallN`] in tail position.
    TailCallN { f: Src, args: u32, m: u8 },
    /// The last application of a spine of `m` on the current function's own
    /// self (saturated by construction): enter the body with the operands
    /// from `args`.
    SelfCall { dst: Reg, args: u32, m: u8, entry: u32 },
    /// [`Instr::SelfCall`] in tail position: a jump to the body.
    SelfTail { args: u32, m: u8, entry: u32 },
    /// The start of `f a₁ … aₘ` with arguments still to evaluate: `acc`
    /// takes `f`, and `acc + 1` whether `f` is a closure that exactly `m`
    /// more arguments saturate (then the applications before the last only
    /// count, and the last enters the body with all of them).
    SpineStart { f: Src, m: u32, acc: Reg },
    /// Application `k` (from 0) of a spine, not its last.
    SpineStep { acc: Reg, arg: Src, k: u32 },
    /// The last application of a spine of `m`, on the operands from `args`
    /// (all its arguments); `dst` [`NONE`]: in tail position.
    SpineLast { acc: Reg, args: u32, m: u8, dst: Reg },
    Return { src: Src },
    /// The bottom of the run: apply the value in register 0 to the next
    /// program argument, or end with it.
    Finish,
}

impl Instr {
    /// The contractions this instruction makes within its block when it
    /// takes its fast path, as (rule, how many) (`Count` of `None`: none).
    /// A spine's or call's first application is counted as `beta`; the
    /// interpreter moves it to `beta_rec` when the closure says so.
    #[inline]
    pub(super) fn contractions(&self) -> (Rule, u32) {
        match *self {
            Instr::Count { rule } => (rule, 1),
            Instr::Prim1 { .. } | Instr::Prim2 { .. } | Instr::Prim2Imm { .. } => (Rule::Prim, 1),
            // The comparison; its `if` is the `Branch` after it.
            Instr::Test { .. } | Instr::TestImm { .. } => (Rule::Prim, 1),
            Instr::Branch { .. } => (Rule::If, 1),
            Instr::Case { .. } => (Rule::Case, 1),
            Instr::Apply { .. } | Instr::TailApply { .. } => (Rule::Beta, 1),
            Instr::CallN { m, .. } | Instr::TailCallN { m, .. } => (Rule::Beta, u32::from(m)),
            Instr::SelfCall { m, .. } | Instr::SelfTail { m, .. } => {
                // The last of the spine: `beta_rec` when it is the only one.
                if m == 1 {
                    (Rule::BetaRec, 1)
                } else {
                    (Rule::Beta, 1)
                }
            }
            Instr::SpineStep { .. } | Instr::SpineLast { .. } => (Rule::Beta, 1),
            _ => (Rule::Beta, 0),
        }
    }
}

/// A compiled curried function (an entry of [`Image::funcs`]).
#[derive(Clone, Copy, Debug, Default)]
pub(super) struct Function {
    /// Where its body's code starts ([`NONE`] until compiled).
    pub(super) entry: u32,
    /// Registers of its frame.
    pub(super) frame: u32,
    pub(super) params: u32,
    pub(super) rec: bool,
    /// How many values its closures capture.
    pub(super) captured: u32,
}

/// A program compiled for the vm, kept with the program and shared by every
/// run of it.
#[derive(Debug, Default)]
pub(crate) struct Code {
    pub(super) code: Vec<Instr>,
    /// Per instruction, the image node it was compiled from ([`NONE`] for
    /// none).
    pub(super) origin: Vec<Id>,
    pub(super) srcs: Vec<Src>,
    pub(super) konsts: Vec<Konst>,
    /// The host functions called, by [`Instr::Host`]'s `host`.
    pub(super) hosts: Vec<crate::prim::HostId>,
    /// Per case instruction, its case and its arms' code.
    pub(super) targets: Vec<u32>,
    /// By function index of the image.
    pub(super) funcs: Vec<Function>,
    /// Where the top level's code starts, and its frame.
    pub(super) root: u32,
    pub(super) root_frame: u32,
}

/// The `acc` of a [`Job::Step`] of a spine on the function's own self.
const OWN: Reg = NONE;

/// The `acc` of a [`Job::Step`] of a single application whose argument is
/// evaluated first.
const ONE: Reg = NONE - 1;

/// The pc of the [`Instr::Finish`] every run returns to.
pub(super) const FINISH: u32 = 0;

impl Code {
    /// Bytes of compiled code, as the memory limit counts them.
    fn bytes(&self) -> usize {
        self.code.capacity() * size_of::<Instr>()
            + self.origin.capacity() * size_of::<Id>()
            + self.srcs.capacity() * size_of::<Src>()
            + self.konsts.capacity() * size_of::<Konst>()
            + self.targets.capacity() * size_of::<u32>()
            + self.hosts.capacity() * size_of::<crate::prim::HostId>()
            + self.funcs.capacity() * size_of::<Function>()
    }
}

/// Where a construct's value goes: a register, or back to the caller.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Dest {
    Reg(Reg),
    Tail,
}

/// The compiler's work: a node to compile into a destination, or what to
/// do once the parts compiled before it are in place. A construct waits as
/// one job that moves through its stages (so a deep nesting holds one job
/// per level).
#[derive(Clone, Copy, Debug)]
enum Job {
    Eval { node: Id, dest: Dest },
    /// Emit the primitive, host call or constructor `node` on the operands
    /// on top of the pending operands, from `at`.
    Emit { node: Id, dst: Reg, at: u32, mark: Reg },
    /// Return the value in a register.
    Return { reg: Reg },
    /// A `let`: its value is the operand on top of the pending ones (stage
    /// 0: bind it, count the `let`, compile the body; 1: unbind).
    Let { node: Id, body: Id, dest: Dest, mark: Reg, stage: u8 },
    /// An `if` (stage 0: branch on the pending operand; 1: the second
    /// branch; 2: the join).
    If { node: Id, dest: Dest, mark: Reg, stage: u8 },
    /// A case: at arm `k` (or, [`NONE`], selecting on the pending operand),
    /// its fields in registers from `fields`, free registers from `bound`.
    Case { node: Id, dest: Dest, mark: Reg, fields: Reg, k: u32 },
    /// Forget the `n` innermost binders and free registers down to `mark`.
    Unbind { n: u32, mark: Reg },
    /// Application `k` of the spine whose registers start at `acc`.
    Step { app: Id, k: u32, acc: Reg, at: u32, m: u32, dest: Dest },
    /// The spine's head was evaluated into `head`: go on as for an operand.
    Head { node: Id, dest: Dest, head: Reg },
}

/// The compiler's state while it compiles one program.
struct Compiler<'i, 'b> {
    image: &'i Image,
    code: Code,
    budget: &'b mut Budget,
    jobs: Vec<Job>,
    /// Operands waiting for the instruction that takes them.
    pending: Vec<Src>,
    /// Instructions waiting for a jump target.
    labels: Vec<u32>,
    /// The current function's binders, innermost last, as operands.
    binders: Vec<Src>,
    /// The next free register, and one past the highest used.
    next: Reg,
    frame: Reg,
    /// The current function's parameters, if it is a `μλ` (whose self is
    /// [`Src::me`]).
    me: Option<u32>,
    /// The current block's [`Instr::Meter`], while one is open.
    block: Option<usize>,
    /// Where the current function's code starts.
    entry: u32,
    /// Functions whose closures are made, to compile.
    queue: Vec<u32>,
}

/// An image the analysis should not have produced: a bug in orrery,
/// reported, never a panic.
#[cold]
pub(super) fn broken(what: &str) -> Halt {
    Halt::fault(format!("in the vm: {what}"))
}

/// Compile `image` under `budget`.
pub(super) fn compile(image: &Image, budget: &mut Budget) -> Result<Code, Halt> {
    let mut c = Compiler {
        image,
        code: Code::default(),
        budget,
        jobs: Vec::new(),
        pending: Vec::new(),
        labels: Vec::new(),
        binders: Vec::new(),
        next: 0,
        frame: 0,
        me: None,
        block: None,
        entry: 0,
        queue: Vec::new(),
    };
    c.code.funcs = vec![
        Function {
            entry: NONE,
            ..Function::default()
        };
        image.funcs.len()
    ];
    c.room(image.funcs.len() * size_of::<Function>())?;
    // pc 0: where every run ends up.
    c.emit(Instr::Finish, NONE)?;
    c.code.root = c.code.code.len() as u32;
    c.body(image.root, 0)?;
    c.code.root_frame = c.frame;
    while let Some(func) = c.queue.pop() {
        let Some(f) = image.funcs.get(func as usize).copied() else {
            return Err(broken("a closure of no function"));
        };
        // A `μλ`'s self is the current closure, read as an operand of its
        // own; the parameters are the first registers.
        let depth = f.params;
        c.binders.clear();
        if f.rec {
            c.binders.push(Src::me());
        }
        c.binders.extend((0..depth).map(Src::reg));
        c.me = f.rec.then_some(f.params);
        let entry = c.code.code.len() as u32;
        c.body(f.body, depth)?;
        c.code.funcs[func as usize] = Function {
            entry,
            frame: c.frame,
            params: f.params,
            rec: f.rec,
            captured: f.captured,
        };
    }
    let mut code = c.code;
    code.code.shrink_to_fit();
    code.origin.shrink_to_fit();
    code.srcs.shrink_to_fit();
    Ok(code)
}

impl Compiler<'_, '_> {
    /// Room for `extra` more bytes of code or work lists.
    fn room(&mut self, extra: usize) -> Result<(), Halt> {
        let held = self.held().saturating_add(extra);
        self.budget.check_memory(held)
    }

    fn held(&self) -> usize {
        self.code.bytes()
            + self.jobs.capacity() * size_of::<Job>()
            + (self.pending.capacity() + self.binders.capacity()) * size_of::<Src>()
            + (self.labels.capacity() + self.queue.capacity()) * size_of::<u32>()
    }

    fn push_job(&mut self, job: Job) -> Result<(), Halt> {
        let held = self.held();
        push_within(&mut self.jobs, job, held, self.budget)
    }

    fn push_pending(&mut self, src: Src) -> Result<(), Halt> {
        let held = self.held();
        push_within(&mut self.pending, src, held, self.budget)
    }

    fn push_label(&mut self, pc: u32) -> Result<(), Halt> {
        let held = self.held();
        push_within(&mut self.labels, pc, held, self.budget)
    }

    fn push_binder(&mut self, src: Src) -> Result<(), Halt> {
        let held = self.held();
        push_within(&mut self.binders, src, held, self.budget)
    }

    /// Emit `instr`, compiled from `node`; an instruction that makes a
    /// contraction joins the open block (opening one if none is).
    fn emit(&mut self, instr: Instr, node: Id) -> Result<u32, Halt> {
        let (rule, n) = instr.contractions();
        // Moves, jumps and returns neither contract nor fail, and need no
        // block; host calls pay for themselves.
        let free = matches!(
            instr,
            Instr::Move { .. }
                | Instr::Jump { .. }
                | Instr::Return { .. }
                | Instr::Finish
                | Instr::Host { .. }
                | Instr::SpineStart { .. }
        );
        if self.block.is_none() && !free {
            self.open_block()?;
        }
        if n > 0 {
            self.add_to_block(rule, n)?;
        }
        self.push_instr(instr, node)
    }

    fn push_instr(&mut self, instr: Instr, node: Id) -> Result<u32, Halt> {
        let pc = self.code.code.len() as u32;
        let held = self.held();
        push_within(&mut self.code.code, instr, held, self.budget)?;
        let held = self.held();
        push_within(&mut self.code.origin, node, held, self.budget)?;
        Ok(pc)
    }

    /// Open a block here.
    fn open_block(&mut self) -> Result<(), Halt> {
        let pc = self.push_instr(
            Instr::Meter {
                cost: 0,
                rules: [0; 6],
            },
            NONE,
        )?;
        self.block = Some(pc as usize);
        Ok(())
    }

    /// Count `n` contractions of `rule` in the open block, opening a new one
    /// where a count would not fit its instruction.
    fn add_to_block(&mut self, rule: Rule, n: u32) -> Result<(), Halt> {
        let fits = |c: &Code, at: usize| match c.code.get(at) {
            Some(Instr::Meter { rules, .. }) => u32::from(rules[rule as usize]) + n <= 255,
            _ => false,
        };
        match self.block {
            Some(at) if fits(&self.code, at) => {}
            _ => self.open_block()?,
        }
        if let Some(at) = self.block {
            if let Some(Instr::Meter { cost, rules }) = self.code.code.get_mut(at) {
                *cost += n;
                rules[rule as usize] += n as u8;
            }
        }
        Ok(())
    }

    /// End the open block: control leaves it here.
    fn close_block(&mut self) {
        self.block = None;
    }

    /// A place control arrives at by a jump or a return: the block before
    /// it ends, and the next instruction that needs one opens a new one.
    fn label(&mut self) -> Result<u32, Halt> {
        self.close_block();
        Ok(self.code.code.len() as u32)
    }

    /// A fresh register.
    fn alloc(&mut self) -> Reg {
        let r = self.next;
        self.next += 1;
        self.frame = self.frame.max(self.next);
        r
    }

    /// `n` fresh consecutive registers, the first.
    fn alloc_n(&mut self, n: u32) -> Reg {
        let r = self.next;
        self.next += n;
        self.frame = self.frame.max(self.next);
        r
    }

    /// Compile a function body (or the top level) whose first `depth`
    /// registers are bound.
    fn body(&mut self, body: Id, depth: u32) -> Result<(), Halt> {
        self.next = depth;
        self.frame = depth;
        self.entry = self.code.code.len() as u32;
        self.close_block();
        self.push_job(Job::Eval {
            node: body,
            dest: Dest::Tail,
        })?;
        while let Some(job) = self.jobs.pop() {
            self.budget.work(1)?;
            self.step(job)?;
        }
        self.close_block();
        if self.frame >= MAX_REGS {
            return Err(Halt::Memory);
        }
        Ok(())
    }

    /// The operand of `node`, if it is one: a variable, a literal, a
    /// constructor without fields, or closed constructor data.
    fn atom(&mut self, node: Id) -> Result<Option<Src>, Halt> {
        let image = self.image;
        let konst = match image.node(node) {
            INode::Var { index, slot } => {
                if slot != LOCAL {
                    return Ok(Some(Src::cap(slot)));
                }
                let at = self.binders.len().checked_sub(1 + index as usize);
                return match at.and_then(|at| self.binders.get(at)) {
                    Some(&src) => Ok(Some(src)),
                    None => Err(broken("a variable with no binder")),
                };
            }
            INode::Int(n) => {
                if let Some(small) = Src::int(n) {
                    return Ok(Some(small));
                }
                Konst::Int(n)
            }
            INode::Bool(b) => Konst::Bool(b),
            INode::Str(s) => Konst::Lit(s),
            INode::Con(tag, _, 0) => Konst::Tag(tag),
            INode::Con(..) if image.is_data(node) => Konst::Data(node),
            _ => return Ok(None),
        };
        let held = self.held();
        push_within(&mut self.code.konsts, konst, held, self.budget)?;
        Ok(Some(Src::konst(self.code.konsts.len() as u32 - 1)))
    }

    /// `node` as an operand: itself if it is one, else a fresh register it
    /// is compiled into (the job pushed, to run before the caller's).
    fn operand(&mut self, node: Id, later: &mut Vec<Job>) -> Result<Src, Halt> {
        if let Some(src) = self.atom(node)? {
            return Ok(src);
        }
        let r = self.alloc();
        later.push(Job::Eval {
            node,
            dest: Dest::Reg(r),
        });
        Ok(Src::reg(r))
    }

    /// [`Compiler::operand`], compiled into `dst` if `reuse` still holds it
    /// free (the first operand that needs code takes the destination, which
    /// is not written before the operation it is for).
    fn operand_into(&mut self, node: Id, reuse: &mut Option<Reg>, later: &mut Vec<Job>) -> Result<Src, Halt> {
        if let Some(src) = self.atom(node)? {
            return Ok(src);
        }
        let r = match reuse.take() {
            Some(r) => r,
            None => self.alloc(),
        };
        later.push(Job::Eval {
            node,
            dest: Dest::Reg(r),
        });
        Ok(Src::reg(r))
    }

    /// Push `later` so that its first job runs first.
    fn push_in_order(&mut self, later: Vec<Job>) -> Result<(), Halt> {
        for job in later.into_iter().rev() {
            self.push_job(job)?;
        }
        Ok(())
    }

    /// Move the pending operands from `at` into the code's lists: where
    /// they start there.
    fn list_from(&mut self, at: u32) -> Result<u32, Halt> {
        let at = at as usize;
        let start = self.code.srcs.len() as u32;
        let n = self.pending.len().saturating_sub(at);
        let held = self.held();
        grow(&mut self.code.srcs, n, held, self.budget)?;
        self.code.srcs.extend(self.pending.drain(at..));
        Ok(start)
    }

    fn step(&mut self, job: Job) -> Result<(), Halt> {
        match job {
            Job::Eval { node, dest } => self.eval(node, dest),
            Job::Emit { node, dst, at, mark } => {
                self.emit_made(node, dst, at)?;
                // The operands' registers are free again.
                self.next = mark;
                Ok(())
            }
            Job::Return { reg } => {
                self.emit(Instr::Return { src: Src::reg(reg) }, NONE)?;
                self.close_block();
                Ok(())
            }
            Job::Let {
                node,
                body,
                dest,
                mark,
                stage,
            } => {
                if stage == 0 {
                    let src = self.pending.pop().ok_or_else(|| broken("a let of nothing"))?;
                    self.emit(Instr::Count { rule: Rule::Let }, node)?;
                    self.push_binder(src)?;
                    self.push_job(Job::Let {
                        node,
                        body,
                        dest,
                        mark,
                        stage: 1,
                    })?;
                    return self.push_job(Job::Eval { node: body, dest });
                }
                self.binders.pop();
                self.next = mark;
                Ok(())
            }
            Job::Unbind { n, mark } => {
                let keep = self.binders.len().saturating_sub(n as usize);
                self.binders.truncate(keep);
                self.next = mark;
                Ok(())
            }
            Job::If {
                node,
                dest,
                mark,
                stage,
            } => self.if_stage(node, dest, mark, stage),
            Job::Case {
                node,
                dest,
                mark,
                fields,
                k,
            } => self.case_stage(node, dest, mark, fields, k),
            Job::Step {
                app,
                k,
                acc,
                at,
                m,
                dest,
            } => self.spine_step(app, k, acc, at, m, dest),
            Job::Head { node, dest, head } => {
                self.push_pending(Src::reg(head))?;
                let m = spine_len(self.image, node);
                self.spine(node, dest, m)
            }
        }
    }

    /// Point the jump or branch at `pc` to `to` (a test's and the branch
    /// after it, which takes its place per contraction, both).
    fn patch(&mut self, pc: u32, to: u32) {
        let twin = match self.code.code.get_mut(pc as usize) {
            Some(Instr::Branch { no, .. }) => {
                *no = to;
                false
            }
            Some(Instr::Test { no, .. }) | Some(Instr::TestImm { no, .. }) => {
                *no = to;
                true
            }
            Some(Instr::Jump { to: t }) => {
                *t = to;
                false
            }
            _ => false,
        };
        if twin {
            if let Some(Instr::Branch { no, .. }) = self.code.code.get_mut(pc as usize + 1) {
                *no = to;
            }
        }
    }

    fn eval(&mut self, node: Id, dest: Dest) -> Result<(), Halt> {
        let image = self.image;
        let n = image.node(node);
        // Control constructs take their destination as it is; anything else
        // in tail position is made into a register and returned.
        let control = matches!(
            n,
            INode::App(..) | INode::Let(..) | INode::If(..) | INode::Case(..)
        );
        if let Some(src) = self.atom(node)? {
            match dest {
                Dest::Reg(dst) => self.emit(Instr::Move { dst, src }, node)?,
                Dest::Tail => {
                    let pc = self.emit(Instr::Return { src }, node)?;
                    self.close_block();
                    pc
                }
            };
            return Ok(());
        }
        let dst = match dest {
            Dest::Reg(r) => r,
            Dest::Tail if control => NONE,
            Dest::Tail => {
                let r = self.alloc();
                self.push_job(Job::Return { reg: r })?;
                r
            }
        };
        let mut later = Vec::new();
        match n {
            INode::Lam { func, pos: 0, .. } | INode::RecLam { func, .. } => {
                self.closure(func, dst, node)?;
            }
            INode::Lam { .. } => return Err(broken("a λ inside a chain, alone")),
            INode::Prim(..) | INode::Con(..) => {
                let operands = match n {
                    INode::Prim(op, start) => image.operands(op, start),
                    INode::Con(_, start, len) => image.list(start, len),
                    _ => &[],
                };
                let at = self.pending.len() as u32;
                let mark = self.next;
                let mut reuse = Some(dst);
                for &o in operands {
                    let src = self.operand_into(o, &mut reuse, &mut later)?;
                    self.push_pending(src)?;
                }
                self.push_job(Job::Emit { node, dst, at, mark })?;
                self.push_in_order(later)?;
            }
            INode::Let(bound, body) => {
                let mark = self.next;
                let job = Job::Let {
                    node,
                    body,
                    dest,
                    mark,
                    stage: 0,
                };
                match self.atom(bound)? {
                    Some(src) => {
                        self.push_pending(src)?;
                        self.push_job(job)?;
                    }
                    None => {
                        let r = self.alloc();
                        self.push_pending(Src::reg(r))?;
                        self.push_job(job)?;
                        self.push_job(Job::Eval {
                            node: bound,
                            dest: Dest::Reg(r),
                        })?;
                    }
                }
            }
            INode::If(c, yes, _) => {
                let mark = self.next;
                if self.test(c, node)? {
                    self.push_job(Job::If {
                        node,
                        dest,
                        mark,
                        stage: 1,
                    })?;
                    return self.push_job(Job::Eval { node: yes, dest });
                }
                let mut reuse = (dst != NONE).then_some(dst);
                let cond = self.operand_into(c, &mut reuse, &mut later)?;
                self.push_pending(cond)?;
                self.push_job(Job::If {
                    node,
                    dest,
                    mark,
                    stage: 0,
                })?;
                self.push_in_order(later)?;
            }
            INode::Case(scrutinee, case) => {
                let Some(info) = image.cases.get(case as usize).copied() else {
                    return Err(broken("a case of no case"));
                };
                let widest = image.case_arms(&info).iter().map(|a| a.arity).max().unwrap_or(0);
                let mark = self.next;
                let fields = self.alloc_n(widest);
                let mut reuse = (dst != NONE).then_some(dst);
                let src = self.operand_into(scrutinee, &mut reuse, &mut later)?;
                self.push_pending(src)?;
                self.push_job(Job::Case {
                    node,
                    dest,
                    mark,
                    fields,
                    k: NONE,
                })?;
                self.push_in_order(later)?;
            }
            INode::App(..) => {
                let m = spine_len(image, node);
                let head = spine_head(image, node, m);
                match self.atom(head)? {
                    Some(src) => {
                        self.push_pending(src)?;
                        self.spine(node, dest, m)?;
                    }
                    None => {
                        let r = self.alloc();
                        self.push_job(Job::Head { node, dest, head: r })?;
                        self.push_job(Job::Eval {
                            node: head,
                            dest: Dest::Reg(r),
                        })?;
                    }
                }
            }
            _ => return Err(broken("a node that is no term")),
        }
        Ok(())
    }

    /// Stage `stage` of the `if` `node` (see [`Job::If`]).
    fn if_stage(&mut self, node: Id, dest: Dest, mark: Reg, stage: u8) -> Result<(), Halt> {
        let INode::If(_, yes, no) = self.image.node(node) else {
            return Err(broken("an if of no if"));
        };
        let tail = dest == Dest::Tail;
        match stage {
            0 => {
                let cond = self.pending.pop().ok_or_else(|| broken("an if of nothing"))?;
                let pc = self.emit(Instr::Branch { cond, no: NONE }, node)?;
                self.close_block();
                // The condition's register is dead past the branch.
                self.next = mark;
                self.push_label(pc)?;
                self.label()?;
                self.push_job(Job::If {
                    node,
                    dest,
                    mark,
                    stage: 1,
                })?;
                self.push_job(Job::Eval { node: yes, dest })
            }
            1 => {
                let branch = self.labels.pop().ok_or_else(|| broken("an else with no if"))?;
                if !tail {
                    let jump = self.emit(Instr::Jump { to: NONE }, NONE)?;
                    self.push_label(jump)?;
                }
                let here = self.label()?;
                self.patch(branch, here);
                self.push_job(Job::If {
                    node,
                    dest,
                    mark,
                    stage: 2,
                })?;
                self.push_job(Job::Eval { node: no, dest })
            }
            _ => {
                if !tail {
                    let jump = self.labels.pop().ok_or_else(|| broken("a join with no jump"))?;
                    let here = self.label()?;
                    self.patch(jump, here);
                }
                self.next = mark;
                Ok(())
            }
        }
    }

    /// Arm `k` of the case `node` (see [`Job::Case`]): the selection, the
    /// end of the arm before, the start of this one, or the join.
    fn case_stage(&mut self, node: Id, dest: Dest, mark: Reg, fields: Reg, k: u32) -> Result<(), Halt> {
        let image = self.image;
        let INode::Case(_, case) = image.node(node) else {
            return Err(broken("a case of no case"));
        };
        let Some(info) = image.cases.get(case as usize).copied() else {
            return Err(broken("a case of no case"));
        };
        let arms = image.case_arms(&info);
        let tail = dest == Dest::Tail;
        let n = arms.len() as u32 + u32::from(info.default != NONE);
        let arm = |k: u32| match arms.get(k as usize) {
            Some(a) => (a.body, a.arity),
            None => (info.default, 0),
        };
        let widest = arms.iter().map(|a| a.arity).max().unwrap_or(0);
        let bound = fields + widest;
        if k == NONE {
            let scrutinee = self.pending.pop().ok_or_else(|| broken("a case of nothing"))?;
            self.select(node, scrutinee, fields)?;
            // The scrutinee's register is dead past the selection.
            self.next = bound;
            return self.push_job(Job::Case {
                node,
                dest,
                mark,
                fields,
                k: 0,
            });
        }
        if k > 0 {
            if !tail {
                let jump = self.emit(Instr::Jump { to: NONE }, NONE)?;
                // Under the case's own label.
                let case_pc = self.labels.pop().ok_or_else(|| broken("an arm with no case"))?;
                self.push_label(jump)?;
                self.push_label(case_pc)?;
            }
            self.close_block();
            let (_, arity) = arm(k - 1);
            let keep = self.binders.len().saturating_sub(arity as usize);
            self.binders.truncate(keep);
            self.next = bound;
        }
        if k < n {
            let here = self.label()?;
            let case_pc = *self.labels.last().ok_or_else(|| broken("an arm with no case"))?;
            let Some(&Instr::Case { targets, .. }) = self.code.code.get(case_pc as usize) else {
                return Err(broken("an arm with no case"));
            };
            if let Some(t) = self.code.targets.get_mut((targets + 1 + k) as usize) {
                *t = here;
            }
            let (body, arity) = arm(k);
            for i in 0..arity {
                self.push_binder(Src::reg(fields + i))?;
            }
            self.push_job(Job::Case {
                node,
                dest,
                mark,
                fields,
                k: k + 1,
            })?;
            return self.push_job(Job::Eval { node: body, dest });
        }
        // The join: every arm's jump comes here.
        self.labels.pop();
        if !tail {
            let here = self.label()?;
            for _ in 0..n {
                let jump = self.labels.pop().ok_or_else(|| broken("a lost jump"))?;
                self.patch(jump, here);
            }
        }
        self.next = mark;
        Ok(())
    }

    /// `if op(a, b)` on operands with a comparison: a compare-and-branch.
    /// `false` (nothing done) for any other condition.
    fn test(&mut self, c: Id, node: Id) -> Result<bool, Halt> {
        let image = self.image;
        let INode::Prim(op, start) = image.node(c) else {
            return Ok(false);
        };
        if !is_comparison(op) {
            return Ok(false);
        }
        let &[x, y] = image.operands(op, start) else {
            return Ok(false);
        };
        let (Some(a), Some(b)) = (self.atom(x)?, self.atom(y)?) else {
            return Ok(false);
        };
        let tmp = self.alloc();
        let Some(op) = op_index(op) else {
            return Ok(false);
        };
        let instr = match (a.get(), b.get()) {
            (Operand::Reg(a), Operand::Int(imm)) => Instr::TestImm {
                op,
                a,
                imm,
                no: NONE,
            },
            _ => Instr::Test {
                op,
                a,
                b,
                no: NONE,
            },
        };
        let pc = self.emit(instr, c)?;
        self.emit(
            Instr::Branch {
                cond: Src::reg(tmp),
                no: NONE,
            },
            node,
        )?;
        // The comparison's register is dead past the branch.
        self.next = tmp;
        // The branch per contraction goes where the test goes.
        self.close_block();
        self.push_label(pc)?;
        self.label()?;
        Ok(true)
    }

    /// Emit the primitive, host call or constructor `node` on the pending
    /// operands from `at`, into `dst`.
    fn emit_made(&mut self, node: Id, dst: Reg, at: u32) -> Result<(), Halt> {
        let image = self.image;
        let srcs = &self.pending[at as usize..];
        let instr = match image.node(node) {
            INode::Prim(Prim::Host(id), _) => {
                let args = self.list_from(at)?;
                let host = self.code.hosts.len() as u32;
                self.room(size_of::<crate::prim::HostId>())?;
                self.code.hosts.push(id);
                // A host call pays for itself, alone between blocks.
                self.close_block();
                self.emit(Instr::Host { host, dst, args }, node)?;
                self.close_block();
                return Ok(());
            }
            INode::Prim(prim, _) => {
                let op = op_index(prim).ok_or_else(|| broken("a primitive of no primitive"))?;
                match *srcs {
                    [a] => Instr::Prim1 { op, dst, a },
                    [a, b] => match (a.get(), b.get()) {
                        (Operand::Reg(a), Operand::Int(imm)) if is_int_op(prim) => {
                            Instr::Prim2Imm { op, dst, a, imm }
                        }
                        _ => Instr::Prim2 { op, dst, a, b },
                    },
                    _ => return Err(broken("a primitive of no arity")),
                }
            }
            INode::Con(tag, ..) => {
                let fields = self.list_from(at)?;
                self.emit(Instr::Con { dst, tag, fields }, node)?;
                return Ok(());
            }
            _ => return Err(broken("an operation of no operation")),
        };
        self.pending.truncate(at as usize);
        self.emit(instr, node)?;
        Ok(())
    }

    /// Emit the closure of `func` made at `node`, into `dst`.
    fn closure(&mut self, func: u32, dst: Reg, node: Id) -> Result<(), Halt> {
        let image = self.image;
        let Some(f) = image.funcs.get(func as usize) else {
            return Err(broken("a λ of no function"));
        };
        let runs = image
            .runs
            .get(f.runs as usize..(f.runs + f.runs_len) as usize)
            .unwrap_or(&[]);
        let at = self.pending.len() as u32;
        for run in runs {
            match *run {
                Capture::Free { slot, len } => {
                    for i in 0..len {
                        self.push_pending(Src::cap(slot + i))?;
                    }
                }
                Capture::Local { index, len } => {
                    let first = self.binders.len().checked_sub(1 + index as usize);
                    for i in 0..len as usize {
                        let src = first
                            .and_then(|f| self.binders.get(f + i))
                            .copied()
                            .ok_or_else(|| broken("a capture run out of range"))?;
                        self.push_pending(src)?;
                    }
                }
            }
        }
        let captures = self.list_from(at)?;
        if self.code.funcs.get(func as usize).is_some_and(|f| f.entry == NONE) {
            self.code.funcs[func as usize].entry = NONE - 1;
            let held = self.held();
            push_within(&mut self.queue, func, held, self.budget)?;
        }
        self.emit(
            Instr::Closure {
                dst,
                func,
                captures,
            },
            node,
        )?;
        Ok(())
    }

    /// Emit the selection of case `node`.
    fn select(&mut self, node: Id, scrutinee: Src, fields: Reg) -> Result<(), Halt> {
        let image = self.image;
        let INode::Case(_, case) = image.node(node) else {
            return Err(broken("a case of no case"));
        };
        let Some(info) = image.cases.get(case as usize).copied() else {
            return Err(broken("a case of no case"));
        };
        let targets = self.code.targets.len() as u32;
        let n = info.len as usize + 2;
        self.room(n * size_of::<u32>())?;
        self.code.targets.push(case);
        self.code.targets.extend(std::iter::repeat(NONE).take(n - 1));
        let pc = self.emit(
            Instr::Case {
                scrutinee,
                targets,
                fields,
            },
            node,
        )?;
        self.close_block();
        self.push_label(pc)
    }

    /// The spine `node` of `m` applications, its head's operand on top of
    /// the pending operands.
    fn spine(&mut self, node: Id, dest: Dest, m: u32) -> Result<(), Halt> {
        let image = self.image;
        let head = self.pending.pop().ok_or_else(|| broken("a spine with no head"))?;
        let apps = spine_apps(image, node, m);
        let args: Vec<Id> = apps
            .iter()
            .map(|&a| match image.node(a) {
                INode::App(_, arg) => arg,
                _ => NONE,
            })
            .collect();
        let own = head == Src::me() && self.me == Some(m);
        let all_atoms = args.iter().all(|&a| !needs_code(image, a));
        let mark = self.next;
        if own {
            // The function's own self: saturated by construction; the
            // applications before the last only count.
            let at = self.pending.len() as u32;
            let mut later = Vec::new();
            // The call's destination is written only when it returns: its
            // first argument that needs code can be made there.
            let mut reuse = into(dest);
            for (k, (&app, &arg)) in apps.iter().zip(&args).enumerate() {
                let src = self.operand_into(arg, &mut reuse, &mut later)?;
                self.push_pending(src)?;
                later.push(Job::Step {
                    app,
                    k: k as u32,
                    acc: OWN,
                    at,
                    m,
                    dest,
                });
            }
            self.push_job(Job::Unbind { n: 0, mark })?;
            return self.push_in_order(later);
        }
        if m == 1 && needs_code(image, args[0]) {
            let at = self.pending.len() as u32;
            let mut later = Vec::new();
            let mut reuse = into(dest);
            let src = self.operand_into(args[0], &mut reuse, &mut later)?;
            self.push_pending(src)?;
            self.push_pending(head)?;
            self.push_job(Job::Unbind { n: 0, mark })?;
            self.push_job(Job::Step {
                app: apps[0],
                k: 0,
                acc: ONE,
                at,
                m: 1,
                dest,
            })?;
            return self.push_in_order(later);
        }
        if all_atoms {
            let at = self.pending.len() as u32;
            for &arg in &args {
                let src = self.atom(arg)?.ok_or_else(|| broken("an operand that is none"))?;
                self.push_pending(src)?;
            }
            self.call(&apps, head, at, dest)?;
            self.next = mark;
            return Ok(());
        }
        // Arguments to evaluate: a spine that checks its head first.
        let acc = self.alloc();
        let _mode = self.alloc();
        self.emit(Instr::SpineStart { f: head, m, acc }, node)?;
        let at = self.pending.len() as u32;
        let mut later = Vec::new();
        for (k, (&app, &arg)) in apps.iter().zip(&args).enumerate() {
            let src = self.operand(arg, &mut later)?;
            self.push_pending(src)?;
            later.push(Job::Step {
                app,
                k: k as u32,
                acc,
                at,
                m,
                dest,
            });
        }
        self.push_job(Job::Unbind { n: 0, mark })?;
        self.push_in_order(later)
    }

    /// A call on operands: `f` applied to the pending operands from `at`.
    fn call(&mut self, apps: &[Id], f: Src, at: u32, dest: Dest) -> Result<(), Halt> {
        let m = apps.len() as u32;
        let last = *apps.last().ok_or_else(|| broken("a call of nothing"))?;
        if m == 1 {
            let a = self.pending.pop().ok_or_else(|| broken("a call of nothing"))?;
            self.apply(f, a, dest, last)?;
            return Ok(());
        }
        let args = self.list_from(at)?;
        let m = m as u8;
        let pc = match dest {
            Dest::Reg(dst) => self.emit(Instr::CallN { dst, f, args, m }, last)?,
            Dest::Tail => self.emit(Instr::TailCallN { f, args, m }, last)?,
        };
        self.close_block();
        // The applications one by one, a block each.
        let acc = self.alloc();
        let mut function = f;
        for (k, &app) in apps.iter().enumerate() {
            let a = self.code.srcs[args as usize + k];
            let d = if k + 1 == apps.len() {
                dest
            } else {
                Dest::Reg(acc)
            };
            self.apply(function, a, d, app)?;
            function = Src::reg(acc);
        }
        if self.code.code.len() as u32 != pc + 1 + 2 * u32::from(m) {
            return Err(broken("a call's applications are not where it looks"));
        }
        Ok(())
    }

    /// One application of `f` to `a` at `app`, into `dest`.
    fn apply(&mut self, f: Src, a: Src, dest: Dest, app: Id) -> Result<(), Halt> {
        match dest {
            Dest::Reg(dst) => self.emit(Instr::Apply { dst, f, a }, app)?,
            Dest::Tail => self.emit(Instr::TailApply { f, a }, app)?,
        };
        self.close_block();
        Ok(())
    }

    /// Application `k` of a spine, its argument's operand pending.
    fn spine_step(
        &mut self,
        app: Id,
        k: u32,
        acc: Reg,
        at: u32,
        m: u32,
        dest: Dest,
    ) -> Result<(), Halt> {
        let last = k + 1 == m;
        if acc == ONE {
            // One application with an argument to evaluate: the head then
            // the argument are pending.
            let f = self.pending.pop().ok_or_else(|| broken("a lost head"))?;
            let a = self.pending.pop().ok_or_else(|| broken("a lost argument"))?;
            self.pending.truncate(at as usize);
            return self.apply(f, a, dest, app);
        }
        if acc == OWN {
            // The function's own self.
            if !last {
                let rule = if k == 0 { Rule::BetaRec } else { Rule::Beta };
                self.emit(Instr::Count { rule }, app)?;
                return Ok(());
            }
            let args = self.list_from(at)?;
            let m = m as u8;
            match dest {
                Dest::Reg(dst) => self.emit(
                    Instr::SelfCall {
                        dst,
                        args,
                        m,
                        entry: self.entry,
                    },
                    app,
                )?,
                Dest::Tail => self.emit(
                    Instr::SelfTail {
                        args,
                        m,
                        entry: self.entry,
                    },
                    app,
                )?,
            };
            self.close_block();
            return Ok(());
        }
        if !last {
            let arg = *self
                .pending
                .get((at + k) as usize)
                .ok_or_else(|| broken("a lost argument"))?;
            self.emit(Instr::SpineStep { acc, arg, k }, app)?;
            self.close_block();
            return Ok(());
        }
        let args = self.list_from(at)?;
        let dst = match dest {
            Dest::Reg(r) => r,
            Dest::Tail => NONE,
        };
        self.emit(
            Instr::SpineLast {
                acc,
                args,
                m: m as u8,
                dst,
            },
            app,
        )?;
        self.close_block();
        Ok(())
    }
}

/// Push `x` on `v`, growing it within the limit of `budget` for a compile
/// holding `held` bytes.
fn push_within<T>(v: &mut Vec<T>, x: T, held: usize, budget: &mut Budget) -> Result<(), Halt> {
    if v.len() == v.capacity() {
        grow(v, 1, held, budget)?;
    }
    v.push(x);
    Ok(())
}

/// The register a construct's value goes to, if not back to the caller.
fn into(dest: Dest) -> Option<Reg> {
    match dest {
        Dest::Reg(r) => Some(r),
        Dest::Tail => None,
    }
}

/// Whether `op` compares.
fn is_comparison(op: Prim) -> bool {
    matches!(
        op,
        Prim::Eq | Prim::Ne | Prim::Lt | Prim::Le | Prim::Gt | Prim::Ge
    )
}

/// Whether `op` is integer arithmetic or a comparison (a constant operand
/// of it has an instruction of its own).
fn is_int_op(op: Prim) -> bool {
    matches!(
        op,
        Prim::Add | Prim::Sub | Prim::Mul | Prim::Div | Prim::Rem
    ) || is_comparison(op)
}

/// Whether `node` is not an operand (it needs code to evaluate).
fn needs_code(image: &Image, node: Id) -> bool {
    match image.node(node) {
        INode::Var { .. } | INode::Int(_) | INode::Bool(_) | INode::Str(_) => false,
        INode::Con(_, _, 0) => false,
        INode::Con(..) => !image.is_data(node),
        _ => true,
    }
}

/// How many applications the spine at `node` has (at most [`MAX_CHAIN`]:
/// a longer one is a spine whose head is a spine).
fn spine_len(image: &Image, node: Id) -> u32 {
    let mut m = 0;
    let mut n = node;
    while let INode::App(f, _) = image.node(n) {
        m += 1;
        n = f;
        if m == MAX_CHAIN {
            break;
        }
    }
    m
}

/// The head under the `m` applications of the spine at `node`.
fn spine_head(image: &Image, node: Id, m: u32) -> Id {
    let mut n = node;
    for _ in 0..m {
        if let INode::App(f, _) = image.node(n) {
            n = f;
        }
    }
    n
}

/// The `m` application nodes of the spine at `node`, innermost first.
fn spine_apps(image: &Image, node: Id, m: u32) -> Vec<Id> {
    let mut apps = Vec::with_capacity(m as usize);
    let mut n = node;
    for _ in 0..m {
        apps.push(n);
        if let INode::App(f, _) = image.node(n) {
            n = f;
        }
    }
    apps.reverse();
    apps
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn instructions_and_operands_are_small() {
        assert_eq!(size_of::<Src>(), 4);
        assert_eq!(size_of::<Instr>(), 16);
    }

    #[test]
    fn operands_pack_and_unpack() {
        for n in [0, 1, -1, (1 << 29) - 1, -(1 << 29)] {
            assert_eq!(Src::int(n).map(Src::get), Some(Operand::Int(n as i32)));
        }
        assert_eq!(Src::int(1 << 29), None);
        assert_eq!(Src::reg(7).get(), Operand::Reg(7));
        assert_eq!(Src::cap(9).get(), Operand::Cap(9));
        assert_eq!(Src::konst(PAYLOAD).get(), Operand::Konst(PAYLOAD));
    }
}

#[cfg(test)]
mod dump {
    #[test]
    #[ignore]
    fn dump_fib() {
        let program = crate::Program::parse(
            "let rec fib n = if n < 2 then n else fib (n - 1) + fib (n - 2) in fib 25",
        )
        .unwrap();
        let mut budget = crate::budget::Budget::new(&crate::Limits::default());
        let code = super::compile(program.image(), &mut budget).unwrap();
        for (pc, i) in code.code.iter().enumerate() {
            eprintln!("{pc:3} {i:?}");
        }
        eprintln!("{:?}", code.funcs);
    }
}
