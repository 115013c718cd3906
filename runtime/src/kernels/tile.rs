//! The int8 conv2d micro-kernel seam: the `MicroKernel` trait (an MR×NR tile
//! of output channels × output pixels over K), the one im2col gather into a
//! packed panel, the one generic driver, and the portable kernel (safe Rust,
//! the oracle of the DSP kernel and the fallback everywhere else).
//!
//! Panel layout (what the dual 16-bit multiply-accumulate wants): the K
//! window values of each pixel in groups of four, `x0 x1 x2 x3` stored as
//! the two words `(x0, x2)` and `(x1, x3)` of sign-extended 16-bit halves
//! (low half first); group `g` of pixel `j` is words `(g·NR + j)·2` and
//! `+ 1`. Natural int8 weights then line up: the byte-pair sign-extend of a
//! weight word gives `(w0, w2)`, rotated by 8 `(w1, w3)`. The last group is
//! padded with zeros; padded taps of the window hold the input zero point.

use super::{
    axis_range, check_lens, conv2d_fast, conv_weight_len, fault, gather, int8::Int8Arith, Arith,
    is_pointwise, part, Px,
};
use crate::error::Error;
use crate::repr::{Shape, Window};
use crate::requant::Rq;

/// A tile kernel: `acc[i·NR + j] += Σ_{k < 4·groups} w[i·w_stride + k] ·
/// x_j[k]` for the `MR` weight rows (`w_stride` apart; 0 repeats row 0) and
/// the `NR` pixels of `panel`, every sum wrapping in i32 (so kernels that
/// add in different orders agree on every input).
pub trait MicroKernel {
    /// Output channels per tile (at most `MAX_MR`).
    const MR: usize;
    /// Output pixels per tile (at most `MAX_NR`).
    const NR: usize;
    /// Fails (never panics) when a slice is shorter than the tile needs.
    fn run(
        w: &[i8],
        w_stride: usize,
        panel: &[u32],
        groups: usize,
        acc: &mut [i32],
    ) -> Result<(), Error>;
}

/// Largest `MicroKernel::MR` the driver's accumulator array holds.
pub const MAX_MR: usize = 4;
/// Largest `MicroKernel::NR` the driver's panel holds.
pub const MAX_NR: usize = 2;
/// Largest window (kh·kw·in_c values) the driver packs; longer windows go
/// to `conv2d_fast`. 3×3×64.
pub const PANEL_K: usize = 576;
/// Output channels whose requantization constants are worked out at once.
const OCB: usize = 64;

/// Sign-extended 16-bit halves `(lo, hi)` in one word.
#[inline]
fn pair(lo: i8, hi: i8) -> u32 {
    (lo as i16 as u16 as u32) | ((hi as i16 as u16 as u32) << 16)
}

/// Window value `k` of pixel `j` from a panel of `nr` pixels.
#[inline]
pub fn panel_value(panel: &[u32], nr: usize, j: usize, k: usize) -> Option<i32> {
    let word = *panel.get(((k / 4) * nr + j) * 2 + (k & 1))?;
    Some((word >> (16 * ((k >> 1) & 1))) as u16 as i16 as i32)
}

/// Packs the window values `src` of pixel `j` into `panel` (`nr` pixels),
/// the last group padded with zeros.
pub fn pack(src: &[i8], panel: &mut [u32], j: usize, nr: usize) {
    let at = |v: &[i8], i: usize| v.get(i).copied().unwrap_or(0);
    for (g, words) in src
        .chunks(4)
        .zip(panel.chunks_exact_mut(2 * nr).map(|c| c.get_mut(2 * j..)))
    {
        if let Some([e, o, ..]) = words {
            *e = pair(at(g, 0), at(g, 2));
            *o = pair(at(g, 1), at(g, 3));
        }
    }
}

/// The portable tile kernel: 2 output channels × 2 pixels, plain safe Rust
/// with explicitly wrapping i32 sums.
pub struct Portable;

