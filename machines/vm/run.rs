//! The vm's interpreter: one loop over the code, monomorphised twice, once
//! taking each block's fuel on entry to it and once per contraction (see
//! [`super::code`]). A block the fast loop cannot finish on its fast path
//! (an operand that is not an integer, a contraction that fails, a closure
//! of another arity, a limit) is *bailed*: its fuel and counts are given
//! back, those of the instructions before the one that could not go on are
//! taken again, and the slow loop carries on from that instruction, so that
//! every stop is where, and counts what, the stepper's does.

use std::rc::Rc;

use smallvec::SmallVec;

use super::code::{broken, op_prim, Code, Instr, Konst, Operand, Reg, Src, FINISH, PAYLOAD};
use super::{Frame, Fun, Val, VmRun};
use crate::budget::{grow, Halt};
use crate::error::EvalError;
use crate::image::{INode, Image, NONE};
use crate::machines::runtime::host::{cells_bytes, from_datum, host_call};
use crate::machines::runtime::prims::{int_prim, int_test, prepaid_prim, prim_contraction};
use crate::machines::runtime::value::{
    cut, data_field, values_bytes_for, Closure, ConCell, Value, Values,
};
use crate::{Prim, Program, Rule};

/// Why a loop left: to go on in the other loop, or the run's end.
pub(super) enum Leave {
    /// Per contraction, from the current pc.
    Slow,
    /// On the fast path again, at a block's start.
    Fast,
    /// The block could not go on at the current pc.
    Bail,
    /// A value, or a halt (at the current pc).
    Done(Result<Val, Halt>),
}

/// The arguments of a call: one value, or operands of the caller.
enum Pass {
    One(Val),
    Srcs { at: u32, m: u8 },
    /// Read already (a tail call's), into the caller's list.
    Gathered,
}

/// Where a call's value goes: a register of the caller and the pc after
/// the call, or (a tail call) the caller's own caller.
#[derive(Clone, Copy)]
enum Ret {
    To { dst: Reg, pc: u32 },
    Tail,
}

impl VmRun {
    /// The value of operand `src`.
    #[inline(always)]
    fn read(&self, code: &Code, src: Src) -> Val {
        match src.get() {
            Operand::Reg(r) => match self.regs.get((self.base + r) as usize) {
                Some(v) => v.clone(),
                None => Value::Int(0),
            },
            Operand::Cap(i) => match &self.closure {
                Some(c) => match c.captured.get(i as usize) {
                    Some(v) => v.clone(),
                    None if i == PAYLOAD => Value::Fun(Rc::clone(c)),
                    None => Value::Int(0),
                },
                None => Value::Int(0),
            },
            Operand::Int(n) => Value::Int(i64::from(n)),
            Operand::Konst(k) => match code.konsts.get(k as usize) {
                Some(&Konst::Int(n)) => Value::Int(n),
                Some(&Konst::Bool(b)) => Value::Bool(b),
                Some(&Konst::Lit(s)) => Value::Lit(s),
                Some(&Konst::Tag(t)) => Value::Tag(t),
                Some(&Konst::Data(d)) => Value::Data(d),
                None => Value::Int(0),
            },
        }
    }

    /// The value of operand `src` in the frame whose registers start at
    /// `base` (of the current closure).
    #[inline(always)]
    fn read_in(&self, code: &Code, src: Src, base: u32) -> Val {
        match src.get() {
            Operand::Reg(r) => match self.regs.get((base + r) as usize) {
                Some(v) => v.clone(),
                None => Value::Int(0),
            },
            _ => self.read(code, src),
        }
    }

    /// The integer operand `src` is, if it is one (read without a clone).
    #[inline(always)]
    fn int(&self, src: Src) -> Option<i64> {
        match src.get() {
            Operand::Reg(r) => self.int_reg(r),
            Operand::Int(n) => Some(i64::from(n)),
            Operand::Cap(i) => match self.closure.as_ref().and_then(|c| c.captured.get(i as usize)) {
                Some(Value::Int(n)) => Some(*n),
                _ => None,
            },
            Operand::Konst(_) => None,
        }
    }

    #[inline(always)]
    fn int_reg(&self, r: Reg) -> Option<i64> {
        match self.regs.get((self.base + r) as usize) {
            Some(Value::Int(n)) => Some(*n),
            _ => None,
        }
    }

