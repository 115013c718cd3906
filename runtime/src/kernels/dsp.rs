//! The Cortex-M DSP kernels: the conv2d tile (2 output channels × 2
//! pixels), its panel packing and the 4-channel depthwise tap loop, each
//! inner loop one `asm!` block of (dual) 16-bit multiply-accumulates and
//! byte-pair sign-extends. The only module of the crate allowed `unsafe`;
//! built where `build.rs` sets `midge_dsp`.
#![allow(unsafe_code)]

use super::fault;
use super::tile::{pack_portable, MicroKernel, TapTable};
use crate::error::Error;
use core::arch::asm;

/// One group of the conv2d tile: 4 window values × 2 weight rows × 2
/// pixels, 8 dual multiply-accumulates (see `Dsp::run`).
macro_rules! tile_group {
    () => {
        concat!(
            "ldr {t0}, [{w0}], #4\n",
            "ldr {t1}, [{w1}], #4\n",
            "ldr {t2}, [{px}], #16\n",
            "sxtb16 {t3}, {t0}\n",
            "smlad {a00}, {t2}, {t3}, {a00}\n",
            "ldr {t2}, [{px}, #-8]\n",
            "smlad {a01}, {t2}, {t3}, {a01}\n",
            "sxtb16 {t3}, {t1}\n",
            "smlad {a11}, {t2}, {t3}, {a11}\n",
            "ldr {t2}, [{px}, #-16]\n",
            "smlad {a10}, {t2}, {t3}, {a10}\n",
            "sxtb16 {t3}, {t1}, ror #8\n",
            "ldr {t2}, [{px}, #-12]\n",
            "smlad {a10}, {t2}, {t3}, {a10}\n",
            "ldr {t2}, [{px}, #-4]\n",
            "smlad {a11}, {t2}, {t3}, {a11}\n",
            "sxtb16 {t3}, {t0}, ror #8\n",
            "smlad {a01}, {t2}, {t3}, {a01}\n",
            "ldr {t2}, [{px}, #-12]\n",
            "smlad {a00}, {t2}, {t3}, {a00}\n",
        )
    };
}

/// The DSP tile kernel; equals `tile::Portable` on every input (the dual
/// multiply-accumulate's sum wraps modulo 2^32, as the portable sums do).
pub struct Dsp;

impl MicroKernel for Dsp {
    const MR: usize = 2;
    const NR: usize = 2;

    fn pack(src: &[i8], dst: &mut [u32], stride: usize) {
        let groups = src.len() / 4;
        // The facts the asm block relies on, checked here in safe code:
        // `groups` whole groups of `src`, and `dst` reaching word
        // (groups − 1)·4 + 1. Otherwise (or for another stride) the
        // portable packing does the work.
        let fits = groups
            .checked_sub(1)
            .and_then(|g| g.checked_mul(4))
            .and_then(|g| g.checked_add(2))
            .is_some_and(|need| dst.len() >= need);
        if stride != 4 || !fits {
            return pack_portable(src, dst, stride);
        }
        let s = src.as_ptr();
        let d = dst.as_mut_ptr();
        // SAFETY: the loop runs `groups` ≥ 1 times; each pass reads 4 bytes
        // at `s` (post-incremented by 4: src[0..4·groups], in bounds) and
        // writes the two words at `d` (post-incremented by 16 bytes, i.e. 4
        // words: dst[4g], dst[4g + 1] for g < groups, in bounds by `fits`).
        // `d` is word-aligned (a `u32` slice), as the double-word store
        // needs; the byte load may be unaligned, which plain `ldr` allows.
        // `dst` is borrowed mutably, so nothing else reads or writes it.
        unsafe {
            asm!(
                "2:",
                "ldr {v}, [{s}], #4",
                "sxtb16 {e}, {v}",
                "sxtb16 {o}, {v}, ror #8",
                "strd {e}, {o}, [{d}], #16",
                "subs {n}, {n}, #1",
                "bne 2b",
                s = inout(reg) s => _,
                d = inout(reg) d => _,
                n = inout(reg) groups => _,
                v = out(reg) _,
                e = out(reg) _,
                o = out(reg) _,
                options(nostack),
            );
        }
    }

