//! Runtime values of the environment machines (`env` and `cek`): integers,
//! booleans, strings, flat closures (Cardelli, "Compiling a functional
//! language", 1984) and constructor cells under reference counting, their
//! read-back to de Bruijn terms (Plotkin's `Real` map from closures to terms,
//! "Call-by-name, call-by-value and the λ-calculus", 1975), and the live-byte
//! accounting behind the memory limit.
//!
//! # Memory accounting
//!
//! Every reference-counted cell (a closure, a constructor cell, a string made
//! at run time) charges its bytes to a per-thread live-byte counter when it is
//! made and refunds them when its last reference goes: the `Rc` header, the
//! cell itself, and any spilled field or capture array. Values are not `Send`,
//! so a run's cells are made and freed on one thread; a run reads the counter
//! against a baseline taken when it starts (or resumes), and adds the
//! capacity of its own stacks. That sum is what [`crate::Limits::memory`]
//! bounds.
//!
//! Values form no cycles (the calculus has no mutation, and a recursive
//! closure does not hold itself: the machines pass it to its body when it is
//! applied), so reference counting frees everything. Dropping a long chain of
//! cells unlinks them into a work list rather than recursing.

use std::cell::Cell;
use std::rc::Rc;

use hashbrown::HashMap;
use smallvec::SmallVec;

use crate::datum::{Builder, NotData};
use crate::host::{host_step, max_datum_nodes, HostStep};
use crate::subst::Rebuild;
use crate::{
    delta, Arena, Counts, Datum, EvalError, HostFunctions, HostId, Node, Operand, Prim, PrimValue,
    Rule, Term,
};

/// Bytes of an `Rc` allocation's header (the strong and weak counts), plus
/// what the system allocator adds to each allocation for its own header and
/// rounding (16 bytes on 64-bit glibc malloc: common practice), so that the
/// limit tracks resident memory and not only the bytes asked for.
const RC_HEADER: usize = 2 * std::mem::size_of::<usize>() + 16;

thread_local! {
    /// Live bytes of runtime cells on this thread.
    static LIVE: Cell<isize> = const { Cell::new(0) };
}

#[inline]
fn charge(bytes: usize) {
    LIVE.with(|live| live.set(live.get().wrapping_add(bytes as isize)));
}

#[inline]
fn refund(bytes: usize) {
    LIVE.with(|live| live.set(live.get().wrapping_sub(bytes as isize)));
}

#[inline]
fn live() -> isize {
    LIVE.with(Cell::get)
}

/// One run's view of the live-byte counter: the cells it holds now are the
/// counter's growth since its baseline.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Meter {
    baseline: isize,
}

impl Meter {
    /// Bytes of cells made by this run and still alive.
    #[inline]
    pub(crate) fn cells(&self) -> usize {
        usize::try_from(live().wrapping_sub(self.baseline)).unwrap_or(0)
    }

    /// A meter for a run that starts (or resumes) holding `cells` bytes of
    /// cells (as measured by [`Meter::cells`] when it paused): 0 for a fresh
    /// run. Other runs may have come and gone on this thread in between.
    pub(crate) fn holding(cells: usize) -> Self {
        Meter {
            baseline: live().wrapping_sub(cells as isize),
        }
    }
}

/// Fuel handed to the hot loop in slices of at most
/// [`CANCEL_POLL_INTERVAL`](crate::CANCEL_POLL_INTERVAL) units, so that paying
/// for a contraction tests one counter, and the slow checks (cancellation,
/// memory, the rest of the fuel) run once per slice, before its first
/// contraction. Out of fuel lands on the same contraction as a single counter
/// would: the slices add up to the fuel given.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Tank {
    /// Units the hot loop may spend before the next slow check.
    slice: u64,
    /// Units not yet handed out.
    reserve: u64,
}

impl Tank {
    /// A tank holding `fuel`, with an empty slice (so the first contraction
    /// makes the slow checks).
    pub(crate) fn new(fuel: u64) -> Self {
        Tank {
            slice: 0,
            reserve: fuel,
        }
    }

    /// Pay one unit from the slice; `false` when the slice is empty and the
    /// caller must make its slow checks and [`Tank::refill`].
    #[inline(always)]
    pub(crate) fn take(&mut self) -> bool {
        if self.slice == 0 {
            return false;
        }
        self.slice -= 1;
        true
    }

    /// Pay two units from the slice if it holds them; `false` (paying
    /// nothing) otherwise, and the caller pays one at a time.
    #[inline(always)]
    pub(crate) fn take2(&mut self) -> bool {
        if self.slice < 2 {
            return false;
        }
        self.slice -= 2;
        true
    }

