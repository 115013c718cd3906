//! conv2d: weights `[out_c][kh][kw][in_c]`, one bias and (int8) one requant
//! pair per output channel; output height/width from the window. Kernels: int8
//! `kernels::tile::conv2d_selected`, fp16 `kernels::conv2d_fast`; oracle `kernels::conv2d_ref`.

use super::{
    as_f16, as_f16_mut, as_i8, as_i8_mut, unlinked_or_mismatch, weighted, Cx, Io, Op, OpRules,
};
use crate::error::Error;
use crate::kernels;
use crate::opset::linked;
use crate::repr::ElemType::{F16, I8};

pub struct Conv2d;

impl OpRules for Conv2d {
    const OP: Op = Op::Conv2d;
    const NAME: &'static str = "conv2d";
    const ARITY: usize = 1;
    const WINDOW: bool = true;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        let elem = cx.same_elem(text!(
            "conv2d input and output must both be int8 or both fp16"
        ))?;
        cx.window_shape()?;
        let win = &cx.layer.header.window;
        let (ic, oc) = (cx.a.shape.c as usize, cx.out.shape.c as usize);
        let per_out = (win.kh as usize)
            .checked_mul(win.kw as usize)
            .and_then(|t| t.checked_mul(ic));
        let w_len = per_out.and_then(|p| p.checked_mul(oc));
        let per = per_out.unwrap_or(0);
        let rows = weighted::Rows {
            first: per,
            stride: 1,
            count: per,
        };
        weighted::check(cx, elem, oc, w_len, rows)
    }

    /// `out_h·out_w·out_c·kh·kw·in_c`.
    fn macs(cx: &Cx<'_, '_>) -> u64 {
        let w = &cx.layer.header.window;
        (cx.out.shape.elems() as u64)
            .saturating_mul(w.kh as u64 * w.kw as u64)
            .saturating_mul(cx.a.shape.c as u64)
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        let (xs, ys, win) = (io.ta.shape, io.to.shape, io.layer.header.window);
        match (io.ta.elem, io.to.elem) {
            (I8, I8) if const { linked::<OPS>(Op::Conv2d, I8) } => {
                let (w, ar) = weighted::int8_arith(&io)?;
                let (x, y) = (as_i8(io.xa)?, as_i8_mut(io.y)?);
                if FAST {
                    kernels::tile::conv2d_selected(&ar, x, xs, w, &win, y, ys)
                } else {
                    kernels::conv2d_ref(&ar, x, xs, w, &win, y, ys)
                }
            }
            (F16, F16) if const { linked::<OPS>(Op::Conv2d, F16) } => {
                let (w, ar) = weighted::f16_arith(&io)?;
                let (x, y) = (as_f16(io.xa)?, as_f16_mut(io.y)?);
                if FAST {
                    kernels::conv2d_fast(&ar, x, xs, w, &win, y, ys)
                } else {
                    kernels::conv2d_ref(&ar, x, xs, w, &win, y, ys)
                }
            }
            (_, out) => Err(unlinked_or_mismatch::<OPS>(Op::Conv2d, out)),
        }
    }
}
