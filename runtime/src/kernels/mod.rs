//! The loop nests of the windowed and matrix ops, written once and generic
//! over the element arithmetic (`Arith` for conv2d/depthwise/dense, `Pool`
//! for pooling); `int8` and `fp16` supply the arithmetic and the elementwise ops.
//!
//! Each loop nest has a straightforward reference form (`reference`, the
//! oracles) and a fast form that the tests check against it byte for byte;
//! int8 conv2d and depthwise on cores with the DSP extension go through the
//! micro-kernel drivers (`tile`, kernels in `dsp`; 3×3 depthwise with long
//! stride-1 rows through the row driver in `depthwise`) instead, so there
//! int8 never links `conv2d_fast`. The fast forms
//! here: conv2d and dense are matrix-vector products over four output
//! channels at a time (conv2d gathers each pixel's window into a stack
//! patch first), depthwise
//! and pooling work on up to 32 channels per pass, and the in-bounds taps of
//! a pixel are found once per axis (`axis_range`) instead of per tap.

pub mod depthwise;
#[cfg(midge_dsp)]
pub mod dsp;
pub mod fp16;
pub mod int8;
pub mod reference;
pub mod tile;

pub use reference::{conv2d_ref, dense_ref, depthwise_ref, pool_ref};

use crate::error::{Error, Text};
use crate::repr::{Shape, Window};

/// Error for a state `check_layer` rules out (slice lengths that disagree
/// with the shapes). The layer index is not known here; `exec::at_layer`
/// fills it in.
pub(crate) const fn fault(problem: Text) -> Error {
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
    /// Per-output-channel constants of `finish` (int8: the requantization
    /// constants), worked out once per block of channels.
    type Prep: Copy;
    /// The constants of output channel `o`.
    fn prep(&self, o: usize) -> Self::Prep;
    /// `finish(acc, o)` given `prep(o)`.
    fn finish_prep(&self, acc: Self::Acc, p: &Self::Prep) -> Self::X;
    /// Whether the fast paths use their multi-accumulator loops (several
    /// output channels per pass, three taps per pass). Cheap arithmetic
    /// (int8) gains from them; where each product costs a call anyway
    /// (fp16 without hardware half floats) the plain loops are as fast and
    /// much smaller. Either way the sums run in the same order.
    const GROUPED: bool = false;
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

/// Whether output position `o` has an in-bounds tap along one axis (stops
/// at the first: a parse-time check, so a short loop).
pub fn has_tap_in_bounds(o: usize, k: u16, stride: u16, dil: u16, pad_lo: u16, len: usize) -> bool {
    (0..k as usize).any(|t| tap(o, t, stride, dil, pad_lo, len).is_some())
}

/// The taps `k` in `lo..hi` of output position `o` along one axis are the
/// in-bounds ones (taps are monotone in `k`, so they form one range; padded
/// taps lie before `lo` and from `hi` on). Agrees with `tap`; computed
/// without division when the whole window is inside or `dil` is 1.
#[inline]
pub fn axis_range(
    o: usize,
    k: usize,
    stride: u16,
    dil: u16,
    pad_lo: u16,
    len: usize,
) -> (usize, usize) {
    let base = o as i64 * stride as i64 - pad_lo as i64;
    let last = base + k.saturating_sub(1) as i64 * dil as i64;
    if base >= 0 && last < len as i64 {
        return (0, k);
    }
    axis_range_edge(base, k, dil, len)
}

/// `axis_range` of a window that reaches into the padding (`base`: input
/// position of tap 0). Out of line: one copy for all callers, and it runs
/// only on border pixels.
#[inline(never)]
fn axis_range_edge(base: i64, k: usize, dil: u16, len: usize) -> (usize, usize) {
    let (len, d) = (len as i64, dil as i64);
    if d == 0 {
        // Every tap reads the same position (only unchecked layers).
        return if base >= 0 && base < len {
            (0, k)
        } else {
            (0, 0)
        };
    }
    // First k with base + k·d ≥ 0, and first k with base + k·d ≥ len:
    // min(⌈n / d⌉, k) for n = −base and n = len − base.
    let first_at = |n: i64| -> usize {
        if n <= 0 {
            return 0;
        }
        // ⌈n / d⌉ ≥ k exactly when n > (k − 1)·d; only smaller n divide.
        // k is a window side (u16) and d ≤ 65,535, so those n fit 32 bits
        // and no 64-bit division helper is linked; the u32 test only keeps
        // a caller with a larger k from panicking.
        let cap = (k as i64).saturating_sub(1).saturating_mul(d);
        if n > cap || n > u32::MAX as i64 {
            return k;
        }
        (n as u32).div_ceil(d as u32) as usize
    };
    let (lo, hi) = (first_at(-base), first_at(len - base));
    (lo, hi.max(lo))
}

/// `(oy·stride_h + ky·dil_h − pad_top) · iw + …` style input position of a
/// tap already known to be in bounds. Wrapping arithmetic: for an in-bounds
/// tap the true value fits, so the result is exact; for anything else the
/// caller's checked slicing catches it.
#[inline]
pub(crate) fn pos(o: usize, k: usize, stride: u16, dil: u16, pad_lo: u16) -> usize {
    o.wrapping_mul(stride as usize)
        .wrapping_add(k.wrapping_mul(dil as usize))
        .wrapping_sub(pad_lo as usize)
}

/// The full-input window of global average pooling (`h`×`w`, unit stride
/// and dilation, no padding).
pub const fn global_window(h: u16, w: u16) -> Window {
    Window::new((h, w), (1, 1), (1, 1), [0; 4])
}

/// Checks the slice lengths every loop nest relies on.
pub(crate) fn check_lens(x_len: usize, xs: Shape, y_len: usize, ys: Shape) -> Result<(), Error> {
    if x_len != xs.elems() {
        return Err(fault(text!("input length does not match its shape")));
    }
    if y_len != ys.elems() {
        return Err(fault(text!("output length does not match its shape")));
    }
    Ok(())
}

/// Number of conv2d weights: out_c·kh·kw·in_c (checked).
pub(crate) fn conv_weight_len(win: &Window, in_c: usize, out_c: usize) -> Option<usize> {
    out_c
        .checked_mul(win.kh as usize)?
        .checked_mul(win.kw as usize)?
        .checked_mul(in_c)
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
        return Err(fault(text!(
            "pointwise lengths do not match the channel counts"
        )));
    }
    if Some(w.len()) != out_c.checked_mul(in_c) {
        return Err(fault(text!(
            "pointwise weight length does not match the channel counts"
        )));
    }
    for (x_px, y_px) in x.chunks_exact(in_c).zip(y.chunks_exact_mut(out_c)) {
        matvec(a, x_px, w, y_px);
    }
    Ok(())
}

