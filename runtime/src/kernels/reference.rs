//! The reference loop nests (the oracles): every tap of every output through
//! `tap`, in `[kh][kw][in_c]` order, one output value at a time. The fast
//! kernels and the micro-kernel driver are tested against these byte for byte.

use super::{check_lens, conv_weight_len, depthwise_lens, fault, pool_lens, tap, Arith, Pool};
use crate::error::Error;
use crate::repr::{Shape, Window};

/// Reference walk over the output pixels: `f(oy, ox, y_px)` for each pixel
/// of `c` values of an output `ow` pixels wide, in row-major order.
fn pixels_ref<X>(
    y: &mut [X],
    ow: usize,
    c: usize,
    mut f: impl FnMut(usize, usize, &mut [X]) -> Result<(), Error>,
) -> Result<(), Error> {
    if c == 0 {
        return Ok(());
    }
    for (p, y_px) in y.chunks_exact_mut(c).enumerate() {
        f(p / ow, p % ow, y_px)?;
    }
    Ok(())
}

/// Reference walk over the taps of output pixel `(oy, ox)` (the oracle's
/// `tap`, every tap in `[kh][kw]` order): `(t, input pixel)` with `t =
/// ky·kw + kx` and the input pixel `iy·iw + ix` it reads, `None` for a
/// padded tap.
fn taps_ref(
    xs: Shape,
    win: &Window,
    oy: usize,
    ox: usize,
) -> impl Iterator<Item = (usize, Option<usize>)> + '_ {
    let (ih, iw) = (xs.h as usize, xs.w as usize);
    let kw = win.kw as usize;
    (0..win.kh as usize).flat_map(move |ky| {
        let iy = tap(oy, ky, win.stride_h, win.dil_h, win.pad_top, ih);
        (0..kw).map(move |kx| {
            let ix = tap(ox, kx, win.stride_w, win.dil_w, win.pad_left, iw);
            let px = match (iy, ix) {
                (Some(iy), Some(ix)) => Some(iy * iw + ix),
                _ => None,
            };
            (ky * kw + kx, px)
        })
    })
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
    let ic = xs.c as usize;
    let taps = win.kh as usize * win.kw as usize;
    for (o, y) in y_px.iter_mut().enumerate() {
        let mut acc = a.start(o);
        for (t, px) in taps_ref(xs, win, oy, ox) {
            let wo = (o * taps + t) * ic;
            let w_tap = w
                .get(wo..wo + ic)
                .ok_or(fault(text!("conv2d weights too short")))?;
            match px {
                Some(px) => {
                    let xo = px * ic;
                    let x_tap = x
                        .get(xo..xo + ic)
                        .ok_or(fault(text!("conv2d input too short")))?;
                    acc = A::dot(acc, x_tap, w_tap);
                }
                None => {
                    let p = a.pad();
                    acc = w_tap.iter().fold(acc, |acc, &w| A::mac(acc, p, w));
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
        return Err(fault(text!(
            "conv2d weight length does not match the window"
        )));
    }
    pixels_ref(y, ys.w as usize, ys.c as usize, |oy, ox, y_px| {
        conv2d_pixel_ref(a, x, xs, w, win, oy, ox, y_px)
    })
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
    let c = xs.c as usize;
    for (ch, y) in y_px.iter_mut().enumerate() {
        let mut acc = a.start(ch);
        for (t, px) in taps_ref(xs, win, oy, ox) {
            let wv = *w
                .get(t * c + ch)
                .ok_or(fault(text!("depthwise weights too short")))?;
            let xv = match px {
                Some(px) => *x
                    .get(px * c + ch)
                    .ok_or(fault(text!("depthwise input too short")))?,
                None => a.pad(),
            };
            acc = A::mac(acc, xv, wv);
        }
        *y = a.finish(acc, ch);
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
    pixels_ref(y, ys.w as usize, ys.c as usize, |oy, ox, y_px| {
        depthwise_pixel_ref(a, x, xs, w, win, oy, ox, y_px)
    })
}

/// Reference dense (the oracle for `dense`): each output one dot product.
pub fn dense_ref<A: Arith>(a: &A, x: &[A::X], w: &[A::W], y: &mut [A::X]) -> Result<(), Error> {
    if Some(w.len()) != y.len().checked_mul(x.len()) {
        return Err(fault(text!("dense weight length does not match")));
    }
    for (o, y) in y.iter_mut().enumerate() {
        let mut acc = a.start(o);
        for (i, &xv) in x.iter().enumerate() {
            let wv = *w
                .get(o * x.len() + i)
                .ok_or(fault(text!("dense weights too short")))?;
            acc = A::mac(acc, xv, wv);
        }
        *y = a.finish(acc, o);
    }
    Ok(())
}

/// Reference max or average pooling (the oracle for `pool`): every tap of
/// every channel through `tap`. Padded taps are skipped; average divides by
/// the number of in-bounds taps.
pub fn pool_ref<P: Pool>(
    p: &P,
    x: &[P::X],
    xs: Shape,
    win: &Window,
    y: &mut [P::X],
    ys: Shape,
) -> Result<(), Error> {
    pool_lens(x.len(), xs, y.len(), ys)?;
    let c = xs.c as usize;
    pixels_ref(y, ys.w as usize, c, |oy, ox, y_px| {
        for (ch, y) in y_px.iter_mut().enumerate() {
            let mut acc = p.init();
            let mut count = 0u32;
            for (_, px) in taps_ref(xs, win, oy, ox) {
                let Some(px) = px else {
                    continue;
                };
                let xv = *x
                    .get(px * c + ch)
                    .ok_or(fault(text!("pooling input too short")))?;
                acc = p.step(acc, xv);
                count = count.saturating_add(1);
            }
            *y = p.finish(acc, count);
        }
        Ok(())
    })
}
