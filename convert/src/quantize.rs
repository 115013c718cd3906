//! Quantization: a folded float graph plus calibrated ranges becomes a
//! runtime `ModelSpec` — int8 or fp16 per layer, conversion layers at
//! precision boundaries, every multiplier, shift and folded bias decided here.
//!
//! # What the device does with a pixel byte
//!
//! Tensor 0 is the camera image as HWC bytes `p` in 0..=255 (scale
//! `pixel_range / 255`, zero point 0). The first layer (`Op::Pixels`) turns
//! each byte of channel `c` into the normalized value the float model was
//! trained on, `x = (p · pixel_range / 255 − mean[c]) / std[c]`:
//! - int8: `q = clamp(zp + rq(256·p − offset[c], m[c], rshift[c]))` with
//!   `offset[c] = round(mean[c] · 255 / pixel_range · 256)` and `(m, rshift)`
//!   the runtime's fixed-point form of `pixel_range / (255 · std[c] · s · 256)`,
//!   where `s`, `zp` are the scale and zero point of the normalized input,
//!   taken exactly from the normalization formula: its range is
//!   `[min_c (0 − mean[c]) / std[c], max_c (pixel_range − mean[c]) / std[c]]`
//!   (extended to hold 0). `rq` rounds to nearest, ties toward +∞.
//! - fp16: `x = p · a[c] + b[c]` in f32 with `a = pixel_range / 255 / std[c]`,
//!   `b = −mean[c] / std[c]`, stored as binary16.
//!
//! # int8 scheme (common practice for post-training quantization)
//! Weights: symmetric per output channel, zero point 0, values −127..=127,
//! scale `max|w| / 127`. Activations: per tensor, asymmetric, scale
//! `(max − min) / 255` over the calibrated range extended to hold 0, zero
//! point `round(−128 − min / scale)` in −128..=127. Bias: int32 at scale
//! `s_in · s_w[c]` with `−zp_in · Σ q_w` folded in. Requantization multiplier
//! per channel `s_in · s_w[c] / s_out` via `midge_runtime::requant::requant_from_real`.
//! Host-side rounding of real values to integers is to nearest, ties away
//! from zero (`f64::round`).

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use half::f16;
use midge_runtime::format::{scale_in_range, MAX_LAYERS, SCALE_MAX, SCALE_MIN};
use midge_runtime::requant::requant_from_real;
use midge_runtime::write::{BiasBuf, LayerSpec, ModelSpec, ParamsBuf, WeightsBuf};
use midge_runtime::{
    repr::{Activation, LayerHeader, Requant, Window},
    ElemType, Op, Quant, Shape, TensorRecord,
};
use serde::Serialize;

use crate::calibrate::{self, Range, RangeMethod};
use crate::description::Description;
use crate::error::{Error, Result};
use crate::float_ref;
use crate::graph::{load_graph, FloatGraph, FloatOp, Node, Precision};
use crate::images::{self, ImageSpec};
use crate::plan;

/// Largest finite binary16 value (the runtime's definition).
pub use midge_runtime::format::F16_MAX;

/// `x / scale + zp`, rounded to nearest with ties away from zero, clamped
/// to `lo..=hi`.
pub fn quantize_value(x: f32, scale: f32, zp: i32, lo: i32, hi: i32) -> i32 {
    let r = (x as f64 / scale as f64).round();
    let r = r.clamp(-1e12, 1e12) as i64 + zp as i64;
    r.clamp(lo as i64, hi as i64) as i32
}

/// `(q − zp) · scale`.
pub fn dequantize_value(q: i32, scale: f32, zp: i32) -> f32 {
    (q as i64 - zp as i64) as f32 * scale
}

/// Dequantize a whole runtime tensor (int8 or fp16 bytes) to f32.
pub fn dequantize_tensor(t: &TensorRecord, bytes: &[u8]) -> Vec<f32> {
    match t.elem {
        ElemType::I8 => bytes
            .iter()
            .map(|&b| dequantize_value(b as i8 as i32, t.quant.scale, t.quant.zero_point))
            .collect(),
        ElemType::U8 => bytes
            .iter()
            .map(|&b| dequantize_value(b as i32, t.quant.scale, t.quant.zero_point))
            .collect(),
        ElemType::F16 => bytes
            .chunks_exact(2)
            .map(|c| f16::from_le_bytes([c[0], c[1]]).to_f32())
            .collect(),
    }
}

/// Per-tensor asymmetric int8 quantization of a real range (see module docs).
/// A range of zero width (an all-zero tensor) gets scale 1.
pub fn activation_quant(r: Range) -> Quant {
    let r = r.with_zero();
    let span = r.max as f64 - r.min as f64;
    let scale = if span.is_finite() && span > 0.0 {
        span / 255.0
    } else {
        1.0
    };
    let scale = scale as f32;
    let zp = (-128.0 - r.min as f64 / scale as f64)
        .round()
        .clamp(-128.0, 127.0) as i32;
    Quant {
        scale,
        zero_point: zp,
    }
}

