//! The ops: one module per op (`ops::<op>`) owning its record rules (arity, window), shape
//! rule, parse-time checks, MAC count, kernel dispatch and reference oracle, behind the
//! `OpRules` trait; `dispatch!` is the one table from `Op` to its module.

pub mod add;
pub mod avgpool;
pub mod conv2d;
pub mod dense;
pub mod depthwise;
pub mod dequantize;
pub mod global_avgpool;
pub mod maxpool;
pub mod pixels;
mod pooling;
pub mod quantize;
mod weighted;

use crate::error::{Error, Text};
use crate::format::F16_MAX;
use crate::kernels::fault;
use crate::opset::{linked, OpSet, ALL_OPS};
use crate::repr::{Bias, ElemType, LayerRef, Params, TensorRecord, Weights};
use half::f16;

/// Declares `Op` from one list of (variant, code): the enum, `Op::ALL` and
/// `Op::from_u8`, so no code can be missing from the decoder.
macro_rules! op_codes {
    ($($(#[$doc:meta])* $v:ident = $code:literal,)*) => {
        /// The operation of one layer. Flatten and reshape are not layers: a
        /// dense layer reads its input tensor as a flat H·W·C vector in HWC order.
        #[derive(Clone, Copy, Debug, PartialEq, Eq)]
        #[repr(u8)]
        pub enum Op {
            $($(#[$doc])* $v = $code,)*
        }

        impl Op {
            /// Every op, in code order.
            pub const ALL: &'static [Op] = &[$(Op::$v),*];

            /// The op of a record's code byte.
            pub const fn from_u8(v: u8) -> Option<Op> {
                match v {
                    $($code => Some(Op::$v),)*
                    _ => None,
                }
            }
        }
    };
}

op_codes! {
    /// Camera bytes (U8) → normalized I8 or F16, per channel.
    Pixels = 1,
    Conv2d = 2,
    Depthwise = 3,
    MaxPool = 4,
    AvgPool = 5,
    GlobalAvgPool = 6,
    Dense = 7,
    Add = 8,
    /// F16 → I8 at a precision boundary.
    Quantize = 9,
    /// I8 → F16 at a precision boundary.
    Dequantize = 10,
}

/// The one table from an op to its module: binds `$T` to the op's
/// `OpRules` type and evaluates `$e`. Exhaustive: a new `Op` variant does not
/// compile until it has a row here.
macro_rules! dispatch {
    ($op:expr, $T:ident => $e:expr) => {
        match $op {
            Op::Pixels => {
                type $T = $crate::ops::pixels::Pixels;
                $e
            }
            Op::Conv2d => {
                type $T = $crate::ops::conv2d::Conv2d;
                $e
            }
            Op::Depthwise => {
                type $T = $crate::ops::depthwise::Depthwise;
                $e
            }
            Op::MaxPool => {
                type $T = $crate::ops::maxpool::MaxPool;
                $e
            }
            Op::AvgPool => {
                type $T = $crate::ops::avgpool::AvgPool;
                $e
            }
            Op::GlobalAvgPool => {
                type $T = $crate::ops::global_avgpool::GlobalAvgPool;
                $e
            }
            Op::Dense => {
                type $T = $crate::ops::dense::Dense;
                $e
            }
            Op::Add => {
                type $T = $crate::ops::add::Add;
                $e
            }
            Op::Quantize => {
                type $T = $crate::ops::quantize::Quantize;
                $e
            }
            Op::Dequantize => {
                type $T = $crate::ops::dequantize::Dequantize;
                $e
            }
        }
    };
}

impl Op {
    /// Our short name of the op (as in descriptions and reports).
    pub const fn name(self) -> &'static str {
        dispatch!(self, T => T::NAME)
    }
    /// Number of input tensors the op reads.
    pub const fn arity(self) -> usize {
        dispatch!(self, T => T::ARITY)
    }
    /// Whether the record's window fields are used (else they must be zero).
    pub const fn has_window(self) -> bool {
        dispatch!(self, T => T::WINDOW)
    }
}

/// A layer with its tensors' records, as the checks see it.
pub struct Cx<'r, 'a> {
    pub index: usize,
    pub layer: &'r LayerRef<'a>,
    pub a: &'r TensorRecord,
    /// The second input (add only).
    pub b: Option<&'r TensorRecord>,
    pub out: &'r TensorRecord,
}

/// A layer with its tensors' records and bytes, as the kernels see it.
pub struct Io<'r, 'a> {
    pub layer: &'r LayerRef<'a>,
    pub ta: &'r TensorRecord,
    pub xa: &'r [u8],
    pub b: Option<(&'r TensorRecord, &'r [u8])>,
    pub to: &'r TensorRecord,
    pub y: &'r mut [u8],
}

/// What each op module states; every item is required, so a new op has to
/// decide each one.
pub trait OpRules {
    const OP: Op;
    /// Our short name (`Op::name`).
    const NAME: &'static str;
    /// Input tensors read (`Op::arity`).
    const ARITY: usize;
    /// Whether the record's window fields are used (`Op::has_window`).
    const WINDOW: bool;
    /// The op's own checks of a layer that passed the common ones (arity,
    /// non-empty tensors, zero points, clamps, op set).
    fn check(cx: &Cx<'_, '_>) -> Result<(), Error>;
    /// Multiply-accumulates for one inference (0 for ops without weights).
    fn macs(cx: &Cx<'_, '_>) -> u64;
    /// Runs a checked layer with the kernels of `OPS` (`FAST`) or the
    /// reference oracle. Kernel errors carry layer index `usize::MAX`.
    fn run<const OPS: u32, const FAST: bool>(io: Io<'_, '_>) -> Result<(), Error>;
}

impl Cx<'_, '_> {
    pub(crate) fn bad(&self, problem: Text) -> Error {
        Error::Layer {
            index: self.index,
            problem,
        }
    }

    /// The common element type of input and output (int8 or fp16).
    pub(crate) fn same_elem(&self, what: Text) -> Result<ElemType, Error> {
        if self.a.elem != self.out.elem || self.a.elem == ElemType::U8 {
            Err(self.bad(what))
        } else {
            Ok(self.a.elem)
        }
    }

    /// Output height/width are what the window gives on the input.
    pub(crate) fn window_shape(&self) -> Result<(), Error> {
        let (oh, ow) = self
            .layer
            .header
            .window
            .output_hw(self.a.shape.h, self.a.shape.w)
            .ok_or(self.bad(text!("window does not fit the padded input")))?;
        if (oh, ow) != (self.out.shape.h, self.out.shape.w) {
            return Err(self.bad(text!("output height/width do not match the window")));
        }
        Ok(())
    }

    /// Input and output shapes are equal.
    pub(crate) fn same_shape(&self, what: Text) -> Result<(), Error> {
        if self.a.shape != self.out.shape {
            return Err(self.bad(what));
        }
        Ok(())
    }

    /// The layer carries no weights and no bias.
    pub(crate) fn no_weights(&self, what: Text) -> Result<(), Error> {
        if weights_absent(&self.layer.weights) && bias_absent(&self.layer.bias) {
            Ok(())
        } else {
            Err(self.bad(what))
        }
    }

    /// The layer carries no weights, bias or parameters.
    pub(crate) fn no_blobs(&self, what: Text) -> Result<(), Error> {
        if params_absent(&self.layer.params) {
            self.no_weights(what)
        } else {
            Err(self.bad(what))
        }
    }

    /// The i32 parameter block (`Requant` or `I32`).
    pub(crate) fn params_i32(&self, what: Text) -> Result<&[i32], Error> {
        params_i32(&self.layer.params).ok_or(self.bad(what))
    }
}

/// The i32 slice of an int8 parameter block (`Requant` and `I32` are both
/// i32 blocks; which name the reader gives them does not matter here).
pub(crate) fn params_i32<'a>(p: &Params<'a>) -> Option<&'a [i32]> {
    match *p {
        Params::Requant(s) | Params::I32(s) => Some(s),
        Params::None | Params::F32(_) => None,
    }
}

pub(crate) fn params_absent(p: &Params<'_>) -> bool {
    match *p {
        Params::None => true,
        Params::Requant(s) | Params::I32(s) => s.is_empty(),
        Params::F32(s) => s.is_empty(),
    }
}

fn weights_absent(w: &Weights<'_>) -> bool {
    match *w {
        Weights::None => true,
        Weights::I8(s) => s.is_empty(),
        Weights::F16(s) => s.is_empty(),
    }
}

fn bias_absent(b: &Bias<'_>) -> bool {
    match *b {
        Bias::None => true,
        Bias::I32(s) => s.is_empty(),
        Bias::F32(s) => s.is_empty(),
    }
}

fn zp_ok(t: &TensorRecord) -> bool {
    t.elem != ElemType::I8 || (-128..=127).contains(&t.quant.zero_point)
}

/// Ordered and inside the finite binary16 range: every fp16 store clamps,
/// so fp16 activations are always finite (NaN bounds compare false and are
/// rejected too).
fn clamp_f32_ok(c: [f32; 2]) -> bool {
    -F16_MAX <= c[0] && c[0] <= c[1] && c[1] <= F16_MAX
}

/// Validates layer `index` against its input tensor(s) and output tensor so
/// that `run_layer` cannot fail on it (given byte slices of the tensors'
/// lengths and alignment). The common checks are here; each op's own are in
/// its module (`OpRules::check`).
pub fn check_layer(
    index: usize,
    layer: &LayerRef<'_>,
    a: &TensorRecord,
    b: Option<&TensorRecord>,
    out: &TensorRecord,
) -> Result<(), Error> {
    check_layer_ops::<ALL_OPS>(index, layer, a, b, out)
}

/// `check_layer` for a build that links the op set `OPS` only: a layer
/// whose (op, output type) is not in it is refused with `Error::NotLinked`,
/// and the checks of ops outside it are not compiled in.
pub fn check_layer_ops<const OPS: u32>(
    index: usize,
    layer: &LayerRef<'_>,
    a: &TensorRecord,
    b: Option<&TensorRecord>,
    out: &TensorRecord,
) -> Result<(), Error> {
    let cx = Cx {
        index,
        layer,
        a,
        b,
        out,
    };
    let h = &layer.header;
    let op = h.op;
    match (op.arity(), b) {
        (2, None) => return Err(cx.bad(text!("add needs two inputs"))),
        (1, Some(_)) => return Err(cx.bad(text!("op takes one input"))),
        _ => {}
    }
    if a.shape.elems() == 0 || out.shape.elems() == 0 {
        return Err(cx.bad(text!("tensors must not be empty")));
    }
    if !zp_ok(a) || !zp_ok(out) || b.is_some_and(|b| !zp_ok(b)) {
        return Err(cx.bad(text!("int8 zero point must be in -128..=127")));
    }
    match out.elem {
        ElemType::I8 => {
            let c = h.clamp_i8;
            if !(-128 <= c[0] && c[0] <= c[1] && c[1] <= 127) {
                return Err(cx.bad(text!("int8 clamp must be ordered and within -128..=127")));
            }
        }
        ElemType::F16 => {
            if !clamp_f32_ok(h.clamp_f32) {
                return Err(cx.bad(text!(
                    "fp16 clamp must be ordered and within -65504..=65504"
                )));
            }
        }
        ElemType::U8 => return Err(cx.bad(text!("no layer outputs u8"))),
    }
    if !linked::<OPS>(op, out.elem) {
        return Err(Error::NotLinked {
            layer: index,
            op,
            elem: out.elem,
        });
    }
    dispatch!(op, T => {
        if const { has_op::<OPS>(T::OP) } {
            T::check(&cx)
        } else {
            Err(not_linked(op, out.elem))
        }
    })
}

/// Multiply-accumulates of a layer for one inference (`OpRules::macs`),
/// saturating at u64::MAX.
pub fn layer_macs(layer: &LayerRef<'_>, a: &TensorRecord, out: &TensorRecord) -> u64 {
    let cx = Cx {
        index: 0,
        layer,
        a,
        b: None,
        out,
    };
    dispatch!(layer.header.op, T => T::macs(&cx))
}

const fn has_op<const OPS: u32>(op: Op) -> bool {
    OpSet::from_bits(OPS).has_op(op)
}

/// Runs one checked layer: `a` (and `b` for add) are the input tensors'
/// records and bytes, `out` the output tensor's record and bytes. Fails only
/// on impossible states (slices that do not match the records, misaligned
/// fp16 slices, a layer that `check_layer` would reject); kernel errors
/// carry layer index `usize::MAX` — wrap with `exec::at_layer`.
pub fn run_layer(
    layer: &LayerRef<'_>,
    a: (&TensorRecord, &[u8]),
    b: Option<(&TensorRecord, &[u8])>,
    out: (&TensorRecord, &mut [u8]),
) -> Result<(), Error> {
    run::<ALL_OPS, true>(layer, a, b, out)
}

/// `run_layer` in a build that links the op set `OPS` only; a layer outside
/// it (which `check_layer_ops::<OPS>` refuses) gets `Error::NotLinked`.
pub fn run_layer_ops<const OPS: u32>(
    layer: &LayerRef<'_>,
    a: (&TensorRecord, &[u8]),
    b: Option<(&TensorRecord, &[u8])>,
    out: (&TensorRecord, &mut [u8]),
) -> Result<(), Error> {
    run::<OPS, true>(layer, a, b, out)
}

/// As `run_layer`, but through each op's reference oracle (the
/// straightforward loop nests the fast paths are tested against).
pub fn run_layer_reference(
    layer: &LayerRef<'_>,
    a: (&TensorRecord, &[u8]),
    b: Option<(&TensorRecord, &[u8])>,
    out: (&TensorRecord, &mut [u8]),
) -> Result<(), Error> {
    run::<ALL_OPS, false>(layer, a, b, out)
}

/// A tensor's byte length agrees with its record.
fn check_len(t: &TensorRecord, bytes: usize) -> Result<(), Error> {
    if t.byte_len() != bytes {
        return Err(fault(text!("tensor bytes do not match the tensor record")));
    }
    Ok(())
}

/// The dispatch: the op's module behind a constant op-set guard, so the ops
/// outside `OPS` and every kernel only they call are dead code. Out of line,
/// so the kernels' loops are compiled apart from the layer walk's registers
/// (measured: fewer emulated instructions on Cortex-M0+).
#[inline(never)]
fn run<const OPS: u32, const FAST: bool>(
    layer: &LayerRef<'_>,
    (ta, xa): (&TensorRecord, &[u8]),
    b: Option<(&TensorRecord, &[u8])>,
    (to, y): (&TensorRecord, &mut [u8]),
) -> Result<(), Error> {
    check_len(ta, xa.len())?;
    check_len(to, y.len())?;
    if let Some((tb, xb)) = b {
        check_len(tb, xb.len())?;
    }
    let op = layer.header.op;
    let elem = to.elem;
    let io = Io {
        layer,
        ta,
        xa,
        b,
        to,
        y,
    };
    dispatch!(op, T => {
        if const { has_op::<OPS>(T::OP) } {
            T::run::<OPS, FAST>(io)
        } else {
            Err(not_linked(op, elem))
        }
    })
}

/// The error of a dispatch arm a build with a smaller op set left out.
pub(crate) const fn not_linked(op: Op, elem: ElemType) -> Error {
    Error::NotLinked {
        layer: usize::MAX,
        op,
        elem,
    }
}

/// The error of an (input, output) type pair the op does not compute, or
/// one this build leaves out.
pub(crate) fn unlinked_or_mismatch<const OPS: u32>(op: Op, elem: ElemType) -> Error {
    if linked::<OPS>(op, elem) {
        fault(text!("op and element types do not go together"))
    } else {
        not_linked(op, elem)
    }
}

pub(crate) fn as_i8(bytes: &[u8]) -> Result<&[i8], Error> {
    bytemuck::try_cast_slice(bytes).map_err(|_| fault(text!("cannot view bytes as int8")))
}

pub(crate) fn as_i8_mut(bytes: &mut [u8]) -> Result<&mut [i8], Error> {
    bytemuck::try_cast_slice_mut(bytes).map_err(|_| fault(text!("cannot view bytes as int8")))
}

pub(crate) fn as_f16(bytes: &[u8]) -> Result<&[f16], Error> {
    bytemuck::try_cast_slice(bytes)
        .map_err(|_| fault(text!("fp16 tensor bytes misaligned or odd length")))
}

pub(crate) fn as_f16_mut(bytes: &mut [u8]) -> Result<&mut [f16], Error> {
    bytemuck::try_cast_slice_mut(bytes)
        .map_err(|_| fault(text!("fp16 tensor bytes misaligned or odd length")))
}