    /// Whether `n` units are left in all.
    #[cfg_attr(not(feature = "cek"), allow(dead_code))]
    #[inline(always)]
    pub(crate) fn has(&self, n: u64) -> bool {
        self.slice >= n || self.slice.saturating_add(self.reserve) >= n
    }

    /// Move the next slice out of the reserve; `false` if no fuel is left.
    pub(crate) fn refill(&mut self) -> bool {
        let next = self.reserve.min(crate::CANCEL_POLL_INTERVAL);
        self.reserve -= next;
        self.slice += next;
        self.slice > 0
    }

    /// Units left in all.
    #[cfg_attr(not(feature = "cek"), allow(dead_code))]
    pub(crate) fn left(&self) -> u64 {
        self.slice.saturating_add(self.reserve)
    }

    /// Add `more` units to the reserve.
    #[cfg_attr(not(feature = "cek"), allow(dead_code))]
    pub(crate) fn add(&mut self, more: u64) {
        self.reserve = self.reserve.saturating_add(more);
    }

    /// Pay `n` units (a host call's fuel) from the slice, then the reserve;
    /// `false`, paying nothing, if fewer are left.
    pub(crate) fn spend(&mut self, n: u64) -> bool {
        if !self.has(n) {
            return false;
        }
        let from_slice = n.min(self.slice);
        self.slice -= from_slice;
        self.reserve -= n - from_slice;
        true
    }
}

/// Shorten `values` to `len`, dropping the values above one at a time
/// (inlined: the stacks of the machines lose one or two values at a time, for
/// which this is cheaper than the general slice drop).
#[inline(always)]
pub(crate) fn cut<'a, C: Code<'a>>(values: &mut Vec<Value<'a, C>>, len: usize) {
    while values.len() > len {
        values.pop();
    }
}

/// Stacks larger than this many bytes are freed after a run rather than kept
/// for the next one, so one big run does not pin memory (which the next run's
/// limit would count).
pub(crate) const KEEP_STACK_BYTES: usize = 64 << 10;

/// An empty vector of `U` that reuses `v`'s allocation when `T` and `U` have
/// the same layout (the standard library collects a `filter_map` of a
/// vector's own `into_iter` in place) and `v` is not larger than
/// [`KEEP_STACK_BYTES`]; otherwise a new empty vector. This is how a machine
/// keeps its stacks across runs whose values borrow different programs.
pub(crate) fn recycle<T, U>(mut v: Vec<T>) -> Vec<U> {
    if v.capacity() == 0 || v.capacity() * std::mem::size_of::<T>() > KEEP_STACK_BYTES {
        return Vec::new();
    }
    v.clear();
    v.into_iter().filter_map(|_| None::<U>).collect()
}

/// What the machines' closures keep of their code, for read-back: the source
/// `λ` or `μλ` term, and which of its free de Bruijn indices each captured
/// value stands for.
pub(crate) trait Code<'a> {
    /// The closure's source term: a `Node::Lam` or `Node::RecLam`.
    fn term(&self) -> &'a Term<'a>;
    /// The free index (relative to [`Code::term`]) of captured value `slot`.
    fn free_index(&self, slot: usize) -> usize;
}

/// A closure whose code is its source term captures the free indices
/// `0..scope` in order.
impl<'a> Code<'a> for &'a Term<'a> {
    #[inline]
    fn term(&self) -> &'a Term<'a> {
        self
    }

    #[inline]
    fn free_index(&self, slot: usize) -> usize {
        slot
    }
}

