//! The float graph: a description plus its weights as a list of f32 nodes
//! with channel-last weights (`build`), and the folded form the quantizer
//! consumes (`fold`: BatchNorm into the layer before it, ReLU/ReLU6 fused).

use std::path::Path;

use midge_runtime::{
    repr::{Activation, Window},
    Shape,
};

use crate::description::{Description, LayerInfo, LayerKind};
use crate::weights::TensorMap;
use crate::{Error, Result};

pub use crate::description::Precision;

/// The model input as the float model sees it: shape and the per-channel
/// normalization `x = (p / 255 · pixel_range − mean[c]) / std[c]`.
#[derive(Clone, Debug, PartialEq)]
pub struct InputSpec {
    pub h: u16,
    pub w: u16,
    pub c: u16,
    pub mean: Vec<f32>,
    pub std: Vec<f32>,
    pub pixel_range: f32,
}

impl InputSpec {
    pub fn from_description(desc: &Description) -> InputSpec {
        InputSpec {
            h: desc.input.height,
            w: desc.input.width,
            c: desc.input.channels,
            mean: desc.input.mean_values(),
            std: desc.input.std_values(),
            pixel_range: desc.input.pixel_range,
        }
    }
    pub fn shape(&self) -> Shape {
        Shape::new(self.h, self.w, self.c)
    }
}

/// The float model. Tensor ids: 0 = the normalized input (f32, HWC),
/// k ≥ 1 = output of `nodes[k-1]`. Nodes are in topological order.
#[derive(Clone, Debug, PartialEq)]
pub struct FloatGraph {
    pub name: String,
    pub labels: Vec<String>,
    pub input: InputSpec,
    pub nodes: Vec<Node>,
}

#[derive(Clone, Debug, PartialEq)]
pub struct Node {
    /// The description layer's name (for a folded node: the layer that
    /// carries the weights).
    pub name: String,
    pub op: FloatOp,
    /// Tensor ids read (two for `Add`, one otherwise).
    pub inputs: Vec<usize>,
    /// Fused activation, applied after the op.
    pub act: Activation,
    pub precision: Precision,
    pub out_shape: Shape,
}

#[derive(Clone, Debug, PartialEq)]
pub enum FloatOp {
    /// weight `[O][kh][kw][I]` (channel-last), bias `[O]`.
    Conv2d {
        window: Window,
        weight: Vec<f32>,
        bias: Vec<f32>,
    },
    /// weight `[kh][kw][C]`, bias `[C]`.
    Depthwise {
        window: Window,
        weight: Vec<f32>,
        bias: Vec<f32>,
    },
    /// weight `[O][I]`, I in HWC order of the input tensor; bias `[O]`.
    Dense {
        weight: Vec<f32>,
        bias: Vec<f32>,
    },
    /// y = (x − mean) / sqrt(var + eps) · gamma + beta, per channel.
    BatchNorm {
        gamma: Vec<f32>,
        beta: Vec<f32>,
        mean: Vec<f32>,
        var: Vec<f32>,
        eps: f32,
    },
    Relu,
    Relu6,
    MaxPool {
        window: Window,
    },
    AvgPool {
        window: Window,
    },
    GlobalAvgPool,
    Add,
}

impl FloatOp {
    /// The description-file op this float op comes from.
    pub fn kind(&self) -> LayerKind {
        match self {
            FloatOp::Conv2d { .. } => LayerKind::Conv2d,
            FloatOp::Depthwise { .. } => LayerKind::Depthwise,
            FloatOp::Dense { .. } => LayerKind::Dense,
            FloatOp::BatchNorm { .. } => LayerKind::BatchNorm,
            FloatOp::Relu => LayerKind::Relu,
            FloatOp::Relu6 => LayerKind::Relu6,
            FloatOp::MaxPool { .. } => LayerKind::MaxPool,
            FloatOp::AvgPool { .. } => LayerKind::AvgPool,
            FloatOp::GlobalAvgPool => LayerKind::GlobalAvgPool,
            FloatOp::Add => LayerKind::Add,
        }
    }

    /// The op's name as in description files (`LayerKind::name`).
    pub fn name(&self) -> &'static str {
        self.kind().name()
    }

    /// Weight and bias of conv2d, depthwise and dense.
    pub fn weight_bias(&self) -> Option<(&[f32], &[f32])> {
        match self {
            FloatOp::Conv2d { weight, bias, .. }
            | FloatOp::Depthwise { weight, bias, .. }
            | FloatOp::Dense { weight, bias } => Some((weight, bias)),
            _ => None,
        }
    }

    /// Window of conv2d, depthwise, maxpool and avgpool.
    pub fn window(&self) -> Option<Window> {
        match self {
            FloatOp::Conv2d { window, .. }
            | FloatOp::Depthwise { window, .. }
            | FloatOp::MaxPool { window }
            | FloatOp::AvgPool { window } => Some(*window),
            _ => None,
        }
    }
}

