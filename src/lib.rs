//! orrery is an evaluation kernel to embed: a call-by-value lambda calculus
//! with integers, booleans, strings, constructors and `case`, built as de
//! Bruijn terms in a bump [`Arena`] (or parsed from text), kept as an owned,
//! validated [`Program`], and run by machines that agree exactly on every
//! outcome and every contraction count.
//!
//! # When to use it
//!
//! When your application offers its users a small language — configuration
//! with functions, pricing or policy rules, light scripting — lower that
//! language to this calculus (through the builder API or the text syntax) and
//! let orrery evaluate it under hard limits. It has a precise small-step
//! semantics, so what a program means does not depend on which machine ran it.
//!
//! # A first example
//!
//! ```
//! use orrery::{Limits, MachineKind, Program};
//!
//! let program = Program::parse(r#"
//!     let shipping weight = if weight <= 500 then 390 else 390 + (weight - 500) / 100 * 85 in
//!     shipping 1240
//! "#).expect("valid program");
//! let machine = MachineKind::fastest().expect("a machine is enabled");
//! let report = machine.run(&program, &Limits::default().with_fuel(1_000));
//! assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(390 + 7 * 85));
//! ```
//!
//! Terms can be built without text: by index with [`Arena`]'s constructors,
//! or with names through a [`Scope`]. [`Program::new`] checks them and keeps
//! what it needs, so the arena can go. A run's value is an owned [`Value`].
//!
//! # The machines
//!
//! | machine | feature | what it is | use it for |
//! |---|---|---|---|
//! | [`machines::stepper`] | `stepper` | the reference: substitution, one contraction per step, refocusing | traces ([`machines::stepper::Stepper::run_traced`]), single steps, checking the others |
//! | `machines::vm` | `vm` | compiles the program to register bytecode and pays its fuel by metered blocks | the fastest runs, and runs that pause, wait or move to another thread |
//! | `machines::env` | `env` | compiles the program to flat closures and evaluates big-step with explicit stacks | fast runs that need not pause |
//! | `machines::cek` | `cek` | the CEK machine: control, environment, continuation as data | runs that pause when fuel runs out and resume later |
//!
//! [`MachineKind`] picks one at run time; [`MachineKind::fastest`] is the
//! default. [`disagreement`] compares two reports the way the test suite does.
//!
//! # Fuel and limits
//!
//! Every contraction (beta, beta_rec, let, if, prim, case) costs one unit of
//! fuel, attempted ones that fail included; nothing else does. [`Limits`] sets
//! the fuel (default [`DEFAULT_FUEL`]) and the bytes of runtime data a machine
//! may hold (default [`DEFAULT_MEMORY`]). A run ends as an [`Outcome`]: a value,
//! an evaluation error, out of fuel, or a resource limit — never a panic or a
//! stack overflow, at any nesting depth.
//!
//! A [`Cancel`] handle in the limits stops a run from another thread, with
//! the `cancelled` limit, within [`CANCEL_POLL_INTERVAL`] contractions. Limits
//! are outcomes the host sees; a program cannot catch or hide them.
//!
//! # Host functions and data
//!
//! [`HostFunctions`] holds Rust functions registered by name; programs call
//! them like built-ins ([`parse_with`], or [`HostFunctions::call_term`] in
//! the builder API) once [`Program::with_host`] has checked them. Their
//! arguments and results cross as [`Datum`]s, converted to and from Rust types
//! by [`FromDatum`] and [`IntoDatum`]; [`Value::extract`] converts a run's
//! result. A call belongs to the table it was made with: another table,
//! however alike, refuses the program. Host functions may read a per-run
//! context passed in the limits ([`Limits::with_context`],
//! [`HostFunctions::register_with_context`]).
//!
//! ```
//! use orrery::{parse_with, Arena, HostFunctions, Limits, MachineKind, Outcome};
//!
//! let mut host = HostFunctions::new();
//! host.register("kiln_minutes", |kg: i64, glaze: bool| {
//!     if kg <= 0 { Err("an empty kiln") } else { Ok(30 + kg * if glaze { 9 } else { 6 }) }
//! }).unwrap();
//! let arena = Arena::new();
//! let program = parse_with(&arena, "Pair(kiln_minutes 4 true, kiln_minutes 4 false)", &host).unwrap();
//! let machine = MachineKind::fastest().unwrap();
//! let Outcome::Value(v) = machine.run(&program, &Limits::default()).outcome else { panic!() };
//! assert_eq!(v.extract::<(i64, i64)>().unwrap(), (66, 54));
//! ```
//!
//! A host function's `Err` or panic is the `host_error` evaluation error. A
//! host function may declare a fuel cost ([`HostFunctions::set_cost`]),
//! computed from its arguments so that every machine charges the same; the
//! extra units are reported by [`Counts::extra_fuel`].
//!
//! # Compile once, run many; pause and resume
//!
//! A [`Program`] is `Clone + Send + Sync + 'static`, and a clone is one
//! reference count: keep it in a `static` or an `Arc`, run it on many
//! threads, each run with its own [`Limits`]. Each machine prepares a
//! program once (env compiles it on first use) and every run and thread
//! shares that. A program that evaluates to a function (a configuration, a
//! rule set) becomes a program of its own with [`Program::from_value`], and
//! each request applies it to data with [`Program::apply`], which checks
//! only the data. Machines are `Send`; [`Machine::start`] gives a run that
//! pauses when its fuel runs out (the stepper and cek; env cannot pause) and
//! resumes with more, ending exactly as an uninterrupted run, and
//! [`Paused::detach`] turns it into a `Send` [`Detached`] to move it to
//! another thread. The open-term toolkit (shift, substitution, equality,
//! the δ-rules) is [`toolkit`], apart from this embedding API.
//!
//! # Where a run stopped: spans and backtraces
//!
//! Any term may carry a source [`Span`] ([`Arena::at`]: a file number of
//! yours and a byte range) and a function a name ([`Arena::named`]); the
//! text parser gives every node its span and every `let`-bound function its
//! name. A report that is not a value says where the run stopped
//! ([`Report::location`]): the span of the redex that failed, or of the
//! next one when the fuel or a limit stopped it, and the [`Backtrace`] of
//! the calls pending around it, innermost first, each with its function's
//! name and its call site. A tail call takes its caller's place, so a loop
//! has one frame; a deep backtrace keeps [`BACKTRACE_ENDS`] frames at each
//! end and counts the rest. For errors and the end of the fuel every
//! machine reports the same location: it is part of the agreement
//! ([`disagreement`]). A program with no spans pays nothing for them.
//!
//! A language of your own keeps its own positions. Here a made-up rules
//! language is lowered by hand, and the error is shown with a caret in *its*
//! source ([`syntax::excerpt`] places a byte span in the text):
//!
//! ```
//! use orrery::{syntax, Arena, Limits, MachineKind, Outcome, Prim, Program, Span};
//!
//! // The user's rules file, in a language of theirs.
//! let source = "ration(beds) := 120 / beds\nplan := ration(0)\n";
//! const RULES_FILE: u32 = 1;
//! let span_of = |text: &str| {
//!     let start = source.find(text).unwrap() as u32;
//!     Span::new(RULES_FILE, start, start + text.len() as u32)
//! };
//!
//! // Their compiler lowers `ration` to a function and `plan` to a call,
//! // each node with the span of the text it came from.
//! let arena = Arena::new();
//! let divide = arena.at(span_of("120 / beds"), arena.prim(Prim::Div, &[arena.int(120), arena.var(0)]));
//! let ration = arena.named("ration", arena.lam(divide));
//! let plan = arena.at(span_of("ration(0)"), arena.app(ration, arena.int(0)));
//! let program = Program::new(plan).unwrap();
//!
//! let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
//! let location = report.location.unwrap();
//! let at = location.span.unwrap();
//! assert_eq!(at.file, RULES_FILE);
//! let (line, col) = syntax::position(source, at.start).unwrap();
//! let Outcome::Error(error) = &report.outcome else { panic!("an error") };
//! let mut message = format!("rules.txt:{line}:{col}: {}: {}\n", error.kind().name(), error.message());
//! message += &syntax::excerpt(source, at);
//! for frame in &location.backtrace.frames {
//!     let (line, col) = syntax::position(source, frame.site.unwrap().start).unwrap();
//!     message += &format!("  in {} at rules.txt:{line}:{col}\n", frame.name.as_deref().unwrap());
//! }
//! assert_eq!(message, "\
//! rules.txt:1:17: division_by_zero: division by zero in /
//! ration(beds) := 120 / beds
//!                 ^^^^^^^^^^
//!   in ration at rules.txt:2:9
//! ");
//! ```
//!
//! # Untrusted code
//!
//! The limits bound contractions and runtime memory. They do not bound
//! wall-clock time exactly (contractions differ in cost), nor what host
//! functions you register do (their effects, their time, their memory); and
//! orrery runs in your process. How to isolate untrusted programs (threads,
//! processes, operating-system limits) is your sandboxing policy.
//!
//! # Features
//!
//! `stepper`, `env`, `cek` (one per machine) and `cli` (the `orrery` binary);
//! all on by default.
#![deny(missing_docs)]
#![forbid(unsafe_code)]

