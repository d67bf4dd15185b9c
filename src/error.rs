//! The errors of the crate, as data: evaluation errors (a stuck term) by
//! their stable kind, resource limits, faults (a broken invariant inside
//! orrery), and why a term is not a program; with [`Operand`], what an error
//! message (and a primitive) sees of a value. Every kind is a
//! `#[non_exhaustive]` enum with `Display` from thiserror, so callers match
//! kinds, never messages. This module uses nothing else of the crate.

/// The stable kinds of evaluation error (a stuck term), SEMANTICS §1.2.
///
/// # Examples
///
/// ```
/// use orrery::ErrorKind;
/// assert_eq!(ErrorKind::DivisionByZero.name(), "division_by_zero");
/// assert_eq!(ErrorKind::DivisionByZero.to_string(), "division by zero");
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, thiserror::Error)]
#[non_exhaustive]
pub enum ErrorKind {
    /// Applying something that is not a function.
    #[error("not a function")]
    NotAFunction,
    /// An `if` condition that is not a boolean.
    #[error("not a boolean")]
    NotABoolean,
    /// A primitive operand of the wrong type.
    #[error("type mismatch")]
    TypeMismatch,
    /// `/` or `%` by zero.
    #[error("division by zero")]
    DivisionByZero,
    /// Integer arithmetic whose exact result does not fit in 64 bits.
    #[error("integer overflow")]
    IntegerOverflow,
    /// A `case` with no arm for the value and no default arm.
    #[error("no matching case")]
    NoMatchingCase,
    /// A host function reported failure.
    #[error("host function failed")]
    HostError,
}

impl ErrorKind {
    /// The stable snake_case name used in the JSON output.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::ErrorKind::NoMatchingCase.name(), "no_matching_case");
    /// assert_eq!(orrery::ErrorKind::HostError.name(), "host_error");
    /// ```
    pub fn name(self) -> &'static str {
        match self {
            ErrorKind::NotAFunction => "not_a_function",
            ErrorKind::NotABoolean => "not_a_boolean",
            ErrorKind::TypeMismatch => "type_mismatch",
            ErrorKind::DivisionByZero => "division_by_zero",
            ErrorKind::IntegerOverflow => "integer_overflow",
            ErrorKind::NoMatchingCase => "no_matching_case",
            ErrorKind::HostError => "host_error",
        }
    }
}

/// An evaluation error: its kind and a message for people. Compare kinds, not
/// messages.
///
/// # Examples
///
/// ```
/// use orrery::{ErrorKind, EvalError};
/// let e = EvalError::new(ErrorKind::NotABoolean, "if on an integer");
/// assert_eq!(e.kind(), ErrorKind::NotABoolean);
/// assert_eq!(e.to_string(), "not a boolean: if on an integer");
/// ```
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("{kind}: {message}")]
pub struct EvalError {
    kind: ErrorKind,
    message: String,
}

impl EvalError {
    /// An error of `kind` with a message.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{ErrorKind, EvalError};
    /// let e = EvalError::new(ErrorKind::HostError, "the glaze kiln is offline");
    /// assert_eq!(e.kind(), ErrorKind::HostError);
    /// assert_eq!(e.message(), "the glaze kiln is offline");
    /// ```
    pub fn new(kind: ErrorKind, message: impl Into<String>) -> Self {
        EvalError {
            kind,
            message: message.into(),
        }
    }

    /// Applying `callee`, which is not a function. Every machine builds its
    /// error through these constructors, so messages agree too.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::toolkit::Operand;
    /// use orrery::{ErrorKind, EvalError};
    /// let e = EvalError::not_a_function(Operand::Int(3));
    /// assert_eq!(e.kind(), ErrorKind::NotAFunction);
    /// ```
    pub fn not_a_function(callee: Operand<'_>) -> Self {
        EvalError::new(
            ErrorKind::NotAFunction,
            format!("cannot apply {}", callee.describe()),
        )
    }

    /// An `if` whose condition is `condition`, not a boolean.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::toolkit::Operand;
    /// use orrery::{ErrorKind, EvalError};
    /// let e = EvalError::not_a_boolean(Operand::Str("yes"));
    /// assert_eq!(e.kind(), ErrorKind::NotABoolean);
    /// assert_eq!(e.message(), "the condition of an if is a string");
    /// ```
    pub fn not_a_boolean(condition: Operand<'_>) -> Self {
        EvalError::new(
            ErrorKind::NotABoolean,
            format!("the condition of an if is {}", condition.describe()),
        )
    }

