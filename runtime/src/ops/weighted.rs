//! What conv2d, depthwise and dense share: their blob checks (weights, bias,
//! requantization, the worst-case int32 accumulator) and the arithmetic
//! (`Int8Arith`, `F16Arith`) their kernels take from a layer.

use super::{params_absent, params_i32, Cx, Io};
use crate::error::Error;
use crate::kernels::{fault, fp16, int8};
use crate::repr::{Bias, ElemType, Weights};
use crate::requant::requant_in_range;

/// Largest accumulator magnitude allowed at any point of an int8 sum.
pub(crate) const ACC_LIMIT: u64 = i32::MAX as u64;

/// Bound on |q_in| (or |q_in − zp_in|) used for the worst-case accumulator:
/// int8 values lie in −128..=127 and zero points in −128..=127, so both the
/// raw value and the zero-point-relative value span at most 255.
pub(crate) const SPAN: u64 = 255;

/// Checks the per-output-channel requant pairs of an int8 layer.
fn check_requant(cx: &Cx<'_, '_>, out_c: usize) -> Result<(), Error> {
    let s = cx.params_i32(text!("int8 layer needs i32 requant parameters"))?;
    if Some(s.len()) != out_c.checked_mul(2) {
        return Err(cx.bad(text!("requant parameters must be 2 per output channel")));
    }
    if !s.chunks_exact(2).all(|r| requant_in_range(r[0], r[1])) {
        return Err(cx.bad(text!(
            "requant multiplier must be in 0..2^31 and rshift in 1..=62"
        )));
    }
    Ok(())
}

/// The worst-case accumulator bound of an int8 conv2d/depthwise/dense:
/// for each output channel `o`, `|bias[o]| + 255 · Σ|w[o][·]| ≤ i32::MAX`.
///
/// The kernel computes `acc = bias[o] + Σ w·q` with q in −128..=127 (padded
/// taps read q = zp_in, also in −128..=127), so every partial sum, in any
/// order, is bounded by `|bias| + 128·Σ|w|`. We use 255 instead of 128 so
/// the bound also holds for the zero-point-relative form `Σ w·(q − zp_in)`
/// the converter reasons in (|q − zp_in| ≤ 255).
/// `abs_weights_of(o)` is Σ|w| over the weights of output channel `o`.
fn check_accumulator(
    index: usize,
    out_c: usize,
    bias: &[i32],
    mut abs_weights_of: impl FnMut(usize) -> u64,
) -> Result<(), Error> {
    for o in 0..out_c {
        let b = bias.get(o).map_or(0, |b| b.unsigned_abs() as u64);
        let bound = abs_weights_of(o).saturating_mul(SPAN).saturating_add(b);
        if bound > ACC_LIMIT {
            return Err(Error::AccumulatorOverflow {
                layer: index,
                channel: o,
            });
        }
    }
    Ok(())
}

/// Where output channel `o`'s weights are: `count` values from index
/// `o · first`, `stride` apart (conv2d and dense: rows; depthwise: every
/// `C`-th value from `o`). A value, not a closure, so `check` is one copy
/// for every op.
#[derive(Clone, Copy)]
pub(crate) struct Rows {
    pub(crate) first: usize,
    pub(crate) stride: usize,
    pub(crate) count: usize,
}

impl Rows {
    /// Σ|w| over output channel `o`.
    fn abs_sum(self, w: &[i8], o: usize) -> u64 {
        let mut at = o.saturating_mul(self.first);
        let mut sum = 0u64;
        for _ in 0..self.count {
            let Some(v) = w.get(at) else { break };
            sum += v.unsigned_abs() as u64;
            at = at.saturating_add(self.stride.max(1));
        }
        sum
    }
}

