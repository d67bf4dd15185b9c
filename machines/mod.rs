//! The machines, one module each behind its cargo feature, the traits they
//! share, and the one table every list of machines is made from.
//!
//! | module | holds |
//! |---|---|
//! | `stepper` | the reference: substitution with refocusing (SEMANTICS §4) |
//! | `env` | the environment evaluator: compiled code run big-step |
//! | `cek` | the CEK machine: control, environment and continuation as data |
//! | `vm` | register bytecode in metered blocks, run over an explicit frame stack |
//! | `runtime` | what env, cek and vm share: values, primitives, host calls, read-back, detaching, a run's end |
//!
//! To add a machine: write its module (a type implementing [`Machine`] and
//! [`Build`]), add its feature to `Cargo.toml`, and add its line to the
//! table below. The kinds and names of machines, the command line's
//! `--machine` choices, the test harness, the benches, the fuzz checks,
//! `benches/report.py` and the feature builds of `.ci/run` all come from
//! the table.

use crate::{Limits, Program, Report};

pub use crate::vocabulary::{Build, Machine, Paused};

pub(crate) mod runtime;

/// Makes the machine modules, [`MachineKind`] and its dispatch from the
/// table's lines: `"feature" => module::Type as Variant,`.
macro_rules! machine_table {
    ($( $(#[$doc:meta])* $feature:literal => $module:ident :: $ty:ident as $kind:ident, )*) => {
        $(
            #[cfg(feature = $feature)]
            pub mod $module;
        )*

        /// The machines compiled into this build, for choosing one at run
        /// time; the order of the table, fastest first.
        ///
        /// # Examples
        ///
        /// ```
        /// use orrery::MachineKind;
        /// for kind in MachineKind::enabled() {
        ///     assert_eq!(MachineKind::from_name(kind.name()), Some(*kind));
        /// }
        /// assert_eq!(MachineKind::from_name("abacus"), None);
        /// ```
        #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
        #[non_exhaustive]
        pub enum MachineKind {
            $( $(#[$doc])* #[cfg(feature = $feature)] $kind, )*
        }

        impl MachineKind {
            /// The name of every machine the crate has, enabled in this build
            /// or not, in the table's order.
            ///
            /// # Examples
            ///
            /// ```
            /// assert!(orrery::MachineKind::ALL_NAMES.contains(&"stepper"));
            /// ```
            pub const ALL_NAMES: &'static [&'static str] = &[$($feature),*];

            /// The enabled machines, fastest first.
            ///
            /// # Examples
            ///
            /// ```
            /// let names: Vec<&str> = orrery::MachineKind::enabled().iter().map(|m| m.name()).collect();
            /// assert!(names.iter().all(|n| orrery::MachineKind::ALL_NAMES.contains(n)));
            /// ```
            pub fn enabled() -> &'static [MachineKind] {
                &[$( #[cfg(feature = $feature)] MachineKind::$kind, )*]
            }

            /// The machine's name, which is also its cargo feature.
            ///
            /// # Examples
            ///
            /// ```
            /// use orrery::MachineKind;
            /// # #[cfg(feature = "cek")]
            /// assert_eq!(MachineKind::Cek.name(), "cek");
            /// ```
            pub fn name(self) -> &'static str {
                match self {
                    $( #[cfg(feature = $feature)] MachineKind::$kind => $feature, )*
                }
            }

            /// A fresh machine of this kind.
            ///
            /// # Examples
            ///
            /// ```
            /// for kind in orrery::MachineKind::enabled() {
            ///     assert_eq!(kind.machine().name(), kind.name());
            /// }
            /// ```
            pub fn machine(self) -> Box<dyn Machine> {
                match self {
                    $( #[cfg(feature = $feature)]
                       MachineKind::$kind => Box::new(<$module::$ty as Build>::new()), )*
                }
            }

            /// **For benchmarks only.** The machine with its fuel, memory and
            /// cancellation checks compiled out, if it has such a build (see
            /// [`Build::without_accounting`]); it ignores every limit.
            #[doc(hidden)]
            pub fn unaccounted(self) -> Option<Box<dyn Machine>> {
                match self {
                    $( #[cfg(feature = $feature)]
                       MachineKind::$kind => <$module::$ty as Build>::without_accounting()
                           .map(|m| Box::new(m) as Box<dyn Machine>), )*
                }
            }
        }
    };
}

machine_table! {
    /// The register bytecode machine.
    "vm" => vm::Vm as Vm,
    /// The environment-based evaluator.
    "env" => env::Env as Env,
    /// The CEK machine.
    "cek" => cek::Cek as Cek,
    /// The reference substitution stepper.
    "stepper" => stepper::Stepper as Stepper,
}

impl MachineKind {
    /// The fastest enabled machine, or `None` in a build with no machine:
    /// the first of the table, whose order is measured. The vm comes first:
    /// in one run of `cargo bench --bench machines` (medians, 2026-12-04) it
    /// was fastest on seven of ten workloads, among them the shape an
    /// embedder runs many times per request (`request loop 10^6`: vm 64.1
    /// ms, env 79.4 ms, cek 184 ms) and the configuration-sized program
    /// (vm 765 ns a run, env 813 ns), and in callgrind it takes the fewest
    /// instructions on every workload but fib 25 and Church numerals, where
    /// env takes up to 4% fewer. env is faster on fib 30 in wall time and on
    /// a single call into a 1,000-rule set (444 ns against 602 ns); pick
    /// `MachineKind::Env` by name there if a run need not pause. The vm,
    /// unlike env, pauses, resumes and waits for host answers
    /// (`benches/README.md`).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::MachineKind;
    /// assert_eq!(MachineKind::fastest(), MachineKind::enabled().first().copied());
    /// ```
    pub fn fastest() -> Option<MachineKind> {
        Self::enabled().first().copied()
    }

    /// The enabled machine with this name.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::MachineKind;
    /// # #[cfg(feature = "cek")]
    /// assert_eq!(MachineKind::from_name("cek"), Some(MachineKind::Cek));
    /// assert_eq!(MachineKind::from_name("abacus"), None);
    /// ```
    pub fn from_name(name: &str) -> Option<MachineKind> {
        Self::enabled().iter().copied().find(|m| m.name() == name)
    }

    /// Run `program` on a fresh machine of this kind.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Limits, MachineKind, Outcome, Program};
    /// let program = Program::parse("let rec pace n = pace (n + 1) in pace 0").unwrap();
    /// for kind in MachineKind::enabled() {
    ///     let report = kind.run(&program, &Limits::default().with_fuel(50));
    ///     assert_eq!((report.outcome, report.counts.total()), (Outcome::OutOfFuel, 50));
    /// }
    /// ```
    pub fn run(self, program: &Program, limits: &Limits) -> Report {
        self.machine().run(program, limits)
    }
}