impl MicroKernel for Portable {
    const MR: usize = 2;
    const NR: usize = 2;
    fn run(
        w: &[i8],
        w_stride: usize,
        panel: &[u32],
        groups: usize,
        acc: &mut [i32],
    ) -> Result<(), Error> {
        let k = groups.checked_mul(4).ok_or(fault("tile too long"))?;
        let half = |word: u32, h: u32| (word >> (16 * h)) as u16 as i16 as i32;
        for i in 0..Self::MR {
            let row = part(w, i.wrapping_mul(w_stride), k).ok_or(fault("tile weights too short"))?;
            for j in 0..Self::NR {
                let s = acc.get_mut(i * Self::NR + j).ok_or(fault("tile accumulators"))?;
                let mut v = *s;
                for (g, wv) in row.chunks_exact(4).enumerate() {
                    let at = (g * Self::NR + j) * 2;
                    let (e, o) = match (panel.get(at), panel.get(at + 1)) {
                        (Some(&e), Some(&o)) => (e, o),
                        _ => return Err(fault("tile panel too short")),
                    };
                    v = v
                        .wrapping_add(half(e, 0) * wv[0] as i32)
                        .wrapping_add(half(e, 1) * wv[2] as i32)
                        .wrapping_add(half(o, 0) * wv[1] as i32)
                        .wrapping_add(half(o, 1) * wv[3] as i32);
                }
                *s = v;
            }
        }
        Ok(())
    }
}

/// int8 conv2d through the kernel selected for this target: the DSP tile
/// kernel where `build.rs` set `midge_dsp`, `conv2d_fast` elsewhere (where
/// it is as fast as the portable tile kernel or faster).
pub fn conv2d_selected(
    a: &Int8Arith<'_>,
    x: &[i8],
    xs: Shape,
    w: &[i8],
    win: &Window,
    y: &mut [i8],
    ys: Shape,
) -> Result<(), Error> {
    #[cfg(midge_dsp)]
    {
        conv2d::<super::dsp::Dsp>(a, x, xs, w, win, y, ys)
    }
    #[cfg(not(midge_dsp))]
    {
        conv2d_fast(a, x, xs, w, win, y, ys)
    }
}

/// int8 conv2d (weights `[out_c][kh][kw][in_c]`) through tile kernel `K`:
/// for each block of up to `OCB` output channels (requantization constants
/// worked out once per block), for each `NR` output pixels, gather and
/// pack their windows once, then run every `MR` output channels over the
/// whole window; the `K mod 4` last values are summed here. The same
/// wrapping i32 sums as `conv2d_ref`, so the result is its bit for bit.
/// Windows longer than `PANEL_K` go to `conv2d_fast`.
pub fn conv2d<K: MicroKernel>(
    a: &Int8Arith<'_>,
    x: &[i8],
    xs: Shape,
    w: &[i8],
    win: &Window,
    y: &mut [i8],
    ys: Shape,
) -> Result<(), Error> {
    check_lens(x.len(), xs, y.len(), ys)?;
    let (ic, oc) = (xs.c as usize, ys.c as usize);
    if conv_weight_len(win, ic, oc) != Some(w.len()) {
        return Err(fault("conv2d weight length does not match the window"));
    }
    let k_len = win.kh as usize * win.kw as usize * ic;
    let (mr, nr) = (K::MR, K::NR);
    if k_len == 0 || k_len > PANEL_K || mr == 0 || nr == 0 || mr > MAX_MR || nr > MAX_NR {
        return conv2d_fast(a, x, xs, w, win, y, ys);
    }
    let pointwise = is_pointwise(win) && xs.h == ys.h && xs.w == ys.w;
    let (ih, iw) = (xs.h as usize, xs.w as usize);
    let ow = ys.w as usize;
    let npx = ys.h as usize * ow;
    let groups = k_len / 4;
    let mut patch = [a.zp_in; PANEL_K];
    let mut panel_buf = [0u32; PANEL_K / 2 * MAX_NR];
    let panel_len = k_len.div_ceil(4) * 2 * nr;
    let panel = panel_buf.get_mut(..panel_len).ok_or(fault("conv2d panel"))?;
    let mut rq = [Rq::default(); OCB];
    for o0 in (0..oc).step_by(OCB) {
        let nb = OCB.min(oc - o0);
        for (i, r) in rq.iter_mut().take(nb).enumerate() {
            *r = a.rq(o0 + i);
        }
        for p0 in (0..npx).step_by(nr) {
            let np = nr.min(npx - p0);
            for j in 0..nr {
                // A missing last pixel repeats the one before (not written).
                let p = p0 + j.min(np - 1);
                let src: &[i8] = if pointwise {
                    part(x, p * ic, ic).ok_or(fault("conv2d input too short"))?
                } else {
                    let (oy, ox) = (p / ow, p % ow);
                    let at = Px {
                        oy,
                        ox,
                        ry: axis_range(oy, win.kh as usize, win.stride_h, win.dil_h, win.pad_top, ih),
                        rx: axis_range(ox, win.kw as usize, win.stride_w, win.dil_w, win.pad_left, iw),
                        iw,
                        c: ic,
                    };
                    let dst = patch.get_mut(..k_len).ok_or(fault("conv2d patch"))?;
                    gather(x, a.zp_in, win, &at, 0, dst)?;
                    dst
                };
                pack(src, panel, j, nr);
            }
            let tile = Tile {
                w,
                k_len,
                groups,
                panel,
                p0,
                np,
                oc,
            };
            let mut o = 0;
            while o < nb {
                let nm = mr.min(nb - o);
                if nm == mr {
                    tile.run::<K>(a, o0 + o, mr, k_len, &rq[o..], y)?;
                } else {
                    // Fewer channels than a tile: one row at a time (rows
                    // 0 apart, only row 0 written).
                    for i in o..o + nm {
                        tile.run::<K>(a, o0 + i, 1, 0, &rq[i..], y)?;
                    }
                }
                o += nm;
            }
        }
    }
    Ok(())
}

