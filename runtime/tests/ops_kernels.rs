//! The fast kernels against their reference loop nests, called directly
//! (below `run_layer`) on random shapes: conv2d (patch and row paths),
//! depthwise (table path and its fallbacks), pooling, dense, `axis_range`
//! and `requantize_fast`. Every comparison is byte for byte.

use half::f16;
use midge_runtime::kernels::fp16::{AvgF16, F16Arith, MaxF16};
use midge_runtime::kernels::int8::{requantize_fast, AvgI8, Int8Arith, MaxI8};
use midge_runtime::kernels::{self, tap, tile, Arith, Pool};
use midge_runtime::repr::{Shape, Window};
use midge_runtime::requant::requantize;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

#[allow(clippy::too_many_arguments)]
fn window(kh: u16, kw: u16, sh: u16, sw: u16, dh: u16, dw: u16, pad: [u16; 4]) -> Window {
    Window::new((kh, kw), (sh, sw), (dh, dw), pad)
}

/// A random window and input that give a non-empty output. `big` allows
/// kernels up to 9×9 (more taps than the depthwise table holds).
fn random_shape(rng: &mut ChaCha8Rng, c_max: u16, big: bool) -> (Window, Shape, u16, u16) {
    loop {
        let kmax = if big { 9 } else { 4 };
        let win = window(
            rng.gen_range(1..=kmax),
            rng.gen_range(1..=kmax),
            rng.gen_range(1..=3),
            rng.gen_range(1..=3),
            rng.gen_range(1..=2),
            rng.gen_range(1..=2),
            [0; 4].map(|_| rng.gen_range(0..=3)),
        );
        let (ih, iw) = (rng.gen_range(1..=12), rng.gen_range(1..=12));
        let c = rng.gen_range(1..=c_max);
        if let Some((oh, ow)) = win.output_hw(ih, iw) {
            return (win, Shape::new(ih, iw, c), oh, ow);
        }
    }
}

fn int8_arith<'a>(
    rng: &mut ChaCha8Rng,
    bias: &'a mut Vec<i32>,
    rq: &'a mut Vec<i32>,
    n: usize,
) -> Int8Arith<'a> {
    *bias = (0..n).map(|_| rng.gen_range(-20000..=20000)).collect();
    // Shifts across both sides of the 33 boundary of `requantize_fast`.
    *rq = (0..n)
        .flat_map(|_| [rng.gen_range(1 << 30..=i32::MAX), rng.gen_range(28..=44)])
        .collect();
    let lo = rng.gen_range(-128..=0);
    Int8Arith {
        zp_in: rng.gen(),
        zp_out: rng.gen_range(-128..=127),
        bias,
        requant: rq,
        clamp: [lo, rng.gen_range(lo..=127)],
    }
}

fn f16s(rng: &mut ChaCha8Rng, n: usize, r: f32) -> Vec<f16> {
    (0..n)
        .map(|_| f16::from_f32(rng.gen_range(-r..r)))
        .collect()
}

/// conv2d_fast against conv2d_ref, int8 and fp16; in_c up to 40 so that
/// some windows exceed the 256-value patch and are summed in bands, and
/// out_c up to 70 so that some pixels take two accumulator passes.
#[test]
fn conv2d_fast_equals_reference() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0401);
    for i in 0..400 {
        let (win, xs, oh, ow) = random_shape(&mut rng, if i % 4 == 0 { 40 } else { 6 }, false);
        // Now and then more output channels than one accumulator pass (64).
        let oc = if i % 10 == 3 {
            rng.gen_range(60..=70)
        } else {
            rng.gen_range(1..=9)
        };
        let ys = Shape::new(oh, ow, oc);
        let n_w = oc as usize * win.kh as usize * win.kw as usize * xs.c as usize;
        let x: Vec<i8> = (0..xs.elems()).map(|_| rng.gen()).collect();
        let w: Vec<i8> = (0..n_w).map(|_| rng.gen()).collect();
        let (mut b, mut q) = (Vec::new(), Vec::new());
        let a = int8_arith(&mut rng, &mut b, &mut q, oc as usize);
        let (mut fast, mut slow) = (vec![0i8; ys.elems()], vec![1i8; ys.elems()]);
        kernels::conv2d_fast(&a, &x, xs, &w, &win, &mut fast, ys).unwrap();
        kernels::conv2d_ref(&a, &x, xs, &w, &win, &mut slow, ys).unwrap();
        assert_eq!(fast, slow, "int8 {win:?} {xs:?} {ys:?}");

        let (xf, wf) = (f16s(&mut rng, x.len(), 4.0), f16s(&mut rng, w.len(), 1.0));
        let bias: Vec<f32> = (0..oc).map(|_| rng.gen_range(-2.0..2.0)).collect();
        let a = F16Arith {
            bias: &bias,
            clamp: [-65504.0, 65504.0],
        };
        let (mut fast, mut slow) = (vec![f16::ZERO; ys.elems()], vec![f16::ONE; ys.elems()]);
        kernels::conv2d_fast(&a, &xf, xs, &wf, &win, &mut fast, ys).unwrap();
        kernels::conv2d_ref(&a, &xf, xs, &wf, &win, &mut slow, ys).unwrap();
        let bits = |v: &[f16]| v.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&fast), bits(&slow), "fp16 {win:?} {xs:?} {ys:?}");
    }
}

