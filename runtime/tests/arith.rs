//! The runtime's number crunching against exact arithmetic and published
//! facts: requantization against i128 rationals (zero tolerance), the
//! multiplier choice's error bound, integer and float rounding helpers, and
//! binary16 storage against IEEE 754-2008 and the `half` crate.

use half::f16;
use midge_runtime::exec::{check_layer, run_layer};
use midge_runtime::kernels::fp16::round_half_away;
use midge_runtime::kernels::int8::div_round_half_away;
use midge_runtime::repr::*;
use midge_runtime::requant::{requant_from_real, requantize};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// The documented rounding of `repr::Requant`, evaluated independently in
/// exact rational arithmetic: floor(acc·m / 2^s + 1/2) =
/// floor((2·acc·m + 2^s) / 2^(s+1)), saturated to i32.
fn requant_exact(acc: i32, m: i32, s: i32) -> i32 {
    let num = 2 * acc as i128 * m as i128 + (1i128 << s);
    let den = 1i128 << (s + 1);
    num.div_euclid(den)
        .clamp(i32::MIN as i128, i32::MAX as i128) as i32
}

#[test]
fn requantize_equals_exact_rational_rounding() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0001);
    for i in 0..200_000 {
        let m: i32 = rng.gen_range(0..=i32::MAX);
        let s: i32 = rng.gen_range(1..=62);
        // Mix full-range accumulators with small ones so both saturated and
        // in-range results (and exact ties) are common.
        let acc: i32 = match i % 4 {
            0 => rng.gen(),
            1 => rng.gen_range(-70_000..=70_000),
            2 => rng.gen_range(-300..=300) << rng.gen_range(0..20),
            _ => [i32::MIN, i32::MAX, 0, -1, 1][rng.gen_range(0..5)],
        };
        assert_eq!(
            requantize(acc, m, s),
            requant_exact(acc, m, s),
            "acc={acc} m={m} s={s}"
        );
    }
}

#[test]
fn requantize_ties_go_up_exhaustively_for_small_shifts() {
    // Every acc in −1024..=1024 with m = 1 and s in 1..=4: exact ties
    // (acc an odd multiple of 2^(s−1)) round toward +∞.
    for s in 1..=4 {
        for acc in -1024..=1024 {
            assert_eq!(requantize(acc, 1, s), requant_exact(acc, 1, s));
        }
    }
}

#[test]
fn requant_from_real_round_trip() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0002);
    for _ in 0..100_000 {
        // Log-uniform reals over the usual range of layer multipliers.
        let e: i32 = rng.gen_range(-31..=29);
        let real = (1.0 + rng.gen::<f64>()) * 2f64.powi(e);
        let r = requant_from_real(real).expect("in range");
        assert!(
            (1 << 30..=i32::MAX).contains(&r.multiplier),
            "{real} → {r:?}"
        );
        assert!((1..=62).contains(&r.rshift));
        let approx = r.multiplier as f64 * 2f64.powi(-r.rshift);
        // The difference of two f64 within a factor 2 of each other is exact
        // (Sterbenz), so the bound is checked without tolerance.
        let err = (approx - real).abs();
        assert!(err <= 2f64.powi(-r.rshift - 1), "{real}: err {err}");
        assert!(err <= real * 2f64.powi(-31) * (1.0 + 2f64.powi(-29)));
        // Nearest: neither neighbour is closer.
        for nb in [r.multiplier as f64 - 1.0, r.multiplier as f64 + 1.0] {
            assert!((nb * 2f64.powi(-r.rshift) - real).abs() >= err);
        }
    }
}

