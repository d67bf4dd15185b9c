//! Data exchanged with the host: [`Datum`], an owned first-order value
//! (integer, boolean, string, constructor), its conversions to and from terms
//! and to and from Rust types ([`FromDatum`], [`IntoDatum`]). Every walk here
//! is iterative, so a million-long list converts and drops without recursion.

use std::borrow::Cow;
use std::fmt;

use crate::term::{Arena, Node, Term};

/// A first-order value outside the machines: what host functions receive and
/// return, and what a program's result converts through on its way to Rust.
///
/// Constructor tags borrow for `'t` from what the datum was read from (a
/// [`Value`](crate::Value) by [`Value::to_datum`](crate::Value::to_datum), a
/// term by [`Datum::from_term`], the arguments a run hands a host function),
/// or are `'static` when Rust code makes the datum; [`Datum::into_owned`]
/// cuts the tie.
///
/// # Examples
///
/// ```
/// use orrery::{Datum, Limits, MachineKind, Outcome, Program};
/// let program = Program::parse(r#"Visit("fern", 3)"#).unwrap();
/// let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
/// let Outcome::Value(value) = report.outcome else { panic!() };
/// let datum = value.to_datum().unwrap();
/// assert_eq!(datum, Datum::con("Visit", vec![Datum::Str("fern".into()), Datum::Int(3)]));
/// ```
pub enum Datum<'t> {
    /// An integer.
    Int(i64),
    /// A boolean.
    Bool(bool),
    /// A string.
    Str(String),
    /// A constructor applied to data.
    Con(Con<'t>),
}

/// A constructor datum: a tag and its fields, field 1 first. Dropping a long
/// chain of these is a loop, not a recursion.
///
/// # Examples
///
/// ```
/// use orrery::{Con, Datum};
/// let pair = Con::new("Pair", vec![Datum::Int(1), Datum::Bool(true)]);
/// assert_eq!(pair.tag(), "Pair");
/// assert_eq!(pair.fields().len(), 2);
/// ```
pub struct Con<'t> {
    tag: Cow<'t, str>,
    fields: Vec<Datum<'t>>,
}

impl<'t> Con<'t> {
    /// A constructor with these fields.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Con, Datum};
    /// let crate_ = Con::new("Crate", vec![Datum::Str("pears".into()), Datum::Int(40)]);
    /// assert_eq!(Datum::Con(crate_).describe(), "the constructor Crate");
    /// ```
    pub fn new(tag: impl Into<Cow<'t, str>>, fields: Vec<Datum<'t>>) -> Self {
        Con {
            tag: tag.into(),
            fields,
        }
    }

    /// The tag.
    ///
    /// # Examples
    ///
    /// ```
    /// let berth = orrery::Con::new("Berth", vec![orrery::Datum::Int(7)]);
    /// assert_eq!(berth.tag(), "Berth");
    /// ```
    pub fn tag(&self) -> &str {
        &self.tag
    }

    /// The fields, field 1 first.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Con, Datum};
    /// let span = Con::new("Span", vec![Datum::Int(3), Datum::Int(9)]);
    /// assert_eq!(span.fields(), [Datum::Int(3), Datum::Int(9)]);
    /// ```
    pub fn fields(&self) -> &[Datum<'t>] {
        &self.fields
    }

    /// The tag and the fields, taken out of the constructor.
    ///
    /// # Examples
    ///
    /// ```
    /// let (tag, fields) = orrery::Con::new("Nil", vec![]).into_parts();
    /// assert_eq!((tag.as_ref(), fields.len()), ("Nil", 0));
    /// ```
    pub fn into_parts(mut self) -> (Cow<'t, str>, Vec<Datum<'t>>) {
        let fields = std::mem::take(&mut self.fields);
        (std::mem::take(&mut self.tag), fields)
    }
}

impl Drop for Con<'_> {
    fn drop(&mut self) {
        if !self
            .fields
            .iter()
            .any(|f| matches!(f, Datum::Con(c) if !c.fields.is_empty()))
        {
            return;
        }
        let mut pending = std::mem::take(&mut self.fields);
        while let Some(datum) = pending.pop() {
            if let Datum::Con(mut con) = datum {
                pending.append(&mut con.fields);
            }
        }
    }
}