/// The micro-kernel driver with the portable tile kernel against
/// conv2d_ref: odd channel counts, windows not a multiple of 4 long, padding,
/// strides, pointwise layers, windows too long for the panel (handed to
/// conv2d_fast), extreme values and zero points, and biases near the i32
/// limits so that the wrapping sums wrap.
#[test]
fn tile_conv2d_equals_reference() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0409);
    // Windows longer than one panel (several panels per pixel pair).
    let mut long = 0;
    for i in 0..400 {
        let (mut win, mut xs, mut oh, mut ow) =
            random_shape(&mut rng, if i % 4 == 0 { 70 } else { 7 }, false);
        if i % 5 == 1 {
            // Pointwise: 1×1, unit stride, no padding.
            win = window(1, 1, 1, 1, 1, 1, [0; 4]);
            (oh, ow) = (xs.h, xs.w);
            xs = Shape::new(oh, ow, rng.gen_range(1..=40));
        }
        let oc = if i % 10 == 3 {
            rng.gen_range(60..=70)
        } else {
            rng.gen_range(1..=9)
        };
        let ys = Shape::new(oh, ow, oc);
        let n_w = oc as usize * win.kh as usize * win.kw as usize * xs.c as usize;
        let extreme = i % 3 == 2;
        let val = |rng: &mut ChaCha8Rng| -> i8 {
            if extreme {
                if rng.gen() {
                    127
                } else {
                    -128
                }
            } else {
                rng.gen()
            }
        };
        let x: Vec<i8> = (0..xs.elems()).map(|_| val(&mut rng)).collect();
        let w: Vec<i8> = (0..n_w).map(|_| val(&mut rng)).collect();
        let (mut b, mut q) = (Vec::new(), Vec::new());
        let mut a = int8_arith(&mut rng, &mut b, &mut q, oc as usize);
        if extreme {
            a.zp_in = if rng.gen() { 127 } else { -128 };
            a.zp_out = if rng.gen() { 127 } else { -128 };
        }
        let b2: Vec<i32>;
        if i % 7 == 4 {
            b2 = (0..oc)
                .map(|_| {
                    if rng.gen() {
                        i32::MAX - 1000
                    } else {
                        i32::MIN + 1000
                    }
                })
                .collect();
            a.bias = &b2;
        }
        let (mut tiled, mut slow) = (vec![0i8; ys.elems()], vec![1i8; ys.elems()]);
        tile::conv2d::<tile::Portable>(&a, &x, xs, &w, &win, &mut tiled, ys).unwrap();
        kernels::conv2d_ref(&a, &x, xs, &w, &win, &mut slow, ys).unwrap();
        assert_eq!(tiled, slow, "int8 {win:?} {xs:?} {ys:?}");
        long += usize::from(n_w / oc.max(1) as usize > tile::PANEL_K);
    }
    assert!(long >= 5, "only {long} cases span several panels");
}

