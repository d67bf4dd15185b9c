//! Programs: a closed, validated term in the form every machine runs (its
//! image), with the host functions it calls and what each machine prepared
//! for it, owned and shared. Validation checks the invariants every machine
//! relies on (closedness, primitive arities, one arity per constructor tag,
//! distinct case arms, host calls from the program's own table, sizes) once,
//! by an iterative walk that visits each shared node once.

use std::any::{Any, TypeId};
use std::sync::{Arc, OnceLock};

use crate::datum::Datum;
use crate::host::{HostFunctions, NO_HOST};
use crate::image::{INode, Image};
use crate::syntax::SyntaxError;
use crate::term::{Arena, Term};
use crate::value::Value;

pub use crate::error::ValidationError;

/// A program ready for any machine: its terms, its host functions, and what
/// each machine prepared to run it (compiled once, on first use, and shared
/// by every run and thread), optionally applied to argument data.
///
/// A `Program` owns all of this behind one reference count: it is `Clone`
/// (cheaply), `Send`, `Sync` and `'static`, so an application can keep one
/// in shared state, hot-reload it, and run it on many threads at once, each
/// run with its own limits. It borrows nothing: make it from text
/// ([`Program::parse`]), from a term built in an [`Arena`]
/// ([`Program::new`]), or from a value a run returned
/// ([`Program::from_value`]).
///
/// # Examples
///
/// ```
/// use std::sync::Arc;
/// use orrery::{Limits, MachineKind, Program};
/// let shared: Arc<Program> = Arc::new(Program::parse("let toll = 4 in toll * 3").unwrap());
/// let worker = {
///     let program = Arc::clone(&shared);
///     std::thread::spawn(move || {
///         let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
///         report.outcome.value().and_then(|v| v.as_int())
///     })
/// };
/// assert_eq!(worker.join().unwrap(), Some(12));
/// ```
#[derive(Clone)]
pub struct Program {
    core: Arc<Core>,
    /// The data the root is applied to, first first (see [`Program::apply`]).
    args: Arc<[Datum<'static>]>,
}

/// What every application of one program shares.
struct Core {
    image: Image,
    host: HostFunctions,
    #[cfg_attr(not(feature = "env"), allow(dead_code))] // only env prepares (compiles) a program
    prepared: Prepared,
}

impl std::fmt::Debug for Program {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Program")
            .field("nodes", &self.core.image.nodes.len())
            .field("host", &self.core.host)
            .field("args", &self.args.len())
            .finish()
    }
}

