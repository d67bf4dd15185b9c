//! Host functions (SEMANTICS §1.4): primitives the embedding application
//! registers by name, with a fixed arity, a Rust function from argument data
//! to a datum or a `host_error`, and an optional fuel cost computed from the
//! arguments. A panic inside a host function is caught and becomes
//! `host_error`.

// Without a machine nothing calls host functions; the table still builds.
#![cfg_attr(
    not(any(feature = "stepper", feature = "env", feature = "cek")),
    allow(dead_code)
)]

use std::any::Any;
use std::fmt;
use std::future::Future;
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::pin::Pin;
use std::sync::Arc;

use crate::budget::Budget;
use crate::datum::{Datum, FromDatum, IntoDatum};
use crate::error::{ErrorKind, EvalError};
use crate::prim::{HostId, Prim};
use crate::term::{Arena, Term};
use crate::vocabulary::{Answer, HostCall};

/// The signature every host function has once its arguments are data.
type DataFn =
    dyn for<'t, 'c> Fn(Context<'c>, &[Datum<'t>]) -> Result<Datum<'t>, String> + Send + Sync;

/// What a run hands its host functions: the context the caller put in its
/// [`crate::Limits`] (see [`crate::Limits::with_context`]), if any.
pub(crate) type Context<'c> = Option<&'c (dyn Any + Send + Sync)>;

/// The signature of a fuel cost.
type CostFn = dyn for<'t, 'c> Fn(Context<'c>, &[Datum<'t>]) -> u64 + Send + Sync;

#[derive(Clone)]
struct Entry {
    name: Box<str>,
    id: HostId,
    function: Arc<DataFn>,
    cost: Option<Arc<CostFn>>,
    /// Whether a call waits for an answer from outside the run (see
    /// [`HostFunctions::register_suspending`]).
    suspends: bool,
    /// The future that answers a waiting call, for [`crate::MachineKind::run_async`] (see
    /// [`HostFunctions::register_async`]).
    waits: Option<Arc<WaitFn>>,
}

/// A host function's answer still to come: what an asynchronous host
/// function returns (see [`HostFunctions::register_async`]). Boxed and
/// `Send`, so that a run awaiting it can move between threads.
pub type HostFuture = Pin<Box<dyn Future<Output = Answer> + Send + 'static>>;