/// The depthwise driver with the portable 4-channel tap kernel against
/// depthwise_ref: channel counts 1..=70 (not multiples of 4, more than one
/// block), windows up to 9×9 (more taps than the tap table holds), padding,
/// strides, dilation, extreme values and zero points, wrapping sums.
#[test]
fn tile_depthwise_equals_reference() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0410);
    for i in 0..300 {
        let (win, xs, oh, ow) =
            random_shape(&mut rng, if i % 4 == 0 { 70 } else { 13 }, i % 5 == 0);
        let ys = Shape::new(oh, ow, xs.c);
        let n_w = win.kh as usize * win.kw as usize * xs.c as usize;
        let extreme = i % 3 == 2;
        let val = |rng: &mut ChaCha8Rng| -> i8 {
            match (extreme, rng.gen::<bool>()) {
                (true, true) => 127,
                (true, false) => -128,
                _ => rng.gen(),
            }
        };
        let x: Vec<i8> = (0..xs.elems()).map(|_| val(&mut rng)).collect();
        let w: Vec<i8> = (0..n_w).map(|_| val(&mut rng)).collect();
        let (mut b, mut q) = (Vec::new(), Vec::new());
        let mut a = int8_arith(&mut rng, &mut b, &mut q, xs.c as usize);
        let b2: Vec<i32>;
        if i % 7 == 4 {
            b2 = (0..xs.c)
                .map(|_| {
                    if rng.gen() {
                        i32::MAX - 100
                    } else {
                        i32::MIN + 100
                    }
                })
                .collect();
            a.bias = &b2;
        }
        let (mut tiled, mut slow) = (vec![0i8; ys.elems()], vec![1i8; ys.elems()]);
        tile::depthwise::<tile::Portable>(&a, &x, xs, &w, &win, &mut tiled, ys).unwrap();
        kernels::depthwise_ref(&a, &x, xs, &w, &win, &mut slow, ys).unwrap();
        assert_eq!(tiled, slow, "int8 {win:?} {xs:?} {ys:?}");
    }
}

/// depthwise_fast against depthwise_ref: channel counts 1..=40 (more than
/// one 32-channel pass), windows up to 9×9 (rows longer than the three-tap
/// step), int8 and fp16.
#[test]
fn depthwise_fast_equals_reference() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0402);
    for i in 0..400 {
        let (win, xs, oh, ow) =
            random_shape(&mut rng, if i % 4 == 0 { 40 } else { 13 }, i % 5 == 0);
        let ys = Shape::new(oh, ow, xs.c);
        let n_w = win.kh as usize * win.kw as usize * xs.c as usize;
        let x: Vec<i8> = (0..xs.elems()).map(|_| rng.gen()).collect();
        let w: Vec<i8> = (0..n_w).map(|_| rng.gen()).collect();
        let (mut b, mut q) = (Vec::new(), Vec::new());
        let a = int8_arith(&mut rng, &mut b, &mut q, xs.c as usize);
        let (mut fast, mut slow) = (vec![0i8; ys.elems()], vec![1i8; ys.elems()]);
        kernels::depthwise_fast(&a, &x, xs, &w, &win, &mut fast, ys).unwrap();
        kernels::depthwise_ref(&a, &x, xs, &w, &win, &mut slow, ys).unwrap();
        assert_eq!(fast, slow, "int8 {win:?} {xs:?}");

        let (xf, wf) = (f16s(&mut rng, x.len(), 4.0), f16s(&mut rng, w.len(), 1.0));
        let bias: Vec<f32> = (0..xs.c).map(|_| rng.gen_range(-2.0..2.0)).collect();
        let a = F16Arith {
            bias: &bias,
            clamp: [0.0, 6.0],
        };
        let (mut fast, mut slow) = (vec![f16::ZERO; ys.elems()], vec![f16::ONE; ys.elems()]);
        kernels::depthwise_fast(&a, &xf, xs, &wf, &win, &mut fast, ys).unwrap();
        kernels::depthwise_ref(&a, &xf, xs, &wf, &win, &mut slow, ys).unwrap();
        let bits = |v: &[f16]| v.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&fast), bits(&slow), "fp16 {win:?} {xs:?}");
    }
}