impl Program {
    /// Validate `root` as a program.
    ///
    /// # Errors
    ///
    /// A [`ValidationError`] if the term is open, applies a primitive to the
    /// wrong number of operands, uses one constructor tag with two arities,
    /// has a case with two arms for one tag, calls a host function, or is
    /// larger than the limits of [`crate::MAX_NODES`], [`crate::MAX_FIELDS`]
    /// and [`crate::MAX_ARMS`].
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Prim, Program};
    /// let arena = Arena::new();
    /// let bad = arena.prim(Prim::Add, &[arena.int(1)]);
    /// assert!(Program::new(bad).is_err());
    /// assert!(Program::new(arena.lam(arena.var(0))).is_ok());
    /// ```
    pub fn new(root: &Term<'_>) -> Result<Program, ValidationError> {
        Program::with_host(root, &NO_HOST)
    }

    /// Validate `root` as a program that may call the host functions of
    /// `host` (and no others). The program keeps the table: it always runs
    /// with these functions.
    ///
    /// # Errors
    ///
    /// As [`Program::new`]; [`ValidationError::ForeignHost`] for a call built
    /// with another table, and [`ValidationError::UnknownHost`] for one this
    /// table does not have.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, HostFunctions, Program, ValidationError};
    /// let mut host = HostFunctions::new();
    /// host.register("wind_speed", |gust: i64| Ok::<_, String>(gust * 3 / 4)).unwrap();
    /// let arena = Arena::new();
    /// let call = host.call_term(&arena, "wind_speed", &[arena.int(40)]).unwrap();
    /// assert!(Program::with_host(call, &host).is_ok());
    /// // Another table of the same shape is another table.
    /// let mut other = HostFunctions::new();
    /// other.register("gust_speed", |gust: i64| Ok::<_, String>(gust)).unwrap();
    /// assert!(matches!(Program::with_host(call, &other), Err(ValidationError::ForeignHost { .. })));
    /// ```
    pub fn with_host(root: &Term<'_>, host: &HostFunctions) -> Result<Program, ValidationError> {
        let image = Image::build(root, host)?;
        Ok(Program::from_image(image, host))
    }

    fn from_image(image: Image, host: &HostFunctions) -> Program {
        Program {
            core: Arc::new(Core {
                image,
                host: host.clone(),
                prepared: Prepared::default(),
            }),
            args: Arc::from(Vec::new()),
        }
    }

    /// Parse and validate a program in the text syntax (SEMANTICS §5).
    ///
    /// # Errors
    ///
    /// A [`SyntaxError`] with the line and column of the problem.
    ///
    /// # Examples
    ///
    /// ```
    /// let program = orrery::Program::parse("let seedlings = 40 in seedlings / 8").unwrap();
    /// assert!(orrery::Program::parse("let x = in x").is_err());
    /// ```
    pub fn parse(source: &str) -> Result<Program, SyntaxError> {
        Program::parse_with(source, &NO_HOST)
    }

    /// Parse and validate a program that may call the host functions of
    /// `host` by name.
    ///
    /// # Errors
    ///
    /// As [`Program::parse`]; every name bound nowhere, host functions
    /// included, is listed in the error.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{HostFunctions, Program};
    /// let mut host = HostFunctions::new();
    /// host.register("kiln_minutes", |kg: i64| Ok::<_, String>(30 + 9 * kg)).unwrap();
    /// let program = Program::parse_with("kiln_minutes 4", &host).unwrap();
    /// assert_eq!(program.host_names(), ["kiln_minutes"]);
    /// ```
    pub fn parse_with(source: &str, host: &HostFunctions) -> Result<Program, SyntaxError> {
        let arena = Arena::new();
        crate::syntax::parse_with(&arena, source, host)
    }

    /// A program whose term is `value` (say, the function a configuration
    /// evaluated to), calling the host functions of the program that made
    /// it. Made once, it is applied to each request's data with
    /// [`Program::apply`], which costs only the data.
    ///
    /// # Errors
    ///
    /// A [`ValidationError`] if the value breaks a program's invariants (a
    /// host function made one tag with two arities, say).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, Limits, MachineKind, Program};
    /// let config = Program::parse("let rate = 7 in \\hours. hours * rate").unwrap();
    /// let machine = MachineKind::fastest().unwrap();
    /// let wage = machine.run(&config, &Limits::default()).outcome.value().unwrap().clone();
    /// let wage = Program::from_value(&wage).unwrap();
    /// for hours in [1i64, 8] {
    ///     let request = wage.apply(&[Datum::Int(hours)]).unwrap();
    ///     let report = machine.run(&request, &Limits::default().with_fuel(100));
    ///     assert_eq!(report.outcome.value().unwrap().as_int(), Some(7 * hours));
    /// }
    /// ```
    pub fn from_value(value: &Value) -> Result<Program, ValidationError> {
        let arena = Arena::new();
        Program::with_host(value.to_term(&arena), value.host())
    }

    /// This program applied to argument data: the program `p a₁ … aₙ`, made
    /// in time proportional to the data alone (the program's image and what
    /// the machines prepared for it are shared, never rebuilt or checked
    /// again). Applied again, the arguments add up.
    ///
    /// # Errors
    ///
    /// [`ValidationError::ConArity`] if an argument uses one of the
    /// program's constructor tags with another arity.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, Limits, MachineKind, Program};
    /// let add = Program::parse("\\a b. a + b").unwrap();
    /// let sum = add.apply(&[Datum::Int(40), Datum::Int(2)]).unwrap();
    /// let report = MachineKind::fastest().unwrap().run(&sum, &Limits::default());
    /// assert_eq!(report.outcome.value().unwrap().as_int(), Some(42));
    /// assert_eq!(report.counts.total(), 3); // beta, beta, prim
    /// ```
    pub fn apply(&self, args: &[Datum<'_>]) -> Result<Program, ValidationError> {
        let image = &self.core.image;
        for arg in args {
            let mut pending = vec![arg];
            while let Some(d) = pending.pop() {
                if let Datum::Con(c) = d {
                    if let Some(tag) = image.tag_id(c.tag()) {
                        let first = image.tag_arity[tag as usize];
                        if first as usize != c.fields().len() {
                            return Err(ValidationError::ConArity {
                                tag: c.tag().to_string(),
                                first,
                                second: c.fields().len() as u32,
                            });
                        }
                    }
                    pending.extend(c.fields());
                }
            }
        }
        let mut all: Vec<Datum<'static>> = self.args.to_vec();
        all.extend(args.iter().map(|a| a.clone().into_owned()));
        Ok(Program {
            core: Arc::clone(&self.core),
            args: Arc::from(all),
        })
    }

    /// The program as a term in `arena` (applied to its arguments, if any).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{print, Arena, Program};
    /// let program = Program::parse("let x = 6 in x * 7").unwrap();
    /// let arena = Arena::new();
    /// assert_eq!(print(program.to_term(&arena)), "let a = 6 in a * 7");
    /// ```
    pub fn to_term<'a>(&self, arena: &'a Arena) -> &'a Term<'a> {
        let image = &self.core.image;
        self.args
            .iter()
            .fold(image.to_term(image.root, arena), |f, a| {
                arena.app(f, a.to_term(arena))
            })
    }

    /// The host functions the program calls.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{HostFunctions, Program};
    /// let mut host = HostFunctions::new();
    /// host.register("lantern", |n: i64| Ok::<_, String>(n)).unwrap();
    /// let program = Program::parse_with("lantern 3", &host).unwrap();
    /// assert!(program.host().id("lantern").is_some());
    /// ```
    pub fn host(&self) -> &HostFunctions {
        &self.core.host
    }

    /// The names of the host functions the program calls, each once, in the
    /// table's order.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{HostFunctions, Program};
    /// let mut host = HostFunctions::new();
    /// host.register("tide", |n: i64| Ok::<_, String>(n)).unwrap();
    /// host.register("moon", |n: i64| Ok::<_, String>(n)).unwrap();
    /// let program = Program::parse_with("tide 3 + tide 4", &host).unwrap();
    /// assert_eq!(program.host_names(), ["tide"]);
    /// let both = Program::parse_with("moon (tide 1) + moon 2", &host).unwrap();
    /// assert_eq!(both.host_names(), ["tide", "moon"]);
    /// ```
    pub fn host_names(&self) -> Vec<&str> {
        let mut used: Vec<usize> = self
            .core
            .image
            .nodes
            .iter()
            .filter_map(|n| match n {
                INode::Prim(crate::Prim::Host(id), _) => Some(id.index()),
                _ => None,
            })
            .collect();
        used.sort_unstable();
        used.dedup();
        // One pass over the table, in its order (a function's index is its
        // place there), picking the sorted indices used.
        let mut wanted = used.into_iter().peekable();
        self.core
            .host
            .iter()
            .enumerate()
            .filter_map(|(i, (name, _))| (wanted.next_if_eq(&i).is_some()).then_some(name))
            .collect()
    }

    /// The form the machines run.
    #[cfg_attr(
        not(any(feature = "stepper", feature = "env", feature = "cek")),
        allow(dead_code)
    )]
    pub(crate) fn image(&self) -> &Image {
        &self.core.image
    }

    /// The data the root is applied to, first first.
    #[cfg_attr(
        not(any(feature = "stepper", feature = "env", feature = "cek")),
        allow(dead_code)
    )]
    pub(crate) fn args(&self) -> &[Datum<'static>] {
        &self.args
    }

    /// What a machine prepared for this program (of type `T`, one per type),
    /// made by `make` on first use and shared by every later run of this
    /// program and of its applications. A `make` that fails is tried again by
    /// the next run (which may have a larger memory limit).
    ///
    /// # Errors
    ///
    /// The error `make` gives.
    #[cfg_attr(not(feature = "env"), allow(dead_code))] // only env prepares (compiles) a program
    pub(crate) fn prepared<T: Any + Send + Sync, E>(
        &self,
        make: impl FnOnce() -> Result<T, E>,
    ) -> Result<Arc<T>, E> {
        self.core.prepared.get_or_make(make)
    }
}

