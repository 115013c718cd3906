//! Extreme weights at the worst-case int32 accumulator limit, at both levels:
//! the runtime (writer and `parse` re-check, also on hand-patched bytes) and
//! the converter's quantizer (refusal naming the layer). Exactly at the bound
//! passes; one more unit of bias or weight fails.
//!
//! The rule (our own, runtime/src/exec.rs `check_accumulator` and
//! FORMAT.md): per output channel `|bias| + 255 · Σ|w| ≤ i32::MAX`, with
//! i32::MAX = 2^31 − 1 (two's complement 32-bit, common practice).

use midge_convert::calibrate::Range;
use midge_convert::description::Precision;
use midge_convert::graph::{FloatGraph, FloatOp, InputSpec, Node};
use midge_convert::quantize::{activation_quant, quantize_graph, quantize_weights};
use midge_runtime::crc::crc32;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::format::field;
use midge_runtime::{repr::Activation, Error, Model, Shape};
use midge_tests::mutate::Map;
use midge_tests::seeds::dense_with;

const LIMIT: i64 = i32::MAX as i64; // 2^31 − 1

/// Σ|w| = floor(LIMIT / 255) = 8,421,504 with int8 weights: 66,311 × 127 + 7.
/// Then 255 · 8,421,504 = 2,147,483,520 and the bias that reaches LIMIT
/// exactly is 127.
fn limit_weights() -> Vec<i8> {
    let mut w = vec![127i8; 66_311];
    w.push(7);
    w
}
const LIMIT_SHAPE: (u16, u16, u16) = (8, 27, 307); // 66,312 inputs
const LIMIT_BIAS: i32 = 127;

#[test]
fn arithmetic_of_the_limit_case() {
    // Guards the hand arithmetic above.
    let s: i64 = limit_weights().iter().map(|&v| (v as i64).abs()).sum();
    assert_eq!(s, LIMIT / 255);
    assert_eq!(255 * s + LIMIT_BIAS as i64, LIMIT);
    let (h, w, c) = LIMIT_SHAPE;
    assert_eq!(h as usize * w as usize * c as usize, limit_weights().len());
}

fn overflow(layer: usize, channel: usize) -> Error {
    Error::AccumulatorOverflow { layer, channel }
}

#[test]
fn writer_accepts_the_bound_and_refuses_one_more() {
    for bias in [LIMIT_BIAS, -LIMIT_BIAS, 0] {
        dense_with(LIMIT_SHAPE, limit_weights(), vec![bias])
            .emit()
            .unwrap_or_else(|e| panic!("bias {bias}: {e}"));
    }
    for bias in [LIMIT_BIAS + 1, -LIMIT_BIAS - 1, i32::MIN, i32::MAX] {
        assert_eq!(
            dense_with(LIMIT_SHAPE, limit_weights(), vec![bias])
                .emit()
                .unwrap_err(),
            overflow(1, 0),
            "bias {bias}"
        );
    }
    // One more unit of weight instead of bias.
    let mut w = limit_weights();
    *w.last_mut().unwrap() = 8;
    assert_eq!(
        dense_with(LIMIT_SHAPE, w.clone(), vec![LIMIT_BIAS])
            .emit()
            .unwrap_err(),
        overflow(1, 0)
    );
    // A negative weight counts by its magnitude.
    *w.last_mut().unwrap() = -8;
    assert_eq!(
        dense_with(LIMIT_SHAPE, w, vec![LIMIT_BIAS])
            .emit()
            .unwrap_err(),
        overflow(1, 0)
    );
}

#[test]
fn minus_128_weights_count_as_128() {
    // 65,793 × |−128| = 8,421,504 = floor(LIMIT / 255) again.
    assert_eq!(65_793 * 128, LIMIT / 255);
    let shape = (21, 13, 241);
    let w = vec![-128i8; 65_793];
    dense_with(shape, w.clone(), vec![LIMIT_BIAS])
        .emit()
        .unwrap();
    assert_eq!(
        dense_with(shape, w, vec![LIMIT_BIAS + 1])
            .emit()
            .unwrap_err(),
        overflow(1, 0)
    );
}

#[test]
fn the_failing_channel_is_named() {
    // Channel 0 small, channel 1 one over the limit.
    let n = limit_weights().len();
    let mut w = vec![1i8; n];
    w.extend(limit_weights());
    assert_eq!(
        dense_with(LIMIT_SHAPE, w, vec![0, LIMIT_BIAS + 1])
            .emit()
            .unwrap_err(),
        overflow(1, 1)
    );
}

/// File offset of blob `which` (field::layer::WEIGHTS/BIAS) of layer `layer`.
fn blob_offset(bytes: &[u8], layer: usize, which: std::ops::Range<usize>) -> usize {
    let at = Map::of(bytes).layers.0 + layer * field::layer::LEN + which.start;
    u32::from_le_bytes(bytes[at..at + 4].try_into().unwrap()) as usize
}

fn reseal(b: &mut [u8]) {
    let crc = crc32(&b[field::header::LEN..]);
    b[field::header::CRC].copy_from_slice(&crc.to_le_bytes());
}

