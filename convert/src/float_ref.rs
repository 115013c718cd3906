//! The f32 reference executor: runs a `FloatGraph` (folded or not) on camera
//! bytes with plain loops, f32 values and f32 accumulation, HWC tensors.
//! It is the converter's only second implementation, checked against candle.

use std::path::Path;

use midge_runtime::{
    repr::{Activation, Window},
    Shape,
};

use crate::error::Error;
use crate::graph::{FloatGraph, FloatOp, InputSpec, Node};

/// The first value outside f32's finite range the reference produced: in
/// tensor `tensor` (0 = the normalized input), written by layer `layer`.
#[derive(Clone, Debug, PartialEq)]
pub struct NonFinite {
    pub tensor: usize,
    pub layer: String,
    pub element: usize,
    pub value: f32,
}

impl NonFinite {
    /// The error for image `image`, naming the layer.
    pub fn error(&self, image: &Path) -> Error {
        Error::new(
            image.display().to_string(),
            format!(
                "float reference: layer {} produced {} (element {} of tensor t{}); the weights or the input normalization overflow f32",
                self.layer, self.value, self.element, self.tensor
            ),
        )
    }
}

/// Camera bytes (HWC) → normalized input:
/// `x = (p / 255 · pixel_range − mean[c]) / std[c]`.
pub fn normalize(input: &InputSpec, pixels: &[u8]) -> Vec<f32> {
    let c = input.c.max(1) as usize;
    pixels
        .iter()
        .enumerate()
        .map(|(i, &p)| {
            let ch = i % c;
            (p as f32 / 255.0 * input.pixel_range - input.mean[ch]) / input.std[ch]
        })
        .collect()
}

/// Every tensor of the graph for one image: index = tensor id (0 = the
/// normalized input), each HWC f32.
///
/// Panics when `pixels.len()` is not H·W·C of the graph input: the caller
/// (image loading) guarantees the size, so a mismatch is a program bug.
pub fn run(graph: &FloatGraph, pixels: &[u8]) -> Vec<Vec<f32>> {
    let expected = graph.input.shape().elems();
    assert_eq!(
        pixels.len(),
        expected,
        "float reference: {} pixel bytes given, the input needs {}",
        pixels.len(),
        expected
    );
    run_normalized(graph, normalize(&graph.input, pixels))
}

/// Like [`run`], but stops at the first tensor holding an infinity or NaN
/// (calibration and evaluation must not go on with them).
pub fn run_finite(graph: &FloatGraph, pixels: &[u8]) -> Result<Vec<Vec<f32>>, NonFinite> {
    let tensors = run(graph, pixels);
    for (t, v) in tensors.iter().enumerate() {
        if let Some(element) = v.iter().position(|x| !x.is_finite()) {
            return Err(NonFinite {
                tensor: t,
                layer: match t {
                    0 => "input (normalized)".to_string(),
                    _ => graph.nodes[t - 1].name.clone(),
                },
                element,
                value: v[element],
            });
        }
    }
    Ok(tensors)
}

/// Like [`run`], from an already normalized input (HWC f32).
pub fn run_normalized(graph: &FloatGraph, input: Vec<f32>) -> Vec<Vec<f32>> {
    assert_eq!(input.len(), graph.input.shape().elems(), "input size");
    let mut tensors: Vec<Vec<f32>> = Vec::with_capacity(graph.nodes.len() + 1);
    tensors.push(input);
    for node in &graph.nodes {
        let y = eval(graph, node, &tensors);
        tensors.push(y);
    }
    tensors
}

/// The last tensor (the logits) for one image.
pub fn logits(graph: &FloatGraph, pixels: &[u8]) -> Vec<f32> {
    run(graph, pixels).pop().unwrap_or_default()
}

/// One node on the tensors computed so far (indexed by tensor id; only its
/// inputs are read). Bias correction probes layers with it.
pub fn eval_node(graph: &FloatGraph, node: &Node, tensors: &[Vec<f32>]) -> Vec<f32> {
    eval(graph, node, tensors)
}

