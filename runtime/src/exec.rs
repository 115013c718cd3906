//! The per-layer executor: `check_layer` validates once, at parse time, everything a
//! kernel relies on; `run_layer` views the tensor bytes and dispatches to the kernels,
//! each arm behind a compile-time op-set guard (`opset::linked`). Also `top1`.

use crate::error::Error;
use crate::format::F16_MAX;
use crate::kernels::{self, fault, fp16, int8};
use crate::opset::{linked, ALL_OPS};
use crate::repr::{Bias, ElemType, LayerRef, Op, Params, Shape, TensorRecord, Weights};
use crate::requant::requant_in_range;
use half::f16;

/// Largest accumulator magnitude allowed at any point of an int8 sum.
const ACC_LIMIT: u64 = i32::MAX as u64;

/// Bound on |q_in| (or |q_in − zp_in|) used for the worst-case accumulator:
/// int8 values lie in −128..=127 and zero points in −128..=127, so both the
/// raw value and the zero-point-relative value span at most 255.
const SPAN: u64 = 255;

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

fn bad(index: usize, problem: &'static str) -> Error {
    Error::Layer { index, problem }
}

/// The i32 slice of an int8 parameter block (`Requant` and `I32` are both
/// i32 blocks; which name the reader gives them does not matter here).
fn params_i32<'a>(p: &Params<'a>) -> Option<&'a [i32]> {
    match *p {
        Params::Requant(s) | Params::I32(s) => Some(s),
        _ => None,
    }
}

fn params_absent(p: &Params<'_>) -> bool {
    match *p {
        Params::None => true,
        Params::Requant(s) | Params::I32(s) => s.is_empty(),
        Params::F32(s) => s.is_empty(),
    }
}

fn weights_absent(w: &Weights<'_>) -> bool {
    match *w {
        Weights::None => true,
        Weights::I8(s) => s.is_empty(),
        Weights::F16(s) => s.is_empty(),
    }
}

fn bias_absent(b: &Bias<'_>) -> bool {
    match *b {
        Bias::None => true,
        Bias::I32(s) => s.is_empty(),
        Bias::F32(s) => s.is_empty(),
    }
}

fn zp_ok(t: &TensorRecord) -> bool {
    t.elem != ElemType::I8 || (-128..=127).contains(&t.quant.zero_point)
}

fn scale_ok(t: &TensorRecord) -> bool {
    crate::format::scale_in_range(t.quant.scale)
}

fn clamp_i8_ok(c: [i32; 2]) -> bool {
    -128 <= c[0] && c[0] <= c[1] && c[1] <= 127
}

/// Ordered and inside the finite binary16 range: every fp16 store clamps,
/// so fp16 activations are always finite (NaN is stored as the low bound).
fn clamp_f32_ok(c: [f32; 2]) -> bool {
    // Comparisons with NaN are false, so NaN bounds are rejected too.
    -F16_MAX <= c[0] && c[0] <= c[1] && c[1] <= F16_MAX
}

