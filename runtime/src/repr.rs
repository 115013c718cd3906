//! The vocabulary shared by the reader, the writer and the kernels: element
//! types, quantization, shapes, ops, windows and their parameter blocks.
//! Nothing here touches bytes; `format` maps these types to and from the flat layout.

/// Element type of a tensor.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[repr(u8)]
pub enum ElemType {
    /// Raw camera byte 0..=255. Only the model input may have this type.
    U8 = 0,
    /// Affine-quantized int8: real = scale * (q - zero_point).
    I8 = 1,
    /// IEEE 754 binary16, little-endian.
    F16 = 2,
}

impl ElemType {
    pub const fn size(self) -> usize {
        match self {
            ElemType::U8 | ElemType::I8 => 1,
            ElemType::F16 => 2,
        }
    }
    pub const fn from_u8(v: u8) -> Option<Self> {
        match v {
            0 => Some(ElemType::U8),
            1 => Some(ElemType::I8),
            2 => Some(ElemType::F16),
            _ => None,
        }
    }
}

/// Per-tensor affine quantization: real = scale * (q - zero_point).
/// For `F16` tensors scale is 1.0 and zero point 0. For `U8` input pixels the
/// scale maps a byte to the description's pixel range and the zero point is 0.
/// The scale is carried for the host (reporting, dequantizing); the int8
/// kernels never read it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Quant {
    pub scale: f32,
    pub zero_point: i32,
}

impl Quant {
    pub const IDENTITY: Quant = Quant {
        scale: 1.0,
        zero_point: 0,
    };
}

/// Height × width × channels; data is stored channel-last (HWC).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shape {
    pub h: u16,
    pub w: u16,
    pub c: u16,
}

impl Shape {
    pub const fn new(h: u16, w: u16, c: u16) -> Self {
        Shape { h, w, c }
    }
    /// Number of elements, H·W·C, saturating at `usize::MAX` (a shape that
    /// large never fits a workspace, so `parse` rejects it; no overflow on
    /// 32-bit targets).
    pub const fn elems(self) -> usize {
        let n = self.h as u64 * self.w as u64 * self.c as u64;
        if n > usize::MAX as u64 {
            usize::MAX
        } else {
            n as usize
        }
    }
}

/// One activation tensor: its shape, element type, quantization and byte
/// offset inside the caller's workspace. Tensor 0 is the model input, which
/// the caller passes separately; its offset is unused and written as 0.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TensorRecord {
    pub shape: Shape,
    pub elem: ElemType,
    pub quant: Quant,
    pub offset: u32,
}

impl TensorRecord {
    /// Bytes of the tensor, saturating at `usize::MAX`.
    pub const fn byte_len(&self) -> usize {
        self.shape.elems().saturating_mul(self.elem.size())
    }
}

/// Fused activation after a conv2d, depthwise, dense or add.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[repr(u8)]
pub enum Activation {
    None = 0,
    Relu = 1,
    Relu6 = 2,
}

impl Activation {
    pub const fn from_u8(v: u8) -> Option<Self> {
        match v {
            0 => Some(Activation::None),
            1 => Some(Activation::Relu),
            2 => Some(Activation::Relu6),
            _ => None,
        }
    }
}

pub use crate::ops::Op;

/// Sliding-window geometry of conv2d, depthwise and pooling layers. Padding
/// is always explicit here; `Padding::resolve` turns valid/same into it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct Window {
    pub kh: u16,
    pub kw: u16,
    pub stride_h: u16,
    pub stride_w: u16,
    pub dil_h: u16,
    pub dil_w: u16,
    pub pad_top: u16,
    pub pad_left: u16,
    pub pad_bottom: u16,
    pub pad_right: u16,
}

/// Padding as people write it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Padding {
    /// No padding.
    Valid,
    /// Output size ceil(in / stride); the extra padding goes to the bottom/right.
    Same,
    /// top, left, bottom, right.
    Explicit([u16; 4]),
}

/// Integer-only requantization of one output channel:
/// `rq(acc) = floor((acc · multiplier + 2^(rshift−1)) / 2^rshift)`, i.e. the
/// real multiplier is `multiplier · 2^−rshift`, rounded to nearest with ties
/// toward +∞, computed exactly in 64-bit. `multiplier` in 0..2^31, `rshift`
/// in 1..=62. Stored per output channel as two little-endian i32
/// `[multiplier, rshift]`; `Params::Requant` holds them flat.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct Requant {
    pub multiplier: i32,
    pub rshift: i32,
}

/// The fixed part of one layer record.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LayerHeader {
    pub op: Op,
    pub act: Activation,
    /// Input tensor ids; `inputs[1]` is used by `Add` only (0 otherwise).
    pub inputs: [u16; 2],
    pub output: u16,
    /// Conv2d, depthwise, max/avg pool; all zero otherwise.
    pub window: Window,
    /// Inclusive output bounds for int8 outputs, already offset by the
    /// output zero point and intersected with -128..=127 (fused ReLU/ReLU6).
    pub clamp_i8: [i32; 2],
    /// Inclusive output bounds for fp16 outputs (fused ReLU/ReLU6;
    /// ±65504 when there is none).
    pub clamp_f32: [f32; 2],
}

/// Weights of conv2d, depthwise and dense layers.
/// Layouts (all channel-last): conv2d `[out_c][kh][kw][in_c]`,
/// depthwise `[kh][kw][c]`, dense `[out][in]` with `in` in HWC flatten order.
#[derive(Clone, Copy, Debug)]
pub enum Weights<'a> {
    None,
    I8(&'a [i8]),
    F16(&'a [half::f16]),
}

/// Bias per output channel: int32 at scale `s_in·s_w[c]` with the input
/// zero-point term already folded in (int8), or f32 (fp16 layers).
#[derive(Clone, Copy, Debug)]
pub enum Bias<'a> {
    None,
    I32(&'a [i32]),
    F32(&'a [f32]),
}

/// Op-specific precomputed parameters.
/// - conv2d / depthwise / dense, int8: per output channel `[multiplier, rshift]`
///   as i32 (see `Requant`), flat: length 2·out_c.
/// - pixels → int8: per channel `[offset, multiplier, rshift]` as i32:
///   `q = clamp(zp_out + rq(p·256 − offset))`.
/// - pixels → fp16: per channel `[a, b]` as f32: `x = p·a + b`.
/// - add, int8: `[multiplier_a, multiplier_b, rshift]` as i32:
///   `q = clamp(zp_out + round((qa−zpa)·ma + (qb−zpb)·mb) / 2^rshift)` in 64-bit.
#[derive(Clone, Copy, Debug)]
pub enum Params<'a> {
    None,
    Requant(&'a [i32]),
    I32(&'a [i32]),
    F32(&'a [f32]),
}

/// One layer as read in place from the model bytes.
#[derive(Clone, Copy, Debug)]
pub struct LayerRef<'a> {
    pub header: LayerHeader,
    pub weights: Weights<'a>,
    pub bias: Bias<'a>,
    pub params: Params<'a>,
}
