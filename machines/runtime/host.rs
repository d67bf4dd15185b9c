//! The host-call contraction over runtime values, the same on every
//! environment machine: read the arguments as data (within the run's room
//! in bytes, every copy of a shared string counted), let `host::host_step`
//! decide in the order the cost model fixes, pay its fuel, and make the
//! result a value (its cells charged like any other).

use std::sync::Arc;

use super::value::{values_bytes_for, Code, ConCell, Text, Value, Values, RC_HEADER};
use crate::budget::{Budget, Halt};
use crate::datum::{Builder, NotData};
use crate::host::{host_step, HostStep};
use crate::image::{INode, Id, Image, Tags};
use crate::prim::HostId;
use crate::{Datum, HostFunctions, Rule};

/// A host function's contraction on `args`, with `room` bytes left under
/// the memory limit. Out of fuel leaves everything as it was (so a paused
/// run resumes and makes the call); the caller pops the arguments if it is
/// made.
pub(crate) fn host_call<C: Code>(
    host: &HostFunctions,
    id: HostId,
    args: &[Value<C>],
    image: &Image,
    tags: &mut Tags,
    budget: &mut Budget,
    room: usize,
) -> Result<Value<C>, Halt> {
    let fuel_left = budget.fuel_left();
    let mut bytes = room;
    let data = if fuel_left > 0 {
        args.iter()
            .map(|v| {
                let d = to_datum(v, image, tags, bytes)?;
                bytes = bytes.saturating_sub(datum_bytes(&d));
                Ok(d)
            })
            .collect()
    } else {
        Ok(Vec::new())
    };
    let (value, new_tags) = match host_step(host, id, budget, data) {
        HostStep::OutOfFuel => return Err(Halt::OutOfFuel),
        HostStep::TooLarge => return Err(Halt::Memory),
        HostStep::Made { fuel, result } => {
            budget.pay(Rule::Prim, fuel)?;
            let datum = result.map_err(Halt::error)?;
            if cells_bytes::<C>(&datum) > room {
                return Err(Halt::Memory);
            }
            from_datum(&datum, image, tags)
        }
    };
    tags.append(new_tags);
    Ok(value)
}

/// Bytes the runtime cells of `datum` take once [`from_datum`] has made
/// them, counted without making them, so that data too large for the
/// memory limit is refused before any of it is built.
pub(crate) fn cells_bytes<C: Code>(datum: &Datum<'_>) -> usize {
    let mut total = 0usize;
    let mut pending = vec![datum];
    while let Some(d) = pending.pop() {
        match d {
            Datum::Str(s) => total = total.saturating_add(Text::bytes(s.len())),
            Datum::Con(c) if !c.fields().is_empty() => {
                let cell = RC_HEADER
                    + std::mem::size_of::<ConCell<C>>()
                    + values_bytes_for::<C>(c.fields().len());
                total = total.saturating_add(cell);
                pending.extend(c.fields());
            }
            _ => {}
        }
    }
    total
}

/// Bytes a datum took, as [`Builder`] counts them.
fn datum_bytes(datum: &Datum<'_>) -> usize {
    let mut total = 0usize;
    let mut pending = vec![datum];
    while let Some(d) = pending.pop() {
        total = total.saturating_add(crate::datum::DATUM_NODE_BYTES);
        match d {
            Datum::Str(s) => total = total.saturating_add(s.len()),
            Datum::Con(c) => pending.extend(c.fields()),
            _ => {}
        }
    }
    total
}

/// Read `value` as a datum of at most `max_bytes`.
pub(crate) fn to_datum<'v, C: Code>(
    value: &'v Value<C>,
    image: &'v Image,
    tags: &'v Tags,
    max_bytes: usize,
) -> Result<Datum<'v>, NotData> {
    let mut builder = Builder::new(max_bytes);
    let mut pending: Vec<&'v Value<C>> = vec![value];
    while let Some(v) = pending.pop() {
        match v {
            Value::Int(n) => builder.leaf(Datum::Int(*n))?,
            Value::Bool(b) => builder.leaf(Datum::Bool(*b))?,
            Value::Lit(s) => {
                let text = image.string(*s);
                if !builder.fits(text.len()) {
                    return Err(NotData::TooLarge);
                }
                builder.leaf(Datum::Str(text.to_string()))?
            }
            Value::Str(s) => {
                if !builder.fits(s.text.len()) {
                    return Err(NotData::TooLarge);
                }
                builder.leaf(Datum::Str(s.text.to_string()))?
            }
            Value::Fun(_) => return Err(NotData::Function),
            Value::Tag(t) => builder.open(tags.name(image, *t), 0)?,
            Value::Data(d) => data_to_datum(*d, image, &mut builder)?,
            Value::Con(c) => {
                builder.open(tags.name(image, c.tag), c.fields.len())?;
                pending.extend(c.fields.iter().rev());
            }
        }
    }
    builder.finish()
}

/// Closed constructor data `id` of the program, added to `builder`.
fn data_to_datum<'v>(id: Id, image: &'v Image, builder: &mut Builder<'v>) -> Result<(), NotData> {
    let mut pending = vec![id];
    while let Some(id) = pending.pop() {
        match image.node(id) {
            INode::Int(n) => builder.leaf(Datum::Int(n))?,
            INode::Bool(b) => builder.leaf(Datum::Bool(b))?,
            INode::Str(s) => {
                let text = image.string(s);
                if !builder.fits(text.len()) {
                    return Err(NotData::TooLarge);
                }
                builder.leaf(Datum::Str(text.to_string()))?
            }
            INode::Con(tag, start, len) => {
                builder.open(image.tag(tag), len as usize)?;
                pending.extend(image.list(start, len).iter().rev());
            }
            _ => return Err(NotData::NotAValue),
        }
    }
    Ok(())
}

/// A host function's result as a value, and the tags it makes up (to be
/// appended to `tags`, in order, once the datum is gone).
pub(crate) fn from_datum<C: Code>(
    datum: &Datum<'_>,
    image: &Image,
    tags: &Tags,
) -> (Value<C>, Vec<Arc<str>>) {
    let mut stack: Vec<Value<C>> = Vec::new();
    let mut new: Vec<Arc<str>> = Vec::new();
    let value = datum.fold(
        |d, fields: &mut Vec<Value<C>>| match d {
            Datum::Int(n) => Value::Int(*n),
            Datum::Bool(b) => Value::Bool(*b),
            Datum::Str(s) => Value::Str(Text::new(s.clone())),
            Datum::Con(c) => {
                let tag = tags.id_or_new(image, c.tag(), &mut new);
                if c.fields().is_empty() {
                    return Value::Tag(tag);
                }
                let start = fields.len().saturating_sub(c.fields().len());
                let values: Values<C> = fields.drain(start..).collect();
                Value::Con(ConCell::new(tag, values))
            }
        },
        &mut stack,
    );
    (value, new)
}
