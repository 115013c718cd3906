//! dequantize: int8 → fp16 at a precision boundary, same shape, no blobs; the
//! input tensor's scale and zero point say how. Kernel `fp16::dequantize` (a
//! straight elementwise loop: its own oracle).

use super::{as_f16_mut, as_i8, unlinked_or_mismatch, Cx, Io, Op, OpRules};
use crate::error::Error;
use crate::format::scale_in_range;
use crate::kernels::fp16;
use crate::opset::linked;
use crate::repr::ElemType::{F16, I8};

pub struct Dequantize;

impl OpRules for Dequantize {
    const OP: Op = Op::Dequantize;
    const NAME: &'static str = "dequantize";
    const ARITY: usize = 1;
    const WINDOW: bool = false;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        if cx.a.elem != I8 || cx.out.elem != F16 {
            return Err(cx.bad(text!("dequantize reads int8 and writes fp16")));
        }
        cx.same_shape(text!("dequantize keeps the shape"))?;
        if !scale_in_range(cx.a.quant.scale) {
            return Err(cx.bad(text!("dequantize input scale must be finite and positive")));
        }
        cx.no_blobs(text!("dequantize takes no weights, bias or parameters"))
    }

    /// 0: no weights.
    fn macs(_: &Cx<'_, '_>) -> u64 {
        0
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        match (io.ta.elem, io.to.elem) {
            (I8, F16) if const { linked::<OPS>(Op::Dequantize, F16) } => fp16::dequantize(
                as_i8(io.xa)?,
                io.ta.quant.scale,
                io.ta.quant.zero_point,
                io.layer.header.clamp_f32,
                as_f16_mut(io.y)?,
            ),
            (_, out) => Err(unlinked_or_mismatch::<OPS>(Op::Dequantize, out)),
        }
    }
}