/// A runtime value. Sixteen bytes: immediate integers and booleans, program
/// literals shared with the program's arena, and reference-counted cells.
pub(crate) enum Value<'a, C: Code<'a>> {
    /// An integer.
    Int(i64),
    /// A boolean.
    Bool(bool),
    /// A value that is a node of the program itself: a string literal or a
    /// constructor with no fields. Costs no allocation.
    Lit(&'a Term<'a>),
    /// A string made at run time.
    Str(Rc<Text>),
    /// A constructor with fields.
    Con(Rc<ConCell<'a, C>>),
    /// A closure.
    Fun(Rc<Closure<'a, C>>),
}

impl<'a, C: Code<'a>> Clone for Value<'a, C> {
    #[inline]
    fn clone(&self) -> Self {
        match self {
            Value::Int(n) => Value::Int(*n),
            Value::Bool(b) => Value::Bool(*b),
            Value::Lit(t) => Value::Lit(t),
            Value::Str(s) => Value::Str(Rc::clone(s)),
            Value::Con(c) => Value::Con(Rc::clone(c)),
            Value::Fun(f) => Value::Fun(Rc::clone(f)),
        }
    }
}

impl<'a, C: Code<'a>> Value<'a, C> {
    /// What a primitive or an error message sees of this value.
    pub(crate) fn operand(&self) -> Operand<'_> {
        match self {
            Value::Int(n) => Operand::Int(*n),
            Value::Bool(b) => Operand::Bool(*b),
            Value::Str(s) => Operand::Str(&s.text),
            Value::Lit(t) => match *t.node() {
                Node::Str(s) => Operand::Str(s),
                Node::Con(tag, _) => Operand::Con(tag),
                Node::Int(n) => Operand::Int(n),
                Node::Bool(b) => Operand::Bool(b),
                _ => Operand::Function,
            },
            Value::Con(c) => Operand::Con(c.tag),
            Value::Fun(_) => Operand::Function,
        }
    }

    /// The constructor's tag and fields, if this is a constructor value.
    #[inline]
    pub(crate) fn constructor(&self) -> Option<(&'a str, &[Value<'a, C>])> {
        match self {
            Value::Con(c) => Some((c.tag, &c.fields)),
            Value::Lit(t) => match *t.node() {
                Node::Con(tag, _) => Some((tag, &[])),
                _ => None,
            },
            _ => None,
        }
    }

    /// Whether dropping this value would free a cell that holds other values
    /// (and so could start a chain of frees).
    #[inline]
    fn owns_cell(&self) -> bool {
        match self {
            Value::Con(c) => Rc::strong_count(c) == 1,
            Value::Fun(f) => Rc::strong_count(f) == 1,
            _ => false,
        }
    }
}

/// A string made at run time (by `++` or `decimal`).
pub(crate) struct Text {
    text: Box<str>,
}

impl Text {
    /// A string cell, charged to the live-byte counter.
    pub(crate) fn new(text: String) -> Rc<Text> {
        let text = text.into_boxed_str();
        charge(Self::bytes(text.len()));
        Rc::new(Text { text })
    }

    fn bytes(len: usize) -> usize {
        RC_HEADER + std::mem::size_of::<Text>() + len
    }
}

impl Drop for Text {
    fn drop(&mut self) {
        refund(Self::bytes(self.text.len()));
    }
}

/// Fields or captured values stored inline up to this many.
const INLINE: usize = 3;

/// The fields of a constructor cell or the captured values of a closure.
pub(crate) type Values<'a, C> = SmallVec<[Value<'a, C>; INLINE]>;

fn values_bytes<'a, C: Code<'a>>(values: &Values<'a, C>) -> usize {
    if values.spilled() {
        values.capacity() * std::mem::size_of::<Value<'a, C>>()
    } else {
        0
    }
}

/// A constructor applied to values.
pub(crate) struct ConCell<'a, C: Code<'a>> {
    /// The constructor's tag.
    pub(crate) tag: &'a str,
    /// Its fields, field 1 first.
    pub(crate) fields: Values<'a, C>,
}

impl<'a, C: Code<'a>> ConCell<'a, C> {
    /// A constructor cell, charged to the live-byte counter.
    pub(crate) fn new(tag: &'a str, fields: Values<'a, C>) -> Rc<Self> {
        charge(RC_HEADER + std::mem::size_of::<Self>() + values_bytes(&fields));
        Rc::new(ConCell { tag, fields })
    }
}

impl<'a, C: Code<'a>> Drop for ConCell<'a, C> {
    fn drop(&mut self) {
        refund(RC_HEADER + std::mem::size_of::<Self>() + values_bytes(&self.fields));
        release(&mut self.fields);
    }
}

/// A flat closure: its code and the values of the free variables it uses.
pub(crate) struct Closure<'a, C: Code<'a>> {
    /// The machine's code for the function.
    pub(crate) code: C,
    /// The captured values, in the order [`Code::free_index`] describes.
    pub(crate) captured: Values<'a, C>,
}

