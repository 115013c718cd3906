//! Small valid models written with the runtime's own writer, used as seeds
//! of the mutation campaign and the fuzz corpus: int8, fp16, mixed
//! precision, a residual add and every pooling op, plus the accumulator-limit model.

use midge_runtime::write::{BiasBuf, LayerSpec, ModelSpec, ParamsBuf, WeightsBuf};
use midge_runtime::{
    repr::{Activation, LayerHeader, Padding, Window},
    ElemType, Op, Quant, Shape, TensorRecord,
};

use ElemType::{F16, I8, U8};

const NO_FP_CLAMP: [f32; 2] = [-65504.0, 65504.0];

/// A tensor record; the workspace offset is filled in by `pack`.
pub fn tensor(h: u16, w: u16, c: u16, elem: ElemType, scale: f32, zero_point: i32) -> TensorRecord {
    TensorRecord {
        shape: Shape::new(h, w, c),
        elem,
        quant: Quant { scale, zero_point },
        offset: 0,
    }
}

/// A layer header with no fused activation and full clamps.
pub fn header(op: Op, inputs: [u16; 2], output: u16, window: Window) -> LayerHeader {
    LayerHeader {
        op,
        act: Activation::None,
        inputs,
        output,
        window,
        clamp_i8: [-128, 127],
        clamp_f32: NO_FP_CLAMP,
    }
}

/// A layer without weights, bias or params.
pub fn bare(op: Op, input: u16, output: u16, window: Window) -> LayerSpec {
    LayerSpec {
        header: header(op, [input, 0], output, window),
        weights: WeightsBuf::None,
        bias: BiasBuf::None,
        params: ParamsBuf::None,
    }
}

/// `[multiplier, rshift]` per output channel: real multiplier 2^-8
/// (2^30 · 2^-38).
pub fn requant(channels: usize) -> ParamsBuf {
    ParamsBuf::I32((0..channels).flat_map(|_| [1 << 30, 38]).collect())
}

/// Pixels U8 → I8 for `c` channels: `q = rq(p·256 − 128·256)` at 2^-8, i.e.
/// the byte minus 128.
pub fn pixels_i8(output: u16, c: usize) -> LayerSpec {
    LayerSpec {
        header: header(Op::Pixels, [0, 0], output, Window::default()),
        weights: WeightsBuf::None,
        bias: BiasBuf::None,
        params: ParamsBuf::I32((0..c).flat_map(|_| [128 * 256, 1 << 30, 38]).collect()),
    }
}

/// Pixels U8 → F16 for `c` channels: `x = p/255 − 0.5`.
pub fn pixels_f16(output: u16, c: usize) -> LayerSpec {
    LayerSpec {
        header: header(Op::Pixels, [0, 0], output, Window::default()),
        weights: WeightsBuf::None,
        bias: BiasBuf::None,
        params: ParamsBuf::F32((0..c).flat_map(|_| [1.0 / 255.0, -0.5]).collect()),
    }
}

/// Deterministic small int8 weights.
pub fn i8_weights(n: usize, salt: usize) -> WeightsBuf {
    WeightsBuf::I8((0..n).map(|i| ((i * 7 + salt) % 11) as i8 - 5).collect())
}

/// Deterministic small fp16 weights.
pub fn f16_weights(n: usize, salt: usize) -> WeightsBuf {
    WeightsBuf::F16(
        (0..n)
            .map(|i| half::f16::from_f32((((i * 5 + salt) % 9) as f32 - 4.0) * 0.125))
            .collect(),
    )
}

/// An int8 conv2d / depthwise / dense with weights, bias and requant.
pub fn weighted_i8(h: LayerHeader, w_len: usize, out_c: usize, salt: usize) -> LayerSpec {
    LayerSpec {
        header: h,
        weights: i8_weights(w_len, salt),
        bias: BiasBuf::I32((0..out_c as i32).map(|o| o * 37 - 50).collect()),
        params: requant(out_c),
    }
}

/// An fp16 conv2d / depthwise / dense with weights and bias.
pub fn weighted_f16(h: LayerHeader, w_len: usize, out_c: usize, salt: usize) -> LayerSpec {
    LayerSpec {
        header: h,
        weights: f16_weights(w_len, salt),
        bias: BiasBuf::F32((0..out_c).map(|o| o as f32 * 0.25 - 0.5).collect()),
        params: ParamsBuf::None,
    }
}

fn win(in_hw: (u16, u16), k: u16, stride: u16, pad: Padding) -> Window {
    pad.resolve(in_hw, (k, k), (stride, stride), (1, 1))
}

/// Places tensors 1.. one after another in the workspace (8-aligned, no
/// reuse) and builds the spec.
pub fn pack(
    name: &str,
    labels: &[&str],
    mut tensors: Vec<TensorRecord>,
    layers: Vec<LayerSpec>,
    output: u16,
) -> ModelSpec {
    let mut at = 0u32;
    for t in tensors.iter_mut().skip(1) {
        t.offset = at;
        at += (t.byte_len() as u32).div_ceil(8) * 8;
    }
    ModelSpec {
        name: name.into(),
        labels: labels.iter().map(|s| s.to_string()).collect(),
        tensors,
        layers,
        output,
        workspace_len: at,
    }
}

