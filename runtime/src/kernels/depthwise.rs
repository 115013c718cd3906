//! int8 depthwise 3×3 through widened input rows: the row-pair layout, the
//! `RowKernel` trait (one channel's output row) with its portable form (the
//! oracle of the DSP kernel), and the driver that widens each input row once
//! per group of 4 channels and requantizes. Other windows go to `tile`.
//!
//! Row-pair layout. Output pixels are taken in strips of at most `STRIP`
//! along a row. Per channel of a group there is a plane of `PLANE` words:
//! three slot rows of `RP` words and the accumulator row (`ACC`). A slot
//! holds one input row of the strip as sign-extended 16-bit pairs (low half
//! first): with horizontal stride 1 pair `k` is `(v[j0 + k], v[j0 + k + 1])`,
//! with stride 2 `(v[j0 + 2k], v[j0 + 2k + 1])`, where `v[j]` is input column
//! `j` (the input zero point outside the input) and `j0` the strip's first
//! padded column. Output pixel `p` of the strip then reads pair `p` (taps 0
//! and 1: one dual multiply-accumulate) and the low half of pair `p + d`
//! (tap 2), `d` = 2 for stride 1 and 1 for stride 2. Input rows in the
//! vertical padding are never widened: their weights are zero in the kernel
//! and `zp·Σw` of their row is added to the bias instead (exact: every sum
//! wraps in i32, so the order does not matter).

use super::{depthwise_lens, fault, int8::Int8Arith, part, tile, Arith};
use crate::error::Error;
use crate::repr::{Shape, Window};
use crate::requant::Rq;

/// Words of one slot row: pairs of one input row of a strip.
pub const RP: usize = 52;
/// Offset (words) of a plane's accumulator row.
pub const ACC: usize = 3 * RP;
/// Words of one channel plane: three slot rows and the accumulator row.
pub const PLANE: usize = 4 * RP;
/// Output pixels per strip: even, and stride 1 reads two pairs beyond.
pub const STRIP: usize = RP - 2;
/// Channels per group (one 4-byte input word).
const GROUP: usize = 4;
/// A slot that holds no input row.
const EMPTY: usize = usize::MAX;

/// One channel's output row of a strip: for the `n` pixels (even, at most
/// `STRIP`) of `plane`,
/// `plane[ACC + p] = Σ_{r<3} lo(a)·lo(w[r]) + hi(a)·hi(w[r]) + lo(b)·w2(r)`
/// with `a = plane[r·RP + p]`, `b = plane[r·RP + p + d]` (`d` = 1 when
/// `stride2`, else 2), `w2(0) = lo(w[3])`, `w2(1) = hi(w[3])`,
/// `w2(2) = lo(w[4])`; every sum wraps in i32 (so kernels agree on every
/// input). Fails (never panics) on a short plane or a bad `n`.
pub trait RowKernel {
    fn row(plane: &mut [u32], w: &[u32; 5], n: usize, stride2: bool) -> Result<(), Error>;
}

/// The checks every `RowKernel` makes before touching the plane.
#[inline]
pub fn row_fits(plane: &[u32], n: usize) -> Result<(), Error> {
    if !n.is_multiple_of(2) || n > STRIP || plane.len() < PLANE {
        return Err(fault(text!("depthwise row outside its plane")));
    }
    Ok(())
}

/// Low half of a pair, sign-extended.
#[inline]
fn lo(v: u32) -> i32 {
    v as u16 as i16 as i32
}

/// High half of a pair, sign-extended.
#[inline]
fn hi(v: u32) -> i32 {
    (v >> 16) as u16 as i16 as i32
}

/// Sign-extended 16-bit halves `(l, h)` in one word.
#[inline]
fn pair(l: i8, h: i8) -> u32 {
    (l as i16 as u16 as u32) | ((h as i16 as u16 as u32) << 16)
}

/// The portable row kernel: plain safe Rust, explicitly wrapping sums.
pub struct Portable;