impl<'a, C: Code<'a>> Closure<'a, C> {
    /// A closure, charged to the live-byte counter.
    pub(crate) fn new(code: C, captured: Values<'a, C>) -> Rc<Self> {
        charge(RC_HEADER + std::mem::size_of::<Self>() + values_bytes(&captured));
        Rc::new(Closure { code, captured })
    }

    /// Bytes charged for a closure cell whose captured values are inline.
    #[cfg_attr(not(feature = "env"), allow(dead_code))]
    pub(crate) const fn cell_bytes() -> usize {
        RC_HEADER + std::mem::size_of::<Self>()
    }

    /// Make this closure, held by one reference, into a closure of `code`
    /// over `captured`, reusing its cell; the accounting follows. Whether
    /// the cell grew (its captured values spilled to a larger array).
    #[cfg_attr(not(feature = "env"), allow(dead_code))]
    pub(crate) fn reuse(&mut self, code: C, captured: Values<'a, C>) -> bool {
        let (before, after) = (values_bytes(&self.captured), values_bytes(&captured));
        refund(before);
        charge(after);
        let mut old = std::mem::replace(&mut self.captured, captured);
        self.code = code;
        release(&mut old);
        after > before
    }

    /// [`Closure::reuse`] with captured values made by `make`, which may
    /// move values out of the old ones (leaving anything in their place)
    /// instead of cloning them; what it leaves is released as usual.
    ///
    /// # Errors
    ///
    /// The error `make` gives; the closure keeps its code, and possibly
    /// fewer of its captured values.
    #[cfg_attr(not(feature = "env"), allow(dead_code))]
    #[inline]
    pub(crate) fn reshape<E>(
        &mut self,
        code: C,
        make: impl FnOnce(&mut Values<'a, C>) -> Result<Values<'a, C>, E>,
    ) -> Result<bool, E> {
        let captured = make(&mut self.captured)?;
        Ok(self.reuse(code, captured))
    }
}

impl<'a, C: Code<'a>> Drop for Closure<'a, C> {
    fn drop(&mut self) {
        refund(RC_HEADER + std::mem::size_of::<Self>() + values_bytes(&self.captured));
        release(&mut self.captured);
    }
}

/// Drop `values` without native recursion: cells freed by this drop have
/// their own values moved onto a work list before they go, so a list or a
/// chain of closures a million long is freed by a loop.
fn release<'a, C: Code<'a>>(values: &mut Values<'a, C>) {
    if !values.iter().any(Value::owns_cell) {
        // Dropping these frees no cell that holds values: no chain starts.
        return;
    }
    let mut pending: Vec<Value<'a, C>> = values.drain(..).collect();
    while let Some(value) = pending.pop() {
        match value {
            Value::Con(cell) => {
                if let Ok(mut cell) = Rc::try_unwrap(cell) {
                    pending.extend(cell.fields.drain(..));
                    // `cell` drops here with no fields left.
                }
            }
            Value::Fun(closure) => {
                if let Ok(mut closure) = Rc::try_unwrap(closure) {
                    pending.extend(closure.captured.drain(..));
                }
            }
            _ => {}
        }
    }
}

/// Apply primitive `op` to values: integer arithmetic and comparison inline,
/// everything else (and every error) through [`delta`], so results and
/// messages are the stepper's.
///
/// # Errors
///
/// The error [`delta`] gives.
#[inline]
pub(crate) fn apply_prim<'a, C: Code<'a>>(
    op: Prim,
    args: &[Value<'a, C>],
) -> Result<Value<'a, C>, EvalError> {
    if let [Value::Int(a), Value::Int(b)] = *args {
        if let Some(value) = int_prim(op, a, b) {
            return Ok(value);
        }
    }
    let operands: SmallVec<[Operand<'_>; 2]> = args.iter().map(Value::operand).collect();
    Ok(match delta(op, &operands)? {
        PrimValue::Int(n) => Value::Int(n),
        PrimValue::Bool(b) => Value::Bool(b),
        PrimValue::Str(s) => Value::Str(Text::new(s)),
    })
}

/// `op(x, y)` on integers when it is a comparison.
#[inline]
pub(crate) fn int_test(op: Prim, x: i64, y: i64) -> Option<bool> {
    Some(match op {
        Prim::Lt => x < y,
        Prim::Le => x <= y,
        Prim::Gt => x > y,
        Prim::Ge => x >= y,
        Prim::Eq => x == y,
        Prim::Ne => x != y,
        _ => return None,
    })
}

/// `op(x, y)` on integers when it is a comparison or an arithmetic operation
/// that does not fail; `None` sends everything else through `delta`.
#[inline]
pub(crate) fn int_prim<'a, C: Code<'a>>(op: Prim, x: i64, y: i64) -> Option<Value<'a, C>> {
    match op {
        Prim::Add => x.checked_add(y).map(Value::Int),
        Prim::Sub => x.checked_sub(y).map(Value::Int),
        Prim::Mul => x.checked_mul(y).map(Value::Int),
        _ => int_test(op, x, y).map(Value::Bool),
    }
}