/// Output channels `matvec` computes in one pass (each input value is
/// loaded once for all of them; four accumulators stay in registers).
const GROUP: usize = 4;

/// `y[o] = finish(start(o) + Σ_i x[i]·w[o][i])` for every `o`, weights
/// `[y.len()][x.len()]` (the caller checks `w.len() = y.len()·x.len()`).
/// Output channels go `GROUP` at a time; each channel still sums its
/// products in index order, so the result is the reference's bit for bit.
// Not inlined: the loop gets a function (and registers) of its own, and
// one copy serves pointwise, conv2d and dense.
#[inline(never)]
fn matvec<A: Arith>(a: &A, x: &[A::X], w: &[A::W], y: &mut [A::X]) {
    let k = x.len();
    if k == 0 {
        for (o, y) in y.iter_mut().enumerate() {
            *y = a.finish(a.start(o), o);
        }
        return;
    }
    let mut o = 0;
    let (y, w) = if A::GROUPED {
        let mut ys = y.chunks_exact_mut(GROUP);
        let mut ws = w.chunks_exact(GROUP * k);
        for (y4, w4) in (&mut ys).zip(&mut ws) {
            let (w0, r) = w4.split_at(k);
            let (w1, r) = r.split_at(k);
            let (w2, w3) = r.split_at(k);
            let mut acc = [a.start(o), a.start(o + 1), a.start(o + 2), a.start(o + 3)];
            for ((((&xv, &v0), &v1), &v2), &v3) in x.iter().zip(w0).zip(w1).zip(w2).zip(w3) {
                acc[0] = A::mac(acc[0], xv, v0);
                acc[1] = A::mac(acc[1], xv, v1);
                acc[2] = A::mac(acc[2], xv, v2);
                acc[3] = A::mac(acc[3], xv, v3);
            }
            for (j, (y, &acc)) in y4.iter_mut().zip(&acc).enumerate() {
                *y = a.finish(acc, o + j);
            }
            o += GROUP;
        }
        (ys.into_remainder(), ws.remainder())
    } else {
        (y, w)
    };
    for (y, w_row) in y.iter_mut().zip(w.chunks_exact(k)) {
        *y = a.finish(A::dot(a.start(o), x, w_row), o);
        o += 1;
    }
}