/// One packed panel of `np` real pixels from output pixel `p0` on.
struct Tile<'p, 'w> {
    w: &'w [i8],
    k_len: usize,
    groups: usize,
    panel: &'p [u32],
    p0: usize,
    np: usize,
    oc: usize,
}

impl Tile<'_, '_> {
    /// Output channels `og..og + rows` (weight rows `stride` apart) of the
    /// panel's pixels into `y`; `rq[i]` are the constants of channel `og + i`.
    #[inline(always)]
    fn run<K: MicroKernel>(
        &self,
        a: &Int8Arith<'_>,
        og: usize,
        rows: usize,
        stride: usize,
        rq: &[Rq],
        y: &mut [i8],
    ) -> Result<(), Error> {
        let (mr, nr) = (K::MR, K::NR);
        let mut buf = [0i32; MAX_MR * MAX_NR];
        let acc = buf.get_mut(..mr * nr).ok_or(fault("tile accumulators"))?;
        for (i, row) in acc.chunks_exact_mut(nr).enumerate() {
            row.fill(a.start(og + if stride == 0 { 0 } else { i }));
        }
        let w = self
            .w
            .get(og.wrapping_mul(self.k_len)..)
            .ok_or(fault("conv2d weights too short"))?;
        K::run(w, stride, self.panel, self.groups, acc)?;
        let k0 = self.groups * 4;
        for k in k0..self.k_len {
            for (i, row) in acc.chunks_exact_mut(nr).enumerate() {
                let wv = *w
                    .get(i.wrapping_mul(stride).wrapping_add(k))
                    .ok_or(fault("conv2d weights too short"))? as i32;
                for (j, s) in row.iter_mut().enumerate() {
                    let xv = panel_value(self.panel, nr, j, k).ok_or(fault("tile panel"))?;
                    *s = s.wrapping_add(xv * wv);
                }
            }
        }
        for (i, (row, r)) in acc.chunks_exact(nr).zip(rq).take(rows).enumerate() {
            for (j, &s) in row.iter().take(self.np).enumerate() {
                let at = (self.p0 + j) * self.oc + og + i;
                *y.get_mut(at).ok_or(fault("conv2d output too short"))? = a.finish_with(s, r);
            }
        }
        Ok(())
    }
}