impl FloatGraph {
    /// The unfolded graph: one node per description layer except flatten
    /// (a view; the dense weights after it are permuted from PyTorch's CHW
    /// flatten order to HWC). PyTorch weight layouts become channel-last.
    pub fn build(desc: &Description, tensors: &TensorMap) -> Result<FloatGraph> {
        let layers = desc.topology()?;
        // Description tensor id → graph tensor id; flatten maps to its input.
        let mut id_map: Vec<usize> = vec![0];
        // For each description tensor id: the pre-flatten shape, if it is a
        // flatten view.
        let mut flat_src: Vec<Option<Shape>> = vec![None];
        let mut nodes: Vec<Node> = Vec::new();
        for l in &layers {
            if l.kind == LayerKind::Flatten {
                let src = l.inputs[0];
                id_map.push(id_map[src]);
                flat_src.push(Some(flat_src[src].unwrap_or(l.in_shapes[0])));
                continue;
            }
            let op = build_op(l, tensors, flat_src[l.inputs[0]])?;
            nodes.push(Node {
                name: l.name.clone(),
                op,
                inputs: l.inputs.iter().map(|&t| id_map[t]).collect(),
                act: Activation::None,
                precision: l.precision,
                out_shape: l.out_shape,
            });
            id_map.push(nodes.len());
            flat_src.push(None);
        }
        Ok(FloatGraph {
            name: desc.name.clone(),
            labels: desc.labels.clone(),
            input: InputSpec::from_description(desc),
            nodes,
        })
    }

    /// Shape of tensor `id` (0 = input).
    pub fn tensor_shape(&self, id: usize) -> Shape {
        if id == 0 {
            self.input.shape()
        } else {
            self.nodes[id - 1].out_shape
        }
    }

    /// Id of the output tensor (the last node's).
    pub fn output_id(&self) -> usize {
        self.nodes.len()
    }

    /// How many nodes read each tensor id.
    pub fn consumers(&self) -> Vec<usize> {
        let mut n = vec![0; self.nodes.len() + 1];
        for node in &self.nodes {
            for &t in &node.inputs {
                n[t] += 1;
            }
        }
        n
    }

