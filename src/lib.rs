//! orrery: an evaluation kernel to embed. A call-by-value lambda calculus with
//! data, as arena-allocated de Bruijn terms, run by machines that agree exactly.
#![deny(missing_docs)]
#![forbid(unsafe_code)]

mod agree;
mod api;
mod equal;
mod prim;
mod scope;
mod subst;
pub mod syntax;
mod term;
mod validate;
#[cfg(any(feature = "env", feature = "cek"))]
mod value;

#[path = "../machines/mod.rs"]
pub mod machines;

pub use agree::disagreement;
pub use api::{
    Counts, ErrorKind, EvalError, LimitError, LimitKind, Limits, Machine, MachineKind, Outcome,
    Report, Rule, DEFAULT_FUEL, DEFAULT_MEMORY,
};
pub use equal::terms_equal;
pub use prim::{delta, Operand, Prim, PrimValue};
pub use scope::{Built, Scope, UnboundName};
pub use subst::{instantiate, shift, subst};
pub use syntax::{
    parse, parse_bytes, parse_term, print, print_limited, Printed, SyntaxError, PRINT_LIMIT,
};
pub use term::{Arena, Arm, Children, Node, Term};
pub use validate::{validate, Program, ValidationError};

/// The README's examples, compiled and run as doctests so they cannot rot.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
pub struct ReadmeDoctests;
