//! average pooling over the record's window, dividing by the in-bounds taps.
//! Kernel `kernels::pool` with `int8::AvgI8` / `fp16::AvgF16`; oracle `kernels::pool_ref`.

use super::{pooling, Cx, Io, Op, OpRules};
use crate::error::Error;

pub struct AvgPool;

impl OpRules for AvgPool {
    const OP: Op = Op::AvgPool;
    const NAME: &'static str = "avgpool";
    const ARITY: usize = 1;
    const WINDOW: bool = true;

    fn check(cx: &Cx<'_, '_>) -> Result<(), Error> {
        pooling::check(cx, cx.layer.header.window, true)
    }

    /// 0: no weights.
    fn macs(_: &Cx<'_, '_>) -> u64 {
        0
    }

    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error> {
        let win = io.layer.header.window;
        pooling::run_avg::<Self, OPS, FAST>(io, win)
    }
}