    fn taps4(
        x: &[i8],
        w: &[i8],
        tab: &TapTable,
        c: usize,
        acc: &mut [i32; 4],
    ) -> Result<(), Error> {
        let taps = tab.entries();
        if taps.is_empty() {
            return Ok(());
        }
        // The facts the asm block relies on, checked here in safe code:
        // every tap's 4 input bytes x[xo + c..xo + c + 4] and 4 weight bytes
        // w[wo + c..wo + c + 4] lie in the slices (the table keeps the
        // largest offsets of its entries).
        let x_end = tab.max_x().checked_add(c).and_then(|v| v.checked_add(4));
        let w_end = tab.max_w().checked_add(c).and_then(|v| v.checked_add(4));
        if !matches!(x_end, Some(e) if e <= x.len()) || !matches!(w_end, Some(e) if e <= w.len()) {
            return Err(fault(text!("depthwise taps reach outside the slices")));
        }
        let px = x.as_ptr().wrapping_add(c);
        let pw = w.as_ptr().wrapping_add(c);
        let tab_ptr = taps.as_ptr();
        let tab_end = tab_ptr.wrapping_add(taps.len());
        let [a0, a1, a2, a3] = acc;
        // SAFETY: the loop runs once per table entry (≥ 1; `tab` walks the
        // `[u32; 2]` entries, word-aligned as the double-word load needs,
        // and stops at `tab_end`, one past the last). Each pass reads the 4
        // bytes at px + xo = x[xo + c..] and at pw + wo = w[wo + c..], in
        // bounds for every entry by the checks above (xo ≤ max_x, wo ≤
        // max_w); these byte loads may be unaligned, which plain `ldr`
        // allows on ARMv7E-M / ARMv8-M Mainline. Registers only, no stack,
        // no writes to memory; the flags are clobbered (`cmp`).
        unsafe {
            asm!(
                "2:",
                "ldrd {xo}, {wo}, [{tab}], #8",
                "ldr {xo}, [{px}, {xo}]",
                "ldr {wo}, [{pw}, {wo}]",
                "sxtb16 {t1}, {xo}",
                "sxtb16 {t2}, {wo}",
                "smlabb {a0}, {t1}, {t2}, {a0}",
                "smlatt {a2}, {t1}, {t2}, {a2}",
                "sxtb16 {t1}, {xo}, ror #8",
                "sxtb16 {t2}, {wo}, ror #8",
                "smlabb {a1}, {t1}, {t2}, {a1}",
                "smlatt {a3}, {t1}, {t2}, {a3}",
                "cmp {tab}, {end}",
                "bne 2b",
                tab = inout(reg) tab_ptr => _,
                end = in(reg) tab_end,
                px = in(reg) px,
                pw = in(reg) pw,
                a0 = inout(reg) *a0,
                a1 = inout(reg) *a1,
                a2 = inout(reg) *a2,
                a3 = inout(reg) *a3,
                xo = out(reg) _,
                wo = out(reg) _,
                t1 = out(reg) _,
                t2 = out(reg) _,
                options(nostack, readonly),
            );
        }
        Ok(())
    }

