//! The bundled int8 hard case (models/caps/hard.*, constructed on purpose,
//! see models/caps/README.md) and the tools that fix it: the rescale keeps
//! the float function, plain int8 loses ≥ 2 pp on it, cross-layer
//! equalization keeps the float function and wins the drop back, and bias
//! correction lowers it (both methods: Nagel et al. 2019, "Data-Free
//! Quantization Through Weight Equalization and Bias Correction", ICCV).

use std::path::{Path, PathBuf};

use midge_convert::bias_correct;
use midge_convert::compare::{compare, CompareOptions};
use midge_convert::equalize;
use midge_convert::float_ref;
use midge_convert::graph::{FloatGraph, FloatOp, Node};
use midge_convert::quantize::{calibration_pixels, load_with_precision, QuantizeOptions};
use midge_runtime::repr::Activation;

fn model(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../models")
        .join(name)
}

/// Every 10th validation image (all classes), as pixels.
fn some_images(desc_path: &Path) -> (FloatGraph, Vec<Vec<u8>>) {
    let (desc, graph, _) = load_with_precision(desc_path, None).expect("load");
    let dir = desc.validation.clone().expect("validation folder");
    let px = calibration_pixels(&desc, &dir).expect("images");
    (graph, px.into_iter().step_by(10).map(|(_, p)| p).collect())
}

/// Largest |a − b| / max|a| over images and logits.
fn relative_gap(a: &FloatGraph, b: &FloatGraph, images: &[Vec<u8>]) -> f64 {
    let mut gap = 0f64;
    for px in images {
        let la = float_ref::logits(a, px);
        let lb = float_ref::logits(b, px);
        let scale = la.iter().fold(0f64, |m, v| m.max(v.abs() as f64));
        let diff = la
            .iter()
            .zip(&lb)
            .fold(0f64, |m, (x, y)| m.max((x - y).abs() as f64));
        assert!(scale > 0.0);
        gap = gap.max(diff / scale);
    }
    gap
}

/// Largest over smallest per-channel max of a tensor over `images`.
fn channel_spread(graph: &FloatGraph, tensor: usize, images: &[Vec<u8>]) -> f64 {
    let c = graph.tensor_shape(tensor).c as usize;
    let mut max = vec![0f64; c];
    for px in images {
        let t = float_ref::run(graph, px);
        for (i, v) in t[tensor].iter().enumerate() {
            max[i % c] = max[i % c].max(*v as f64);
        }
    }
    let hi = max.iter().cloned().fold(0f64, f64::max);
    let lo = max.iter().cloned().fold(f64::INFINITY, f64::min);
    hi / lo
}

fn node_output(graph: &FloatGraph, name: &str) -> usize {
    // Tensor 0 is the input; node k writes tensor k + 1.
    1 + graph
        .nodes
        .iter()
        .position(|n| n.name == name)
        .expect("node")
}

#[test]
fn hard_case_keeps_the_float_function_and_spreads_one_tensor() {
    let (wide, images) = some_images(&model("caps/wide.toml"));
    let (hard, _) = some_images(&model("caps/hard.toml"));
    // The rescale is exact in real arithmetic (ReLU(s·x) = s·ReLU(x) for
    // s > 0, common practice); in f32 the logits agree to ~1e-6 relative.
    let gap = relative_gap(&wide, &hard, &images);
    assert!(gap < 1e-4, "hard vs wide float logits: {gap:e}");
    // ... while block 0's depthwise output spreads over two more decades.
    let t = node_output(&hard, "b0_dw");
    let (sw, sh) = (
        channel_spread(&wide, t, &images),
        channel_spread(&hard, t, &images),
    );
    assert!(sh > 30.0 * sw, "channel spread wide {sw:.1}, hard {sh:.1}");
}

#[test]
fn equalization_leaves_the_float_outputs_unchanged() {
    // Definition of cross-layer equalization (Nagel et al. 2019, ICCV,
    // §4.1): a rescale the float function does not see. Checked against the
    // unequalized float reference, on the hard case and on a plain-CNN
    // control (conv → ReLU → maxpool → conv pairs).
    for name in ["caps/hard.toml", "caps/plain.toml"] {
        let (graph, images) = some_images(&model(name));
        let mut eq = graph.clone();
        let pairs = equalize::equalize(&mut eq);
        assert!(!pairs.is_empty(), "{name}: no pair equalized");
        assert!(
            pairs.iter().any(|p| p.spread_after < p.spread_before),
            "{name}: equalization changed no weight range"
        );
        let gap = relative_gap(&graph, &eq, &images);
        assert!(gap < 1e-5, "{name}: equalized vs float logits {gap:e}");
    }
}

fn drop_pp(name: &str, equalize: bool, bias_correct: bool) -> f64 {
    let opts = CompareOptions {
        quantize: QuantizeOptions {
            equalize,
            bias_correct,
            ..QuantizeOptions::default()
        },
        also_fp16: false,
        images: None,
    };
    compare(&model(name), &opts).expect("compare").drop_pp
}