    /// A `case` with no arm for `scrutinee` and no default arm.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::toolkit::Operand;
    /// use orrery::{ErrorKind, EvalError};
    /// let e = EvalError::no_matching_case(Operand::Con("Drizzle"));
    /// assert_eq!(e.kind(), ErrorKind::NoMatchingCase);
    /// assert!(e.message().contains("the constructor Drizzle"));
    /// ```
    pub fn no_matching_case(scrutinee: Operand<'_>) -> Self {
        EvalError::new(
            ErrorKind::NoMatchingCase,
            format!("no arm of the case matches {}", scrutinee.describe()),
        )
    }

    /// The error's kind.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{parse, Arena, ErrorKind, Limits, MachineKind, Outcome};
    /// let arena = Arena::new();
    /// let program = parse(&arena, "let crates = 0 in 120 / crates").unwrap();
    /// for kind in MachineKind::enabled() {
    ///     let Outcome::Error(e) = kind.run(&program, &Limits::default()).outcome else { panic!() };
    ///     assert_eq!(e.kind(), ErrorKind::DivisionByZero);
    /// }
    /// ```
    pub fn kind(&self) -> ErrorKind {
        self.kind
    }

    /// The message.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{ErrorKind, EvalError};
    /// let e = EvalError::new(ErrorKind::TypeMismatch, "a string plus an integer");
    /// assert_eq!(e.message(), "a string plus an integer");
    /// ```
    pub fn message(&self) -> &str {
        &self.message
    }
}

/// Resource limits: a family apart from evaluation errors. They may trip at
/// different points on different machines, so they are reported, not compared.
///
/// # Examples
///
/// ```
/// assert_eq!(orrery::LimitKind::Memory.name(), "memory");
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, thiserror::Error)]
#[non_exhaustive]
pub enum LimitKind {
    /// The run needed more runtime memory than [`Limits::memory`](crate::Limits::memory).
    #[error("memory limit")]
    Memory,
    /// The run was cancelled from outside.
    #[error("cancelled")]
    Cancelled,
}

impl LimitKind {
    /// The stable snake_case name used in the JSON output.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::LimitKind::Cancelled.name(), "cancelled");
    /// ```
    pub fn name(self) -> &'static str {
        match self {
            LimitKind::Memory => "memory",
            LimitKind::Cancelled => "cancelled",
        }
    }
}

/// A resource limit that stopped a run.
///
/// # Examples
///
/// ```
/// use orrery::{LimitError, LimitKind};
/// let e = LimitError::new(LimitKind::Memory, "needed 2 MiB, limit 1 MiB");
/// assert_eq!(e.kind(), LimitKind::Memory);
/// ```
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("{kind}: {message}")]
pub struct LimitError {
    kind: LimitKind,
    message: String,
}

impl LimitError {
    /// A limit of `kind` with a message.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{LimitError, LimitKind};
    /// let e = LimitError::new(LimitKind::Cancelled, "the harbour closed");
    /// assert_eq!(e.kind(), LimitKind::Cancelled);
    /// assert_eq!(e.to_string(), "cancelled: the harbour closed");
    /// ```
    pub fn new(kind: LimitKind, message: impl Into<String>) -> Self {
        LimitError {
            kind,
            message: message.into(),
        }
    }

    /// The memory limit, with a message giving the bound.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{LimitError, LimitKind};
    /// let e = LimitError::memory(4096);
    /// assert_eq!(e.kind(), LimitKind::Memory);
    /// assert!(e.message().contains("4096 bytes"));
    /// ```
    pub fn memory(limit: usize) -> Self {
        LimitError::new(
            LimitKind::Memory,
            format!("runtime data exceeded the memory limit of {limit} bytes"),
        )
    }

    /// The cancellation limit.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{LimitError, LimitKind};
    /// assert_eq!(LimitError::cancelled().kind(), LimitKind::Cancelled);
    /// ```
    pub fn cancelled() -> Self {
        LimitError::new(LimitKind::Cancelled, "the run was cancelled by its host")
    }

    /// The limit's kind.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{LimitError, LimitKind};
    /// assert_eq!(LimitError::memory(1 << 20).kind(), LimitKind::Memory);
    /// ```
    pub fn kind(&self) -> LimitKind {
        self.kind
    }