/// Weights, bias and parameters of a conv2d, depthwise or dense layer with
/// `out_c` output channels and `w_len` weights laid out as `rows` (for the
/// accumulator bound). Out of line: one copy for every op (parse time only).
#[inline(never)]
pub(crate) fn check(
    cx: &Cx<'_, '_>,
    elem: ElemType,
    out_c: usize,
    w_len: Option<usize>,
    rows: Rows,
) -> Result<(), Error> {
    let layer = cx.layer;
    let w_len = w_len.ok_or(cx.bad(text!("weight count overflows")))?;
    match elem {
        ElemType::I8 => {
            let Weights::I8(w) = layer.weights else {
                return Err(cx.bad(text!("int8 layer needs int8 weights")));
            };
            if w.len() != w_len {
                return Err(cx.bad(text!("weight length does not match the shapes")));
            }
            let bias: &[i32] = match layer.bias {
                Bias::I32(b) => b,
                Bias::None => &[],
                Bias::F32(_) => return Err(cx.bad(text!("int8 layer needs int32 bias"))),
            };
            if !bias.is_empty() && bias.len() != out_c {
                return Err(cx.bad(text!("bias length must equal the output channels")));
            }
            check_requant(cx, out_c)?;
            check_accumulator(cx.index, out_c, bias, |o| rows.abs_sum(w, o))
        }
        ElemType::F16 => {
            let Weights::F16(w) = layer.weights else {
                return Err(cx.bad(text!("fp16 layer needs fp16 weights")));
            };
            if w.len() != w_len {
                return Err(cx.bad(text!("weight length does not match the shapes")));
            }
            // One linear scan at parse time (FORMAT.md, "Limits").
            if !w.iter().all(|v| v.is_finite()) {
                return Err(cx.bad(text!("fp16 weights must be finite (no inf or NaN)")));
            }
            match layer.bias {
                Bias::F32(b) if b.iter().any(|v| !v.is_finite()) => {
                    return Err(cx.bad(text!("fp16 layer bias must be finite (no inf or NaN)")))
                }
                Bias::F32(b) if b.is_empty() || b.len() == out_c => {}
                Bias::None => {}
                Bias::F32(_) => {
                    return Err(cx.bad(text!("bias length must equal the output channels")))
                }
                Bias::I32(_) => return Err(cx.bad(text!("fp16 layer needs f32 bias"))),
            }
            if !params_absent(&layer.params) {
                return Err(cx.bad(text!("fp16 layer takes no parameters")));
            }
            Ok(())
        }
        ElemType::U8 => Err(cx.bad(text!("layer cannot compute in u8"))),
    }
}

/// The int8 input zero point as stored in a padded tap (checked layers have
/// it in range; anything else is clamped, never wrapped).
fn clamp_zp(zp: i32) -> i8 {
    zp.clamp(i8::MIN as i32, i8::MAX as i32) as i8
}

/// The int8 weights and arithmetic of a layer.
pub(crate) fn int8_arith<'a>(io: &Io<'_, 'a>) -> Result<(&'a [i8], int8::Int8Arith<'a>), Error> {
    let l = io.layer;
    let Weights::I8(w) = l.weights else {
        return Err(fault(text!("int8 layer needs int8 weights")));
    };
    let bias = match l.bias {
        Bias::I32(s) => s,
        Bias::None => &[],
        Bias::F32(_) => return Err(fault(text!("int8 layer needs int32 bias"))),
    };
    let ar = int8::Int8Arith {
        zp_in: clamp_zp(io.ta.quant.zero_point),
        zp_out: io.to.quant.zero_point,
        bias,
        requant: params_i32(&l.params)
            .ok_or(fault(text!("int8 layer needs requant parameters")))?,
        clamp: l.header.clamp_i8,
    };
    Ok((w, ar))
}

/// The fp16 weights and arithmetic of a layer.
pub(crate) fn f16_arith<'a>(
    io: &Io<'_, 'a>,
) -> Result<(&'a [half::f16], fp16::F16Arith<'a>), Error> {
    let l = io.layer;
    let Weights::F16(w) = l.weights else {
        return Err(fault(text!("fp16 layer needs fp16 weights")));
    };
    let bias = match l.bias {
        Bias::F32(s) => s,
        Bias::None => &[],
        Bias::I32(_) => return Err(fault(text!("fp16 layer needs f32 bias"))),
    };
    Ok((
        w,
        fp16::F16Arith {
            bias,
            clamp: l.header.clamp_f32,
        },
    ))
}
