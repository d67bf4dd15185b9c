//! Owned values: what a run returns. A [`Value`] is a closed value term in a
//! small image of its own (shared by its clones), so it outlives the run,
//! the machine and the program, crosses threads, prints in the text syntax,
//! compares structurally, and converts to Rust types and data.

use std::fmt;
use std::sync::Arc;

use crate::datum::{ConvertError, Datum, FromDatum, MAX_DATUM_BYTES};
use crate::error::ValidationError;
use crate::host::{HostFunctions, NO_HOST};
use crate::image::{INode, Id, Image};
use crate::term::{Arena, Term};

/// A value a program computed: an integer, a boolean, a string, a
/// constructor of values, or a function (a closure, read back as the term
/// the substitution stepper would hold). Cheap to clone, `Send` and `Sync`,
/// and tied to nothing: keep it as long as you like.
///
/// # Examples
///
/// ```
/// use orrery::{Limits, MachineKind, Outcome, Program};
/// let program = Program::parse("Pair(6 * 7, \"tide\")").unwrap();
/// let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
/// let Outcome::Value(v) = report.outcome else { panic!() };
/// assert_eq!(v.to_string(), "Pair(42, \"tide\")");
/// assert_eq!(v.extract::<(i64, String)>().unwrap(), (42, "tide".to_string()));
/// ```
#[derive(Clone)]
pub struct Value {
    store: Arc<Image>,
    root: Id,
    /// The host functions a function value may call.
    host: HostFunctions,
}

impl Value {
    /// A value read back into `store` at `root`, calling `host`'s functions.
    pub(crate) fn new(store: Image, root: Id, host: &HostFunctions) -> Value {
        Value {
            store: Arc::new(store),
            root,
            host: host.clone(),
        }
    }

    /// The value of a closed value term built in an arena.
    ///
    /// # Errors
    ///
    /// A [`ValidationError`] if the term is not closed, is not a value, or
    /// is not valid as a program would be.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Value};
    /// let arena = Arena::new();
    /// let v = Value::from_term(arena.con("Crate", &[arena.int(12)])).unwrap();
    /// assert_eq!(v.to_string(), "Crate(12)");
    /// assert!(Value::from_term(arena.app(arena.lam(arena.var(0)), arena.int(1))).is_err());
    /// ```
    pub fn from_term(term: &Term<'_>) -> Result<Value, ValidationError> {
        let image = Image::build(term, &NO_HOST)?;
        if !image.is_value(image.root) {
            return Err(ValidationError::NotAValue);
        }
        let root = image.root;
        Ok(Value::new(image, root, &NO_HOST))
    }

    /// The value of a datum.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, Value};
    /// let v = Value::from_datum(&Datum::con("Some", vec![Datum::Int(3)]));
    /// assert_eq!(v.to_string(), "Some(3)");
    /// ```
    pub fn from_datum(datum: &Datum<'_>) -> Value {
        let mut store = Image::default();
        let mut built: Vec<Id> = Vec::new();
        let root = datum.fold(
            |d, fields: &mut Vec<Id>| match d {
                Datum::Int(n) => store.push_int(*n),
                Datum::Bool(b) => store.push_bool(*b),
                Datum::Str(s) => store.push_string(s),
                Datum::Con(c) => {
                    let at = fields.len().saturating_sub(c.fields().len());
                    let tag = store.tag_of(c.tag());
                    let id = store.push_con(tag, &fields[at..]);
                    fields.truncate(at);
                    id
                }
            },
            &mut built,
        );
        Value::new(store, root, &NO_HOST)
    }

