//! The quantizer end to end on a tiny residual model: the emitted model
//! parses and runs in midge-runtime, follows the float reference, is
//! byte-identical across runs, honours precision overrides, and refuses
//! layers whose int32 accumulator could overflow.

mod quant_support;

use midge_convert::calibrate::RangeMethod;
use midge_convert::float_ref;
use midge_convert::graph::{FloatOp, Precision};
use midge_convert::images;
use midge_convert::plan;
use midge_convert::quantize::{
    dequantize_tensor, image_spec, quantize_description, quantize_graph, Conversion,
    QuantizeOptions,
};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::{ElemType, Model, Op};
use quant_support::*;

fn convert(tag: &str, extra: &str, opts: &QuantizeOptions) -> (std::path::PathBuf, Conversion) {
    let dir = scratch(tag);
    let desc = write_model(&dir, extra, 1);
    let c = quantize_description(&desc, opts).unwrap();
    (dir, c)
}

/// Max |float − dequantized runtime| over the validation images' logits,
/// relative to the largest float logit magnitude, and the top-1 agreement.
fn follow(dir: &std::path::Path, c: &Conversion) -> (f32, usize, usize) {
    let bytes = AlignedBytes::from_slice(&c.quantized.bytes);
    let model = Model::parse(&bytes).unwrap();
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    let files = images::labelled_folder(&dir.join("val"), &c.graph.labels).unwrap();
    let spec = image_spec(&c.desc);
    let (mut worst, mut agree) = (0.0f32, 0);
    for (f, _) in &files {
        let px = images::load_image(f, &spec).unwrap();
        let float = float_ref::logits(&c.graph, &px);
        let out = model.run(&px, &mut ws).unwrap();
        let q = dequantize_tensor(&model.output(), out);
        let scale = float.iter().fold(1.0f32, |m, v| m.max(v.abs()));
        for (a, b) in float.iter().zip(&q) {
            worst = worst.max((a - b).abs() / scale);
        }
        let am = |v: &[f32]| (0..v.len()).max_by(|&i, &j| v[i].total_cmp(&v[j])).unwrap();
        agree += (am(&float) == am(&q)) as usize;
    }
    (worst, agree, files.len())
}