    #[inline(always)]
    fn set(&mut self, dst: Reg, v: Val) {
        if let Some(slot) = self.regs.get_mut((self.base + dst) as usize) {
            *slot = v;
        }
    }

    /// The rule applying `f` is counted under.
    #[inline(always)]
    fn rule_of(code: &Code, f: &Val) -> Rule {
        match f {
            Value::Fun(c) if c.applied == 0 && code.funcs.get(c.code as usize).is_some_and(|f| f.rec) => {
                Rule::BetaRec
            }
            _ => Rule::Beta,
        }
    }

    /// How many more arguments closure `c` takes before its body is
    /// entered.
    #[inline(always)]
    fn wants(code: &Code, c: &Fun) -> u32 {
        code.funcs
            .get(c.code as usize)
            .map_or(0, |f| f.params.saturating_sub(c.applied))
    }

    /// Bytes held: the stacks by capacity, the live cells, the tags made
    /// up.
    #[inline]
    pub(super) fn held(&self) -> usize {
        self.fixed
            + self.meter.cells()
            + self.regs.capacity() * std::mem::size_of::<Val>()
            + self.frames.capacity() * std::mem::size_of::<Frame>()
    }

    /// Room for a cell of `bytes`.
    #[inline]
    fn room_for<const M: bool>(&mut self, bytes: usize) -> Result<(), Halt> {
        if M {
            let held = self.held();
            self.budget.check_memory(held.saturating_add(bytes))
        } else {
            Ok(())
        }
    }

    /// Fuel-free work of `n` units (values copied), past a few.
    #[inline(always)]
    fn work<const M: bool>(&mut self, n: usize) -> Result<(), Halt> {
        if M && n > 16 {
            self.budget.work(n as u64)
        } else {
            Ok(())
        }
    }

    /// The values of the `n` operands from `at`.
    fn values(&self, code: &Code, at: u32, n: usize) -> Values<u32> {
        let at = at as usize;
        code.srcs
            .get(at..at.saturating_add(n))
            .unwrap_or(&[])
            .iter()
            .map(|&s| self.read(code, s))
            .collect()
    }

