//! The primitives of the calculus and their δ-rules (SEMANTICS §1.3): checked integer
//! arithmetic, comparisons, and string operations. Every machine calls [`delta`],
//! so a primitive means the same thing, with the same error, everywhere.

use std::fmt;

use crate::error::{ErrorKind, EvalError, Operand};

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
    Host(HostId),
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

/// A host function's identity inside terms: its place in its
/// [`HostFunctions`](crate::HostFunctions) table and its arity. Terms carry it as
/// [`Prim::Host`]; [`crate::Program::with_host`] checks it against the table.
///
/// # Examples
///
/// ```
/// use orrery::HostFunctions;
/// let mut host = HostFunctions::new();
/// let id = host.register("halve", |n: i64| Ok::<_, String>(n / 2)).unwrap();
/// assert_eq!(id.arity(), 1);
/// assert_eq!(host.id("halve"), Some(id));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct HostId {
    /// The identity of the table the function belongs to.
    table: u32,
    /// Its index in the table (high 24 bits) and its arity (low 8).
    slot: u32,
}

impl HostId {
    /// The id of function `index` of table `table`, of `arity` arguments
    /// (`index` below 2²⁴, `arity` at most [`crate::MAX_HOST_ARITY`]).
    pub(crate) fn new(table: u32, index: u32, arity: u32) -> HostId {
        HostId {
            table,
            slot: index << 8 | (arity & 0xff),
        }
    }

    /// The identity of its table.
    pub(crate) fn table(self) -> u32 {
        self.table
    }

    /// The number of arguments the function takes.
    ///
    /// # Examples
    ///
    /// ```
    /// let mut host = orrery::HostFunctions::new();
    /// let id = host.register("mix_paint", |a: i64, b: i64| Ok::<_, String>(a + b)).unwrap();
    /// assert_eq!(id.arity(), 2);
    /// ```
    pub fn arity(self) -> usize {
        (self.slot & 0xff) as usize
    }

    /// Its position in its table (registration order, from 0).
    ///
    /// # Examples
    ///
    /// ```
    /// let mut host = orrery::HostFunctions::new();
    /// let sow = host.register("sow", |n: i64| Ok::<_, String>(n)).unwrap();
    /// let reap = host.register("reap", |n: i64| Ok::<_, String>(n)).unwrap();
    /// assert_eq!((sow.index(), reap.index()), (0, 1));
    /// ```
    pub fn index(self) -> usize {
        (self.slot >> 8) as usize
    }
}

/// The result of a primitive: a literal value.
///
/// # Examples
///
/// ```
/// use orrery::toolkit::{delta, Operand, PrimValue};
/// use orrery::Prim;
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
/// use orrery::toolkit::{delta, Operand, PrimValue};
/// use orrery::{ErrorKind, Prim};
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

/// Bytes of string work that one unit of fuel pays for, beyond the first
/// unit of every contraction (SEMANTICS §2's data-sized primitives).
///
/// # Examples
///
/// ```
/// assert_eq!(orrery::STRING_UNIT, 1024);
/// ```
pub const STRING_UNIT: usize = 1024;