#[test]
fn quantized_multiplier_requantizes_like_the_real_one() {
    // For dyadic reals (exactly representable), rq with the chosen pair is
    // exactly round-half-up(acc · real), checked in i128.
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0003);
    for _ in 0..20_000 {
        let num: i64 = rng.gen_range(1..(1 << 20));
        let k: i32 = rng.gen_range(0..=40);
        let real = num as f64 / 2f64.powi(k);
        let Some(r) = requant_from_real(real) else {
            continue;
        };
        let acc: i32 = rng.gen_range(-1_000_000..=1_000_000);
        let exact = (2 * acc as i128 * num as i128 + (1i128 << k))
            .div_euclid(1i128 << (k + 1))
            .clamp(i32::MIN as i128, i32::MAX as i128);
        assert_eq!(
            requantize(acc, r.multiplier, r.rshift) as i128,
            exact,
            "{real} {acc}"
        );
    }
}

#[test]
fn integer_average_rounds_half_away_from_zero() {
    // Against exact rationals: sign(s)·floor(|s|/n + 1/2).
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0004);
    for _ in 0..100_000 {
        let sum: i32 = rng.gen_range(-100_000..=100_000);
        let n: u32 = rng.gen_range(1..=64);
        let mag = (2 * (sum as i128).abs() + n as i128) / (2 * n as i128);
        let expect = if sum < 0 { -mag } else { mag };
        assert_eq!(div_round_half_away(sum, n) as i128, expect, "{sum}/{n}");
    }
    // Hand-worked: −9/2 = −4.5 → −5; 9/2 → 5; −3/4 = −0.75 → −1; 5/4 → 1.
    assert_eq!(div_round_half_away(-9, 2), -5);
    assert_eq!(div_round_half_away(9, 2), 5);
    assert_eq!(div_round_half_away(-3, 4), -1);
    assert_eq!(div_round_half_away(5, 4), 1);
    assert_eq!(div_round_half_away(7, 0), 0);
}

#[test]
fn float_rounding_half_away_from_zero() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0005);
    for _ in 0..100_000 {
        // Quarter steps hit exact ties often.
        let x = rng.gen_range(-40_000i32..=40_000) as f32 * 0.25;
        let expect = (x as f64).abs().add_half_floor() * (x as f64).signum();
        assert_eq!(round_half_away(x) as f64, expect, "{x}");
    }
    assert_eq!(round_half_away(2.5), 3);
    assert_eq!(round_half_away(-2.5), -3);
    assert_eq!(round_half_away(0.49999997), 0);
    assert_eq!(round_half_away(f32::NAN), 0);
}

trait AddHalfFloor {
    fn add_half_floor(self) -> f64;
}
impl AddHalfFloor for f64 {
    fn add_half_floor(self) -> f64 {
        (self + 0.5).floor()
    }
}

// ---------------------------------------------------------------- binary16

fn pixels_f16_layer(params: &[f32], clamp: [f32; 2]) -> LayerRef<'_> {
    LayerRef {
        header: LayerHeader {
            op: Op::Pixels,
            act: Activation::None,
            inputs: [0, 0],
            output: 1,
            window: Window::default(),
            clamp_i8: [-128, 127],
            clamp_f32: clamp,
        },
        weights: Weights::None,
        bias: Bias::None,
        params: Params::F32(params),
    }
}

/// Runs pixels → fp16 on one byte with `x = p·a + b` and returns the stored bits.
fn store_through_pixels(p: u8, a: f32, b: f32, clamp: [f32; 2]) -> u16 {
    let params = [a, b];
    let layer = pixels_f16_layer(&params, clamp);
    let tin = TensorRecord {
        shape: Shape::new(1, 1, 1),
        elem: ElemType::U8,
        quant: Quant::IDENTITY,
        offset: 0,
    };
    let tout = TensorRecord {
        elem: ElemType::F16,
        ..tin
    };
    // `parse` refuses clamps beyond ±65504 (so no fp16 activation is ever
    // infinite); the kernel's rounding is still exercised without them.
    let checked = check_layer(0, &layer, &tin, None, &tout);
    assert_eq!(checked.is_ok(), clamp != NO_CLAMP, "{checked:?}");
    let mut out = [f16::ZERO; 1];
    run_layer(
        &layer,
        (&tin, &[p]),
        None,
        (&tout, bytemuck::cast_slice_mut(&mut out)),
    )
    .unwrap();
    out[0].to_bits()
}

