//! fp16 arithmetic: binary16 storage, f32 computation. The conv2d/depthwise/
//! dense accumulator, max and average pooling, pixels → fp16, add, and the
//! precision boundaries quantize (fp16 → int8) and dequantize (int8 → fp16).
//! Every stored value is rounded f32 → binary16 to nearest, ties to even.

use super::{fault, Arith, Pool};
use crate::error::Error;
use half::f16;

/// `v` clamped to the inclusive `[lo, hi]`; NaN becomes `lo`.
#[inline]
pub fn clamp_f32(v: f32, clamp: [f32; 2]) -> f32 {
    // f32::max returns the non-NaN operand, so NaN maps to the lower bound.
    v.max(clamp[0]).min(clamp[1])
}

/// `v` clamped and stored as binary16 (round to nearest, ties to even).
#[inline]
fn store(v: f32, clamp: [f32; 2]) -> f16 {
    f16::from_f32(clamp_f32(v, clamp))
}

/// Round to nearest, ties away from zero, for |x| < 2^24 (larger values are
/// integers already and are returned as their saturated `i32`). Uses only
/// truncation, so it needs no `libm`: `x − trunc(x)` is exact in f32.
#[inline]
pub fn round_half_away(x: f32) -> i32 {
    let t = x as i32; // truncates toward zero, saturates, NaN → 0
    let frac = x - t as f32;
    if frac >= 0.5 {
        t.saturating_add(1)
    } else if frac <= -0.5 {
        t.saturating_sub(1)
    } else {
        t
    }
}

/// conv2d / depthwise / dense in fp16: f32 accumulation from the f32 bias,
/// padded taps read 0, output `clamp_f32(acc)` stored as binary16.
pub struct F16Arith<'a> {
    /// Per output channel; empty means zero bias.
    pub bias: &'a [f32],
    pub clamp: [f32; 2],
}

impl Arith for F16Arith<'_> {
    type X = f16;
    type W = f16;
    type Acc = f32;
    #[inline]
    fn pad(&self) -> f16 {
        f16::ZERO
    }
    #[inline]
    fn start(&self, o: usize) -> f32 {
        self.bias.get(o).copied().unwrap_or(0.0)
    }
    #[inline]
    fn mac(acc: f32, x: f16, w: f16) -> f32 {
        acc + x.to_f32() * w.to_f32()
    }
    #[inline]
    fn finish(&self, acc: f32, _o: usize) -> f16 {
        store(acc, self.clamp)
    }
    type Prep = ();
    #[inline]
    fn prep(&self, _o: usize) {}
    #[inline]
    fn finish_prep(&self, acc: f32, _p: &()) -> f16 {
        store(acc, self.clamp)
    }
}

/// Max pooling in fp16 (NaN taps are ignored by `f32::max`).
pub struct MaxF16 {
    pub clamp: [f32; 2],
}

impl Pool for MaxF16 {
    type X = f16;
    type Acc = f32;
    fn init(&self) -> f32 {
        f32::NEG_INFINITY
    }
    fn step(&self, acc: f32, x: f16) -> f32 {
        acc.max(x.to_f32())
    }
    fn finish(&self, acc: f32, _count: u32) -> f16 {
        store(acc, self.clamp)
    }
}

/// Average pooling in fp16: f32 sum of the in-bounds taps divided by their
/// number.
pub struct AvgF16 {
    pub clamp: [f32; 2],
}

impl Pool for AvgF16 {
    type X = f16;
    type Acc = f32;
    fn init(&self) -> f32 {
        0.0
    }
    fn step(&self, acc: f32, x: f16) -> f32 {
        acc + x.to_f32()
    }
    fn finish(&self, acc: f32, count: u32) -> f16 {
        let v = if count == 0 { 0.0 } else { acc / count as f32 };
        store(v, self.clamp)
    }
}

/// Camera bytes → fp16, per channel `c` with params `[a, b]`:
/// `x = p·a + b` in f32, clamped, stored as binary16.
pub fn pixels(x: &[u8], params: &[f32], clamp: [f32; 2], y: &mut [f16]) -> Result<(), Error> {
    let c = params.len() / 2;
    if c == 0 || params.len() != 2 * c || x.len() != y.len() || !x.len().is_multiple_of(c) {
        return Err(fault(text!(
            "pixels lengths do not match the channel count"
        )));
    }
    for (x_px, y_px) in x.chunks_exact(c).zip(y.chunks_exact_mut(c)) {
        for ((&p, y), ab) in x_px.iter().zip(y_px.iter_mut()).zip(params.chunks_exact(2)) {
            *y = store(p as f32 * ab[0] + ab[1], clamp);
        }
    }
    Ok(())
}

/// Elementwise fp16 add: f32 sum, clamped, stored as binary16.
pub fn add(a: &[f16], b: &[f16], clamp: [f32; 2], y: &mut [f16]) -> Result<(), Error> {
    if a.len() != y.len() || b.len() != y.len() {
        return Err(fault(text!("add inputs and output differ in length")));
    }
    for ((y, &xa), &xb) in y.iter_mut().zip(a).zip(b) {
        *y = store(xa.to_f32() + xb.to_f32(), clamp);
    }
    Ok(())
}

/// fp16 → int8: `q = clamp(round_half_away(x / scale_out) + zp_out)`, in
/// f32. `x / scale` is first limited to ±2^15 (far outside int8, so the
/// result is unchanged) to keep the rounding exact; NaN maps to `zp_out`
/// before the clamp.
pub fn quantize(
    x: &[f16],
    scale: f32,
    zp: i32,
    clamp: [i32; 2],
    y: &mut [i8],
) -> Result<(), Error> {
    if x.len() != y.len() {
        return Err(fault(text!("quantize input and output differ in length")));
    }
    const LIMIT: f32 = 32768.0;
    for (y, &v) in y.iter_mut().zip(x) {
        let r = v.to_f32() / scale;
        let r = if r.is_nan() {
            0.0
        } else {
            r.clamp(-LIMIT, LIMIT)
        };
        *y = super::int8::clamp_i8(round_half_away(r).saturating_add(zp), clamp);
    }
    Ok(())
}

/// int8 → fp16: `x = (q − zp)·scale` in f32, clamped, stored as binary16.
pub fn dequantize(
    x: &[i8],
    scale: f32,
    zp: i32,
    clamp: [f32; 2],
    y: &mut [f16],
) -> Result<(), Error> {
    if x.len() != y.len() {
        return Err(fault(text!("dequantize input and output differ in length")));
    }
    for (y, &q) in y.iter_mut().zip(x) {
        let d = (q as i32).saturating_sub(zp);
        *y = store(d as f32 * scale, clamp);
    }
    Ok(())
}