    /// Run from the current pc: per contraction if `SLOW`, else block by
    /// block; `M`: whether fuel, memory and cancellation are checked.
    pub(super) fn exec<const M: bool, const SLOW: bool>(&mut self, code: &Code, program: &Program) -> Leave {
        let image = program.image();
        // A contraction of the slow loop pays its unit first.
        macro_rules! take {
            ($rule:expr) => {
                if SLOW {
                    let paid = if M {
                        self.budget.take($rule)
                    } else {
                        self.budget.counts.tally($rule);
                        Ok(())
                    };
                    if let Err(halt) = paid {
                        return Leave::Done(Err(halt));
                    }
                }
            };
        }
        // A contraction that cannot take the fast path: bailed, or (per
        // contraction) the run stops with `$halt`.
        macro_rules! fail {
            ($halt:expr) => {{
                if SLOW {
                    return Leave::Done(Err($halt));
                }
                return Leave::Bail;
            }};
        }
        macro_rules! try_or_fail {
            ($e:expr) => {
                match $e {
                    Ok(v) => v,
                    Err(halt) => fail!(halt),
                }
            };
        }
        // The first application of a call, counted `beta` by its block, is
        // `beta_rec` for a recursive function's own closure.
        macro_rules! recount {
            ($rule:expr) => {
                if !SLOW && $rule == Rule::BetaRec {
                    self.budget.counts.recount(Rule::Beta, Rule::BetaRec, 1);
                }
            };
        }
        // A primitive into `dst`: its integer fast path's value, or (bailed,
        // or per contraction) the δ-rules on `$args`, which pay for it.
        macro_rules! primitive {
            ($op:expr, $dst:expr, $fast:expr, $args:expr) => {{
                match $fast {
                    Some(v) => {
                        take!(Rule::Prim);
                        self.set($dst, v);
                    }
                    None => {
                        let args = $args;
                        if !SLOW {
                            // Strings and booleans of one unit, paid by the
                            // block; anything else per contraction.
                            let held = if M { self.held() } else { 0 };
                            let made = prepaid_prim(
                                $op,
                                &args,
                                image,
                                &self.tags,
                                &mut self.budget,
                                held,
                            );
                            match made {
                                Some(v) => self.set($dst, v),
                                None => return Leave::Bail,
                            }
                        } else {
                            match self.prim::<M>(image, $op, &args) {
                                Ok(v) => self.set($dst, v),
                                Err(halt) => return Leave::Done(Err(halt)),
                            }
                        }
                    }
                }
                self.pc += 1;
            }};
        }
        // Compare and branch: on the fast path, the branch taken; else the
        // comparison made per contraction, for the branch after it.
        macro_rules! compare {
            ($op:expr, $no:expr, $fast:expr, $args:expr) => {{
                let fast = match $fast {
                    Some(yes) => Some(yes),
                    // A comparison of strings of one unit, paid by the block.
                    None if !SLOW => {
                        let args = $args;
                        let made = prepaid_prim($op, &args, image, &self.tags, &mut self.budget, 0);
                        match made {
                            Some(Value::Bool(yes)) => Some(yes),
                            _ => None,
                        }
                    }
                    None => None,
                };
                match fast {
                    Some(yes) if !SLOW => self.pc = if yes { self.pc + 2 } else { $no },
                    _ => {
                        if !SLOW {
                            return Leave::Bail;
                        }
                        let args = $args;
                        if let Err(halt) = self.test::<M>(code, image, $op, &args) {
                            return Leave::Done(Err(halt));
                        }
                    }
                }
            }};
        }
        // Apply `$f` to one argument: the contraction paid (per contraction)
        // or recounted, a function's body entered or a partial application
        // made; anything but a function is the error.
        macro_rules! apply {
            ($f:expr, $a:expr, $ret:expr) => {{
                let fv = $f;
                let rule = Self::rule_of(code, &fv);
                take!(rule);
                let Value::Fun(c) = fv else {
                    let error = EvalError::not_a_function(fv.operand(image, &self.tags));
                    fail!(Halt::error(error))
                };
                let av = $a;
                try_or_fail!(self.apply::<M>(code, c, av, $ret));
                recount!(rule);
            }};
        }
        // A call of `$f` on `$m` operands from `$args`: entered whole if it
        // takes exactly them, else (and per contraction) the applications
        // one by one after the instruction.
        macro_rules! call {
            ($f:expr, $args:expr, $m:expr, $ret:expr) => {{
                if SLOW {
                    self.pc += 1;
                    continue;
                }
                let fv = self.read(code, $f);
                let rule = Self::rule_of(code, &fv);
                match fv {
                    Value::Fun(c) if Self::wants(code, &c) == u32::from($m) => {
                        let site = origin(code, self.pc);
                        let pass = Pass::Srcs { at: $args, m: $m };
                        try_or_fail!(self.enter::<M>(code, c, pass, $ret, site));
                        recount!(rule);
                    }
                    _ => return Leave::Bail,
                }
            }};
        }
        loop {
            let pc = self.pc;
            let Some(&instr) = code.code.get(pc as usize) else {
                return Leave::Done(Err(broken("a pc out of the code")));
            };
            match instr {
                Instr::Meter { cost, rules } => {
                    if SLOW {
                        return Leave::Fast;
                    }
                    if M && !self.budget.tank.take_block(u64::from(cost)) {
                        self.pc = pc + 1;
                        return Leave::Slow;
                    }
                    self.budget.counts.tally_block(&rules);
                    self.pc = pc + 1;
                }
                Instr::Move { dst, src } => {
                    let v = self.read(code, src);
                    self.set(dst, v);
                    self.pc = pc + 1;
                }
                Instr::Count { rule } => {
                    take!(rule);
                    self.pc = pc + 1;
                }
                Instr::Prim2Imm { op, dst, a, imm } => {
                    let op = op_prim(op);
                    let fast = self.int_reg(a).and_then(|x| int_prim(op, x, i64::from(imm)));
                    primitive!(op, dst, fast, [self.read(code, Src::reg(a)), Value::Int(i64::from(imm))]);
                }
                Instr::Prim2 { op, dst, a, b } => {
                    let op = op_prim(op);
                    let fast = match (self.int(a), self.int(b)) {
                        (Some(x), Some(y)) => int_prim(op, x, y),
                        _ => None,
                    };
                    primitive!(op, dst, fast, [self.read(code, a), self.read(code, b)]);
                }
                Instr::Prim1 { op, dst, a } => {
                    let op = op_prim(op);
                    let fast = match (op, self.int(a)) {
                        (Prim::Neg, Some(x)) => x.checked_neg().map(Value::Int),
                        _ => None,
                    };
                    primitive!(op, dst, fast, [self.read(code, a)]);
                }
                Instr::TestImm { op, a, imm, no } => {
                    let op = op_prim(op);
                    let fast = self.int_reg(a).and_then(|x| int_test(op, x, i64::from(imm)));
                    compare!(op, no, fast, [self.read(code, Src::reg(a)), Value::Int(i64::from(imm))]);
                }
                Instr::Test { op, a, b, no } => {
                    let op = op_prim(op);
                    let fast = match (self.int(a), self.int(b)) {
                        (Some(x), Some(y)) => int_test(op, x, y),
                        _ => None,
                    };
                    compare!(op, no, fast, [self.read(code, a), self.read(code, b)]);
                }
                Instr::Branch { cond, no } => {
                    let v = self.read(code, cond);
                    take!(Rule::If);
                    match v {
                        Value::Bool(yes) => self.pc = if yes { pc + 1 } else { no },
                        other => {
                            let error = EvalError::not_a_boolean(other.operand(image, &self.tags));
                            fail!(Halt::error(error))
                        }
                    }
                }
                Instr::Jump { to } => self.pc = to,
                Instr::Host { host, dst, args } => {
                    let Some(&id) = code.hosts.get(host as usize) else {
                        return Leave::Done(Err(broken("a host call of no host function")));
                    };
                    let values = self.values(code, args, id.arity());
                    let room = if M {
                        self.budget.room(self.held())
                    } else {
                        usize::MAX
                    };
                    let host = program.host();
                    match host_call(host, id, &values, image, &mut self.tags, &mut self.budget, room) {
                        Ok(v) => {
                            self.fixed = self.tags.bytes();
                            drop(values);
                            self.set(dst, v);
                            if M {
                                let held = self.held();
                                if let Err(halt) = self.budget.check_memory(held) {
                                    return Leave::Done(Err(halt));
                                }
                            }
                        }
                        Err(halt) => return Leave::Done(Err(halt)),
                    }
                    self.pc = pc + 1;
                }
                Instr::Closure {
                    dst,
                    func,
                    captures,
                } => {
                    let n = code.funcs.get(func as usize).map_or(0, |f| f.captured as usize);
                    try_or_fail!(self.room_for::<M>(Closure::<u32>::cell_bytes() + values_bytes_for::<u32>(n)));
                    try_or_fail!(self.work::<M>(n));
                    let captured = self.values(code, captures, n);
                    self.set(dst, Value::Fun(Closure::new(func, 0, captured)));
                    self.pc = pc + 1;
                }
                Instr::Con { dst, tag, fields } => {
                    let n = image.tag_arity.get(tag as usize).map_or(0, |&a| a as usize);
                    try_or_fail!(self.room_for::<M>(
                        ConCell::<u32>::bytes(&Values::new()) + values_bytes_for::<u32>(n)
                    ));
                    try_or_fail!(self.work::<M>(n));
                    let fields = self.values(code, fields, n);
                    self.set(dst, Value::Con(ConCell::new(tag, fields)));
                    self.pc = pc + 1;
                }
                Instr::Case {
                    scrutinee,
                    targets,
                    fields,
                } => {
                    let v = self.read(code, scrutinee);
                    take!(Rule::Case);
                    match self.select::<M>(code, image, targets, fields, &v) {
                        Ok(Some(to)) => self.pc = to,
                        Ok(None) => {
                            let error = EvalError::no_matching_case(v.operand(image, &self.tags));
                            fail!(Halt::error(error))
                        }
                        Err(halt) => fail!(halt),
                    }
                }
                Instr::Apply { dst, f, a } => {
                    let fv = self.read(code, f);
                    apply!(fv, self.read(code, a), Ret::To { dst, pc: pc + 1 });
                }
                Instr::TailApply { f, a } => {
                    let fv = self.read(code, f);
                    apply!(fv, self.read(code, a), Ret::Tail);
                }
                Instr::CallN { dst, f, args, m } => {
                    let after = pc + 1 + 2 * u32::from(m);
                    call!(f, args, m, Ret::To { dst, pc: after });
                }
                Instr::TailCallN { f, args, m } => call!(f, args, m, Ret::Tail),
                Instr::SelfCall {
                    dst,
                    args,
                    m,
                    entry,
                } => {
                    let rule = if m == 1 { Rule::BetaRec } else { Rule::Beta };
                    take!(rule);
                    try_or_fail!(self.self_call::<M, SLOW>(code, args, m, dst, entry));
                }
                Instr::SelfTail { args, m, entry } => {
                    let rule = if m == 1 { Rule::BetaRec } else { Rule::Beta };
                    take!(rule);
                    let mut values: [Val; 4] = [Value::Int(0), Value::Int(0), Value::Int(0), Value::Int(0)];
                    let srcs = self.srcs(code, args, m);
                    if srcs.len() <= values.len() {
                        for (slot, &src) in values.iter_mut().zip(srcs) {
                            *slot = self.read(code, src);
                        }
                        let base = self.base as usize;
                        if let Some(params) = self.regs.get_mut(base..base + srcs.len()) {
                            for (p, v) in params.iter_mut().zip(values) {
                                *p = v;
                            }
                        }
                    } else {
                        let values: SmallVec<[Val; 8]> = srcs.iter().map(|&s| self.read(code, s)).collect();
                        let base = self.base as usize;
                        for (i, v) in values.into_iter().enumerate() {
                            if let Some(slot) = self.regs.get_mut(base + i) {
                                *slot = v;
                            }
                        }
                    }
                    self.site = origin(code, pc);
                    self.pc = entry;
                }
                Instr::SpineStart { f, m, acc } => {
                    let fv = self.read(code, f);
                    let whole = matches!(&fv, Value::Fun(c) if Self::wants(code, c) == m);
                    self.set(acc, fv);
                    self.set(acc + 1, Value::Bool(whole));
                    self.pc = pc + 1;
                }
                Instr::SpineStep { acc, arg, k } => {
                    let fv = self.read(code, Src::reg(acc));
                    if self.whole(acc) {
                        let rule = if k == 0 { Self::rule_of(code, &fv) } else { Rule::Beta };
                        take!(rule);
                        recount!(rule);
                        self.pc = pc + 1;
                        continue;
                    }
                    apply!(fv, self.read(code, arg), Ret::To { dst: acc, pc: pc + 1 });
                }
                Instr::SpineLast { acc, args, m, dst } => {
                    let ret = if dst == NONE { Ret::Tail } else { Ret::To { dst, pc: pc + 1 } };
                    let fv = self.read(code, Src::reg(acc));
                    if self.whole(acc) {
                        take!(Rule::Beta);
                        let Value::Fun(c) = fv else {
                            return Leave::Done(Err(broken("a saturated spine of no closure")));
                        };
                        let site = origin(code, pc);
                        let pass = Pass::Srcs { at: args, m };
                        try_or_fail!(self.enter::<M>(code, c, pass, ret, site));
                        continue;
                    }
                    let last = (args as usize + usize::from(m)).checked_sub(1);
                    let av = last
                        .and_then(|i| code.srcs.get(i))
                        .map_or(Value::Int(0), |&s| self.read(code, s));
                    apply!(fv, av, ret);
                }
                Instr::Return { src } => {
                    let v = self.read(code, src);
                    self.ret(v);
                    if !SLOW {
                        self.pc = self.open::<M>(code, self.pc);
                    }
                }
                Instr::Finish => {
                    let v = match self.regs.first() {
                        Some(v) => v.clone(),
                        None => return Leave::Done(Err(broken("no value to finish with"))),
                    };
                    let Some(datum) = program.args().get(self.next_arg) else {
                        return Leave::Done(Ok(v));
                    };
                    // The program's arguments: applications with no node,
                    // paid here (outside any block).
                    let rule = Self::rule_of(code, &v);
                    let paid = if M {
                        self.budget.take(rule)
                    } else {
                        self.budget.counts.tally(rule);
                        Ok(())
                    };
                    if let Err(halt) = paid {
                        return Leave::Done(Err(halt));
                    }
                    let Value::Fun(c) = v else {
                        let error = EvalError::not_a_function(v.operand(image, &self.tags));
                        return Leave::Done(Err(Halt::error(error)));
                    };
                    let arg = match self.argument::<M>(image, datum) {
                        Ok(arg) => arg,
                        Err(halt) => return Leave::Done(Err(halt)),
                    };
                    self.next_arg += 1;
                    if let Err(halt) = self.apply::<M>(code, c, arg, Ret::To { dst: 0, pc: FINISH }) {
                        return Leave::Done(Err(halt));
                    }
                }
            }
        }
    }