    fn run(
        w: &[i8],
        w_stride: usize,
        panel: &[u32],
        groups: usize,
        acc: &mut [i32],
    ) -> Result<(), Error> {
        if groups == 0 {
            return Ok(());
        }
        // The facts the asm block relies on, checked here in safe code:
        // row 0 has 4·groups bytes from `w`, row 1 as many from
        // `w + w_stride`, the panel 4·groups words, and 4 accumulators.
        let k = groups.checked_mul(4).ok_or(fault(text!("tile too long")))?;
        let row1_end = w_stride
            .checked_add(k)
            .ok_or(fault(text!("tile too long")))?;
        if w.len() < k || w.len() < row1_end {
            return Err(fault(text!("tile weights too short")));
        }
        if panel.len() < k {
            return Err(fault(text!("tile panel too short")));
        }
        let [a00, a01, a10, a11] = acc else {
            return Err(fault(text!("tile accumulators")));
        };
        let w0 = w.as_ptr();
        let w1 = w.as_ptr().wrapping_add(w_stride);
        let px = panel.as_ptr();
        // SAFETY: `groups` ≥ 1 groups run (two per loop pass, then the odd
        // one); each group reads 4 bytes at `w0` and at `w1` (post-
        // incremented by 4) and the 4 panel words at `px` (post-incremented
        // by 16, then read at −16..−4). So it reads
        // w[0..4·groups], w[w_stride..w_stride + 4·groups] and
        // panel[0..4·groups], all in bounds by the checks above. The panel
        // is a `u32` slice (word-aligned); weight words may be unaligned,
        // which plain `ldr` allows on ARMv7E-M / ARMv8-M Mainline (no
        // double-word or multiple loads are used). Registers only, no
        // stack, no writes to memory; the flags are clobbered (`subs`, `adds`).
        unsafe {
            asm!(
                // Two groups per pass while two are left, then the odd one.
                "subs {n}, {n}, #2",
                "blt 3f",
                "2:",
                tile_group!(),
                tile_group!(),
                "subs {n}, {n}, #2",
                "bge 2b",
                "3:",
                "adds {n}, {n}, #2",
                "beq 4f",
                tile_group!(),
                "4:",
                w0 = inout(reg) w0 => _,
                w1 = inout(reg) w1 => _,
                px = inout(reg) px => _,
                n = inout(reg) groups => _,
                a00 = inout(reg) *a00,
                a01 = inout(reg) *a01,
                a10 = inout(reg) *a10,
                a11 = inout(reg) *a11,
                t0 = out(reg) _,
                t1 = out(reg) _,
                t2 = out(reg) _,
                t3 = out(reg) _,
                options(nostack, readonly),
            );
        }
        Ok(())
    }
}

// ---------------------------------------------------------------------------
// Depthwise 3×3 row kernel (see `kernels::depthwise` for the row-pair layout).
// ---------------------------------------------------------------------------

use super::depthwise::{row_fits, RowKernel, RP};

/// The DSP row kernel of `depthwise3x3`: two output pixels per pass, per
/// slot row one dual multiply-accumulate per pixel for taps 0 and 1 and a
/// 16×16 multiply-accumulate for tap 2; equals `depthwise::Portable` on
/// every input (all sums wrap modulo 2^32).
pub struct DwRow;