/// Symmetric per-channel weight scales and int8 weights. `channel_of(i)`
/// gives the output channel of weight element `i`.
pub fn quantize_weights(
    w: &[f32],
    channels: usize,
    channel_of: impl Fn(usize) -> usize,
) -> (Vec<i8>, Vec<f32>) {
    let mut max = vec![0.0f32; channels];
    for (i, &v) in w.iter().enumerate() {
        let c = channel_of(i);
        max[c] = max[c].max(v.abs());
    }
    let scales: Vec<f32> = max
        .iter()
        .map(|&m| {
            if m > 0.0 && m.is_finite() {
                m / 127.0
            } else {
                1.0
            }
        })
        .collect();
    let q = w
        .iter()
        .enumerate()
        .map(|(i, &v)| quantize_value(v, scales[channel_of(i)], 0, -127, 127) as i8)
        .collect();
    (q, scales)
}

/// int8 output bounds for a fused activation (already offset by the zero point).
pub fn clamp_i8(act: Activation, q: Quant) -> [i32; 2] {
    let zp = q.zero_point.clamp(-128, 127);
    match act {
        Activation::None => [-128, 127],
        Activation::Relu => [zp, 127],
        Activation::Relu6 => {
            let six = quantize_value(6.0, q.scale, zp, -128, 127);
            [zp, six.max(zp)]
        }
    }
}

/// fp16 output bounds for a fused activation.
pub fn clamp_f32(act: Activation) -> [f32; 2] {
    match act {
        Activation::None => [-F16_MAX, F16_MAX],
        Activation::Relu => [0.0, F16_MAX],
        Activation::Relu6 => [0.0, 6.0],
    }
}

/// One runtime tensor of the plan, for reports and `show`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PlannedTensor {
    pub id: usize,
    pub bytes: usize,
    /// Workspace offset; `None` for the model input.
    pub offset: Option<usize>,
    /// First and last layer during which its bytes are live.
    pub live: Option<(usize, usize)>,
}

/// The memory plan in numbers.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PlanSummary {
    pub workspace_len: usize,
    pub lower_bound: usize,
    pub tensors: Vec<PlannedTensor>,
}

/// A quantized model and how it relates to the float graph.
#[derive(Clone, Debug)]
pub struct Quantized {
    pub spec: ModelSpec,
    /// The canonical model bytes (`spec.emit()`).
    pub bytes: Vec<u8>,
    /// Float tensor id → runtime tensor id holding that value in the
    /// precision of the layer that produced it.
    pub map: Vec<u16>,
    /// Name of each runtime layer (description layer names; `pixels`,
    /// `<name>.to_int8` and `<name>.to_fp16` for added layers).
    pub layer_names: Vec<String>,
    /// Runtime tensor id → the float tensor id whose value it holds.
    pub source: Vec<Option<usize>>,
    pub plan: PlanSummary,
}

struct Builder<'g> {
    graph: &'g FloatGraph,
    ranges: &'g [Range],
    tensors: Vec<TensorRecord>,
    layers: Vec<LayerSpec>,
    names: Vec<String>,
    /// (float tensor id, element type) → runtime tensor id.
    have: HashMap<(usize, u8), u16>,
    /// Float tensor id → the runtime tensor it was first produced as.
    primary: Vec<u16>,
}

fn elem_of(p: Precision) -> ElemType {
    match p {
        Precision::Int8 => ElemType::I8,
        Precision::Fp16 => ElemType::F16,
    }
}

fn header(op: Op, act: Activation, inputs: [u16; 2], output: u16) -> LayerHeader {
    LayerHeader {
        op,
        act,
        inputs,
        output,
        window: Window::default(),
        clamp_i8: [-128, 127],
        clamp_f32: [-F16_MAX, F16_MAX],
    }
}

impl<'g> Builder<'g> {
    fn place(&self, node: Option<&Node>) -> String {
        match node {
            Some(n) => format!("{}: layer {}", self.graph.name, n.name),
            None => format!("{}: input", self.graph.name),
        }
    }

    fn tensor_name(&self, t: usize) -> String {
        if t == 0 {
            "input".into()
        } else {
            self.graph.nodes[t - 1].name.clone()
        }
    }

    fn range(&self, t: usize) -> Result<Range> {
        self.ranges.get(t).copied().ok_or_else(|| {
            Error::new(
                self.graph.name.clone(),
                format!(
                    "no calibrated range for tensor {t} (have {})",
                    self.ranges.len()
                ),
            )
        })
    }

    /// `quant` of an int8 or u8 tensor, refused (naming `place`) when its
    /// scale is outside what a model file allows.
    fn checked_quant(place: &str, what: &str, quant: Quant) -> Result<Quant> {
        if scale_in_range(quant.scale) {
            return Ok(quant);
        }
        Err(Error::new(
            place,
            format!(
                "{what} scale {:e} is outside {:e}..={:e}, the range a model file allows (runtime/FORMAT.md, Limits)",
                quant.scale, SCALE_MIN, SCALE_MAX
            ),
        ))
    }