    /// A program argument as a value: refused before any of its cells is
    /// made if it cannot fit, its cells and the tags it makes up charged.
    fn argument<const M: bool>(&mut self, image: &Image, datum: &crate::Datum<'static>) -> Result<Val, Halt> {
        if M {
            let need = cells_bytes::<u32>(datum);
            let held = self.held();
            self.budget.check_memory(held.saturating_add(need))?;
        }
        let (argument, new_tags) = from_datum(datum, image, &self.tags);
        self.tags.append(new_tags);
        self.fixed = self.tags.bytes();
        if M {
            let held = self.held();
            self.budget.check_memory(held)?;
        }
        Ok(argument)
    }

    /// A primitive contraction through the shared δ-rules (paying its units).
    #[cold]
    fn prim<const M: bool>(&mut self, image: &Image, op: Prim, args: &[Val]) -> Result<Val, Halt> {
        let held = if M { self.held() } else { 0 };
        prim_contraction(op, args, image, &self.tags, &mut self.budget, held)
    }

    /// Whether the spine whose registers start at `acc` is saturated.
    #[inline(always)]
    fn whole(&self, acc: Reg) -> bool {
        matches!(self.regs.get((self.base + acc + 1) as usize), Some(Value::Bool(true)))
    }

    /// A comparison made per contraction: its value to the register the
    /// branch after it reads, and on to that branch.
    #[cold]
    fn test<const M: bool>(&mut self, code: &Code, image: &Image, op: Prim, args: &[Val]) -> Result<(), Halt> {
        let v = self.prim::<M>(image, op, args)?;
        let Some(&Instr::Branch { cond, .. }) = code.code.get(self.pc as usize + 1) else {
            return Err(broken("a test with no branch"));
        };
        if let Operand::Reg(r) = cond.get() {
            self.set(r, v);
        }
        self.pc += 1;
        Ok(())
    }