/// The signature of an asynchronous host function.
type WaitFn = dyn Fn(Vec<Datum<'static>>) -> HostFuture + Send + Sync;

/// A table of host functions. Build it once, then give it to programs
/// ([`crate::Program::parse_with`], [`crate::Program::with_host`],
/// [`crate::parse_with`]): each program keeps a handle to the table (shared,
/// not copied) and always runs with it. The table is `Send + Sync`, so the
/// programs can run on many threads.
///
/// A host call belongs to the table it was made with: a program refuses a
/// call made with another table ([`crate::ValidationError::ForeignHost`]),
/// even one with the same functions registered the same way. Registering a
/// function or setting a cost on a table that programs (or clones) share
/// makes it a new table, so the programs keep the functions they were made
/// with.
///
/// # Examples
///
/// ```
/// use orrery::{parse_with, Arena, HostFunctions, Limits, MachineKind, Outcome};
/// let mut host = HostFunctions::new();
/// host.register("shout", |s: String| Ok::<_, String>(s.to_uppercase())).unwrap();
/// let arena = Arena::new();
/// let program = parse_with(&arena, r#"shout "quiet please""#, &host).unwrap();
/// let report = MachineKind::fastest().unwrap().run(&program, &Limits::default());
/// let Outcome::Value(v) = report.outcome else { panic!("{:?}", report.outcome) };
/// assert_eq!(v.extract::<String>().unwrap(), "QUIET PLEASE");
/// ```
#[derive(Clone, Default)]
pub struct HostFunctions {
    /// The functions, shared by the programs made with this table (`None`:
    /// none registered yet).
    table: Option<Arc<Table>>,
}

/// A table's functions and its identity: programs check that the calls they
/// were built with come from the table they run with.
#[derive(Clone)]
struct Table {
    id: u32,
    entries: Vec<Entry>,
}

/// Identities of tables, never reused in a process.
static NEXT_TABLE: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(1);

/// A fresh table identity.
fn fresh_table_id() -> u32 {
    NEXT_TABLE.fetch_add(1, std::sync::atomic::Ordering::Relaxed)
}

/// The most arguments a host function may take.
///
/// # Examples
///
/// ```
/// use orrery::{Datum, HostFunctions, MAX_HOST_ARITY};
/// let mut host = HostFunctions::new();
/// fn widest<'t>(_: &[Datum<'t>]) -> Result<Datum<'t>, String> {
///     Ok(Datum::Int(0))
/// }
/// assert!(host.register_data("widest", MAX_HOST_ARITY, widest).is_ok());
/// assert!(host.register_data("too_wide", MAX_HOST_ARITY + 1, widest).is_err());
/// ```
pub const MAX_HOST_ARITY: usize = 16;

/// Why a host function could not be registered.
///
/// # Examples
///
/// ```
/// use orrery::HostFunctions;
/// let mut host = HostFunctions::new();
/// assert!(host.register("Bad", |n: i64| Ok::<_, String>(n)).is_err());
/// ```
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum HostDefinitionError {
    /// The name is not a lower-case identifier, or is a keyword or built-in.
    #[error("`{0}` cannot name a host function: use a lower-case identifier that is not a keyword or built-in")]
    BadName(String),
    /// A function of this name is already registered.
    #[error("a host function named `{0}` is already registered")]
    Duplicate(String),
    /// Too many arguments.
    #[error("a host function takes at most {MAX_HOST_ARITY} arguments, `{0}` takes {1}")]
    Arity(String, usize),
    /// The table is full.
    #[error("a table holds at most {0} host functions")]
    TooMany(usize),
}

/// The most functions one table may hold.
const MAX_HOST_FUNCTIONS: usize = 1 << 24;

/// Words the text syntax reserves, and the built-in function names.
const RESERVED: &[&str] = &[
    "let", "rec", "in", "if", "then", "else", "case", "of", "true", "false", "not", "length",
    "decimal",
];

impl HostFunctions {
    /// An empty table.
    ///
    /// # Examples
    ///
    /// ```
    /// let host = orrery::HostFunctions::new();
    /// assert_eq!(host.iter().count(), 0);
    /// ```
    pub fn new() -> Self {
        HostFunctions::default()
    }

    /// Register a typed Rust function: its arguments are converted from data
    /// with [`FromDatum`] (a conversion failure is a `type_mismatch`), and its
    /// `Ok` result with [`IntoDatum`]; an `Err(message)` is a `host_error`.
    ///
    /// # Errors
    ///
    /// [`HostDefinitionError`] for a bad or duplicate name.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::HostFunctions;
    /// let mut host = HostFunctions::new();
    /// let id = host
    ///     .register("clamp_dose", |ml: i64, max: i64| Ok::<_, String>(ml.min(max)))
    ///     .unwrap();
    /// assert_eq!(id.arity(), 2);
    /// ```
    pub fn register<Args, F: HostFn<Args>>(
        &mut self,
        name: &str,
        function: F,
    ) -> Result<HostId, HostDefinitionError> {
        let arity = F::ARITY;
        self.register_data(name, arity, move |args| function.call(args))
    }

    /// Register a function over [`Datum`] arguments, of any arity up to
    /// [`MAX_HOST_ARITY`]. It may return constructors built from its
    /// arguments' tags or from `'static` ones.
    ///
    /// # Errors
    ///
    /// [`HostDefinitionError`] for a bad or duplicate name, or too many
    /// arguments.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, HostFunctions};
    /// let mut host = HostFunctions::new();
    /// host.register_data("first_field", 1, |args| match &args[0] {
    ///     Datum::Con(c) if !c.fields().is_empty() => Ok(c.fields()[0].clone()),
    ///     other => Err(format!("no fields in {}", other.describe())),
    /// })
    /// .unwrap();
    /// ```
    pub fn register_data<F>(
        &mut self,
        name: &str,
        arity: usize,
        function: F,
    ) -> Result<HostId, HostDefinitionError>
    where
        F: for<'t> Fn(&[Datum<'t>]) -> Result<Datum<'t>, String> + Send + Sync + 'static,
    {
        self.register_entry(
            name,
            arity,
            Arc::new(move |_: Context<'_>, args: &[Datum<'_>]| function(args)),
        )
    }

    /// Register a typed Rust function that also reads the run's context: a
    /// value of type `C` the caller hands each run with
    /// [`crate::Limits::with_context`] (a tenant, a request id, a deadline).
    /// A run without a context of that type makes the call a `host_error`.
    ///
    /// # Errors
    ///
    /// As [`HostFunctions::register`].
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{HostFunctions, Limits, MachineKind, Program};
    /// struct Tenant { discount_percent: i64 }
    /// let mut host = HostFunctions::new();
    /// host.register_with_context("discounted", |t: &Tenant, cents: i64| {
    ///     Ok::<_, String>(cents * (100 - t.discount_percent) / 100)
    /// }).unwrap();
    /// let program = Program::parse_with("discounted 2000", &host).unwrap();
    /// let limits = Limits::default().with_context(Tenant { discount_percent: 15 });
    /// let report = MachineKind::fastest().unwrap().run(&program, &limits);
    /// assert_eq!(report.outcome.value().unwrap().as_int(), Some(1700));
    /// ```
    pub fn register_with_context<C, Args, F>(
        &mut self,
        name: &str,
        function: F,
    ) -> Result<HostId, HostDefinitionError>
    where
        C: Any + Send + Sync,
        F: HostFnWith<C, Args>,
    {
        let arity = F::ARITY;
        let wanted = std::any::type_name::<C>();
        self.register_entry(
            name,
            arity,
            Arc::new(move |context: Context<'_>, args: &[Datum<'_>]| {
                match context.and_then(|c| c.downcast_ref::<C>()) {
                    Some(c) => function.call(c, args),
                    None => Err(format!("needs a run context of type {wanted}")),
                }
            }),
        )
    }

    /// Register a function whose answer comes later, from outside the run: a
    /// stock database, a pricing service, a person approving. A call of it
    /// stops the run with [`crate::Outcome::Suspended`], holding the call
    /// (the name and the arguments as owned data); the caller answers with
    /// [`crate::Paused::resume_with`], and the run goes on exactly as if the
    /// function had returned that answer. Fuel for the call (one unit, plus
    /// any cost set with [`HostFunctions::set_cost`]) is paid when the answer
    /// is taken, as for any host call; a run without that fuel is out of
    /// fuel before the call, and does not suspend.
    ///
    /// Only a paused run ([`crate::Machine::start`]) can take an answer: a
    /// run of [`crate::Machine::run`] (and every run of the env machine,
    /// which cannot pause) ends at the call with the `Suspended` outcome.
    ///
    /// # Errors
    ///
    /// [`HostDefinitionError`] for a bad or duplicate name, or too many
    /// arguments.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, HostFunctions, Limits, MachineKind, Outcome, Program};
    /// let mut host = HostFunctions::new();
    /// host.register_suspending("crates_in_bay", 1).unwrap();
    /// let program = Program::parse_with("crates_in_bay 7 * 12", &host).unwrap();
    /// // The first machine that can pause (env cannot).
    /// let Some(mut run) = MachineKind::enabled()
    ///     .iter()
    ///     .find_map(|kind| kind.machine().start(&program, &Limits::default()))
    /// else {
    ///     return;
    /// };
    /// let report = run.resume(0);
    /// let Outcome::Suspended(call) = &report.outcome else { panic!() };
    /// assert_eq!((call.name.as_str(), &call.args[..]), ("crates_in_bay", &[Datum::Int(7)][..]));
    /// let report = run.resume_with(Ok(Datum::Int(5)));
    /// assert_eq!(report.outcome.value().unwrap().as_int(), Some(60));
    /// ```
    pub fn register_suspending(
        &mut self,
        name: &str,
        arity: usize,
    ) -> Result<HostId, HostDefinitionError> {
        let function: Arc<DataFn> = Arc::new(|_: Context<'_>, _: &[Datum<'_>]| {
            Err("waits for an answer from outside the run: call it from a run".to_string())
        });
        let id = self.register_entry(name, arity, function)?;
        if let Some(entry) = self.table_mut().entries.get_mut(id.index()) {
            entry.suspends = true;
        }
        Ok(id)
    }

    /// Register an asynchronous host function: `function` takes the
    /// arguments as owned data and returns a future of the answer.
    ///
    /// A call of it suspends the run as a call of a
    /// [`HostFunctions::register_suspending`] function does; [`crate::MachineKind::run_async`]
    /// then awaits the future and resumes the run with its answer, as if the
    /// function had returned it. Any other run ends (or pauses) at the call
    /// with the `Suspended` outcome, and its caller may answer it. Fuel for
    /// the call (see [`HostFunctions::set_cost`]) is paid when it is
    /// answered. No async runtime is assumed: the futures are polled by
    /// whatever executor polls `run_async`.
    ///
    /// # Errors
    ///
    /// [`HostDefinitionError`] for a bad or duplicate name, or too many
    /// arguments.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, HostFunctions};
    /// let mut host = HostFunctions::new();
    /// host.register_async("berth_free", 1, |args| {
    ///     Box::pin(async move {
    ///         let Some(Datum::Int(bay)) = args.first() else { return Err("a bay number".into()) };
    ///         Ok(Datum::Bool(bay % 2 == 0))
    ///     })
    /// })
    /// .unwrap();
    /// assert!(host.suspends(host.id("berth_free").unwrap()));
    /// ```
    pub fn register_async<F>(
        &mut self,
        name: &str,
        arity: usize,
        function: F,
    ) -> Result<HostId, HostDefinitionError>
    where
        F: Fn(Vec<Datum<'static>>) -> HostFuture + Send + Sync + 'static,
    {
        let id = self.register_suspending(name, arity)?;
        if let Some(entry) = self.table_mut().entries.get_mut(id.index()) {
            entry.waits = Some(Arc::new(function));
        }
        Ok(id)
    }

    /// The future answering `call`: its asynchronous host function's (see
    /// [`HostFunctions::register_async`]), or, for a function with none, an
    /// answer of `host_error` at once.
    pub(crate) fn wait_on(&self, call: HostCall) -> HostFuture {
        let waits = self
            .id(&call.name)
            .and_then(|id| self.entry(id))
            .and_then(|e| e.waits.clone());
        match waits {
            Some(function) => function(call.args),
            None => Box::pin(std::future::ready(Err(format!(
                "no future answers {}: it was registered without one",
                call.name
            )))),
        }
    }

    /// Whether calls of `id` suspend the run (see
    /// [`HostFunctions::register_suspending`]).
    pub fn suspends(&self, id: HostId) -> bool {
        self.entry(id).is_some_and(|e| e.suspends)
    }

    /// Register `function` under `name` with `arity`, checking both.
    fn register_entry(
        &mut self,
        name: &str,
        arity: usize,
        function: Arc<DataFn>,
    ) -> Result<HostId, HostDefinitionError> {
        let well_formed = name
            .bytes()
            .next()
            .is_some_and(|b| b.is_ascii_lowercase() || b == b'_')
            && name
                .bytes()
                .all(|b| b.is_ascii_alphanumeric() || b == b'_' || b == b'\'');
        if !well_formed || RESERVED.contains(&name) || name == "_" {
            return Err(HostDefinitionError::BadName(name.to_string()));
        }
        if self.id(name).is_some() {
            return Err(HostDefinitionError::Duplicate(name.to_string()));
        }
        if arity > MAX_HOST_ARITY {
            return Err(HostDefinitionError::Arity(name.to_string(), arity));
        }
        if self.entries().len() >= MAX_HOST_FUNCTIONS {
            return Err(HostDefinitionError::TooMany(MAX_HOST_FUNCTIONS));
        }
        let table = self.table_mut();
        let id = HostId::new(table.id, table.entries.len() as u32, arity as u32);
        table.entries.push(Entry {
            name: name.into(),
            id,
            function,
            cost: None,
            suspends: false,
            waits: None,
        });
        Ok(id)
    }

    /// The functions, in registration order.
    fn entries(&self) -> &[Entry] {
        self.table.as_deref().map_or(&[], |t| &t.entries)
    }

    /// This table's functions to change: its own if no program shares them,
    /// else a copy, which is a new table (with an identity of its own, so
    /// that a program made with the old one cannot run with the new).
    fn table_mut(&mut self) -> &mut Table {
        let shared = match &mut self.table {
            Some(table) => Arc::get_mut(table).is_none(),
            None => true,
        };
        if shared {
            let id = fresh_table_id();
            let entries = self
                .entries()
                .iter()
                .map(|e| Entry {
                    id: HostId::new(id, e.id.index() as u32, e.id.arity() as u32),
                    ..e.clone()
                })
                .collect();
            self.table = Some(Arc::new(Table { id, entries }));
        }
        let table = self.table.get_or_insert_with(|| {
            Arc::new(Table {
                id: fresh_table_id(),
                entries: Vec::new(),
            })
        });
        Arc::make_mut(table)
    }

    /// This table's identity (0 for a table with no functions).
    pub(crate) fn table_id(&self) -> u32 {
        self.table.as_ref().map_or(0, |t| t.id)
    }

    /// Give a host function a fuel cost beyond the one unit every contraction
    /// takes, computed from its arguments (say, proportional to the length of
    /// a string it builds). The cost is a function of the values alone, so it
    /// is the same on every machine. A call is made only if `1 + cost` units
    /// of fuel remain; otherwise the run ends out of fuel before the call.
    ///
    /// Does nothing if `id` is not from this table.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, HostFunctions};
    /// let mut host = HostFunctions::new();
    /// let id = host.register("repeat", |s: String, n: u32| Ok::<_, String>(s.repeat(n as usize))).unwrap();
    /// host.set_cost(id, |args| match (&args[0], &args[1]) {
    ///     (Datum::Str(s), Datum::Int(n)) => (s.len() as u64).saturating_mul(*n as u64),
    ///     _ => 0,
    /// });
    /// ```
    pub fn set_cost<F>(&mut self, id: HostId, cost: F)
    where
        F: for<'t> Fn(&[Datum<'t>]) -> u64 + Send + Sync + 'static,
    {
        if let Some(entry) = self.entry_mut(id) {
            entry.cost = Some(Arc::new(move |_: Context<'_>, args: &[Datum<'_>]| {
                cost(args)
            }));
        }
    }

    /// [`HostFunctions::set_cost`] with a cost that also reads the run's
    /// context of type `C` (no context of that type: no extra cost; the call
    /// itself then fails if it needs one).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, HostFunctions};
    /// struct Plan { units_per_item: u64 }
    /// let mut host = HostFunctions::new();
    /// let id = host.register("pack", |n: i64| Ok::<_, String>(n)).unwrap();
    /// host.set_cost_with_context(id, |plan: &Plan, args| match &args[0] {
    ///     Datum::Int(n) => plan.units_per_item.saturating_mul(*n as u64),
    ///     _ => 0,
    /// });
    /// ```
    pub fn set_cost_with_context<C, F>(&mut self, id: HostId, cost: F)
    where
        C: Any + Send + Sync,
        F: for<'t> Fn(&C, &[Datum<'t>]) -> u64 + Send + Sync + 'static,
    {
        if let Some(entry) = self.entry_mut(id) {
            entry.cost = Some(Arc::new(move |context: Context<'_>, args: &[Datum<'_>]| {
                context
                    .and_then(|c| c.downcast_ref::<C>())
                    .map_or(0, |c| cost(c, args))
            }));
        }
    }

    /// The function registered under `name`.
    ///
    /// # Examples
    ///
    /// ```
    /// let mut host = orrery::HostFunctions::new();
    /// let id = host.register("ferry_fare", |km: i64| Ok::<_, String>(km * 3)).unwrap();
    /// assert_eq!(host.id("ferry_fare"), Some(id));
    /// assert_eq!(host.id("bus_fare"), None);
    /// ```
    pub fn id(&self, name: &str) -> Option<HostId> {
        self.entries()
            .iter()
            .find(|e| &*e.name == name)
            .map(|e| e.id)
    }

    /// The name of a function of this table.
    ///
    /// # Examples
    ///
    /// ```
    /// let mut host = orrery::HostFunctions::new();
    /// let id = host.register("tide", |n: i64| Ok::<_, String>(n)).unwrap();
    /// assert_eq!(host.name(id), Some("tide"));
    /// ```
    pub fn name(&self, id: HostId) -> Option<&str> {
        self.entry(id).map(|e| &*e.name)
    }

    /// Every function's name and id, in registration order.
    ///
    /// # Examples
    ///
    /// ```
    /// let mut host = orrery::HostFunctions::new();
    /// host.register("moult", |n: i64| Ok::<_, String>(n)).unwrap();
    /// host.register("roost", |b: bool| Ok::<_, String>(!b)).unwrap();
    /// let names: Vec<&str> = host.iter().map(|(name, _)| name).collect();
    /// assert_eq!(names, ["moult", "roost"]);
    /// ```
    pub fn iter(&self) -> impl Iterator<Item = (&str, HostId)> {
        self.entries().iter().map(|e| (&*e.name, e.id))
    }

    /// Whether `id` names a function of this table (with the same arity).
    ///
    /// # Examples
    ///
    /// ```
    /// let mut host = orrery::HostFunctions::new();
    /// let id = host.register("thaw", |n: i64| Ok::<_, String>(n)).unwrap();
    /// assert!(host.contains(id));
    /// assert!(!orrery::HostFunctions::new().contains(id));
    /// ```
    pub fn contains(&self, id: HostId) -> bool {
        self.entry(id).is_some()
    }

    /// A saturated call `name(args…)`, built in `arena` (the builder API's
    /// way to call a host function); `None` if there is no such function or
    /// the number of arguments is wrong.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, HostFunctions, Program};
    /// let mut host = HostFunctions::new();
    /// host.register("twice", |n: i64| Ok::<_, String>(2 * n)).unwrap();
    /// let arena = Arena::new();
    /// let call = host.call_term(&arena, "twice", &[arena.int(21)]).unwrap();
    /// assert!(Program::with_host(call, &host).is_ok());
    /// ```
    pub fn call_term<'a>(
        &self,
        arena: &'a Arena,
        name: &str,
        args: &[&'a Term<'a>],
    ) -> Option<&'a Term<'a>> {
        let id = self.id(name)?;
        (id.arity() == args.len()).then(|| arena.prim(Prim::Host(id), args))
    }

    fn entry(&self, id: HostId) -> Option<&Entry> {
        self.entries().get(id.index()).filter(|e| e.id == id)
    }

    fn entry_mut(&mut self, id: HostId) -> Option<&mut Entry> {
        self.entry(id)?;
        let table = self.table_mut();
        let at = id.index();
        table.entries.get_mut(at)
    }

    /// Fuel a call of `id` on `args` takes: one unit, plus its declared cost.
    pub(crate) fn fuel(&self, id: HostId, context: Context<'_>, args: &[Datum<'_>]) -> u64 {
        let extra = self
            .entry(id)
            .and_then(|e| e.cost.as_ref())
            .map_or(Ok(0), |cost| {
                catch_unwind(AssertUnwindSafe(|| cost(context, args)))
            });
        // A panicking cost function makes the call cost nothing extra; the
        // call itself then reports the failure if it panics too.
        1u64.saturating_add(extra.unwrap_or(0))
    }

    /// Call `id` on `args`. Failures and panics are `host_error`s.
    pub(crate) fn call<'t>(
        &self,
        id: HostId,
        context: Context<'_>,
        args: &[Datum<'t>],
    ) -> Result<Datum<'t>, EvalError> {
        let Some(entry) = self.entry(id) else {
            return Err(host_error(format!(
                "host function #{} is not in this program's table",
                id.index()
            )));
        };
        let function = &entry.function;
        match catch_unwind(AssertUnwindSafe(|| function(context, args))) {
            Ok(Ok(datum)) => Ok(datum),
            Ok(Err(message)) => Err(host_error(format!("{}: {message}", entry.name))),
            Err(payload) => {
                let what = payload
                    .downcast_ref::<&str>()
                    .map(|s| s.to_string())
                    .or_else(|| payload.downcast_ref::<String>().cloned())
                    .unwrap_or_else(|| "a panic".to_string());
                Err(host_error(format!("{} panicked: {what}", entry.name)))
            }
        }
    }

    /// The error for host function `id` given an argument that is not data.
    pub(crate) fn not_data(&self, id: HostId, found: &str) -> EvalError {
        let name = self.name(id).unwrap_or("a host function");
        EvalError::new(
            ErrorKind::TypeMismatch,
            format!("{name} expects data, got {found}"),
        )
    }
}