    /// BatchNorm folded into the conv2d/depthwise/dense before it, ReLU and
    /// ReLU6 fused into the conv2d/depthwise/dense/add before it (also
    /// across a maxpool, with which they commute), each only when that
    /// layer has no other consumer. Anything left over is an error naming
    /// the layer. The result holds only conv2d, depthwise, dense, maxpool,
    /// avgpool, global_avgpool and add.
    pub fn fold(&self) -> Result<FloatGraph> {
        let consumers = self.consumers();
        let mut out: Vec<Node> = Vec::with_capacity(self.nodes.len());
        // Old tensor id → new tensor id.
        let mut map: Vec<usize> = vec![0];
        // New tensor id → the last old tensor id folded into it; its
        // consumer count is the new tensor's consumer count.
        let mut last_old: Vec<usize> = vec![0];
        for (k, node) in self.nodes.iter().enumerate() {
            let old_id = k + 1;
            let src = map[node.inputs[0]];
            let readers = |t: usize, last_old: &[usize]| consumers[last_old[t]];
            let fail = |what: &str, why: String| {
                Error::new(
                    format!("{}: layer {}", self.name, node.name),
                    format!("{} cannot be {what}: {why}", node.op.name()),
                )
            };
            match &node.op {
                FloatOp::BatchNorm {
                    gamma,
                    beta,
                    mean,
                    var,
                    eps,
                } => {
                    absorber(&out, src, false, readers(src, &last_old))
                        .map_err(|why| fail("folded", format!("{why}; only a conv2d, depthwise or dense read by nothing else can absorb it")))?;
                    // Folding arithmetic in f64, rounded once to f32.
                    let k: Vec<f64> = gamma
                        .iter()
                        .zip(var)
                        .map(|(&g, &v)| g as f64 / (v as f64 + *eps as f64).sqrt())
                        .collect();
                    let p = &mut out[src - 1];
                    match &mut p.op {
                        FloatOp::Conv2d { weight, bias, .. } | FloatOp::Dense { weight, bias } => {
                            let per = weight.len() / k.len();
                            for (row, k) in weight.chunks_mut(per).zip(&k) {
                                row.iter_mut().for_each(|w| *w = (*w as f64 * k) as f32);
                            }
                            fold_bias(bias, &k, beta, mean);
                        }
                        FloatOp::Depthwise { weight, bias, .. } => {
                            for tap in weight.chunks_mut(k.len()) {
                                tap.iter_mut()
                                    .zip(&k)
                                    .for_each(|(w, k)| *w = (*w as f64 * k) as f32);
                            }
                            fold_bias(bias, &k, beta, mean);
                        }
                        _ => unreachable!("absorber checked the op"),
                    }
                    map.push(src);
                    last_old[src] = old_id;
                }
                FloatOp::Relu | FloatOp::Relu6 => {
                    let act = if node.op == FloatOp::Relu {
                        Activation::Relu
                    } else {
                        Activation::Relu6
                    };
                    let direct = absorber(&out, src, true, readers(src, &last_old));
                    let target = match direct {
                        Ok(t) => t,
                        Err(why) => {
                            // Across a maxpool: max commutes with a
                            // non-decreasing function, so relu(maxpool(x))
                            // = maxpool(relu(x)).
                            let via = (src > 0
                                && matches!(out[src - 1].op, FloatOp::MaxPool { .. })
                                && readers(src, &last_old) == 1)
                                .then(|| out[src - 1].inputs[0]);
                            match via {
                                Some(inner) => absorber(&out, inner, true, readers(inner, &last_old))
                                    .map_err(|w| {
                                        fail(
                                            "fused",
                                            format!(
                                                "{why}, and across it: {w}; only a conv2d, depthwise, dense or add read by nothing else can absorb it"
                                            ),
                                        )
                                    })?,
                                None => return Err(fail("fused", format!("{why}; only a conv2d, depthwise, dense or add read by nothing else can absorb it"))),
                            }
                        }
                    };
                    out[target - 1].act = act;
                    map.push(src);
                    last_old[src] = old_id;
                }
                _ => {
                    let mut n = node.clone();
                    n.inputs = node.inputs.iter().map(|&t| map[t]).collect();
                    out.push(n);
                    map.push(out.len());
                    last_old.push(old_id);
                }
            }
        }
        Ok(FloatGraph {
            name: self.name.clone(),
            labels: self.labels.clone(),
            input: self.input.clone(),
            nodes: out,
        })
    }
}

/// Check that the producer of new tensor `t` (read by `readers` nodes) can
/// absorb a following batchnorm (`act` false) or activation (`act` true).
fn absorber(
    out: &[Node],
    t: usize,
    act: bool,
    readers: usize,
) -> std::result::Result<usize, String> {
    if t == 0 {
        return Err("it reads the model input".into());
    }
    let p = &out[t - 1];
    if readers != 1 {
        return Err(format!("\"{}\" has other consumers", p.name));
    }
    if p.act != Activation::None {
        return Err(format!("\"{}\" already has an activation", p.name));
    }
    match &p.op {
        FloatOp::Conv2d { .. } | FloatOp::Depthwise { .. } | FloatOp::Dense { .. } => Ok(t),
        FloatOp::Add if act => Ok(t),
        op => Err(format!("it follows \"{}\" ({})", p.name, op.name())),
    }
}

/// b' = (b − mean) · k + beta, with k = gamma / sqrt(var + eps).
fn fold_bias(bias: &mut [f32], k: &[f64], beta: &[f32], mean: &[f32]) {
    for (c, b) in bias.iter_mut().enumerate() {
        *b = ((*b as f64 - mean[c] as f64) * k[c] + beta[c] as f64) as f32;
    }
}