/// Sets `acc[j]` to the start value (bias) of output channel `o0 + j`.
#[inline]
pub(crate) fn start_all<A: Arith>(a: &A, acc: &mut [A::Acc], o0: usize) {
    for (j, acc) in acc.iter_mut().enumerate() {
        *acc = a.start(o0 + j);
    }
}

/// `y[j] = finish(acc[j])` as output channel `o0 + j`.
#[inline]
pub(crate) fn finish_all<A: Arith>(a: &A, acc: &[A::Acc], o0: usize, y: &mut [A::X]) {
    for (j, (y, &acc)) in y.iter_mut().zip(acc).enumerate() {
        *y = a.finish(acc, o0 + j);
    }
}

/// `n` elements of `s` from `at`, or `None` (no overflow, no panic).
#[inline]
pub(crate) fn part<T>(s: &[T], at: usize, n: usize) -> Option<&[T]> {
    s.get(at..)?.get(..n)
}

/// Largest conv2d window (kh·kw·in_c values) gathered into a stack patch;
/// bigger windows take the row path.
const PATCH: usize = 256;

/// Fast conv2d: the pointwise case as a matrix product; otherwise each
/// output pixel's window is gathered once into a stack patch (padding filled
/// with the pad value) and multiplied by the weights several output channels
/// at a time, in bands of `PATCH` values. Same sums, same order as the oracle.
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
        return Err(fault(text!(
            "conv2d weight length does not match the window"
        )));
    }
    if is_pointwise(win) && xs.h == ys.h && xs.w == ys.w {
        return pointwise(a, x, ic, w, y, oc);
    }
    let k_len = win.kh as usize * win.kw as usize * ic;
    if oc == 0 || ys.w == 0 {
        return Ok(());
    }
    if k_len == 0 {
        // No weights (rejected by `check_layer`): every output is its bias.
        for y_px in y.chunks_exact_mut(oc) {
            matvec(a, &[], w, y_px);
        }
        return Ok(());
    }
    if k_len <= PATCH {
        // Gather each pixel's window (padded taps = `pad()`) in the weights'
        // [kh][kw][in_c] order, then one matrix-vector product.
        let pad = a.pad();
        let mut buf = [pad; PATCH];
        let patch = buf.get_mut(..k_len).ok_or(fault(text!("conv2d patch")))?;
        let row_len = win.kw as usize * ic;
        return pixels_fast(xs, win, y, ys, |at, y_px| {
            let (kx0, kx1) = at.rx;
            if !at.full(win) {
                patch.fill(pad);
            }
            for (ky, dst) in patch.chunks_exact_mut(row_len).enumerate() {
                if ky < at.ry.0 || ky >= at.ry.1 || kx0 == kx1 {
                    continue;
                }
                let row = pos(at.oy, ky, win.stride_h, win.dil_h, win.pad_top) * at.iw;
                if win.dil_w == 1 {
                    let n = (kx1 - kx0) * ic;
                    let ix = pos(at.ox, kx0, win.stride_w, 1, win.pad_left);
                    let src = part(x, (row + ix) * ic, n);
                    let dst = dst.get_mut(kx0 * ic..).and_then(|d| d.get_mut(..n));
                    match (src, dst) {
                        (Some(src), Some(dst)) => dst.copy_from_slice(src),
                        _ => return Err(fault(text!("conv2d input too short"))),
                    }
                } else {
                    for (kx, dst) in dst.chunks_exact_mut(ic).enumerate() {
                        if kx < kx0 || kx >= kx1 {
                            continue;
                        }
                        let ix = pos(at.ox, kx, win.stride_w, win.dil_w, win.pad_left);
                        let src = part(x, (row + ix) * ic, ic)
                            .ok_or(fault(text!("conv2d input too short")))?;
                        dst.copy_from_slice(src);
                    }
                }
            }
            matvec(a, patch, w, y_px);
            Ok(())
        });
    }
    // Windows longer than the patch: gathered and summed in bands of
    // `PATCH` values, `ACCS` output channels at a time.
    let pad = a.pad();
    let mut buf = [pad; PATCH];
    let mut accs = [a.start(0); ACCS];
    // With one block of output channels, its `finish` constants once.
    let mut preps = [a.prep(0); ACCS];
    let one_block = oc <= ACCS;
    if one_block {
        for (o, p) in preps.iter_mut().take(oc).enumerate() {
            *p = a.prep(o);
        }
    }
    pixels_fast(xs, win, y, ys, |at, y_px| {
        for (b, y_blk) in y_px.chunks_mut(ACCS).enumerate() {
            let o0 = b * ACCS;
            let acc = accs
                .get_mut(..y_blk.len())
                .ok_or(fault(text!("conv2d block")))?;
            start_all(a, acc, o0);
            let mut k0 = 0;
            while k0 < k_len {
                let n = PATCH.min(k_len - k0);
                let patch = buf.get_mut(..n).ok_or(fault(text!("conv2d patch")))?;
                gather(x, pad, win, at, k0, patch)?;
                let w_blk = w.get(o0 * k_len + k0..).unwrap_or(&[]);
                dot_rows::<A>(acc, patch, w_blk, k_len)?;
                k0 += n;
            }
            if one_block {
                for ((y, &s), p) in y_blk.iter_mut().zip(acc.iter()).zip(&preps) {
                    *y = a.finish_prep(s, p);
                }
            } else {
                finish_all(a, acc, o0, y_blk);
            }
        }
        Ok(())
    })
}

