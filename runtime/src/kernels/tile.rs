//! The int8 micro-kernel seam: the `MicroKernel` trait (an MR×NR tile of
//! output channels × output pixels over K, and a 4-channel depthwise tap
//! kernel), the one im2col gather into a packed panel, the generic conv2d
//! and depthwise drivers, and the portable kernel (safe Rust, wrapping i32
//! sums: the oracle the DSP kernels are tested against on the device).
//! Targets without DSP keep `conv2d_fast` / `depthwise_fast`. Windows
//! longer than one panel (`PANEL_K` values) run in several panels.
//!
//! Panel layout (what the dual 16-bit multiply-accumulate wants): the K
//! window values of each pixel in groups of four, `x0 x1 x2 x3` stored as
//! the two words `(x0, x2)` and `(x1, x3)` of sign-extended 16-bit halves
//! (low half first); group `g` of pixel `j` is words `(g·NR + j)·2` and
//! `+ 1`. Natural int8 weights then line up: the byte-pair sign-extend of a
//! weight word gives `(w0, w2)`, rotated by 8 `(w1, w3)`. Padded taps of the
//! window hold the input zero point; the kernel runs over whole groups only,
//! so values of a last partial group are either summed by the driver or
//! meet zero weights (row-padded weight copy, see `conv2d`).

