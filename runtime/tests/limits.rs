//! The parse-time limits of FORMAT.md ("Limits") against CRC-valid hostile
//! files: each starts as a valid model from the writer, gets one field or
//! blob changed and its CRC fixed, and must be refused with the error that
//! names the rule; the values at each limit are accepted.
#![cfg(feature = "write")]

use half::f16;
use midge_runtime::crc::crc32;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::format::{field, MAX_LAYERS, SCALE_MAX, SCALE_MIN};
use midge_runtime::write::{BiasBuf, LayerSpec, ModelSpec, ParamsBuf, WeightsBuf};
use midge_runtime::{
    repr::{Activation, LayerHeader, Padding, Window},
    ElemType, Error, Model, Op, Quant, Shape, TensorRecord, Text,
};

fn rec(c: u16, elem: ElemType, scale: f32, offset: u32) -> TensorRecord {
    TensorRecord {
        shape: Shape::new(1, 1, c),
        elem,
        quant: Quant {
            scale,
            zero_point: 0,
        },
        offset,
    }
}

fn head(op: Op, input: u16, output: u16, window: Window) -> LayerHeader {
    LayerHeader {
        op,
        act: Activation::None,
        inputs: [input, 0],
        output,
        window,
        clamp_i8: [-128, 127],
        clamp_f32: [-65504.0, 65504.0],
    }
}

fn layer(header: LayerHeader, weights: WeightsBuf, bias: BiasBuf, params: ParamsBuf) -> LayerSpec {
    LayerSpec {
        header,
        weights,
        bias,
        params,
    }
}

/// int8: pixels (1×1×2) then `pools` max pools of kernel 1, tensors packed
/// one after another (8 bytes each); the workspace is exactly their end.
fn int8_chain(pools: usize) -> ModelSpec {
    let k1 = Padding::Valid.resolve((1, 1), (1, 1), (1, 1), (1, 1));
    let mut tensors = vec![rec(2, ElemType::U8, 1.0 / 255.0, 0)];
    let mut layers = vec![layer(
        head(Op::Pixels, 0, 1, Window::default()),
        WeightsBuf::None,
        BiasBuf::None,
        ParamsBuf::I32(vec![128 * 256, 1 << 30, 38, 128 * 256, 1 << 30, 38]),
    )];
    tensors.push(rec(2, ElemType::I8, 0.5, 0));
    for i in 1..=pools {
        layers.push(layer(
            head(Op::MaxPool, i as u16, i as u16 + 1, k1),
            WeightsBuf::None,
            BiasBuf::None,
            ParamsBuf::None,
        ));
        tensors.push(rec(2, ElemType::I8, 0.5, 8 * (i as u32 % 2)));
    }
    ModelSpec {
        name: "chain".into(),
        labels: vec!["a".into(), "b".into()],
        tensors,
        layers,
        output: pools as u16 + 1,
        workspace_len: if pools == 0 { 2 } else { 10 },
    }
}

/// fp16: pixels (1×1×2) then a dense layer 2 → 2 with the given weights.
fn fp16_dense(weights: [f16; 4], bias: [f32; 2]) -> ModelSpec {
    ModelSpec {
        name: "dense".into(),
        labels: vec!["a".into(), "b".into()],
        tensors: vec![
            rec(2, ElemType::U8, 1.0 / 255.0, 0),
            rec(2, ElemType::F16, 1.0, 0),
            rec(2, ElemType::F16, 1.0, 8),
        ],
        layers: vec![
            layer(
                head(Op::Pixels, 0, 1, Window::default()),
                WeightsBuf::None,
                BiasBuf::None,
                ParamsBuf::F32(vec![1.0 / 255.0, -0.5, 1.0 / 255.0, -0.5]),
            ),
            layer(
                head(Op::Dense, 1, 2, Window::default()),
                WeightsBuf::F16(weights.to_vec()),
                BiasBuf::F32(bias.to_vec()),
                ParamsBuf::None,
            ),
        ],
        output: 2,
        workspace_len: 12,
    }
}

fn fix_crc(bytes: &mut [u8]) {
    let crc = crc32(&bytes[field::header::LEN..]);
    bytes[field::header::CRC].copy_from_slice(&crc.to_le_bytes());
}

