//! Runtime values of the environment machines: integers, booleans and
//! field-less constructors inline, program string literals by index, and
//! reference-counted strings, constructor cells and flat closures (Cardelli,
//! "Compiling a functional language", 1984), with the live-byte accounting
//! behind the memory limit.
//!
//! # Memory accounting
//!
//! Every reference-counted cell charges its bytes to a per-thread live-byte
//! counter when it is made and refunds them when its last reference goes: the
//! `Rc` header, the cell, any spilled field or capture array, and 16 bytes for
//! the system allocator's own header and rounding (common practice for 64-bit
//! glibc malloc), so that the limit tracks resident memory. Values are not
//! `Send`, so a run's cells are made and freed on one thread; a run reads the
//! counter against a baseline taken when it starts or resumes.
//!
//! Values form no cycles (no mutation, and a recursive closure is handed
//! itself when applied), so reference counting frees everything. Dropping a
//! long chain of cells moves them to a work list rather than recursing.

use std::cell::Cell;
use std::rc::Rc;

use smallvec::SmallVec;

use crate::error::Operand;
use crate::image::{INode, Id, Image, TagId, Tags};

/// Bytes of an `Rc` allocation's header (the strong and weak counts), plus
/// what the system allocator adds to each allocation (see the module
/// documentation).
pub(crate) const RC_HEADER: usize = 2 * std::mem::size_of::<usize>() + 16;

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
        usize::try_from(LIVE.with(Cell::get).wrapping_sub(self.baseline)).unwrap_or(0)
    }

    /// A meter for a run that starts (or resumes) holding `cells` bytes of
    /// cells (as [`Meter::cells`] measured when it paused): 0 for a fresh run.
    pub(crate) fn holding(cells: usize) -> Self {
        Meter {
            baseline: LIVE.with(Cell::get).wrapping_sub(cells as isize),
        }
    }
}

/// What a machine's closures keep of their code: which function of the
/// image they are.
pub(crate) trait Code: Copy {
    /// The function's index in [`Image::funcs`].
    fn func(&self) -> u32;
}

impl Code for u32 {
    #[inline(always)]
    fn func(&self) -> u32 {
        *self
    }
}

/// A runtime value, sixteen bytes.
pub(crate) enum Value<C: Code> {
    /// An integer.
    Int(i64),
    /// A boolean.
    Bool(bool),
    /// A constructor with no fields.
    Tag(TagId),
    /// Closed constructor data of the program, read in place: its image
    /// node (see [`Image::is_data`]). Evaluating it builds nothing, so a
    /// program that holds a large table does not rebuild it every run.
    Data(Id),
    /// A string literal of the program: an index into [`Image::strings`].
    Lit(u32),
    /// A string made at run time.
    Str(Rc<Text>),
    /// A constructor with fields.
    Con(Rc<ConCell<C>>),
    /// A closure, or a partial application of one.
    Fun(Rc<Closure<C>>),
}

/// The tag of closed constructor data `id`.
#[inline]
pub(crate) fn data_tag(image: &Image, id: Id) -> TagId {
    match image.node(id) {
        INode::Con(tag, ..) => tag,
        _ => TagId::MAX,
    }
}

/// The value of field `id` of closed constructor data: a leaf as itself,
/// a constructor with fields as data again.
#[inline]
pub(crate) fn data_field<C: Code>(image: &Image, id: Id) -> Value<C> {
    match image.node(id) {
        INode::Int(n) => Value::Int(n),
        INode::Bool(b) => Value::Bool(b),
        INode::Str(s) => Value::Lit(s),
        INode::Con(tag, _, 0) => Value::Tag(tag),
        _ => Value::Data(id),
    }
}

impl<C: Code> Clone for Value<C> {
    #[inline]
    fn clone(&self) -> Self {
        match self {
            Value::Int(n) => Value::Int(*n),
            Value::Bool(b) => Value::Bool(*b),
            Value::Tag(t) => Value::Tag(*t),
            Value::Data(d) => Value::Data(*d),
            Value::Lit(s) => Value::Lit(*s),
            Value::Str(s) => Value::Str(Rc::clone(s)),
            Value::Con(c) => Value::Con(Rc::clone(c)),
            Value::Fun(f) => Value::Fun(Rc::clone(f)),
        }
    }
}