impl RowKernel for Portable {
    fn row(plane: &mut [u32], w: &[u32; 5], n: usize, stride2: bool) -> Result<(), Error> {
        row_fits(plane, n)?;
        let d = if stride2 { 1 } else { 2 };
        let w2 = [lo(w[3]), hi(w[3]), lo(w[4])];
        let (rows, acc) = plane.split_at_mut(ACC);
        for (p, out) in acc.iter_mut().take(n).enumerate() {
            let mut s = 0i32;
            for (r, (&wr, &w2r)) in w.iter().zip(&w2).enumerate() {
                let a = rows.get(r * RP + p).copied().unwrap_or(0);
                let b = rows.get(r * RP + p + d).copied().unwrap_or(0);
                s = s
                    .wrapping_add(lo(a) * lo(wr))
                    .wrapping_add(hi(a) * hi(wr))
                    .wrapping_add(lo(b) * w2r);
            }
            *out = s as u32;
        }
        Ok(())
    }
}

/// The row kernel of this target: the DSP one where `build.rs` set
/// `midge_dsp`, the portable one elsewhere.
#[cfg(midge_dsp)]
pub type Selected = super::dsp::DwRow;
/// The row kernel of this target: the DSP one where `build.rs` set
/// `midge_dsp`, the portable one elsewhere.
#[cfg(not(midge_dsp))]
pub type Selected = Portable;

/// Whether `depthwise3x3` takes this window: 3×3, horizontal stride 1 or 2,
/// horizontal dilation 1 (any vertical stride, dilation and padding).
pub fn fits(win: &Window) -> bool {
    win.kh == 3 && win.kw == 3 && win.dil_w == 1 && matches!(win.stride_w, 1 | 2)
}

/// Whether the row driver is the quicker of the two DSP paths for a 3×3
/// layer: measured on the emulated Cortex-M4 (instructions per MAC on the
/// bundled reference models), the row driver wins only with horizontal
/// stride 1 and rows of at least `ROWS_MIN_W` output pixels (48×48×8:
/// 7.1 against 16.6; 24×24×32: 8.0 against 9.8), and loses on stride 2 and
/// on short rows (12×12×64: 9.8 against 8.9; 6×6×128: 13.6 against 8.8),
/// where its per-row set-up is spread over too few pixels.
pub fn rows_pay(win: &Window, ys: Shape) -> bool {
    fits(win) && win.stride_w == 1 && ys.w as usize >= ROWS_MIN_W
}

/// Shortest output row the row driver takes (see `rows_pay`).
pub const ROWS_MIN_W: usize = 16;

/// int8 depthwise: 3×3 windows where `rows_pay` through `depthwise3x3` with
/// the DSP row kernel (only where `build.rs` set `midge_dsp`); everything
/// else (and every window on cores without DSP, where `depthwise_fast` is
/// quicker) through `tile::depthwise_selected`.
pub fn depthwise_selected(
    a: &Int8Arith<'_>,
    x: &[i8],
    xs: Shape,
    w: &[i8],
    win: &Window,
    y: &mut [i8],
    ys: Shape,
) -> Result<(), Error> {
    if cfg!(midge_dsp) && rows_pay(win, ys) {
        return depthwise3x3::<Selected>(a, x, xs, w, win, y, ys);
    }
    tile::depthwise_selected(a, x, xs, w, win, y, ys)
}

/// Per-channel constants of one group.
#[derive(Default)]
struct Chan {
    rq: Rq,
    bias: i32,
    /// `pair(w[ky][0], w[ky][1])` per kernel row.
    w01: [u32; 3],
    /// `w[ky][2]` per kernel row.
    w2: [i8; 3],
    /// `Σ_kx w[ky][kx]` per kernel row (for padded rows).
    row_sum: [i32; 3],
}

