//! On-target kernel equality: random int8 conv2d and depthwise layers (odd
//! channel counts, windows not a multiple of 4 long, windows of up to 810
//! values (two panels), odd channel counts whose row-padded weight copy does not fit,
//! first layers with 1–3 input channels, padding, strides, dilation, pointwise,
//! extreme values and zero points, wrapping sums)
//! through the micro-kernel drivers with this target's kernel and with the
//! portable one, every 4th case also through the reference loop nests; all
//! must agree byte for byte. Prints `kernel-match dsp=<0|1> cases=<n> mismatches=<m>`
//! over semihosting and exits with success only when m = 0.
#![no_std]
#![no_main]

use core::fmt::Write;
use cortex_m_rt::entry;
use cortex_m_semihosting::{debug, hio};
use midge_runtime::kernels::int8::Int8Arith;
use midge_runtime::kernels::{conv2d_ref, depthwise, depthwise_ref, tile};
use midge_runtime::repr::{Shape, Window};
use panic_halt as _;

/// Random cases run (the check asks for at least 1 000).
const CASES: u32 = 1200;
/// Most input channels (a 3×3 window of 810 values: two panels of the
/// tile driver, whose panel holds `tile::PANEL_K` = 576).
const MAX_C: usize = 90;
const MAX_X: usize = 7 * 7 * MAX_C;
/// Weight bound: 20 output channels × 3×3×21, or 9 × 3×3×90.
const MAX_W: usize = 9 * 3 * 3 * MAX_C;
/// Output bound: 7 + 2 + 2 padded rows and columns with a 1×1 window.
const MAX_Y: usize = 11 * 11 * MAX_C;

/// xorshift32: a small deterministic generator (common practice).
struct Rng(u32);

impl Rng {
    fn next(&mut self) -> u32 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 17;
        x ^= x << 5;
        self.0 = x;
        x
    }
    /// Uniform-ish in lo..=hi.
    fn range(&mut self, lo: i32, hi: i32) -> i32 {
        lo + (self.next() % (hi - lo + 1) as u32) as i32
    }
    fn value(&mut self, extreme: bool) -> i8 {
        if extreme {
            if self.next() & 1 == 0 {
                -128
            } else {
                127
            }
        } else {
            self.next() as i8
        }
    }
}

fn halt(status: debug::ExitStatus) -> ! {
    debug::exit(status);
    loop {
        cortex_m::asm::wfi();
    }
}