#[test]
fn parse_rechecks_patched_files() {
    // The writer refuses what the reader refuses, so patch a valid file by
    // hand to show the reader's own check.
    let good = dense_with(LIMIT_SHAPE, limit_weights(), vec![LIMIT_BIAS])
        .emit()
        .unwrap();
    let bias_at = blob_offset(&good, 1, field::layer::BIAS);
    assert_eq!(&good[bias_at..bias_at + 4], &LIMIT_BIAS.to_le_bytes());

    let mut b = good.clone();
    b[bias_at..bias_at + 4].copy_from_slice(&(LIMIT_BIAS + 1).to_le_bytes());
    reseal(&mut b);
    assert_eq!(
        Model::parse(&AlignedBytes::from_slice(&b)).unwrap_err(),
        overflow(1, 0)
    );

    let w_at = blob_offset(&good, 1, field::layer::WEIGHTS);
    let last = w_at + limit_weights().len() - 1;
    assert_eq!(good[last], 7);
    let mut b = good.clone();
    b[last] = 8;
    reseal(&mut b);
    assert_eq!(
        Model::parse(&AlignedBytes::from_slice(&b)).unwrap_err(),
        overflow(1, 0)
    );
    // Back to 7 (the original bytes): parses.
    b[last] = 7;
    reseal(&mut b);
    assert_eq!(b, good);
    Model::parse(&AlignedBytes::from_slice(&b)).unwrap();
}

#[test]
fn the_limit_model_runs_exactly() {
    // At the bound the kernel's int32 sums are exact: the output equals an
    // i64 evaluation of the definitions (pixels q = p − 128 by the seed's
    // parameters; dense acc = bias + Σ w·q; requant 2^30·2^−38 = round(acc/256)
    // ties up; clamp −128..=127), for inputs that keep the result in range.
    let bytes = dense_with(LIMIT_SHAPE, limit_weights(), vec![LIMIT_BIAS])
        .emit()
        .unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    let w = limit_weights();
    let n = w.len();
    for pattern in 0..4usize {
        // Large partial sums that cancel: +127/−128 halves in several orders.
        let p: Vec<u8> = (0..n)
            .map(|i| match pattern {
                0 => {
                    if i < n / 2 {
                        255
                    } else {
                        0
                    }
                }
                1 => {
                    if i % 2 == 0 {
                        255
                    } else {
                        1
                    }
                }
                2 => {
                    if i < n / 2 {
                        0
                    } else {
                        255
                    }
                }
                _ => (128 + (i % 3) as i32 - 1) as u8,
            })
            .collect();
        let acc: i64 = LIMIT_BIAS as i64
            + p.iter()
                .zip(&w)
                .map(|(&p, &w)| w as i64 * (p as i64 - 128))
                .sum::<i64>();
        let want = ((acc * (1 << 30) + (1i64 << 37)) >> 38).clamp(-128, 127) as i8;
        let mut ws = AlignedBytes::zeroed(m.workspace_len());
        let out = m.run(&p, &mut ws).unwrap();
        assert_eq!(out[0] as i8, want, "pattern {pattern}, acc {acc}");
    }
}

// ----------------------------------------------------------- the converter

const N_IN: usize = 66_310; // even: alternating ±w sums to 0
const N_SHAPE: (u16, u16) = (190, 349);

/// A float graph of one dense layer "head" over a 190×349×1 input with
/// alternating ±1.0 weights and float bias `bias`. Input normalization
/// x = p/255 (mean 0, std 1, pixel range 1).
fn dense_graph(bias: f32) -> FloatGraph {
    let weight: Vec<f32> = (0..N_IN)
        .map(|i| if i % 2 == 0 { 1.0 } else { -1.0 })
        .collect();
    FloatGraph {
        name: "acc-limit".into(),
        labels: vec!["only".into()],
        input: InputSpec {
            h: N_SHAPE.0,
            w: N_SHAPE.1,
            c: 1,
            mean: vec![0.0],
            std: vec![1.0],
            pixel_range: 1.0,
        },
        nodes: vec![Node {
            name: "head".into(),
            op: FloatOp::Dense {
                weight,
                bias: vec![bias],
            },
            inputs: vec![0],
            act: Activation::None,
            precision: Precision::Int8,
            out_shape: Shape::new(1, 1, 1),
        }],
    }
}

fn ranges() -> Vec<Range> {
    vec![
        Range { min: 0.0, max: 1.0 },
        Range {
            min: -1.0e4,
            max: 1.0e4,
        },
    ]
}

#[test]
fn converter_refuses_the_layer_one_over_the_bound() {
    assert_eq!(N_IN, N_SHAPE.0 as usize * N_SHAPE.1 as usize);
    // The quantizer's own scales: input [0, 1] → s_in; weights ±1.0 →
    // per-channel s_w = 1/127 and q = ±127, so Σq = 0 (no zero-point term)
    // and Σ|q| = 127 · 66,310.
    let s_in = activation_quant(Range { min: 0.0, max: 1.0 }).scale as f64;
    let (q, sw) = quantize_weights(
        &(0..N_IN)
            .map(|i| if i % 2 == 0 { 1.0 } else { -1.0 })
            .collect::<Vec<f32>>(),
        1,
        |_| 0,
    );
    let abs: i64 = q.iter().map(|&v| (v as i64).abs()).sum();
    assert_eq!(abs, 127 * N_IN as i64);
    let room = LIMIT - 255 * abs; // the largest int32 bias that still fits
    assert_eq!(room, 34_297);
    let s_acc = s_in * sw[0] as f64;
    let float_bias = |q: i64| {
        let b = (q as f64 * s_acc) as f32;
        assert_eq!(
            (b as f64 / s_acc).round() as i64,
            q,
            "float bias {b} misses {q}"
        );
        b
    };

    for q in [room, -room, 0] {
        let out = quantize_graph(&dense_graph(float_bias(q)), &ranges())
            .unwrap_or_else(|e| panic!("bias {q}: {e}"));
        Model::parse(&AlignedBytes::from_slice(&out.bytes)).unwrap();
    }
    for q in [room + 1, -room - 1] {
        let e = quantize_graph(&dense_graph(float_bias(q)), &ranges()).unwrap_err();
        let line = e.to_string();
        assert!(line.contains("head"), "layer not named: {line}");
        assert!(line.contains("accumulator"), "problem not said: {line}");
        assert!(!line.contains('\n'));
    }
}