/// What a machine does at a host call, in the same order on every machine, so
/// every machine reaches the same outcome, counts and fuel:
///
/// 1. with no fuel left, the run is out of fuel (as for any contraction);
/// 2. an argument that is not data (a function) is a `type_mismatch`, made
///    with one unit of fuel;
/// 3. the call needs `1 + cost(args)` units: if fewer remain, the run is out
///    of fuel *before* the contraction, which is not counted (so a paused run
///    can resume with more fuel and make it);
/// 4. a suspending function with no answer given yet suspends the run
///    *before* the contraction, likewise: nothing used or counted;
/// 5. otherwise the units are used, one `prim` contraction is counted (and
///    the rest as host fuel), and the function is called (or its answer
///    taken).
pub(crate) enum HostStep<'t> {
    /// Out of fuel, or suspended ([`Budget::suspended`] says which), before
    /// the contraction: nothing was used or counted.
    OutOfFuel,
    /// The arguments are too large to convert: the memory limit.
    TooLarge,
    /// The contraction was made with `fuel` units; its result.
    Made {
        /// Units used: 1, plus the declared cost.
        fuel: u64,
        /// The datum returned, or the error.
        result: Result<Datum<'t>, EvalError>,
    },
}

/// Make the host-call contraction of `id` on `args` (already read by the
/// machine, or why not) in the run of `budget`. See [`HostStep`].
pub(crate) fn host_step<'t>(
    host: &HostFunctions,
    id: HostId,
    budget: &mut Budget,
    args: Result<Vec<Datum<'t>>, crate::datum::NotData>,
) -> HostStep<'t> {
    use crate::datum::NotData;
    let fuel_left = budget.fuel_left();
    if fuel_left == 0 {
        return HostStep::OutOfFuel;
    }
    let args = match args {
        Ok(args) => args,
        Err(NotData::TooLarge) => return HostStep::TooLarge,
        Err(NotData::Function) => {
            return HostStep::Made {
                fuel: 1,
                result: Err(host.not_data(id, "a function")),
            }
        }
        Err(NotData::NotAValue) => {
            return HostStep::Made {
                fuel: 1,
                result: Err(host.not_data(id, "a term that is not a value")),
            }
        }
    };
    let context = budget.context();
    let fuel = host.fuel(id, context, &args);
    if fuel > fuel_left {
        return HostStep::OutOfFuel;
    }
    if !host.suspends(id) {
        return HostStep::Made {
            fuel,
            result: host.call(id, context, &args),
        };
    }
    wait_step(host, id, budget, args, fuel)
}