#[entry]
fn main() -> ! {
    let mut out = match hio::hstdout() {
        Ok(o) => o,
        Err(_) => halt(debug::EXIT_FAILURE),
    };
    let mut rng = Rng(0x2545_f491);
    let mut x = [0i8; MAX_X];
    let mut w = [0i8; MAX_W];
    let mut bias = [0i32; MAX_C];
    let mut rq = [0i32; 2 * MAX_C];
    let (mut y_sel, mut y_port, mut y_ref) = ([0i8; MAX_Y], [0i8; MAX_Y], [0i8; MAX_Y]);
    let mut cases = 0u32;
    let mut mismatches = 0u32;
    while cases < CASES {
        let pointwise = rng.next().is_multiple_of(5);
        let r = |rng: &mut Rng, lo, hi| rng.range(lo, hi) as u16;
        let win = if pointwise {
            Window::new((1, 1), (1, 1), (1, 1), [0; 4])
        } else {
            let dil = if rng.next().is_multiple_of(6) { 2 } else { 1 };
            Window::new(
                (r(&mut rng, 1, 3), r(&mut rng, 1, 3)),
                (r(&mut rng, 1, 2), r(&mut rng, 1, 2)),
                (dil, dil),
                [0; 4].map(|_| r(&mut rng, 0, 2)),
            )
        };
        let (ih, iw) = (r(&mut rng, 1, 7), r(&mut rng, 1, 7));
        let ic = match rng.next() % 8 {
            // Long windows and first layers.
            0 => r(&mut rng, 22, MAX_C as i32),
            1 => r(&mut rng, 1, 3),
            _ => r(&mut rng, 1, 21),
        };
        // Now and then more output channels (with odd channel counts the
        // row-padded weight copy then may not fit).
        let oc = if rng.next().is_multiple_of(6) {
            r(&mut rng, 17, 20)
        } else {
            r(&mut rng, 1, 9)
        };
        // Many channels: a 3×3 window, so the window spans two panels.
        let win = if ic > 64 && !pointwise {
            Window::new((3, 3), (win.stride_h, win.stride_w), (1, 1), [1; 4])
        } else {
            win
        };
        let Some((oh, ow)) = win.output_hw(ih, iw) else {
            continue;
        };
        let xs = Shape::new(ih, iw, ic);
        let ys = Shape::new(oh, ow, oc);
        let n_w = oc as usize * win.kh as usize * win.kw as usize * ic as usize;
        if xs.elems() > MAX_X || n_w > MAX_W || ys.elems() > MAX_Y {
            continue;
        }
        let extreme = rng.next().is_multiple_of(3);
        for v in x.iter_mut().take(xs.elems()) {
            *v = rng.value(extreme);
        }
        for v in w.iter_mut().take(n_w) {
            *v = rng.value(extreme);
        }
        let wrap = rng.next().is_multiple_of(7);
        for b in bias.iter_mut() {
            *b = if wrap {
                if rng.next() & 1 == 0 {
                    i32::MAX - 1000
                } else {
                    i32::MIN + 1000
                }
            } else {
                rng.range(-20000, 20000)
            };
        }
        for p in rq.chunks_exact_mut(2) {
            p[0] = (1 << 30) + (rng.next() >> 2) as i32;
            p[1] = rng.range(28, 44);
        }
        let lo = rng.range(-128, 0);
        let a = Int8Arith {
            zp_in: if extreme {
                rng.value(true)
            } else {
                rng.next() as i8
            },
            zp_out: if extreme {
                rng.value(true) as i32
            } else {
                rng.range(-128, 127)
            },
            bias: &bias[..oc as usize],
            requant: &rq[..2 * oc as usize],
            clamp: [lo, rng.range(lo, 127)],
        };
        let (x, w) = (&x[..xs.elems()], &w[..n_w]);
        let n_y = ys.elems();
        let sel = tile::conv2d::<tile::Selected>(&a, x, xs, w, &win, &mut y_sel[..n_y], ys);
        let port = tile::conv2d::<tile::Portable>(&a, x, xs, w, &win, &mut y_port[..n_y], ys);
        let mut same = sel.is_ok() && port.is_ok() && y_sel[..n_y] == y_port[..n_y];
        if cases.is_multiple_of(4) {
            let oracle = conv2d_ref(&a, x, xs, w, &win, &mut y_ref[..n_y], ys);
            same &= oracle.is_ok() && y_ref[..n_y] == y_port[..n_y];
        }
        if !same {
            mismatches += 1;
            let _ = writeln!(
                out,
                "mismatch case {cases}: conv2d {win:?} in {ih}x{iw}x{ic} out {oh}x{ow}x{oc}"
            );
        }
        // Depthwise of the same input and window (ic channels).
        let a = Int8Arith {
            bias: &bias[..ic as usize],
            requant: &rq[..2 * ic as usize],
            ..a
        };
        let ys = Shape::new(oh, ow, ic);
        let (n_y, n_w) = (ys.elems(), win.kh as usize * win.kw as usize * ic as usize);
        let w = &w[..n_w.min(w.len())];
        let sel = tile::depthwise::<tile::Selected>(&a, x, xs, w, &win, &mut y_sel[..n_y], ys);
        let port = tile::depthwise::<tile::Portable>(&a, x, xs, w, &win, &mut y_port[..n_y], ys);
        let mut same = sel.is_ok() && port.is_ok() && y_sel[..n_y] == y_port[..n_y];
        if cases.is_multiple_of(4) {
            let oracle = depthwise_ref(&a, x, xs, w, &win, &mut y_ref[..n_y], ys);
            same &= oracle.is_ok() && y_ref[..n_y] == y_port[..n_y];
        }
        if !same {
            mismatches += 1;
            let _ = writeln!(
                out,
                "mismatch case {cases}: depthwise {win:?} in {ih}x{iw}x{ic}"
            );
        }
        cases += 1;
    }
    let dw = depthwise3x3_cases(&mut rng, &mut out, &mut x, &mut w, &mut y_sel, &mut y_port, &mut y_ref);
    let _ = writeln!(
        out,
        "depthwise3x3-match dsp={} cases={DW_CASES} mismatches={dw}",
        tile::DSP as u8
    );
    mismatches += dw;
    let _ = writeln!(
        out,
        "kernel-match dsp={} cases={cases} mismatches={mismatches}",
        tile::DSP as u8
    );
    halt(if mismatches == 0 {
        debug::EXIT_SUCCESS
    } else {
        debug::EXIT_FAILURE
    })
}

