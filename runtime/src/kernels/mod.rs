//! The loop nests of the windowed and matrix ops, written once and generic
//! over the element arithmetic (`Arith` for conv2d/depthwise/dense, `Pool`
//! for pooling); `int8` and `fp16` supply the arithmetic and the elementwise ops.
//!
//! Each loop nest has a straightforward reference form (`*_ref`, the oracle)
//! and, where it pays, a fast form (`*_fast`) that the tests check against it:
//! conv2d 1×1 stride-1 unpadded is a plain matrix product (`pointwise`), and
//! conv2d/depthwise skip per-tap bounds checks on interior output pixels.

pub mod fp16;
pub mod int8;

use crate::error::Error;
use crate::repr::{Shape, Window};

/// Error for a state `check_layer` rules out (slice lengths that disagree
/// with the shapes). The layer index is not known here; `exec::at_layer`
/// fills it in.
pub(crate) const fn fault(problem: &'static str) -> Error {
    Error::Layer {
        index: usize::MAX,
        problem,
    }
}

/// Element arithmetic of conv2d, depthwise and dense: accumulate products of
/// activations `X` and weights `W` into `Acc`, starting from the bias, then
/// turn the accumulator into an output activation.
pub trait Arith {
    type X: Copy;
    type W: Copy;
    type Acc: Copy;
    /// The activation read at a padded tap (int8: the input zero point;
    /// fp16: 0).
    fn pad(&self) -> Self::X;
    /// Accumulator start value for output channel `o` (its bias).
    fn start(&self, o: usize) -> Self::Acc;
    /// `acc + x · w`.
    fn mac(acc: Self::Acc, x: Self::X, w: Self::W) -> Self::Acc;
    /// `acc + Σ x[i] · w[i]` over the common length.
    #[inline]
    fn dot(acc: Self::Acc, x: &[Self::X], w: &[Self::W]) -> Self::Acc {
        x.iter()
            .zip(w)
            .fold(acc, |acc, (&x, &w)| Self::mac(acc, x, w))
    }
    /// Output activation of channel `o` from its finished accumulator.
    fn finish(&self, acc: Self::Acc, o: usize) -> Self::X;
}

/// Element arithmetic of pooling: fold the in-bounds taps (padded taps are
/// skipped, not read), then finish with the number of taps folded.
pub trait Pool {
    type X: Copy;
    type Acc: Copy;
    fn init(&self) -> Self::Acc;
    fn step(&self, acc: Self::Acc, x: Self::X) -> Self::Acc;
    /// `count` ≥ 1 for every checked layer; must not panic when it is 0.
    fn finish(&self, acc: Self::Acc, count: u32) -> Self::X;
}

/// Input position of tap `k` for output position `o` along one axis, or
/// `None` when it falls into the padding: `o·stride + k·dil − pad_lo`.
/// Computed in i64 so no window can overflow it.
#[inline]
pub fn tap(o: usize, k: usize, stride: u16, dil: u16, pad_lo: u16, len: usize) -> Option<usize> {
    let p = o as i64 * stride as i64 + k as i64 * dil as i64 - pad_lo as i64;
    if p >= 0 && (p as u64) < len as u64 {
        Some(p as usize)
    } else {
        None
    }
}

/// Number of in-bounds taps of output position `o` along one axis.
pub fn taps_in_bounds(o: usize, k: u16, stride: u16, dil: u16, pad_lo: u16, len: usize) -> u32 {
    (0..k as usize)
        .filter(|&t| tap(o, t, stride, dil, pad_lo, len).is_some())
        .count() as u32
}

/// The half-open range of output positions along one axis whose taps are
/// all in bounds (empty when there is none).
pub fn interior(
    out: usize,
    k: u16,
    stride: u16,
    dil: u16,
    pad_lo: u16,
    len: usize,
) -> (usize, usize) {
    let last = k.saturating_sub(1) as usize;
    let inside = |o: usize| {
        tap(o, 0, stride, dil, pad_lo, len).is_some()
            && tap(o, last, stride, dil, pad_lo, len).is_some()
    };
    // Taps are monotone in `o`, so the interior is one contiguous range.
    let Some(lo) = (0..out).find(|&o| inside(o)) else {
        return (0, 0);
    };
    let hi = (lo..out).find(|&o| !inside(o)).unwrap_or(out);
    (lo, hi)
}