    fn new_tensor(&mut self, shape: Shape, elem: ElemType, quant: Quant) -> Result<u16> {
        let id = u16::try_from(self.tensors.len())
            .map_err(|_| Error::new(self.graph.name.clone(), "more than 65535 tensors"))?;
        self.tensors.push(TensorRecord {
            shape,
            elem,
            quant,
            offset: 0,
        });
        Ok(id)
    }

    fn push(&mut self, name: String, layer: LayerSpec) {
        self.names.push(name);
        self.layers.push(layer);
    }

    /// The runtime tensor holding float tensor `t` as `elem`, adding a
    /// quantize/dequantize layer the first time another precision is needed.
    fn get(&mut self, t: usize, elem: ElemType) -> Result<u16> {
        if let Some(&id) = self.have.get(&(t, elem as u8)) {
            return Ok(id);
        }
        let src = self.primary[t];
        let rec = self.tensors[src as usize];
        let (op, quant, suffix) = match elem {
            ElemType::I8 => (Op::Quantize, activation_quant(self.range(t)?), "to_int8"),
            _ => (Op::Dequantize, Quant::IDENTITY, "to_fp16"),
        };
        let name = format!("{}.{suffix}", self.tensor_name(t));
        if elem == ElemType::I8 {
            let place = format!("{}: layer {name}", self.graph.name);
            Self::checked_quant(&place, "int8 activation", quant)?;
        }
        let id = self.new_tensor(rec.shape, elem, quant)?;
        self.push(
            name,
            LayerSpec {
                header: header(op, Activation::None, [src, 0], id),
                weights: WeightsBuf::None,
                bias: BiasBuf::None,
                params: ParamsBuf::None,
            },
        );
        self.have.insert((t, elem as u8), id);
        Ok(id)
    }

    fn produced(&mut self, t: usize, id: u16) {
        let elem = self.tensors[id as usize].elem;
        self.have.insert((t, elem as u8), id);
        self.primary.push(id);
    }

    /// Layer 0: camera bytes → the normalized input in `elem`.
    fn pixels(&mut self, elem: ElemType) -> Result<()> {
        let inp = &self.graph.input;
        let c = inp.c as usize;
        let place = self.place(None);
        if inp.mean.len() != c || inp.std.len() != c {
            return Err(Error::new(
                place,
                format!(
                    "mean and std need {c} values each, found {} and {}",
                    inp.mean.len(),
                    inp.std.len()
                ),
            ));
        }
        let range = inp.pixel_range as f64;
        if !(range.is_finite() && range > 0.0) {
            return Err(Error::new(
                place,
                format!("pixel_range must be positive, found {range}"),
            ));
        }
        for (k, &s) in inp.std.iter().enumerate() {
            if !(s.is_finite() && s != 0.0) {
                return Err(Error::new(
                    place,
                    format!("std of channel {k} must be finite and non-zero, found {s}"),
                ));
            }
        }
        let shape = inp.shape();
        let camera = Self::checked_quant(
            &place,
            "camera byte (pixel_range / 255)",
            Quant {
                scale: (range / 255.0) as f32,
                zero_point: 0,
            },
        )?;
        let input = self.new_tensor(shape, ElemType::U8, camera)?;
        debug_assert_eq!(input, 0);
        // Exact range of the normalized input.
        let mut lo = f64::INFINITY;
        let mut hi = f64::NEG_INFINITY;
        for k in 0..c {
            let (m, s) = (inp.mean[k] as f64, inp.std[k] as f64);
            for p in [0.0, range] {
                let x = (p - m) / s;
                lo = lo.min(x);
                hi = hi.max(x);
            }
        }
        let (quant, params) = match elem {
            ElemType::I8 => {
                let q = Self::checked_quant(
                    &place,
                    "normalized input",
                    activation_quant(Range {
                        min: lo as f32,
                        max: hi as f32,
                    }),
                )?;
                let mut p = Vec::with_capacity(3 * c);
                for k in 0..c {
                    let (m, s) = (inp.mean[k] as f64, inp.std[k] as f64);
                    let offset = (m * 255.0 / range * 256.0).round();
                    if offset.abs() >= i32::MAX as f64 / 2.0 {
                        return Err(Error::new(
                            place,
                            format!("mean of channel {k} ({m}) is too large for the pixel offset"),
                        ));
                    }
                    let real = range / (255.0 * s * q.scale as f64 * 256.0);
                    // A negative std flips the sign, which the non-negative
                    // multiplier cannot express.
                    let rq = requant_from_real(real).ok_or_else(|| {
                        Error::new(
                            place.clone(),
                            format!("pixel multiplier {real:e} of channel {k} cannot be expressed (std must be positive)"),
                        )
                    })?;
                    p.extend([offset as i32, rq.multiplier, rq.rshift]);
                }
                (q, ParamsBuf::I32(p))
            }
            _ => {
                let mut p = Vec::with_capacity(2 * c);
                for k in 0..c {
                    let (m, s) = (inp.mean[k] as f64, inp.std[k] as f64);
                    p.extend([(range / 255.0 / s) as f32, (-m / s) as f32]);
                }
                (Quant::IDENTITY, ParamsBuf::F32(p))
            }
        };
        let out = self.new_tensor(shape, elem, quant)?;
        self.push(
            "pixels".into(),
            LayerSpec {
                header: header(Op::Pixels, Activation::None, [input, 0], out),
                weights: WeightsBuf::None,
                bias: BiasBuf::None,
                params,
            },
        );
        self.produced(0, out);
        Ok(())
    }