mod agree;
mod awaiting;
mod budget;
mod datum;
mod equal;
mod error;
mod host;
mod image;
mod prim;
mod program;
mod scope;
mod snapshot;
mod span;
mod subst;
pub mod syntax;
mod term;
mod value;
mod vocabulary;

// The machines live in the top-level `machines/` folder, apart from the
// kernel in `src/`, so the layout shows the architecture; this is the one
// place that pulls them in.
#[path = "../machines/mod.rs"]
pub mod machines;

pub use agree::{disagreement, disagreement_within};
pub use awaiting::drive_async;
pub use datum::{
    extract, extract_within, Con, ConvertError, Datum, FromDatum, IntoDatum, MAX_DATUM_BYTES,
};
pub use error::{ErrorKind, EvalError, Fault, LimitError, LimitKind, ValidationError};
pub use host::{
    HostDefinitionError, HostFn, HostFnWith, HostFunctions, HostFuture, MAX_HOST_ARITY,
};
pub use image::{MAX_ARMS, MAX_FIELDS, MAX_NODES};
pub use machines::{Machine, MachineKind, Paused};
pub use prim::{HostId, Prim, STRING_UNIT};
pub use program::{validate, validate_with, Program};
pub use scope::{Built, Scope, UnboundName};
#[cfg(feature = "snapshot")]
pub use snapshot::FORMAT_VERSION;
pub use snapshot::{fingerprint, Snapshot, SnapshotError};
pub use span::{Backtrace, CallFrame, Location, Span, BACKTRACE_ENDS};
pub use syntax::{
    parse, parse_bytes, parse_bytes_with, parse_term, parse_with, print, print_limited,
    print_limited_with, print_with, Printed, SyntaxError, PRINT_LIMIT,
};
pub use term::{Arena, Arm, Children, Node, Term};
pub use value::Value;
pub use vocabulary::Detached;
pub use vocabulary::{
    Answer, Cancel, Counts, HostCall, Limits, Outcome, Report, Rule, RunContext,
    CANCEL_POLL_INTERVAL, DEFAULT_FUEL, DEFAULT_MEMORY,
};

/// The open-term toolkit, for tools built on the calculus rather than for
/// embedding: shifting and substitution on any term (Pierce, *Types and
/// Programming Languages*, 2002, §6.2), structural equality, and the
/// primitives' δ-rules and fuel units as the machines apply them.
///
/// # Examples
///
/// ```
/// use orrery::toolkit::{instantiate, shift, terms_equal};
/// use orrery::Arena;
/// let arena = Arena::new();
/// // (λ. #0 #1) applied to λ. #0, in a context with one free variable.
/// let body = arena.app(arena.var(0), arena.var(1));
/// let id = arena.lam(arena.var(0));
/// let reduced = instantiate(&arena, body, &[id]).unwrap();
/// assert!(terms_equal(reduced, arena.app(id, arena.var(0))));
/// assert!(terms_equal(shift(&arena, arena.var(0), 2, 0).unwrap(), arena.var(2)));
/// ```
pub mod toolkit {
    pub use crate::equal::terms_equal;
    pub use crate::error::Operand;
    pub use crate::prim::{delta, fuel_units, PrimValue};
    pub use crate::subst::{instantiate, shift, subst, IndexOutOfRange};
}

/// The README's examples, compiled and run as doctests so they cannot rot.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
pub struct ReadmeDoctests;
