//! Cross-layer equalization of a folded float graph: for each pair of a
//! conv2d/depthwise producer and the conv2d/depthwise that reads it (through
//! ReLU and pooling, which commute with a positive per-channel scale), the
//! channels are rescaled so both layers' weight ranges match.
//!
//! Method: Nagel et al. 2019, "Data-Free Quantization Through Weight
//! Equalization and Bias Correction" (ICCV), §4.1: with `r1[i]` the range of
//! the producer's output channel `i` and `r2[i]` that of the consumer's input
//! channel `i`, `s[i] = sqrt(r1[i] / r2[i])`; the producer's channel is
//! divided by `s[i]` (weights and bias) and the consumer's input channel
//! multiplied by it. The float function is unchanged (ReLU(x/s) = ReLU(x)/s
//! for s > 0), which is the test of this module.

use serde::Serialize;

use crate::graph::{FloatGraph, FloatOp};
use midge_runtime::repr::Activation;

/// One equalized pair, for the report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct EqualizedPair {
    pub producer: String,
    pub consumer: String,
    pub channels: usize,
    /// Largest over smallest per-channel weight range of the producer
    /// (max |w| per output channel), before and after.
    pub spread_before: f64,
    pub spread_after: f64,
}

/// Rounds of equalization over all pairs (the paper iterates until the
/// scales converge; chains such as conv → depthwise → pointwise need more
/// than one round).
pub const ROUNDS: usize = 8;

/// Per-channel weight range (max |w|) of a producer's output channels.
fn out_ranges(op: &FloatOp) -> Option<Vec<f64>> {
    match op {
        FloatOp::Conv2d { weight, bias, .. } => {
            let per = weight.len() / bias.len().max(1);
            Some(
                weight
                    .chunks(per.max(1))
                    .map(|row| row.iter().fold(0.0f64, |m, w| m.max(w.abs() as f64)))
                    .collect(),
            )
        }
        FloatOp::Depthwise { weight, bias, .. } => {
            let c = bias.len().max(1);
            let mut r = vec![0.0f64; c];
            for (i, w) in weight.iter().enumerate() {
                r[i % c] = r[i % c].max(w.abs() as f64);
            }
            Some(r)
        }
        _ => None,
    }
}

/// Per-input-channel weight range of a consumer reading `c` channels.
fn in_ranges(op: &FloatOp, c: usize) -> Option<Vec<f64>> {
    match op {
        FloatOp::Conv2d { weight, .. } => {
            let mut r = vec![0.0f64; c];
            for (i, w) in weight.iter().enumerate() {
                r[i % c] = r[i % c].max(w.abs() as f64);
            }
            Some(r)
        }
        FloatOp::Depthwise { .. } => out_ranges(op),
        _ => None,
    }
}

/// Divide the producer's output channel `i` by `s[i]`.
fn scale_out(op: &mut FloatOp, s: &[f64]) {
    match op {
        FloatOp::Conv2d { weight, bias, .. } => {
            let per = weight.len() / bias.len().max(1);
            for (row, s) in weight.chunks_mut(per.max(1)).zip(s) {
                row.iter_mut().for_each(|w| *w = (*w as f64 / s) as f32);
            }
            bias.iter_mut()
                .zip(s)
                .for_each(|(b, s)| *b = (*b as f64 / s) as f32);
        }
        FloatOp::Depthwise { weight, bias, .. } => {
            let c = s.len();
            for (i, w) in weight.iter_mut().enumerate() {
                *w = (*w as f64 / s[i % c]) as f32;
            }
            bias.iter_mut()
                .zip(s)
                .for_each(|(b, s)| *b = (*b as f64 / s) as f32);
        }
        _ => {}
    }
}

/// Multiply the consumer's input channel `i` by `s[i]`.
fn scale_in(op: &mut FloatOp, s: &[f64]) {
    let c = s.len();
    if let FloatOp::Conv2d { weight, .. } | FloatOp::Depthwise { weight, .. } = op {
        for (i, w) in weight.iter_mut().enumerate() {
            *w = (*w as f64 * s[i % c]) as f32;
        }
    }
}

/// The (producer, consumer) node index pairs that can be equalized: the
/// producer's activation is none or ReLU (ReLU6 does not commute with a
/// scale), each tensor on the way is read by one node only, and between
/// them lie only max/average pools.
pub fn pairs(graph: &FloatGraph) -> Vec<(usize, usize)> {
    let readers = graph.consumers();
    let out = graph.output_id();
    let reader_of = |t: usize| graph.nodes.iter().position(|n| n.inputs.contains(&t));
    let mut v = Vec::new();
    for (k, node) in graph.nodes.iter().enumerate() {
        if out_ranges(&node.op).is_none() || node.act == Activation::Relu6 {
            continue;
        }
        let mut t = k + 1;
        loop {
            if t == out || readers[t] != 1 {
                break;
            }
            let Some(r) = reader_of(t) else { break };
            let rn = &graph.nodes[r];
            match rn.op {
                FloatOp::MaxPool { .. } | FloatOp::AvgPool { .. } => t = r + 1,
                FloatOp::Conv2d { .. } | FloatOp::Depthwise { .. } => {
                    v.push((k, r));
                    break;
                }
                _ => break,
            }
        }
    }
    v
}

fn spread(r: &[f64]) -> f64 {
    let max = r.iter().cloned().fold(0.0f64, f64::max);
    let min = r
        .iter()
        .cloned()
        .filter(|x| *x > 0.0)
        .fold(f64::INFINITY, f64::min);
    if min.is_finite() && min > 0.0 {
        max / min
    } else {
        1.0
    }
}

/// Equalize every pair of `graph` in place; one row per pair.
pub fn equalize(graph: &mut FloatGraph) -> Vec<EqualizedPair> {
    let pairs = pairs(graph);
    let before: Vec<f64> = pairs
        .iter()
        .map(|&(a, _)| out_ranges(&graph.nodes[a].op).map_or(1.0, |r| spread(&r)))
        .collect();
    for _ in 0..ROUNDS {
        for &(a, b) in &pairs {
            let (Some(r1), Some(r2)) = (
                out_ranges(&graph.nodes[a].op),
                in_ranges(&graph.nodes[b].op, graph.nodes[a].out_shape.c as usize),
            ) else {
                continue;
            };
            if r1.len() != r2.len() {
                continue;
            }
            // A channel with an all-zero side keeps scale 1.
            let s: Vec<f64> = r1
                .iter()
                .zip(&r2)
                .map(|(&x, &y)| {
                    let s = (x / y).sqrt();
                    if s.is_finite() && s > 0.0 {
                        s
                    } else {
                        1.0
                    }
                })
                .collect();
            scale_out(&mut graph.nodes[a].op, &s);
            scale_in(&mut graph.nodes[b].op, &s);
        }
    }
    pairs
        .iter()
        .zip(before)
        .map(|(&(a, b), spread_before)| EqualizedPair {
            producer: graph.nodes[a].name.clone(),
            consumer: graph.nodes[b].name.clone(),
            channels: graph.nodes[a].out_shape.c as usize,
            spread_before,
            spread_after: out_ranges(&graph.nodes[a].op).map_or(1.0, |r| spread(&r)),
        })
        .collect()
}