/// The full-input window of global average pooling (`h`×`w`, unit stride
/// and dilation, no padding).
pub const fn global_window(h: u16, w: u16) -> Window {
    Window {
        kh: h,
        kw: w,
        stride_h: 1,
        stride_w: 1,
        dil_h: 1,
        dil_w: 1,
        pad_top: 0,
        pad_left: 0,
        pad_bottom: 0,
        pad_right: 0,
    }
}

/// Checks the slice lengths every loop nest relies on.
fn check_lens(x_len: usize, xs: Shape, y_len: usize, ys: Shape) -> Result<(), Error> {
    if x_len != xs.elems() {
        return Err(fault("input length does not match its shape"));
    }
    if y_len != ys.elems() {
        return Err(fault("output length does not match its shape"));
    }
    Ok(())
}

/// Number of conv2d weights: out_c·kh·kw·in_c (checked).
fn conv_weight_len(win: &Window, in_c: usize, out_c: usize) -> Option<usize> {
    out_c
        .checked_mul(win.kh as usize)?
        .checked_mul(win.kw as usize)?
        .checked_mul(in_c)
}

/// Reference conv2d of one output pixel `(oy, ox)` into `y_px` (out_c
/// values): every tap of every output channel, padded taps read `a.pad()`.
#[allow(clippy::too_many_arguments)]
fn conv2d_pixel_ref<A: Arith>(
    a: &A,
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &Window,
    oy: usize,
    ox: usize,
    y_px: &mut [A::X],
) -> Result<(), Error> {
    let (ih, iw, ic) = (xs.h as usize, xs.w as usize, xs.c as usize);
    let (kh, kw) = (win.kh as usize, win.kw as usize);
    for (o, y) in y_px.iter_mut().enumerate() {
        let mut acc = a.start(o);
        for ky in 0..kh {
            let iy = tap(oy, ky, win.stride_h, win.dil_h, win.pad_top, ih);
            for kx in 0..kw {
                let ix = tap(ox, kx, win.stride_w, win.dil_w, win.pad_left, iw);
                let wo = ((o * kh + ky) * kw + kx) * ic;
                let w_tap = w
                    .get(wo..wo + ic)
                    .ok_or(fault("conv2d weights too short"))?;
                match (iy, ix) {
                    (Some(iy), Some(ix)) => {
                        let xo = (iy * iw + ix) * ic;
                        let x_tap = x.get(xo..xo + ic).ok_or(fault("conv2d input too short"))?;
                        acc = A::dot(acc, x_tap, w_tap);
                    }
                    _ => {
                        let p = a.pad();
                        acc = w_tap.iter().fold(acc, |acc, &w| A::mac(acc, p, w));
                    }
                }
            }
        }
        *y = a.finish(acc, o);
    }
    Ok(())
}

/// Reference conv2d (the oracle): weights `[out_c][kh][kw][in_c]`.
pub fn conv2d_ref<A: Arith>(
    a: &A,
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &Window,
    y: &mut [A::X],
    ys: Shape,
) -> Result<(), Error> {
    check_lens(x.len(), xs, y.len(), ys)?;
    if conv_weight_len(win, xs.c as usize, ys.c as usize) != Some(w.len()) {
        return Err(fault("conv2d weight length does not match the window"));
    }
    let (ow, oc) = (ys.w as usize, ys.c as usize);
    if oc == 0 {
        return Ok(());
    }
    for (p, y_px) in y.chunks_exact_mut(oc).enumerate() {
        conv2d_pixel_ref(a, x, xs, w, win, p / ow, p % ow, y_px)?;
    }
    Ok(())
}

/// Whether conv2d with this window is the pointwise case: 1×1 kernel,
/// unit stride, no padding (dilation is irrelevant for a 1×1 kernel).
pub fn is_pointwise(win: &Window) -> bool {
    win.kh == 1
        && win.kw == 1
        && win.stride_h == 1
        && win.stride_w == 1
        && win.pad_top == 0
        && win.pad_left == 0
        && win.pad_bottom == 0
        && win.pad_right == 0
}