    fn node(&mut self, k: usize) -> Result<()> {
        let node = &self.graph.nodes[k];
        let t_out = k + 1;
        let elem = elem_of(node.precision);
        let place = self.place(Some(node));
        let arity = if node.op == FloatOp::Add { 2 } else { 1 };
        if node.inputs.len() != arity {
            return Err(Error::new(
                place,
                format!("expected {arity} inputs, found {}", node.inputs.len()),
            ));
        }
        let mut ins = [0u16; 2];
        for (slot, &t) in ins.iter_mut().zip(&node.inputs) {
            *slot = self.get(t, elem)?;
        }
        let a = self.tensors[ins[0] as usize];
        let (op, window) = match &node.op {
            FloatOp::Conv2d { window, .. } => (Op::Conv2d, *window),
            FloatOp::Depthwise { window, .. } => (Op::Depthwise, *window),
            FloatOp::Dense { .. } => (Op::Dense, Window::default()),
            FloatOp::MaxPool { window } => (Op::MaxPool, *window),
            FloatOp::AvgPool { window } => (Op::AvgPool, *window),
            FloatOp::GlobalAvgPool => (Op::GlobalAvgPool, Window::default()),
            FloatOp::Add => (Op::Add, Window::default()),
            other => {
                return Err(Error::new(
                    place,
                    format!(
                        "{} is left after folding; the quantizer takes folded graphs only",
                        other.name()
                    ),
                ))
            }
        };
        let pool = matches!(op, Op::MaxPool | Op::AvgPool | Op::GlobalAvgPool);
        let quant = match elem {
            ElemType::I8 if pool => a.quant,
            ElemType::I8 => Self::checked_quant(
                &place,
                "int8 activation",
                activation_quant(self.range(t_out)?),
            )?,
            _ => Quant::IDENTITY,
        };
        let out = self.new_tensor(node.out_shape, elem, quant)?;
        let mut h = header(op, node.act, ins, out);
        h.window = window;
        h.clamp_i8 = clamp_i8(node.act, quant);
        h.clamp_f32 = clamp_f32(node.act);
        let (weights, bias, params) = match (&node.op, elem) {
            (
                FloatOp::Conv2d { .. } | FloatOp::Depthwise { .. } | FloatOp::Dense { .. },
                ElemType::I8,
            ) => {
                let (w, b) = node.op.weight_bias().unwrap_or((&[], &[]));
                let oc = node.out_shape.c as usize;
                let depthwise = op == Op::Depthwise;
                int8_weighted(&place, w, b, oc, depthwise, a.quant, quant)?
            }
            (FloatOp::Conv2d { .. } | FloatOp::Depthwise { .. } | FloatOp::Dense { .. }, _) => {
                let (w, b) = node.op.weight_bias().unwrap_or((&[], &[]));
                fp16_range(&place, w)?;
                (
                    WeightsBuf::F16(w.iter().map(|&v| f16::from_f32(v)).collect()),
                    BiasBuf::F32(b.to_vec()),
                    ParamsBuf::None,
                )
            }
            (FloatOp::Add, ElemType::I8) => {
                let b = self.tensors[ins[1] as usize];
                let p = add_params(&place, a.quant.scale, b.quant.scale, quant.scale)?;
                (WeightsBuf::None, BiasBuf::None, ParamsBuf::I32(p))
            }
            _ => (WeightsBuf::None, BiasBuf::None, ParamsBuf::None),
        };
        self.push(
            node.name.clone(),
            LayerSpec {
                header: h,
                weights,
                bias,
                params,
            },
        );
        self.produced(t_out, out);
        Ok(())
    }
}

/// Refuses (naming the layer, the element and its value) a weight outside
/// the finite binary16 range, which fp16 would turn into ±inf.
fn fp16_range(place: &str, w: &[f32]) -> Result<()> {
    match w.iter().position(|v| v.abs() > F16_MAX) {
        None => Ok(()),
        Some(i) => Err(Error::new(
            place,
            format!(
                "weight {i} of the layer's weight tensor (after any BatchNorm folding) is {:e}, outside the fp16 range -{F16_MAX}..={F16_MAX}; keep this layer int8 or rescale its weights",
                w[i]
            ),
        )),
    }
}