const NO_CLAMP: [f32; 2] = [f32::NEG_INFINITY, f32::INFINITY];
const CLAMP_65504: [f32; 2] = [-65504.0, 65504.0];

#[test]
fn binary16_largest_finite() {
    // IEEE 754-2008 binary16: emax = 15, p = 11 → largest finite
    // (2 − 2^−10)·2^15 = 65504, bits 0x7BFF.
    assert_eq!(f16::MAX.to_f32(), 65504.0);
    assert_eq!(store_through_pixels(255, 256.0, 224.0, NO_CLAMP), 0x7BFF);
    // Above the midpoint 65520 to the next power 65536, round to nearest
    // overflows to +∞ (IEEE 754-2008 §7.4), bits 0x7C00 ...
    assert_eq!(store_through_pixels(255, 256.0, 300.0, NO_CLAMP), 0x7C00);
    // ... which the ±65504 clamp of layers without activation prevents.
    assert_eq!(store_through_pixels(255, 256.0, 300.0, CLAMP_65504), 0x7BFF);
    // Just below the midpoint rounds down to 65504.
    assert_eq!(store_through_pixels(1, 65519.0, 0.0, NO_CLAMP), 0x7BFF);
}

#[test]
fn binary16_subnormals_and_ties_to_even() {
    // IEEE 754-2008 binary16: smallest subnormal 2^−24 (bits 0x0001),
    // smallest normal 2^−14 (bits 0x0400).
    let two = |e: i32| 2f32.powi(e);
    assert_eq!(store_through_pixels(1, two(-24), 0.0, NO_CLAMP), 0x0001);
    assert_eq!(store_through_pixels(1, two(-14), 0.0, NO_CLAMP), 0x0400);
    // Round to nearest, ties to even (IEEE 754-2008 §4.3.1, the default):
    // 2^−25 lies halfway between 0 and 2^−24 → 0 (even);
    // 3·2^−25 halfway between 2^−24 and 2·2^−24 → 2·2^−24 (even, 0x0002).
    assert_eq!(store_through_pixels(1, two(-25), 0.0, NO_CLAMP), 0x0000);
    assert_eq!(store_through_pixels(3, two(-25), 0.0, NO_CLAMP), 0x0002);
    // In [2048, 4096) the spacing is 2: 2049 → 2048 (0x6800), 2051 → 2052 (0x6802).
    assert_eq!(store_through_pixels(1, 2049.0, 0.0, NO_CLAMP), 0x6800);
    assert_eq!(store_through_pixels(1, 2051.0, 0.0, NO_CLAMP), 0x6802);
}

#[test]
fn binary16_storage_matches_half_crate() {
    // Random p·a + b values stored by the kernel equal the `half` crate's
    // f32 → f16 conversion of the same f32, and the stored value is within
    // half a binary16 ulp of the f32 (round to nearest).
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0006);
    for _ in 0..20_000 {
        let p: u8 = rng.gen();
        let a: f32 = rng.gen_range(-200.0..200.0);
        let b: f32 = rng.gen_range(-1000.0..1000.0);
        let v = p as f32 * a + b;
        let bits = store_through_pixels(p, a, b, CLAMP_65504);
        assert_eq!(bits, f16::from_f32(v).to_bits(), "{v}");
        let stored = f16::from_bits(bits).to_f64();
        // ulp of binary16 at |v| ≥ 2^−14 is 2^(e−10).
        let e = (v.abs() as f64).log2().floor().max(-14.0);
        assert!(
            (stored - v as f64).abs() <= 2f64.powf(e - 11.0),
            "{v} → {stored}"
        );
    }
}
