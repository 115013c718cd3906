//! Golden bytes of a tiny model (pixels → dense), written by hand field by
//! field from FORMAT.md and checked in both directions: the writer emits
//! exactly these bytes, and the reader gives back exactly this spec.
#![cfg(feature = "write")]

use midge_runtime::embed::AlignedBytes;
use midge_runtime::format::{field, MAGIC, SECTIONS_START, VERSION};
use midge_runtime::write::{BiasBuf, LayerSpec, ModelSpec, ParamsBuf, WeightsBuf};
use midge_runtime::{
    repr::{Activation, LayerHeader, Window},
    ElemType, Error, Model, Op, Quant, Shape, TensorRecord,
};

#[rustfmt::skip]
const GOLDEN: [u8; 352] = [
    // ---- header (24 bytes, not covered by the CRC)
    0x4D, 0x49, 0x44, 0x47, 0x45, 0x00, 0x0D, 0x0A, //   0 magic "MIDGE\0\r\n"
    0x01, 0x00,                                     //   8 version 1
    0x18, 0x00,                                     //  10 header length 24
    0x60, 0x01, 0x00, 0x00,                         //  12 file length 352
    0x88, 0x3D, 0xB5, 0x88,                         //  16 CRC-32 of bytes 24..352 = 0x88B53D88
                                                    //     (computed with Python's zlib.crc32, an
                                                    //     independent implementation)
    0x00, 0x00, 0x00, 0x00,                         //  20 reserved
    // ---- model info (48 bytes)
    0x10, 0x00, 0x00, 0x00,                         //  24 workspace length 16
    0x02, 0x00,                                     //  28 output tensor 2
    0x03, 0x00,                                     //  30 tensor count 3
    0x02, 0x00,                                     //  32 layer count 2
    0x02, 0x00,                                     //  34 label count 2
    0x00, 0x00, 0x00, 0x00,                         //  36 reserved
    0x48, 0x00, 0x00, 0x00, 0x3C, 0x00, 0x00, 0x00, //  40 tensor table at 72, 60 bytes
    0x88, 0x00, 0x00, 0x00, 0x90, 0x00, 0x00, 0x00, //  48 layer table at 136, 144 bytes
    0x18, 0x01, 0x00, 0x00, 0x38, 0x00, 0x00, 0x00, //  56 blob area at 280, 56 bytes
    0x50, 0x01, 0x00, 0x00, 0x0E, 0x00, 0x00, 0x00, //  64 strings at 336, 14 bytes
    // ---- tensor table (3 × 20 bytes)
    // tensor 0: input, 1×1×2 U8, scale 0.5, zero point 0, offset 0
    0x01, 0x00, 0x01, 0x00, 0x02, 0x00,             //  72 h=1 w=1 c=2
    0x00, 0x00,                                     //  78 elem U8, reserved
    0x00, 0x00, 0x00, 0x3F,                         //  80 scale 0.5 (f32 0x3F000000)
    0x00, 0x00, 0x00, 0x00,                         //  84 zero point 0
    0x00, 0x00, 0x00, 0x00,                         //  88 offset 0 (unused for the input)
    // tensor 1: 1×1×2 I8, scale 0.25, zero point −1, offset 0
    0x01, 0x00, 0x01, 0x00, 0x02, 0x00,             //  92
    0x01, 0x00,                                     //  98 elem I8
    0x00, 0x00, 0x80, 0x3E,                         // 100 scale 0.25 (f32 0x3E800000)
    0xFF, 0xFF, 0xFF, 0xFF,                         // 104 zero point −1
    0x00, 0x00, 0x00, 0x00,                         // 108 offset 0
    // tensor 2: 1×1×2 I8, scale 1.0, zero point 3, offset 8
    0x01, 0x00, 0x01, 0x00, 0x02, 0x00,             // 112
    0x01, 0x00,                                     // 118 elem I8
    0x00, 0x00, 0x80, 0x3F,                         // 120 scale 1.0 (f32 0x3F800000)
    0x03, 0x00, 0x00, 0x00,                         // 124 zero point 3
    0x08, 0x00, 0x00, 0x00,                         // 128 offset 8
    0x00, 0x00, 0x00, 0x00,                         // 132 padding to 136
    // ---- layer table (2 × 72 bytes)
    // layer 0: pixels, tensor 0 → tensor 1
    0x01, 0x00, 0x00, 0x00,                         // 136 op Pixels, act None, reserved
    0x00, 0x00, 0x00, 0x00, 0x01, 0x00, 0x00, 0x00, // 140 inputs [0, 0], output 1, reserved
    0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, // 148 window (none): 10 × u16 zero
    0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00,
    0x00, 0x00, 0x00, 0x00,
    0x80, 0xFF, 0xFF, 0xFF, 0x7F, 0x00, 0x00, 0x00, // 168 clamp_i8 [−128, 127]
    0x00, 0xE0, 0x7F, 0xC7, 0x00, 0xE0, 0x7F, 0x47, // 176 clamp_f32 [−65504, 65504]
    0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, // 184 weights: none
    0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, // 192 bias: none
    0x18, 0x01, 0x00, 0x00, 0x18, 0x00, 0x00, 0x00, // 200 params at 280, 24 bytes
    // layer 1: dense with ReLU, tensor 1 → tensor 2
    0x07, 0x01, 0x00, 0x00,                         // 208 op Dense, act Relu, reserved
    0x01, 0x00, 0x00, 0x00, 0x02, 0x00, 0x00, 0x00, // 212 inputs [1, 0], output 2, reserved
    0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, // 220 window (none)
    0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00,
    0x00, 0x00, 0x00, 0x00,
    0x03, 0x00, 0x00, 0x00, 0x7F, 0x00, 0x00, 0x00, // 240 clamp_i8 [3, 127] (ReLU at zero point 3)
    0x00, 0xE0, 0x7F, 0xC7, 0x00, 0xE0, 0x7F, 0x47, // 248 clamp_f32 [−65504, 65504]
    0x30, 0x01, 0x00, 0x00, 0x04, 0x00, 0x00, 0x00, // 256 weights at 304, 4 bytes
    0x38, 0x01, 0x00, 0x00, 0x08, 0x00, 0x00, 0x00, // 264 bias at 312, 8 bytes
    0x40, 0x01, 0x00, 0x00, 0x10, 0x00, 0x00, 0x00, // 272 params at 320, 16 bytes
    // ---- blob area
    // layer 0 params: per channel [offset 0, multiplier 2^30, rshift 37]
    0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x40, // 280
    0x25, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, // 288
    0x00, 0x00, 0x00, 0x40, 0x25, 0x00, 0x00, 0x00, // 296
    // layer 1 weights [[4, −1], [−2, 1]] (i8), then padding to 312
    0x04, 0xFF, 0xFE, 0x01, 0x00, 0x00, 0x00, 0x00, // 304
    // layer 1 bias [10, −10] (i32)
    0x0A, 0x00, 0x00, 0x00, 0xF6, 0xFF, 0xFF, 0xFF, // 312
    // layer 1 requant per channel [multiplier 2^30, rshift 31]
    0x00, 0x00, 0x00, 0x40, 0x1F, 0x00, 0x00, 0x00, // 320
    0x00, 0x00, 0x00, 0x40, 0x1F, 0x00, 0x00, 0x00, // 328
    // ---- strings: u16 length + UTF-8
    0x03, 0x00, 0x63, 0x61, 0x70,                   // 336 name "cap"
    0x02, 0x00, 0x6F, 0x6B,                         // 341 label "ok"
    0x03, 0x00, 0x62, 0x61, 0x64,                   // 345 label "bad"
    0x00, 0x00,                                     // 350 padding to 352
];

