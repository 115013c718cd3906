//! Integer requantization: the one definition of `rq(acc, m, s)` the int8
//! kernels use, and the host-side choice of `(m, s)` for a real multiplier.
//! Everything here is plain `core` arithmetic; `requantize` uses no floats.

use crate::repr::Requant;

/// Smallest allowed right shift (see `repr::Requant`).
pub const RSHIFT_MIN: i32 = 1;
/// Largest allowed right shift (see `repr::Requant`).
pub const RSHIFT_MAX: i32 = 62;

/// `floor((acc · m + 2^(rshift−1)) / 2^rshift)`, computed exactly in i64 and
/// saturated to i32: the real multiplier `m · 2^−rshift` applied to `acc`,
/// rounded to nearest with ties toward +∞ (see `repr::Requant`).
///
/// Total for every input so a kernel can never panic: `rshift` outside
/// 1..=62 is first clamped into that range (`check_layer` rejects such
/// layers, so this only matters for unchecked input). The i64 sum cannot
/// overflow: |acc · m| ≤ 2^62 and 2^(rshift−1) ≤ 2^61.
#[inline]
pub fn requantize(acc: i32, m: i32, rshift: i32) -> i32 {
    let s = rshift.clamp(RSHIFT_MIN, RSHIFT_MAX) as u32;
    let prod = acc as i64 * m as i64;
    let rounded = (prod + (1i64 << (s - 1))) >> s;
    saturate_i32(rounded)
}

/// `requantize(acc, m, rshift)` with its per-channel constants worked out
/// once (`Rq::new`), so that applying it to each output costs a high-word
/// multiply, an add and a shift.
///
/// With `s` = rshift clamped to 1..=62 and `p = acc·m = hi·2^32 + lo`
/// (`0 ≤ lo < 2^32`), for `s ≥ 33`:
/// `⌊(p + 2^(s−1)) / 2^s⌋ = ⌊(hi + 2^(s−33)) / 2^(s−32)⌋`, because the
/// numerator differs from `(hi + 2^(s−33))·2^32` by `lo < 2^32`, which cannot
/// carry past a multiple of `2^s`. `|p| ≤ 2^62` gives `|hi| ≤ 2^30`, so the
/// sum and the result fit i32 and need no saturation; only the high word of
/// the product is used. Smaller shifts (not chosen by `requant_from_real`
/// for multipliers below 2^−1) keep the i64 form.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Rq {
    m: i32,
    /// `2^(s−33)` for the high-word form; `s` itself for the i64 form.
    add: i32,
    /// `s − 32` for the high-word form; 0 selects the i64 form.
    sh: u32,
}

impl Rq {
    /// The constants of `(m, rshift)`; any `rshift` is clamped as in
    /// `requantize`.
    #[inline]
    pub fn new(m: i32, rshift: i32) -> Rq {
        let s = rshift.clamp(RSHIFT_MIN, RSHIFT_MAX);
        if s >= 33 {
            Rq {
                m,
                add: 1 << (s - 33),
                sh: (s - 32) as u32,
            }
        } else {
            Rq { m, add: s, sh: 0 }
        }
    }

    /// `requantize(acc, m, rshift)` bit for bit.
    #[inline]
    pub fn apply(&self, acc: i32) -> i32 {
        if self.sh != 0 {
            let hi = ((acc as i64 * self.m as i64) >> 32) as i32;
            (hi + self.add) >> self.sh
        } else {
            requantize(acc, self.m, self.add)
        }
    }
}

/// `v` saturated into i32.
#[inline]
pub fn saturate_i32(v: i64) -> i32 {
    if v > i32::MAX as i64 {
        i32::MAX
    } else if v < i32::MIN as i64 {
        i32::MIN
    } else {
        v as i32
    }
}

/// Whether `(multiplier, rshift)` is in the range the kernels accept:
/// multiplier in 0..2^31 (i.e. non-negative) and rshift in 1..=62.
pub const fn requant_in_range(m: i32, rshift: i32) -> bool {
    m >= 0 && rshift >= RSHIFT_MIN && rshift <= RSHIFT_MAX
}