/// int8: pixels, conv2d 3×3 stride 2 (same) + ReLU, depthwise 3×3 + ReLU6,
/// dense to three classes.
pub fn int8_chain() -> ModelSpec {
    let c1 = win((6, 6), 3, 2, Padding::Same);
    let dw = win((3, 3), 3, 1, Padding::Same);
    let mut conv = header(Op::Conv2d, [1, 0], 2, c1);
    conv.act = Activation::Relu;
    conv.clamp_i8 = [-10, 127];
    let mut dwh = header(Op::Depthwise, [2, 0], 3, dw);
    dwh.act = Activation::Relu6;
    dwh.clamp_i8 = [0, 60];
    pack(
        "int8 chain",
        &["good", "dented", "missing"],
        vec![
            tensor(6, 6, 3, U8, 1.0 / 255.0, 0),
            tensor(6, 6, 3, I8, 1.0 / 128.0, 0),
            tensor(3, 3, 4, I8, 0.05, -10),
            tensor(3, 3, 4, I8, 0.1, 0),
            tensor(1, 1, 3, I8, 0.2, 3),
        ],
        vec![
            pixels_i8(1, 3),
            weighted_i8(conv, 4 * 9 * 3, 4, 1),
            weighted_i8(dwh, 9 * 4, 4, 2),
            weighted_i8(
                header(Op::Dense, [3, 0], 4, Window::default()),
                36 * 3,
                3,
                3,
            ),
        ],
        4,
    )
}

/// fp16 throughout: pixels, conv2d (valid), max pool, depthwise, global
/// average pool, dense.
pub fn fp16_all() -> ModelSpec {
    let c1 = win((6, 6), 3, 1, Padding::Valid);
    let mp = win((4, 4), 2, 2, Padding::Valid);
    let dw = win((2, 2), 3, 1, Padding::Same);
    let mut conv = header(Op::Conv2d, [1, 0], 2, c1);
    conv.act = Activation::Relu;
    conv.clamp_f32 = [0.0, 65504.0];
    pack(
        "fp16",
        &["a", "b"],
        vec![
            tensor(6, 6, 2, U8, 1.0 / 255.0, 0),
            tensor(6, 6, 2, F16, 1.0, 0),
            tensor(4, 4, 3, F16, 1.0, 0),
            tensor(2, 2, 3, F16, 1.0, 0),
            tensor(2, 2, 3, F16, 1.0, 0),
            tensor(1, 1, 3, F16, 1.0, 0),
            tensor(1, 1, 2, F16, 1.0, 0),
        ],
        vec![
            pixels_f16(1, 2),
            weighted_f16(conv, 3 * 9 * 2, 3, 1),
            bare(Op::MaxPool, 2, 3, mp),
            weighted_f16(header(Op::Depthwise, [3, 0], 4, dw), 9 * 3, 3, 2),
            bare(Op::GlobalAvgPool, 4, 5, Window::default()),
            weighted_f16(header(Op::Dense, [5, 0], 6, Window::default()), 3 * 2, 2, 3),
        ],
        6,
    )
}

/// Mixed precision: int8 pixels and conv2d, dequantize, fp16 conv2d with an
/// fp16 residual add, quantize, int8 dense.
pub fn mixed() -> ModelSpec {
    let c = win((4, 4), 3, 1, Padding::Same);
    pack(
        "mixed",
        &["x", "y", "z"],
        vec![
            tensor(4, 4, 1, U8, 1.0 / 255.0, 0),
            tensor(4, 4, 1, I8, 1.0 / 128.0, 0),
            tensor(4, 4, 2, I8, 0.04, 2),
            tensor(4, 4, 2, F16, 1.0, 0),
            tensor(4, 4, 2, F16, 1.0, 0),
            tensor(4, 4, 2, F16, 1.0, 0),
            tensor(4, 4, 2, I8, 0.08, -1),
            tensor(1, 1, 3, I8, 0.3, 0),
        ],
        vec![
            pixels_i8(1, 1),
            weighted_i8(header(Op::Conv2d, [1, 0], 2, c), 2 * 9, 2, 4),
            bare(Op::Dequantize, 2, 3, Window::default()),
            weighted_f16(header(Op::Conv2d, [3, 0], 4, c), 2 * 9 * 2, 2, 5),
            LayerSpec {
                header: header(Op::Add, [3, 4], 5, Window::default()),
                weights: WeightsBuf::None,
                bias: BiasBuf::None,
                params: ParamsBuf::None,
            },
            bare(Op::Quantize, 5, 6, Window::default()),
            weighted_i8(
                header(Op::Dense, [6, 0], 7, Window::default()),
                32 * 3,
                3,
                6,
            ),
        ],
        7,
    )
}