const NO_FP_CLAMP: [f32; 2] = [-65504.0, 65504.0];

fn tensor(c: u16, elem: ElemType, scale: f32, zero_point: i32, offset: u32) -> TensorRecord {
    TensorRecord {
        shape: Shape::new(1, 1, c),
        elem,
        quant: Quant { scale, zero_point },
        offset,
    }
}

fn golden_spec() -> ModelSpec {
    ModelSpec {
        name: "cap".into(),
        labels: vec!["ok".into(), "bad".into()],
        tensors: vec![
            tensor(2, ElemType::U8, 0.5, 0, 0),
            tensor(2, ElemType::I8, 0.25, -1, 0),
            tensor(2, ElemType::I8, 1.0, 3, 8),
        ],
        layers: vec![
            LayerSpec {
                header: LayerHeader {
                    op: Op::Pixels,
                    act: Activation::None,
                    inputs: [0, 0],
                    output: 1,
                    window: Window::default(),
                    clamp_i8: [-128, 127],
                    clamp_f32: NO_FP_CLAMP,
                },
                weights: WeightsBuf::None,
                bias: BiasBuf::None,
                params: ParamsBuf::I32(vec![0, 1 << 30, 37, 0, 1 << 30, 37]),
            },
            LayerSpec {
                header: LayerHeader {
                    op: Op::Dense,
                    act: Activation::Relu,
                    inputs: [1, 0],
                    output: 2,
                    window: Window::default(),
                    clamp_i8: [3, 127],
                    clamp_f32: NO_FP_CLAMP,
                },
                weights: WeightsBuf::I8(vec![4, -1, -2, 1]),
                bias: BiasBuf::I32(vec![10, -10]),
                params: ParamsBuf::I32(vec![1 << 30, 31, 1 << 30, 31]),
            },
        ],
        output: 2,
        workspace_len: 16,
    }
}

#[test]
fn field_table_matches_golden_offsets() {
    // The comments above give the offsets; the field table must agree.
    assert_eq!(GOLDEN[field::header::MAGIC], MAGIC);
    assert_eq!(GOLDEN[field::header::VERSION], VERSION.to_le_bytes());
    assert_eq!(SECTIONS_START, 72);
    assert_eq!(field::tensor::LEN, 20);
    assert_eq!(field::layer::LEN, 72);
}

