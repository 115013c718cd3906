//! quantize: fp16 → int8 at a precision boundary, same shape, no blobs; the
//! output tensor's scale and zero point say how. Kernel `fp16::quantize` (a
//! straight elementwise loop: its own oracle).

use super::{as_f16, as_i8_mut, unlinked_or_mismatch, Cx, Io, Op, OpRules};
use crate::error::Error;
use crate::format::scale_in_range;
use crate::kernels::fp16;
use crate::opset::linked;
use crate::repr::ElemType::{F16, I8};

pub struct Quantize;

impl OpRules for Quantize {
    const OP: Op = Op::Quantize;
    const NAME: &'static str = "quantize";
    const ARITY: usize = 1;
    const WINDOW: bool = false;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        if cx.a.elem != F16 || cx.out.elem != I8 {
            return Err(cx.bad(text!("quantize reads fp16 and writes int8")));
        }
        cx.same_shape(text!("quantize keeps the shape"))?;
        if !scale_in_range(cx.out.quant.scale) {
            return Err(cx.bad(text!("quantize output scale must be finite and positive")));
        }
        cx.no_blobs(text!("quantize takes no weights, bias or parameters"))
    }

    /// 0: no weights.
    fn macs(_: &Cx<'_, '_>) -> u64 {
        0
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        match (io.ta.elem, io.to.elem) {
            (F16, I8) if const { linked::<OPS>(Op::Quantize, I8) } => fp16::quantize(
                as_f16(io.xa)?,
                io.to.quant.scale,
                io.to.quant.zero_point,
                io.layer.header.clamp_i8,
                as_i8_mut(io.y)?,
            ),
            (_, out) => Err(unlinked_or_mismatch::<OPS>(Op::Quantize, out)),
        }
    }
}