/// Room for what the machines prepare for a program: one slot per type, each
/// set once, read without locking.
#[derive(Default)]
#[cfg_attr(not(feature = "env"), allow(dead_code))] // only env prepares (compiles) a program
struct Prepared {
    slots: [OnceLock<(TypeId, Arc<dyn Any + Send + Sync>)>; 8],
}

impl Prepared {
    #[cfg_attr(not(feature = "env"), allow(dead_code))] // only env prepares (compiles) a program
    fn get_or_make<T: Any + Send + Sync, E>(
        &self,
        make: impl FnOnce() -> Result<T, E>,
    ) -> Result<Arc<T>, E> {
        let want = TypeId::of::<T>();
        for slot in &self.slots {
            match slot.get() {
                Some((id, made)) if *id == want => {
                    if let Ok(made) = Arc::clone(made).downcast::<T>() {
                        return Ok(made);
                    }
                }
                Some(_) => continue,
                None => break,
            }
        }
        let made = Arc::new(make()?);
        // Keep it in the first free slot; a slot another thread filled in the
        // meantime with the same type wins, and its value is used.
        for slot in &self.slots {
            let (id, kept) =
                slot.get_or_init(|| (want, Arc::clone(&made) as Arc<dyn Any + Send + Sync>));
            if *id == want {
                if let Ok(kept) = Arc::clone(kept).downcast::<T>() {
                    return Ok(kept);
                }
            }
        }
        Ok(made)
    }
}