/// Random 3×3 depthwise cases for `depthwise::depthwise3x3` (the check asks
/// for at least 1 000).
const DW_CASES: u32 = 1100;

/// `DW_CASES` random 3×3 depthwise layers through the row driver with this
/// target's row kernel and with the portable one, every 3rd also through
/// `depthwise_ref`: horizontal stride 1 and 2, vertical strides 1–3 and
/// dilations 1–2, padding 0–3, widths beyond one strip, channel counts
/// 1..=45 (most not multiples of 4), extreme values and zero points, biases
/// near the i32 ends. Returns the number of mismatching cases.
#[allow(clippy::too_many_arguments)]
fn depthwise3x3_cases(
    rng: &mut Rng,
    out: &mut impl Write,
    x: &mut [i8],
    w: &mut [i8],
    y_sel: &mut [i8],
    y_port: &mut [i8],
    y_ref: &mut [i8],
) -> u32 {
    let mut bias = [0i32; MAX_C];
    let mut rq = [0i32; 2 * MAX_C];
    let (mut cases, mut mismatches) = (0u32, 0u32);
    while cases < DW_CASES {
        let r = |rng: &mut Rng, lo, hi| rng.range(lo, hi) as u16;
        let win = Window::new(
            (3, 3),
            (r(rng, 1, 3), r(rng, 1, 2)),
            (r(rng, 1, 2), 1),
            [0; 4].map(|_| r(rng, 0, 3)),
        );
        let wide = rng.next().is_multiple_of(8);
        let strip = depthwise::STRIP as i32;
        let (ih, iw, c) = if wide {
            (r(rng, 1, 3), r(rng, strip - 4, 2 * strip + 7), r(rng, 1, 6))
        } else {
            (r(rng, 1, 9), r(rng, 1, 12), r(rng, 1, MAX_C as i32))
        };
        let Some((oh, ow)) = win.output_hw(ih, iw) else {
            continue;
        };
        let (xs, ys) = (Shape::new(ih, iw, c), Shape::new(oh, ow, c));
        let (n_x, n_w, n_y) = (xs.elems(), 9 * c as usize, ys.elems());
        if n_x > x.len() || n_w > w.len() || n_y > y_sel.len() {
            continue;
        }
        let extreme = rng.next().is_multiple_of(3);
        for v in x.iter_mut().take(n_x) {
            *v = rng.value(extreme);
        }
        for v in w.iter_mut().take(n_w) {
            *v = rng.value(extreme);
        }
        let wrap = rng.next().is_multiple_of(7);
        for b in bias.iter_mut() {
            *b = match (wrap, rng.next() & 1) {
                (true, 0) => i32::MAX - 1000,
                (true, _) => i32::MIN + 1000,
                _ => rng.range(-20000, 20000),
            };
        }
        for p in rq.chunks_exact_mut(2) {
            p[0] = (1 << 30) + (rng.next() >> 2) as i32;
            p[1] = rng.range(28, 44);
        }
        let lo = rng.range(-128, 0);
        let a = Int8Arith {
            zp_in: rng.value(extreme),
            zp_out: rng.range(-128, 127),
            bias: &bias[..c as usize],
            requant: &rq[..2 * c as usize],
            clamp: [lo, rng.range(lo, 127)],
        };
        let (x, w) = (&x[..n_x], &w[..n_w]);
        let sel = depthwise::depthwise3x3::<depthwise::Selected>(
            &a, x, xs, w, &win, &mut y_sel[..n_y], ys,
        );
        let port = depthwise::depthwise3x3::<depthwise::Portable>(
            &a, x, xs, w, &win, &mut y_port[..n_y], ys,
        );
        let mut same = sel.is_ok() && port.is_ok() && y_sel[..n_y] == y_port[..n_y];
        if cases.is_multiple_of(3) {
            let oracle = depthwise_ref(&a, x, xs, w, &win, &mut y_ref[..n_y], ys);
            same &= oracle.is_ok() && y_ref[..n_y] == y_port[..n_y];
        }
        if !same {
            mismatches += 1;
            let _ = writeln!(
                out,
                "mismatch depthwise3x3 case {cases}: {win:?} in {ih}x{iw}x{c}"
            );
        }
        cases += 1;
    }
    mismatches
}