impl<'t> Datum<'t> {
    /// A constructor datum.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Datum;
    /// let none = Datum::con("Nothing", vec![]);
    /// assert_eq!(none.describe(), "the constructor Nothing");
    /// ```
    pub fn con(tag: impl Into<Cow<'t, str>>, fields: Vec<Datum<'t>>) -> Self {
        Datum::Con(Con::new(tag, fields))
    }

    /// A short description of the datum's type, for error messages.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Datum::Int(4).describe(), "an integer");
    /// ```
    pub fn describe(&self) -> String {
        match self {
            Datum::Int(_) => "an integer".into(),
            Datum::Bool(_) => "a boolean".into(),
            Datum::Str(_) => "a string".into(),
            Datum::Con(c) => format!("the constructor {}", c.tag),
        }
    }

    /// Read a value term as a datum.
    ///
    /// # Errors
    ///
    /// A [`ConvertError`] if the term is not a first-order value (it is a
    /// function, or not a value at all), or if the datum would take more than
    /// [`MAX_DATUM_BYTES`] (a value shared exponentially often, or a string
    /// shared by many fields: every copy counts).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Datum};
    /// let arena = Arena::new();
    /// assert_eq!(Datum::from_term(arena.int(7)).unwrap(), Datum::Int(7));
    /// assert!(Datum::from_term(arena.lam(arena.var(0))).is_err());
    /// ```
    pub fn from_term(term: &'t Term<'t>) -> Result<Datum<'t>, ConvertError> {
        Datum::from_term_within(term, MAX_DATUM_BYTES)
    }

    /// [`Datum::from_term`] within `max_bytes` (each node counts its own
    /// size, each string its bytes, once per copy).
    ///
    /// # Errors
    ///
    /// As [`Datum::from_term`], with `max_bytes` for the limit.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Datum};
    /// let arena = Arena::new();
    /// let word = arena.string(&"ab".repeat(1000));
    /// let pair = arena.con("Pair", &[word, word]);
    /// assert!(Datum::from_term_within(pair, 2_000).is_err());
    /// assert!(Datum::from_term_within(pair, 5_000).is_ok());
    /// ```
    pub fn from_term_within(
        term: &'t Term<'t>,
        max_bytes: usize,
    ) -> Result<Datum<'t>, ConvertError> {
        Datum::read_term(term, max_bytes).map_err(|e| match e {
            NotData::Function => ConvertError::new("data", "a function"),
            NotData::NotAValue => ConvertError::new("a value", "a term that is not a value"),
            NotData::TooLarge => ConvertError::new(
                format!("a value of at most {max_bytes} bytes"),
                "a larger one",
            ),
        })
    }

    /// Read `term` as a datum of at most `max_bytes` bytes: how a machine
    /// hands its arguments to a host function.
    pub(crate) fn read_term(term: &'t Term<'t>, max_bytes: usize) -> Result<Datum<'t>, NotData> {
        let mut builder = Builder::new(max_bytes);
        let mut pending: Vec<&'t Term<'t>> = vec![term];
        while let Some(t) = pending.pop() {
            builder.term(t, |field| pending.push(field))?;
        }
        builder.finish()
    }

    /// This datum with tags of its own, tied to nothing.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Datum;
    /// let owned: Datum<'static> = {
    ///     let tag = String::from("Berth");
    ///     Datum::con(tag.as_str(), vec![Datum::Int(7)]).into_owned()
    /// };
    /// assert_eq!(owned, Datum::con("Berth", vec![Datum::Int(7)]));
    /// ```
    pub fn into_owned(self) -> Datum<'static> {
        let mut built: Vec<Datum<'static>> = Vec::new();
        self.fold(
            |datum, fields: &mut Vec<Datum<'static>>| match datum {
                Datum::Int(n) => Datum::Int(*n),
                Datum::Bool(b) => Datum::Bool(*b),
                Datum::Str(s) => Datum::Str(s.clone()),
                Datum::Con(c) => {
                    let at = fields.len().saturating_sub(c.fields.len());
                    Datum::con(c.tag.to_string(), fields.split_off(at))
                }
            },
            &mut built,
        )
    }

    /// Build this datum as a term in `arena`.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{print, Arena, Datum};
    /// let arena = Arena::new();
    /// let d = Datum::con("Cons", vec![Datum::Int(1), Datum::con("Nil", vec![])]);
    /// assert_eq!(print(d.to_term(&arena)), "Cons(1, Nil)");
    /// ```
    pub fn to_term<'a>(&self, arena: &'a Arena) -> &'a Term<'a> {
        let mut built: Vec<&'a Term<'a>> = Vec::new();
        self.fold(
            |datum, fields: &mut Vec<&'a Term<'a>>| match datum {
                Datum::Int(n) => arena.int(*n),
                Datum::Bool(b) => arena.boolean(*b),
                Datum::Str(s) => arena.string(s),
                Datum::Con(c) => {
                    let start = fields.len() - c.fields.len();
                    let term = arena.con(&c.tag, &fields[start..]);
                    fields.truncate(start);
                    term
                }
            },
            &mut built,
        )
    }

    /// Post-order walk: `leaf_or_node` sees each datum after all its fields,
    /// with the results for those fields on top of `stack`, and pops them.
    pub(crate) fn fold<R>(
        &self,
        mut leaf_or_node: impl FnMut(&Datum<'t>, &mut Vec<R>) -> R,
        stack: &mut Vec<R>,
    ) -> R {
        let mut pending: Vec<(&Datum<'t>, bool)> = Vec::new();
        let mut item = (self, false);
        loop {
            let (datum, expanded) = item;
            if let (Datum::Con(c), false) = (datum, expanded) {
                if let Some((first, rest)) = c.fields.split_first() {
                    pending.push((datum, true));
                    pending.extend(rest.iter().rev().map(|f| (f, false)));
                    item = (first, false);
                    continue;
                }
            }
            let result = leaf_or_node(datum, stack);
            match pending.pop() {
                Some(next) => {
                    stack.push(result);
                    item = next;
                }
                None => return result,
            }
        }
    }
}

/// The most bytes [`Datum::from_term`], [`extract`],
/// [`Value::to_datum`](crate::Value::to_datum) and
/// [`Value::extract`](crate::Value::extract) build (the default memory
/// limit): beyond it a value is refused rather than unfolded (a value can
/// share a subterm exponentially often). Each datum node counts its own size,
/// and each string its bytes once per copy.
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Datum, MAX_DATUM_BYTES};
/// let arena = Arena::new();
/// let mut t = arena.int(0);
/// for _ in 0..10 {
///     t = arena.con("Twin", &[t, t]); // one term node, shared twice
/// }
/// assert!(Datum::from_term(t).is_ok()); // 2047 nodes
/// for _ in 0..40 {
///     t = arena.con("Twin", &[t, t]);
/// }
/// assert!(Datum::from_term(t).is_err()); // 2^51 nodes
/// assert_eq!(MAX_DATUM_BYTES, orrery::DEFAULT_MEMORY);
/// ```
pub const MAX_DATUM_BYTES: usize = 256 << 20;