fn build_op(l: &LayerInfo, t: &TensorMap, flat_src: Option<Shape>) -> Result<FloatOp> {
    let expected = l.expected_tensors();
    let get = |suffix: &str| -> Result<Option<Vec<f32>>> {
        let prefix = l.tensor.as_deref().unwrap_or("");
        let name = format!("{prefix}.{suffix}");
        match expected.iter().find(|(n, _)| *n == name) {
            Some((n, shape)) => Ok(Some(t.require(n, shape)?.to_vec())),
            None => Ok(None),
        }
    };
    let out_c = l.out_shape.c as usize;
    let bias = |b: Option<Vec<f32>>| b.unwrap_or_else(|| vec![0.0; out_c]);
    Ok(match l.kind {
        LayerKind::Conv2d => {
            let w = l.window.expect("conv2d has a window");
            let (kh, kw) = (w.kh as usize, w.kw as usize);
            let in_c = l.in_shapes[0].c as usize;
            let src = get("weight")?.expect("conv2d weight expected");
            // PyTorch [O][I][kh][kw] → [O][kh][kw][I].
            let mut weight = vec![0.0; src.len()];
            for o in 0..out_c {
                for i in 0..in_c {
                    for y in 0..kh {
                        for x in 0..kw {
                            weight[((o * kh + y) * kw + x) * in_c + i] =
                                src[((o * in_c + i) * kh + y) * kw + x];
                        }
                    }
                }
            }
            FloatOp::Conv2d {
                window: w,
                weight,
                bias: bias(get("bias")?),
            }
        }
        LayerKind::Depthwise => {
            let w = l.window.expect("depthwise has a window");
            let (kh, kw) = (w.kh as usize, w.kw as usize);
            let src = get("weight")?.expect("depthwise weight expected");
            // PyTorch [C][1][kh][kw] → [kh][kw][C].
            let mut weight = vec![0.0; src.len()];
            for c in 0..out_c {
                for y in 0..kh {
                    for x in 0..kw {
                        weight[(y * kw + x) * out_c + c] = src[(c * kh + y) * kw + x];
                    }
                }
            }
            FloatOp::Depthwise {
                window: w,
                weight,
                bias: bias(get("bias")?),
            }
        }
        LayerKind::Dense => {
            let src = get("weight")?.expect("dense weight expected");
            let weight = match flat_src {
                // PyTorch flattens NCHW as index c·H·W + y·W + x; our
                // tensors are HWC: index (y·W + x)·C + c.
                Some(s) if s.h as usize * s.w as usize > 1 && s.c > 1 => {
                    let (h, wd, c) = (s.h as usize, s.w as usize, s.c as usize);
                    let n = h * wd * c;
                    let mut out = vec![0.0; src.len()];
                    for o in 0..out_c {
                        for ch in 0..c {
                            for y in 0..h {
                                for x in 0..wd {
                                    out[o * n + (y * wd + x) * c + ch] =
                                        src[o * n + (ch * h + y) * wd + x];
                                }
                            }
                        }
                    }
                    out
                }
                _ => src,
            };
            FloatOp::Dense {
                weight,
                bias: bias(get("bias")?),
            }
        }
        LayerKind::BatchNorm => {
            let var = get("running_var")?.expect("batchnorm var expected");
            if let Some((i, v)) = var.iter().enumerate().find(|(_, v)| **v < 0.0) {
                return Err(Error::new(
                    format!(
                        "{}: {}.running_var",
                        t.origin,
                        l.tensor.as_deref().unwrap_or("")
                    ),
                    format!("variance {v} at channel {i} is negative"),
                ));
            }
            FloatOp::BatchNorm {
                gamma: get("weight")?.expect("batchnorm weight expected"),
                beta: get("bias")?.expect("batchnorm bias expected"),
                mean: get("running_mean")?.expect("batchnorm mean expected"),
                var,
                eps: l.eps,
            }
        }
        LayerKind::MaxPool => FloatOp::MaxPool {
            window: l.window.expect("maxpool has a window"),
        },
        LayerKind::AvgPool => FloatOp::AvgPool {
            window: l.window.expect("avgpool has a window"),
        },
        LayerKind::GlobalAvgPool => FloatOp::GlobalAvgPool,
        LayerKind::Add => FloatOp::Add,
        LayerKind::Relu => FloatOp::Relu,
        LayerKind::Relu6 => FloatOp::Relu6,
        LayerKind::Flatten => unreachable!("flatten is removed by the caller"),
    })
}

/// Load a description, its weights (the `weights` key) and build the
/// folded float graph. Returns the names of unused tensors as warnings.
pub fn load_graph(desc_path: &Path) -> Result<(Description, FloatGraph, Vec<String>)> {
    let desc = Description::load(desc_path)?;
    if let Some(import) = &desc.onnx_import {
        let unused = import.tensors.check(&desc)?;
        let graph = FloatGraph::build(&desc, &import.tensors)?.fold()?;
        return Ok((desc, graph, unused));
    }
    let wpath = desc.weights.clone().ok_or_else(|| {
        Error::new(
            desc_path.display().to_string(),
            "no `weights` key: the description names no safetensors file",
        )
    })?;
    let tensors = TensorMap::load(&wpath)?;
    let unused = tensors.check(&desc)?;
    let graph = FloatGraph::build(&desc, &tensors)?.fold()?;
    Ok((desc, graph, unused))
}