/// int8 weights, folded int32 bias and per-channel requantization of a
/// conv2d (`[O][..]` rows), dense (`[O][I]`) or depthwise (`[kh][kw][C]`).
fn int8_weighted(
    place: &str,
    w: &[f32],
    b: &[f32],
    oc: usize,
    depthwise: bool,
    qin: Quant,
    qout: Quant,
) -> Result<(WeightsBuf, BiasBuf, ParamsBuf)> {
    if oc == 0 || !w.len().is_multiple_of(oc) || b.len() != oc {
        return Err(Error::new(
            place,
            format!(
                "weights ({}) and bias ({}) do not match {oc} output channels",
                w.len(),
                b.len()
            ),
        ));
    }
    let per = w.len() / oc;
    let channel_of = |i: usize| if depthwise { i % oc } else { i / per };
    let (q, sw) = quantize_weights(w, oc, channel_of);
    let mut sum = vec![0i64; oc];
    let mut abs = vec![0i64; oc];
    for (i, &v) in q.iter().enumerate() {
        sum[channel_of(i)] += v as i64;
        abs[channel_of(i)] += (v as i64).abs();
    }
    let s_in = qin.scale as f64;
    let mut bias = Vec::with_capacity(oc);
    let mut params = Vec::with_capacity(2 * oc);
    for c in 0..oc {
        let s_acc = s_in * sw[c] as f64;
        let bq = (b[c] as f64 / s_acc).round();
        let folded = bq - qin.zero_point as f64 * sum[c] as f64;
        let worst = folded.abs() + 255.0 * abs[c] as f64;
        if !folded.is_finite() || worst > i32::MAX as f64 {
            return Err(Error::new(
                place,
                format!(
                    "worst-case int32 accumulator of output channel {c} could overflow: |bias| + 255·Σ|w| = {worst:.0} > {} (bias {} at scale {s_acc:e}); use fp16 for this layer",
                    i32::MAX,
                    b[c]
                ),
            ));
        }
        bias.push(folded as i32);
        let real = s_acc / qout.scale as f64;
        let Requant { multiplier, rshift } = requant_from_real(real).ok_or_else(|| {
            Error::new(
                place,
                format!("requantization multiplier {real:e} of output channel {c} is outside the range a (multiplier, shift) pair can express"),
            )
        })?;
        params.extend([multiplier, rshift]);
    }
    Ok((
        WeightsBuf::I8(q),
        BiasBuf::I32(bias),
        ParamsBuf::I32(params),
    ))
}

/// `[ma, mb, rshift]` with `ma·2^−rshift ≈ s_a/s_out`, `mb·2^−rshift ≈ s_b/s_out`:
/// the larger ratio picks the shift, the other multiplier shares it.
fn add_params(place: &str, sa: f32, sb: f32, so: f32) -> Result<Vec<i32>> {
    let (ra, rb) = (sa as f64 / so as f64, sb as f64 / so as f64);
    let big = ra.max(rb);
    let rq = requant_from_real(big).ok_or_else(|| {
        Error::new(
            place,
            format!(
                "add rescale {big:e} is outside the range a (multiplier, shift) pair can express"
            ),
        )
    })?;
    let scale = (rq.rshift as f64).exp2();
    let m = |r: f64| {
        if r == big {
            rq.multiplier
        } else {
            ((r * scale).round() as i64).clamp(0, i32::MAX as i64) as i32
        }
    };
    Ok(vec![m(ra), m(rb), rq.rshift])
}

/// Quantize a folded graph with per-tensor ranges (indexed by float tensor
/// id; `ranges[0]` is unused: the input's range follows from normalization),
/// plan its workspace and emit it.
pub fn quantize_graph(graph: &FloatGraph, ranges: &[Range]) -> Result<Quantized> {
    if graph.nodes.is_empty() {
        return Err(Error::new(graph.name.clone(), "the model has no layers"));
    }
    check_layer_count(&graph.name, graph.nodes.len() + 1)?;
    let first_reader = graph
        .nodes
        .iter()
        .find(|n| n.inputs.contains(&0))
        .unwrap_or(&graph.nodes[0]);
    let mut b = Builder {
        graph,
        ranges,
        tensors: Vec::new(),
        layers: Vec::new(),
        names: Vec::new(),
        have: HashMap::new(),
        primary: Vec::new(),
    };
    b.pixels(elem_of(first_reader.precision))?;
    for k in 0..graph.nodes.len() {
        b.node(k)?;
    }
    let output = b.primary[graph.output_id()];
    check_layer_count(&graph.name, b.layers.len())?;

    let sizes: Vec<usize> = b.tensors.iter().map(|t| t.byte_len()).collect();
    let steps = plan::steps(b.layers.iter().map(|l| &l.header));
    let p = plan::plan_layers(&sizes, &steps, output as usize, &[0]);
    debug_assert!(plan::conflicts(&p).is_empty());
    for (t, off) in b.tensors.iter_mut().zip(&p.offsets) {
        t.offset = off.unwrap_or(0) as u32;
    }
    let workspace_len = u32::try_from(p.workspace_len)
        .map_err(|_| Error::new(graph.name.clone(), "workspace larger than 4 GiB"))?;
    let summary = PlanSummary {
        workspace_len: p.workspace_len,
        lower_bound: p.lower_bound,
        tensors: (0..sizes.len())
            .map(|id| PlannedTensor {
                id,
                bytes: sizes[id],
                offset: p.offsets[id],
                live: p.lifetimes[id].map(|l| (l.first, l.last)),
            })
            .collect(),
    };
    let spec = ModelSpec {
        name: graph.name.clone(),
        labels: graph.labels.clone(),
        tensors: b.tensors,
        layers: b.layers,
        output,
        workspace_len,
    };
    let bytes = spec.emit().map_err(|e| {
        let place = match e {
            midge_runtime::Error::Layer { index, .. }
            | midge_runtime::Error::LayerField { index, .. } => format!(
                "{}: layer {}",
                graph.name,
                b.names.get(index).map(String::as_str).unwrap_or("?")
            ),
            _ => graph.name.clone(),
        };
        Error::new(
            place,
            format!("the runtime rejects the quantized model: {e}"),
        )
    })?;
    let mut source = vec![None; spec.tensors.len()];
    for (&(t, _), &id) in &b.have {
        source[id as usize] = Some(t);
    }
    Ok(Quantized {
        spec,
        bytes,
        map: b.primary,
        layer_names: b.names,
        source,
        plan: summary,
    })
}

