//! Validated programs: the invariants every machine relies on (closedness,
//! primitive arities, one arity per constructor tag, distinct case arms),
//! checked once by an iterative walk that visits each shared node once.

use std::sync::Arc;

use crate::datum::Datum;
use crate::host::{HostFunctions, NO_HOST};
use crate::image::Image;
use crate::term::{Arena, Term};

pub use crate::error::ValidationError;

/// A closed, validated term, ready for any machine, with the table of host
/// functions it may call.
///
/// A `Program` holds its term (in its [`crate::Arena`]), its
/// [`HostFunctions`], and the form every machine runs, prepared once when
/// the program is made and shared by its clones. It is cheap to clone,
/// `Send` and `Sync`: one parsed program can be run on many threads at
/// once, each run with its own limits.
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Program};
/// let arena = Arena::new();
/// let program = Program::new(arena.lam(arena.var(0))).unwrap();
/// assert!(program.term().is_value());
/// ```
#[derive(Clone, Debug)]
pub struct Program<'a> {
    root: &'a Term<'a>,
    host: &'a HostFunctions,
    image: Arc<Image>,
}

impl<'a> Program<'a> {
    /// Validate `root` as a program.
    ///
    /// # Errors
    ///
    /// A [`ValidationError`] if the term is open, applies a primitive to the
    /// wrong number of operands, uses one constructor tag with two arities, or
    /// has a case with two arms for one tag.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Prim, Program};
    /// let arena = Arena::new();
    /// let bad = arena.prim(Prim::Add, &[arena.int(1)]);
    /// assert!(Program::new(bad).is_err());
    /// ```
    pub fn new(root: &'a Term<'a>) -> Result<Self, ValidationError> {
        Program::with_host(root, &NO_HOST)
    }

    /// Validate `root` as a program that may call the host functions of
    /// `host` (and no others).
    ///
    /// # Errors
    ///
    /// As [`Program::new`], and [`ValidationError::UnknownHost`] for a call
    /// of a host function that is not in `host`.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, HostFunctions, Program};
    /// let mut host = HostFunctions::new();
    /// host.register("wind_speed", |gust: i64| Ok::<_, String>(gust * 3 / 4)).unwrap();
    /// let arena = Arena::new();
    /// let call = host.call_term(&arena, "wind_speed", &[arena.int(40)]).unwrap();
    /// assert!(Program::with_host(call, &host).is_ok());
    /// assert!(Program::new(call).is_err());
    /// ```
    pub fn with_host(root: &'a Term<'a>, host: &'a HostFunctions) -> Result<Self, ValidationError> {
        let image = Arc::new(Image::build(root, host)?);
        Ok(Program { root, host, image })
    }

    /// The program `function a₁ … aₙ`: a function value (say, what a
    /// configuration evaluated to) applied to argument data, built in `arena`
    /// and validated with `host`. Run it under fresh limits per call; the
    /// function's term is shared, not copied, when it lives in a longer-lived
    /// arena.
    ///
    /// # Errors
    ///
    /// As [`Program::with_host`] (say, `function` calls a host function that
    /// `host` does not have).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{extract, parse, Arena, IntoDatum, HostFunctions, Limits, MachineKind, Outcome, Program};
    /// let config = Arena::new();
    /// let program = parse(&config, "let rate = 7 in \\hours. hours * rate").unwrap();
    /// let machine = MachineKind::fastest().unwrap();
    /// let Outcome::Value(wage) = machine.run(&program, &Limits::default(), &config).outcome else { panic!() };
    /// let host = HostFunctions::new();
    /// for hours in [1i64, 8] {
    ///     let request = Arena::new();
    ///     let call = Program::application(&request, wage, &[hours.into_datum()], &host).unwrap();
    ///     let report = machine.run(&call, &Limits::default().with_fuel(100), &request);
    ///     let Outcome::Value(v) = report.outcome else { panic!() };
    ///     assert_eq!(extract::<i64>(v).unwrap(), 7 * hours);
    /// }
    /// ```
    pub fn application(
        arena: &'a Arena,
        function: &'a Term<'a>,
        args: &[Datum<'_>],
        host: &'a HostFunctions,
    ) -> Result<Program<'a>, ValidationError> {
        let term = args
            .iter()
            .fold(function, |f, arg| arena.app(f, arg.to_term(arena)));
        Program::with_host(term, host)
    }

    /// The program's term.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Node, Program};
    /// let arena = Arena::new();
    /// let program = Program::new(arena.int(12)).unwrap();
    /// assert!(matches!(program.term().node(), Node::Int(12)));
    /// ```
    pub fn term(&self) -> &'a Term<'a> {
        self.root
    }

    /// The host functions the program may call.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, HostFunctions, Program};
    /// let mut host = HostFunctions::new();
    /// host.register("lantern", |n: i64| Ok::<_, String>(n)).unwrap();
    /// let arena = Arena::new();
    /// let program = Program::with_host(arena.int(3), &host).unwrap();
    /// assert!(program.host().id("lantern").is_some());
    /// assert_eq!(Program::new(arena.int(3)).unwrap().host().iter().count(), 0);
    /// ```
    pub fn host(&self) -> &'a HostFunctions {
        self.host
    }

    /// The form the machines run.
    #[cfg_attr(not(any(feature = "stepper", feature = "env")), allow(dead_code))]
    pub(crate) fn image(&self) -> &Image {
        &self.image
    }

    /// The form the machines run, shared (for runs that outlive a borrow).
    #[cfg_attr(not(any(feature = "stepper", feature = "cek")), allow(dead_code))]
    pub(crate) fn image_arc(&self) -> Arc<Image> {
        Arc::clone(&self.image)
    }
}

/// Check the invariants of [`Program::new`] without building a program.
///
/// # Errors
///
/// See [`Program::new`].
///
/// # Examples
///
/// ```
/// use orrery::{validate, Arena};
/// let arena = Arena::new();
/// assert!(validate(arena.int(1)).is_ok());
/// assert!(validate(arena.lam(arena.var(1))).is_err());
/// ```
pub fn validate(root: &Term<'_>) -> Result<(), ValidationError> {
    validate_with(root, &NO_HOST)
}

/// [`validate`] for a program that may call the functions of `host`.
///
/// # Errors
///
/// See [`Program::with_host`].
///
/// # Examples
///
/// ```
/// use orrery::{validate_with, Arena, HostFunctions};
/// let host = HostFunctions::new();
/// assert!(validate_with(Arena::new().int(1), &host).is_ok());
/// ```
pub fn validate_with(root: &Term<'_>, host: &HostFunctions) -> Result<(), ValidationError> {
    Image::build(root, host).map(drop)
}