fn pool_case<P: Pool>(p: &P, x: &[P::X], xs: Shape, win: &Window, ys: Shape, fill: P::X)
where
    P::X: PartialEq + core::fmt::Debug,
{
    let (mut fast, mut slow) = (vec![fill; ys.elems()], vec![fill; ys.elems()]);
    kernels::pool(p, x, xs, win, &mut fast, ys).unwrap();
    kernels::pool_ref(p, x, xs, win, &mut slow, ys).unwrap();
    assert_eq!(fast, slow, "{win:?} {xs:?}");
}

/// pool against pool_ref for max and average, int8 and fp16, including
/// windows whose padding leaves only part of the taps in bounds and the
/// global window.
#[test]
fn pool_equals_reference() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0403);
    for i in 0..400 {
        let (mut win, xs, oh, ow) = random_shape(&mut rng, 11, i % 5 == 0);
        let mut ys = Shape::new(oh, ow, xs.c);
        if i % 7 == 0 {
            win = kernels::global_window(xs.h, xs.w);
            ys = Shape::new(1, 1, xs.c);
        }
        let x: Vec<i8> = (0..xs.elems()).map(|_| rng.gen()).collect();
        let lo = rng.gen_range(-128..=0);
        let clamp = [lo, rng.gen_range(lo..=127)];
        pool_case(&MaxI8 { clamp }, &x, xs, &win, ys, 0);
        let avg = AvgI8 {
            zp: rng.gen_range(-128..=127),
            clamp,
        };
        pool_case(&avg, &x, xs, &win, ys, 0);
        let xf = f16s(&mut rng, x.len(), 8.0);
        let clamp = [-65504.0, 65504.0];
        let bits = |v: &[f16]| v.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        for max in [true, false] {
            let (mut fast, mut slow) = (vec![f16::ZERO; ys.elems()], vec![f16::ONE; ys.elems()]);
            if max {
                kernels::pool(&MaxF16 { clamp }, &xf, xs, &win, &mut fast, ys).unwrap();
                kernels::pool_ref(&MaxF16 { clamp }, &xf, xs, &win, &mut slow, ys).unwrap();
            } else {
                kernels::pool(&AvgF16 { clamp }, &xf, xs, &win, &mut fast, ys).unwrap();
                kernels::pool_ref(&AvgF16 { clamp }, &xf, xs, &win, &mut slow, ys).unwrap();
            }
            assert_eq!(bits(&fast), bits(&slow), "fp16 max={max} {win:?} {xs:?}");
        }
    }
}

/// dense (the grouped matrix-vector product) against dense_ref, with
/// output counts that leave every remainder of the group of four and need
/// two accumulator passes.
#[test]
fn dense_equals_reference() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0404);
    for _ in 0..200 {
        let (n_in, n_out) = (rng.gen_range(1..=70), rng.gen_range(1..=70));
        let x: Vec<i8> = (0..n_in).map(|_| rng.gen()).collect();
        let w: Vec<i8> = (0..n_in * n_out).map(|_| rng.gen()).collect();
        let (mut b, mut q) = (Vec::new(), Vec::new());
        let a = int8_arith(&mut rng, &mut b, &mut q, n_out);
        let (mut fast, mut slow) = (vec![0i8; n_out], vec![1i8; n_out]);
        kernels::dense(&a, &x, &w, &mut fast).unwrap();
        kernels::dense_ref(&a, &x, &w, &mut slow).unwrap();
        assert_eq!(fast, slow);
    }
}

/// `axis_range` against `tap` on every small case, dilation 0 included
/// (unchecked layers must still get the same answer as the reference).
#[test]
fn axis_range_matches_tap() {
    for len in 0..7usize {
        for k in 0..6usize {
            for stride in 0..4u16 {
                for dil in 0..4u16 {
                    for pad in 0..5u16 {
                        for o in 0..9usize {
                            let (lo, hi) = kernels::axis_range(o, k, stride, dil, pad, len);
                            for t in 0..k {
                                let inside = tap(o, t, stride, dil, pad, len).is_some();
                                assert_eq!(
                                    inside,
                                    (lo..hi).contains(&t),
                                    "o={o} k={k} s={stride} d={dil} p={pad} len={len} t={t}"
                                );
                            }
                        }
                    }
                }
            }
        }
    }
}