/// Bytes a datum node counts, besides its string's bytes.
pub(crate) const DATUM_NODE_BYTES: usize = std::mem::size_of::<Datum<'static>>();

/// Why a value could not be read as a datum.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum NotData {
    /// It is (or holds) a function.
    Function,
    /// It is not a value (a machine bug if it happens).
    NotAValue,
    /// It would take more bytes than allowed.
    TooLarge,
}

impl NotData {
    /// The conversion error this is, for a bound of `max_bytes`.
    pub(crate) fn explain(self, max_bytes: usize) -> ConvertError {
        match self {
            NotData::Function => ConvertError::new("data", "a function"),
            NotData::NotAValue => ConvertError::new("a value", "a term that is not a value"),
            NotData::TooLarge => ConvertError::new(
                format!("a value of at most {max_bytes} bytes"),
                "a larger one",
            ),
        }
    }
}

/// Builds a datum tree from a pre-order stream of leaves and constructor heads.
pub(crate) struct Builder<'t> {
    /// Open constructors: tag, fields expected, fields so far.
    open: Vec<(&'t str, usize, Vec<Datum<'t>>)>,
    done: Option<Datum<'t>>,
    budget: usize,
}

impl<'t> Builder<'t> {
    /// A builder of at most `max_bytes` (see [`MAX_DATUM_BYTES`]).
    pub(crate) fn new(max_bytes: usize) -> Self {
        Builder {
            open: Vec::new(),
            done: None,
            budget: max_bytes,
        }
    }

    fn spend(&mut self, bytes: usize) -> Result<(), NotData> {
        self.budget = self
            .budget
            .checked_sub(DATUM_NODE_BYTES.saturating_add(bytes))
            .ok_or(NotData::TooLarge)?;
        Ok(())
    }

