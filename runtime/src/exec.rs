//! The per-layer executor's entry points and the output read-out: `check_layer` and
//! `run_layer` (from `ops`, which owns each op's checks and kernel dispatch), `at_layer`
//! for kernel errors, and `top1`.

use crate::error::Error;
use crate::repr::{ElemType, TensorRecord};
use half::f16;

pub use crate::ops::{check_layer, check_layer_ops, run_layer, run_layer_ops, run_layer_reference};

/// Rewrites the layer index of an error raised by a kernel (which does not
/// know its index; kernels report `usize::MAX`).
pub fn at_layer(e: Error, index: usize) -> Error {
    match e {
        Error::Layer { problem, .. } => Error::Layer { index, problem },
        Error::AccumulatorOverflow { channel, .. } => Error::AccumulatorOverflow {
            layer: index,
            channel,
        },
        Error::NotLinked { op, elem, .. } => Error::NotLinked {
            layer: index,
            op,
            elem,
        },
        other => other,
    }
}

/// A raw output value as the device holds it: the int8 logit (real value
/// `scale · (q − zp)`, monotone in `q` since scale > 0) or the fp16 logit.
/// Softmax probabilities are a host-side matter (the converter).
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Logit {
    I8(i8),
    F16(f16),
}

/// Order-preserving integer key of a binary16 value (no FPU needed):
/// negative values have all bits flipped, positive ones the sign bit set.
fn f16_key(v: f16) -> u16 {
    let b = v.to_bits();
    if b & 0x8000 != 0 {
        !b
    } else {
        b | 0x8000
    }
}

/// Arg-max of a model output (int8 or fp16): the index of the largest
/// value and that raw value; the lowest index wins a tie, fp16 NaNs are
/// skipped. `None` for an empty, u8, all-NaN or wrongly sized output.
/// Integer comparisons only, so it runs on cores without an FPU.
///
/// ```
/// use midge_runtime::{top1, ElemType, Logit, Quant, Shape, TensorRecord};
///
/// let out = TensorRecord {
///     shape: Shape::new(1, 1, 4),
///     elem: ElemType::I8,
///     quant: Quant { scale: 0.1, zero_point: 0 },
///     offset: 0,
/// };
/// let logits = [-3i8, 90, 90, 7];
/// let bytes = logits.map(|v| v as u8);
/// // The lowest index wins a tie.
/// assert_eq!(top1(&out, &bytes), Some((1, Logit::I8(90))));
/// assert_eq!(top1(&out, &bytes[..3]), None); // wrong length
/// ```
pub fn top1(out: &TensorRecord, bytes: &[u8]) -> Option<(usize, Logit)> {
    if out.byte_len() != bytes.len() {
        return None;
    }
    match out.elem {
        ElemType::I8 => {
            let v: &[i8] = bytemuck::try_cast_slice(bytes).ok()?;
            let (i, &q) = v
                .iter()
                .enumerate()
                .reduce(|best, cur| if cur.1 > best.1 { cur } else { best })?;
            Some((i, Logit::I8(q)))
        }
        ElemType::F16 => {
            let v: &[f16] = bytemuck::try_cast_slice(bytes).ok()?;
            let (i, &x) =
                v.iter()
                    .enumerate()
                    .filter(|(_, x)| !x.is_nan())
                    .reduce(|best, cur| {
                        if f16_key(*cur.1) > f16_key(*best.1) {
                            cur
                        } else {
                            best
                        }
                    })?;
            Some((i, Logit::F16(x)))
        }
        ElemType::U8 => None,
    }
}