/// Pointwise product: for every pixel of `x` (`in_c` values) and every
/// output channel `o`, `y = finish(start(o) + Σ w[o][i]·x[i])` with weights
/// `[out_c][in_c]`. This is conv2d 1×1 and, on a single pixel of
/// H·W·C values, dense.
pub fn pointwise<A: Arith>(
    a: &A,
    x: &[A::X],
    in_c: usize,
    w: &[A::W],
    y: &mut [A::X],
    out_c: usize,
) -> Result<(), Error> {
    if in_c == 0 || out_c == 0 {
        // No weights: every output is its bias alone.
        for (i, y) in y.iter_mut().enumerate() {
            let o = if out_c == 0 { 0 } else { i % out_c };
            *y = a.finish(a.start(o), o);
        }
        return Ok(());
    }
    if !x.len().is_multiple_of(in_c) || y.len() != (x.len() / in_c).saturating_mul(out_c) {
        return Err(fault("pointwise lengths do not match the channel counts"));
    }
    if Some(w.len()) != out_c.checked_mul(in_c) {
        return Err(fault(
            "pointwise weight length does not match the channel counts",
        ));
    }
    for (x_px, y_px) in x.chunks_exact(in_c).zip(y.chunks_exact_mut(out_c)) {
        for (o, (y, w_row)) in y_px.iter_mut().zip(w.chunks_exact(in_c)).enumerate() {
            *y = a.finish(A::dot(a.start(o), x_px, w_row), o);
        }
    }
    Ok(())
}

/// Fast conv2d: the pointwise case as a matrix product; otherwise interior
/// pixels without per-tap bounds checks (with unit horizontal dilation, one
/// contiguous dot product of kw·in_c per kernel row), border pixels through
/// the reference pixel.
pub fn conv2d_fast<A: Arith>(
    a: &A,
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &Window,
    y: &mut [A::X],
    ys: Shape,
) -> Result<(), Error> {
    check_lens(x.len(), xs, y.len(), ys)?;
    let (ic, oc) = (xs.c as usize, ys.c as usize);
    if conv_weight_len(win, ic, oc) != Some(w.len()) {
        return Err(fault("conv2d weight length does not match the window"));
    }
    if is_pointwise(win) && xs.h == ys.h && xs.w == ys.w {
        return pointwise(a, x, ic, w, y, oc);
    }
    let (kh, kw) = (win.kh as usize, win.kw as usize);
    let row_len = kw * ic;
    if oc == 0 || kh == 0 || row_len == 0 {
        // Degenerate windows (rejected by `check_layer`): the reference copes.
        return conv2d_ref(a, x, xs, w, win, y, ys);
    }
    let (ih, iw) = (xs.h as usize, xs.w as usize);
    let (oh, ow) = (ys.h as usize, ys.w as usize);
    let (y0, y1) = interior(oh, win.kh, win.stride_h, win.dil_h, win.pad_top, ih);
    let (x0, x1) = interior(ow, win.kw, win.stride_w, win.dil_w, win.pad_left, iw);
    for (p, y_px) in y.chunks_exact_mut(oc).enumerate() {
        let (oy, ox) = (p / ow, p % ow);
        if !(y0..y1).contains(&oy) || !(x0..x1).contains(&ox) {
            conv2d_pixel_ref(a, x, xs, w, win, oy, ox, y_px)?;
            continue;
        }
        // Interior: all taps in bounds, positions computed without checks.
        let iy0 = oy * win.stride_h as usize - win.pad_top as usize;
        let ix0 = ox * win.stride_w as usize - win.pad_left as usize;
        for (o, (y, w_o)) in y_px
            .iter_mut()
            .zip(w.chunks_exact(kh * row_len))
            .enumerate()
        {
            let mut acc = a.start(o);
            for (ky, w_row) in w_o.chunks_exact(row_len).enumerate() {
                let iy = iy0 + ky * win.dil_h as usize;
                if win.dil_w == 1 {
                    let xo = (iy * iw + ix0) * ic;
                    let x_row = x
                        .get(xo..xo + row_len)
                        .ok_or(fault("conv2d input too short"))?;
                    acc = A::dot(acc, x_row, w_row);
                } else {
                    for (kx, w_tap) in w_row.chunks_exact(ic).enumerate() {
                        let ix = ix0 + kx * win.dil_w as usize;
                        let xo = (iy * iw + ix) * ic;
                        let x_tap = x.get(xo..xo + ic).ok_or(fault("conv2d input too short"))?;
                        acc = A::dot(acc, x_tap, w_tap);
                    }
                }
            }
            *y = a.finish(acc, o);
        }
    }
    Ok(())
}