    /// The arm of case `case` for `v`: its code, with its fields in
    /// registers from `fields`; `None` when no arm matches.
    fn select<const M: bool>(
        &mut self,
        code: &Code,
        image: &Image,
        targets: u32,
        fields: Reg,
        v: &Val,
    ) -> Result<Option<u32>, Halt> {
        let case = code.targets.get(targets as usize).copied().unwrap_or(NONE);
        let Some(info) = image.cases.get(case as usize).copied() else {
            return Err(broken("a case of no case"));
        };
        let targets = targets + 1;
        let target = |k: usize| code.targets.get(targets as usize + k).copied().unwrap_or(NONE);
        if let Some((tag, values)) = v.constructor() {
            if let Some(k) = image.find_arm_index(&info, tag, values.len()) {
                self.work::<M>(values.len())?;
                let at = (self.base + fields) as usize;
                for (i, f) in values.iter().enumerate() {
                    if let Some(slot) = self.regs.get_mut(at + i) {
                        *slot = f.clone();
                    }
                }
                return Ok(Some(target(k)));
            }
        }
        if let Value::Data(d) = v {
            if let INode::Con(tag, start, len) = image.node(*d) {
                if let Some(k) = image.find_arm_index(&info, tag, len as usize) {
                    self.work::<M>(len as usize)?;
                    let at = (self.base + fields) as usize;
                    for (i, &f) in image.list(start, len).iter().enumerate() {
                        if let Some(slot) = self.regs.get_mut(at + i) {
                            *slot = data_field(image, f);
                        }
                    }
                    return Ok(Some(target(k)));
                }
            }
        }
        if info.default != NONE {
            return Ok(Some(target(info.len as usize)));
        }
        Ok(None)
    }