/// Checks the per-output-channel requant pairs of an int8 layer.
fn check_requant(index: usize, p: &Params<'_>, out_c: usize) -> Result<(), Error> {
    let s = params_i32(p).ok_or(bad(index, "int8 layer needs i32 requant parameters"))?;
    if Some(s.len()) != out_c.checked_mul(2) {
        return Err(bad(
            index,
            "requant parameters must be 2 per output channel",
        ));
    }
    if !s.chunks_exact(2).all(|r| requant_in_range(r[0], r[1])) {
        return Err(bad(
            index,
            "requant multiplier must be in 0..2^31 and rshift in 1..=62",
        ));
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

fn abs_sum(w: impl Iterator<Item = i8>) -> u64 {
    w.map(|v| v.unsigned_abs() as u64).sum()
}

/// Weights, bias and parameters of a conv2d, depthwise or dense layer with
/// `out_c` output channels and `w_len` weights; `abs_sum_of(w, o)` is
/// Σ|w| over output channel `o` (for the accumulator bound).
fn check_weighted(
    index: usize,
    layer: &LayerRef<'_>,
    elem: ElemType,
    out_c: usize,
    w_len: Option<usize>,
    abs_sum_of: impl Fn(&[i8], usize) -> u64,
) -> Result<(), Error> {
    let w_len = w_len.ok_or(bad(index, "weight count overflows"))?;
    match elem {
        ElemType::I8 => {
            let Weights::I8(w) = layer.weights else {
                return Err(bad(index, "int8 layer needs int8 weights"));
            };
            if w.len() != w_len {
                return Err(bad(index, "weight length does not match the shapes"));
            }
            let bias: &[i32] = match layer.bias {
                Bias::I32(b) => b,
                Bias::None => &[],
                Bias::F32(_) => return Err(bad(index, "int8 layer needs int32 bias")),
            };
            if !bias.is_empty() && bias.len() != out_c {
                return Err(bad(index, "bias length must equal the output channels"));
            }
            check_requant(index, &layer.params, out_c)?;
            check_accumulator(index, out_c, bias, |o| abs_sum_of(w, o))
        }
        ElemType::F16 => {
            let Weights::F16(w) = layer.weights else {
                return Err(bad(index, "fp16 layer needs fp16 weights"));
            };
            if w.len() != w_len {
                return Err(bad(index, "weight length does not match the shapes"));
            }
            // One linear scan at parse time (FORMAT.md, "Limits").
            if !w.iter().all(|v| v.is_finite()) {
                return Err(bad(index, "fp16 weights must be finite (no inf or NaN)"));
            }
            match layer.bias {
                Bias::F32(b) if b.iter().any(|v| !v.is_finite()) => {
                    return Err(bad(index, "fp16 layer bias must be finite (no inf or NaN)"))
                }
                Bias::F32(b) if b.is_empty() || b.len() == out_c => {}
                Bias::None => {}
                Bias::F32(_) => {
                    return Err(bad(index, "bias length must equal the output channels"))
                }
                Bias::I32(_) => return Err(bad(index, "fp16 layer needs f32 bias")),
            }
            if !params_absent(&layer.params) {
                return Err(bad(index, "fp16 layer takes no parameters"));
            }
            Ok(())
        }
        ElemType::U8 => Err(bad(index, "layer cannot compute in u8")),
    }
}

/// Validates layer `index` against its input tensor(s) and output tensor so
/// that `run_layer` cannot fail on it (given byte slices of the tensors'
/// lengths and alignment).
///
/// Checks, per op: element types; the output shape (from
/// `Window::output_hw` for windowed ops); blob kinds and lengths; requant
/// multipliers in 0..2^31 and rshifts in 1..=62; clamp bounds ordered (int8:
/// within −128..=127); int8 zero points in −128..=127; fp16 weights and
/// biases finite; int8 scales of quantize/dequantize in range; for pooling at least
/// one in-bounds tap per output and an exact int32 sum; and the worst-case
/// int32 accumulator of conv2d/depthwise/dense (see `check_accumulator`).
pub fn check_layer(
    index: usize,
    layer: &LayerRef<'_>,
    a: &TensorRecord,
    b: Option<&TensorRecord>,
    out: &TensorRecord,
) -> Result<(), Error> {
    check_layer_ops::<ALL_OPS>(index, layer, a, b, out)
}

/// `check_layer` for a build that links the op set `OPS` only: a layer
/// whose (op, output type) is not in it is refused with `Error::NotLinked`,
/// and the checks of ops outside it are not compiled in (each arm starts
/// with a constant early return; the match stays exhaustive).
pub fn check_layer_ops<const OPS: u32>(
    index: usize,
    layer: &LayerRef<'_>,
    a: &TensorRecord,
    b: Option<&TensorRecord>,
    out: &TensorRecord,
) -> Result<(), Error> {
    let h = &layer.header;
    let op = h.op;
    match (op.arity(), b) {
        (2, None) => return Err(bad(index, "add needs two inputs")),
        (1, Some(_)) => return Err(bad(index, "op takes one input")),
        _ => {}
    }
    if a.shape.elems() == 0 || out.shape.elems() == 0 {
        return Err(bad(index, "tensors must not be empty"));
    }
    if !zp_ok(a) || !zp_ok(out) || b.is_some_and(|b| !zp_ok(b)) {
        return Err(bad(index, "int8 zero point must be in -128..=127"));
    }
    match out.elem {
        ElemType::I8 if !clamp_i8_ok(h.clamp_i8) => {
            return Err(bad(
                index,
                "int8 clamp must be ordered and within -128..=127",
            ))
        }
        ElemType::F16 if !clamp_f32_ok(h.clamp_f32) => {
            return Err(bad(
                index,
                "fp16 clamp must be ordered and within -65504..=65504",
            ))
        }
        ElemType::U8 => return Err(bad(index, "no layer outputs u8")),
        _ => {}
    }
    let not_linked = Error::NotLinked {
        layer: index,
        op,
        elem: out.elem,
    };
    if !linked::<OPS>(op, out.elem) {
        return Err(not_linked);
    }
    let same_elem = |what: &'static str| -> Result<ElemType, Error> {
        if a.elem != out.elem || a.elem == ElemType::U8 {
            Err(bad(index, what))
        } else {
            Ok(a.elem)
        }
    };
    let (ih, iw, ic) = (a.shape.h, a.shape.w, a.shape.c as usize);
    let oc = out.shape.c as usize;
    let win = h.window;
    let window_shape = || -> Result<(), Error> {
        let (oh, ow) = win
            .output_hw(ih, iw)
            .ok_or(bad(index, "window does not fit the padded input"))?;
        if (oh, ow) != (out.shape.h, out.shape.w) {
            return Err(bad(index, "output height/width do not match the window"));
        }
        Ok(())
    };
    let no_blobs = |what: &'static str| -> Result<(), Error> {
        if weights_absent(&layer.weights)
            && bias_absent(&layer.bias)
            && params_absent(&layer.params)
        {
            Ok(())
        } else {
            Err(bad(index, what))
        }
    };
    match op {
        Op::Pixels => {
            if const { !has_op::<OPS>(Op::Pixels) } {
                return Err(not_linked);
            }
            if a.elem != ElemType::U8 {
                return Err(bad(index, "pixels reads u8 camera bytes"));
            }
            if a.shape != out.shape {
                return Err(bad(index, "pixels output shape must equal its input shape"));
            }
            if !weights_absent(&layer.weights) || !bias_absent(&layer.bias) {
                return Err(bad(index, "pixels takes no weights or bias"));
            }
            match out.elem {
                ElemType::I8 => {
                    let p = params_i32(&layer.params)
                        .ok_or(bad(index, "pixels to int8 needs i32 parameters"))?;
                    if Some(p.len()) != ic.checked_mul(3) {
                        return Err(bad(index, "pixels to int8 needs 3 parameters per channel"));
                    }
                    for r in p.chunks_exact(3) {
                        if r[0] == i32::MIN || !requant_in_range(r[1], r[2]) {
                            return Err(bad(
                                index,
                                "pixels offset must not be i32::MIN, multiplier in 0..2^31, rshift in 1..=62",
                            ));
                        }
                    }
                }
                _ => {
                    let Params::F32(p) = layer.params else {
                        return Err(bad(index, "pixels to fp16 needs f32 parameters"));
                    };
                    if Some(p.len()) != ic.checked_mul(2) {
                        return Err(bad(index, "pixels to fp16 needs 2 parameters per channel"));
                    }
                    if !p.iter().all(|v| v.is_finite()) {
                        return Err(bad(index, "pixels parameters must be finite"));
                    }
                }
            }
        }
        Op::Conv2d => {
            if const { !has_op::<OPS>(Op::Conv2d) } {
                return Err(not_linked);
            }
            let elem = same_elem("conv2d input and output must both be int8 or both fp16")?;
            window_shape()?;
            let per_out = (win.kh as usize)
                .checked_mul(win.kw as usize)
                .and_then(|t| t.checked_mul(ic));
            let w_len = per_out.and_then(|p| p.checked_mul(oc));
            let per = per_out.unwrap_or(0);
            check_weighted(index, layer, elem, oc, w_len, |w, o| {
                abs_sum(w.iter().skip(o * per).take(per).copied())
            })?;
        }
        Op::Depthwise => {
            if const { !has_op::<OPS>(Op::Depthwise) } {
                return Err(not_linked);
            }
            let elem = same_elem("depthwise input and output must both be int8 or both fp16")?;
            if ic != oc {
                return Err(bad(
                    index,
                    "depthwise (multiplier 1) keeps the channel count",
                ));
            }
            window_shape()?;
            let w_len = (win.kh as usize)
                .checked_mul(win.kw as usize)
                .and_then(|t| t.checked_mul(oc));
            check_weighted(index, layer, elem, oc, w_len, |w, o| {
                abs_sum(w.iter().skip(o).step_by(oc.max(1)).copied())
            })?;
        }
        Op::Dense => {
            if const { !has_op::<OPS>(Op::Dense) } {
                return Err(not_linked);
            }
            let elem = same_elem("dense input and output must both be int8 or both fp16")?;
            if out.shape.h != 1 || out.shape.w != 1 {
                return Err(bad(index, "dense output must be 1x1xN"));
            }
            let n_in = a.shape.elems();
            check_weighted(index, layer, elem, oc, n_in.checked_mul(oc), |w, o| {
                abs_sum(w.iter().skip(o * n_in).take(n_in).copied())
            })?;
        }
        Op::MaxPool | Op::AvgPool | Op::GlobalAvgPool => {
            if const {
                !(has_op::<OPS>(Op::MaxPool)
                    || has_op::<OPS>(Op::AvgPool)
                    || has_op::<OPS>(Op::GlobalAvgPool))
            } {
                return Err(not_linked);
            }
            let elem = same_elem("pooling input and output must both be int8 or both fp16")?;
            if ic != oc {
                return Err(bad(index, "pooling keeps the channel count"));
            }
            if elem == ElemType::I8 && a.quant != out.quant {
                return Err(bad(
                    index,
                    "int8 pooling needs the same quantization in and out",
                ));
            }
            no_blobs("pooling takes no weights, bias or parameters")?;
            let pw = if op == Op::GlobalAvgPool {
                if out.shape.h != 1 || out.shape.w != 1 {
                    return Err(bad(index, "global average pooling output must be 1x1xC"));
                }
                kernels::global_window(ih, iw)
            } else {
                window_shape()?;
                win
            };
            // Every output needs an in-bounds tap (a window entirely in the
            // padding has nothing to pool and would divide by zero).
            let axis_ok = |out_len: u16, k: u16, s: u16, d: u16, p: u16, len: u16| {
                (0..out_len as usize)
                    .all(|o| kernels::taps_in_bounds(o, k, s, d, p, len as usize) > 0)
            };
            if !axis_ok(out.shape.h, pw.kh, pw.stride_h, pw.dil_h, pw.pad_top, ih)
                || !axis_ok(out.shape.w, pw.kw, pw.stride_w, pw.dil_w, pw.pad_left, iw)
            {
                return Err(bad(index, "a pooling window lies entirely in the padding"));
            }
            // int8 average: Σ(q − zp) over kh·kw taps must fit i32.
            let taps = pw.kh as u64 * pw.kw as u64;
            if elem == ElemType::I8 && taps.saturating_mul(SPAN) > ACC_LIMIT {
                return Err(bad(
                    index,
                    "pooling window too large for an exact int32 sum",
                ));
            }
        }
        Op::Add => {
            if const { !has_op::<OPS>(Op::Add) } {
                return Err(not_linked);
            }
            let b = b.ok_or(bad(index, "add needs two inputs"))?;
            if a.shape != b.shape || a.shape != out.shape {
                return Err(bad(index, "add inputs and output must have the same shape"));
            }
            let elem = same_elem("add input and output must both be int8 or both fp16")?;
            if b.elem != elem {
                return Err(bad(index, "add inputs must have the same element type"));
            }
            if !weights_absent(&layer.weights) || !bias_absent(&layer.bias) {
                return Err(bad(index, "add takes no weights or bias"));
            }
            if elem == ElemType::I8 {
                let p = params_i32(&layer.params)
                    .ok_or(bad(index, "int8 add needs i32 parameters [ma, mb, rshift]"))?;
                let [ma, mb, s] = *p else {
                    return Err(bad(
                        index,
                        "int8 add needs exactly 3 parameters [ma, mb, rshift]",
                    ));
                };
                if !requant_in_range(ma, s) || !requant_in_range(mb, s) {
                    return Err(bad(
                        index,
                        "add multipliers must be in 0..2^31 and rshift in 1..=62",
                    ));
                }
            } else if !params_absent(&layer.params) {
                return Err(bad(index, "fp16 add takes no parameters"));
            }
        }
        Op::Quantize => {
            if const { !has_op::<OPS>(Op::Quantize) } {
                return Err(not_linked);
            }
            if a.elem != ElemType::F16 || out.elem != ElemType::I8 {
                return Err(bad(index, "quantize reads fp16 and writes int8"));
            }
            if a.shape != out.shape {
                return Err(bad(index, "quantize keeps the shape"));
            }
            if !scale_ok(out) {
                return Err(bad(
                    index,
                    "quantize output scale must be finite and positive",
                ));
            }
            no_blobs("quantize takes no weights, bias or parameters")?;
        }
        Op::Dequantize => {
            if const { !has_op::<OPS>(Op::Dequantize) } {
                return Err(not_linked);
            }
            if a.elem != ElemType::I8 || out.elem != ElemType::F16 {
                return Err(bad(index, "dequantize reads int8 and writes fp16"));
            }
            if a.shape != out.shape {
                return Err(bad(index, "dequantize keeps the shape"));
            }
            if !scale_ok(a) {
                return Err(bad(
                    index,
                    "dequantize input scale must be finite and positive",
                ));
            }
            no_blobs("dequantize takes no weights, bias or parameters")?;
        }
    }
    Ok(())
}