/// int8 residual block: two conv2d branches joined by an add with ReLU,
/// then a padded max pool and a dense head.
pub fn residual() -> ModelSpec {
    let c = win((4, 4), 3, 1, Padding::Same);
    let c1 = win((4, 4), 1, 1, Padding::Valid);
    let mp = win((4, 4), 3, 2, Padding::Explicit([1, 1, 1, 1]));
    let mut add = header(Op::Add, [2, 3], 4, Window::default());
    add.act = Activation::Relu;
    add.clamp_i8 = [-5, 127];
    pack(
        "residual",
        &["ok", "scratched"],
        vec![
            tensor(4, 4, 2, U8, 1.0 / 255.0, 0),
            tensor(4, 4, 2, I8, 1.0 / 128.0, 0),
            tensor(4, 4, 3, I8, 0.05, 1),
            tensor(4, 4, 3, I8, 0.07, -2),
            tensor(4, 4, 3, I8, 0.1, -5),
            tensor(2, 2, 3, I8, 0.1, -5),
            tensor(1, 1, 2, I8, 0.2, 0),
        ],
        vec![
            pixels_i8(1, 2),
            weighted_i8(header(Op::Conv2d, [1, 0], 2, c), 3 * 9 * 2, 3, 7),
            weighted_i8(header(Op::Conv2d, [1, 0], 3, c1), 3 * 2, 3, 8),
            LayerSpec {
                header: add,
                weights: WeightsBuf::None,
                bias: BiasBuf::None,
                params: ParamsBuf::I32(vec![1 << 30, 3 << 28, 31]),
            },
            bare(Op::MaxPool, 4, 5, mp),
            weighted_i8(
                header(Op::Dense, [5, 0], 6, Window::default()),
                12 * 2,
                2,
                9,
            ),
        ],
        6,
    )
}

/// Every pooling op in int8 and fp16: max pool (padded), average pool
/// (dilated), global average pool; then dequantize → fp16 average pool.
pub fn pools() -> ModelSpec {
    let mp = win((7, 7), 3, 2, Padding::Explicit([1, 1, 1, 1]));
    let ap = Padding::Valid.resolve((4, 4), (2, 2), (1, 1), (2, 2));
    let ap16 = win((2, 2), 2, 1, Padding::Explicit([0, 0, 1, 1]));
    let q = |h, w| tensor(h, w, 2, I8, 0.03, 4);
    pack(
        "pools",
        &["p"],
        vec![
            tensor(7, 7, 2, U8, 1.0 / 255.0, 0),
            tensor(7, 7, 2, I8, 0.03, 4),
            q(4, 4),
            q(2, 2),
            tensor(2, 2, 2, F16, 1.0, 0),
            tensor(2, 2, 2, F16, 1.0, 0),
            tensor(1, 1, 2, F16, 1.0, 0),
        ],
        vec![
            pixels_i8(1, 2),
            bare(Op::MaxPool, 1, 2, mp),
            bare(Op::AvgPool, 2, 3, ap),
            bare(Op::Dequantize, 3, 4, Window::default()),
            bare(Op::AvgPool, 4, 5, ap16),
            bare(Op::GlobalAvgPool, 5, 6, Window::default()),
        ],
        6,
    )
}

/// All seed models by name.
pub fn all() -> Vec<(&'static str, ModelSpec)> {
    vec![
        ("int8", int8_chain()),
        ("fp16", fp16_all()),
        ("mixed", mixed()),
        ("residual", residual()),
        ("pools", pools()),
    ]
}

/// The emitted bytes of every seed model.
pub fn all_bytes() -> Vec<(&'static str, Vec<u8>)> {
    all()
        .into_iter()
        .map(|(n, s)| {
            let b = s
                .emit()
                .unwrap_or_else(|e| panic!("seed model {n} does not emit: {e}"));
            (n, b)
        })
        .collect()
}

/// One int8 dense layer reading an `in_shape` tensor (after an int8 pixels
/// layer) into 1×1×`bias.len()`; `weights` is `[out][in]`. For
/// accumulator-limit tests.
pub fn dense_with(in_shape: (u16, u16, u16), weights: Vec<i8>, bias: Vec<i32>) -> ModelSpec {
    let (h, w, c) = in_shape;
    let out_c = bias.len();
    pack(
        "accumulator limit",
        &[],
        vec![
            tensor(h, w, c, U8, 1.0 / 255.0, 0),
            tensor(h, w, c, I8, 1.0 / 128.0, 0),
            tensor(1, 1, out_c as u16, I8, 1.0, 0),
        ],
        vec![
            pixels_i8(1, c as usize),
            LayerSpec {
                header: header(Op::Dense, [1, 0], 2, Window::default()),
                weights: WeightsBuf::I8(weights),
                bias: BiasBuf::I32(bias),
                params: requant(out_c),
            },
        ],
        2,
    )
}