    /// Whether `bytes` more would still fit (checked before a string is
    /// copied for a leaf).
    pub(crate) fn fits(&self, bytes: usize) -> bool {
        DATUM_NODE_BYTES.saturating_add(bytes) <= self.budget
    }

    /// Read one node of a value term in pre-order: a leaf, or a constructor
    /// head whose fields go to `push`, last first (so they pop in order).
    pub(crate) fn term(
        &mut self,
        t: &'t Term<'t>,
        mut push: impl FnMut(&'t Term<'t>),
    ) -> Result<(), NotData> {
        match *t.node() {
            Node::Int(n) => self.leaf(Datum::Int(n)),
            Node::Bool(b) => self.leaf(Datum::Bool(b)),
            Node::Str(s) => {
                if !self.fits(s.len()) {
                    return Err(NotData::TooLarge);
                }
                self.leaf(Datum::Str(s.to_string()))
            }
            Node::Con(tag, fields) => {
                self.open(tag, fields.len())?;
                fields.iter().rev().for_each(|&f| push(f));
                Ok(())
            }
            Node::Lam(_) | Node::RecLam(_) => Err(NotData::Function),
            _ => Err(NotData::NotAValue),
        }
    }

    /// A leaf in pre-order.
    pub(crate) fn leaf(&mut self, datum: Datum<'t>) -> Result<(), NotData> {
        let bytes = match &datum {
            Datum::Str(s) => s.len(),
            _ => 0,
        };
        self.spend(bytes)?;
        self.place(datum);
        Ok(())
    }

    /// A constructor head with `arity` fields to follow in pre-order.
    pub(crate) fn open(&mut self, tag: &'t str, arity: usize) -> Result<(), NotData> {
        self.spend(0)?;
        if arity == 0 {
            self.place(Datum::con(tag, Vec::new()));
        } else {
            self.open
                .push((tag, arity, Vec::with_capacity(arity.min(64))));
        }
        Ok(())
    }

    fn place(&mut self, mut datum: Datum<'t>) {
        loop {
            let Some((_, arity, fields)) = self.open.last_mut() else {
                self.done = Some(datum);
                return;
            };
            fields.push(datum);
            if fields.len() < *arity {
                return;
            }
            let Some((tag, _, fields)) = self.open.pop() else {
                return;
            };
            datum = Datum::con(tag, fields);
        }
    }

    pub(crate) fn finish(self) -> Result<Datum<'t>, NotData> {
        self.done.ok_or(NotData::NotAValue)
    }
}

impl Clone for Datum<'_> {
    fn clone(&self) -> Self {
        let mut stack = Vec::new();
        self.fold(
            |datum, fields: &mut Vec<Datum<'_>>| match datum {
                Datum::Int(n) => Datum::Int(*n),
                Datum::Bool(b) => Datum::Bool(*b),
                Datum::Str(s) => Datum::Str(s.clone()),
                Datum::Con(c) => {
                    let start = fields.len() - c.fields.len();
                    Datum::con(c.tag.clone(), fields.split_off(start))
                }
            },
            &mut stack,
        )
    }
}

impl Clone for Con<'_> {
    fn clone(&self) -> Self {
        Con::new(
            self.tag.clone(),
            self.fields.iter().map(Datum::clone).collect(),
        )
    }
}

impl PartialEq for Datum<'_> {
    fn eq(&self, other: &Self) -> bool {
        let mut pending = vec![(self, other)];
        while let Some((a, b)) = pending.pop() {
            match (a, b) {
                (Datum::Int(x), Datum::Int(y)) if x == y => {}
                (Datum::Bool(x), Datum::Bool(y)) if x == y => {}
                (Datum::Str(x), Datum::Str(y)) if x == y => {}
                (Datum::Con(x), Datum::Con(y))
                    if x.tag == y.tag && x.fields.len() == y.fields.len() =>
                {
                    pending.extend(x.fields.iter().zip(&y.fields));
                }
                _ => return false,
            }
        }
        true
    }
}

impl Eq for Datum<'_> {}

impl PartialEq for Con<'_> {
    fn eq(&self, other: &Self) -> bool {
        self.tag == other.tag
            && self.fields.len() == other.fields.len()
            && self.fields.iter().zip(&other.fields).all(|(a, b)| a == b)
    }
}