const fn has_op<const OPS: u32>(op: Op) -> bool {
    crate::opset::OpSet::from_bits(OPS).has_op(op)
}

/// Runs one checked layer: `a` (and `b` for add) are the input tensors'
/// records and bytes, `out` the output tensor's record and bytes. Fails only
/// on impossible states (slices that do not match the records, misaligned
/// fp16 slices, a layer that `check_layer` would reject); kernel errors
/// carry layer index `usize::MAX` — wrap with `at_layer`.
pub fn run_layer(
    layer: &LayerRef<'_>,
    a: (&TensorRecord, &[u8]),
    b: Option<(&TensorRecord, &[u8])>,
    out: (&TensorRecord, &mut [u8]),
) -> Result<(), Error> {
    run::<ALL_OPS, true>(layer, a, b, out)
}

/// `run_layer` in a build that links the op set `OPS` only; a layer outside
/// it (which `check_layer_ops::<OPS>` refuses) gets `Error::NotLinked`.
pub fn run_layer_ops<const OPS: u32>(
    layer: &LayerRef<'_>,
    a: (&TensorRecord, &[u8]),
    b: Option<(&TensorRecord, &[u8])>,
    out: (&TensorRecord, &mut [u8]),
) -> Result<(), Error> {
    run::<OPS, true>(layer, a, b, out)
}