#[test]
fn int8_model_runs_and_follows_the_float_reference() {
    let (dir, c) = convert("qp-int8", "", &QuantizeOptions::default());
    let q = &c.quantized;
    let model_bytes = AlignedBytes::from_slice(&q.bytes);
    let model = Model::parse(&model_bytes).unwrap();
    // pixels + 7 folded nodes (stem, block, add, pool, dw, gap, head).
    assert_eq!(model.layer_count(), 8);
    assert_eq!(model.layer(0).unwrap().header.op, Op::Pixels);
    assert_eq!(model.input().elem, ElemType::U8);
    assert_eq!(model.output().elem, ElemType::I8);
    assert_eq!(q.map.len(), c.graph.nodes.len() + 1);
    // The planner's result is what the file holds, and it is valid.
    assert_eq!(model.workspace_len(), q.plan.workspace_len);
    assert!(q.plan.workspace_len >= q.plan.lower_bound);
    // 8-bit weights and activations: logits within 10 % of their magnitude
    // (a loose bound, the error is usually ~1-2 %), most top-1 agree.
    let (worst, agree, n) = follow(&dir, &c);
    assert!(worst < 0.10, "relative logit error {worst}");
    assert!(agree * 10 >= n * 8, "{agree}/{n}");
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn fp16_model_is_close_to_float() {
    let opts = QuantizeOptions {
        precision: Some(Precision::Fp16),
        ..Default::default()
    };
    let (dir, c) = convert("qp-fp16", "", &opts);
    let bytes = AlignedBytes::from_slice(&c.quantized.bytes);
    let model = Model::parse(&bytes).unwrap();
    assert_eq!(model.output().elem, ElemType::F16);
    // binary16 has an 11-bit significand: relative rounding 2^-11 ≈ 4.9e-4
    // per value (IEEE 754-2008); a few layers stay well under 1 %.
    let (worst, agree, n) = follow(&dir, &c);
    assert!(worst < 0.01, "relative logit error {worst}");
    assert_eq!(agree, n);
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn mixed_precision_inserts_boundary_layers() {
    let (dir, c) = convert(
        "qp-mixed",
        "precision = \"fp16\"",
        &QuantizeOptions::default(),
    );
    let bytes = AlignedBytes::from_slice(&c.quantized.bytes);
    let model = Model::parse(&bytes).unwrap();
    let ops: Vec<Op> = (0..model.layer_count())
        .map(|i| model.layer(i).unwrap().header.op)
        .collect();
    // block reads stem (int8) → dequantize; add is int8 and reads block
    // (fp16) → quantize.
    assert!(
        ops.contains(&Op::Dequantize) && ops.contains(&Op::Quantize),
        "{ops:?}"
    );
    let block = c
        .graph
        .nodes
        .iter()
        .position(|n| n.name == "block")
        .unwrap();
    let t = model.tensor(c.quantized.map[block + 1] as usize).unwrap();
    assert_eq!(t.elem, ElemType::F16);
    let (worst, _, _) = follow(&dir, &c);
    assert!(worst < 0.10, "{worst}");
    std::fs::remove_dir_all(&dir).unwrap();
    // The run-wide --precision is a default: a layer's own key wins.
    let dir = scratch("qp-mixed-flag");
    let desc = write_model(&dir, "precision = \"int8\"", 1);
    let opts = QuantizeOptions {
        precision: Some(Precision::Fp16),
        ..Default::default()
    };
    let c2 = quantize_description(&desc, &opts).unwrap();
    for n in &c2.graph.nodes {
        let want = if n.name == "block" {
            Precision::Int8
        } else {
            Precision::Fp16
        };
        assert_eq!(n.precision, want, "{}", n.name);
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn conversion_is_deterministic() {
    let dir = scratch("qp-det");
    let desc = write_model(&dir, "", 3);
    for method in [
        RangeMethod::MinMax,
        RangeMethod::Percentile(99.9),
        RangeMethod::Mse,
    ] {
        let opts = QuantizeOptions {
            method,
            ..Default::default()
        };
        let a = quantize_description(&desc, &opts).unwrap();
        let b = quantize_description(&desc, &opts).unwrap();
        assert_eq!(a.quantized.bytes, b.quantized.bytes, "{method:?}");
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn memory_plan_of_the_residual_model() {
    let (dir, c) = convert("qp-plan", "", &QuantizeOptions::default());
    let q = &c.quantized;
    // Hand count (int8, 1 byte per value), layers in order:
    //  0 pixels  → t1 8·8·3 = 192   (read by stem)
    //  1 stem    → t2 8·8·4 = 256   (read by block and add)
    //  2 block   → t3 256           (read by add)
    //  3 add     → t4 256
    //  4 pool    → t5 4·4·4 = 64
    //  5 dw      → t6 64
    //  6 gap     → t7 4
    //  7 head    → t8 3 (output)
    // Live bytes per step (a tensor is live from its writer to its last
    // reader; the output to the end): 192, 448 (t1 t2), 512 (t2 t3),
    // 768 (t2 t3 t4), 320, 128, 68, 7. The bound is the add step: 768.
    assert_eq!(q.plan.lower_bound, 768);
    assert!(q.plan.workspace_len >= 768);
    let p = plan::Plan {
        offsets: q.plan.tensors.iter().map(|t| t.offset).collect(),
        lifetimes: q
            .plan
            .tensors
            .iter()
            .map(|t| {
                t.live.map(|(first, last)| plan::Lifetime {
                    bytes: t.bytes,
                    first,
                    last,
                })
            })
            .collect(),
        workspace_len: q.plan.workspace_len,
        lower_bound: q.plan.lower_bound,
    };
    assert!(plan::conflicts(&p).is_empty());
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn accumulator_overflow_is_refused_with_the_layer_name() {
    let (dir, c) = convert("qp-acc", "", &QuantizeOptions::default());
    let mut g = c.graph.clone();
    // A bias of 1e9 at the stem's accumulator scale cannot fit int32.
    let stem = g.nodes.iter_mut().find(|n| n.name == "stem").unwrap();
    if let FloatOp::Conv2d { bias, .. } = &mut stem.op {
        bias[0] = 1e9;
    }
    let e = quantize_graph(&g, &c.ranges).unwrap_err();
    assert!(e.place().contains("stem"), "{e}");
    assert!(e.problem().contains("overflow"), "{e}");
    std::fs::remove_dir_all(&dir).unwrap();
}

/// Records the bytes of one layer's output.
struct Grab {
    layer: usize,
    bytes: Vec<u8>,
}

impl midge_runtime::Observer for Grab {
    fn after_layer(&mut self, i: usize, _out: &midge_runtime::TensorRecord, bytes: &[u8]) {
        if i == self.layer {
            self.bytes = bytes.to_vec();
        }
    }
}

#[test]
fn pixels_layer_is_the_normalization_formula() {
    // What the device does with a pixel byte must match quantizing the float
    // model's normalized input x = (p/255·range − mean[c]) / std[c] with the
    // input tensor's scale and zero point, to within one step (the offset
    // and multiplier are rounded to fixed point).
    let (dir, c) = convert("qp-pixels", "", &QuantizeOptions::default());
    let bytes = AlignedBytes::from_slice(&c.quantized.bytes);
    let model = Model::parse(&bytes).unwrap();
    let t1 = model.tensor(1).unwrap();
    assert_eq!(t1.elem, ElemType::I8);
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    // Every byte value in every channel: 8·8·3 = 192 bytes hold 0..=191,
    // then 64..=255.
    for start in [0u32, 64] {
        let px: Vec<u8> = (0..192u32).map(|i| (start + i) as u8).collect();
        let mut g = Grab {
            layer: 0,
            bytes: Vec::new(),
        };
        model.run_observed(&px, &mut ws, &mut g).unwrap();
        let x = float_ref::normalize(&c.graph.input, &px);
        for (i, (&q, &x)) in g.bytes.iter().zip(&x).enumerate() {
            let want = midge_convert::quantize::quantize_value(
                x,
                t1.quant.scale,
                t1.quant.zero_point,
                -128,
                127,
            );
            assert!(
                (q as i8 as i32 - want).abs() <= 1,
                "byte {} ch {}: {q} vs {want}",
                px[i],
                i % 3
            );
        }
    }
    // fp16: x = p·a + b must be the formula to binary16 precision.
    let opts = QuantizeOptions {
        precision: Some(Precision::Fp16),
        ..Default::default()
    };
    let c16 = quantize_description(&dir.join("model.toml"), &opts).unwrap();
    let bytes = AlignedBytes::from_slice(&c16.quantized.bytes);
    let model = Model::parse(&bytes).unwrap();
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    let px: Vec<u8> = (0..192u32).map(|i| (i * 4 / 3) as u8).collect();
    let mut g = Grab {
        layer: 0,
        bytes: Vec::new(),
    };
    model.run_observed(&px, &mut ws, &mut g).unwrap();
    let got = dequantize_tensor(&model.tensor(1).unwrap(), &g.bytes);
    let x = float_ref::normalize(&c16.graph.input, &px);
    for (a, b) in got.iter().zip(&x) {
        // binary16 relative precision 2^-11 (IEEE 754-2008).
        assert!((a - b).abs() <= b.abs() * 1e-3 + 1e-3, "{a} vs {b}");
    }
    std::fs::remove_dir_all(&dir).unwrap();
}