/// Output channels per pass of the banded conv2d: their accumulators live
/// in a stack array of this many entries.
const ACCS: usize = 64;

/// `acc[j] += Σ_i x[i]·w[j·stride + i]` for every `j` (weight rows `stride`
/// apart, `x.len()` values read from each). With `A::GROUPED`, `GROUP` rows
/// per pass. Each accumulator adds its products in index order.
// Not inlined: the loop gets a function (and registers) of its own, and one
// copy serves pointwise, conv2d and dense.
#[inline(never)]
fn dot_rows<A: Arith>(
    acc: &mut [A::Acc],
    x: &[A::X],
    w: &[A::W],
    stride: usize,
) -> Result<(), Error> {
    let k = x.len();
    let row =
        |j: usize| part(w, j.wrapping_mul(stride), k).ok_or(fault(text!("weights too short")));
    let mut j: usize = 0;
    let rest = if A::GROUPED {
        let mut groups = acc.chunks_exact_mut(GROUP);
        let span = stride.saturating_mul(GROUP - 1).saturating_add(k);
        for acc4 in &mut groups {
            // One bounds check for the four rows; `zip` with `x` reads
            // only the first `k` values of each.
            let blk =
                part(w, j.wrapping_mul(stride), span).ok_or(fault(text!("weights too short")))?;
            let (w0, r) = blk.split_at(stride.min(blk.len()));
            let (w1, r) = r.split_at(stride.min(r.len()));
            let (w2, w3) = r.split_at(stride.min(r.len()));
            let mut s = [acc4[0], acc4[1], acc4[2], acc4[3]];
            for ((((&xv, &v0), &v1), &v2), &v3) in x.iter().zip(w0).zip(w1).zip(w2).zip(w3) {
                s[0] = A::mac(s[0], xv, v0);
                s[1] = A::mac(s[1], xv, v1);
                s[2] = A::mac(s[2], xv, v2);
                s[3] = A::mac(s[3], xv, v3);
            }
            acc4.copy_from_slice(&s);
            j += GROUP;
        }
        groups.into_remainder()
    } else {
        acc
    };
    for acc in rest.iter_mut() {
        *acc = A::dot(*acc, x, row(j)?);
        j += 1;
    }
    Ok(())
}