fn eval(graph: &FloatGraph, node: &Node, tensors: &[Vec<f32>]) -> Vec<f32> {
    let x = &tensors[node.inputs[0]];
    let xs = graph.tensor_shape(node.inputs[0]);
    let os = node.out_shape;
    let mut y = match &node.op {
        FloatOp::Conv2d {
            window,
            weight,
            bias,
        } => conv2d(x, xs, os, window, weight, bias),
        FloatOp::Depthwise {
            window,
            weight,
            bias,
        } => depthwise(x, xs, os, window, weight, bias),
        FloatOp::Dense { weight, bias } => {
            let n = x.len();
            bias.iter()
                .enumerate()
                .map(|(o, b)| {
                    let row = &weight[o * n..(o + 1) * n];
                    b + row.iter().zip(x).map(|(w, v)| w * v).sum::<f32>()
                })
                .collect()
        }
        FloatOp::BatchNorm {
            gamma,
            beta,
            mean,
            var,
            eps,
        } => {
            let c = xs.c as usize;
            x.iter()
                .enumerate()
                .map(|(i, v)| {
                    let ch = i % c;
                    (v - mean[ch]) / (var[ch] + eps).sqrt() * gamma[ch] + beta[ch]
                })
                .collect()
        }
        FloatOp::Relu => x.iter().map(|v| v.max(0.0)).collect(),
        FloatOp::Relu6 => x.iter().map(|v| v.clamp(0.0, 6.0)).collect(),
        FloatOp::MaxPool { window } => pool(x, xs, os, window, true),
        FloatOp::AvgPool { window } => pool(x, xs, os, window, false),
        FloatOp::GlobalAvgPool => {
            let c = xs.c as usize;
            let hw = (xs.h as usize * xs.w as usize).max(1);
            let mut s = vec![0.0f32; c];
            for (i, v) in x.iter().enumerate() {
                s[i % c] += v;
            }
            s.iter().map(|v| v / hw as f32).collect()
        }
        FloatOp::Add => {
            let b = &tensors[node.inputs[1]];
            x.iter().zip(b).map(|(a, b)| a + b).collect()
        }
    };
    match node.act {
        Activation::None => {}
        Activation::Relu => y.iter_mut().for_each(|v| *v = v.max(0.0)),
        Activation::Relu6 => y.iter_mut().for_each(|v| *v = v.clamp(0.0, 6.0)),
    }
    y
}

/// Input coordinate of output `o`, tap `k` along one axis, or None when it
/// falls in the padding.
fn tap(o: usize, k: usize, stride: u16, dil: u16, pad: u16, len: u16) -> Option<usize> {
    let p = (o * stride as usize + k * dil as usize).checked_sub(pad as usize)?;
    (p < len as usize).then_some(p)
}

/// The in-bounds taps of output pixel (`oy`, `ox`): (tap index ky·kw + kx,
/// input pixel index iy·W + ix). Padding taps are skipped: they read 0.
fn taps(w: &Window, xs: Shape, oy: usize, ox: usize) -> impl Iterator<Item = (usize, usize)> + '_ {
    let kw = w.kw as usize;
    (0..w.kh as usize)
        .filter_map(move |ky| Some((ky, tap(oy, ky, w.stride_h, w.dil_h, w.pad_top, xs.h)?)))
        .flat_map(move |(ky, iy)| {
            (0..kw).filter_map(move |kx| {
                let ix = tap(ox, kx, w.stride_w, w.dil_w, w.pad_left, xs.w)?;
                Some((ky * kw + kx, iy * xs.w as usize + ix))
            })
        })
}

fn conv2d(x: &[f32], xs: Shape, os: Shape, w: &Window, weight: &[f32], bias: &[f32]) -> Vec<f32> {
    let (ic, oc) = (xs.c as usize, os.c as usize);
    let window_len = w.kh as usize * w.kw as usize * ic;
    let mut y = vec![0.0f32; os.elems()];
    for oy in 0..os.h as usize {
        for ox in 0..os.w as usize {
            let out = &mut y[(oy * os.w as usize + ox) * oc..][..oc];
            out.copy_from_slice(bias);
            for (t, i) in taps(w, xs, oy, ox) {
                let px = &x[i * ic..][..ic];
                for (o, acc) in out.iter_mut().enumerate() {
                    let wr = &weight[o * window_len + t * ic..][..ic];
                    *acc += wr.iter().zip(px).map(|(a, b)| a * b).sum::<f32>();
                }
            }
        }
    }
    y
}

fn depthwise(
    x: &[f32],
    xs: Shape,
    os: Shape,
    w: &Window,
    weight: &[f32],
    bias: &[f32],
) -> Vec<f32> {
    let c = xs.c as usize;
    let mut y = vec![0.0f32; os.elems()];
    for oy in 0..os.h as usize {
        for ox in 0..os.w as usize {
            let out = &mut y[(oy * os.w as usize + ox) * c..][..c];
            out.copy_from_slice(bias);
            for (t, i) in taps(w, xs, oy, ox) {
                let px = &x[i * c..][..c];
                let wr = &weight[t * c..][..c];
                for ((acc, a), b) in out.iter_mut().zip(wr).zip(px) {
                    *acc += a * b;
                }
            }
        }
    }
    y
}

/// Max or average over the in-bounds taps of each window (padding taps are
/// skipped; the average divides by the number of in-bounds taps, as the
/// runtime does).
fn pool(x: &[f32], xs: Shape, os: Shape, w: &Window, max: bool) -> Vec<f32> {
    let c = xs.c as usize;
    let mut y = vec![0.0f32; os.elems()];
    for oy in 0..os.h as usize {
        for ox in 0..os.w as usize {
            let out = &mut y[(oy * os.w as usize + ox) * c..][..c];
            let mut acc = vec![if max { f32::NEG_INFINITY } else { 0.0 }; c];
            let mut count = 0usize;
            for (_, i) in taps(w, xs, oy, ox) {
                count += 1;
                let px = &x[i * c..][..c];
                for (a, v) in acc.iter_mut().zip(px) {
                    *a = if max { a.max(*v) } else { *a + v };
                }
            }
            for (o, a) in out.iter_mut().zip(&acc) {
                *o = match (max, count) {
                    (_, 0) => 0.0,
                    (true, _) => *a,
                    (false, n) => a / n as f32,
                };
            }
        }
    }
    y
}