    /// Apply closure `c` to one more argument `a`, its fuel paid: a partial
    /// application, or the body entered.
    #[inline]
    fn apply<const M: bool>(
        &mut self,
        code: &Code,
        c: Rc<Fun>,
        a: Val,
        ret: Ret,
    ) -> Result<(), Halt> {
        let pc = self.pc;
        if Self::wants(code, &c) <= 1 {
            return self.enter::<M>(code, c, Pass::One(a), ret, origin(code, pc));
        }
        // A partial application: the closure's values, its self if it is
        // a recursive function's own, then the argument.
        let rec = code.funcs.get(c.code as usize).is_some_and(|f| f.rec);
        let me = rec && c.applied == 0;
        let n = c.captured.len() + usize::from(me) + 1;
        self.room_for::<M>(Closure::<u32>::cell_bytes() + values_bytes_for::<u32>(n))?;
        self.work::<M>(n)?;
        let mut captured: Values<u32> = Values::with_capacity(n);
        captured.extend(c.captured.iter().cloned());
        if me {
            captured.push(Value::Fun(Rc::clone(&c)));
        }
        captured.push(a);
        let made = Value::Fun(Closure::new(c.code, c.applied + 1, captured));
        match ret {
            Ret::To { dst, pc } => {
                self.set(dst, made);
                self.pc = pc;
            }
            Ret::Tail => self.ret(made),
        }
        Ok(())
    }