/// The host-call contraction of a suspending function: it suspends the run
/// (which then pauses as out of fuel), or takes the answer given to it. Kept
/// out of line, so that runs that never wait do not carry it in their loop.
#[cold]
#[inline(never)]
fn wait_step<'t>(
    host: &HostFunctions,
    id: HostId,
    budget: &mut Budget,
    args: Vec<Datum<'t>>,
    fuel: u64,
) -> HostStep<'t> {
    let call = HostCall {
        name: host.name(id).unwrap_or_default().to_string(),
        args: args.into_iter().map(Datum::into_owned).collect(),
    };
    match budget.answer.take() {
        None => {
            budget.suspended = Some(Box::new(call));
            HostStep::OutOfFuel
        }
        Some(given) => {
            let (_, answer) = *given;
            // The journal keeps the call and its answer for the run's
            // snapshots: they are held within the memory limit too.
            let recorded = crate::snapshot::entry_bytes(&call, &answer);
            if recorded > budget.memory {
                return HostStep::TooLarge;
            }
            budget.memory -= recorded;
            let result = match &answer {
                Ok(datum) => Ok(datum.clone()),
                Err(message) => Err(host_error(format!("{}: {message}", call.name))),
            };
            budget.journal.push((call, answer));
            HostStep::Made { fuel, result }
        }
    }
}