/// Window values `k0..k0+patch.len()` (flat `[kh][kw][in_c]` index) of the
/// output pixel `at` into `patch`; padded taps read `pad`.
pub(crate) fn gather<X: Copy>(
    x: &[X],
    pad: X,
    win: &Window,
    at: &Px,
    k0: usize,
    patch: &mut [X],
) -> Result<(), Error> {
    let (ic, k1) = (at.c, k0 + patch.len());
    let row_len = win.kw as usize * ic;
    if !at.full(win) {
        patch.fill(pad);
    }
    let (kx0, kx1) = at.rx;
    // Copies the flat range lo..hi (within one tap run that starts at flat
    // index `run` and input offset `base`) into the patch.
    let mut put = |run: usize, base: usize, lo: usize, hi: usize| -> Result<(), Error> {
        let (lo, hi) = (lo.max(k0), hi.min(k1));
        if lo >= hi {
            return Ok(());
        }
        let src = part(x, base + (lo - run), hi - lo);
        let dst = patch.get_mut(lo - k0..hi - k0);
        match (src, dst) {
            (Some(src), Some(dst)) => {
                dst.copy_from_slice(src);
                Ok(())
            }
            _ => Err(fault(text!("conv2d input too short"))),
        }
    };
    for ky in at.ry.0..at.ry.1 {
        let row = ky * row_len;
        if row >= k1 || row + row_len <= k0 || kx0 >= kx1 {
            continue;
        }
        let iy = pos(at.oy, ky, win.stride_h, win.dil_h, win.pad_top);
        if win.dil_w == 1 {
            // The in-bounds taps of a row are one contiguous input run.
            let ix = pos(at.ox, kx0, win.stride_w, 1, win.pad_left);
            let run = row + kx0 * ic;
            put(run, (iy * at.iw + ix) * ic, run, row + kx1 * ic)?;
        } else {
            for kx in kx0..kx1 {
                let ix = pos(at.ox, kx, win.stride_w, win.dil_w, win.pad_left);
                let run = row + kx * ic;
                put(run, (iy * at.iw + ix) * ic, run, run + ic)?;
            }
        }
    }
    Ok(())
}

pub(crate) fn depthwise_lens<A: Arith>(
    x: &[A::X],
    xs: Shape,
    w: &[A::W],
    win: &Window,
    y: &[A::X],
    ys: Shape,
) -> Result<(), Error> {
    check_lens(x.len(), xs, y.len(), ys)?;
    if xs.c != ys.c || conv_weight_len(win, xs.c as usize, 1) != Some(w.len()) {
        return Err(fault(text!(
            "depthwise weight or channel count does not match"
        )));
    }
    Ok(())
}

/// Channels per pass of the fast depthwise and pooling loops: their
/// accumulators live in a stack array of this many entries.
pub(crate) const CHUNK: usize = 32;

/// Fast depthwise: for up to `CHUNK` channels at a time (their `finish`
/// constants worked out once), per output pixel the in-bounds tap ranges
/// are found once (`axis_range`); then each tap is
/// one pass over contiguous input, weights and accumulators. Every channel
/// sums its taps in the reference order (padded taps read `pad()`), so the
/// result is the reference's bit for bit.
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
    let c = xs.c as usize;
    for c0 in (0..c).step_by(CHUNK) {
        let n = CHUNK.min(c - c0);
        let mut buf = [a.prep(0); CHUNK];
        for (i, p) in buf.iter_mut().take(n).enumerate() {
            *p = a.prep(c0 + i);
        }
        let preps = buf.get(..n).ok_or(fault(text!("depthwise chunk")))?;
        pixels_fast(xs, win, y, ys, |at, y_px| {
            let y_chunk = y_px
                .get_mut(c0..c0 + n)
                .ok_or(fault(text!("depthwise output too short")))?;
            depthwise_chunk(a, x, w, win, at, c0, y_chunk, preps)
        })?;
    }
    Ok(())
}