impl RowKernel for DwRow {
    fn row(plane: &mut [u32], w: &[u32; 5], n: usize, stride2: bool) -> Result<(), Error> {
        // The facts the asm blocks rely on, checked here in safe code: `n`
        // even and at most STRIP = RP − 2, and the plane PLANE = 4·RP words.
        row_fits(plane, n)?;
        let pairs = n / 2;
        if pairs == 0 {
            return Ok(());
        }
        let p = plane.as_mut_ptr();
        let [w0, w1, w2, w3, w4] = *w;
        // SAFETY: the loop runs `pairs` ≥ 1 times and advances `p` by 8
        // bytes (2 words) per pass, so on pass q (0-based) it reads words
        // r·RP + 2q + {0, 1, 2, 3} for r < 3 (at most 2·RP + n + 1 ≤
        // 3·RP − 1 since n ≤ RP − 2) and writes words 3·RP + 2q + {0, 1}
        // (at most 3·RP + n − 1 < 4·RP): all inside `plane` (≥ 4·RP words,
        // checked by `row_fits`), which is borrowed mutably, so nothing else
        // reads or writes it. `p` is word-aligned (a `u32` slice) as the
        // double-word loads and stores need. No stack; the flags are
        // clobbered (`subs`).
        unsafe {
            if stride2 {
                asm!(
                    "2:",
                    "ldrd {t0}, {t1}, [{p}], #8",
                    "smuad {a0}, {t0}, {w0}",
                    "smuad {a1}, {t1}, {w0}",
                    "smlabb {a0}, {t1}, {w3}, {a0}",
                    "ldr {t0}, [{p}]",
                    "smlabb {a1}, {t0}, {w3}, {a1}",
                    "ldrd {t0}, {t1}, [{p}, #{r1}]",
                    "smlad {a0}, {t0}, {w1}, {a0}",
                    "smlad {a1}, {t1}, {w1}, {a1}",
                    "smlabt {a0}, {t1}, {w3}, {a0}",
                    "ldr {t0}, [{p}, #{r1e}]",
                    "smlabt {a1}, {t0}, {w3}, {a1}",
                    "ldrd {t0}, {t1}, [{p}, #{r2}]",
                    "smlad {a0}, {t0}, {w2}, {a0}",
                    "smlad {a1}, {t1}, {w2}, {a1}",
                    "smlabb {a0}, {t1}, {w4}, {a0}",
                    "ldr {t0}, [{p}, #{r2e}]",
                    "smlabb {a1}, {t0}, {w4}, {a1}",
                    "strd {a0}, {a1}, [{p}, #{acc}]",
                    "subs {n}, {n}, #1",
                    "bne 2b",
                    p = inout(reg) p => _,
                    n = inout(reg) pairs => _,
                    w0 = in(reg) w0,
                    w1 = in(reg) w1,
                    w2 = in(reg) w2,
                    w3 = in(reg) w3,
                    w4 = in(reg) w4,
                    a0 = out(reg) _,
                    a1 = out(reg) _,
                    t0 = out(reg) _,
                    t1 = out(reg) _,
                    r1 = const 4 * RP - 8,
                    r1e = const 4 * RP,
                    r2 = const 8 * RP - 8,
                    r2e = const 8 * RP,
                    acc = const 12 * RP - 8,
                    options(nostack),
                );
            } else {
                asm!(
                    "2:",
                    "ldrd {t0}, {t1}, [{p}], #8",
                    "smuad {a0}, {t0}, {w0}",
                    "smuad {a1}, {t1}, {w0}",
                    "ldrd {t0}, {t1}, [{p}]",
                    "smlabb {a0}, {t0}, {w3}, {a0}",
                    "smlabb {a1}, {t1}, {w3}, {a1}",
                    "ldrd {t0}, {t1}, [{p}, #{r1}]",
                    "smlad {a0}, {t0}, {w1}, {a0}",
                    "smlad {a1}, {t1}, {w1}, {a1}",
                    "ldrd {t0}, {t1}, [{p}, #{r1e}]",
                    "smlabt {a0}, {t0}, {w3}, {a0}",
                    "smlabt {a1}, {t1}, {w3}, {a1}",
                    "ldrd {t0}, {t1}, [{p}, #{r2}]",
                    "smlad {a0}, {t0}, {w2}, {a0}",
                    "smlad {a1}, {t1}, {w2}, {a1}",
                    "ldrd {t0}, {t1}, [{p}, #{r2e}]",
                    "smlabb {a0}, {t0}, {w4}, {a0}",
                    "smlabb {a1}, {t1}, {w4}, {a1}",
                    "strd {a0}, {a1}, [{p}, #{acc}]",
                    "subs {n}, {n}, #1",
                    "bne 2b",
                    p = inout(reg) p => _,
                    n = inout(reg) pairs => _,
                    w0 = in(reg) w0,
                    w1 = in(reg) w1,
                    w2 = in(reg) w2,
                    w3 = in(reg) w3,
                    w4 = in(reg) w4,
                    a0 = out(reg) _,
                    a1 = out(reg) _,
                    t0 = out(reg) _,
                    t1 = out(reg) _,
                    r1 = const 4 * RP - 8,
                    r1e = const 4 * RP,
                    r2 = const 8 * RP - 8,
                    r2e = const 8 * RP,
                    acc = const 12 * RP - 8,
                    options(nostack),
                );
            }
        }
        Ok(())
    }
}
