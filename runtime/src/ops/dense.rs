//! dense: reads its input as a flat H·W·C vector (HWC order), weights `[out][in]`,
//! output 1×1×N, one bias and (int8) one requant pair per output. Kernel
//! `kernels::dense`; oracle `kernels::dense_ref`.

use super::{
    as_f16, as_f16_mut, as_i8, as_i8_mut, unlinked_or_mismatch, weighted, Cx, Io, Op, OpRules,
};
use crate::error::Error;
use crate::kernels;
use crate::opset::linked;
use crate::repr::ElemType::{F16, I8};

pub struct Dense;

impl OpRules for Dense {
    const OP: Op = Op::Dense;
    const NAME: &'static str = "dense";
    const ARITY: usize = 1;
    const WINDOW: bool = false;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        let elem = cx.same_elem(text!(
            "dense input and output must both be int8 or both fp16"
        ))?;
        if cx.out.shape.h != 1 || cx.out.shape.w != 1 {
            return Err(cx.bad(text!("dense output must be 1x1xN")));
        }
        let (n_in, oc) = (cx.a.shape.elems(), cx.out.shape.c as usize);
        let rows = weighted::Rows {
            first: n_in,
            stride: 1,
            count: n_in,
        };
        weighted::check(cx, elem, oc, n_in.checked_mul(oc), rows)
    }

    /// `in_elems·out_elems`.
    fn macs(cx: &Cx<'_, '_>) -> u64 {
        (cx.a.shape.elems() as u64).saturating_mul(cx.out.shape.elems() as u64)
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        match (io.ta.elem, io.to.elem) {
            (I8, I8) if const { linked::<OPS>(Op::Dense, I8) } => {
                let (w, ar) = weighted::int8_arith(&io)?;
                let (x, y) = (as_i8(io.xa)?, as_i8_mut(io.y)?);
                if FAST {
                    kernels::dense(&ar, x, w, y)
                } else {
                    kernels::dense_ref(&ar, x, w, y)
                }
            }
            (F16, F16) if const { linked::<OPS>(Op::Dense, F16) } => {
                let (w, ar) = weighted::f16_arith(&io)?;
                let (x, y) = (as_f16(io.xa)?, as_f16_mut(io.y)?);
                if FAST {
                    kernels::dense(&ar, x, w, y)
                } else {
                    kernels::dense_ref(&ar, x, w, y)
                }
            }
            (_, out) => Err(unlinked_or_mismatch::<OPS>(Op::Dense, out)),
        }
    }
}