#[test]
fn emit_gives_golden_bytes() {
    let bytes = golden_spec().emit().unwrap();
    assert_eq!(bytes.len(), GOLDEN.len());
    for (i, (a, b)) in bytes.iter().zip(GOLDEN.iter()).enumerate() {
        assert_eq!(a, b, "byte {i}: emitted {a:#04x}, golden {b:#04x}");
    }
}

#[test]
fn parse_golden_gives_spec() {
    let buf = AlignedBytes::from_slice(&GOLDEN);
    let m = Model::parse(&buf).unwrap();
    assert_eq!(ModelSpec::from_model(&m), golden_spec());
    assert_eq!(m.name(), "cap");
    assert_eq!(m.label_count(), 2);
    assert_eq!(m.label(0), Some("ok"));
    assert_eq!(m.label(1), Some("bad"));
    assert_eq!(m.label(2), None);
    assert_eq!(m.workspace_len(), 16);
    assert_eq!(m.tensor_count(), 3);
    assert_eq!(m.layer_count(), 2);
    assert!(m.tensor(3).is_none() && m.layer(2).is_none());
    assert_eq!(m.input(), golden_spec().tensors[0]);
    assert_eq!(m.output(), golden_spec().tensors[2]);
    // Dense 2 → 2: 2·2 multiply-accumulates, 4 weights + 2 biases.
    assert_eq!(m.layer_macs(1), 4);
    assert_eq!(m.layer_params(1), 6);
    assert_eq!(m.layer_macs(0), 0);
    assert_eq!(m.layer_params(0), 0);
    let s = m.sections();
    assert_eq!(s.header, 72);
    assert_eq!(s.tensor_table, 60);
    assert_eq!(s.layer_table, 144);
    assert_eq!(s.weights, 4);
    assert_eq!(s.biases, 8);
    assert_eq!(s.params, 40);
    assert_eq!(s.strings, 14);
    // 132..136, 308..312, 350..352
    assert_eq!(s.padding, 4 + 4 + 2);
    assert_eq!(s.total, 352);
}

#[test]
fn golden_model_runs() {
    // Worked by hand from the formulas in repr.rs (Requant, Params docs):
    // pixels: q1 = −1 + rq(p·256, 2^30, 37) = −1 + 2p  → p = [3, 7] gives [5, 13].
    // dense:  acc = bias + Σ w·q1 = [10 + 20 − 13, −10 − 10 + 13] = [17, −7];
    //         rq(acc, 2^30, 31) = floor((acc + 1) / 2) = [9, −3] (ties toward +∞);
    //         q2 = clamp(3 + rq, 3, 127) = [12, 3] (the second one cut by ReLU).
    // Built with the writer (whose bytes are the golden bytes, see above).
    let buf = AlignedBytes::from_slice(&golden_spec().emit().unwrap());
    let m = Model::parse(&buf).unwrap();
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    let out = m.run(&[3, 7], &mut ws).unwrap();
    assert_eq!(out, &[12u8, 3]);
}

#[test]
fn newer_version_is_rejected() {
    let mut g = GOLDEN;
    g[8] = 2;
    let buf = AlignedBytes::from_slice(&g);
    assert_eq!(
        Model::parse(&buf).unwrap_err(),
        Error::UnsupportedVersion {
            found: 2,
            supported: 1
        }
    );
}

#[test]
fn bad_magic_and_crc_are_rejected() {
    let mut g = GOLDEN;
    g[0] = b'm';
    assert_eq!(
        Model::parse(&AlignedBytes::from_slice(&g)).unwrap_err(),
        Error::BadMagic
    );
    let mut g = GOLDEN;
    g[310] = 1; // a padding byte inside the CRC-covered body
    assert!(matches!(
        Model::parse(&AlignedBytes::from_slice(&g)).unwrap_err(),
        Error::CrcMismatch {
            stored: 0x88B5_3D88,
            ..
        }
    ));
}

#[test]
fn misaligned_buffer_is_rejected() {
    let mut buf = AlignedBytes::zeroed(GOLDEN.len() + 1);
    buf[1..].copy_from_slice(&GOLDEN);
    assert_eq!(
        Model::parse(&buf[1..]).unwrap_err(),
        Error::Misaligned {
            offset: 0,
            align: 8
        }
    );
}

#[test]
fn trailing_bytes_are_ignored() {
    let mut buf = AlignedBytes::zeroed(GOLDEN.len() + 16);
    buf[..352].copy_from_slice(&GOLDEN);
    let m = Model::parse(&buf).unwrap();
    assert_eq!(m.bytes().len(), 352);
}

#[test]
fn embed_model_is_aligned_and_exact() {
    // Any file will do for the macro; this test's own source is at hand.
    let embedded: &'static [u8] = midge_runtime::embed_model!("format_golden.rs");
    assert_eq!(embedded, include_bytes!("format_golden.rs"));
    assert_eq!(embedded.as_ptr() as usize % 8, 0);
    // An aligned copy of the golden model parses from a static too.
    static GOLDEN_ALIGNED: midge_runtime::embed::Aligned<[u8; 352]> =
        midge_runtime::embed::Aligned { bytes: GOLDEN };
    assert_eq!(Model::parse(&GOLDEN_ALIGNED.bytes).unwrap().name(), "cap");
}
