//! Curried calls on the CEK machine, eval/apply style (Marlow and Peyton
//! Jones, "Making a fast curry", 2004): a closure of a function of `n`
//! parameters (found once by the image's analysis) is entered when its
//! `n`-th argument arrives; before that, each application makes a partial
//! application — a closure holding the arguments so far — unless the next
//! argument follows at once, in which case the arguments wait on the operand
//! stack under a [`ContinuationFrame::Partial`] or [`ContinuationFrame::Spine`] and no closure is
//! made. Every application is still one contraction, paid in the order of
//! the nested calls, so the counts and the fuel bounds are the stepper's.
//!
//! A call that enters a body makes a new activation: its environment names
//! the application that saturated the function (the outermost of the
//! spine, the last contracted) and the continuation's height (see
//! [`Environment`]), which is what a backtrace reads.

use std::rc::Rc;

use super::{
    broken, closure_bytes, closure_rule, int_pair, CekRun, ContinuationFrame, Control, Environment,
    Fun, Val,
};
use crate::budget::Halt;
use crate::image::analysis::MAX_CHAIN;
use crate::image::{Func, INode, Id, Image};
use crate::machines::runtime::prims::int_prim;
use crate::machines::runtime::value::{cut, Closure, Value, Values};
use crate::Rule;

/// The arguments of a call kept inline; more (up to the analysis' one bound,
/// [`MAX_CHAIN`] parameters) spill to the heap.
const INLINE_ARGS: usize = 8;

/// How far [`CekRun::saturated_call`] took a call: whole, or its leading
/// arguments (their values on the operand stack).
enum Taken {
    Whole,
    Lead(usize),
}

impl CekRun {
    /// Contract the application (node `site`, or [`crate::image::NONE`])
    /// of `closure` to `argument`, its fuel already paid: enter the body,
    /// with the callee's locals where the continuation's end (so a tail
    /// call reuses the caller's), or make the partial application.
    #[inline]
    pub(super) fn call<const M: bool>(
        &mut self,
        image: &Image,
        closure: Rc<Fun>,
        argument: Val,
        site: Id,
    ) -> Result<Control, Halt> {
        let Some(f) = image.funcs.get(closure.code as usize).copied() else {
            return Err(broken("a closure of no function"));
        };
        self.call_closure::<M>(image, closure, &f, argument, site)
    }

    /// Contract the application `site` of `closure` (of function `f`) to
    /// `argument`, its fuel paid.
    #[inline(always)]
    pub(super) fn call_closure<const M: bool>(
        &mut self,
        image: &Image,
        closure: Rc<Fun>,
        f: &Func,
        argument: Val,
        site: Id,
    ) -> Result<Control, Halt> {
        if f.params == 1 {
            return self.enter_unary::<M>(closure, f, argument, site);
        }
        let applied = closure.applied;
        self.step::<M>(image, closure, f, applied, argument, site)
    }

    /// A function of one parameter, entered at once with its self (if it is
    /// recursive) and its argument as locals, called at `site`.
    // Measured gain (callgrind; benches/README.md, "Fast paths"): fib25 191.8M -> 158.9M instructions.
    #[inline(always)]
    fn enter_unary<const M: bool>(
        &mut self,
        closure: Rc<Fun>,
        f: &Func,
        argument: Val,
        site: Id,
    ) -> Result<Control, Halt> {
        cut(&mut self.locals, self.floor);
        // Under `MAX_LOCALS`, which `reserve_locals` keeps.
        let base = self.locals.len() as u32;
        let depth = 1 + u32::from(f.rec);
        self.reserve_locals::<M>(depth as usize)?;
        if f.rec {
            self.locals.push(Value::Fun(Rc::clone(&closure)));
        }
        self.locals.push(argument);
        self.env = Environment {
            closure: Some(closure),
            top: base + depth,
            depth,
            site,
            entry: self.kont.len() as u32,
        };
        Ok(Control::Eval(f.body))
    }