/// As `run_layer`, but through the straightforward reference loop nests
/// only (the oracle the fast paths are tested against).
pub fn run_layer_reference(
    layer: &LayerRef<'_>,
    a: (&TensorRecord, &[u8]),
    b: Option<(&TensorRecord, &[u8])>,
    out: (&TensorRecord, &mut [u8]),
) -> Result<(), Error> {
    run::<ALL_OPS, false>(layer, a, b, out)
}

fn as_i8(bytes: &[u8]) -> Result<&[i8], Error> {
    bytemuck::try_cast_slice(bytes).map_err(|_| fault("cannot view bytes as int8"))
}

fn as_i8_mut(bytes: &mut [u8]) -> Result<&mut [i8], Error> {
    bytemuck::try_cast_slice_mut(bytes).map_err(|_| fault("cannot view bytes as int8"))
}

fn as_f16(bytes: &[u8]) -> Result<&[f16], Error> {
    bytemuck::try_cast_slice(bytes).map_err(|_| fault("fp16 tensor bytes misaligned or odd length"))
}

fn as_f16_mut(bytes: &mut [u8]) -> Result<&mut [f16], Error> {
    bytemuck::try_cast_slice_mut(bytes)
        .map_err(|_| fault("fp16 tensor bytes misaligned or odd length"))
}