    /// This value as a term in `arena` (the builder's world: print it,
    /// compare it, lower it into another program).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Datum, Value};
    /// let v = Value::from_datum(&Datum::Int(9));
    /// let arena = Arena::new();
    /// assert!(v.to_term(&arena) == arena.int(9));
    /// ```
    pub fn to_term<'a>(&self, arena: &'a Arena) -> &'a Term<'a> {
        self.store.to_term(self.root, arena)
    }

    /// The integer this value is, if it is one.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Value::from_datum(&orrery::Datum::Int(5)).as_int(), Some(5));
    /// ```
    pub fn as_int(&self) -> Option<i64> {
        match self.store.node(self.root) {
            INode::Int(n) => Some(n),
            _ => None,
        }
    }

    /// The boolean this value is, if it is one.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Value::from_datum(&orrery::Datum::Bool(true)).as_bool(), Some(true));
    /// ```
    pub fn as_bool(&self) -> Option<bool> {
        match self.store.node(self.root) {
            INode::Bool(b) => Some(b),
            _ => None,
        }
    }

    /// The string this value is, if it is one.
    ///
    /// # Examples
    ///
    /// ```
    /// let v = orrery::Value::from_datum(&orrery::Datum::Str("fern".into()));
    /// assert_eq!(v.as_str(), Some("fern"));
    /// ```
    pub fn as_str(&self) -> Option<&str> {
        match self.store.node(self.root) {
            INode::Str(s) => Some(self.store.string(s)),
            _ => None,
        }
    }

    /// Whether this value is a function (a closure or a partial application).
    ///
    /// # Examples
    ///
    /// ```
    /// let program = orrery::Program::parse("\\x. x + 1").unwrap();
    /// let report = orrery::MachineKind::fastest().unwrap().run(&program, &orrery::Limits::default());
    /// assert!(report.outcome.value().unwrap().is_function());
    /// ```
    pub fn is_function(&self) -> bool {
        matches!(
            self.store.node(self.root),
            INode::Lam { .. } | INode::RecLam { .. }
        )
    }

    /// This value as data, within [`MAX_DATUM_BYTES`] (every copy of a
    /// shared string counted).
    ///
    /// # Errors
    ///
    /// A [`ConvertError`] if the value is or holds a function, or would take
    /// more bytes than that.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, Value};
    /// let v = Value::from_datum(&Datum::con("Pair", vec![Datum::Int(1), Datum::Bool(false)]));
    /// assert_eq!(v.to_datum().unwrap(), Datum::con("Pair", vec![Datum::Int(1), Datum::Bool(false)]));
    /// ```
    pub fn to_datum(&self) -> Result<Datum<'_>, ConvertError> {
        self.to_datum_within(MAX_DATUM_BYTES)
    }

    /// [`Value::to_datum`] within `max_bytes`.
    ///
    /// # Errors
    ///
    /// As [`Value::to_datum`], with `max_bytes` for the bound.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, Value};
    /// let v = Value::from_datum(&Datum::Str("x".repeat(4000)));
    /// assert!(v.to_datum_within(1000).is_err());
    /// ```
    pub fn to_datum_within(&self, max_bytes: usize) -> Result<Datum<'_>, ConvertError> {
        let mut builder = crate::datum::Builder::new(max_bytes);
        let mut pending = vec![self.root];
        let store = &*self.store;
        while let Some(id) = pending.pop() {
            let step = match store.node(id) {
                INode::Int(n) => builder.leaf(Datum::Int(n)),
                INode::Bool(b) => builder.leaf(Datum::Bool(b)),
                INode::Str(s) => {
                    let text = store.string(s);
                    if builder.fits(text.len()) {
                        builder.leaf(Datum::Str(text.to_string()))
                    } else {
                        Err(crate::datum::NotData::TooLarge)
                    }
                }
                INode::Con(tag, start, len) => {
                    pending.extend(store.list(start, len).iter().rev());
                    builder.open(store.tag(tag), len as usize)
                }
                INode::Lam { .. } | INode::RecLam { .. } => Err(crate::datum::NotData::Function),
                _ => Err(crate::datum::NotData::NotAValue),
            };
            step.map_err(|e| e.explain(max_bytes))?;
        }
        builder.finish().map_err(|e| e.explain(max_bytes))
    }

    /// This value converted to a Rust type (see [`FromDatum`]).
    ///
    /// # Errors
    ///
    /// A [`ConvertError`] saying what was expected and what was found.
    ///
    /// # Examples
    ///
    /// ```
    /// let program = orrery::Program::parse("Cons(1, Cons(2, Nil))").unwrap();
    /// let report = orrery::MachineKind::fastest().unwrap().run(&program, &orrery::Limits::default());
    /// let v = report.outcome.value().unwrap();
    /// assert_eq!(v.extract::<Vec<i64>>().unwrap(), vec![1, 2]);
    /// assert!(v.extract::<bool>().is_err());
    /// ```
    pub fn extract<T: FromDatum>(&self) -> Result<T, ConvertError> {
        T::from_datum(&self.to_datum()?)
    }

    /// [`Value::extract`] within `max_bytes` of data.
    ///
    /// # Errors
    ///
    /// As [`Value::extract`], and when the data would take more than
    /// `max_bytes`.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, Value};
    /// let v = Value::from_datum(&Datum::Str("x".repeat(4000)));
    /// assert!(v.extract_within::<String>(1000).is_err());
    /// assert_eq!(v.extract_within::<String>(1 << 20).unwrap().len(), 4000);
    /// ```
    pub fn extract_within<T: FromDatum>(&self, max_bytes: usize) -> Result<T, ConvertError> {
        T::from_datum(&self.to_datum_within(max_bytes)?)
    }

    /// The value printed in the text syntax, cut short past `max_bytes` (a
    /// value shared many times over can print to far more text than it
    /// takes memory).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, Value};
    /// let v = Value::from_datum(&Datum::Str("a long note".into()));
    /// let printed = v.print_limited(4);
    /// assert!(printed.truncated);
    /// ```
    pub fn print_limited(&self, max_bytes: usize) -> crate::syntax::Printed {
        let arena = Arena::new();
        crate::syntax::print_limited(self.to_term(&arena), max_bytes)
    }

    /// Bytes this value holds: its nodes, lists and strings.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, Value};
    /// let v = Value::from_datum(&Datum::Str("x".repeat(4000)));
    /// assert!(v.bytes() >= 4000);
    /// ```
    pub fn bytes(&self) -> usize {
        let strings: usize = self.store.strings.iter().map(|s| s.len()).sum();
        self.store.building_bytes().saturating_add(strings)
    }

    /// The host functions this value's functions may call.
    pub(crate) fn host(&self) -> &HostFunctions {
        &self.host
    }
}