/// Depthwise of channels `c0..c0+y.len()` (at most `CHUNK`; `preps` their
/// `Arith::prep` constants) of one output pixel into `y`. The taps of a kernel row go three at a time through
/// `mac3` (one load and store of each accumulator per three taps); padded
/// taps read a slice of `pad()` values.
#[allow(clippy::too_many_arguments)]
#[inline(never)]
pub(crate) fn depthwise_chunk<A: Arith>(
    a: &A,
    x: &[A::X],
    w: &[A::W],
    win: &Window,
    at: &Px,
    c0: usize,
    y: &mut [A::X],
    preps: &[A::Prep],
) -> Result<(), Error> {
    let n = y.len();
    let mut buf = [a.start(0); CHUNK];
    let acc = buf.get_mut(..n).ok_or(fault(text!("depthwise chunk")))?;
    start_all(a, acc, c0);
    let pads = [a.pad(); CHUNK];
    let pads = pads.get(..n).ok_or(fault(text!("depthwise chunk")))?;
    let kw = win.kw as usize;
    // Input slice of tap (ky, kx): the input or, for a padded tap, `pads`.
    let x_tap = |ky: usize, kx: usize| -> Result<&[A::X], Error> {
        if (at.ry.0..at.ry.1).contains(&ky) && (at.rx.0..at.rx.1).contains(&kx) {
            let iy = pos(at.oy, ky, win.stride_h, win.dil_h, win.pad_top);
            let ix = pos(at.ox, kx, win.stride_w, win.dil_w, win.pad_left);
            part(x, (iy * at.iw + ix) * at.c + c0, n)
                .ok_or(fault(text!("depthwise input too short")))
        } else {
            Ok(pads)
        }
    };
    let w_tap = |t: usize| -> Result<&[A::W], Error> {
        part(w, t * at.c + c0, n).ok_or(fault(text!("depthwise weights too short")))
    };
    for ky in 0..win.kh as usize {
        let mut kx = 0;
        while A::GROUPED && kx + 3 <= kw {
            let t = ky * kw + kx;
            let xs = [x_tap(ky, kx)?, x_tap(ky, kx + 1)?, x_tap(ky, kx + 2)?];
            let ws = [w_tap(t)?, w_tap(t + 1)?, w_tap(t + 2)?];
            mac3::<A>(acc, xs, ws);
            kx += 3;
        }
        while kx < kw {
            let (xv, wv) = (x_tap(ky, kx)?, w_tap(ky * kw + kx)?);
            for ((acc, &xv), &wv) in acc.iter_mut().zip(xv).zip(wv) {
                *acc = A::mac(*acc, xv, wv);
            }
            kx += 1;
        }
    }
    for ((y, &acc), p) in y.iter_mut().zip(acc.iter()).zip(preps) {
        *y = a.finish_prep(acc, p);
    }
    Ok(())
}

/// `acc[j] += x0[j]·w0[j] + x1[j]·w1[j] + x2[j]·w2[j]`, the three products
/// added in that order (the reference's tap order).
#[inline]
fn mac3<A: Arith>(acc: &mut [A::Acc], x: [&[A::X]; 3], w: [&[A::W]; 3]) {
    let [x0, x1, x2] = x;
    let [w0, w1, w2] = w;
    for (((((acc, &x0), &x1), &x2), &w0), (&w1, &w2)) in acc
        .iter_mut()
        .zip(x0)
        .zip(x1)
        .zip(x2)
        .zip(w0)
        .zip(w1.iter().zip(w2))
    {
        let v = A::mac(*acc, x0, w0);
        let v = A::mac(v, x1, w1);
        *acc = A::mac(v, x2, w2);
    }
}

/// Dense: weights `[out][in]` with `in` = the input's H·W·C in HWC order.
pub fn dense<A: Arith>(a: &A, x: &[A::X], w: &[A::W], y: &mut [A::X]) -> Result<(), Error> {
    let out = y.len();
    pointwise(a, x, x.len(), w, y, out)
}

/// Max or average pooling over the window: the in-bounds tap ranges are
/// found once per output pixel (`axis_range`); then, for up to `CHUNK`
/// channels at a time, each tap is one pass over contiguous input and
/// accumulators, in the reference order. Padded taps are skipped; average
/// divides by the number of in-bounds taps. Agrees with `pool_ref` bit for
/// bit.
pub fn pool<P: Pool>(
    p: &P,
    x: &[P::X],
    xs: Shape,
    win: &Window,
    y: &mut [P::X],
    ys: Shape,
) -> Result<(), Error> {
    pool_lens(x.len(), xs, y.len(), ys)?;
    pixels_fast(xs, win, y, ys, |at, y_px| {
        for (k, y_chunk) in y_px.chunks_mut(CHUNK).enumerate() {
            pool_chunk(p, x, win, at, k * CHUNK, y_chunk)?;
        }
        Ok(())
    })
}