    /// Enter the body of closure `c` with its last arguments `args`, called
    /// at `site`: a new frame above the current one, or (a tail call) in its
    /// place. Nothing is changed if the stacks cannot grow within the limit.
    #[inline]
    fn enter<const M: bool>(
        &mut self,
        code: &Code,
        c: Rc<Fun>,
        args: Pass,
        ret: Ret,
        site: u32,
    ) -> Result<(), Halt> {
        let Some(f) = code.funcs.get(c.code as usize).copied() else {
            return Err(broken("a closure of no function"));
        };
        let base = match ret {
            Ret::To { .. } => self.top,
            Ret::Tail => self.base,
        };
        let top = base as usize + f.frame as usize;
        if M {
            let full = matches!(ret, Ret::To { .. }) && self.frames.len() == self.frames.capacity();
            if full || top > self.regs.capacity() {
                self.grow_stacks(full, top)?;
            }
            self.work::<M>(f.frame as usize)?;
        }
        // A tail call's arguments are read before its caller's frame goes.
        let mut gathered: SmallVec<[Val; 4]> = SmallVec::new();
        let args = match (ret, args) {
            (Ret::Tail, Pass::Srcs { at, m }) => {
                gathered.extend(self.srcs(code, at, m).iter().map(|&s| self.read(code, s)));
                Pass::Gathered
            }
            (_, args) => args,
        };
        let caller = self.base;
        if let Ret::Tail = ret {
            cut(&mut self.regs, base as usize);
        }
        // The closure the body runs in: a `μλ`'s own (its self, which a
        // partial application holds first), else the one applied.
        let mut callee = c;
        if callee.applied != 0 {
            // A partial application holds its self (if recursive) and its
            // arguments after the function's captured values.
            let bound = callee.captured.get(f.captured as usize..).unwrap_or(&[]);
            let (me, bound) = match (f.rec, bound) {
                (true, [Value::Fun(me), rest @ ..]) => (Some(Rc::clone(me)), rest),
                (true, _) => return Err(broken("a partial application lost its self")),
                (false, bound) => (None, bound),
            };
            for v in bound {
                self.regs.push(v.clone());
            }
            if let Some(me) = me {
                callee = me;
            }
        }
        match args {
            Pass::One(v) => self.regs.push(v),
            Pass::Srcs { at, m } => {
                for &src in self.srcs(code, at, m) {
                    // Read in the caller's frame, which is still in place.
                    let v = self.read_in(code, src, caller);
                    self.regs.push(v);
                }
            }
            Pass::Gathered => self.regs.extend(gathered),
        }
        let same = match ret {
            Ret::To { dst, pc } => {
                // A call of the current closure (a function calling itself)
                // keeps it: the frame only notes that it is the same.
                let same = self.closure.as_ref().is_some_and(|k| Rc::ptr_eq(k, &callee));
                self.frames.push(Frame {
                    ret: pc,
                    base: self.base,
                    top: self.top,
                    dst,
                    site: self.site,
                    same,
                    closure: if same { None } else { self.closure.take() },
                });
                same
            }
            Ret::Tail => false,
        };
        fill(&mut self.regs, top);
        self.base = base;
        self.top = top as u32;
        if !same {
            self.closure = Some(callee);
        }
        self.site = site;
        self.pc = f.entry;
        Ok(())
    }

    /// A call of the current function's own self ([`Src::me`]) on the `m`
    /// operands from `at`, its value to `dst`: a frame of the same size
    /// above the current one, which keeps the current closure (its code and
    /// captured values are the callee's).
    #[inline(always)]
    fn self_call<const M: bool, const SLOW: bool>(&mut self, code: &Code, at: u32, m: u8, dst: Reg, entry: u32) -> Result<(), Halt> {
        let caller = self.base as usize;
        let base = self.top as usize;
        let frame = base - caller;
        let top = base + frame;
        if M && (self.frames.len() == self.frames.capacity() || top > self.regs.capacity()) {
            let full = self.frames.len() == self.frames.capacity();
            self.grow_stacks(full, top)?;
            self.work::<M>(frame)?;
        }
        for &src in self.srcs(code, at, m) {
            let v = self.read_in(code, src, caller as u32);
            self.regs.push(v);
        }
        fill(&mut self.regs, top);
        let pc = self.pc;
        self.frames.push(Frame {
            ret: pc + 1,
            base: caller as u32,
            top: base as u32,
            dst,
            site: self.site,
            same: true,
            closure: None,
        });
        self.base = base as u32;
        self.top = top as u32;
        self.site = origin(code, pc);
        self.pc = if SLOW { entry } else { self.open::<M>(code, entry) };
        Ok(())
    }