/// Written in the text syntax (`Cons(1, Nil)`, `"a\n"`), without recursion.
impl fmt::Debug for Datum<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        enum Piece<'d, 't> {
            Datum(&'d Datum<'t>),
            Text(&'static str),
        }
        let mut pending = vec![Piece::Datum(self)];
        while let Some(piece) = pending.pop() {
            match piece {
                Piece::Text(t) => f.write_str(t)?,
                Piece::Datum(Datum::Int(n)) => write!(f, "{n}")?,
                Piece::Datum(Datum::Bool(b)) => write!(f, "{b}")?,
                Piece::Datum(Datum::Str(s)) => write!(f, "{s:?}")?,
                Piece::Datum(Datum::Con(c)) => {
                    f.write_str(&c.tag)?;
                    if !c.fields.is_empty() {
                        f.write_str("(")?;
                        pending.push(Piece::Text(")"));
                        for (i, field) in c.fields.iter().enumerate().rev() {
                            pending.push(Piece::Datum(field));
                            if i > 0 {
                                pending.push(Piece::Text(", "));
                            }
                        }
                    }
                }
            }
        }
        Ok(())
    }
}

impl fmt::Debug for Con<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{:?}", Datum::Con(self.clone()))
    }
}

/// Why a value could not be converted to the Rust type asked for.
///
/// # Examples
///
/// ```
/// use orrery::{Datum, FromDatum};
/// let err = i64::from_datum(&Datum::Bool(true)).unwrap_err();
/// assert_eq!(err.to_string(), "expected an integer, found a boolean");
/// ```
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("expected {expected}, found {found}")]
pub struct ConvertError {
    expected: String,
    found: String,
}

impl ConvertError {
    /// An error: the conversion wanted `expected` and was given `found`.
    ///
    /// # Examples
    ///
    /// ```
    /// let err = orrery::ConvertError::new("a tide table", "an empty list");
    /// assert_eq!(err.to_string(), "expected a tide table, found an empty list");
    /// ```
    pub fn new(expected: impl Into<String>, found: impl Into<String>) -> Self {
        ConvertError {
            expected: expected.into(),
            found: found.into(),
        }
    }

    fn mismatch(expected: &str, found: &Datum<'_>) -> Self {
        ConvertError::new(expected, found.describe())
    }

    /// What the conversion wanted.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, FromDatum};
    /// let err = bool::from_datum(&Datum::Int(1)).unwrap_err();
    /// assert_eq!(err.expected(), "a boolean");
    /// ```
    pub fn expected(&self) -> &str {
        &self.expected
    }

    /// What it was given.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, FromDatum};
    /// let err = String::from_datum(&Datum::con("Empty", vec![])).unwrap_err();
    /// assert_eq!(err.found(), "the constructor Empty");
    /// ```
    pub fn found(&self) -> &str {
        &self.found
    }
}

/// A Rust type that can be read from a [`Datum`].
///
/// Implemented for integers (`i64`, `i32`, `u32`, `u64`, `usize`, range
/// checked), `bool`, `String`, `Vec<T>` (a `Cons`/`Nil` list), `Option<T>`
/// (`Some(x)`/`None`), and tuples of two to four (any constructor with that
/// many fields).
///
/// # Examples
///
/// ```
/// use orrery::{Datum, FromDatum};
/// let list = Datum::con("Cons", vec![Datum::Int(4), Datum::con("Nil", vec![])]);
/// assert_eq!(Vec::<i64>::from_datum(&list).unwrap(), vec![4]);
/// ```
pub trait FromDatum: Sized {
    /// Convert, or say why not.
    ///
    /// # Errors
    ///
    /// A [`ConvertError`] naming what was expected and what was found.
    fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError>;
}

/// A Rust value that can be turned into a [`Datum`] (a host function's result
/// or an argument built by the host).
///
/// Implemented for the same types as [`FromDatum`]; tuples become `Pair`,
/// `Triple` and `Quad` constructors.
///
/// # Examples
///
/// ```
/// use orrery::{Datum, IntoDatum};
/// assert_eq!((1i64, true).into_datum(), Datum::con("Pair", vec![Datum::Int(1), Datum::Bool(true)]));
/// ```
pub trait IntoDatum {
    /// The datum.
    fn into_datum(self) -> Datum<'static>;
}

impl FromDatum for i64 {
    fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError> {
        match datum {
            Datum::Int(n) => Ok(*n),
            other => Err(ConvertError::mismatch("an integer", other)),
        }
    }
}