    /// The message.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{LimitError, LimitKind};
    /// let e = LimitError::new(LimitKind::Memory, "the pantry is full");
    /// assert_eq!(e.message(), "the pantry is full");
    /// ```
    pub fn message(&self) -> &str {
        &self.message
    }
}

/// A broken invariant inside orrery: a bug in orrery, never the program's
/// fault. Machines report it as [`crate::Outcome::Fault`] rather than
/// panicking, and no two reports ever agree on one.
///
/// # Examples
///
/// ```
/// use orrery::Fault;
/// let f = Fault::new("a frame without its values");
/// assert!(f.to_string().contains("a bug in orrery"));
/// assert_eq!(f.message(), "a frame without its values");
/// ```
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("internal fault (a bug in orrery; please report it): {message}")]
pub struct Fault {
    message: String,
}

impl Fault {
    /// A fault with a message saying which invariant broke.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Fault::new("lost a value").message(), "lost a value");
    /// ```
    pub fn new(message: impl Into<String>) -> Self {
        Fault {
            message: message.into(),
        }
    }

    /// Which invariant broke.
    ///
    /// # Examples
    ///
    /// ```
    /// assert!(orrery::Fault::new("x").message() == "x");
    /// ```
    pub fn message(&self) -> &str {
        &self.message
    }
}

/// What a primitive sees of one operand: machines translate their own value
/// representation into this view before calling [`delta`](crate::toolkit::delta).
///
/// # Examples
///
/// ```
/// use orrery::toolkit::{delta, Operand, PrimValue};
/// use orrery::Prim;
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
    /// assert_eq!(orrery::toolkit::Operand::Int(3).describe(), "an integer");
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

/// Why a term is not a runnable program.
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Program, ValidationError};
/// let arena = Arena::new();
/// let err = Program::new(arena.var(0)).unwrap_err();
/// assert!(matches!(err, ValidationError::Open { .. }));
/// ```
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum ValidationError {
    /// The term has a free variable.
    #[error("the program is not closed: it refers to #{index} outside any binder")]
    Open {
        /// The smallest index, counted from the top, that escapes.
        index: u32,
    },
    /// A primitive applied to the wrong number of operands.
    #[error("{name} takes {expected} operand(s), given {given}")]
    PrimArity {
        /// The primitive's name.
        name: String,
        /// Its arity.
        expected: usize,
        /// The number given.
        given: usize,
    },
    /// A constructor tag used with two different arities.
    #[error("constructor {tag} is used with {first} and with {second} field(s)")]
    ConArity {
        /// The tag.
        tag: String,
        /// One arity seen.
        first: u32,
        /// Another.
        second: u32,
    },
    /// Two arms of one case match the same constructor.
    #[error("case has two arms for {tag}")]
    DuplicateArm {
        /// The tag.
        tag: String,
    },
    /// A call of a host function that is not in the program's table.
    #[error("host function #{index} is not in the program's table of host functions")]
    UnknownHost {
        /// The function's index in the table it came from.
        index: usize,
    },
    /// A call made with another table of host functions than the one the
    /// program is made with: the function it names there may not be this
    /// one, whatever its arity (build the call with the program's table).
    #[error(
        "host function #{index} comes from another table of host functions than the program's"
    )]
    ForeignHost {
        /// The function's index in the table it came from.
        index: usize,
    },
    /// The program, once its shared open subterms are unfolded, would have
    /// more than this many nodes (see [`crate::MAX_NODES`]).
    #[error(
        "the program is too large: more than {nodes} nodes once its shared subterms are unfolded"
    )]
    TooLarge {
        /// The most nodes allowed for this program.
        nodes: usize,
    },
    /// A constructor with too many fields, a case with too many arms, or an
    /// arm binding too many fields ([`crate::MAX_FIELDS`], [`crate::MAX_ARMS`]).
    #[error("{what}: {given} is more than the {max} allowed")]
    TooWide {
        /// What was counted.
        what: &'static str,
        /// How many there were.
        given: usize,
        /// The most allowed.
        max: usize,
    },
    /// A term given as a value is not one (it has a redex).
    #[error("the term is not a value")]
    NotAValue,
    /// A broken invariant inside orrery itself (a bug, never the program's
    /// fault).
    #[error("internal error in orrery (please report it): {0}")]
    Internal(&'static str),
}