/// The table shared by programs built without host functions.
pub(crate) static NO_HOST: HostFunctions = HostFunctions { table: None };

fn host_error(message: String) -> EvalError {
    EvalError::new(ErrorKind::HostError, message)
}

impl fmt::Debug for HostFunctions {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_list()
            .entries(
                self.entries()
                    .iter()
                    .map(|e| format!("{}/{}", e.name, e.id.arity())),
            )
            .finish()
    }
}

/// A Rust closure usable as a typed host function: `Fn(A, B, …) -> Result<R,
/// E>` with each argument [`FromDatum`], `R: IntoDatum` and `E: Display`,
/// for up to six arguments. Implemented automatically.
///
/// # Examples
///
/// ```
/// use orrery::HostFunctions;
/// let mut host = HostFunctions::new();
/// host.register("label", |name: String, shelf: i64, lit: bool| {
///     if shelf < 0 { Err("no such shelf") } else { Ok(format!("{name}@{shelf}{}", if lit { "*" } else { "" })) }
/// }).unwrap();
/// ```
pub trait HostFn<Args>: Send + Sync + 'static {
    /// The number of arguments.
    const ARITY: usize;
    /// Convert the arguments, call, convert the result.
    ///
    /// # Errors
    ///
    /// The message for a `host_error`: a conversion failure or the function's
    /// own error.
    fn call<'t>(&self, args: &[Datum<'t>]) -> Result<Datum<'t>, String>;
}