/// One output pixel of a windowed op: its position, in-bounds tap ranges
/// (`axis_range` of rows and columns), the input width and channel count.
pub(crate) struct Px {
    pub(crate) oy: usize,
    pub(crate) ox: usize,
    pub(crate) ry: (usize, usize),
    pub(crate) rx: (usize, usize),
    pub(crate) iw: usize,
    pub(crate) c: usize,
}

impl Px {
    /// Whether every tap of the window is in bounds (no padding to fill).
    #[inline]
    fn full(&self, win: &Window) -> bool {
        self.ry == (0, win.kh as usize) && self.rx == (0, win.kw as usize)
    }
}

/// Walk of the fast windowed ops over the output pixels (`ys.c` values
/// each), row by row: the in-bounds tap ranges of a row are found once,
/// those of a column once per pixel, then `f` computes the pixel.
#[inline(always)]
pub(crate) fn pixels_fast<X>(
    xs: Shape,
    win: &Window,
    y: &mut [X],
    ys: Shape,
    mut f: impl FnMut(&Px, &mut [X]) -> Result<(), Error>,
) -> Result<(), Error> {
    let (ih, iw, ic) = (xs.h as usize, xs.w as usize, xs.c as usize);
    let (kh, kw, ow, oc) = (
        win.kh as usize,
        win.kw as usize,
        ys.w as usize,
        ys.c as usize,
    );
    if oc == 0 || ow == 0 {
        return Ok(());
    }
    for (oy, y_row) in y.chunks_exact_mut(ow * oc).enumerate() {
        let ry = axis_range(oy, kh, win.stride_h, win.dil_h, win.pad_top, ih);
        for (ox, y_px) in y_row.chunks_exact_mut(oc).enumerate() {
            let rx = axis_range(ox, kw, win.stride_w, win.dil_w, win.pad_left, iw);
            let at = Px {
                oy,
                ox,
                ry,
                rx,
                iw,
                c: ic,
            };
            f(&at, y_px)?;
        }
    }
    Ok(())
}

/// Pooling of channels `c0..c0+y.len()` (at most `CHUNK`) of one output
/// pixel into `y`.
#[inline(never)]
fn pool_chunk<P: Pool>(
    p: &P,
    x: &[P::X],
    win: &Window,
    at: &Px,
    c0: usize,
    y: &mut [P::X],
) -> Result<(), Error> {
    let n = y.len();
    let mut buf = [p.init(); CHUNK];
    let acc = buf.get_mut(..n).ok_or(fault(text!("pooling chunk")))?;
    for ky in at.ry.0..at.ry.1 {
        let iy = pos(at.oy, ky, win.stride_h, win.dil_h, win.pad_top);
        for kx in at.rx.0..at.rx.1 {
            let ix = pos(at.ox, kx, win.stride_w, win.dil_w, win.pad_left);
            let x_t = part(x, (iy * at.iw + ix) * at.c + c0, n)
                .ok_or(fault(text!("pooling input too short")))?;
            for (acc, &xv) in acc.iter_mut().zip(x_t) {
                *acc = p.step(*acc, xv);
            }
        }
    }
    // At most 65535² taps, so the count fits.
    let count = ((at.ry.1 - at.ry.0) * (at.rx.1 - at.rx.0)) as u32;
    for (y, &acc) in y.iter_mut().zip(acc.iter()) {
        *y = p.finish(acc, count);
    }
    Ok(())
}

/// Checks the slice lengths and channel counts of pooling.
pub(crate) fn pool_lens(x_len: usize, xs: Shape, y_len: usize, ys: Shape) -> Result<(), Error> {
    check_lens(x_len, xs, y_len, ys)?;
    if xs.c != ys.c {
        return Err(fault(text!("pooling changes the channel count")));
    }
    Ok(())
}
