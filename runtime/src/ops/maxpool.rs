//! max pooling over the record's window; padded taps are skipped, not read.
//! Kernel `kernels::pool` with `int8::MaxI8` / `fp16::MaxF16`; oracle `kernels::pool_ref`.

use super::{pooling, Cx, Io, Op, OpRules};
use crate::error::Error;

pub struct MaxPool;

impl OpRules for MaxPool {
    const OP: Op = Op::MaxPool;
    const NAME: &'static str = "maxpool";
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
        pooling::run_max::<Self, OPS, FAST>(io, win)
    }
}