    /// Go on with a curried call: `closure` (of function `f`, holding `k`
    /// arguments) has just been applied to `value`, its argument number
    /// `applied + 1`, its fuel paid, with the `applied - k` arguments between
    /// on top of the operand stack, at application `site`. While `f` wants
    /// more and the top frame is `□ b`, keep the value and go on to `b`
    /// (taking an atom `b` at once); once `f` has all its parameters, enter
    /// its body, called at the last application; otherwise the partial
    /// application escapes as a closure. A loop, however long the chain.
    // Measured gain (callgrind; benches/README.md, "Fast paths"): a nine-parameter recursive function called
    // 100,000 times (more arguments than a spine takes) 1158.9M -> 368.5M.
    pub(super) fn step<const M: bool>(
        &mut self,
        image: &Image,
        closure: Rc<Fun>,
        f: &Func,
        mut applied: u32,
        mut value: Val,
        mut site: Id,
    ) -> Result<Control, Halt> {
        loop {
            if applied + 1 >= f.params {
                return self.enter_body::<M>(closure, f, applied, value, site);
            }
            if !matches!(self.kont.last(), Some(ContinuationFrame::Arg { .. })) {
                return self.partial::<M>(closure, f, applied, value);
            }
            let Some(ContinuationFrame::Arg {
                argument,
                app,
                env,
                below,
            }) = self.kont.pop()
            else {
                return Err(broken("the frame changed"));
            };
            self.push_operand::<M>(value)?;
            applied += 1;
            site = app;
            self.floor = below;
            self.enter(env);
            match self.atom(image, argument)? {
                Some(next) if self.pay_now::<M>(Rule::Beta) => value = next,
                _ => {
                    // The application is the argument frame's activation's.
                    let caller = self.env.activation();
                    self.push_frame::<M>(ContinuationFrame::Partial {
                        closure,
                        applied,
                        app,
                        caller,
                    })?;
                    return Ok(Control::Eval(argument));
                }
            }
        }
    }

    /// The value for a [`ContinuationFrame::Partial`] of application
    /// `app`, its fuel paid.
    #[inline]
    pub(super) fn partial_value<const M: bool>(
        &mut self,
        image: &Image,
        closure: Rc<Fun>,
        applied: u32,
        value: Val,
        app: Id,
    ) -> Result<Control, Halt> {
        let Some(f) = image.funcs.get(closure.code as usize).copied() else {
            return Err(broken("a closure of no function"));
        };
        self.step::<M>(image, closure, &f, applied, value, app)
    }

    /// Enter the body of `closure`'s function `f`, whose last parameter is
    /// `value`: its locals are its self (if recursive), the arguments the
    /// closure holds, the `applied - k` on top of the operand stack, and
    /// `value`, placed where the continuation's locals end; called at
    /// application `site`.
    #[inline]
    fn enter_body<const M: bool>(
        &mut self,
        closure: Rc<Fun>,
        f: &Func,
        applied: u32,
        value: Val,
        site: Id,
    ) -> Result<Control, Halt> {
        let k = closure.applied;
        let pending = applied.saturating_sub(k) as usize;
        cut(&mut self.locals, self.floor);
        // Under `MAX_LOCALS`, which `reserve_locals` keeps.
        let base = self.locals.len() as u32;
        let depth = f.params + u32::from(f.rec);
        self.reserve_locals::<M>(depth as usize)?;
        self.work::<M>(depth as usize)?;
        if k == 0 {
            if f.rec {
                self.locals.push(Value::Fun(Rc::clone(&closure)));
            }
        } else {
            // A partial application holds its self (if recursive) and its
            // arguments after the function's captured values.
            let Some(bound) = closure.captured.get(f.captured as usize..) else {
                return Err(broken("a partial application lost its arguments"));
            };
            // Few values, room made: a loop of pushes beats `extend` here.
            for value in bound {
                self.locals.push(value.clone());
            }
        }
        if pending == 1 {
            if let Some(first) = self.operands.pop() {
                self.locals.push(first);
            }
        } else {
            let at = self.operands.len().saturating_sub(pending);
            self.locals.extend(self.operands.drain(at..));
        }
        self.locals.push(value);
        self.env = Environment {
            closure: Some(closure),
            top: base + depth,
            depth,
            site,
            entry: self.kont.len() as u32,
        };
        Ok(Control::Eval(f.body))
    }