fn i8_bias<'a>(b: &Bias<'a>) -> Result<&'a [i32], Error> {
    match *b {
        Bias::I32(s) => Ok(s),
        Bias::None => Ok(&[]),
        Bias::F32(_) => Err(fault("int8 layer needs int32 bias")),
    }
}

fn f32_bias<'a>(b: &Bias<'a>) -> Result<&'a [f32], Error> {
    match *b {
        Bias::F32(s) => Ok(s),
        Bias::None => Ok(&[]),
        Bias::I32(_) => Err(fault("fp16 layer needs f32 bias")),
    }
}

/// A tensor's elements as a typed slice, after checking the byte length.
fn check_len(t: &TensorRecord, bytes: usize) -> Result<(), Error> {
    if t.byte_len() != bytes {
        return Err(fault("tensor bytes do not match the tensor record"));
    }
    Ok(())
}

/// The error of a dispatch arm a build with a smaller op set left out.
const fn not_linked(op: Op, elem: ElemType) -> Error {
    Error::NotLinked {
        layer: usize::MAX,
        op,
        elem,
    }
}

/// The dispatch: one arm per (op, precision), each guarded by a constant
/// (`linked::<OPS>`), so the arms of pairs outside `OPS` and every kernel
/// only they call are dead code. `FAST`: fast loop nests, else reference.
/// Out of line, so the kernels' loops are compiled apart from the layer
/// walk's registers (measured: fewer emulated instructions on Cortex-M0+).
#[inline(never)]
fn run<const OPS: u32, const FAST: bool>(
    layer: &LayerRef<'_>,
    (ta, xa): (&TensorRecord, &[u8]),
    b: Option<(&TensorRecord, &[u8])>,
    (to, y): (&TensorRecord, &mut [u8]),
) -> Result<(), Error> {
    use ElemType::{F16, I8, U8};
    check_len(ta, xa.len())?;
    check_len(to, y.len())?;
    if let Some((tb, xb)) = b {
        check_len(tb, xb.len())?;
    }
    let h = &layer.header;
    let (xs, ys): (Shape, Shape) = (ta.shape, to.shape);
    match (h.op, ta.elem, to.elem) {
        (Op::Pixels, U8, I8) if const { linked::<OPS>(Op::Pixels, I8) } => {
            let p =
                params_i32(&layer.params).ok_or(fault("pixels to int8 needs i32 parameters"))?;
            int8::pixels(xa, p, to.quant.zero_point, h.clamp_i8, as_i8_mut(y)?)
        }
        (Op::Pixels, U8, F16) if const { linked::<OPS>(Op::Pixels, F16) } => {
            let Params::F32(p) = layer.params else {
                return Err(fault("pixels to fp16 needs f32 parameters"));
            };
            fp16::pixels(xa, p, h.clamp_f32, as_f16_mut(y)?)
        }
        (Op::Conv2d | Op::Depthwise | Op::Dense, I8, I8)
            if const {
                linked::<OPS>(Op::Conv2d, I8)
                    || linked::<OPS>(Op::Depthwise, I8)
                    || linked::<OPS>(Op::Dense, I8)
            } =>
        {
            let Weights::I8(w) = layer.weights else {
                return Err(fault("int8 layer needs int8 weights"));
            };
            let ar = int8::Int8Arith {
                zp_in: clamp_zp(ta.quant.zero_point),
                zp_out: to.quant.zero_point,
                bias: i8_bias(&layer.bias)?,
                requant: params_i32(&layer.params)
                    .ok_or(fault("int8 layer needs requant parameters"))?,
                clamp: h.clamp_i8,
            };
            if FAST && h.op == Op::Conv2d && const { linked::<OPS>(Op::Conv2d, I8) } {
                let (x, y) = (as_i8(xa)?, as_i8_mut(y)?);
                return kernels::tile::conv2d_selected(&ar, x, xs, w, &h.window, y, ys);
            }
            if FAST && h.op == Op::Depthwise && const { linked::<OPS>(Op::Depthwise, I8) } {
                let (x, y) = (as_i8(xa)?, as_i8_mut(y)?);
                return kernels::tile::depthwise_selected(&ar, x, xs, w, &h.window, y, ys);
            }
            weighted::<OPS, FAST, false, _>(
                &ar,
                h.op,
                as_i8(xa)?,
                xs,
                w,
                &h.window,
                as_i8_mut(y)?,
                ys,
            )
        }
        (Op::Conv2d | Op::Depthwise | Op::Dense, F16, F16)
            if const {
                linked::<OPS>(Op::Conv2d, F16)
                    || linked::<OPS>(Op::Depthwise, F16)
                    || linked::<OPS>(Op::Dense, F16)
            } =>
        {
            let Weights::F16(w) = layer.weights else {
                return Err(fault("fp16 layer needs fp16 weights"));
            };
            let ar = fp16::F16Arith {
                bias: f32_bias(&layer.bias)?,
                clamp: h.clamp_f32,
            };
            weighted::<OPS, FAST, true, _>(
                &ar,
                h.op,
                as_f16(xa)?,
                xs,
                w,
                &h.window,
                as_f16_mut(y)?,
                ys,
            )
        }
        (Op::MaxPool, I8, I8) if const { linked::<OPS>(Op::MaxPool, I8) } => {
            let p = int8::MaxI8 { clamp: h.clamp_i8 };
            pool::<FAST, _>(&p, as_i8(xa)?, xs, &h.window, as_i8_mut(y)?, ys)
        }
        (Op::AvgPool | Op::GlobalAvgPool, I8, I8)
            if const { linked::<OPS>(Op::AvgPool, I8) || linked::<OPS>(Op::GlobalAvgPool, I8) } =>
        {
            let p = int8::AvgI8 {
                zp: ta.quant.zero_point,
                clamp: h.clamp_i8,
            };
            let win = pool_window(h.op, xs, &h.window);
            pool::<FAST, _>(&p, as_i8(xa)?, xs, &win, as_i8_mut(y)?, ys)
        }
        (Op::MaxPool, F16, F16) if const { linked::<OPS>(Op::MaxPool, F16) } => {
            let p = fp16::MaxF16 { clamp: h.clamp_f32 };
            pool::<FAST, _>(&p, as_f16(xa)?, xs, &h.window, as_f16_mut(y)?, ys)
        }
        (Op::AvgPool | Op::GlobalAvgPool, F16, F16)
            if const { linked::<OPS>(Op::AvgPool, F16) || linked::<OPS>(Op::GlobalAvgPool, F16) } =>
        {
            let p = fp16::AvgF16 { clamp: h.clamp_f32 };
            let win = pool_window(h.op, xs, &h.window);
            pool::<FAST, _>(&p, as_f16(xa)?, xs, &win, as_f16_mut(y)?, ys)
        }
        (Op::Add, I8, I8) if const { linked::<OPS>(Op::Add, I8) } => {
            let (tb, xb) = b.ok_or(fault("add needs two inputs"))?;
            let p = params_i32(&layer.params).ok_or(fault("int8 add needs parameters"))?;
            let [ma, mb, rshift] = *p else {
                return Err(fault("int8 add needs exactly 3 parameters"));
            };
            let add = int8::AddI8 {
                zp_a: ta.quant.zero_point,
                zp_b: tb.quant.zero_point,
                zp_out: to.quant.zero_point,
                ma,
                mb,
                rshift,
                clamp: h.clamp_i8,
            };
            int8::add(&add, as_i8(xa)?, as_i8(xb)?, as_i8_mut(y)?)
        }
        (Op::Add, F16, F16) if const { linked::<OPS>(Op::Add, F16) } => {
            let (_, xb) = b.ok_or(fault("add needs two inputs"))?;
            fp16::add(as_f16(xa)?, as_f16(xb)?, h.clamp_f32, as_f16_mut(y)?)
        }
        (Op::Quantize, F16, I8) if const { linked::<OPS>(Op::Quantize, I8) } => fp16::quantize(
            as_f16(xa)?,
            to.quant.scale,
            to.quant.zero_point,
            h.clamp_i8,
            as_i8_mut(y)?,
        ),
        (Op::Dequantize, I8, F16) if const { linked::<OPS>(Op::Dequantize, F16) } => {
            fp16::dequantize(
                as_i8(xa)?,
                ta.quant.scale,
                ta.quant.zero_point,
                h.clamp_f32,
                as_f16_mut(y)?,
            )
        }
        (op, _, elem) if !linked::<OPS>(op, elem) => Err(not_linked(op, elem)),
        _ => Err(fault("op and element types do not go together")),
    }
}