/// Refuses a model of more runtime layers (`layers`: the folded layers, the
/// pixels layer and any precision conversions) than a model file holds.
pub fn check_layer_count(place: &str, layers: usize) -> Result<()> {
    if layers <= MAX_LAYERS {
        return Ok(());
    }
    Err(Error::new(
        place,
        format!(
            "{layers} runtime layers (folded layers, the pixels layer and precision conversions); a model file holds at most {MAX_LAYERS} (runtime/FORMAT.md, Limits)"
        ),
    ))
}

/// Options of one conversion (the CLI's flags).
#[derive(Clone, Debug, PartialEq)]
pub struct QuantizeOptions {
    /// Run-wide default precision; layers with their own `precision` key in
    /// the description keep it. `None`: the description's default.
    pub precision: Option<Precision>,
    pub method: RangeMethod,
    /// Calibration folder instead of the description's `calibration`.
    pub calibration: Option<PathBuf>,
    /// Draw progress bars (only when stderr is a terminal).
    pub progress: bool,
    /// Cross-layer equalization before calibration (`crate::equalize`).
    pub equalize: bool,
    /// Empirical bias correction of int8 layers (`crate::bias_correct`).
    pub bias_correct: bool,
    /// Choose the range method by measurement (`crate::calibrate_choice`)
    /// instead of `method`.
    pub choose_calibration: bool,
}

impl Default for QuantizeOptions {
    fn default() -> Self {
        QuantizeOptions {
            precision: None,
            method: RangeMethod::Percentile(99.99),
            calibration: None,
            progress: false,
            equalize: false,
            bias_correct: false,
            choose_calibration: false,
        }
    }
}

/// Everything one conversion produced.
#[derive(Clone, Debug)]
pub struct Conversion {
    pub desc: Description,
    /// The folded float graph with the precision policy applied.
    pub graph: FloatGraph,
    /// Calibrated range per float tensor id.
    pub ranges: Vec<Range>,
    pub quantized: Quantized,
    /// Non-fatal findings (unused weight tensors, ...).
    pub warnings: Vec<String>,
    pub calibration_images: usize,
    /// Pairs equalized (`--equalize`), in graph order.
    pub equalized: Vec<crate::equalize::EqualizedPair>,
    /// Bias shifts of int8 layers' lowering per node (`--bias-correct`;
    /// all `None` without it).
    pub bias_shifts: crate::bias_correct::Shifts,
    /// What calibration by measurement chose (when asked for).
    pub calibration_choice: Option<crate::calibrate_choice::CalibrationChoice>,
}

impl Conversion {
    /// The same conversion with new per-node precisions (same ranges, same
    /// bias shifts on the layers that stay int8), quantized again.
    pub fn with_precisions(&self, precisions: &[Precision]) -> Result<Conversion> {
        let mut c = self.clone();
        for (n, p) in c.graph.nodes.iter_mut().zip(precisions) {
            n.precision = *p;
        }
        c.quantized = quantize_graph(
            &crate::bias_correct::corrected(&c.graph, &c.bias_shifts),
            &c.ranges,
        )?;
        Ok(c)
    }
}

impl Conversion {
    /// The files this conversion read (description, weights, target
    /// profile): outputs may not replace them.
    pub fn inputs<'a>(&'a self, description: &'a Path) -> Vec<&'a Path> {
        let mut v = vec![description];
        v.extend(self.desc.weights.as_deref());
        v.extend(self.desc.onnx.as_deref());
        v.extend(self.desc.target.as_deref());
        v
    }
}