macro_rules! host_fn {
    ($n:literal $(, $t:ident $v:ident $i:tt)*) => {
        impl<F, R, E $(, $t)*> HostFn<($($t,)*)> for F
        where
            F: Fn($($t),*) -> Result<R, E> + Send + Sync + 'static,
            R: IntoDatum,
            E: fmt::Display,
            $($t: FromDatum,)*
        {
            const ARITY: usize = $n;
            #[allow(unused_variables)]
            fn call<'t>(&self, args: &[Datum<'t>]) -> Result<Datum<'t>, String> {
                if args.len() != $n {
                    return Err(format!("expects {} argument(s), got {}", $n, args.len()));
                }
                $(let $v = $t::from_datum(&args[$i])
                    .map_err(|e| format!("argument {}: {e}", $i + 1))?;)*
                match self($($v),*) {
                    Ok(result) => Ok(result.into_datum()),
                    Err(message) => Err(message.to_string()),
                }
            }
        }
    };
}

/// A Rust closure usable as a typed host function that reads the run's
/// context: `Fn(&C, A, B, …) -> Result<R, E>`, for up to six arguments.
/// Implemented automatically.
pub trait HostFnWith<C, Args>: Send + Sync + 'static {
    /// The number of arguments (the context aside).
    const ARITY: usize;
    /// Convert the arguments, call with the context, convert the result.
    ///
    /// # Errors
    ///
    /// The message for a `host_error`: a conversion failure or the function's
    /// own error.
    fn call<'t>(&self, context: &C, args: &[Datum<'t>]) -> Result<Datum<'t>, String>;
}

