//! add (residual): two inputs and the output of one shape and type; int8
//! params `[ma, mb, rshift]` (see `repr::Params`), fp16 none. Kernels `int8::add` /
//! `fp16::add` (straight elementwise loops: each is its own oracle).

use super::{
    as_f16, as_f16_mut, as_i8, as_i8_mut, params_absent, unlinked_or_mismatch, Cx, Io, Op, OpRules,
};
use crate::error::Error;
use crate::kernels::{fault, fp16, int8};
use crate::opset::linked;
use crate::repr::ElemType::{F16, I8};
use crate::requant::requant_in_range;

pub struct Add;

impl OpRules for Add {
    const OP: Op = Op::Add;
    const NAME: &'static str = "add";
    const ARITY: usize = 2;
    const WINDOW: bool = false;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        let b = cx.b.ok_or(cx.bad(text!("add needs two inputs")))?;
        if cx.a.shape != b.shape || cx.a.shape != cx.out.shape {
            return Err(cx.bad(text!("add inputs and output must have the same shape")));
        }
        let elem = cx.same_elem(text!("add input and output must both be int8 or both fp16"))?;
        if b.elem != elem {
            return Err(cx.bad(text!("add inputs must have the same element type")));
        }
        cx.no_weights(text!("add takes no weights or bias"))?;
        if elem == I8 {
            let p = cx.params_i32(text!("int8 add needs i32 parameters [ma, mb, rshift]"))?;
            let [ma, mb, s] = *p else {
                return Err(cx.bad(text!(
                    "int8 add needs exactly 3 parameters [ma, mb, rshift]"
                )));
            };
            if !requant_in_range(ma, s) || !requant_in_range(mb, s) {
                return Err(cx.bad(text!(
                    "add multipliers must be in 0..2^31 and rshift in 1..=62"
                )));
            }
        } else if !params_absent(&cx.layer.params) {
            return Err(cx.bad(text!("fp16 add takes no parameters")));
        }
        Ok(())
    }

    /// 0: no weights.
    fn macs(_: &Cx<'_, '_>) -> u64 {
        0
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        let h = &io.layer.header;
        let (tb, xb) = io.b.ok_or(fault(text!("add needs two inputs")))?;
        match (io.ta.elem, io.to.elem) {
            (I8, I8) if const { linked::<OPS>(Op::Add, I8) } => {
                let p = super::params_i32(&io.layer.params)
                    .ok_or(fault(text!("int8 add needs parameters")))?;
                let [ma, mb, rshift] = *p else {
                    return Err(fault(text!("int8 add needs exactly 3 parameters")));
                };
                let add = int8::AddI8 {
                    zp_a: io.ta.quant.zero_point,
                    zp_b: tb.quant.zero_point,
                    zp_out: io.to.quant.zero_point,
                    ma,
                    mb,
                    rshift,
                    clamp: h.clamp_i8,
                };
                int8::add(&add, as_i8(io.xa)?, as_i8(xb)?, as_i8_mut(io.y)?)
            }
            (F16, F16) if const { linked::<OPS>(Op::Add, F16) } => {
                fp16::add(as_f16(io.xa)?, as_f16(xb)?, h.clamp_f32, as_f16_mut(io.y)?)
            }
            (_, out) => Err(unlinked_or_mismatch::<OPS>(Op::Add, out)),
        }
    }
}
