//! int8 arithmetic: the conv2d/depthwise/dense accumulator with per-channel
//! requantization, max and average pooling, pixels → int8 and add. Integer
//! only — no floating point, so it runs on cores without an FPU.

use super::{fault, Arith, Pool};
use crate::error::Error;
use crate::requant::{saturate_i32, Rq};

/// `v` clamped to the inclusive `[lo, hi]` and then to the int8 range (so a
/// bad clamp can never wrap).
#[inline]
pub fn clamp_i8(v: i32, clamp: [i32; 2]) -> i8 {
    let v = if v < clamp[0] { clamp[0] } else { v };
    let v = if v > clamp[1] { clamp[1] } else { v };
    v.clamp(i8::MIN as i32, i8::MAX as i32) as i8
}

/// `sum / count` rounded to nearest, ties away from zero, in integers:
/// `sign(sum) · ((|sum| + ⌊count/2⌋) / count)`. `count` = 0 gives 0.
#[inline]
pub fn div_round_half_away(sum: i32, count: u32) -> i32 {
    if count == 0 {
        return 0;
    }
    let n = count as i64;
    let s = sum as i64;
    let q = (s.abs() + n / 2) / n;
    saturate_i32(if s < 0 { -q } else { q })
}

/// `requantize(acc, m, rshift)` bit for bit, cheaper for the usual shifts
/// (see `requant::Rq`).
#[inline]
pub fn requantize_fast(acc: i32, m: i32, rshift: i32) -> i32 {
    Rq::new(m, rshift).apply(acc)
}

/// conv2d / depthwise / dense accumulator: `acc = bias[o] + Σ w·q_in` in
/// i32 (padded taps read `q = zp_in`), then
/// `q_out = clamp(zp_out + rq(acc, m[o], s[o]))`.
///
/// The sums use wrapping adds so an unchecked layer cannot panic; for a
/// layer that passed `check_layer` the accumulator bound
/// `|bias| + 255·Σ|w| ≤ i32::MAX` makes every partial sum exact.
pub struct Int8Arith<'a> {
    pub zp_in: i8,
    pub zp_out: i32,
    /// Per output channel; empty means zero bias.
    pub bias: &'a [i32],
    /// Per output channel `[multiplier, rshift]`, flat.
    pub requant: &'a [i32],
    pub clamp: [i32; 2],
}

impl Arith for Int8Arith<'_> {
    type X = i8;
    type W = i8;
    type Acc = i32;
    const GROUPED: bool = true;
    #[inline]
    fn pad(&self) -> i8 {
        self.zp_in
    }
    #[inline]
    fn start(&self, o: usize) -> i32 {
        self.bias.get(o).copied().unwrap_or(0)
    }
    #[inline]
    fn mac(acc: i32, x: i8, w: i8) -> i32 {
        acc.wrapping_add(x as i32 * w as i32)
    }
    #[inline]
    fn finish(&self, acc: i32, o: usize) -> i8 {
        self.finish_with(acc, &self.rq(o))
    }
    type Prep = Rq;
    #[inline]
    fn prep(&self, o: usize) -> Rq {
        self.rq(o)
    }
    #[inline]
    fn finish_prep(&self, acc: i32, p: &Rq) -> i8 {
        self.finish_with(acc, p)
    }
}

impl Int8Arith<'_> {
    /// The requantization constants of output channel `o` (a missing
    /// pair reads as multiplier 0, shift 1).
    #[inline]
    pub fn rq(&self, o: usize) -> Rq {
        let m = self.requant.get(2 * o).copied().unwrap_or(0);
        let s = self.requant.get(2 * o + 1).copied().unwrap_or(1);
        Rq::new(m, s)
    }

    /// The output activation of a finished accumulator whose channel's
    /// constants are `rq` (`Arith::finish` with them worked out already).
    #[inline]
    pub fn finish_with(&self, acc: i32, rq: &Rq) -> i8 {
        clamp_i8(self.zp_out.saturating_add(rq.apply(acc)), self.clamp)
    }
}

/// Max pooling in int8 (same quantization in and out, so the max of the
/// stored values is the stored max).
pub struct MaxI8 {
    pub clamp: [i32; 2],
}

impl Pool for MaxI8 {
    type X = i8;
    type Acc = i32;
    fn init(&self) -> i32 {
        i8::MIN as i32
    }
    fn step(&self, acc: i32, x: i8) -> i32 {
        acc.max(x as i32)
    }
    fn finish(&self, acc: i32, _count: u32) -> i8 {
        clamp_i8(acc, self.clamp)
    }
}

/// Average pooling in int8 (same quantization in and out):
/// `q_out = zp + round_half_away(Σ(q − zp) / n)` over the `n` in-bounds taps.
/// Rounding is done on the zero-point-relative values, so ties round away
/// from real zero (symmetric in real terms). The sum is exact for a checked
/// layer (`n · 255 ≤ i32::MAX`); it wraps rather than panics otherwise.
pub struct AvgI8 {
    pub zp: i32,
    pub clamp: [i32; 2],
}

impl Pool for AvgI8 {
    type X = i8;
    type Acc = i32;
    fn init(&self) -> i32 {
        0
    }
    fn step(&self, acc: i32, x: i8) -> i32 {
        acc.wrapping_add((x as i32).wrapping_sub(self.zp))
    }
    fn finish(&self, acc: i32, count: u32) -> i8 {
        clamp_i8(
            self.zp.saturating_add(div_round_half_away(acc, count)),
            self.clamp,
        )
    }
}