macro_rules! host_fn_with {
    ($n:literal $(, $t:ident $v:ident $i:tt)*) => {
        impl<Ctx, F, R, E $(, $t)*> HostFnWith<Ctx, ($($t,)*)> for F
        where
            F: Fn(&Ctx $(, $t)*) -> Result<R, E> + Send + Sync + 'static,
            R: IntoDatum,
            E: fmt::Display,
            $($t: FromDatum,)*
        {
            const ARITY: usize = $n;
            #[allow(unused_variables)]
            fn call<'t>(&self, context: &Ctx, args: &[Datum<'t>]) -> Result<Datum<'t>, String> {
                if args.len() != $n {
                    return Err(format!("expects {} argument(s), got {}", $n, args.len()));
                }
                $(let $v = $t::from_datum(&args[$i])
                    .map_err(|e| format!("argument {}: {e}", $i + 1))?;)*
                match self(context $(, $v)*) {
                    Ok(result) => Ok(result.into_datum()),
                    Err(message) => Err(message.to_string()),
                }
            }
        }
    };
}

host_fn_with!(0);
host_fn_with!(1, A a 0);
host_fn_with!(2, A a 0, B b 1);
host_fn_with!(3, A a 0, B b 1, C c 2);
host_fn_with!(4, A a 0, B b 1, C c 2, D d 3);
host_fn_with!(5, A a 0, B b 1, C c 2, D d 3, G g 4);
host_fn_with!(6, A a 0, B b 1, C c 2, D d 3, G g 4, H h 5);

