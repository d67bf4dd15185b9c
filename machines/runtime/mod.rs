//! The runtime the environment machines share: what they hold at run time
//! and how it meets the rest of the crate.
//!
//! | module | holds | used for |
//! |---|---|---|
//! | [`value`] | values, cells, flat closures, the live-byte meter, stack recycling | every value a machine makes, and the memory limit's accounting of them |
//! | [`prims`] | primitive contractions over values, integer shortcuts | the `prim` rule, data-sized fuel, chunked string work |
//! | [`host`] | the host-call contraction, values to and from data | host functions |
//! | [`readback`] | values to closed terms | a run's result, under the memory limit |
//! | [`end`] | a run's end and its report, kept once made | the machines that pause |
//! | [`plain`] | values as plain data and back, cells numbered once | moving a paused run to another thread |
//!
//! The functions and free variables these values are built on are found
//! once per program, by the image's analysis (`crate::image::analysis`).
// The runtime serves the environment machines; a build without env and cek
// (or the stepper alone, which reads back its results differently) leaves
// part of it unused.
#![cfg_attr(not(all(feature = "env", feature = "cek")), allow(dead_code))]

pub(crate) mod end;
pub(crate) mod host;
pub(crate) mod plain;
pub(crate) mod prims;
pub(crate) mod readback;
pub(crate) mod value;
