//! The byte format of a snapshot, version 1 (feature `snapshot`):
//!
//! | bytes | what |
//! |---|---|
//! | 8 | the magic `orrsnap` and a zero byte |
//! | 4 | the format version, little-endian |
//! | n | the body: [`Wire`] in the postcard codec (serde) |
//! | 8 | the FNV-1a hash (64 bits) of everything before it, little-endian |
//!
//! The body is flat: every datum of the recorded calls and answers is a
//! node in one table ([`Wire::data`]), each constructor naming its fields by
//! their places in the table, which come before it, and each node the field
//! or root of exactly one other. Decoding is therefore iterative (no depth of
//! data reaches the native stack), every node is used once (no sharing
//! unfolds into more data than the bytes hold), and what is decoded takes
//! space proportional to the bytes read: the codec never reserves room for
//! more elements than the input could hold.

use serde::{Deserialize, Serialize};

use super::{Fnv, Snapshot, SnapshotError, Stop};
use crate::vocabulary::{Answer, Counts, HostCall};
use crate::Datum;

/// The magic bytes every snapshot starts with.
const MAGIC: &[u8; 8] = b"orrsnap\0";

/// The version of the format this build reads and writes.
pub const FORMAT_VERSION: u32 = 1;

/// The body of a snapshot.
#[derive(Serialize, Deserialize)]
struct Wire {
    machine: String,
    fingerprint: u64,
    fuel: u64,
    fuel_left: u64,
    by_rule: [u64; 6],
    extra_fuel: u64,
    stop: WireStop,
    journal: Vec<(WireCall, WireAnswer)>,
    given: Option<(WireCall, WireAnswer)>,
    data: Vec<WireDatum>,
}

#[derive(Serialize, Deserialize)]
enum WireStop {
    Fresh,
    OutOfFuel,
    Suspended(WireCall),
    Ended,
}

#[derive(Serialize, Deserialize)]
struct WireCall {
    name: String,
    /// Places in [`Wire::data`].
    args: Vec<u32>,
}

#[derive(Serialize, Deserialize)]
enum WireAnswer {
    /// A place in [`Wire::data`].
    Datum(u32),
    Error(String),
}

#[derive(Serialize, Deserialize)]
enum WireDatum {
    Int(i64),
    Bool(bool),
    Str(String),
    Con { tag: String, fields: Vec<u32> },
}