/// The documented requantization `floor((acc·m + 2^(s−1)) / 2^s)` in i128
/// (saturated to i32), s clamped to 1..=62.
fn rq_i128(acc: i32, m: i32, s: i32) -> i32 {
    let s = s.clamp(1, 62);
    let v = (acc as i128 * m as i128 + (1i128 << (s - 1))).div_euclid(1i128 << s);
    v.clamp(i32::MIN as i128, i32::MAX as i128) as i32
}

/// `requantize_fast` equals `requantize` and the i128 formula for every
/// shift, at the extremes of acc and m and on random values.
#[test]
fn requantize_fast_is_exact() {
    let edge = [i32::MIN, i32::MIN + 1, -65536, -1, 0, 1, 65535, i32::MAX];
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0405);
    for s in -2..=66 {
        for &acc in &edge {
            for &m in &edge {
                assert_eq!(
                    requantize_fast(acc, m, s),
                    rq_i128(acc, m, s),
                    "{acc} {m} {s}"
                );
            }
        }
        for _ in 0..2000 {
            let (acc, m): (i32, i32) = (rng.gen(), rng.gen());
            let acc = acc >> rng.gen_range(0..31);
            let want = rq_i128(acc, m, s);
            assert_eq!(requantize_fast(acc, m, s), want, "{acc} {m} {s}");
            assert_eq!(requantize(acc, m, s), want, "{acc} {m} {s}");
        }
    }
}

/// `Arith` is used through the trait in the kernels; this keeps a direct
/// check that int8 `finish` goes through the exact requantization.
#[test]
fn int8_finish_uses_exact_requantization() {
    let (bias, rq) = ([0], [1 << 30, 40]);
    let a = Int8Arith {
        zp_in: 0,
        zp_out: 3,
        bias: &bias,
        requant: &rq,
        clamp: [-128, 127],
    };
    // Hand-worked: 1000·2^30 / 2^40 = 1000/1024 = 0.977 → 1; plus zp 3 → 4.
    assert_eq!(a.finish(1000, 0), 4);
    // −512·2^30/2^40 = −0.5 → 0 (ties toward +∞); plus 3 → 3.
    assert_eq!(a.finish(-512, 0), 3);
}

/// `axis_range` (the in-bounds taps of one output position as a range, its
/// edge case divided in 32 bits) against `tap` tap by tap: small windows
/// exhaustively, and windows at the u16 limits of the format's fields.
#[test]
fn axis_range_equals_taps() {
    let check = |o: usize, k: u16, s: u16, d: u16, p: u16, len: usize| {
        let (lo, hi) = kernels::axis_range(o, k as usize, s, d, p, len);
        assert!(lo <= hi && hi <= k as usize, "{o} {k} {s} {d} {p} {len}");
        for t in 0..k as usize {
            let inside = tap(o, t, s, d, p, len).is_some();
            assert_eq!(
                inside,
                (lo..hi).contains(&t),
                "{o} {k} {s} {d} {p} {len} tap {t}"
            );
        }
    };
    for k in 1..=5 {
        for s in 1..=3 {
            for d in 1..=3 {
                for p in 0..=4 {
                    for len in 1..=7 {
                        for o in 0..=8 {
                            check(o, k, s, d, p, len);
                        }
                    }
                }
            }
        }
    }
    let mut rng = ChaCha8Rng::seed_from_u64(9);
    for _ in 0..2_000 {
        let k = if rng.gen_bool(0.01) {
            u16::MAX
        } else {
            rng.gen_range(1..=300u16)
        };
        let big = |rng: &mut ChaCha8Rng| {
            if rng.gen_bool(0.5) {
                u16::MAX - rng.gen_range(0..4)
            } else {
                rng.gen_range(1..=u16::MAX)
            }
        };
        let (s, d, p) = (big(&mut rng), big(&mut rng), big(&mut rng));
        let len = rng.gen_range(1..=u16::MAX as usize);
        let o = rng.gen_range(0..=u16::MAX as usize);
        check(o, k, s, d, p, len);
    }
}

