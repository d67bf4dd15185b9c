//! The machines of DESIGN §3, one module each, each behind its cargo feature.

#[cfg(feature = "stepper")]
pub mod stepper;

#[cfg(feature = "env")]
pub mod env;

#[cfg(feature = "cek")]
pub mod cek;

pub(crate) mod runtime;