/// Host-side: the `(multiplier, rshift)` with multiplier in [2^30, 2^31) and
/// rshift in 1..=62 whose value `multiplier · 2^−rshift` is nearest to
/// `real` (ties of the multiplier rounded up). `None` when `real` is not
/// finite, not positive, or outside [2^−32 − 2^−64, 2^30 − 2^−2) — the range
/// such a pair can express.
///
/// Error bound: |multiplier · 2^−rshift − real| ≤ 2^−(rshift+1), which is
/// at most 2^−31·(1 + 2^−30) · real (relative), because real ≥ (2^30 − ½)·2^−rshift.
///
/// Uses only f64 multiplication by powers of two (exact) and one cast, so
/// it needs no `libm` and builds for `no_std` targets.
pub fn requant_from_real(real: f64) -> Option<Requant> {
    if !real.is_finite() || real <= 0.0 {
        return None;
    }
    const LO: f64 = (1u64 << 30) as f64;
    const HI: f64 = (1u64 << 31) as f64;
    // Normalize real · 2^s into [2^30, 2^31). Each step is exact (a power-of-
    // two scaling of a finite, non-zero f64 that stays in the normal range
    // or moves out of the subnormal range). The loops stop as soon as the
    // shift leaves the expressible range, so they run at most ~95 times.
    let mut x = real;
    let mut s: i32 = 0;
    while x < LO {
        if s > RSHIFT_MAX + 1 {
            return None;
        }
        x *= 2.0;
        s += 1;
    }
    while x >= HI {
        if s < RSHIFT_MIN - 1 {
            return None;
        }
        x *= 0.5;
        s -= 1;
    }
    // x in [2^30, 2^31): its ulp is at most 2^−22, so x + 0.5 is exact and
    // the truncating cast is floor(x + 0.5), round to nearest (ties up).
    let mut m = (x + 0.5) as i64;
    if m == 1i64 << 31 {
        m = 1i64 << 30;
        s -= 1;
    }
    if !(RSHIFT_MIN..=RSHIFT_MAX).contains(&s) {
        return None;
    }
    Some(Requant {
        multiplier: m as i32,
        rshift: s,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-worked: 100 · (3 · 2^−2) = 75 exactly.
    #[test]
    fn exact_product() {
        assert_eq!(requantize(100, 3, 2), 75);
    }

    // Hand-worked ties: 5 · 2^−1 = 2.5 → 3 (toward +∞); −5 · 2^−1 = −2.5 → −2.
    #[test]
    fn ties_toward_plus_infinity() {
        assert_eq!(requantize(5, 1, 1), 3);
        assert_eq!(requantize(-5, 1, 1), -2);
        assert_eq!(requantize(-7, 1, 1), -3); // −3.5 → −3
    }

    // Saturation: 2^31−1 · (2^31−1) · 2^−1 is far above i32::MAX.
    #[test]
    fn saturates() {
        assert_eq!(requantize(i32::MAX, i32::MAX, 1), i32::MAX);
        assert_eq!(requantize(i32::MIN, i32::MAX, 1), i32::MIN);
        // Out-of-range shifts are clamped, never panic.
        assert_eq!(requantize(8, 1, 0), requantize(8, 1, 1));
        assert_eq!(requantize(8, 1, 100), requantize(8, 1, 62));
    }

    // Hand-worked: 0.5 = 2^30·2^−31; 1.0 = 2^30·2^−30; 0.75 = 3·2^29·2^−31.
    #[test]
    fn multiplier_powers_of_two() {
        assert_eq!(
            requant_from_real(0.5),
            Some(Requant {
                multiplier: 1 << 30,
                rshift: 31
            })
        );
        assert_eq!(
            requant_from_real(1.0),
            Some(Requant {
                multiplier: 1 << 30,
                rshift: 30
            })
        );
        assert_eq!(
            requant_from_real(0.75),
            Some(Requant {
                multiplier: 3 << 29,
                rshift: 31
            })
        );
        assert_eq!(requant_from_real(0.0), None);
        assert_eq!(requant_from_real(-1.0), None);
        assert_eq!(requant_from_real(f64::NAN), None);
        assert_eq!(requant_from_real(f64::INFINITY), None);
        assert_eq!(requant_from_real((1u64 << 30) as f64), None);
        assert_eq!(requant_from_real(1e-30), None);
        // The ends of the expressible range (see the doc comment).
        let two = |e: i32| 2f64.powi(e);
        assert_eq!(
            requant_from_real(two(-32) - two(-64)),
            Some(Requant {
                multiplier: 1 << 30,
                rshift: 62
            })
        );
        assert_eq!(requant_from_real(two(-32) - two(-63)), None);
        assert_eq!(
            requant_from_real(two(30) - 0.5),
            Some(Requant {
                multiplier: i32::MAX,
                rshift: 1
            })
        );
        assert_eq!(requant_from_real(two(30) - 0.25), None);
    }
}