/// The input image requirements of a description.
pub fn image_spec(desc: &Description) -> ImageSpec {
    ImageSpec {
        h: desc.input.height as u32,
        w: desc.input.width as u32,
        c: desc.input.channels as u32,
        resize: desc.input.resize,
    }
}

/// Load a description and its weights into the folded float graph, with
/// `precision` as the default for layers that set none themselves.
pub fn load_with_precision(
    path: &Path,
    precision: Option<Precision>,
) -> Result<(Description, FloatGraph, Vec<String>)> {
    let (desc, mut graph, warnings) = load_graph(path)?;
    if let Some(p) = precision {
        let infos = desc.topology()?;
        let by_name: HashMap<&str, usize> = infos
            .iter()
            .rev()
            .map(|l| (l.name.as_str(), l.index))
            .collect();
        for node in graph.nodes.iter_mut() {
            let explicit = by_name
                .get(node.name.as_str())
                .and_then(|&i| desc.layers.get(i))
                .and_then(|l| l.precision);
            node.precision = explicit.unwrap_or(p);
        }
    }
    Ok((desc, graph, warnings))
}

/// Calibrate `graph` on the images of `dir` (flat or labelled folder).
pub fn calibrate_graph(
    graph: &FloatGraph,
    desc: &Description,
    dir: &Path,
    method: RangeMethod,
    progress: bool,
) -> Result<(Vec<Range>, usize)> {
    calibrate_pixels(graph, &calibration_pixels(desc, dir)?, method, progress)
}

/// The images of calibration folder `dir` (flat or labelled), each with its
/// file, held at once (checked against `limits::MAX_CALIBRATION_BYTES`).
pub fn calibration_pixels(desc: &Description, dir: &Path) -> Result<Vec<(PathBuf, Vec<u8>)>> {
    let spec = image_spec(desc);
    let files = images::all_images(dir)?;
    let held = (files.len() as u64)
        .saturating_mul(u64::from(spec.h) * u64::from(spec.w) * u64::from(spec.c));
    crate::limits::check(
        &dir.display().to_string(),
        "input bytes of all calibration images",
        held,
        crate::limits::MAX_CALIBRATION_BYTES,
    )?;
    files
        .into_iter()
        .map(|f| images::load_image(&f, &spec).map(|p| (f, p)))
        .collect()
}

/// Calibrate `graph` on images already loaded (see [`calibration_pixels`]).
pub fn calibrate_pixels(
    graph: &FloatGraph,
    pixels: &[(PathBuf, Vec<u8>)],
    method: RangeMethod,
    progress: bool,
) -> Result<(Vec<Range>, usize)> {
    let stats = calibrate::collect(pixels.len(), method, progress, |i| {
        float_ref::run_finite(graph, &pixels[i].1).map_err(|e| e.error(&pixels[i].0))
    })?;
    Ok((
        stats.iter().map(|s| s.range(method)).collect(),
        pixels.len(),
    ))
}