/// Reference depthwise of one output pixel (channel multiplier 1):
/// weights `[kh][kw][c]`.
#[allow(clippy::too_many_arguments)]
fn depthwise_pixel_ref<A: Arith>(
    a: &A,
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &Window,
    oy: usize,
    ox: usize,
    y_px: &mut [A::X],
) -> Result<(), Error> {
    let (ih, iw, c) = (xs.h as usize, xs.w as usize, xs.c as usize);
    let (kh, kw) = (win.kh as usize, win.kw as usize);
    for (ch, y) in y_px.iter_mut().enumerate() {
        let mut acc = a.start(ch);
        for ky in 0..kh {
            let iy = tap(oy, ky, win.stride_h, win.dil_h, win.pad_top, ih);
            for kx in 0..kw {
                let ix = tap(ox, kx, win.stride_w, win.dil_w, win.pad_left, iw);
                let wv = *w
                    .get((ky * kw + kx) * c + ch)
                    .ok_or(fault("depthwise weights too short"))?;
                let xv = match (iy, ix) {
                    (Some(iy), Some(ix)) => *x
                        .get((iy * iw + ix) * c + ch)
                        .ok_or(fault("depthwise input too short"))?,
                    _ => a.pad(),
                };
                acc = A::mac(acc, xv, wv);
            }
        }
        *y = a.finish(acc, ch);
    }
    Ok(())
}

fn depthwise_lens<A: Arith>(
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &Window,
    y: &[A::X],
    ys: Shape,
) -> Result<(), Error> {
    check_lens(x.len(), xs, y.len(), ys)?;
    if xs.c != ys.c || conv_weight_len(win, xs.c as usize, 1) != Some(w.len()) {
        return Err(fault("depthwise weight or channel count does not match"));
    }
    Ok(())
}

/// Reference depthwise (the oracle).
pub fn depthwise_ref<A: Arith>(
    a: &A,
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &Window,
    y: &mut [A::X],
    ys: Shape,
) -> Result<(), Error> {
    depthwise_lens::<A>(x, xs, w, win, y, ys)?;
    let (ow, c) = (ys.w as usize, ys.c as usize);
    if c == 0 {
        return Ok(());
    }
    for (p, y_px) in y.chunks_exact_mut(c).enumerate() {
        depthwise_pixel_ref(a, x, xs, w, win, p / ow, p % ow, y_px)?;
    }
    Ok(())
}