impl Snapshot {
    /// The snapshot as bytes, in the versioned format of
    /// [`FORMAT_VERSION`] (see `DEVELOPERS.md`, "Snapshot format").
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{HostFunctions, Limits, MachineKind, Program, Snapshot};
    /// let mut host = HostFunctions::new();
    /// host.register_suspending("ferry_seats", 0).unwrap();
    /// let program = Program::parse_with("ferry_seats - 3", &host).unwrap();
    /// let kind = MachineKind::enabled().iter().copied().find(|k| k.name() != "env").unwrap();
    /// let mut run = kind.machine().start(&program, &Limits::default()).unwrap();
    /// run.resume(0);
    /// let bytes = run.snapshot().to_bytes();
    /// let again = Snapshot::from_bytes(&bytes).unwrap();
    /// assert_eq!(again, run.snapshot());
    /// assert!(Snapshot::from_bytes(&bytes[..bytes.len() - 1]).is_err());
    /// ```
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut data = Vec::new();
        let call = |c: &HostCall, data: &mut Vec<WireDatum>| WireCall {
            name: c.name.clone(),
            args: c.args.iter().map(|a| encode(a, data)).collect(),
        };
        let answer = |a: &Answer, data: &mut Vec<WireDatum>| match a {
            Ok(d) => WireAnswer::Datum(encode(d, data)),
            Err(m) => WireAnswer::Error(m.clone()),
        };
        let stop = match &self.stop {
            Stop::Fresh => WireStop::Fresh,
            Stop::OutOfFuel => WireStop::OutOfFuel,
            Stop::Suspended(c) => WireStop::Suspended(call(c, &mut data)),
            Stop::Ended => WireStop::Ended,
        };
        let journal = self
            .journal
            .iter()
            .map(|(c, a)| (call(c, &mut data), answer(a, &mut data)))
            .collect();
        let given = self
            .given
            .as_ref()
            .map(|(c, a)| (call(c, &mut data), answer(a, &mut data)));
        let wire = Wire {
            machine: self.machine.clone(),
            fingerprint: self.fingerprint,
            fuel: self.fuel,
            fuel_left: self.fuel_left,
            by_rule: self.counts.to_array(),
            extra_fuel: self.counts.extra_fuel(),
            stop,
            journal,
            given,
            data,
        };
        let mut bytes = MAGIC.to_vec();
        bytes.extend_from_slice(&FORMAT_VERSION.to_le_bytes());
        // Serialising plain owned data into a vector cannot fail.
        bytes.extend(postcard::to_allocvec(&wire).unwrap_or_default());
        let mut hash = Fnv::new();
        hash.write(&bytes);
        bytes.extend_from_slice(&hash.finish().to_le_bytes());
        bytes
    }

    /// A snapshot from the bytes [`Snapshot::to_bytes`] wrote. It takes space
    /// proportional to `bytes`; restoring it checks everything else (see
    /// [`Snapshot::restore`]).
    ///
    /// # Errors
    ///
    /// [`SnapshotError::Truncated`], [`SnapshotError::Corrupt`] (not a
    /// snapshot, a changed byte, a malformed body) or
    /// [`SnapshotError::Version`].
    pub fn from_bytes(bytes: &[u8]) -> Result<Snapshot, SnapshotError> {
        let head = MAGIC.len() + 4;
        if bytes.len() < head + 8 {
            if !MAGIC.starts_with(&bytes[..bytes.len().min(MAGIC.len())]) {
                return Err(corrupt("it does not begin as a snapshot does"));
            }
            return Err(SnapshotError::Truncated(format!(
                "{} bytes, fewer than any snapshot has",
                bytes.len()
            )));
        }
        if &bytes[..MAGIC.len()] != MAGIC {
            return Err(corrupt("it does not begin as a snapshot does"));
        }
        let mut version = [0u8; 4];
        version.copy_from_slice(&bytes[MAGIC.len()..head]);
        let version = u32::from_le_bytes(version);
        if version != FORMAT_VERSION {
            return Err(SnapshotError::Version {
                found: version,
                expected: FORMAT_VERSION,
            });
        }
        let (signed, sum) = bytes.split_at(bytes.len() - 8);
        let mut hash = Fnv::new();
        hash.write(signed);
        let mut expected = [0u8; 8];
        expected.copy_from_slice(sum);
        if hash.finish() != u64::from_le_bytes(expected) {
            return Err(corrupt(
                "its checksum does not match: bytes were changed, or cut short",
            ));
        }
        let wire: Wire = match postcard::from_bytes(&signed[head..]) {
            Ok(wire) => wire,
            Err(postcard::Error::DeserializeUnexpectedEnd) => {
                return Err(SnapshotError::Truncated("the body ends early".into()))
            }
            Err(e) => return Err(corrupt(&format!("the body does not decode: {e}"))),
        };
        decode(wire)
    }
}

fn corrupt(why: &str) -> SnapshotError {
    SnapshotError::Corrupt(why.to_string())
}