host_fn!(0);
host_fn!(1, A a 0);
host_fn!(2, A a 0, B b 1);
host_fn!(3, A a 0, B b 1, C c 2);
host_fn!(4, A a 0, B b 1, C c 2, D d 3);
host_fn!(5, A a 0, B b 1, C c 2, D d 3, G g 4);
host_fn!(6, A a 0, B b 1, C c 2, D d 3, G g 4, H h 5);

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn panics_and_errors_become_host_errors() {
        let mut host = HostFunctions::new();
        let boom = host
            .register("boom", |n: i64| -> Result<i64, String> {
                if n > 0 {
                    panic!("fuse {n} lit")
                }
                Err("damp fuse".into())
            })
            .unwrap();
        let e = host.call(boom, None, &[Datum::Int(3)]).unwrap_err();
        assert_eq!(e.kind(), ErrorKind::HostError);
        assert_eq!(e.message(), "boom panicked: fuse 3 lit");
        let e = host.call(boom, None, &[Datum::Int(0)]).unwrap_err();
        assert_eq!(e.message(), "boom: damp fuse");
        let e = host.call(boom, None, &[Datum::Bool(true)]).unwrap_err();
        assert_eq!(
            e.message(),
            "boom: argument 1: expected an integer, found a boolean"
        );
    }

    #[test]
    fn names_are_checked() {
        let mut host = HostFunctions::new();
        let ok = |n: i64| Ok::<_, String>(n);
        assert!(host.register("let", ok).is_err());
        assert!(host.register("length", ok).is_err());
        assert!(host.register("9lives", ok).is_err());
        assert!(host.register("tide_height", ok).is_ok());
        assert_eq!(
            host.register("tide_height", ok),
            Err(HostDefinitionError::Duplicate("tide_height".into()))
        );
        let wide = host.register_data("wide", MAX_HOST_ARITY + 1, |_| Ok(Datum::Int(0)));
        assert!(matches!(wide, Err(HostDefinitionError::Arity(..))));
    }

    #[test]
    fn costs_are_one_plus_the_declared_cost() {
        let mut host = HostFunctions::new();
        let id = host
            .register("pad", |s: String| Ok::<_, String>(s))
            .unwrap();
        assert_eq!(host.fuel(id, None, &[Datum::Str("abc".into())]), 1);
        host.set_cost(id, |args| match &args[0] {
            Datum::Str(s) => s.len() as u64,
            _ => 0,
        });
        assert_eq!(host.fuel(id, None, &[Datum::Str("abc".into())]), 4);
        host.set_cost(id, |_| u64::MAX);
        assert_eq!(host.fuel(id, None, &[Datum::Str("abc".into())]), u64::MAX);
    }
}
