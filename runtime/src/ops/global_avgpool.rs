//! global average pooling: H×W×C → 1×1×C, the average pool whose window is the
//! whole input (`kernels::global_window`); the record's window fields are zero.
//! Kernel `kernels::pool`; oracle `kernels::pool_ref`.

use super::{pooling, Cx, Io, Op, OpRules};
use crate::error::Error;
use crate::kernels;

pub struct GlobalAvgPool;

impl OpRules for GlobalAvgPool {
    const OP: Op = Op::GlobalAvgPool;
    const NAME: &'static str = "global_avgpool";
    const ARITY: usize = 1;
    const WINDOW: bool = false;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        pooling::check(
            cx,
            kernels::global_window(cx.a.shape.h, cx.a.shape.w),
            false,
        )
    }

    /// 0: no weights.
    fn macs(_: &Cx<'_, '_>) -> u64 {
        0
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        let win = kernels::global_window(io.ta.shape.h, io.ta.shape.w);
        pooling::run_avg::<Self, OPS, FAST>(io, win)
    }
}