/// Append `datum`'s nodes to `data`, fields first, without recursion; the
/// place of its root.
fn encode(datum: &Datum<'_>, data: &mut Vec<WireDatum>) -> u32 {
    // (datum, whether its fields are placed): a constructor is met twice.
    let mut pending: Vec<(&Datum<'_>, bool)> = vec![(datum, false)];
    let mut placed: Vec<u32> = Vec::new();
    while let Some((d, ready)) = pending.pop() {
        let node = match d {
            Datum::Int(n) => WireDatum::Int(*n),
            Datum::Bool(b) => WireDatum::Bool(*b),
            Datum::Str(s) => WireDatum::Str(s.clone()),
            Datum::Con(c) if !ready => {
                pending.push((d, true));
                pending.extend(c.fields().iter().rev().map(|f| (f, false)));
                continue;
            }
            Datum::Con(c) => {
                let fields = placed.split_off(placed.len() - c.fields().len());
                WireDatum::Con {
                    tag: c.tag().to_string(),
                    fields,
                }
            }
        };
        placed.push(data.len() as u32);
        data.push(node);
    }
    placed.pop().unwrap_or_default()
}

/// The data table made datums: each node taken once by its one user.
struct Table {
    made: Vec<Option<Datum<'static>>>,
}

impl Table {
    /// Build every node, fields before constructors.
    fn new(data: Vec<WireDatum>) -> Result<Table, SnapshotError> {
        let mut made: Vec<Option<Datum<'static>>> = Vec::with_capacity(data.len());
        for (at, node) in data.into_iter().enumerate() {
            let datum = match node {
                WireDatum::Int(n) => Datum::Int(n),
                WireDatum::Bool(b) => Datum::Bool(b),
                WireDatum::Str(s) => Datum::Str(s),
                WireDatum::Con { tag, fields } => {
                    let mut taken = Vec::with_capacity(fields.len());
                    for f in fields {
                        if f as usize >= at {
                            return Err(corrupt("a constructor names a field after itself"));
                        }
                        taken.push(take(&mut made, f)?);
                    }
                    Datum::con(tag, taken)
                }
            };
            made.push(Some(datum));
        }
        Ok(Table { made })
    }

    fn take(&mut self, at: u32) -> Result<Datum<'static>, SnapshotError> {
        take(&mut self.made, at)
    }

    fn call(&mut self, call: WireCall) -> Result<HostCall, SnapshotError> {
        let args = call
            .args
            .into_iter()
            .map(|a| self.take(a))
            .collect::<Result<_, _>>()?;
        Ok(HostCall {
            name: call.name,
            args,
        })
    }

    fn answer(&mut self, answer: WireAnswer) -> Result<Answer, SnapshotError> {
        Ok(match answer {
            WireAnswer::Datum(at) => Ok(self.take(at)?),
            WireAnswer::Error(m) => Err(m),
        })
    }
}

/// Node `at`, which nothing has taken yet.
fn take(made: &mut [Option<Datum<'static>>], at: u32) -> Result<Datum<'static>, SnapshotError> {
    match made.get_mut(at as usize).and_then(Option::take) {
        Some(d) => Ok(d),
        None => Err(corrupt("a datum is named twice, or not at all")),
    }
}

fn decode(wire: Wire) -> Result<Snapshot, SnapshotError> {
    let mut table = Table::new(wire.data)?;
    let stop = match wire.stop {
        WireStop::Fresh => Stop::Fresh,
        WireStop::OutOfFuel => Stop::OutOfFuel,
        WireStop::Suspended(c) => Stop::Suspended(table.call(c)?),
        WireStop::Ended => Stop::Ended,
    };
    let mut journal = Vec::with_capacity(wire.journal.len());
    for (c, a) in wire.journal {
        journal.push((table.call(c)?, table.answer(a)?));
    }
    let given = match wire.given {
        Some((c, a)) => Some((table.call(c)?, table.answer(a)?)),
        None => None,
    };
    if table.made.iter().any(Option::is_some) {
        return Err(corrupt("a datum is named by nothing"));
    }
    let mut counts = Counts::from_array(wire.by_rule);
    counts.add_extra_fuel(wire.extra_fuel);
    Ok(Snapshot {
        machine: wire.machine,
        fingerprint: wire.fingerprint,
        fuel: wire.fuel,
        fuel_left: wire.fuel_left,
        counts,
        stop,
        journal,
        given,
    })
}