/// The whole conversion the CLI's `quantize` runs: load, calibrate,
/// quantize, plan, emit (nothing is written to disk).
pub fn quantize_description(path: &Path, opts: &QuantizeOptions) -> Result<Conversion> {
    let (mut desc, mut graph, warnings) = load_with_precision(path, opts.precision)?;
    // Before calibration, which costs time and memory per layer.
    check_layer_count(&path.display().to_string(), graph.nodes.len() + 1)?;
    let dir = opts
        .calibration
        .clone()
        .or_else(|| desc.calibration.clone())
        .ok_or_else(|| {
            Error::new(
                path.display().to_string(),
                "no calibration images: set `calibration` in the description or pass a folder",
            )
        })?;
    let equalized = if opts.equalize {
        crate::equalize::equalize(&mut graph)
    } else {
        Vec::new()
    };
    let pixels = calibration_pixels(&desc, &dir)?;
    let (mut ranges, n, calibration_choice) = if opts.choose_calibration {
        let (r, c) = crate::calibrate_choice::choose(&graph, &pixels, opts.progress)?;
        (r, pixels.len(), Some(c))
    } else {
        let (r, n) = calibrate_pixels(&graph, &pixels, opts.method, opts.progress)?;
        (r, n, None)
    };
    // Ranges an ONNX model's QuantizeLinear/DequantizeLinear pairs give.
    crate::onnx::qdq::apply(&mut desc, &graph, &mut ranges)?;
    let bias_shifts = if opts.bias_correct {
        let means = crate::bias_correct::tensor_means(pixels.len(), |i| {
            float_ref::run_finite(&graph, &pixels[i].1).map_err(|e| e.error(&pixels[i].0))
        })?;
        crate::bias_correct::shifts(&graph, &means)
    } else {
        vec![None; graph.nodes.len()]
    };
    let quantized = quantize_graph(
        &crate::bias_correct::corrected(&graph, &bias_shifts),
        &ranges,
    )?;
    Ok(Conversion {
        desc,
        graph,
        ranges,
        quantized,
        warnings,
        calibration_images: n,
        equalized,
        bias_shifts,
        calibration_choice,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    // ONNX operator specification, QuantizeLinear, example (uint8 output):
    // x = [0, 2, 3, 1000, -254, -1000], y_scale = 2, y_zero_point = 128 →
    // y = [128, 129, 130, 255, 1, 0] (onnx/docs/Operators.md; from memory).
    // No element is an exact tie except 3/2 = 1.5, where ONNX's
    // half-to-even and our half-away-from-zero both give 2.
    #[test]
    fn onnx_quantize_linear_example() {
        let x = [0.0f32, 2.0, 3.0, 1000.0, -254.0, -1000.0];
        let y: Vec<i32> = x
            .iter()
            .map(|&v| quantize_value(v, 2.0, 128, 0, 255))
            .collect();
        assert_eq!(y, [128, 129, 130, 255, 1, 0]);
    }

    // ONNX operator specification, DequantizeLinear, example:
    // x = [0, 3, 128, 255] (uint8), x_scale = 2, x_zero_point = 128 →
    // y = [-256, -250, 0, 254] (onnx/docs/Operators.md; from memory).
    #[test]
    fn onnx_dequantize_linear_example() {
        let y: Vec<f32> = [0, 3, 128, 255]
            .iter()
            .map(|&q| dequantize_value(q, 2.0, 128))
            .collect();
        assert_eq!(y, [-256.0, -250.0, 0.0, 254.0]);
    }

    // Our documented rounding on exact ties: half away from zero (ONNX
    // would give 2 and −2 here, half to even).
    #[test]
    fn ties_round_away_from_zero() {
        assert_eq!(quantize_value(5.0, 2.0, 0, -128, 127), 3);
        assert_eq!(quantize_value(-5.0, 2.0, 0, -128, 127), -3);
        assert_eq!(quantize_value(1.0, 2.0, 0, -128, 127), 1);
    }

    #[test]
    fn activation_quant_holds_zero_and_ends() {
        // [0, 2.55]: scale 0.01, zero point −128 (ReLU output).
        let q = activation_quant(Range {
            min: 0.0,
            max: 2.55,
        });
        assert!((q.scale - 0.01).abs() < 1e-7);
        assert_eq!(q.zero_point, -128);
        // [−1, 3]: scale 4/255, zero point round(−128 + 63.75) = −64; the
        // ends map to −128 and 127, 0 to the zero point exactly.
        let q = activation_quant(Range {
            min: -1.0,
            max: 3.0,
        });
        assert_eq!(q.zero_point, -64);
        assert_eq!(quantize_value(-1.0, q.scale, q.zero_point, -128, 127), -128);
        assert_eq!(quantize_value(3.0, q.scale, q.zero_point, -128, 127), 127);
        assert_eq!(dequantize_value(q.zero_point, q.scale, q.zero_point), 0.0);
        // Range not holding 0 is extended: [2, 3] → [0, 3].
        let q = activation_quant(Range { min: 2.0, max: 3.0 });
        assert_eq!(q.zero_point, -128);
        assert!((q.scale - 3.0 / 255.0).abs() < 1e-7);
    }

    #[test]
    fn weights_symmetric_per_channel() {
        // Two channels interleaved (depthwise layout): channel 0 max 0.5,
        // channel 1 max 2.
        let w = [0.5f32, -2.0, -0.25, 1.0];
        let (q, s) = quantize_weights(&w, 2, |i| i % 2);
        assert_eq!(s, [0.5 / 127.0, 2.0 / 127.0]);
        assert_eq!(q, [127, -127, -64, 64]); // −63.5 → −64 (away from zero)
    }

    #[test]
    fn relu6_clamp() {
        let q = Quant {
            scale: 6.0 / 255.0,
            zero_point: -128,
        };
        assert_eq!(clamp_i8(Activation::Relu6, q), [-128, 127]);
        let q = Quant {
            scale: 0.1,
            zero_point: -28,
        };
        assert_eq!(clamp_i8(Activation::Relu, q), [-28, 127]);
        assert_eq!(clamp_i8(Activation::Relu6, q), [-28, 32]);
    }

    #[test]
    fn add_shares_one_shift() {
        let p = add_params("t", 0.02, 0.01, 0.04).unwrap();
        let s = (p[2] as f64).exp2();
        assert!((p[0] as f64 / s - 0.5).abs() < 1e-9);
        assert!((p[1] as f64 / s - 0.25).abs() < 1e-9);
    }

    #[test]
    fn layer_count_beyond_the_format_limit_is_refused() {
        assert!(check_layer_count("m", MAX_LAYERS).is_ok());
        let e = check_layer_count("m", MAX_LAYERS + 1)
            .unwrap_err()
            .to_string();
        assert!(e.contains("32769 runtime layers"), "{e}");
        assert!(e.contains("at most 32768"), "{e}");
    }
}
