//! The primitives of the calculus and their δ-rules (DESIGN §1): checked integer
//! arithmetic, comparisons, and string operations. Every machine calls [`delta`],
//! so a primitive means the same thing, with the same error, everywhere.

use std::fmt;

use crate::api::{ErrorKind, EvalError};

/// A built-in primitive operator. Each has a fixed arity; a primitive
/// application is always saturated.
///
/// # Examples
///
/// ```
/// use orrery::Prim;
/// assert_eq!(Prim::Add.arity(), 2);
/// assert_eq!(Prim::Length.name(), "length");
/// assert_eq!(Prim::from_name("decimal"), Some(Prim::Decimal));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Prim {
    /// Integer addition, `+`.
    Add,
    /// Integer subtraction, `-`.
    Sub,
    /// Integer multiplication, `*`.
    Mul,
    /// Integer division truncating toward zero, `/`.
    Div,
    /// Remainder of truncating division, `%` (its sign follows the dividend).
    Rem,
    /// Integer negation, unary `-`.
    Neg,
    /// Equality on integers, strings and booleans, `==`.
    Eq,
    /// Disequality on integers, strings and booleans, `!=`.
    Ne,
    /// Less than, on integers or strings (bytewise), `<`.
    Lt,
    /// Less than or equal, `<=`.
    Le,
    /// Greater than, `>`.
    Gt,
    /// Greater than or equal, `>=`.
    Ge,
    /// String concatenation, `++`.
    Concat,
    /// Length of a string in Unicode scalar values, `length`.
    Length,
    /// An integer written in decimal, `decimal`.
    Decimal,
    /// A host function the embedder registered (see [`crate::HostFunctions`]).
    /// Only [`crate::Program::with_host`] accepts it, with its table.
    Host(crate::host::HostId),
}

impl Prim {
    /// Every primitive, in a fixed order. Host functions are not here: they
    /// live in a [`crate::HostFunctions`] table.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::Prim;
    /// assert_eq!(Prim::ALL.len(), 15);
    /// assert!(Prim::ALL.iter().all(|p| Prim::from_name(p.name()) == Some(*p)));
    /// ```
    pub const ALL: [Prim; 15] = [
        Prim::Add,
        Prim::Sub,
        Prim::Mul,
        Prim::Div,
        Prim::Rem,
        Prim::Neg,
        Prim::Eq,
        Prim::Ne,
        Prim::Lt,
        Prim::Le,
        Prim::Gt,
        Prim::Ge,
        Prim::Concat,
        Prim::Length,
        Prim::Decimal,
    ];

    /// The number of operands.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Prim::Neg.arity(), 1);
    /// ```
    pub fn arity(self) -> usize {
        match self {
            Prim::Neg | Prim::Length | Prim::Decimal => 1,
            Prim::Host(id) => id.arity(),
            _ => 2,
        }
    }

    /// The primitive's name: its operator symbol, or its function name for the
    /// built-in functions `length` and `decimal`. Unary minus is `neg`. A host
    /// function's name is in its table ([`crate::HostFunctions::name`]).
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Prim::Concat.name(), "++");
    /// ```
    pub fn name(self) -> &'static str {
        match self {
            Prim::Add => "+",
            Prim::Sub => "-",
            Prim::Mul => "*",
            Prim::Div => "/",
            Prim::Rem => "%",
            Prim::Neg => "neg",
            Prim::Eq => "==",
            Prim::Ne => "!=",
            Prim::Lt => "<",
            Prim::Le => "<=",
            Prim::Gt => ">",
            Prim::Ge => ">=",
            Prim::Concat => "++",
            Prim::Length => "length",
            Prim::Decimal => "decimal",
            Prim::Host(_) => "host function",
        }
    }

    /// The primitive with this [`name`](Prim::name), if any.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Prim::from_name("%"), Some(orrery::Prim::Rem));
    /// assert_eq!(orrery::Prim::from_name("sqrt"), None);
    /// ```
    pub fn from_name(name: &str) -> Option<Prim> {
        Prim::ALL.into_iter().find(|p| p.name() == name)
    }
}