/// The units of fuel a contraction of `op` on `operands` needs: `1 + ⌊n /
/// 1024⌋`, where `n` is the byte length of the result of `++`, of the shorter
/// operand of a string comparison, or of the operand of `length`; one unit
/// for every other primitive and for operands of the wrong type. (A host
/// function's declared cost is added by the machine, not here.)
///
/// # Examples
///
/// ```
/// use orrery::toolkit::{fuel_units, Operand};
/// use orrery::Prim;
/// let long = "x".repeat(5000);
/// assert_eq!(fuel_units(Prim::Concat, &[Operand::Str(&long), Operand::Str("yz")]), 1 + 5002 / 1024);
/// assert_eq!(fuel_units(Prim::Lt, &[Operand::Str(&long), Operand::Str("yz")]), 1);
/// assert_eq!(fuel_units(Prim::Length, &[Operand::Int(3)]), 1);
/// ```
pub fn fuel_units(op: Prim, operands: &[Operand<'_>]) -> u64 {
    use Operand::Str;
    let bytes = match (op, operands) {
        (Prim::Concat, &[Str(a), Str(b)]) => a.len().saturating_add(b.len()),
        (Prim::Eq | Prim::Ne | Prim::Lt | Prim::Le | Prim::Gt | Prim::Ge, &[Str(a), Str(b)]) => {
            a.len().min(b.len())
        }
        (Prim::Length, &[Str(s)]) => s.len(),
        _ => 0,
    };
    1 + (bytes / STRING_UNIT) as u64
}

/// Strings longer than this are worked on in chunks of this many bytes, with
/// a look at the cancellation flag between chunks.
const CHUNK: usize = 256 << 10;

/// Why [`delta_polled`] gave no result.
#[derive(Debug)]
pub(crate) enum Stopped {
    /// The δ-rule's error.
    Error(EvalError),
    /// `poll` said to stop, between two chunks of a long string operation.
    Cancelled,
    /// The allocator refused the result.
    Memory,
}

/// [`delta`], working on long strings in chunks and calling `poll` between
/// them; `poll` returning `true` stops the work.
pub(crate) fn delta_polled(
    op: Prim,
    operands: &[Operand<'_>],
    poll: &mut dyn FnMut() -> bool,
) -> Result<PrimValue, Stopped> {
    use Operand::Str;
    let stop = |poll: &mut dyn FnMut() -> bool| {
        if poll() {
            Err(Stopped::Cancelled)
        } else {
            Ok(())
        }
    };
    match (op, operands) {
        (Prim::Concat, &[Str(a), Str(b)]) if a.len() + b.len() > CHUNK => {
            let mut s = String::new();
            if s.try_reserve_exact(a.len() + b.len()).is_err() {
                // The machines refuse strings past their memory limit before
                // they get here; an allocator that still says no is out of
                // memory, which the memory limit stands for.
                return Err(Stopped::Memory);
            }
            for part in [a, b] {
                let mut at = 0;
                while at < part.len() {
                    let end = boundary(part, at + CHUNK);
                    s.push_str(&part[at..end]);
                    at = end;
                    stop(poll)?;
                }
            }
            Ok(PrimValue::Str(s))
        }
        (Prim::Length, &[Str(s)]) if s.len() > CHUNK => {
            let (mut at, mut count) = (0, 0usize);
            while at < s.len() {
                let end = boundary(s, at + CHUNK);
                count += s[at..end].chars().count();
                at = end;
                stop(poll)?;
            }
            Ok(PrimValue::Int(count as i64))
        }
        (Prim::Eq | Prim::Ne | Prim::Lt | Prim::Le | Prim::Gt | Prim::Ge, &[Str(a), Str(b)])
            if a.len().min(b.len()) > CHUNK =>
        {
            let (x, y) = (a.as_bytes(), b.as_bytes());
            let shorter = x.len().min(y.len());
            let mut order = std::cmp::Ordering::Equal;
            let mut at = 0;
            while at < shorter && order.is_eq() {
                let end = (at + CHUNK).min(shorter);
                order = x[at..end].cmp(&y[at..end]);
                at = end;
                stop(poll)?;
            }
            let order = order.then(x.len().cmp(&y.len()));
            Ok(PrimValue::Bool(match op {
                Prim::Eq => order.is_eq(),
                Prim::Ne => order.is_ne(),
                Prim::Lt => order.is_lt(),
                Prim::Le => order.is_le(),
                Prim::Gt => order.is_gt(),
                _ => order.is_ge(),
            }))
        }
        _ => delta(op, operands).map_err(Stopped::Error),
    }
}

/// The first char boundary of `s` at or after `at` (or its end).
fn boundary(s: &str, at: usize) -> usize {
    let mut end = at.min(s.len());
    while !s.is_char_boundary(end) {
        end += 1;
    }
    end
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chunked_string_work_agrees_with_delta() {
        let a = "é".repeat(300_000);
        let mut b = a.clone();
        b.push('z');
        let c = format!("{}a", "é".repeat(299_999));
        for (x, y) in [(&a, &b), (&b, &a), (&a, &a), (&a, &c), (&c, &a)] {
            let operands = [Operand::Str(x), Operand::Str(y)];
            for op in [
                Prim::Concat,
                Prim::Eq,
                Prim::Ne,
                Prim::Lt,
                Prim::Le,
                Prim::Gt,
                Prim::Ge,
            ] {
                let mut polls = 0;
                let chunked = delta_polled(op, &operands, &mut || {
                    polls += 1;
                    false
                });
                let Ok(chunked) = chunked else { panic!("{op}") };
                assert_eq!(chunked, delta(op, &operands).unwrap(), "{op}");
                assert!(polls > 1, "{op} looked at the flag {polls} times");
            }
        }
        let len = delta_polled(Prim::Length, &[Operand::Str(&a)], &mut || false).unwrap();
        assert_eq!(len, PrimValue::Int(300_000));
        let stopped = delta_polled(Prim::Length, &[Operand::Str(&a)], &mut || true);
        assert!(matches!(stopped, Err(Stopped::Cancelled)));
    }
}