#[test]
fn plain_int8_hurts_the_hard_case_and_the_tools_win_it_back() {
    // Acceptance bounds of issue 14: plain int8 ≥ 2 pp; the measured figures
    // (models/caps/README.md) are 6.50, 0.25 with equalization, 2.75 with
    // bias correction.
    let plain = drop_pp("caps/hard.toml", false, false);
    assert!(plain >= 2.0, "plain int8 drop {plain} pp");
    let eq = drop_pp("caps/hard.toml", true, false);
    assert!(eq <= 1.0, "equalized drop {eq} pp");
    // Bias correction removes the mean output error of the quantized weights
    // (Nagel et al. 2019, §4.2); on this case it helps, less than equalization.
    let bc = drop_pp("caps/hard.toml", false, true);
    assert!(
        bc < plain,
        "bias-corrected drop {bc} pp vs plain {plain} pp"
    );
}

/// `node` with other weights and bias, no activation (the layer's raw output).
fn with_weights(node: &Node, weight: Vec<f32>, bias: Vec<f32>) -> Node {
    let mut n = node.clone();
    n.act = Activation::None;
    n.op = match &node.op {
        FloatOp::Conv2d { window, .. } => FloatOp::Conv2d {
            window: *window,
            weight,
            bias,
        },
        FloatOp::Depthwise { window, .. } => FloatOp::Depthwise {
            window: *window,
            weight,
            bias,
        },
        FloatOp::Dense { .. } => FloatOp::Dense { weight, bias },
        other => panic!("{}: not a weighted layer: {other:?}", node.name),
    };
    n
}

#[test]
fn bias_correction_lowers_the_mean_output_error_of_each_layer() {
    // Empirical bias correction (Nagel et al. 2019, ICCV, §4.2): the shift
    // makes E[ỹ − y] ≈ 0 per output channel, where ỹ is the layer's output
    // with its int8-dequantized weights and y the float output, both on the
    // float input. Checked on the calibration images against the same
    // layer without the shift: mean over channels of |E[ỹ − y]|.
    for name in ["caps/hard.toml", "caps/plain.toml"] {
        let (desc, graph, _) = load_with_precision(&model(name), None).expect("load");
        let dir = desc.calibration.clone().expect("calibration folder");
        let px = calibration_pixels(&desc, &dir).expect("images");
        let runs: Vec<Vec<Vec<f32>>> = px.iter().map(|(_, p)| float_ref::run(&graph, p)).collect();
        let means = bias_correct::tensor_means(runs.len(), |i| Ok(runs[i].clone())).unwrap();
        let shifts = bias_correct::shifts(&graph, &means);
        let mut layers = 0;
        for (node, shift) in graph.nodes.iter().zip(&shifts) {
            let Some(shift) = shift else { continue };
            let (w, b) = node.op.weight_bias().unwrap();
            let wq = bias_correct::dequantized_weights(&node.op).unwrap();
            let float = with_weights(node, w.to_vec(), b.to_vec());
            let plain = with_weights(node, wq.clone(), b.to_vec());
            let fixed_bias: Vec<f32> = b.iter().zip(shift).map(|(b, s)| b + s).collect();
            let fixed = with_weights(node, wq, fixed_bias);
            let c = b.len();
            let (mut e_plain, mut e_fixed) = (vec![0f64; c], vec![0f64; c]);
            let mut count = 0f64;
            for t in &runs {
                let y = float_ref::eval_node(&graph, &float, t);
                let yp = float_ref::eval_node(&graph, &plain, t);
                let yf = float_ref::eval_node(&graph, &fixed, t);
                for i in 0..y.len() {
                    e_plain[i % c] += (yp[i] - y[i]) as f64;
                    e_fixed[i % c] += (yf[i] - y[i]) as f64;
                }
                count += (y.len() / c) as f64;
            }
            let mean_abs = |e: &[f64]| e.iter().map(|v| (v / count).abs()).sum::<f64>() / c as f64;
            let (before, after) = (mean_abs(&e_plain), mean_abs(&e_fixed));
            assert!(
                after < before,
                "{name} {}: mean output error {after:e} corrected vs {before:e} plain",
                node.name
            );
            layers += 1;
        }
        assert!(layers >= 5, "{name}: {layers} layers corrected");
    }
}

#[test]
fn controls_do_not_get_worse_with_equalization_and_bias_correction() {
    // Issue 14: the bundled models that already quantize well stay where
    // they are (measured: digits 0.00, caps/plain 0.25 → 0.00, caps/separable
    // 0.25 → 0.25 pp; README "Accuracy tools").
    for name in [
        "digits/model.toml",
        "caps/plain.toml",
        "caps/separable.toml",
    ] {
        let plain = drop_pp(name, false, false);
        let both = drop_pp(name, true, true);
        assert!(
            both <= plain,
            "{name}: {both} pp with the tools, {plain} pp plain"
        );
        assert!(both <= 0.5, "{name}: {both} pp");
    }
}