/// The int8 input zero point as stored in a padded tap (checked layers have
/// it in range; anything else is clamped, never wrapped).
fn clamp_zp(zp: i32) -> i8 {
    zp.clamp(i8::MIN as i32, i8::MAX as i32) as i8
}

fn pool_window(op: Op, xs: Shape, win: &crate::repr::Window) -> crate::repr::Window {
    if op == Op::GlobalAvgPool {
        kernels::global_window(xs.h, xs.w)
    } else {
        *win
    }
}

fn pool<const FAST: bool, P: kernels::Pool>(
    p: &P,
    x: &[P::X],
    xs: Shape,
    win: &crate::repr::Window,
    y: &mut [P::X],
    ys: Shape,
) -> Result<(), Error> {
    if FAST {
        kernels::pool(p, x, xs, win, y, ys)
    } else {
        kernels::pool_ref(p, x, xs, win, y, ys)
    }
}

/// conv2d, depthwise or dense in the precision `A` computes (`FP16` says
/// which, for the op-set guards).
#[allow(clippy::too_many_arguments)]
fn weighted<const OPS: u32, const FAST: bool, const FP16: bool, A: kernels::Arith>(
    ar: &A,
    op: Op,
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &crate::repr::Window,
    y: &mut [A::X],
    ys: Shape,
) -> Result<(), Error> {
    let elem = elem_of(FP16);
    match op {
        Op::Conv2d if const { linked::<OPS>(Op::Conv2d, elem_of(FP16)) } => {
            if FAST {
                kernels::conv2d_fast(ar, x, xs, w, win, y, ys)
            } else {
                kernels::conv2d_ref(ar, x, xs, w, win, y, ys)
            }
        }
        Op::Depthwise if const { linked::<OPS>(Op::Depthwise, elem_of(FP16)) } => {
            if FAST {
                kernels::depthwise_fast(ar, x, xs, w, win, y, ys)
            } else {
                kernels::depthwise_ref(ar, x, xs, w, win, y, ys)
            }
        }
        Op::Dense if const { linked::<OPS>(Op::Dense, elem_of(FP16)) } => {
            if FAST {
                kernels::dense(ar, x, w, y)
            } else {
                kernels::dense_ref(ar, x, w, y)
            }
        }
        op => Err(not_linked(op, elem)),
    }
}

const fn elem_of(fp16: bool) -> ElemType {
    if fp16 {
        ElemType::F16
    } else {
        ElemType::I8
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