/// int8 depthwise with a 3×3 window (`fits`; weights `[3][3][c]`) through
/// row kernel `K`, laid out as the module header says: for each group of
/// up to 4 channels and each strip of output pixels, row by row, the input
/// rows not yet in a slot are widened into one, `K` runs each channel's
/// row, and the accumulators plus bias (and the padded rows' `zp·Σw`) are
/// requantized. The same wrapping i32 sums as `depthwise_ref`, so the
/// result is its bit for bit.
pub fn depthwise3x3<K: RowKernel>(
    a: &Int8Arith<'_>,
    x: &[i8],
    xs: Shape,
    w: &[i8],
    win: &Window,
    y: &mut [i8],
    ys: Shape,
) -> Result<(), Error> {
    depthwise_lens::<Int8Arith<'_>>(x, xs, w, win, y, ys)?;
    if !fits(win) {
        return Err(fault(text!("depthwise3x3 takes 3×3 windows only")));
    }
    let (ih, iw, c) = (xs.h as usize, xs.w as usize, xs.c as usize);
    let (oh, ow) = (ys.h as usize, ys.w as usize);
    let stride2 = win.stride_w == 2;
    let sw = win.stride_w as usize;
    let zp = a.zp_in as i32;
    let mut planes = [0u32; GROUP * PLANE];
    for c0 in (0..c).step_by(GROUP) {
        let gc = GROUP.min(c - c0);
        let mut ch: [Chan; GROUP] = Default::default();
        for (i, k) in ch.iter_mut().take(gc).enumerate() {
            let cc = c0 + i;
            k.rq = a.rq(cc);
            k.bias = a.start(cc);
            for ky in 0..3 {
                let t = |kx: usize| w.get((ky * 3 + kx) * c + cc).copied().unwrap_or(0);
                k.w01[ky] = pair(t(0), t(1));
                k.w2[ky] = t(2);
                k.row_sum[ky] = t(0) as i32 + t(1) as i32 + t(2) as i32;
            }
        }
        for ox0 in (0..ow).step_by(STRIP) {
            let np = STRIP.min(ow - ox0);
            let n = np.next_multiple_of(2);
            let npairs = if stride2 { n + 1 } else { n + 2 };
            // Padded column of the strip's first tap.
            let j0 = (ox0 * sw) as isize - win.pad_left as isize;
            let mut tags = [EMPTY; 3];
            for oy in 0..oh {
                // Input row of kernel row ky, or None in the padding.
                let rows = [0usize, 1, 2].map(|ky| {
                    let iy = (oy * win.stride_h as usize + ky * win.dil_h as usize) as isize
                        - win.pad_top as isize;
                    (iy >= 0 && (iy as usize) < ih).then_some(iy as usize)
                });
                // Slot of each kernel row: rows already widened keep theirs,
                // the others are widened into a slot no current row uses.
                let mut slot_of = [EMPTY; 3];
                let mut used = [false; 3];
                for (ky, r) in rows.iter().enumerate() {
                    if let Some(iy) = *r {
                        if let Some(s) = (0..3).find(|&s| tags[s] == iy && !used[s]) {
                            slot_of[ky] = s;
                            used[s] = true;
                        }
                    }
                }
                for (ky, r) in rows.iter().enumerate() {
                    if let (Some(iy), EMPTY) = (*r, slot_of[ky]) {
                        let s = (0..3)
                            .find(|&s| !used[s])
                            .ok_or(fault(text!("depthwise slots")))?;
                        widen(
                            x,
                            iy,
                            iw,
                            c,
                            c0,
                            gc,
                            j0,
                            sw,
                            npairs,
                            a.zp_in,
                            s,
                            &mut planes,
                        )?;
                        tags[s] = iy;
                        slot_of[ky] = s;
                        used[s] = true;
                    }
                }
                let mut corr = [0i32; GROUP];
                for (i, k) in ch.iter().take(gc).enumerate() {
                    // Weights per slot (zero for slots of no real row).
                    let mut w01 = [0u32; 3];
                    let mut w2 = [0i8; 3];
                    let mut pad_sum = 0i32;
                    for ky in 0..3 {
                        match slot_of.get(ky).and_then(|&s| w01.get_mut(s).zip(Some(s))) {
                            Some((d, s)) => {
                                *d = k.w01[ky];
                                if let Some(v) = w2.get_mut(s) {
                                    *v = k.w2[ky];
                                }
                            }
                            None => pad_sum = pad_sum.wrapping_add(k.row_sum[ky]),
                        }
                    }
                    corr[i] = zp.wrapping_mul(pad_sum);
                    let wk = [w01[0], w01[1], w01[2], pair(w2[0], w2[1]), pair(w2[2], 0)];
                    let plane = planes
                        .get_mut(i * PLANE..(i + 1) * PLANE)
                        .ok_or(fault(text!("depthwise plane")))?;
                    K::row(plane, &wk, n, stride2)?;
                }
                // Requantize the strip's pixels channel by channel (the
                // constants stay in registers; outputs are `c` apart).
                let at = (oy * ow + ox0) * c + c0;
                let y_strip = y
                    .get_mut(at..at + (np - 1) * c + gc)
                    .ok_or(fault(text!("depthwise output too short")))?;
                for (i, k) in ch.iter().take(gc).enumerate() {
                    let add = k.bias.wrapping_add(corr[i]);
                    let accs = part(&planes, i * PLANE + ACC, np)
                        .ok_or(fault(text!("depthwise plane")))?;
                    let ys = y_strip.iter_mut().skip(i).step_by(c);
                    for (yv, &s) in ys.zip(accs) {
                        *yv = a.finish_with((s as i32).wrapping_add(add), &k.rq);
                    }
                }
            }
        }
    }
    Ok(())
}