impl fmt::Display for Prim {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// What a primitive sees of one operand: machines translate their own value
/// representation into this view before calling [`delta`].
///
/// # Examples
///
/// ```
/// use orrery::{delta, Operand, Prim, PrimValue};
/// let r = delta(Prim::Add, &[Operand::Int(2), Operand::Int(3)]);
/// assert_eq!(r, Ok(PrimValue::Int(5)));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Operand<'v> {
    /// An integer.
    Int(i64),
    /// A boolean.
    Bool(bool),
    /// A string.
    Str(&'v str),
    /// A function or recursive function.
    Function,
    /// A constructor value with this tag.
    Con(&'v str),
}

impl Operand<'_> {
    /// A short description of the operand's type, for error messages.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Operand::Int(3).describe(), "an integer");
    /// ```
    pub fn describe(&self) -> String {
        match self {
            Operand::Int(_) => "an integer".into(),
            Operand::Bool(_) => "a boolean".into(),
            Operand::Str(_) => "a string".into(),
            Operand::Function => "a function".into(),
            Operand::Con(tag) => format!("the constructor {tag}"),
        }
    }
}

/// The result of a primitive: a literal value.
///
/// # Examples
///
/// ```
/// use orrery::{delta, Operand, Prim, PrimValue};
/// let r = delta(Prim::Decimal, &[Operand::Int(-12)]);
/// assert_eq!(r, Ok(PrimValue::Str("-12".to_string())));
/// ```
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum PrimValue {
    /// An integer.
    Int(i64),
    /// A boolean.
    Bool(bool),
    /// A string.
    Str(String),
}

/// The δ-rule: apply primitive `op` to its operands.
///
/// # Errors
///
/// `type_mismatch` for an operand of the wrong type (or the wrong number of
/// operands), `division_by_zero` for `/` or `%` by zero, and `integer_overflow`
/// when the exact result does not fit in 64 bits (including `i64::MIN / -1`).
///
/// # Examples
///
/// ```
/// use orrery::{delta, ErrorKind, Operand, Prim, PrimValue};
/// // Truncation toward zero (ISO C99 §6.5.5).
/// assert_eq!(delta(Prim::Div, &[Operand::Int(-7), Operand::Int(2)]), Ok(PrimValue::Int(-3)));
/// let e = delta(Prim::Div, &[Operand::Int(1), Operand::Int(0)]).unwrap_err();
/// assert_eq!(e.kind(), ErrorKind::DivisionByZero);
/// ```
pub fn delta(op: Prim, operands: &[Operand<'_>]) -> Result<PrimValue, EvalError> {
    use Operand::{Bool, Int, Str};
    let overflow = || {
        EvalError::new(
            ErrorKind::IntegerOverflow,
            format!("integer overflow in {}", op.name()),
        )
    };
    let by_zero = || {
        EvalError::new(
            ErrorKind::DivisionByZero,
            format!("division by zero in {}", op.name()),
        )
    };
    match (op, operands) {
        (Prim::Add, &[Int(a), Int(b)]) => a.checked_add(b).map(PrimValue::Int).ok_or_else(overflow),
        (Prim::Sub, &[Int(a), Int(b)]) => a.checked_sub(b).map(PrimValue::Int).ok_or_else(overflow),
        (Prim::Mul, &[Int(a), Int(b)]) => a.checked_mul(b).map(PrimValue::Int).ok_or_else(overflow),
        (Prim::Div | Prim::Rem, &[Int(_), Int(0)]) => Err(by_zero()),
        (Prim::Div, &[Int(a), Int(b)]) => a.checked_div(b).map(PrimValue::Int).ok_or_else(overflow),
        (Prim::Rem, &[Int(a), Int(b)]) => a.checked_rem(b).map(PrimValue::Int).ok_or_else(overflow),
        (Prim::Neg, &[Int(a)]) => a.checked_neg().map(PrimValue::Int).ok_or_else(overflow),
        (Prim::Eq | Prim::Ne, &[a, b]) => {
            let equal = match (a, b) {
                (Int(a), Int(b)) => a == b,
                (Str(a), Str(b)) => a == b,
                (Bool(a), Bool(b)) => a == b,
                _ => return Err(mismatch(op, operands)),
            };
            Ok(PrimValue::Bool(equal == (op == Prim::Eq)))
        }
        (Prim::Lt | Prim::Le | Prim::Gt | Prim::Ge, &[a, b]) => {
            let order = match (a, b) {
                (Int(a), Int(b)) => a.cmp(&b),
                (Str(a), Str(b)) => a.as_bytes().cmp(b.as_bytes()),
                _ => return Err(mismatch(op, operands)),
            };
            Ok(PrimValue::Bool(match op {
                Prim::Lt => order.is_lt(),
                Prim::Le => order.is_le(),
                Prim::Gt => order.is_gt(),
                _ => order.is_ge(),
            }))
        }
        (Prim::Concat, &[Str(a), Str(b)]) => {
            let mut s = String::with_capacity(a.len() + b.len());
            s.push_str(a);
            s.push_str(b);
            Ok(PrimValue::Str(s))
        }
        (Prim::Length, &[Str(s)]) => Ok(PrimValue::Int(s.chars().count() as i64)),
        (Prim::Decimal, &[Int(n)]) => Ok(PrimValue::Str(n.to_string())),
        (Prim::Host(_), _) => Err(EvalError::new(
            ErrorKind::HostError,
            "a host function was called without its table",
        )),
        _ => Err(mismatch(op, operands)),
    }
}

fn mismatch(op: Prim, operands: &[Operand<'_>]) -> EvalError {
    let described: Vec<String> = operands.iter().map(Operand::describe).collect();
    let wanted = match op {
        Prim::Concat | Prim::Length => "strings",
        Prim::Eq | Prim::Ne => "two integers, two strings or two booleans",
        Prim::Lt | Prim::Le | Prim::Gt | Prim::Ge => "two integers or two strings",
        _ => "integers",
    };
    EvalError::new(
        ErrorKind::TypeMismatch,
        format!(
            "{} expects {wanted}, got {}",
            op.name(),
            described.join(" and ")
        ),
    )
}