impl<C: Code> Value<C> {
    /// What a primitive or an error message sees of this value.
    pub(crate) fn operand<'v>(&'v self, image: &'v Image, tags: &'v Tags) -> Operand<'v> {
        match self {
            Value::Int(n) => Operand::Int(*n),
            Value::Bool(b) => Operand::Bool(*b),
            Value::Tag(t) => Operand::Con(tags.name(image, *t)),
            Value::Data(d) => Operand::Con(tags.name(image, data_tag(image, *d))),
            Value::Lit(s) => Operand::Str(image.string(*s)),
            Value::Str(s) => Operand::Str(&s.text),
            Value::Con(c) => Operand::Con(tags.name(image, c.tag)),
            Value::Fun(_) => Operand::Function,
        }
    }

    /// The constructor's tag and fields, if this is a constructor value.
    #[inline]
    pub(crate) fn constructor(&self) -> Option<(TagId, &[Value<C>])> {
        match self {
            Value::Con(c) => Some((c.tag, &c.fields)),
            Value::Tag(t) => Some((*t, &[])),
            _ => None,
        }
    }

    /// Whether dropping this value would free a cell that holds other values.
    #[inline]
    fn owns_cell(&self) -> bool {
        match self {
            Value::Con(c) => Rc::strong_count(c) == 1,
            Value::Fun(f) => Rc::strong_count(f) == 1,
            _ => false,
        }
    }
}

/// A string made at run time (by `++`, `decimal` or a host function).
pub(crate) struct Text {
    pub(crate) text: Box<str>,
}

impl Text {
    /// A string cell, charged to the live-byte counter.
    pub(crate) fn new(text: String) -> Rc<Text> {
        let text = text.into_boxed_str();
        charge(Self::bytes(text.len()));
        Rc::new(Text { text })
    }