/// The 3×3 depthwise row driver with the portable row kernel against
/// depthwise_ref: horizontal stride 1 and 2, any vertical stride and
/// dilation, padding up to 3 (whole padded rows), widths beyond one strip,
/// channel counts 1..=70 (not multiples of 4), extreme values and zero
/// points, biases near the i32 ends (wrapping sums).
#[test]
fn depthwise3x3_equals_reference() {
    use midge_runtime::kernels::depthwise::{self as dw, STRIP};
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0933);
    for i in 0..600 {
        let win = window(
            3,
            3,
            rng.gen_range(1..=3),
            rng.gen_range(1..=2),
            rng.gen_range(1..=3),
            1,
            [0; 4].map(|_| rng.gen_range(0..=3)),
        );
        assert!(dw::fits(&win));
        let iw = if i % 9 == 0 {
            rng.gen_range(STRIP as u16..=2 * STRIP as u16 + 7)
        } else {
            rng.gen_range(1..=14)
        };
        let (ih, c) = (
            rng.gen_range(1..=9),
            rng.gen_range(1..=if i % 4 == 0 { 70 } else { 13 }),
        );
        let Some((oh, ow)) = win.output_hw(ih, iw) else {
            continue;
        };
        let (xs, ys) = (Shape::new(ih, iw, c), Shape::new(oh, ow, c));
        let extreme = i % 3 == 2;
        let val = |rng: &mut ChaCha8Rng| -> i8 {
            match (extreme, rng.gen::<bool>()) {
                (true, true) => 127,
                (true, false) => -128,
                _ => rng.gen(),
            }
        };
        let x: Vec<i8> = (0..xs.elems()).map(|_| val(&mut rng)).collect();
        let w: Vec<i8> = (0..9 * c as usize).map(|_| val(&mut rng)).collect();
        let (mut b, mut q) = (Vec::new(), Vec::new());
        let mut a = int8_arith(&mut rng, &mut b, &mut q, c as usize);
        if extreme {
            a.zp_in = if rng.gen() { 127 } else { -128 };
        }
        let b2: Vec<i32>;
        if i % 7 == 4 {
            b2 = (0..c)
                .map(|_| {
                    if rng.gen() {
                        i32::MAX - 100
                    } else {
                        i32::MIN + 100
                    }
                })
                .collect();
            a.bias = &b2;
        }
        let (mut rows, mut slow) = (vec![0i8; ys.elems()], vec![1i8; ys.elems()]);
        dw::depthwise3x3::<dw::Portable>(&a, &x, xs, &w, &win, &mut rows, ys).unwrap();
        kernels::depthwise_ref(&a, &x, xs, &w, &win, &mut slow, ys).unwrap();
        assert_eq!(rows, slow, "case {i}: {win:?} {xs:?} {ys:?}");
    }
}

// The 32-bit form of the int8 add (`AddI8::split_shift`) against the i64
// formula of FORMAT.md (`AddI8::apply`) on every pair of int8 inputs, for
// random constants including the extreme multipliers, shifts and zero points.
#[test]
fn add_split_shift_equals_formula() {
    use midge_runtime::kernels::int8::{self, AddI8};
    let mut rng = ChaCha8Rng::seed_from_u64(0xadd_0032);
    let all: Vec<(i8, i8)> = (-128..=127i32)
        .flat_map(|a| (-128..=127i32).map(move |b| (a as i8, b as i8)))
        .collect();
    let (xa, xb): (Vec<i8>, Vec<i8>) = all.iter().copied().unzip();
    for case in 0..24 {
        let pick = |rng: &mut ChaCha8Rng, lo: i32, hi: i32| match case % 4 {
            0 => lo,
            1 => hi,
            _ => rng.gen_range(lo..=hi),
        };
        let p = AddI8 {
            zp_a: pick(&mut rng, -128, 127),
            zp_b: pick(&mut rng, -128, 127),
            zp_out: pick(&mut rng, -128, 127),
            ma: pick(&mut rng, 0, i32::MAX),
            mb: rng.gen_range(0..=i32::MAX),
            rshift: if case < 8 {
                [10, 31][case % 2]
            } else {
                rng.gen_range(10..=31)
            },
            clamp: [-128, 127],
        };
        assert!(p.split_shift().is_some());
        let mut y = vec![0i8; all.len()];
        int8::add(&p, &xa, &xb, &mut y).unwrap();
        for ((&qa, &qb), &got) in xa.iter().zip(&xb).zip(&y) {
            assert_eq!(got, p.apply(qa, qb), "case {case}: {p:?} {qa} {qb}");
        }
    }
}