    /// The partial application of `closure` (of function `f`) to the
    /// `applied - k` arguments on top of the operand stack and `value`, as a
    /// closure: `closure`'s values, then its self if `closure` is a recursive
    /// function's own, then the new arguments.
    fn partial<const M: bool>(
        &mut self,
        closure: Rc<Fun>,
        f: &Func,
        applied: u32,
        value: Val,
    ) -> Result<Control, Halt> {
        let k = closure.applied;
        let pending = applied.saturating_sub(k) as usize;
        let me = f.rec && k == 0;
        let n = closure.captured.len() + usize::from(me) + pending + 1;
        self.room_for_cell::<M>(closure_bytes(n))?;
        self.work::<M>(n)?;
        let mut captured: Values<u32> = Values::with_capacity(n);
        captured.extend(closure.captured.iter().cloned());
        if me {
            captured.push(Value::Fun(Rc::clone(&closure)));
        }
        let at = self.operands.len().saturating_sub(pending);
        captured.extend(self.operands.drain(at..));
        captured.push(value);
        let made = Closure::new(closure.code, applied + 1, captured);
        Ok(Control::Return(Value::Fun(made)))
    }

    /// `f a₁ … aₘ` (node `id`, `2 ≤ m ≤ MAX_CHAIN`; `last` holds `aₘ` and
    /// `aₘ₋₁`, and `inner` is the application or head under them) with `f`
    /// an atom bound to a closure that takes exactly `m` more arguments: the
    /// call made whole by [`CekRun::saturated_call`] if it can be, else its
    /// arguments evaluated under one [`ContinuationFrame::Spine`], contracting each
    /// application as its argument arrives, instead of an argument frame per
    /// argument (each keeping the environment) and a partial frame per
    /// application. `None` (nothing done) for any other application.
    // Measured gain (callgrind, with `saturated_call`; benches/README.md, "Fast paths"): tak18 84.1M -> 59.7M;
    // church 65.2M -> 60.7M.
    #[inline(never)]
    pub(super) fn curried_call<const M: bool>(
        &mut self,
        image: &Image,
        id: Id,
        last: [Id; 2],
        inner: Id,
    ) -> Result<Option<Control>, Halt> {
        // The arguments, last first: the last two are known.
        // A fixed array for the usual few, a vector past it (a `SmallVec`
        // here cost tak18 +7%: 58.4M -> 62.8M instructions).
        // A fixed array for the usual few; a longer chain (up to the
        // analysis' bound) is gathered again into a vector, off the hot path
        // (gathering into a `SmallVec` cost tak18 +7%: 58.4M -> 62.8M).
        let mut inline = [0 as Id; INLINE_ARGS];
        inline[0] = last[0];
        inline[1] = last[1];
        let mut m = 2;
        let mut head = image.node(inner);
        let mut long = Vec::new();
        while let INode::App(function, a) = head {
            let Some(slot) = inline.get_mut(m) else {
                long = long_chain(image, last, inner);
                if long.is_empty() {
                    return Ok(None);
                }
                m = long.len();
                head = image.node(spine_head(image, inner));
                break;
            };
            *slot = a;
            m += 1;
            head = image.node(function);
        }
        let args: &[Id] = if long.is_empty() { &inline[..m] } else { &long };
        let Some(Value::Fun(closure)) = self.atom_of(head)? else {
            return Ok(None);
        };
        let Some(f) = image.funcs.get(closure.code as usize).copied() else {
            return Ok(None);
        };
        if f.params.checked_sub(closure.applied) != Some(m as u32) {
            return Ok(None);
        }
        let lead = match self.saturated_call::<M>(image, &closure, &f, args)? {
            Taken::Whole => {
                // The locals are in place: the rest of the new activation.
                self.env.closure = Some(closure);
                self.env.site = id;
                self.env.entry = self.kont.len() as u32;
                return Ok(Some(Control::Eval(f.body)));
            }
            Taken::Lead(lead) => lead,
        };
        self.push_env_frame::<M>(|env, below| ContinuationFrame::Spine {
            closure,
            term: id,
            index: lead as u32,
            m: m as u32,
            env,
            below,
        })?;
        Ok(Some(Control::Eval(args[m - 1 - lead])))
    }