use super::{
    axis_range, check_lens, conv2d_fast, conv_weight_len, depthwise_chunk, depthwise_fast,
    depthwise_lens, fault, int8::Int8Arith, is_pointwise, part, pixels_fast, pos, Arith, Px, CHUNK,
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
    /// Packs `src` (a multiple of 4 values) as consecutive groups of one
    /// pixel: group `g` into `dst[g·stride]` and `dst[g·stride + 1]`
    /// (`stride` ≥ 2). Values that do not fit are dropped, never a panic.
    #[inline]
    fn pack(src: &[i8], dst: &mut [u32], stride: usize) {
        pack_portable(src, dst, stride)
    }
    /// Depthwise of 4 channels from channel `c` over the taps of `tab`:
    /// `acc[i] += Σ_(xo, wo) x[xo + c + i] · w[wo + c + i]`, wrapping in i32.
    /// Fails (never panics) when a read would leave `x` or `w`.
    #[inline]
    fn taps4(
        x: &[i8],
        w: &[i8],
        tab: &TapTable,
        c: usize,
        acc: &mut [i32; 4],
    ) -> Result<(), Error> {
        taps4_portable(x, w, tab, c, acc)
    }
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
/// Window values (kh·kw·in_c) of one panel; longer windows run in several
/// panels (so no other conv2d kernel is linked on DSP targets). 3×3×64.
pub const PANEL_K: usize = 576;
/// Output channels whose requantization constants are worked out at once.
const OCB: usize = 64;
/// Channels per block of the depthwise driver (one tap table per pixel and
/// block; its constants stay below the conv2d driver's stack use).
const DW_BLOCK: usize = 256;
/// Bytes of the row-padded weight copy (see `conv2d`): enough for the
/// first layers of the bundled models (3×3 windows over 1–3 channels, up to
/// 16 output channels at 3 channels); a layer whose copy does not fit sums
/// the last values of its window one by one instead.
const WBUF: usize = 1024;
/// Longest window (kh·kw·in_c values) gathered whole (`gather_whole`): the
/// first layers, whose tap rows (1–3 channels) are not a multiple of 4 long.
const WHOLE_K: usize = 64;

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

/// `MicroKernel::pack` in plain safe Rust.
#[inline]
pub(crate) fn pack_portable(src: &[i8], dst: &mut [u32], stride: usize) {
    for (g, d) in src.chunks_exact(4).zip(dst.chunks_mut(stride.max(2))) {
        if let [e, o, ..] = d {
            *e = pair(g[0], g[2]);
            *o = pair(g[1], g[3]);
        }
    }
}

/// Sets window value `k` of pixel `j` in a panel of `nr` pixels.
#[inline]
fn set_value(panel: &mut [u32], nr: usize, j: usize, k: usize, v: i8) {
    if let Some(word) = panel.get_mut(((k / 4) * nr + j) * 2 + (k & 1)) {
        let sh = 16 * ((k >> 1) & 1);
        *word = (*word & !(0xffff << sh)) | ((v as i16 as u16 as u32) << sh);
    }
}

/// Writes the values `src` as window values `k0..k0 + src.len()` of pixel
/// `j`: single values up to a group boundary, whole groups through
/// `K::pack`, single values after the last whole group.
#[inline]
fn put_run<K: MicroKernel>(src: &[i8], k0: usize, panel: &mut [u32], j: usize) {
    let nr = K::NR;
    let lead = ((4 - k0 % 4) % 4).min(src.len());
    let (head, rest) = src.split_at(lead);
    for (i, &v) in head.iter().enumerate() {
        set_value(panel, nr, j, k0 + i, v);
    }
    let k1 = k0 + lead;
    let whole = rest.len() / 4 * 4;
    let (body, tail) = rest.split_at(whole);
    if let Some(dst) = panel.get_mut((k1 / 4 * nr + j) * 2..) {
        K::pack(body, dst, 2 * nr);
    }
    for (i, &v) in tail.iter().enumerate() {
        set_value(panel, nr, j, k1 + whole + i, v);
    }
}

/// `put_run` of the part of the values `src` (window values `k0..`) that
/// falls in the panel's range `kc..kc + PANEL_K`, shifted down by `kc`.
#[inline]
fn put_clipped<K: MicroKernel>(src: &[i8], k0: usize, kc: usize, panel: &mut [u32], j: usize) {
    if kc == 0 && k0 + src.len() <= PANEL_K {
        // The first panel of a window that fits it: nothing to clip.
        return put_run::<K>(src, k0, panel, j);
    }
    let lo = kc.saturating_sub(k0).min(src.len());
    let hi = kc.saturating_add(PANEL_K).saturating_sub(k0).min(src.len());
    // When not empty, k0 + lo ≥ kc: either lo = kc − k0, or k0 ≥ kc.
    if let Some(part) = src.get(lo..hi).filter(|p| !p.is_empty()) {
        put_run::<K>(part, (k0 + lo).saturating_sub(kc), panel, j);
    }
}

/// The im2col gather: window values `kc..kc + PANEL_K` of output pixel `at`
/// as pixel `j` of the panel (value `k` at panel value `k − kc`), padded
/// taps holding `pad`. Tap row `ky` starts at window value `ky·pitch`
/// (`pitch` ≥ kw·in_c; with `pitch` > kw·in_c the values after each row
/// meet zero weights, see `conv2d`). A run that ends its row then reads on
/// to the next group boundary when the input allows, so it packs in whole
/// groups.
#[allow(clippy::too_many_arguments)]
#[inline(never)]
fn gather_panel<K: MicroKernel>(
    x: &[i8],
    pad: i8,
    win: &Window,
    at: &Px,
    pitch: usize,
    kc: usize,
    panel: &mut [u32],
    j: usize,
) -> Result<(), Error> {
    let (ic, nr) = (at.c, K::NR);
    if !at.full(win) {
        let fill = pair(pad, pad);
        for g in panel.chunks_exact_mut(2 * nr) {
            if let Some(w) = g.get_mut(2 * j..2 * j + 2) {
                w.fill(fill);
            }
        }
    }
    let kw = win.kw as usize;
    let row_len = kw * ic;
    let (kx0, kx1) = at.rx;
    if kx0 >= kx1 || pitch < row_len {
        return Ok(());
    }
    let spill = pitch > row_len && kx1 == kw;
    for ky in at.ry.0..at.ry.1 {
        let iy = pos(at.oy, ky, win.stride_h, win.dil_h, win.pad_top);
        if win.dil_w == 1 {
            // The in-bounds taps of a row are one contiguous input run.
            let ix = pos(at.ox, kx0, win.stride_w, 1, win.pad_left);
            let k0 = ky * pitch + kx0 * ic;
            let n = (kx1 - kx0) * ic;
            let at_x = (iy * at.iw + ix) * ic;
            let longer = (k0 + n).next_multiple_of(4) - k0;
            let src = match spill.then(|| part(x, at_x, longer)).flatten() {
                Some(src) => src,
                None => part(x, at_x, n).ok_or(fault(text!("conv2d input too short")))?,
            };
            put_clipped::<K>(src, k0, kc, panel, j);
        } else {
            for kx in kx0..kx1 {
                let ix = pos(at.ox, kx, win.stride_w, win.dil_w, win.pad_left);
                let src = part(x, (iy * at.iw + ix) * ic, ic)
                    .ok_or(fault(text!("conv2d input too short")))?;
                put_clipped::<K>(src, ky * pitch + kx * ic, kc, panel, j);
            }
        }
    }
    Ok(())
}

/// The gather of a short window (at most `WHOLE_K` values, dilation 1 across
/// a row): the `kw·in_c` values of each in-bounds tap row copied one after
/// the other into a byte buffer (padded taps and the values up to the next
/// group boundary hold `pad`; those meet zero weights, see `conv2d`), then
/// packed once in whole groups as pixel `j` of the panel.
#[inline(never)]
fn gather_whole<K: MicroKernel>(
    x: &[i8],
    pad: i8,
    win: &Window,
    at: &Px,
    k_pad: usize,
    panel: &mut [u32],
    j: usize,
) -> Result<(), Error> {
    let mut buf = [pad; WHOLE_K];
    let ic = at.c;
    let row_len = win.kw as usize * ic;
    let (kx0, kx1) = at.rx;
    if kx0 < kx1 {
        let n = (kx1 - kx0) * ic;
        for ky in at.ry.0..at.ry.1 {
            let iy = pos(at.oy, ky, win.stride_h, win.dil_h, win.pad_top);
            let ix = pos(at.ox, kx0, win.stride_w, 1, win.pad_left);
            let src =
                part(x, (iy * at.iw + ix) * ic, n).ok_or(fault(text!("conv2d input too short")))?;
            let k0 = ky * row_len + kx0 * ic;
            let dst = buf
                .get_mut(k0..k0 + n)
                .ok_or(fault(text!("conv2d window")))?;
            for (d, &v) in dst.iter_mut().zip(src) {
                *d = v;
            }
        }
    }
    let src = buf.get(..k_pad).ok_or(fault(text!("conv2d window")))?;
    if let Some(dst) = panel.get_mut(2 * j..) {
        K::pack(src, dst, 2 * K::NR);
    }
    Ok(())
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
        let k = groups.checked_mul(4).ok_or(fault(text!("tile too long")))?;
        let half = |word: u32, h: u32| (word >> (16 * h)) as u16 as i16 as i32;
        for i in 0..Self::MR {
            let row = part(w, i.wrapping_mul(w_stride), k)
                .ok_or(fault(text!("tile weights too short")))?;
            for j in 0..Self::NR {
                let s = acc
                    .get_mut(i * Self::NR + j)
                    .ok_or(fault(text!("tile accumulators")))?;
                let mut v = *s;
                for (g, wv) in row.chunks_exact(4).enumerate() {
                    let at = (g * Self::NR + j) * 2;
                    let (e, o) = match (panel.get(at), panel.get(at + 1)) {
                        (Some(&e), Some(&o)) => (e, o),
                        _ => return Err(fault(text!("tile panel too short"))),
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
        conv2d::<Selected>(a, x, xs, w, win, y, ys)
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
/// whole window; the `K mod 4` last values are summed here. Windows longer
/// than `PANEL_K` go in panels of `PANEL_K` values, each adding to the
/// accumulators the one before left. The same wrapping i32 sums as
/// `conv2d_ref`, so the result is its bit for bit.
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
        return Err(fault(text!(
            "conv2d weight length does not match the window"
        )));
    }
    let k_len = win.kh as usize * win.kw as usize * ic;
    let nr = K::NR;
    const { assert!(K::MR > 0 && K::NR > 0 && K::MR <= MAX_MR && K::NR <= MAX_NR) };
    let pointwise = is_pointwise(win) && xs.h == ys.h && xs.w == ys.w;
    let (ih, iw) = (xs.h as usize, xs.w as usize);
    let ow = ys.w as usize;
    let npx = ys.h as usize * ow;
    // Rows of the window not a multiple of 4 long (first layers with 1–3
    // input channels, odd channel counts): each tap row is padded to the
    // next multiple of 4 in a copy of the block's weights (zeros after each
    // row), so the kernel covers the whole window and runs pack in whole
    // groups. Without room for the copy, the last values of the window are
    // summed one by one instead.
    // Short windows with such rows (at most WHOLE_K values, dilation 1
    // across a row) whose row padding would add a group or more are instead
    // gathered whole, one row after the other, and only the window's end is
    // padded (3×3×3: 28 values instead of 36). Measured on the emulated
    // Cortex-M4: the first layers of resnet8 −6 %, vww-mobilenet-025 −2 %.
    let row_len = win.kw as usize * ic;
    let k_whole = k_len.next_multiple_of(4);
    let pitch = row_len.next_multiple_of(4);
    let whole = !pointwise
        && k_whole < win.kh as usize * pitch
        && win.dil_w == 1
        && k_whole <= WHOLE_K
        && OCB.min(oc) * k_whole <= WBUF;
    let padded = !pointwise
        && !whole
        && k_len <= PANEL_K
        && pitch != row_len
        && win.kh as usize * pitch <= PANEL_K
        && OCB.min(oc) * win.kh as usize * pitch <= WBUF;
    // `wpitch`: values of one weight row in the copy (`row` of them real).
    let (pitch, k_pan, wpitch, wrow) = if whole {
        (row_len, k_whole, k_whole, k_len)
    } else if padded {
        (pitch, win.kh as usize * pitch, pitch, row_len)
    } else {
        (row_len, k_len, row_len, row_len)
    };
    let mut wbuf = [0i8; WBUF];
    let mut panel_buf = [0u32; PANEL_K / 2 * MAX_NR];
    let mut rq = [Rq::default(); OCB];
    let mut bias = [0i32; OCB];
    let mut accs: Accs = [[0; OCB]; MAX_NR];
    for o0 in (0..oc).step_by(OCB) {
        let nb = OCB.min(oc - o0);
        for (i, (r, b)) in rq.iter_mut().zip(&mut bias).take(nb).enumerate() {
            *r = a.rq(o0 + i);
            *b = a.start(o0 + i);
        }
        let wb = part(w, o0 * k_len, nb * k_len).ok_or(fault(text!("conv2d weights too short")))?;
        let wb = if padded || whole {
            let dst = wbuf
                .get_mut(..nb * k_pan)
                .ok_or(fault(text!("conv2d weight copy")))?;
            for (d, s) in dst.chunks_exact_mut(wpitch).zip(wb.chunks_exact(wrow)) {
                let (v, z) = d.split_at_mut(wrow.min(d.len()));
                v.copy_from_slice(s.get(..v.len()).unwrap_or(&[]));
                z.fill(0);
            }
            &*dst
        } else {
            wb
        };
        let g = Gather {
            x,
            pad: a.zp_in,
            win,
            ih,
            iw,
            ic,
            ow,
            pointwise,
            whole,
            pitch,
            k_pan,
        };
        let kn = k_pan.min(PANEL_K);
        for p0 in (0..npx).step_by(nr) {
            let np = nr.min(npx - p0);
            let panel = panel_buf
                .get_mut(..kn.div_ceil(4) * 2 * nr)
                .ok_or(fault(text!("conv2d panel")))?;
            g.pixels::<K>(0, kn, p0, np, panel)?;
            channels::<K>(
                wb,
                k_pan,
                kn,
                panel,
                bias.get(..nb).unwrap_or(&[]),
                &mut accs,
            )?;
            if k_pan > PANEL_K {
                more_panels::<K>(&g, wb, nb, p0, np, &mut panel_buf, &mut accs)?;
            }
            for (j, acc) in accs.iter().take(np).enumerate() {
                let at = (p0 + j) * oc + o0;
                let y_px = part_mut(y, at, nb).ok_or(fault(text!("conv2d output too short")))?;
                finish_row(a, acc, &rq, y_px);
            }
        }
    }
    Ok(())
}

/// `y[o] = finish(acc[o])` with the precomputed constants `rq[o]`.
// Not inlined: the loop gets a function (and registers) of its own.
#[inline(never)]
fn finish_row(a: &Int8Arith<'_>, acc: &[i32], rq: &[Rq], y: &mut [i8]) {
    for ((y, &s), r) in y.iter_mut().zip(acc).zip(rq) {
        *y = a.finish_with(s, r);
    }
}

/// `n` elements of `s` from `at`, or `None`.
#[inline]
fn part_mut<T>(s: &mut [T], at: usize, n: usize) -> Option<&mut [T]> {
    s.get_mut(at..)?.get_mut(..n)
}

/// Accumulators of one block of output channels (one row per pixel).
type Accs = [[i32; OCB]; MAX_NR];

/// What the gather of one output pixel's window needs (see `conv2d`).
struct Gather<'a> {
    x: &'a [i8],
    pad: i8,
    win: &'a Window,
    ih: usize,
    iw: usize,
    ic: usize,
    ow: usize,
    pointwise: bool,
    whole: bool,
    pitch: usize,
    k_pan: usize,
}

impl Gather<'_> {
    /// Window values `kc..kc + kn` of the pixels `p0..p0 + NR` (a missing
    /// last pixel repeats the one before; it is not written) into `panel`.
    #[inline(never)]
    fn pixels<K: MicroKernel>(
        &self,
        kc: usize,
        kn: usize,
        p0: usize,
        np: usize,
        panel: &mut [u32],
    ) -> Result<(), Error> {
        let (win, ic) = (self.win, self.ic);
        for j in 0..K::NR {
            let p = p0 + j.min(np.saturating_sub(1));
            if self.pointwise {
                let src =
                    part(self.x, p * ic + kc, kn).ok_or(fault(text!("conv2d input too short")))?;
                put_run::<K>(src, 0, panel, j);
                continue;
            }
            let (oy, ox) = (p / self.ow.max(1), p % self.ow.max(1));
            let (kh, kw) = (win.kh as usize, win.kw as usize);
            let at = Px {
                oy,
                ox,
                ry: axis_range(oy, kh, win.stride_h, win.dil_h, win.pad_top, self.ih),
                rx: axis_range(ox, kw, win.stride_w, win.dil_w, win.pad_left, self.iw),
                iw: self.iw,
                c: ic,
            };
            if self.whole {
                gather_whole::<K>(self.x, self.pad, win, &at, self.k_pan, panel, j)?;
            } else {
                gather_panel::<K>(self.x, self.pad, win, &at, self.pitch, kc, panel, j)?;
            }
        }
        Ok(())
    }
}

/// The panels after the first of a window longer than `PANEL_K` (pixels
/// `p0..p0 + np`): each gathered, run from zero and added to `accs`
/// (wrapping sums in any order are the same).
#[allow(clippy::too_many_arguments)]
#[inline(never)]
fn more_panels<K: MicroKernel>(
    g: &Gather<'_>,
    wb: &[i8],
    nb: usize,
    p0: usize,
    np: usize,
    panel_buf: &mut [u32],
    accs: &mut Accs,
) -> Result<(), Error> {
    let zeros = [0i32; OCB];
    let zeros = zeros.get(..nb).ok_or(fault(text!("conv2d block")))?;
    let mut more: Accs = [[0; OCB]; MAX_NR];
    for kc in (PANEL_K..g.k_pan).step_by(PANEL_K) {
        let kn = PANEL_K.min(g.k_pan - kc);
        let panel = panel_buf
            .get_mut(..kn.div_ceil(4) * 2 * K::NR)
            .ok_or(fault(text!("conv2d panel")))?;
        g.pixels::<K>(kc, kn, p0, np, panel)?;
        let wc = wb
            .get(kc..)
            .ok_or(fault(text!("conv2d weights too short")))?;
        channels::<K>(wc, g.k_pan, kn, panel, zeros, &mut more)?;
        for (row, add) in accs.iter_mut().zip(&more) {
            for (s, &v) in row.iter_mut().zip(add).take(nb) {
                *s = s.wrapping_add(v);
            }
        }
    }
    Ok(())
}

/// `accs[j][o] = bias[o] + Σ_{k < k_len} w[o·w_stride + k] · x_j[k]` for the
/// `bias.len()` channels of a block and the `NR` pixels of `panel`: `MR`
/// channels at a time through `K::run` over the whole groups, the last
/// `k_len mod 4` values here. The last channels, fewer than `MR`, run one
/// at a time (weight rows 0 apart, only row 0 kept).
// Not inlined: the loop gets a function (and registers) of its own.
#[inline(never)]
fn channels<K: MicroKernel>(
    w: &[i8],
    w_stride: usize,
    k_len: usize,
    panel: &[u32],
    bias: &[i32],
    accs: &mut Accs,
) -> Result<(), Error> {
    let mr = K::MR;
    let nb = bias.len();
    let full = nb / mr * mr;
    for (t, b) in bias.chunks_exact(mr).enumerate() {
        let wt = w
            .get(t * mr * w_stride..)
            .ok_or(fault(text!("conv2d weights too short")))?;
        one_tile::<K>(wt, k_len, w_stride, panel, b, t * mr, mr, accs)?;
    }
    for o in full..nb {
        let wt = w
            .get(o * w_stride..)
            .ok_or(fault(text!("conv2d weights too short")))?;
        let b = bias.get(o..o + 1).ok_or(fault(text!("conv2d bias")))?;
        one_tile::<K>(wt, k_len, 0, panel, b, o, 1, accs)?;
    }
    Ok(())
}

/// One tile: output channels `o..o + rows` (weight rows `stride` apart in
/// `wt`, starting values `bias`) of the panel's pixels into `accs`.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn one_tile<K: MicroKernel>(
    wt: &[i8],
    k_len: usize,
    stride: usize,
    panel: &[u32],
    bias: &[i32],
    o: usize,
    rows: usize,
    accs: &mut Accs,
) -> Result<(), Error> {
    let (mr, nr) = (K::MR, K::NR);
    let groups = k_len / 4;
    let mut buf = [0i32; MAX_MR * MAX_NR];
    let acc = buf
        .get_mut(..mr * nr)
        .ok_or(fault(text!("tile accumulators")))?;
    for (i, row) in acc.chunks_exact_mut(nr).enumerate() {
        row.fill(bias.get(i).or(bias.first()).copied().unwrap_or(0));
    }
    K::run(wt, stride, panel, groups, acc)?;
    if !k_len.is_multiple_of(4) {
        for k in groups * 4..k_len {
            for (i, row) in acc.chunks_exact_mut(nr).enumerate() {
                let wv = *wt
                    .get(i * stride + k)
                    .ok_or(fault(text!("conv2d weights too short")))?
                    as i32;
                for (j, s) in row.iter_mut().enumerate() {
                    let xv = panel_value(panel, nr, j, k).ok_or(fault(text!("tile panel")))?;
                    *s = s.wrapping_add(xv * wv);
                }
            }
        }
    }
    for (j, dst) in accs.iter_mut().take(nr).enumerate() {
        let dst = part_mut(dst, o, rows).ok_or(fault(text!("tile accumulators")))?;
        for (i, d) in dst.iter_mut().enumerate() {
            *d = *acc
                .get(i * nr + j)
                .ok_or(fault(text!("tile accumulators")))?;
        }
    }
    Ok(())
}

/// Most taps of a depthwise window the 4-channel tap kernel takes (a 5×5
/// window); larger windows go to `depthwise_fast`.
pub const MAX_TAPS: usize = 25;

/// The in-bounds taps of one output pixel: per tap the offset of its input pixel (`(iy·iw + ix)·c`) and of its
/// weights (`t·c`), and the largest of each (so a kernel can check every
/// read against its slices once).
pub struct TapTable {
    entries: [[u32; 2]; MAX_TAPS],
    n: usize,
    max_x: usize,
    max_w: usize,
}

impl TapTable {
    /// An empty table.
    pub fn new() -> TapTable {
        TapTable {
            entries: [[0; 2]; MAX_TAPS],
            n: 0,
            max_x: 0,
            max_w: 0,
        }
    }

    /// Appends a tap; `false` (and no change) when the table is full or an
    /// offset does not fit u32.
    pub fn push(&mut self, x_off: usize, w_off: usize) -> bool {
        let (Ok(xo), Ok(wo)) = (u32::try_from(x_off), u32::try_from(w_off)) else {
            return false;
        };
        let Some(e) = self.entries.get_mut(self.n) else {
            return false;
        };
        *e = [xo, wo];
        self.n += 1;
        self.max_x = self.max_x.max(x_off);
        self.max_w = self.max_w.max(w_off);
        true
    }

    /// The taps pushed so far.
    pub fn entries(&self) -> &[[u32; 2]] {
        self.entries.get(..self.n).unwrap_or(&[])
    }

    /// Largest input offset pushed (0 for an empty table).
    pub fn max_x(&self) -> usize {
        self.max_x
    }

    /// Largest weight offset pushed (0 for an empty table).
    pub fn max_w(&self) -> usize {
        self.max_w
    }
}

impl Default for TapTable {
    fn default() -> Self {
        TapTable::new()
    }
}

/// `MicroKernel::taps4` in plain safe Rust.
pub(crate) fn taps4_portable(
    x: &[i8],
    w: &[i8],
    tab: &TapTable,
    c: usize,
    acc: &mut [i32; 4],
) -> Result<(), Error> {
    for &[xo, wo] in tab.entries() {
        let xs = part(x, xo as usize + c, 4).ok_or(fault(text!("depthwise input too short")))?;
        let ws = part(w, wo as usize + c, 4).ok_or(fault(text!("depthwise weights too short")))?;
        for ((a, &xv), &wv) in acc.iter_mut().zip(xs).zip(ws) {
            *a = a.wrapping_add(xv as i32 * wv as i32);
        }
    }
    Ok(())
}

/// int8 depthwise through the selected kernel's `taps4` where
/// `build.rs` set `midge_dsp`, `depthwise_fast` elsewhere.
pub fn depthwise_selected(
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
        depthwise::<Selected>(a, x, xs, w, win, y, ys)
    }
    #[cfg(not(midge_dsp))]
    {
        depthwise_fast(a, x, xs, w, win, y, ys)
    }
}