fn parse(bytes: &[u8]) -> Result<(), Error> {
    let buf = AlignedBytes::from_slice(bytes);
    let m = Model::parse(&buf)?;
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    m.run(&vec![7u8; m.input().byte_len()], &mut ws)
        .expect("a model that parsed must run");
    Ok(())
}

/// `bytes` with `value` written at file offset `at` and the CRC fixed.
fn patched(bytes: &[u8], at: usize, value: &[u8]) -> Vec<u8> {
    let mut b = bytes.to_vec();
    b[at..at + value.len()].copy_from_slice(value);
    fix_crc(&mut b);
    b
}

const INFO: usize = field::header::LEN;

/// File offset of field `f` of tensor record `t`.
fn tensor_field(t: usize, f: field::Field) -> usize {
    INFO + field::info::LEN + t * field::tensor::LEN + f.start
}

/// File offset of layer `i`'s weights blob.
fn weights_blob(bytes: &[u8], i: usize) -> usize {
    let table = u32::from_le_bytes(bytes[INFO + 24..INFO + 28].try_into().unwrap()) as usize;
    let at = table + i * field::layer::LEN + field::layer::WEIGHTS.start;
    u32::from_le_bytes(bytes[at..at + 4].try_into().unwrap()) as usize
}

#[test]
fn workspace_claim_is_what_the_tensors_need() {
    let spec = int8_chain(3);
    let bytes = spec.emit().unwrap();
    let ws_at = INFO + field::info::WORKSPACE_LEN.start;
    // The tensors end at byte 10: 10 and 16 (rounded up to 8) are allowed.
    for ok in [10u32, 16] {
        parse(&patched(&bytes, ws_at, &ok.to_le_bytes())).unwrap();
    }
    for claim in [17u32, 24, 1 << 20, u32::MAX] {
        assert_eq!(
            parse(&patched(&bytes, ws_at, &claim.to_le_bytes())),
            Err(Error::Layout {
                what: Text::new(
                    "workspace length (the end of the last tensor, rounded up to 8 at most)"
                ),
                expected: 16,
                found: claim as usize,
            }),
            "claim {claim}"
        );
    }
    // Too short is the tensor's own error.
    assert!(matches!(
        parse(&patched(&bytes, ws_at, &9u32.to_le_bytes())),
        Err(Error::Tensor { .. })
    ));
    // The writer refuses the same claims.
    let mut s = spec;
    s.workspace_len = u32::MAX;
    assert!(matches!(s.emit(), Err(Error::Layout { .. })));
}

#[test]
fn layer_count_limit() {
    // At the limit: parses and runs (also a measure that the checks are
    // not quadratic in practice; no time is asserted).
    let at_limit = int8_chain(MAX_LAYERS - 1);
    assert_eq!(at_limit.layers.len(), MAX_LAYERS);
    parse(&at_limit.emit().unwrap()).unwrap();
    // One more: the writer refuses before placing anything.
    let over = int8_chain(MAX_LAYERS);
    assert_eq!(
        over.emit(),
        Err(Error::BadField {
            what: Text::new("layer count (at most 32768)"),
            value: MAX_LAYERS as u32 + 1,
        })
    );
    // A small file claiming more layers is refused by that rule first.
    let bytes = int8_chain(2).emit().unwrap();
    let at = INFO + field::info::LAYER_COUNT.start;
    assert_eq!(
        parse(&patched(&bytes, at, &(MAX_LAYERS as u16 + 1).to_le_bytes())),
        Err(Error::BadField {
            what: Text::new("layer count (at most 32768)"),
            value: MAX_LAYERS as u32 + 1,
        })
    );
}