    /// The call of `closure` (of function `f`, taking exactly the `m`
    /// arguments `args`, last first) made whole when each argument is an
    /// atom or an integer operation on integer atoms that does not fail and
    /// the fuel covers every contraction: the contractions of the nested
    /// calls in their order, and the body's locals in place (the current
    /// environment's `top` and `depth` set to them; the caller sets its
    /// closure). Otherwise the leading such arguments are taken at once, if
    /// the fuel covers their contractions, their values left on the operand
    /// stack for a spine frame, and the rest is the frame's.
    // Measured gain (callgrind; benches/README.md, "Fast paths"): whole calls tak18 88.7M -> 59.7M, church 75.0M
    // -> 60.7M; leading arguments ackermann 689.1M -> 630.3M, tail 2069M -> 1897M.
    #[inline(always)]
    fn saturated_call<const M: bool>(
        &mut self,
        image: &Image,
        closure: &Rc<Fun>,
        f: &Func,
        args: &[Id],
    ) -> Result<Taken, Halt> {
        let m = args.len();
        let k = closure.applied;
        let depth = f.params + u32::from(f.rec);
        self.reserve_locals::<M>(depth as usize)?;
        // The new locals go above the current ones, then down to the floor.
        let old = self.locals.len();
        if k == 0 {
            if f.rec {
                self.locals.push(Value::Fun(Rc::clone(closure)));
            }
        } else {
            let Some(bound) = closure.captured.get(f.captured as usize..) else {
                return Err(broken("a partial application lost its arguments"));
            };
            // Few values, room made: a loop of pushes beats `extend` here.
            for value in bound {
                self.locals.push(value.clone());
            }
        }
        let from = self.locals.len();
        // Which arguments are integer operations, by position from the last.
        let mut prims = 0u32;
        let mut simple = 0;
        let mut units = 0;
        for (j, &a) in args.iter().enumerate().rev() {
            let Some((value, prim)) = self.simple_argument(image, a) else {
                break;
            };
            self.locals.push(value);
            prims |= u32::from(prim) << j;
            simple += 1;
            units += 1 + u32::from(prim);
        }
        if simple == m && self.has_fuel::<M>(units) {
            self.pay_applications::<M>(m, m, prims, k == 0 && f.rec)?;
            let base = self.floor.min(old);
            if base < old {
                self.locals.drain(base..old);
            }
            // Under `MAX_LOCALS`, which `reserve_locals` keeps.
            self.env.top = base as u32 + depth;
            self.env.depth = depth;
            return Ok(Taken::Whole);
        }
        let lead = simple.min(m - 1);
        if lead < simple {
            // All simple, but not all paid: leave the last to the frame.
            units -= 1 + (prims & 1);
        }
        if lead == 0 || !self.has_fuel::<M>(units) {
            cut(&mut self.locals, old);
            return Ok(Taken::Lead(0));
        }
        self.pay_applications::<M>(m, lead, prims, k == 0 && f.rec)?;
        self.reserve_operands::<M>(lead)?;
        cut(&mut self.locals, from + lead);
        if lead == 1 {
            if let Some(first) = self.locals.pop() {
                self.operands.push(first);
            }
        } else {
            self.operands.extend(self.locals.drain(from..));
        }
        cut(&mut self.locals, old);
        Ok(Taken::Lead(lead))
    }

    /// Pay for the first `n` of the `m` applications of a curried call
    /// (the fuel is there), each after its argument's prim contraction if
    /// `prims` has its bit (by position from the last), the first under
    /// `beta_rec` if `rec`.
    #[inline(always)]
    fn pay_applications<const M: bool>(
        &mut self,
        m: usize,
        n: usize,
        prims: u32,
        rec: bool,
    ) -> Result<(), Halt> {
        for j in (m - n..m).rev() {
            if prims >> j & 1 == 1 {
                self.take::<M>(Rule::Prim)?;
            }
            let rule = if j + 1 == m && rec {
                Rule::BetaRec
            } else {
                Rule::Beta
            };
            self.take::<M>(rule)?;
        }
        Ok(())
    }