/// Camera bytes → int8, per channel `c` with params `[offset, m, rshift]`:
/// `q = clamp(zp_out + rq(p·256 − offset, m, rshift))`. `x` and `y` are HWC
/// with `params.len() / 3` channels. `p·256 − offset` is exact for every
/// checked layer (offset ≠ i32::MIN); it wraps rather than panics otherwise.
pub fn pixels(
    x: &[u8],
    params: &[i32],
    zp_out: i32,
    clamp: [i32; 2],
    y: &mut [i8],
) -> Result<(), Error> {
    let c = params.len() / 3;
    if c == 0 || params.len() != 3 * c || x.len() != y.len() || !x.len().is_multiple_of(c) {
        return Err(fault(text!(
            "pixels lengths do not match the channel count"
        )));
    }
    // A u8 input has 256 values, so with more pixels than that each
    // channel's map is worked out once into a table (256 requantizations
    // instead of one per pixel) and then looked up: the same formula, so
    // the same bytes. Smaller images map each pixel directly.
    let use_table = x.len() / c > 256;
    let mut table = [0i8; 256];
    for (ci, prm) in params.chunks_exact(3).enumerate() {
        let rq = Rq::new(prm[1], prm[2]);
        let map = |v: u8| {
            let acc = (v as i32 * 256).wrapping_sub(prm[0]);
            clamp_i8(zp_out.saturating_add(rq.apply(acc)), clamp)
        };
        let pairs = x
            .iter()
            .skip(ci)
            .step_by(c)
            .zip(y.iter_mut().skip(ci).step_by(c));
        if use_table {
            for (v, t) in table.iter_mut().enumerate() {
                *t = map(v as u8);
            }
            for (&p, y) in pairs {
                *y = table[p as usize];
            }
        } else {
            for (&p, y) in pairs {
                *y = map(p);
            }
        }
    }
    Ok(())
}

/// Parameters of an int8 add.
#[derive(Clone, Copy, Debug)]
pub struct AddI8 {
    pub zp_a: i32,
    pub zp_b: i32,
    pub zp_out: i32,
    pub ma: i32,
    pub mb: i32,
    pub rshift: i32,
    pub clamp: [i32; 2],
}

impl AddI8 {
    /// The shift when `apply` can take its 32-bit form: zero points in the
    /// int8 range (so |q − zp| ≤ 255) and rshift in 10..=31. Then
    /// |sum| ≤ 2·255·(2^31 − 1) + 2^30 < 2^40, so `sum >> rshift` fits in
    /// 30 bits (no saturation) and equals bits rshift..rshift + 31 of the
    /// sum, taken from its two 32-bit halves. The converter's shifts for
    /// sums of tensors of similar scale are about 30.
    #[inline]
    pub fn split_shift(&self) -> Option<u32> {
        let int8 = |z: i32| (-128..=127).contains(&z);
        let s = self.rshift;
        (int8(self.zp_a) && int8(self.zp_b) && (10..=31).contains(&s)).then_some(s as u32)
    }

    /// `clamp(zp_out + floor(((qa−zpa)·ma + (qb−zpb)·mb + 2^(rshift−1)) / 2^rshift))`
    /// in i64 (ties toward +∞, as `requantize`). Exact for checked layers
    /// (|q − zp| ≤ 255, multipliers < 2^31, so each product < 2^39); the
    /// i64 arithmetic wraps rather than panics otherwise.
    #[inline]
    pub fn apply(&self, qa: i8, qb: i8) -> i8 {
        let s = self.rshift.clamp(1, 62) as u32;
        let da = (qa as i64).wrapping_sub(self.zp_a as i64);
        let db = (qb as i64).wrapping_sub(self.zp_b as i64);
        let sum = da
            .wrapping_mul(self.ma as i64)
            .wrapping_add(db.wrapping_mul(self.mb as i64))
            .wrapping_add(1i64 << (s - 1));
        let r = saturate_i32(sum >> s);
        clamp_i8(self.zp_out.saturating_add(r), self.clamp)
    }
}

/// Elementwise int8 add of two tensors of the same shape.
pub fn add(p: &AddI8, a: &[i8], b: &[i8], y: &mut [i8]) -> Result<(), Error> {
    if a.len() != y.len() || b.len() != y.len() {
        return Err(fault(text!("add inputs and output differ in length")));
    }
    let pairs = y.iter_mut().zip(a).zip(b);
    match p.split_shift() {
        Some(s) => {
            let (zp_a, zp_b, ma, mb) = (p.zp_a, p.zp_b, p.ma as i64, p.mb as i64);
            let round = 1i64 << (s - 1);
            for ((y, &qa), &qb) in pairs {
                let da = (qa as i32 - zp_a) as i64;
                let db = (qb as i32 - zp_b) as i64;
                let sum = da * ma + db * mb + round;
                // Bits s..s + 31 of the sum: its quotient by 2^s (see
                // `split_shift` for why it fits i32 and needs no saturation).
                let r = ((sum as u32) >> s) | (((sum >> 32) as u32) << (32 - s));
                *y = clamp_i8(p.zp_out.saturating_add(r as i32), p.clamp);
            }
        }
        None => {
            for ((y, &qa), &qb) in pairs {
                *y = p.apply(qa, qb);
            }
        }
    }
    Ok(())
}
