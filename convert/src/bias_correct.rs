//! Empirical bias correction: per int8 conv2d/depthwise/dense layer, the
//! mean output error its quantized weights introduce on the calibration
//! images, subtracted from its bias before quantization. The float graph
//! (the reference) keeps its biases; only the int8 lowering sees the shift.
//!
//! Method: Nagel et al. 2019, "Data-Free Quantization Through Weight
//! Equalization and Bias Correction" (ICCV), §4.2: with ε = W̃ − W the
//! weight error, E[ỹ − y] = ε·E[x]; we take E[x] empirically, as the mean of
//! the layer's float input over the calibration images (element by element,
//! so zero padding is respected), and add −ε·E[x], averaged over positions,
//! to each output channel's bias.

use serde::Serialize;

use crate::float_ref;
use crate::graph::{FloatGraph, FloatOp, Precision};
use crate::quantize::quantize_weights;
use midge_runtime::repr::Activation;

/// One corrected layer, for the report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BiasRow {
    pub layer: String,
    pub channels: usize,
    /// Largest |shift| over channels and the mean |shift|.
    pub max_abs_shift: f64,
    pub mean_abs_shift: f64,
}

/// Per node: the bias shift of its int8 lowering (None: none).
pub type Shifts = Vec<Option<Vec<f32>>>;

/// The weights a layer's int8 lowering dequantizes to (per output channel
/// symmetric, see `quantize::quantize_weights`).
pub fn dequantized_weights(op: &FloatOp) -> Option<Vec<f32>> {
    let (w, b) = op.weight_bias()?;
    let c = b.len().max(1);
    let per = w.len() / c;
    let (q, s) = match op {
        FloatOp::Depthwise { .. } => quantize_weights(w, c, |i| i % c),
        _ => quantize_weights(w, c, |i| i / per.max(1)),
    };
    Some(
        q.iter()
            .enumerate()
            .map(|(i, &v)| {
                let ch = match op {
                    FloatOp::Depthwise { .. } => i % c,
                    _ => i / per.max(1),
                };
                v as f32 * s[ch]
            })
            .collect(),
    )
}

/// Bias shifts of every weighted layer from the per-element mean of each
/// tensor over the calibration images (`means[id]`, see [`tensor_means`]).
pub fn shifts(graph: &FloatGraph, means: &[Vec<f64>]) -> Shifts {
    graph
        .nodes
        .iter()
        .map(|node| {
            let (w, b) = node.op.weight_bias()?;
            let wq = dequantized_weights(&node.op)?;
            let eps: Vec<f32> = wq.iter().zip(w).map(|(q, w)| q - w).collect();
            let zero = vec![0.0f32; b.len()];
            let mut probe = node.clone();
            probe.act = Activation::None;
            probe.op = match &node.op {
                FloatOp::Conv2d { window, .. } => FloatOp::Conv2d {
                    window: *window,
                    weight: eps,
                    bias: zero,
                },
                FloatOp::Depthwise { window, .. } => FloatOp::Depthwise {
                    window: *window,
                    weight: eps,
                    bias: zero,
                },
                FloatOp::Dense { .. } => FloatOp::Dense {
                    weight: eps,
                    bias: zero,
                },
                _ => return None,
            };
            let src = node.inputs[0];
            let mut tensors = vec![Vec::new(); src + 1];
            tensors[src] = means[src].iter().map(|&v| v as f32).collect();
            let err = float_ref::eval_node(graph, &probe, &tensors);
            let c = b.len().max(1);
            let mut sum = vec![0.0f64; c];
            for (i, e) in err.iter().enumerate() {
                sum[i % c] += *e as f64;
            }
            let positions = (err.len() / c).max(1) as f64;
            Some(sum.iter().map(|s| (-s / positions) as f32).collect())
        })
        .collect()
}

/// Per-element means of every tensor over `count` images, summed in image
/// order (`run(i)`: all tensors of image `i`).
pub fn tensor_means(
    count: usize,
    run: impl Fn(usize) -> crate::Result<Vec<Vec<f32>>>,
) -> crate::Result<Vec<Vec<f64>>> {
    let mut sums: Vec<Vec<f64>> = Vec::new();
    for i in 0..count {
        let t = run(i)?;
        if sums.is_empty() {
            sums = t.iter().map(|v| vec![0.0; v.len()]).collect();
        }
        for (s, v) in sums.iter_mut().zip(&t) {
            s.iter_mut().zip(v).for_each(|(s, v)| *s += *v as f64);
        }
    }
    let n = count.max(1) as f64;
    sums.iter_mut()
        .for_each(|s| s.iter_mut().for_each(|v| *v /= n));
    Ok(sums)
}

/// The graph the int8 lowering quantizes: `graph` with each int8 layer's
/// bias shifted by its correction (fp16 layers keep theirs).
pub fn corrected(graph: &FloatGraph, shifts: &Shifts) -> FloatGraph {
    let mut g = graph.clone();
    for (node, shift) in g.nodes.iter_mut().zip(shifts) {
        let (Some(shift), Precision::Int8) = (shift, node.precision) else {
            continue;
        };
        if let FloatOp::Conv2d { bias, .. }
        | FloatOp::Depthwise { bias, .. }
        | FloatOp::Dense { bias, .. } = &mut node.op
        {
            bias.iter_mut().zip(shift).for_each(|(b, s)| *b += s);
        }
    }
    g
}

/// Report rows of the layers with a shift.
pub fn rows(graph: &FloatGraph, shifts: &Shifts) -> Vec<BiasRow> {
    graph
        .nodes
        .iter()
        .zip(shifts)
        .filter_map(|(n, s)| {
            let s = s.as_ref()?;
            let max = s.iter().fold(0.0f64, |m, v| m.max(v.abs() as f64));
            let mean = s.iter().map(|v| v.abs() as f64).sum::<f64>() / s.len().max(1) as f64;
            Some(BiasRow {
                layer: n.name.clone(),
                channels: s.len(),
                max_abs_shift: max,
                mean_abs_shift: mean,
            })
        })
        .collect()
}

/// The per-layer lines of `--equalize` and `--bias-correct` for the text
/// reports (empty when neither ran).
pub fn adjustments_text(pairs: &[crate::equalize::EqualizedPair], rows: &[BiasRow]) -> String {
    use crate::error::escape;
    let mut s = String::new();
    if !pairs.is_empty() {
        s += "\n  equalized pair (Nagel et al. 2019)          channels  weight-range spread before → after\n";
        for p in pairs {
            s += &format!(
                "  {:<20} → {:<20} {:>5}  {:>10.1} → {:.1}\n",
                escape(&p.producer),
                escape(&p.consumer),
                p.channels,
                p.spread_before,
                p.spread_after
            );
        }
    }
    if !rows.is_empty() {
        s += "\n  bias correction (Nagel et al. 2019)   channels  max |shift|  mean |shift|\n";
        for r in rows {
            s += &format!(
                "  {:<36} {:>5} {:>12.3e} {:>13.3e}\n",
                escape(&r.layer),
                r.channels,
                r.max_abs_shift,
                r.mean_abs_shift
            );
        }
    }
    s
}