/// The text syntax, cut short past [`crate::PRINT_LIMIT`] bytes.
impl fmt::Display for Value {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.print_limited(crate::PRINT_LIMIT).text)
    }
}

impl fmt::Debug for Value {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Value({})", self.print_limited(4096).text)
    }
}

/// Structural equality: the same de Bruijn term.
impl PartialEq for Value {
    fn eq(&self, other: &Value) -> bool {
        let arena = Arena::new();
        crate::equal::terms_equal(self.to_term(&arena), other.to_term(&arena))
    }
}

/// A value equals a term built in an arena when they are the same de Bruijn
/// term.
impl PartialEq<&Term<'_>> for Value {
    fn eq(&self, other: &&Term<'_>) -> bool {
        let arena = Arena::new();
        crate::equal::terms_equal(self.to_term(&arena), other)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn values_are_send_sync_and_outlive_their_arena() {
        fn send_sync<T: Send + Sync + 'static>(_: &T) {}
        let v = {
            let arena = Arena::new();
            Value::from_term(arena.con("Crate", &[arena.string("figs"), arena.int(3)])).unwrap()
        };
        send_sync(&v);
        assert_eq!(v.to_string(), "Crate(\"figs\", 3)");
        let again = v.clone();
        assert_eq!(again, v);
    }
}
