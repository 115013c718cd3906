//! pixels: the first layer, camera bytes (u8) → int8 or fp16 per channel, same
//! shape. int8 params `[offset, m, rshift]` per channel, fp16 `[a, b]` (see `repr::Params`).
//! Kernels `int8::pixels` / `fp16::pixels` (straight loops: each is its own oracle,
//! checked against the FORMAT.md formula in runtime/tests/ops.rs).

use super::{as_f16_mut, as_i8_mut, unlinked_or_mismatch, Cx, Io, Op, OpRules};
use crate::error::Error;
use crate::kernels::{fault, fp16, int8};
use crate::opset::linked;
use crate::repr::ElemType::{F16, I8, U8};
use crate::repr::Params;
use crate::requant::requant_in_range;

pub struct Pixels;

impl OpRules for Pixels {
    const OP: Op = Op::Pixels;
    const NAME: &'static str = "pixels";
    const ARITY: usize = 1;
    const WINDOW: bool = false;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        if cx.a.elem != U8 {
            return Err(cx.bad(text!("pixels reads u8 camera bytes")));
        }
        cx.same_shape(text!("pixels output shape must equal its input shape"))?;
        cx.no_weights(text!("pixels takes no weights or bias"))?;
        let ic = cx.a.shape.c as usize;
        if cx.out.elem == I8 {
            let p = cx.params_i32(text!("pixels to int8 needs i32 parameters"))?;
            if Some(p.len()) != ic.checked_mul(3) {
                return Err(cx.bad(text!("pixels to int8 needs 3 parameters per channel")));
            }
            if p.chunks_exact(3)
                .any(|r| r[0] == i32::MIN || !requant_in_range(r[1], r[2]))
            {
                return Err(cx.bad(text!(
                    "pixels offset must not be i32::MIN, multiplier in 0..2^31, rshift in 1..=62"
                )));
            }
        } else {
            let Params::F32(p) = cx.layer.params else {
                return Err(cx.bad(text!("pixels to fp16 needs f32 parameters")));
            };
            if Some(p.len()) != ic.checked_mul(2) {
                return Err(cx.bad(text!("pixels to fp16 needs 2 parameters per channel")));
            }
            if !p.iter().all(|v| v.is_finite()) {
                return Err(cx.bad(text!("pixels parameters must be finite")));
            }
        }
        Ok(())
    }

    /// 0: no weights.
    fn macs(_: &Cx<'_, '_>) -> u64 {
        0
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        let h = &io.layer.header;
        match (io.ta.elem, io.to.elem) {
            (U8, I8) if const { linked::<OPS>(Op::Pixels, I8) } => {
                let p = super::params_i32(&io.layer.params)
                    .ok_or(fault(text!("pixels to int8 needs i32 parameters")))?;
                int8::pixels(
                    io.xa,
                    p,
                    io.to.quant.zero_point,
                    h.clamp_i8,
                    as_i8_mut(io.y)?,
                )
            }
            (U8, F16) if const { linked::<OPS>(Op::Pixels, F16) } => {
                let Params::F32(p) = io.layer.params else {
                    return Err(fault(text!("pixels to fp16 needs f32 parameters")));
                };
                fp16::pixels(io.xa, p, h.clamp_f32, as_f16_mut(io.y)?)
            }
            (_, out) => Err(unlinked_or_mismatch::<OPS>(Op::Pixels, out)),
        }
    }
}