/// The error for a variable that escapes every binder, which a validated
/// program does not have; worded as the stepper words it.
pub(crate) fn free_variable(index: u32) -> EvalError {
    EvalError::new(
        crate::ErrorKind::TypeMismatch,
        format!("free variable #{index} in a program that should be closed"),
    )
}

/// Read a value back into a closed de Bruijn term in `out`: a constructor
/// field by field, a closure as its source `λ`/`μλ` with the captured values
/// (read back) substituted for its free variables, exactly the term the
/// substitution stepper would hold. Iterative, and memoised on the identity
/// of cells held more than once, so a shared cell is read back once and its
/// term shared (a cell with one holder is reached at most once).
pub(crate) fn read_back<'a: 'o, 'o, C: Code<'a>>(
    root: &Value<'a, C>,
    out: &'o Arena,
) -> &'o Term<'o> {
    enum Job<'v, 'a, C: Code<'a>> {
        Visit(&'v Value<'a, C>),
        Build(&'v Value<'a, C>),
    }
    match root {
        Value::Int(n) => return out.int(*n),
        Value::Bool(b) => return out.boolean(*b),
        Value::Lit(t) => return t,
        Value::Str(s) => return out.string(&s.text),
        _ => {}
    }
    let mut memo: HashMap<*const (), &'o Term<'o>> = HashMap::new();
    let mut rebuild = Rebuild::new(out, usize::MAX);
    let mut jobs: SmallVec<[Job<'_, 'a, C>; 16]> = SmallVec::new();
    jobs.push(Job::Visit(root));
    let mut done: SmallVec<[&'o Term<'o>; 16]> = SmallVec::new();
    let placeholder = out.int(0);
    while let Some(job) = jobs.pop() {
        match job {
            Job::Visit(value) => {
                let (key, children, shared): (*const (), &[Value<'a, C>], bool) = match value {
                    Value::Int(n) => {
                        done.push(out.int(*n));
                        continue;
                    }
                    Value::Bool(b) => {
                        done.push(out.boolean(*b));
                        continue;
                    }
                    Value::Lit(t) => {
                        done.push(t);
                        continue;
                    }
                    Value::Str(s) => (Rc::as_ptr(s).cast(), &[], Rc::strong_count(s) > 1),
                    Value::Con(c) => (Rc::as_ptr(c).cast(), &c.fields, Rc::strong_count(c) > 1),
                    Value::Fun(f) => (Rc::as_ptr(f).cast(), &f.captured, Rc::strong_count(f) > 1),
                };
                if shared {
                    if let Some(term) = memo.get(&key) {
                        done.push(term);
                        continue;
                    }
                }
                jobs.push(Job::Build(value));
                jobs.extend(children.iter().rev().map(Job::Visit));
            }
            Job::Build(value) => {
                let (key, term): (*const (), &'o Term<'o>) = match value {
                    Value::Str(s) => (Rc::as_ptr(s).cast(), out.string(&s.text)),
                    Value::Con(c) => {
                        let at = done.len().saturating_sub(c.fields.len());
                        let fields = out.terms(&done[at..]);
                        done.truncate(at);
                        (Rc::as_ptr(c).cast(), out.term(Node::Con(c.tag, fields)))
                    }
                    Value::Fun(f) => {
                        let at = done.len().saturating_sub(f.captured.len());
                        let source = f.code.term();
                        let (body, binders, rec) = match *source.node() {
                            Node::Lam(body) => (body, 1, false),
                            Node::RecLam(body) => (body, 2, true),
                            _ => (source, 0, false),
                        };
                        let term = if source.is_closed() || binders == 0 {
                            source
                        } else {
                            let mut values = vec![placeholder; source.scope() as usize];
                            for (slot, term) in done[at..].iter().enumerate() {
                                if let Some(v) = values.get_mut(f.code.free_index(slot)) {
                                    *v = term;
                                }
                            }
                            // With no budget the rebuild cannot fail.
                            let body = rebuild.instantiate(body, binders, &values).unwrap_or(body);
                            if rec {
                                out.rec_lam(body)
                            } else {
                                out.lam(body)
                            }
                        };
                        done.truncate(at);
                        (Rc::as_ptr(f).cast(), term)
                    }
                    // Immediate values never get a build job.
                    _ => continue,
                };
                let shared = match value {
                    Value::Str(s) => Rc::strong_count(s) > 1,
                    Value::Con(c) => Rc::strong_count(c) > 1,
                    Value::Fun(f) => Rc::strong_count(f) > 1,
                    _ => false,
                };
                if shared {
                    memo.insert(key, term);
                }
                done.push(term);
            }
        }
    }
    done.pop().unwrap_or(placeholder)
}