/// Widens input row `iy` for channels `c0..c0 + gc` into slot `s` of the
/// planes: `npairs` pairs from padded column `j0`, `sw` (1 or 2) columns
/// apart (see the module header); columns outside the input read `zp`.
#[allow(clippy::too_many_arguments)]
#[inline(never)]
fn widen(
    x: &[i8],
    iy: usize,
    iw: usize,
    c: usize,
    c0: usize,
    gc: usize,
    j0: isize,
    sw: usize,
    npairs: usize,
    zp: i8,
    s: usize,
    planes: &mut [u32],
) -> Result<(), Error> {
    let row = part(x, iy * iw * c, iw * c).ok_or(fault(text!("depthwise input too short")))?;
    if npairs == 0 || iw == 0 {
        return Err(fault(text!("depthwise empty row")));
    }
    // Pairs `k` in `ka..kb` read only columns inside the input: the first
    // column `j0 + k·sw ≥ 0` and the second `j0 + k·sw + 1 < iw`.
    let (j0i, swi, iwi) = (j0 as i64, sw as i64, iw as i64);
    let clampk = |k: i64| k.clamp(0, npairs as i64) as usize;
    let ka = clampk((-j0i + swi - 1).div_euclid(swi));
    let kb = clampk((iwi - 2 - j0i).div_euclid(swi) + 1).max(ka);
    for i in 0..gc {
        let at = i * PLANE + s * RP;
        let slot = planes
            .get_mut(at..at + npairs)
            .ok_or(fault(text!("depthwise slot")))?;
        let col = row
            .get(c0 + i..)
            .ok_or(fault(text!("depthwise input too short")))?;
        // Column `j` of this channel, `zp` outside the input.
        let v = |j: i64| -> i8 {
            if (0..iwi).contains(&j) {
                col.get(j as usize * c).copied().unwrap_or(zp)
            } else {
                zp
            }
        };
        let edge = |k: usize| {
            let j = j0i + k as i64 * swi;
            pair(v(j), v(j + 1))
        };
        let (left, rest) = slot.split_at_mut(ka);
        let (mid, right) = rest.split_at_mut(kb - ka);
        for (k, d) in left.iter_mut().enumerate() {
            *d = edge(k);
        }
        for (k, d) in right.iter_mut().enumerate() {
            *d = edge(kb + k);
        }
        if mid.is_empty() {
            continue;
        }
        // Interior: the columns from `j0 + ka·sw` on, `c` bytes apart.
        let first = (j0i + ka as i64 * swi) as usize * c;
        let mut vals = col.get(first..).unwrap_or(&[]).iter().step_by(c).copied();
        if sw == 1 {
            let mut prev = vals.next().unwrap_or(zp);
            for d in mid.iter_mut() {
                let h = vals.next().unwrap_or(zp);
                *d = pair(prev, h);
                prev = h;
            }
        } else {
            for d in mid.iter_mut() {
                let l = vals.next().unwrap_or(zp);
                let h = vals.next().unwrap_or(zp);
                *d = pair(l, h);
            }
        }
    }
    Ok(())
}