    /// Bytes charged for a string of `len` bytes.
    pub(crate) fn bytes(len: usize) -> usize {
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
pub(crate) type Values<C> = SmallVec<[Value<C>; INLINE]>;

/// Bytes outside its cell of an array of `n` values collected exactly (0
/// while they fit inline), as [`values_bytes`] will count it.
pub(crate) fn values_bytes_for<C: Code>(n: usize) -> usize {
    if n > INLINE {
        n.saturating_mul(std::mem::size_of::<Value<C>>())
    } else {
        0
    }
}

/// Bytes of a values array outside its cell (0 while inline).
pub(crate) fn values_bytes<C: Code>(values: &Values<C>) -> usize {
    if values.spilled() {
        values.capacity() * std::mem::size_of::<Value<C>>()
    } else {
        0
    }
}

/// A constructor applied to values.
pub(crate) struct ConCell<C: Code> {
    /// The constructor's tag.
    pub(crate) tag: TagId,
    /// Its fields, field 1 first.
    pub(crate) fields: Values<C>,
}

impl<C: Code> ConCell<C> {
    /// A constructor cell, charged to the live-byte counter.
    pub(crate) fn new(tag: TagId, fields: Values<C>) -> Rc<Self> {
        charge(Self::bytes(&fields));
        Rc::new(ConCell { tag, fields })
    }

    /// Bytes charged for a cell with these fields.
    pub(crate) fn bytes(fields: &Values<C>) -> usize {
        RC_HEADER + std::mem::size_of::<Self>() + values_bytes(fields)
    }
}

impl<C: Code> Drop for ConCell<C> {
    fn drop(&mut self) {
        refund(Self::bytes(&self.fields));
        release(&mut self.fields);
    }
}

/// A flat closure of a function of the image, or a partial application of
/// one: the function's captured values (its free variables, outermost
/// first), then — once `applied` arguments have been given — the function
/// itself if it is recursive, and the arguments, first first.
pub(crate) struct Closure<C: Code> {
    /// The machine's code for the function.
    pub(crate) code: C,
    /// How many of the function's parameters have been applied.
    pub(crate) applied: u32,
    /// The captured values, then the bound ones.
    pub(crate) captured: Values<C>,
}

impl<C: Code> Closure<C> {
    /// A closure, charged to the live-byte counter.
    pub(crate) fn new(code: C, applied: u32, captured: Values<C>) -> Rc<Self> {
        charge(Self::bytes(&captured));
        Rc::new(Closure {
            code,
            applied,
            captured,
        })
    }

    /// Bytes charged for a closure with these values.
    pub(crate) fn bytes(captured: &Values<C>) -> usize {
        RC_HEADER + std::mem::size_of::<Self>() + values_bytes(captured)
    }

    /// Bytes charged for a closure cell whose values are inline.
    pub(crate) const fn cell_bytes() -> usize {
        RC_HEADER + std::mem::size_of::<Self>()
    }

    /// Make this closure, held by one reference, into one of `code` with
    /// `applied` arguments over `captured`, reusing its cell; the accounting
    /// follows. Whether the cell grew.
    pub(crate) fn reuse(&mut self, code: C, applied: u32, captured: Values<C>) -> bool {
        let (before, after) = (values_bytes(&self.captured), values_bytes(&captured));
        refund(before);
        charge(after);
        let mut old = std::mem::replace(&mut self.captured, captured);
        self.code = code;
        self.applied = applied;
        release(&mut old);
        after > before
    }
}

impl<C: Code> Drop for Closure<C> {
    fn drop(&mut self) {
        refund(Self::bytes(&self.captured));
        release(&mut self.captured);
    }
}

/// Drop `values` without native recursion: cells freed by this drop have
/// their own values moved onto a work list before they go, so a list or a
/// chain of closures a million long is freed by a loop.
fn release<C: Code>(values: &mut Values<C>) {
    if !values.iter().any(Value::owns_cell) {
        return;
    }
    let mut pending: Vec<Value<C>> = values.drain(..).collect();
    while let Some(value) = pending.pop() {
        match value {
            Value::Con(cell) => {
                if let Ok(mut cell) = Rc::try_unwrap(cell) {
                    pending.extend(cell.fields.drain(..));
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

/// Shorten `values` to `len`, dropping the values above one at a time
/// (cheaper than the slice drop for the one or two a call leaves).
#[inline(always)]
pub(crate) fn cut<T>(values: &mut Vec<T>, len: usize) {
    while values.len() > len {
        values.pop();
    }
}

/// Stacks larger than this many bytes are freed after a run rather than kept
/// for the next one, so one big run does not pin memory.
pub(crate) const KEEP_STACK_BYTES: usize = 64 << 10;

/// An empty vector of `U` that reuses `v`'s allocation when `T` and `U` have
/// the same layout (the standard library collects a `filter_map` of a
/// vector's own `into_iter` in place) and `v` is not larger than
/// [`KEEP_STACK_BYTES`]; otherwise a new empty vector. This is how a machine
/// keeps its stacks across runs whose values borrow different code.
pub(crate) fn recycle<T, U>(mut v: Vec<T>) -> Vec<U> {
    if v.capacity() == 0 || v.capacity() * std::mem::size_of::<T>() > KEEP_STACK_BYTES {
        return Vec::new();
    }
    v.clear();
    v.into_iter().filter_map(|_| None::<U>).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    type V = Value<u32>;

    #[test]
    fn values_are_sixteen_bytes() {
        assert_eq!(std::mem::size_of::<V>(), 16);
    }

    #[test]
    fn cells_are_charged_and_refunded() {
        let meter = Meter::holding(0);
        let s = V::Str(Text::new("hello".into()));
        let cell = V::Con(ConCell::new(0, SmallVec::from_iter([s, V::Int(1)])));
        assert!(meter.cells() > 0);
        drop(cell);
        assert_eq!(meter.cells(), 0);
    }

    #[test]
    fn data_is_charged_exactly_what_its_count_before_making_it_says() {
        use crate::image::{Image, Tags};
        use crate::machines::runtime::host::{cells_bytes, from_datum};
        use crate::Datum;
        let image = Image::default();
        let tags = Tags::default();
        let mut list = Datum::con("Nil", vec![]);
        for i in 0..1000 {
            let row = Datum::con(
                "Row",
                vec![
                    Datum::Int(i),
                    Datum::Str("x".repeat(i as usize % 7)),
                    Datum::Bool(true),
                    Datum::Int(0),
                ],
            );
            list = Datum::con("Cons", vec![row, list]);
        }
        for datum in [
            Datum::Int(3),
            Datum::Str("tide".into()),
            Datum::con("Nil", vec![]),
            list,
        ] {
            let meter = Meter::holding(0);
            let (value, _) = from_datum::<u32>(&datum, &image, &tags);
            assert_eq!(meter.cells(), cells_bytes::<u32>(&datum), "{datum:?}");
            drop(value);
            assert_eq!(meter.cells(), 0);
        }
    }

    #[test]
    fn a_reused_closure_is_accounted_as_a_new_one() {
        let meter = Meter::holding(0);
        let mut f = Closure::new(0u32, 0, SmallVec::from_iter([V::Int(1)]));
        let five: Values<u32> = (0..5).map(Value::Int).collect();
        assert!(Rc::get_mut(&mut f).unwrap().reuse(0, 1, five.clone()));
        let held = meter.cells();
        let fresh = Closure::new(0u32, 1, five);
        assert_eq!(meter.cells(), 2 * held);
        drop(f);
        drop(fresh);
        assert_eq!(meter.cells(), 0);
    }

    #[test]
    fn a_million_cell_list_drops_without_recursion() {
        let handle = std::thread::Builder::new()
            .stack_size(64 << 10)
            .spawn(|| {
                let meter = Meter::holding(0);
                let mut list = V::Tag(0);
                for i in 0..1_000_000 {
                    list = V::Con(ConCell::new(1, SmallVec::from_iter([V::Int(i), list])));
                }
                let held = meter.cells();
                drop(list);
                (held, meter.cells())
            })
            .unwrap();
        let (held, after) = handle.join().unwrap();
        assert!(held >= 1_000_000 * std::mem::size_of::<ConCell<u32>>());
        assert_eq!(after, 0);
    }
}