/// Fast depthwise: interior pixels read their taps without bounds checks
/// (one row slice of the input per tap, the channels in step with the
/// weights); border pixels go through the reference pixel.
pub fn depthwise_fast<A: Arith>(
    a: &A,
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &Window,
    y: &mut [A::X],
    ys: Shape,
) -> Result<(), Error> {
    depthwise_lens::<A>(x, xs, w, win, y, ys)?;
    let (ih, iw, c) = (xs.h as usize, xs.w as usize, xs.c as usize);
    let (oh, ow) = (ys.h as usize, ys.w as usize);
    if c == 0 {
        return Ok(());
    }
    let (y0, y1) = interior(oh, win.kh, win.stride_h, win.dil_h, win.pad_top, ih);
    let (x0, x1) = interior(ow, win.kw, win.stride_w, win.dil_w, win.pad_left, iw);
    // Channels are processed in blocks with a small accumulator array so each
    // tap is one contiguous pass over input and weights.
    const BLOCK: usize = 16;
    for (p, y_px) in y.chunks_exact_mut(c).enumerate() {
        let (oy, ox) = (p / ow, p % ow);
        if !(y0..y1).contains(&oy) || !(x0..x1).contains(&ox) {
            depthwise_pixel_ref(a, x, xs, w, win, oy, ox, y_px)?;
            continue;
        }
        let iy0 = oy * win.stride_h as usize - win.pad_top as usize;
        let ix0 = ox * win.stride_w as usize - win.pad_left as usize;
        let mut c0 = 0;
        while c0 < c {
            let n = BLOCK.min(c - c0);
            let mut acc = [a.start(c0); BLOCK];
            for (j, acc) in acc.iter_mut().enumerate().take(n) {
                *acc = a.start(c0 + j);
            }
            for (t, w_tap) in w.chunks_exact(c).enumerate() {
                let (ky, kx) = (t / win.kw as usize, t % win.kw as usize);
                let iy = iy0 + ky * win.dil_h as usize;
                let ix = ix0 + kx * win.dil_w as usize;
                let xo = (iy * iw + ix) * c + c0;
                let x_tap = x
                    .get(xo..xo + n)
                    .ok_or(fault("depthwise input too short"))?;
                let w_blk = w_tap
                    .get(c0..c0 + n)
                    .ok_or(fault("depthwise weights too short"))?;
                for ((acc, &xv), &wv) in acc.iter_mut().zip(x_tap).zip(w_blk) {
                    *acc = A::mac(*acc, xv, wv);
                }
            }
            let y_blk = y_px
                .get_mut(c0..c0 + n)
                .ok_or(fault("depthwise output too short"))?;
            for (j, (y, &acc)) in y_blk.iter_mut().zip(&acc).enumerate() {
                *y = a.finish(acc, c0 + j);
            }
            c0 += n;
        }
    }
    Ok(())
}

/// Dense: weights `[out][in]` with `in` = the input's H·W·C in HWC order.
pub fn dense<A: Arith>(a: &A, x: &[A::X], w: &[A::W], y: &mut [A::X]) -> Result<(), Error> {
    let out = y.len();
    pointwise(a, x, x.len(), w, y, out)
}

/// Reference dense (the oracle for `dense`): each output one dot product.
pub fn dense_ref<A: Arith>(a: &A, x: &[A::X], w: &[A::W], y: &mut [A::X]) -> Result<(), Error> {
    if Some(w.len()) != y.len().checked_mul(x.len()) {
        return Err(fault("dense weight length does not match"));
    }
    for (o, y) in y.iter_mut().enumerate() {
        let mut acc = a.start(o);
        for (i, &xv) in x.iter().enumerate() {
            let wv = *w
                .get(o * x.len() + i)
                .ok_or(fault("dense weights too short"))?;
            acc = A::mac(acc, xv, wv);
        }
        *y = a.finish(acc, o);
    }
    Ok(())
}

/// Max or average pooling over the window (the only form; pooling has no
/// separate fast path). Padded taps are skipped; average divides by the
/// number of in-bounds taps.
pub fn pool<P: Pool>(
    p: &P,
    x: &[P::X],
    xs: Shape,
    win: &Window,
    y: &mut [P::X],
    ys: Shape,
) -> Result<(), Error> {
    check_lens(x.len(), xs, y.len(), ys)?;
    if xs.c != ys.c {
        return Err(fault("pooling changes the channel count"));
    }
    let (ih, iw, c) = (xs.h as usize, xs.w as usize, xs.c as usize);
    let ow = ys.w as usize;
    if c == 0 {
        return Ok(());
    }
    for (px, y_px) in y.chunks_exact_mut(c).enumerate() {
        let (oy, ox) = (px / ow, px % ow);
        for (ch, y) in y_px.iter_mut().enumerate() {
            let mut acc = p.init();
            let mut count = 0u32;
            for ky in 0..win.kh as usize {
                let Some(iy) = tap(oy, ky, win.stride_h, win.dil_h, win.pad_top, ih) else {
                    continue;
                };
                for kx in 0..win.kw as usize {
                    let Some(ix) = tap(ox, kx, win.stride_w, win.dil_w, win.pad_left, iw) else {
                        continue;
                    };
                    let xv = *x
                        .get((iy * iw + ix) * c + ch)
                        .ok_or(fault("pooling input too short"))?;
                    acc = p.step(acc, xv);
                    count = count.saturating_add(1);
                }
            }
            *y = p.finish(acc, count);
        }
    }
    Ok(())
}