macro_rules! narrow_integer {
    ($($t:ty),*) => {$(
        impl FromDatum for $t {
            fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError> {
                let n = i64::from_datum(datum)?;
                <$t>::try_from(n).map_err(|_| {
                    ConvertError::new(
                        format!("an integer in the range of {}", stringify!($t)),
                        n.to_string(),
                    )
                })
            }
        }

        impl IntoDatum for $t {
            /// # Panics
            ///
            /// Never: values outside `i64` saturate at its bounds.
            fn into_datum(self) -> Datum<'static> {
                Datum::Int(i64::try_from(self).unwrap_or(if self > 0 as $t { i64::MAX } else { i64::MIN }))
            }
        }
    )*};
}

narrow_integer!(i32, u32, u64, usize);

impl IntoDatum for i64 {
    fn into_datum(self) -> Datum<'static> {
        Datum::Int(self)
    }
}

impl FromDatum for bool {
    fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError> {
        match datum {
            Datum::Bool(b) => Ok(*b),
            other => Err(ConvertError::mismatch("a boolean", other)),
        }
    }
}

impl IntoDatum for bool {
    fn into_datum(self) -> Datum<'static> {
        Datum::Bool(self)
    }
}

impl FromDatum for String {
    fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError> {
        match datum {
            Datum::Str(s) => Ok(s.clone()),
            other => Err(ConvertError::mismatch("a string", other)),
        }
    }
}

impl IntoDatum for String {
    fn into_datum(self) -> Datum<'static> {
        Datum::Str(self)
    }
}

impl IntoDatum for &str {
    fn into_datum(self) -> Datum<'static> {
        Datum::Str(self.to_string())
    }
}

impl IntoDatum for Datum<'static> {
    fn into_datum(self) -> Datum<'static> {
        self
    }
}

impl<T: FromDatum> FromDatum for Vec<T> {
    fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError> {
        let mut items = Vec::new();
        let mut rest = datum;
        loop {
            match rest {
                Datum::Con(c) if c.tag == "Nil" && c.fields.is_empty() => return Ok(items),
                Datum::Con(c) if c.tag == "Cons" && c.fields.len() == 2 => {
                    items.push(T::from_datum(&c.fields[0])?);
                    rest = &c.fields[1];
                }
                other => return Err(ConvertError::mismatch("a Cons/Nil list", other)),
            }
        }
    }
}

impl<T: IntoDatum> IntoDatum for Vec<T> {
    fn into_datum(self) -> Datum<'static> {
        let mut list = Datum::con("Nil", Vec::new());
        for item in self.into_iter().rev() {
            list = Datum::con("Cons", vec![item.into_datum(), list]);
        }
        list
    }
}

impl<T: FromDatum> FromDatum for Option<T> {
    fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError> {
        match datum {
            Datum::Con(c) if c.tag == "None" && c.fields.is_empty() => Ok(None),
            Datum::Con(c) if c.tag == "Some" && c.fields.len() == 1 => {
                T::from_datum(&c.fields[0]).map(Some)
            }
            other => Err(ConvertError::mismatch("Some(x) or None", other)),
        }
    }
}

impl<T: IntoDatum> IntoDatum for Option<T> {
    fn into_datum(self) -> Datum<'static> {
        match self {
            Some(x) => Datum::con("Some", vec![x.into_datum()]),
            None => Datum::con("None", Vec::new()),
        }
    }
}

macro_rules! tuple {
    ($tag:literal, $n:literal, $($t:ident $i:tt),*) => {
        impl<$($t: FromDatum),*> FromDatum for ($($t,)*) {
            fn from_datum(datum: &Datum<'_>) -> Result<Self, ConvertError> {
                match datum {
                    Datum::Con(c) if c.fields.len() == $n => {
                        Ok(($($t::from_datum(&c.fields[$i])?,)*))
                    }
                    other => Err(ConvertError::mismatch(
                        concat!("a constructor with ", $n, " fields"),
                        other,
                    )),
                }
            }
        }

        impl<$($t: IntoDatum),*> IntoDatum for ($($t,)*) {
            fn into_datum(self) -> Datum<'static> {
                Datum::con($tag, vec![$(self.$i.into_datum()),*])
            }
        }
    };
}

