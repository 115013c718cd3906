//! depthwise conv2d (channel multiplier 1): weights `[kh][kw][c]`, one bias and
//! (int8) one requant pair per channel. Kernels: int8 `kernels::depthwise::depthwise_selected`,
//! fp16 `kernels::depthwise_fast`; oracle `kernels::depthwise_ref`.

use super::{
    as_f16, as_f16_mut, as_i8, as_i8_mut, unlinked_or_mismatch, weighted, Cx, Io, Op, OpRules,
};
use crate::error::Error;
use crate::kernels;
use crate::opset::linked;
use crate::repr::ElemType::{F16, I8};

pub struct Depthwise;

impl OpRules for Depthwise {
    const OP: Op = Op::Depthwise;
    const NAME: &'static str = "depthwise";
    const ARITY: usize = 1;
    const WINDOW: bool = true;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        let elem = cx.same_elem(text!(
            "depthwise input and output must both be int8 or both fp16"
        ))?;
        let (ic, oc) = (cx.a.shape.c as usize, cx.out.shape.c as usize);
        if ic != oc {
            return Err(cx.bad(text!("depthwise (multiplier 1) keeps the channel count")));
        }
        cx.window_shape()?;
        let win = &cx.layer.header.window;
        let w_len = (win.kh as usize)
            .checked_mul(win.kw as usize)
            .and_then(|t| t.checked_mul(oc));
        let rows = weighted::Rows {
            first: 1,
            stride: oc.max(1),
            count: usize::MAX,
        };
        weighted::check(cx, elem, oc, w_len, rows)
    }

    /// `out_h·out_w·c·kh·kw`.
    fn macs(cx: &Cx<'_, '_>) -> u64 {
        let w = &cx.layer.header.window;
        (cx.out.shape.elems() as u64).saturating_mul(w.kh as u64 * w.kw as u64)
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        let (xs, ys, win) = (io.ta.shape, io.to.shape, io.layer.header.window);
        match (io.ta.elem, io.to.elem) {
            (I8, I8) if const { linked::<OPS>(Op::Depthwise, I8) } => {
                let (w, ar) = weighted::int8_arith(&io)?;
                let (x, y) = (as_i8(io.xa)?, as_i8_mut(io.y)?);
                if FAST {
                    kernels::depthwise::depthwise_selected(&ar, x, xs, w, &win, y, ys)
                } else {
                    kernels::depthwise_ref(&ar, x, xs, w, &win, y, ys)
                }
            }
            (F16, F16) if const { linked::<OPS>(Op::Depthwise, F16) } => {
                let (w, ar) = weighted::f16_arith(&io)?;
                let (x, y) = (as_f16(io.xa)?, as_f16_mut(io.y)?);
                if FAST {
                    kernels::depthwise_fast(&ar, x, xs, w, &win, y, ys)
                } else {
                    kernels::depthwise_ref(&ar, x, xs, w, &win, y, ys)
                }
            }
            (_, out) => Err(unlinked_or_mismatch::<OPS>(Op::Depthwise, out)),
        }
    }
}