/// int8 depthwise (weights `[kh][kw][c]`) with kernel `K`'s `taps4`: for
/// each block of up to `DW_BLOCK` channels (requantization constants worked out
/// once), each output pixel gets its tap table (in-bounds taps) once and
/// then runs 4 channels at a time over those taps, adding zp·w for the
/// padded ones; the last `c mod 4` channels take `depthwise_chunk`. Wrapping i32 sums as `depthwise_ref`, so the result
/// is its bit for bit.
pub fn depthwise<K: MicroKernel>(
    a: &Int8Arith<'_>,
    x: &[i8],
    xs: Shape,
    w: &[i8],
    win: &Window,
    y: &mut [i8],
    ys: Shape,
) -> Result<(), Error> {
    depthwise_lens::<Int8Arith<'_>>(x, xs, w, win, y, ys)?;
    let c = xs.c as usize;
    let (kh, kw) = (win.kh as usize, win.kw as usize);
    if kh * kw > MAX_TAPS || c < 4 {
        return depthwise_fast(a, x, xs, w, win, y, ys);
    }
    let mut rq = [Rq::default(); DW_BLOCK];
    let mut bias = [0i32; DW_BLOCK];
    for c0 in (0..c).step_by(DW_BLOCK) {
        let nb = DW_BLOCK.min(c - c0);
        for (i, (r, b)) in rq.iter_mut().zip(&mut bias).take(nb).enumerate() {
            *r = a.rq(c0 + i);
            *b = a.start(c0 + i);
        }
        let preps = rq.get(..nb).ok_or(fault(text!("depthwise block")))?;
        let n4 = nb / 4 * 4;
        pixels_fast(xs, win, y, ys, |at, y_px| {
            let y_blk = y_px
                .get_mut(c0..c0 + nb)
                .ok_or(fault(text!("depthwise output too short")))?;
            // In-bounds taps into the table; padded taps read the input
            // zero point, so they add zp·w, summed here (wrapping sums in
            // any order give the same result).
            let mut tab = TapTable::new();
            let mut padded = [0u32; MAX_TAPS];
            let mut n_pad = 0;
            for ky in 0..kh {
                let iy = pos(at.oy, ky, win.stride_h, win.dil_h, win.pad_top);
                let row_in = (at.ry.0..at.ry.1).contains(&ky);
                for kx in 0..kw {
                    let t = (ky * kw + kx) * c;
                    let ok = if row_in && (at.rx.0..at.rx.1).contains(&kx) {
                        let ix = pos(at.ox, kx, win.stride_w, win.dil_w, win.pad_left);
                        tab.push((iy * at.iw + ix) * c, t)
                    } else if let (Some(p), Ok(t)) = (padded.get_mut(n_pad), u32::try_from(t)) {
                        *p = t;
                        n_pad += 1;
                        true
                    } else {
                        false
                    };
                    if !ok {
                        return chunked(a, x, w, win, at, c0, y_blk, preps);
                    }
                }
            }
            let padded = padded.get(..n_pad).unwrap_or(&[]);
            let zp = a.zp_in as i32;
            let (y4, y_rest) = y_blk.split_at_mut(n4);
            for (g, ((yg, bg), rg)) in y4
                .chunks_exact_mut(4)
                .zip(bias.chunks_exact(4))
                .zip(preps.chunks_exact(4))
                .enumerate()
            {
                let mut acc = [bg[0], bg[1], bg[2], bg[3]];
                let cg = c0 + 4 * g;
                K::taps4(x, w, &tab, cg, &mut acc)?;
                for &t in padded {
                    let ws = part(w, t as usize + cg, 4)
                        .ok_or(fault(text!("depthwise weights too short")))?;
                    for (s, &wv) in acc.iter_mut().zip(ws) {
                        *s = s.wrapping_add(zp * wv as i32);
                    }
                }
                for ((y, &s), r) in yg.iter_mut().zip(&acc).zip(rg) {
                    *y = a.finish_with(s, r);
                }
            }
            if !y_rest.is_empty() {
                let rest = preps.get(n4..).unwrap_or(&[]);
                chunked(a, x, w, win, at, c0 + n4, y_rest, rest)?;
            }
            Ok(())
        })?;
    }
    Ok(())
}

/// `depthwise_chunk` over `y.len()` channels from `c0`, `CHUNK` at a time.
#[allow(clippy::too_many_arguments)]
fn chunked(
    a: &Int8Arith<'_>,
    x: &[i8],
    w: &[i8],
    win: &Window,
    at: &Px,
    c0: usize,
    y: &mut [i8],
    preps: &[Rq],
) -> Result<(), Error> {
    for (k, (yc, pc)) in y.chunks_mut(CHUNK).zip(preps.chunks(CHUNK)).enumerate() {
        depthwise_chunk(a, x, w, win, at, c0 + k * CHUNK, yc, pc)?;
    }
    Ok(())
}

/// Whether this build has the DSP tile kernel (`build.rs` set `midge_dsp`).
pub const DSP: bool = cfg!(midge_dsp);

/// The tile kernel of this target: the DSP kernel where available, the
/// portable one elsewhere (the kernel equality tests run it against
/// `Portable`).
#[cfg(midge_dsp)]
pub type Selected = super::dsp::Dsp;
/// The tile kernel of this target: the DSP kernel where available, the
/// portable one elsewhere (the kernel equality tests run it against
/// `Portable`).
#[cfg(not(midge_dsp))]
pub type Selected = Portable;
