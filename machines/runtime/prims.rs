//! Primitive contractions over runtime values: the integer shortcuts the
//! machines' hot paths take, and the general path through the shared
//! δ-rules, which pays a data-sized primitive's units, refuses a string that
//! would pass the memory limit before making it, and works on long strings
//! in chunks with a look at the cancellation flag between them.

use smallvec::SmallVec;

use super::value::{Code, Text, Value};
use crate::budget::{Budget, Halt};
use crate::error::Operand;
use crate::image::Image;
use crate::image::Tags;
use crate::prim::{delta_polled, fuel_units, Prim, PrimValue, Stopped};
use crate::Rule;

/// Contract `op` on `args`, its fuel not yet paid; the run holds `held`
/// bytes.
pub(crate) fn prim_contraction<C: Code>(
    op: Prim,
    args: &[Value<C>],
    image: &Image,
    tags: &Tags,
    budget: &mut Budget,
    held: usize,
) -> Result<Value<C>, Halt> {
    let operands: SmallVec<[Operand<'_>; 2]> =
        args.iter().map(|v| v.operand(image, tags)).collect();
    budget.pay(Rule::Prim, fuel_units(op, &operands))?;
    delta_value(op, &operands, budget, held)
}

/// Contract `op` on `args` when the one unit of fuel it needs is paid
/// already (by a metered block): its value, or `None` when it needs more
/// units or fails — the caller then makes the contraction per contraction,
/// through [`prim_contraction`], which says why.
pub(crate) fn prepaid_prim<C: Code>(
    op: Prim,
    args: &[Value<C>],
    image: &Image,
    tags: &Tags,
    budget: &mut Budget,
    held: usize,
) -> Option<Value<C>> {
    let operands: SmallVec<[Operand<'_>; 2]> =
        args.iter().map(|v| v.operand(image, tags)).collect();
    if fuel_units(op, &operands) != 1 {
        return None;
    }
    delta_value(op, &operands, budget, held).ok()
}

/// The δ-rule's value as a runtime value, a string refused before it is
/// made if it would pass the limit.
fn delta_value<C: Code>(
    op: Prim,
    operands: &[Operand<'_>],
    budget: &mut Budget,
    held: usize,
) -> Result<Value<C>, Halt> {
    if let (Prim::Concat, [Operand::Str(a), Operand::Str(b)]) = (op, operands) {
        let bytes = Text::bytes(a.len().saturating_add(b.len()));
        budget.check_memory(held.saturating_add(bytes))?;
    }
    let result = delta_polled(op, operands, &mut || budget.is_cancelled());
    match result {
        Ok(PrimValue::Int(n)) => Ok(Value::Int(n)),
        Ok(PrimValue::Bool(b)) => Ok(Value::Bool(b)),
        Ok(PrimValue::Str(s)) => {
            budget.check_memory(held.saturating_add(Text::bytes(s.len())))?;
            Ok(Value::Str(Text::new(s)))
        }
        Err(Stopped::Error(e)) => Err(Halt::error(e)),
        Err(Stopped::Cancelled) => Err(Halt::Cancelled),
        Err(Stopped::Memory) => Err(Halt::Memory),
    }
}

/// `op(x, y)` on integers when it is a comparison.
#[inline(always)]
pub(crate) fn int_test(op: Prim, x: i64, y: i64) -> Option<bool> {
    Some(match op {
        Prim::Lt => x < y,
        Prim::Le => x <= y,
        Prim::Gt => x > y,
        Prim::Ge => x >= y,
        Prim::Eq => x == y,
        Prim::Ne => x != y,
        _ => return None,
    })
}

/// `op(x, y)` on integers when it is a comparison or an arithmetic operation
/// that does not fail (no overflow, no division by zero, not `i64::MIN /
/// -1`); `None` sends everything else through the δ-rules, which say why.
/// The machines' integer shortcuts all come here: one match, inlined
/// (division and remainder included: env's tail loop of 10⁶, 1588M
/// instructions without them, 1242M with; one match rather than two
/// helpers: env fib 25, 136.7M and 134.6M; cek fib 25 lost 6.6M while this
/// was not inlined).
#[inline(always)]
pub(crate) fn int_prim<C: Code>(op: Prim, x: i64, y: i64) -> Option<Value<C>> {
    match op {
        Prim::Add => x.checked_add(y).map(Value::Int),
        Prim::Sub => x.checked_sub(y).map(Value::Int),
        Prim::Mul => x.checked_mul(y).map(Value::Int),
        Prim::Div => x.checked_div(y).map(Value::Int),
        Prim::Rem => x.checked_rem(y).map(Value::Int),
        _ => int_test(op, x, y).map(Value::Bool),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::prim::delta;

    #[test]
    fn integer_shortcuts_agree_with_delta() {
        let samples = [i64::MIN, -7, -2, -1, 0, 1, 2, 7, i64::MAX];
        let mut taken = 0;
        for op in Prim::ALL.into_iter().filter(|p| p.arity() == 2) {
            for a in samples {
                for b in samples {
                    let slow = delta(op, &[Operand::Int(a), Operand::Int(b)]);
                    let Some(fast) = int_prim::<u32>(op, a, b) else {
                        // Left to the δ-rules: an error, or not an integer
                        // operation at all.
                        assert!(slow.is_err() || op == Prim::Concat, "{op} {a} {b}");
                        continue;
                    };
                    taken += 1;
                    match (fast, slow) {
                        (Value::Int(x), Ok(PrimValue::Int(y))) => assert_eq!(x, y),
                        (Value::Bool(x), Ok(PrimValue::Bool(y))) => assert_eq!(x, y),
                        _ => panic!("{op} {a} {b} disagrees"),
                    }
                }
            }
        }
        // Every arithmetic and comparison operator is taken on most samples.
        assert!(taken > 11 * 70, "{taken}");
    }
}