    /// The value of argument `a` if it is an atom or an integer operation on
    /// integer atoms that does not fail (and whether it is the latter).
    #[inline(always)]
    fn simple_argument(&self, image: &Image, a: Id) -> Option<(Val, bool)> {
        Some(match image.node(a) {
            INode::Var { index, slot } => match self.slot(index, slot)? {
                // An integer is copied without the general clone.
                &Value::Int(n) => (Value::Int(n), false),
                value => (value.clone(), false),
            },
            INode::Int(n) => (Value::Int(n), false),
            INode::Bool(b) => (Value::Bool(b), false),
            INode::Str(s) => (Value::Lit(s), false),
            INode::Con(tag, _, 0) => (Value::Tag(tag), false),
            INode::Prim(op, start) => {
                let (x, y) = int_pair(image, op, start)?;
                let value = int_prim(op, self.int(image, x)?, self.int(image, y)?)?;
                (value, true)
            }
            _ => return None,
        })
    }

    /// `value` for the [`ContinuationFrame::Spine`] on top: contract its application
    /// (or pause before it); then go on to the next argument with the frame
    /// in place, or, after the last, enter the body with every value bound.
    pub(super) fn spine_value<const M: bool>(
        &mut self,
        image: &Image,
        value: Val,
    ) -> Result<Control, Halt> {
        let Some(ContinuationFrame::Spine {
            closure,
            term,
            index,
            m,
            env,
            ..
        }) = self.kont.last()
        else {
            return Err(broken("no spine frame"));
        };
        let rule = if *index == 0 {
            closure_rule(image, closure)
        } else {
            Rule::Beta
        };
        let (term, index, m) = (*term, *index, *m);
        if index + 1 < m {
            // Not the last argument: keep the value and go on to the next,
            // keeping the frame.
            let next = spine_arg(image, term, m - 2 - index);
            let env = env.clone();
            let value = self.take_at_frame::<M>(rule, value)?;
            if let Some(ContinuationFrame::Spine { index, .. }) = self.kont.last_mut() {
                *index += 1;
            }
            self.push_operand::<M>(value)?;
            self.enter(env);
            return Ok(Control::Eval(next));
        }
        let value = self.take_at_frame::<M>(rule, value)?;
        let Some(ContinuationFrame::Spine { closure, below, .. }) = self.kont.pop() else {
            return Err(broken("the frame changed"));
        };
        self.floor = below;
        let Some(f) = image.funcs.get(closure.code as usize).copied() else {
            return Err(broken("a closure of no function"));
        };
        let applied = closure.applied + m - 1;
        self.enter_body::<M>(closure, &f, applied, value, term)
    }
}

/// The application `back` places inside the outermost one, `term`, of a
/// spine `f a₁ … aₘ` (`back < m`): the one a spine frame contracts next.
pub(super) fn spine_app(image: &Image, term: Id, back: u32) -> Id {
    let mut at = term;
    for _ in 0..back {
        match image.node(at) {
            INode::App(function, _) => at = function,
            _ => break,
        }
    }
    at
}

/// The argument `back` places left of the last in the spine `term` of a
/// call `f a₁ … aₘ` (`back < m`).
#[inline]
fn spine_arg(image: &Image, term: Id, back: u32) -> Id {
    let mut at = term;
    for _ in 0..back {
        if let INode::App(function, _) = image.node(at) {
            at = function;
        }
    }
    match image.node(at) {
        INode::App(_, argument) => argument,
        _ => term,
    }
}

/// The arguments of the curried call `f a₁ … aₘ` above `inner`, last first
/// (`last` holds `aₘ` and `aₘ₋₁`), when `m` is past [`INLINE_ARGS`]; empty
/// past [`MAX_CHAIN`], the analysis' bound on a function's parameters.
#[cold]
fn long_chain(image: &Image, last: [Id; 2], inner: Id) -> Vec<Id> {
    let mut args = last.to_vec();
    let mut head = image.node(inner);
    while let INode::App(function, a) = head {
        if args.len() >= MAX_CHAIN as usize {
            return Vec::new();
        }
        args.push(a);
        head = image.node(function);
    }
    args
}

/// The head `f` of the application spine above `inner`.
fn spine_head(image: &Image, inner: Id) -> Id {
    let mut id = inner;
    while let INode::App(function, _) = image.node(id) {
        id = function;
    }
    id
}