    /// The `m` operands from `at`.
    #[inline(always)]
    fn srcs<'c>(&self, code: &'c Code, at: u32, m: u8) -> &'c [Src] {
        let at = at as usize;
        code.srcs.get(at..at + usize::from(m)).unwrap_or(&[])
    }

    /// Grow the frame stack by one (if `full`) and the registers to `top`,
    /// within the limit.
    #[cold]
    #[inline(never)]
    fn grow_stacks(&mut self, full: bool, top: usize) -> Result<(), Halt> {
        if full {
            let held = self.held();
            grow(&mut self.frames, 1, held, &mut self.budget)?;
        }
        if top > self.regs.capacity() {
            if top >= u32::MAX as usize {
                return Err(Halt::Memory);
            }
            // Doubling from a power of two (see `even`), so that a run grows
            // its stack at the same points whatever room a reused machine's
            // stack had.
            let held = self.held();
            let extra = top - self.regs.len();
            grow(&mut self.regs, extra, held, &mut self.budget)?;
        }
        Ok(())
    }

    /// Return `v` to the frame below.
    #[inline]
    fn ret(&mut self, v: Val) {
        self.regs.truncate(self.base as usize);
        let Some(frame) = self.frames.pop() else {
            // The bottom frame is never returned from: only `Finish` ends.
            self.pc = FINISH;
            return;
        };
        self.base = frame.base;
        self.top = frame.top;
        if !frame.same {
            self.closure = frame.closure;
        }
        self.site = frame.site;
        self.set(frame.dst, v);
        self.pc = frame.ret;
    }

    /// Give back the fuel and counts of the current block, then take those
    /// of its instructions before the current pc again (they were made):
    /// the slow loop goes on from the current pc.
    pub(super) fn bail<const M: bool>(&mut self, code: &Code) {
        // The block runs straight from its meter to here: the nearest meter
        // before the pc opened it.
        let pc = self.pc as usize;
        let before = code.code.get(..pc).unwrap_or(&[]);
        let Some(start) = before.iter().rposition(|i| matches!(i, Instr::Meter { .. })) else {
            return;
        };
        let Some(&Instr::Meter { cost, rules }) = before.get(start) else {
            return;
        };
        if M {
            self.budget.tank.refund(u64::from(cost));
        }
        self.budget.counts.untally_block(&rules);
        for instr in &before[start + 1..] {
            let (rule, n) = instr.contractions();
            for _ in 0..n {
                if M {
                    self.budget.tank.take_block(1);
                }
                self.budget.counts.tally(rule);
            }
        }
    }

    /// Where the fast loop goes on at `pc`, a block's meter: past it, its
    /// block paid for and counted, when the slice holds the block's fuel
    /// (so a call or a return opens the next block without a dispatch of
    /// its own); else at the meter, which runs the block per contraction.
    #[inline(always)]
    fn open<const M: bool>(&mut self, code: &Code, pc: u32) -> u32 {
        if let Some(&Instr::Meter { cost, rules }) = code.code.get(pc as usize) {
            if !M || self.budget.tank.take_block(u64::from(cost)) {
                self.budget.counts.tally_block(&rules);
                return pc + 1;
            }
        }
        pc
    }
}

/// Fill `regs` up to `top` with placeholders (the registers a frame writes
/// before it reads them). A loop of pushes: for the few registers a frame
/// adds, cheaper than `resize` (fib 25: 16M instructions in `resize`).
#[inline(always)]
fn fill(regs: &mut Vec<Val>, top: usize) {
    while regs.len() < top {
        regs.push(Value::Int(0));
    }
}

/// The node instruction `pc` was compiled from.
#[inline]
pub(super) fn origin(code: &Code, pc: u32) -> u32 {
    code.origin.get(pc as usize).copied().unwrap_or(NONE)
}