/// Why a machine's run stopped without a value (env and cek). Boxed errors
/// keep `Result<_, Halt>` small on the hot path.
pub(crate) enum Halt {
    /// An evaluation error.
    Error(Box<EvalError>),
    /// The fuel ran out (on cek, the run can resume).
    OutOfFuel,
    /// The memory limit.
    Memory,
    /// The run was cancelled.
    Cancelled,
}

impl Halt {
    /// An evaluation error, boxed.
    #[cold]
    pub(crate) fn error(error: EvalError) -> Halt {
        Halt::Error(Box::new(error))
    }
}

/// A host function's contraction over runtime values, in the order
/// `host::HostStep` fixes: read `args` as data (within `room` bytes), let
/// `host_step` decide, pay its fuel from `tank` (when `metered`) and count
/// it, and convert the result. The caller pops the arguments if it is made;
/// out of fuel leaves everything as it was.
pub(crate) fn host_call<'a, C: Code<'a>>(
    host: &HostFunctions,
    id: HostId,
    args: &[Value<'a, C>],
    tank: &mut Tank,
    counts: &mut Counts,
    metered: bool,
    room: usize,
) -> Result<Value<'a, C>, Halt> {
    let fuel_left = if metered { tank.left() } else { u64::MAX };
    let max_nodes = max_datum_nodes(room);
    let data = if fuel_left > 0 {
        args.iter().map(|v| to_datum(v, max_nodes)).collect()
    } else {
        Ok(Vec::new())
    };
    match host_step(host, id, data, fuel_left) {
        HostStep::OutOfFuel => Err(Halt::OutOfFuel),
        HostStep::TooLarge => Err(Halt::Memory),
        HostStep::Made { fuel, result } => {
            if metered {
                tank.spend(fuel);
            }
            counts.add(Rule::Prim);
            counts.add_host_fuel(fuel - 1);
            result.map(|datum| from_datum(&datum)).map_err(Halt::error)
        }
    }
}

/// Read `value` as a datum for a host function, of at most `max_nodes`
/// nodes (see `host::HostStep`).
pub(crate) fn to_datum<'a, C: Code<'a>>(
    value: &Value<'a, C>,
    max_nodes: usize,
) -> Result<Datum<'a>, NotData> {
    /// A value, or a literal term inside the program.
    enum Item<'v, 'a, C: Code<'a>> {
        Value(&'v Value<'a, C>),
        Term(&'a Term<'a>),
    }
    let mut builder = Builder::new(max_nodes);
    let mut pending: Vec<Item<'_, 'a, C>> = vec![Item::Value(value)];
    while let Some(item) = pending.pop() {
        match item {
            Item::Value(Value::Int(n)) => builder.leaf(Datum::Int(*n))?,
            Item::Value(Value::Bool(b)) => builder.leaf(Datum::Bool(*b))?,
            Item::Value(Value::Str(s)) => builder.leaf(Datum::Str(s.text.to_string()))?,
            Item::Value(Value::Fun(_)) => return Err(NotData::Function),
            Item::Value(Value::Con(c)) => {
                builder.open(c.tag, c.fields.len())?;
                pending.extend(c.fields.iter().rev().map(Item::Value));
            }
            Item::Value(&Value::Lit(t)) | Item::Term(t) => {
                builder.term(t, |field| pending.push(Item::Term(field)))?
            }
        }
    }
    builder.finish()
}

/// A host function's result as a value; its cells are charged to the
/// live-byte counter like any other.
pub(crate) fn from_datum<'a, C: Code<'a>>(datum: &Datum<'a>) -> Value<'a, C> {
    let mut stack: Vec<Value<'a, C>> = Vec::new();
    datum.fold(
        |d, fields: &mut Vec<Value<'a, C>>| match d {
            Datum::Int(n) => Value::Int(*n),
            Datum::Bool(b) => Value::Bool(*b),
            Datum::Str(s) => Value::Str(Text::new(s.clone())),
            Datum::Con(c) => {
                let start = fields.len().saturating_sub(c.fields().len());
                let values: Values<'a, C> = fields.drain(start..).collect();
                Value::Con(ConCell::new(c.tag(), values))
            }
        },
        &mut stack,
    )
}