tuple!("Pair", 2, A 0, B 1);
tuple!("Triple", 3, A 0, B 1, C 2);
tuple!("Quad", 4, A 0, B 1, C 2, D 3);

/// Convert a value term (built in an arena, or a run's result as a term)
/// into a Rust type. A run's result itself, a [`Value`](crate::Value), converts
/// the same way with [`Value::extract`](crate::Value::extract).
///
/// # Errors
///
/// A [`ConvertError`] if the term is not a first-order value or does not
/// have the shape `T` wants.
///
/// # Examples
///
/// ```
/// use orrery::{extract, parse, Arena, Limits, MachineKind, Outcome};
/// let arena = Arena::new();
/// let program = parse(&arena, "Cons(Pair(\"moss\", 2), Cons(Pair(\"ivy\", 5), Nil))").unwrap();
/// let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
/// let Outcome::Value(v) = report.outcome else { panic!() };
/// let beds: Vec<(String, i64)> = extract(v.to_term(&arena)).unwrap();
/// assert_eq!(beds, vec![("moss".to_string(), 2), ("ivy".to_string(), 5)]);
/// assert_eq!(v.extract::<Vec<(String, i64)>>().unwrap(), beds);
/// ```
pub fn extract<T: FromDatum>(value: &Term<'_>) -> Result<T, ConvertError> {
    T::from_datum(&Datum::from_term(value)?)
}

/// [`extract`] building at most `max_bytes` of data on the way (pass the
/// memory limit of the run the value came from): every node counts its size
/// and every copy of a string its bytes.
///
/// # Errors
///
/// As [`extract`], and a [`ConvertError`] when the data would take more than
/// `max_bytes`.
///
/// # Examples
///
/// ```
/// use orrery::{extract_within, Arena};
/// let arena = Arena::new();
/// let word = arena.string(&"tide".repeat(256));
/// let list = arena.con("Cons", &[word, arena.con("Cons", &[word, arena.con("Nil", &[])])]);
/// assert_eq!(extract_within::<Vec<String>>(list, 1 << 16).unwrap().len(), 2);
/// assert!(extract_within::<Vec<String>>(list, 1 << 10).is_err());
/// ```
pub fn extract_within<T: FromDatum>(value: &Term<'_>, max_bytes: usize) -> Result<T, ConvertError> {
    T::from_datum(&Datum::from_term_within(value, max_bytes)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn long_list(n: i64) -> Datum<'static> {
        (0..n).collect::<Vec<i64>>().into_datum()
    }

    #[test]
    fn a_million_long_list_round_trips_through_terms_without_recursion() {
        let arena = Arena::new();
        let list = long_list(1_000_000);
        let term = list.to_term(&arena);
        let back = Datum::from_term(term).unwrap();
        assert!(back == list);
        let copy = back.clone();
        let items = Vec::<i64>::from_datum(&copy).unwrap();
        assert_eq!(items.len(), 1_000_000);
        assert_eq!(items[999_999], 999_999);
        assert!(format!("{copy:?}").starts_with("Cons(0, Cons(1, "));
    }

    #[test]
    fn exponential_sharing_is_refused_not_unfolded() {
        let arena = Arena::new();
        let mut t = arena.int(1);
        for _ in 0..64 {
            t = arena.con("Twin", &[t, t]);
        }
        let err = Datum::from_term(t).unwrap_err();
        assert!(err.expected().contains("at most"));
    }

    #[test]
    fn conversions_name_what_they_wanted() {
        let err = Vec::<i64>::from_datum(&Datum::Int(3)).unwrap_err();
        assert_eq!(err.expected(), "a Cons/Nil list");
        let err = u32::from_datum(&Datum::Int(-1)).unwrap_err();
        assert_eq!(
            err.to_string(),
            "expected an integer in the range of u32, found -1"
        );
        let err = <(i64, i64)>::from_datum(&Datum::con("Solo", vec![Datum::Int(1)])).unwrap_err();
        assert_eq!(err.found(), "the constructor Solo");
        assert_eq!(
            Option::<bool>::from_datum(&Some(true).into_datum()),
            Ok(Some(true))
        );
        assert_eq!(u64::MAX.into_datum(), Datum::Int(i64::MAX));
    }

    #[test]
    fn strings_print_escaped() {
        let d = Datum::con("Note", vec![Datum::Str("a\"b\n".into())]);
        assert_eq!(format!("{d:?}"), "Note(\"a\\\"b\\n\")");
    }
}