/// Check the invariants of [`Program::new`] without making a program.
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn programs_are_owned_and_shareable() {
        fn owned<T: Clone + Send + Sync + 'static>(_: &T) {}
        let program = {
            let arena = Arena::new();
            Program::new(arena.app(arena.lam(arena.var(0)), arena.int(3))).unwrap()
        };
        owned(&program);
        let arena = Arena::new();
        assert!(program.to_term(&arena) == arena.app(arena.lam(arena.var(0)), arena.int(3)));
    }

    #[test]
    fn a_prepared_form_is_made_once_and_shared_by_applications() {
        let program = Program::parse("\\x. x").unwrap();
        let mut made = 0;
        let a = program.prepared::<u64, ()>(|| {
            made += 1;
            Ok(7)
        });
        let applied = program.apply(&[Datum::Int(1)]).unwrap();
        let b = applied.prepared::<u64, ()>(|| {
            made += 1;
            Ok(8)
        });
        assert_eq!((*a.unwrap(), *b.unwrap(), made), (7, 7, 1));
        // A failed preparation is not kept.
        let c = program.prepared::<i32, &str>(|| Err("no room"));
        assert!(c.is_err());
        assert_eq!(*program.prepared::<i32, &str>(|| Ok(3)).unwrap(), 3);
    }

    #[test]
    fn arguments_must_use_the_program_tags_arities() {
        let program = Program::parse("\\p. case p of { Pair(a, b) => a; _ => 0 }").unwrap();
        let bad = Datum::con("Pair", vec![Datum::Int(1)]);
        assert!(matches!(
            program.apply(&[bad]),
            Err(ValidationError::ConArity { .. })
        ));
        let good = Datum::con("Pair", vec![Datum::Int(1), Datum::Int(2)]);
        assert!(program.apply(&[good]).is_ok());
    }
}