/// Bytes of the string `op` would make from `args` (0 for a primitive that
/// makes none), so a machine can refuse a string that would pass its memory
/// limit before making it.
#[inline]
pub(crate) fn string_bytes<'a, C: Code<'a>>(op: Prim, args: &[Value<'a, C>]) -> usize {
    match (op, args) {
        (Prim::Concat, [a, b]) => match (a.operand(), b.operand()) {
            (Operand::Str(x), Operand::Str(y)) => Text::bytes(x.len().saturating_add(y.len())),
            _ => 0,
        },
        _ => 0,
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// Curried calls that take the machines' shortcuts for calls given all
    /// their arguments at once and calls that do not (partial, over-applied,
    /// not a function), with arguments that fail, in and out of tail
    /// position.
    #[cfg(all(feature = "stepper", any(feature = "env", feature = "cek")))]
    const SOURCES: [&str; 14] = [
        "let f = \\a. \\b. \\c. a - b * c in f 10 (f 1 2 3) 4",
        "let rec t x y z = if y < x then t (t (x - 1) y z) (t (y - 1) z x) (t (z - 1) x y) else z in t 6 3 1",
        "let rec go n acc = if n == 0 then acc else go (n - 1) (acc + n) in go 30 0",
        "let f = \\a. \\b. \\c. a in f 1 2",
        "let f = \\a. \\b. \\c. a in (f 1 2) 3",
        "let f = \\a. \\b. a in f 1 2 3",
        "let f = \\a. \\b. \\c. a + b + c in f 1 (1 / 0) 3",
        "let f = \\a. \\b. b in f 9223372036854775807 (9223372036854775807 + 1)",
        "let f = 3 in f 1 2",
        "let c0 = \\s z. z in let scc = \\n s z. s (n s z) in scc (scc c0) (\\k. k + 1) 0",
        "let rec f a b = if a == 0 then b else f (a - 1) (\\x. x + b 0) in f 5 (\\y. y) 1",
        "let f = \\a. \\b. \\c. a - b - c in f (f 1 2 3) (f 4 (5 / 0) 6) (f 7 8 9)",
        "let rec g a b = if a == 0 then b else g (a - 1) (g (a - 1) (let c = b in c + 1)) in g 3 1",
        "let rec h a b = if a == 0 then b else h (h (a - 1) b) in h 2 5",
    ];

    /// At every fuel bound, `machine` gives the stepper's outcome and counts
    /// on [`SOURCES`].
    #[cfg(all(feature = "stepper", any(feature = "env", feature = "cek")))]
    pub(crate) fn curried_calls_agree_with_the_stepper(machine: &mut dyn crate::Machine) {
        use crate::{Limits, MachineKind};
        for source in SOURCES {
            let arena = Arena::new();
            let program = crate::parse(&arena, source).unwrap();
            let mut stepper = MachineKind::Stepper.machine();
            let full = stepper.run(&program, &Limits::default(), &arena);
            for fuel in 0..=full.counts.total() + 1 {
                let limits = Limits::default().with_fuel(fuel);
                let want = stepper.run(&program, &limits, &arena);
                let got = machine.run(&program, &limits, &arena);
                assert_eq!(got.counts, want.counts, "{source} with fuel {fuel}");
                assert_eq!(
                    format!("{:?}", got.outcome),
                    format!("{:?}", want.outcome),
                    "{source} with fuel {fuel}"
                );
            }
        }
    }

    type V<'a> = Value<'a, &'a Term<'a>>;

    #[test]
    fn values_are_sixteen_bytes() {
        assert_eq!(std::mem::size_of::<V<'_>>(), 16);
    }

    #[test]
    fn a_tank_pays_exactly_its_fuel_in_slices() {
        let mut tank = Tank::new(2_500);
        let (mut paid, mut slices) = (0, 0);
        loop {
            if !tank.take() {
                if !tank.refill() {
                    break;
                }
                slices += 1;
                continue;
            }
            paid += 1;
        }
        assert_eq!(paid, 2_500);
        assert_eq!(slices, 3); // 1024 + 1024 + 452
        assert_eq!(tank.left(), 0);
        tank.add(1);
        assert!(tank.has(1) && !tank.has(2) && !tank.take2());
    }

    #[test]
    fn cells_are_charged_and_refunded() {
        let arena = Arena::new();
        let meter = Meter::holding(0);
        let s = Value::<&Term<'_>>::Str(Text::new("hello".into()));
        let cell: V<'_> = Value::Con(ConCell::new(
            arena.tag("Pair"),
            SmallVec::from_iter([s, Value::Int(1)]),
        ));
        assert!(meter.cells() > 0);
        drop(cell);
        assert_eq!(meter.cells(), 0);
    }

    #[test]
    fn a_reused_closure_is_accounted_as_a_new_one() {
        let arena = Arena::new();
        let lam = arena.lam(arena.var(0));
        let meter = Meter::holding(0);
        let mut f = Closure::new(lam, SmallVec::from_iter([V::Int(1)]));
        // Five captured values spill out of the cell.
        let five: Values<'_, &Term<'_>> = (0..5).map(Value::Int).collect();
        assert!(Rc::get_mut(&mut f).unwrap().reuse(lam, five.clone()));
        let held = meter.cells();
        let fresh = Closure::new(lam, five);
        assert_eq!(meter.cells(), 2 * held);
        drop(f);
        drop(fresh);
        assert_eq!(meter.cells(), 0);
    }

    #[test]
    fn a_million_cell_list_drops_without_recursion() {
        // On a 64 KiB stack a recursive drop would overflow.
        let handle = std::thread::Builder::new()
            .stack_size(64 << 10)
            .spawn(|| {
                let arena = Arena::new();
                let tag = arena.tag("Cons");
                let meter = Meter::holding(0);
                let mut list: V<'_> = Value::Lit(arena.con("Nil", &[]));
                for i in 0..1_000_000 {
                    list = Value::Con(ConCell::new(
                        tag,
                        SmallVec::from_iter([Value::Int(i), list]),
                    ));
                }
                let held = meter.cells();
                drop(list);
                (held, meter.cells())
            })
            .unwrap();
        let (held, after) = handle.join().unwrap();
        assert!(held >= 1_000_000 * std::mem::size_of::<ConCell<'_, &Term<'_>>>());
        assert_eq!(after, 0);
    }

    #[test]
    fn read_back_shares_cells_reached_twice() {
        let arena = Arena::new();
        let tag = arena.tag("Pair");
        // p_{k+1} = Pair(p_k, p_k): 2^60 leaves unfolded, 60 cells shared.
        let mut v: V<'_> = Value::Int(7);
        for _ in 0..60 {
            v = Value::Con(ConCell::new(tag, SmallVec::from_iter([v.clone(), v])));
        }
        let out = Arena::new();
        let t = read_back(&v, &out);
        let mut expected = arena.int(7);
        for _ in 0..60 {
            expected = arena.con("Pair", &[expected, expected]);
        }
        assert_eq!(t, expected);
        assert!(out.used_bytes() < 1 << 16);
    }

    #[test]
    fn a_closure_reads_back_with_its_environment_substituted() {
        let arena = Arena::new();
        // λ. #0 + #1 + #3 with free #0 := 5 and #2 := "s" (free #1 unused).
        let body = arena.prim(
            Prim::Add,
            &[
                arena.prim(Prim::Add, &[arena.var(0), arena.var(1)]),
                arena.var(3),
            ],
        );
        let lam = arena.lam(body);
        let s = arena.string("s");
        let closure: V<'_> = Value::Fun(Closure::new(
            lam,
            SmallVec::from_iter([Value::Int(5), Value::Int(6), Value::Lit(s)]),
        ));
        let out = Arena::new();
        let expected = arena.lam(arena.prim(
            Prim::Add,
            &[arena.prim(Prim::Add, &[arena.var(0), arena.int(5)]), s],
        ));
        assert_eq!(read_back(&closure, &out), expected);
    }

    #[test]
    fn integer_fast_path_agrees_with_delta() {
        let samples = [i64::MIN, -7, -1, 0, 1, 2, 7, i64::MAX];
        for op in Prim::ALL.into_iter().filter(|p| p.arity() == 2) {
            for a in samples {
                for b in samples {
                    let fast = apply_prim::<&Term<'_>>(op, &[Value::Int(a), Value::Int(b)]);
                    let slow = delta(op, &[Operand::Int(a), Operand::Int(b)]);
                    match (fast, slow) {
                        (Ok(Value::Int(x)), Ok(PrimValue::Int(y))) => assert_eq!(x, y),
                        (Ok(Value::Bool(x)), Ok(PrimValue::Bool(y))) => assert_eq!(x, y),
                        (Err(x), Err(y)) => assert_eq!(x, y),
                        _ => panic!("{op} {a} {b} disagrees"),
                    }
                }
            }
        }
    }
}
