//! What max, average and global average pooling share: the checks (same
//! type and quantization in and out, at least one in-bounds tap per output, an
//! exact int32 sum) and the run through `kernels::pool` or the oracle `kernels::pool_ref`.

use super::weighted::{ACC_LIMIT, SPAN};
use super::{as_f16, as_f16_mut, as_i8, as_i8_mut, unlinked_or_mismatch, Cx, Io, OpRules};
use crate::error::Error;
use crate::kernels::{self, fp16, int8, Pool};
use crate::opset::linked;
use crate::repr::{ElemType, Shape, Window};

/// The checks of a pooling layer whose window is `pw`; `windowed`: the
/// output shape comes from the record's window (max/avg pool), else the
/// output is 1×1×C (global average pool).
pub(crate) fn check(cx: &Cx<'_, '_>, pw: Window, windowed: bool) -> Result<(), Error> {
    let elem = cx.same_elem(text!(
        "pooling input and output must both be int8 or both fp16"
    ))?;
    let (a, out) = (cx.a, cx.out);
    if a.shape.c != out.shape.c {
        return Err(cx.bad(text!("pooling keeps the channel count")));
    }
    if elem == ElemType::I8 && a.quant != out.quant {
        return Err(cx.bad(text!("int8 pooling needs the same quantization in and out")));
    }
    cx.no_blobs(text!("pooling takes no weights, bias or parameters"))?;
    if windowed {
        cx.window_shape()?;
    } else if out.shape.h != 1 || out.shape.w != 1 {
        return Err(cx.bad(text!("global average pooling output must be 1x1xC")));
    }
    // Every output needs an in-bounds tap (a window entirely in the
    // padding has nothing to pool and would divide by zero).
    let (ih, iw) = (a.shape.h, a.shape.w);
    if !axis_ok(out.shape.h, pw.kh, pw.stride_h, pw.dil_h, pw.pad_top, ih)
        || !axis_ok(out.shape.w, pw.kw, pw.stride_w, pw.dil_w, pw.pad_left, iw)
    {
        return Err(cx.bad(text!("a pooling window lies entirely in the padding")));
    }
    // int8 average: Σ(q − zp) over kh·kw taps must fit i32.
    let taps = pw.kh as u64 * pw.kw as u64;
    if elem == ElemType::I8 && taps.saturating_mul(SPAN) > ACC_LIMIT {
        return Err(cx.bad(text!("pooling window too large for an exact int32 sum")));
    }
    Ok(())
}

/// Every one of `out_len` outputs along one axis has an in-bounds tap (one
/// copy for both axes: parse-time only, so its size counts, not its speed).
#[inline(never)]
fn axis_ok(out_len: u16, k: u16, s: u16, d: u16, p: u16, len: u16) -> bool {
    (0..out_len as usize).all(|o| kernels::has_tap_in_bounds(o, k, s, d, p, len as usize))
}

fn pool<const FAST: bool, P: Pool>(
    p: &P,
    x: &[P::X],
    xs: Shape,
    win: &Window,
    y: &mut [P::X],
    ys: Shape,
) -> Result<(), Error> {
    if FAST {
        kernels::pool(p, x, xs, win, y, ys)
    } else {
        kernels::pool_ref(p, x, xs, win, y, ys)
    }
}

/// Max pooling over `win` for op `T` (`T::OP`, `OPS`: the op-set guards).
pub(crate) fn run_max<T: OpRules, const OPS: u32, const FAST: bool>(
    io: Io<'_, '_>,
    win: Window,
) -> Result<(), Error> {
    let (xs, ys, h) = (io.ta.shape, io.to.shape, &io.layer.header);
    match (io.ta.elem, io.to.elem) {
        (ElemType::I8, ElemType::I8) if const { linked::<OPS>(T::OP, ElemType::I8) } => {
            let p = int8::MaxI8 { clamp: h.clamp_i8 };
            pool::<FAST, _>(&p, as_i8(io.xa)?, xs, &win, as_i8_mut(io.y)?, ys)
        }
        (ElemType::F16, ElemType::F16) if const { linked::<OPS>(T::OP, ElemType::F16) } => {
            let p = fp16::MaxF16 { clamp: h.clamp_f32 };
            pool::<FAST, _>(&p, as_f16(io.xa)?, xs, &win, as_f16_mut(io.y)?, ys)
        }
        (_, out) => Err(unlinked_or_mismatch::<OPS>(T::OP, out)),
    }
}

/// Average pooling over `win` (in-bounds taps only).
pub(crate) fn run_avg<T: OpRules, const OPS: u32, const FAST: bool>(
    io: Io<'_, '_>,
    win: Window,
) -> Result<(), Error> {
    let (xs, ys, h) = (io.ta.shape, io.to.shape, &io.layer.header);
    match (io.ta.elem, io.to.elem) {
        (ElemType::I8, ElemType::I8) if const { linked::<OPS>(T::OP, ElemType::I8) } => {
            let p = int8::AvgI8 {
                zp: io.ta.quant.zero_point,
                clamp: h.clamp_i8,
            };
            pool::<FAST, _>(&p, as_i8(io.xa)?, xs, &win, as_i8_mut(io.y)?, ys)
        }
        (ElemType::F16, ElemType::F16) if const { linked::<OPS>(T::OP, ElemType::F16) } => {
            let p = fp16::AvgF16 { clamp: h.clamp_f32 };
            pool::<FAST, _>(&p, as_f16(io.xa)?, xs, &win, as_f16_mut(io.y)?, ys)
        }
        (_, out) => Err(unlinked_or_mismatch::<OPS>(T::OP, out)),
    }
}