#[test]
fn int8_scales_must_be_in_range() {
    let bytes = int8_chain(1).emit().unwrap();
    // Tensor 2 is the output (the one `classify` dequantizes).
    let at = tensor_field(2, field::tensor::SCALE);
    for s in [SCALE_MIN, 1.0, SCALE_MAX] {
        // Both pooling tensors share the scale (the op requires it).
        let b = patched(&bytes, at, &s.to_le_bytes());
        let b = patched(&b, tensor_field(1, field::tensor::SCALE), &s.to_le_bytes());
        parse(&b).unwrap();
    }
    // 3e38 is finite but absurd; the rest are not finite, zero, negative
    // or subnormal (IEEE 754 binary32 facts, common practice).
    for s in [
        3e38f32,
        SCALE_MAX * 2.0,
        SCALE_MIN / 2.0,
        1e-40,
        0.0,
        -0.5,
        f32::INFINITY,
        f32::NAN,
    ] {
        let e = parse(&patched(&bytes, at, &s.to_le_bytes())).unwrap_err();
        assert!(
            e == Error::TensorScale {
                index: 2,
                bits: s.to_bits()
            },
            "scale {s}: {e}"
        );
    }
    // The camera input's scale too.
    let e = parse(&patched(
        &bytes,
        tensor_field(0, field::tensor::SCALE),
        &f32::INFINITY.to_le_bytes(),
    ))
    .unwrap_err();
    assert!(matches!(e, Error::TensorScale { index: 0, .. }), "{e}");
}

#[test]
fn requant_pairs_out_of_range_are_refused() {
    let bytes = int8_chain(0).emit().unwrap();
    // Pixels params: [offset, multiplier, rshift] per channel.
    let table = u32::from_le_bytes(bytes[INFO + 24..INFO + 28].try_into().unwrap()) as usize;
    let p_at = table + field::layer::PARAMS.start;
    let params = u32::from_le_bytes(bytes[p_at..p_at + 4].try_into().unwrap()) as usize;
    for (k, v) in [(1usize, -1i32), (2, 0), (2, 63), (5, i32::MIN)] {
        let e = parse(&patched(&bytes, params + 4 * k, &v.to_le_bytes())).unwrap_err();
        assert!(
            matches!(e, Error::Layer { index: 0, .. }),
            "param {k} = {v}: {e}"
        );
    }
}

#[test]
fn fp16_weights_and_biases_must_be_finite() {
    let w = [0.5, -1.0, 0.25, 65504.0].map(f16::from_f32);
    let spec = fp16_dense(w, [0.0, 1.0]);
    let bytes = spec.emit().unwrap();
    parse(&bytes).unwrap();
    let blob = weights_blob(&bytes, 1);
    // IEEE 754 binary16: 0x7C00 is +inf, 0xFC00 −inf, 0x7E00 a quiet NaN.
    for (k, bits) in [(0usize, 0x7C00u16), (3, 0xFC00), (2, 0x7E00)] {
        assert_eq!(
            parse(&patched(&bytes, blob + 2 * k, &bits.to_le_bytes())),
            Err(Error::Layer {
                index: 1,
                problem: Text::new("fp16 weights must be finite (no inf or NaN)")
            }),
            "element {k} = {bits:#06x}"
        );
    }
    for b in [f32::NAN, f32::NEG_INFINITY] {
        assert_eq!(
            fp16_dense(w, [0.0, b]).emit(),
            Err(Error::Layer {
                index: 1,
                problem: Text::new("fp16 layer bias must be finite (no inf or NaN)")
            }),
            "bias {b}"
        );
    }
}

#[test]
fn fp16_clamps_stay_inside_the_binary16_range() {
    let w = [0.5, -1.0, 0.25, 2.0].map(f16::from_f32);
    let mut spec = fp16_dense(w, [0.0, 1.0]);
    // At the limits (the converter's "no activation" clamp) and inside.
    for c in [[-65504.0, 65504.0], [0.0, 6.0], [1.0, 1.0]] {
        spec.layers[1].header.clamp_f32 = c;
        spec.emit().unwrap();
    }
    for c in [
        [f32::NEG_INFINITY, f32::INFINITY],
        [-65505.0, 0.0],
        [0.0, 65520.0],
        [f32::NAN, 1.0],
        [2.0, 1.0],
    ] {
        spec.layers[1].header.clamp_f32 = c;
        assert_eq!(
            spec.emit(),
            Err(Error::Layer {
                index: 1,
                problem: Text::new("fp16 clamp must be ordered and within -65504..=65504")
            }),
            "clamp {c:?}"
        );
    }
}
