//! Lowering an ONNX graph to what a TOML description and its safetensors
//! file give: a `[[layer]]` list and a `TensorMap` in PyTorch layouts (NCHW
//! weights), so `graph::FloatGraph::build` does the channel-last change once.
//! Shape arithmetic is folded to constants; input normalisation becomes an
//! affine map per channel; every refusal names the node, its op and opset.

use std::collections::{HashMap, HashSet};

use midge_runtime::repr::Padding;

use super::proto::{self, NodeProto};
use super::{tensor_values, Const, OnnxModel, Values};
use crate::description::{LayerDesc, LayerKind, PaddingDesc, Pair, Refs};
use crate::weights::TensorMap;
use crate::{limits, Error, Result};

/// Operators midge lowers (listed in refusals of anything else).
pub const SUPPORTED: &[&str] = &[
    "Conv",
    "BatchNormalization",
    "Relu",
    "Clip",
    "MaxPool",
    "AveragePool",
    "GlobalAveragePool",
    "Flatten",
    "Reshape",
    "Squeeze",
    "Gemm",
    "MatMul",
    "Add",
    "Sub",
    "Mul",
    "Div",
    "Identity",
    "Dropout",
    "Softmax",
    "Constant",
    "Shape",
    "Gather",
    "Unsqueeze",
    "Concat",
    "ConstantOfShape",
    "Cast",
    "QuantizeLinear",
    "DequantizeLinear",
];

/// An activation's int8 quantization given by a QuantizeLinear →
/// DequantizeLinear pair on a layer's output (uint8 pairs shifted to int8:
/// same scale, zero point − 128).
#[derive(Clone, Debug, PartialEq)]
pub struct GivenQuant {
    /// The layer whose output the pair quantizes.
    pub layer: String,
    /// The QuantizeLinear node's name.
    pub node: String,
    pub scale: f32,
    pub zero_point: i32,
}

/// An ONNX model as a description's pieces.
#[derive(Clone, Debug, PartialEq)]
pub struct Lowered {
    /// The graph's name (may be empty).
    pub graph_name: String,
    /// Layers as a description would list them; each names its tensor
    /// prefix (the layer name) and its `from` explicitly.
    pub layers: Vec<LayerDesc>,
    /// Weights in PyTorch layouts under `<layer>.weight`, `<layer>.bias`,
    /// `<layer>.running_mean`, `<layer>.running_var`.
    pub tensors: TensorMap,
    /// Model input height, width, channels.
    pub input_hwc: (u16, u16, u16),
    /// Per channel `(a, b)`: the graph computes on `a·x + b` of its input
    /// `x` (normalisation folded from Sub/Div/Mul/Add by constants).
    pub affine: Vec<(f64, f64)>,
    /// Things done that the user should know (a trailing Softmax left to the host).
    pub notes: Vec<String>,
    /// Activation quantization from QDQ pairs, in graph order.
    pub qdq: Vec<GivenQuant>,
    /// Values of the graph output (one label each).
    pub output_elems: usize,
    /// ONNX node name of each layer (the layer name may differ when the node
    /// had none or a repeated one).
    pub node_names: Vec<String>,
}

/// What an ONNX value is while lowering.
#[derive(Clone, Debug)]
enum Val {
    Const(Const),
    /// The graph input after the affine map `a·x + b` per channel.
    Input {
        dims: Vec<usize>,
        a: Vec<f64>,
        b: Vec<f64>,
    },
    /// Output of layer `layer` with ONNX dims (`[1, C, H, W]` or `[1, K]`).
    Act {
        layer: usize,
        dims: Vec<usize>,
    },
    /// A QuantizeLinear of an activation, waiting for its DequantizeLinear.
    Quantized {
        inner: Box<Val>,
        scale: f32,
        zero_point: i32,
        node: String,
    },
}

struct Lowering<'a> {
    m: &'a OnnxModel,
    vals: HashMap<String, Val>,
    consumers: HashMap<String, usize>,
    layers: Vec<LayerDesc>,
    kinds: Vec<LayerKind>,
    node_names: Vec<String>,
    tensors: TensorMap,
    used_names: HashSet<String>,
    /// The affine map the layers read the input with (all must agree).
    affine: Option<(Vec<f64>, Vec<f64>)>,
    notes: Vec<String>,
    output: String,
    /// Data type of each initializer and Constant output (zero points).
    dtypes: HashMap<String, i32>,
    qdq: Vec<GivenQuant>,
}

/// One node being lowered: its place for messages and attribute access.
struct Ctx<'a> {
    node: &'a NodeProto,
    op: &'a str,
    place: String,
    opset: i64,
}

impl Ctx<'_> {
    fn fail(&self, what: impl Into<String>) -> Error {
        Error::new(self.place.clone(), what)
    }
    fn attr(&self, name: &str) -> Option<&proto::AttributeProto> {
        self.node
            .attribute
            .iter()
            .find(|a| a.name.as_deref() == Some(name))
    }
    fn int(&self, name: &str, default: i64) -> i64 {
        self.attr(name).and_then(|a| a.i).unwrap_or(default)
    }
    fn float(&self, name: &str) -> Option<f32> {
        self.attr(name).and_then(|a| a.f)
    }
    fn ints(&self, name: &str) -> Option<Vec<i64>> {
        self.attr(name).map(|a| a.ints.clone())
    }
    fn string(&self, name: &str) -> Option<String> {
        self.attr(name)
            .and_then(|a| a.s.as_ref())
            .map(|s| String::from_utf8_lossy(s).into_owned())
    }
    /// Input `k` if present and non-empty.
    fn input(&self, k: usize) -> Option<&str> {
        self.node
            .input
            .get(k)
            .map(String::as_str)
            .filter(|s| !s.is_empty())
    }
    fn need_input(&self, k: usize) -> Result<&str> {
        self.input(k)
            .ok_or_else(|| self.fail(format!("input {} is missing", k + 1)))
    }
    fn out(&self) -> Result<&str> {
        self.node
            .output
            .first()
            .map(String::as_str)
            .filter(|s| !s.is_empty())
            .ok_or_else(|| self.fail("has no output"))
    }
}

/// Lower the model's graph. Refusals name the node (`<file>: node "<name>"
/// (<op>, opset <n>)`) and what was expected.
pub fn lower(m: &OnnxModel) -> Result<Lowered> {
    let g = m.graph();
    let origin = &m.origin;
    limits::check(
        origin,
        "graph nodes",
        g.node.len() as u64,
        limits::MAX_ONNX_NODES,
    )?;
    let mut vals = HashMap::new();
    let mut dtypes = HashMap::new();
    let mut total = 0u64;
    for t in &g.initializer {
        let name = t.name.clone().unwrap_or_default();
        dtypes.insert(name.clone(), t.data_type.unwrap_or(0));
        let c = tensor_values(t, &format!("{origin}: initializer \"{name}\""))?;
        total = total.saturating_add(c.len() as u64 * 4);
        limits::check(
            origin,
            "f32 bytes of all initializers",
            total,
            limits::MAX_WEIGHT_BYTES,
        )?;
        vals.insert(name, Val::Const(c));
    }
    if !g.sparse_initializer.is_empty() {
        return Err(Error::new(
            origin,
            "sparse initializers are not supported; expected dense initializers",
        ));
    }
    // The real inputs: graph inputs that are not initializers.
    let inputs: Vec<&proto::ValueInfoProto> = g
        .input
        .iter()
        .filter(|i| !vals.contains_key(i.name.as_deref().unwrap_or("")))
        .collect();
    let [input] = inputs[..] else {
        let names: Vec<String> = inputs
            .iter()
            .map(|i| format!("\"{}\"", i.name.as_deref().unwrap_or("")))
            .collect();
        return Err(Error::new(
            origin,
            format!(
                "the graph has {} inputs ({}); expected exactly one image input",
                inputs.len(),
                names.join(", ")
            ),
        ));
    };
    let in_name = input.name.clone().unwrap_or_default();
    let dims = input_dims(input, &format!("{origin}: input \"{in_name}\""))?;
    let channels = dims[1];
    vals.insert(
        in_name,
        Val::Input {
            dims: dims.clone(),
            a: vec![1.0; channels],
            b: vec![0.0; channels],
        },
    );
    let [output] = &g.output[..] else {
        return Err(Error::new(
            origin,
            format!(
                "the graph has {} outputs; expected exactly one (the class scores)",
                g.output.len()
            ),
        ));
    };
    let mut consumers: HashMap<String, usize> = HashMap::new();
    for n in &g.node {
        for i in n.input.iter().filter(|i| !i.is_empty()) {
            *consumers.entry(i.clone()).or_default() += 1;
        }
    }
    let out_name = output.name.clone().unwrap_or_default();
    *consumers.entry(out_name.clone()).or_default() += 1;
    let mut lw = Lowering {
        m,
        vals,
        consumers,
        layers: Vec::new(),
        kinds: Vec::new(),
        node_names: Vec::new(),
        tensors: TensorMap::new(origin.clone()),
        used_names: HashSet::from(["input".to_string()]),
        affine: None,
        notes: Vec::new(),
        output: out_name.clone(),
        dtypes,
        qdq: Vec::new(),
    };
    for (k, node) in g.node.iter().enumerate() {
        lw.node(k, node)?;
    }
    let last = lw.layers.len().checked_sub(1);
    let output_elems = match (lw.vals.get(&out_name), last) {
        (Some(Val::Act { layer, dims }), Some(last)) if *layer == last => dims.iter().product(),
        (Some(Val::Act { layer, .. }), Some(last)) => {
            return Err(Error::new(
                format!("{origin}: output \"{out_name}\""),
                format!(
                    "comes from layer \"{}\" but layer \"{}\" follows it; expected the graph to end at its output",
                    lw.layer_name(*layer),
                    lw.layer_name(last)
                ),
            ))
        }
        (None, _) => {
            return Err(Error::new(
                format!("{origin}: output \"{out_name}\""),
                "no node produces it",
            ))
        }
        _ => {
            return Err(Error::new(
                format!("{origin}: output \"{out_name}\""),
                "is not computed by any layer (a constant or the input itself); expected a network",
            ))
        }
    };
    let (h, w) = if dims.len() == 4 {
        (dims[2], dims[3])
    } else {
        (1, 1)
    };
    let (a, b) = lw
        .affine
        .clone()
        .unwrap_or((vec![1.0; channels], vec![0.0; channels]));
    Ok(Lowered {
        graph_name: g.name.clone().unwrap_or_default(),
        layers: lw.layers,
        tensors: lw.tensors,
        input_hwc: (h as u16, w as u16, channels as u16),
        affine: a.into_iter().zip(b).collect(),
        notes: lw.notes,
        qdq: lw.qdq,
        output_elems,
        node_names: lw.node_names,
    })
}

/// Static dims of the image input: `[N, C, H, W]` or `[N, F]` with N 1 or
/// symbolic (read as 1), every other dimension a number within the limits.
fn input_dims(v: &proto::ValueInfoProto, place: &str) -> Result<Vec<usize>> {
    use proto::tensor_shape_proto::dimension::Value as Dv;
    use proto::type_proto::Value as Tv;
    let Some(Tv::TensorType(t)) = v.r#type.as_ref().and_then(|t| t.value.as_ref()) else {
        return Err(Error::new(
            place,
            "is not a tensor; expected a float image tensor [N, C, H, W]",
        ));
    };
    if t.elem_type != Some(proto::tensor_proto::DataType::Float as i32) {
        return Err(Error::new(
            place,
            format!(
                "has element type {}; expected FLOAT",
                super::dtype_name(t.elem_type.unwrap_or(0))
            ),
        ));
    }
    let Some(shape) = &t.shape else {
        return Err(Error::new(
            place,
            "has no shape; expected a static shape [N, C, H, W]",
        ));
    };
    let rank = shape.dim.len();
    if rank != 4 && rank != 2 {
        return Err(Error::new(
            place,
            format!("has rank {rank}; expected [N, C, H, W] (an image) or [N, F]"),
        ));
    }
    let mut dims = Vec::with_capacity(rank);
    for (i, d) in shape.dim.iter().enumerate() {
        let v = match &d.value {
            Some(Dv::DimValue(v)) if *v > 0 => *v as u64,
            _ if i == 0 => 1,
            Some(Dv::DimParam(p)) => {
                return Err(Error::new(
                    place,
                    format!("dimension {i} is symbolic (\"{p}\"); midge needs a static shape: export with fixed height, width and channels"),
                ))
            }
            _ => {
                return Err(Error::new(
                    place,
                    format!("dimension {i} has no size; midge needs a static shape"),
                ))
            }
        };
        if i == 0 && v != 1 {
            return Err(Error::new(
                place,
                format!("batch size {v}; expected 1 (or a symbolic batch dimension)"),
            ));
        }
        let (key, limit) = match (rank, i) {
            (4, 2) | (4, 3) => ("height/width", limits::MAX_INPUT_SIDE),
            _ => ("channels", limits::MAX_CHANNELS),
        };
        limits::check(place, key, v, limit)?;
        dims.push(v as usize);
    }
    Ok(dims)
}

/// A window's padding `[top, left, bottom, right]`, effective kernel and
/// stride along height and width, and the output size.
struct Geometry {
    pads: [u16; 4],
    out: (usize, usize),
}

impl Lowering<'_> {
    fn layer_name(&self, i: usize) -> &str {
        self.layers[i].name.as_deref().unwrap_or("")
    }

    fn ctx<'n>(&self, node: &'n NodeProto) -> Ctx<'n> {
        let op = node.op_type.as_deref().unwrap_or("");
        let name = node.name.as_deref().unwrap_or("");
        Ctx {
            node,
            op,
            place: format!(
                "{}: node \"{}\" ({}, opset {})",
                self.m.origin, name, op, self.m.opset
            ),
            opset: self.m.opset,
        }
    }

    /// A unique layer name from the node's name (or `<op><k>`), taken.
    fn fresh_name(&mut self, node: &NodeProto, k: usize) -> String {
        let name = self.peek_name(node, k);
        self.used_names.insert(name.clone());
        name
    }

    fn val(&self, c: &Ctx, name: &str) -> Result<&Val> {
        self.vals
            .get(name)
            .ok_or_else(|| c.fail(format!("reads \"{name}\", which no earlier node produces (expected nodes in topological order)")))
    }

    fn constant(&self, c: &Ctx, name: &str) -> Result<Const> {
        match self.val(c, name)? {
            Val::Const(k) => Ok(k.clone()),
            _ => Err(c.fail(format!(
                "reads \"{name}\" as a weight or shape, but it is computed from the input; expected an initializer or a constant"
            ))),
        }
    }

    /// An activation input: the `from` name and its ONNX dims. Reading the
    /// graph input fixes the normalisation all readers must share.
    fn act(&mut self, c: &Ctx, name: &str) -> Result<(String, Vec<usize>)> {
        match self.val(c, name)?.clone() {
            Val::Act { layer, dims } => Ok((self.layer_name(layer).to_string(), dims)),
            Val::Input { dims, a, b } => {
                match &self.affine {
                    Some((a0, b0)) if *a0 != a || *b0 != b => {
                        return Err(c.fail(format!(
                            "reads the input \"{name}\" with a normalisation other layers do not use; expected one normalisation of the input"
                        )))
                    }
                    _ => self.affine = Some((a, b)),
                }
                Ok(("input".into(), dims))
            }
            Val::Const(_) => Err(c.fail(format!(
                "reads the constant \"{name}\" where an activation is expected"
            ))),
            Val::Quantized { .. } => Err(c.fail(format!(
                "reads the quantized tensor \"{name}\"; expected a DequantizeLinear right after each QuantizeLinear"
            ))),
        }
    }

    fn push(
        &mut self,
        c: &Ctx,
        k: usize,
        kind: LayerKind,
        mut l: LayerDesc,
        dims: Vec<usize>,
    ) -> Result<()> {
        let name = self.fresh_name(c.node, k);
        l.name = Some(name.clone());
        l.op = kind.name().to_string();
        if kind.has_tensors() {
            l.tensor = Some(name);
        }
        self.layers.push(l);
        self.kinds.push(kind);
        self.node_names
            .push(c.node.name.clone().unwrap_or_default());
        let out = c.out()?.to_string();
        self.vals.insert(
            out,
            Val::Act {
                layer: self.layers.len() - 1,
                dims,
            },
        );
        Ok(())
    }

    fn alias(&mut self, c: &Ctx, from: &str) -> Result<()> {
        let v = self.val(c, from)?.clone();
        self.vals.insert(c.out()?.to_string(), v);
        Ok(())
    }

    fn set_const(&mut self, c: &Ctx, k: Const) -> Result<()> {
        limits::check_opt(
            &c.place,
            "f32 bytes of the constant",
            (k.len() as u64).checked_mul(4),
            limits::MAX_TENSOR_BYTES,
        )?;
        self.vals.insert(c.out()?.to_string(), Val::Const(k));
        Ok(())
    }

    /// Outputs after the first must be unused (Dropout's mask, MaxPool's
    /// indices, BatchNormalization's training statistics).
    fn only_first_output(&self, c: &Ctx) -> Result<()> {
        for o in c.node.output.iter().skip(1).filter(|o| !o.is_empty()) {
            if self.consumers.get(o).copied().unwrap_or(0) > 0 {
                return Err(c.fail(format!(
                    "its output \"{o}\" is used; expected only the first output to be read"
                )));
            }
        }
        Ok(())
    }

    fn node(&mut self, k: usize, node: &NodeProto) -> Result<()> {
        let c = self.ctx(node);
        match node.domain.as_deref().unwrap_or("") {
            "" | "ai.onnx" => {}
            d => {
                return Err(c.fail(format!(
                    "is in domain \"{d}\"; expected operators of the default domain (ai.onnx)"
                )))
            }
        }
        match c.op {
            "Constant" => self.op_constant(&c),
            "Identity" => self.alias(&c, c.need_input(0)?),
            "Dropout" => {
                self.only_first_output(&c)?;
                if let Some(t) = c.input(2) {
                    if let Val::Const(v) = self.val(&c, t)? {
                        if v.floats().iter().any(|&x| x != 0.0) {
                            return Err(c.fail("training_mode is true; expected inference (false)"));
                        }
                    }
                }
                self.alias(&c, c.need_input(0)?)
            }
            "Shape" => self.op_shape(&c),
            "Gather" => self.op_gather(&c),
            "Unsqueeze" | "Squeeze" => self.op_squeeze(&c, k),
            "Concat" => self.op_concat(&c),
            "ConstantOfShape" => self.op_constant_of_shape(&c),
            "Cast" => self.op_cast(&c),
            "QuantizeLinear" => self.op_quantize(&c),
            "DequantizeLinear" => self.op_dequantize(&c),
            "Conv" => self.op_conv(&c, k),
            "ConvTranspose" => Err(c.fail(
                "transposed convolution is not supported: the runtime has no such kernel; expected Conv",
            )),
            "BatchNormalization" => self.op_batchnorm(&c, k),
            "Relu" => {
                let (from, dims) = self.act(&c, c.need_input(0)?)?;
                self.push(&c, k, LayerKind::Relu, refs(&[from]), dims)
            }
            "Clip" => self.op_clip(&c, k),
            "MaxPool" | "AveragePool" => self.op_pool(&c, k),
            "GlobalAveragePool" => {
                let (from, dims) = self.act(&c, c.need_input(0)?)?;
                if dims.len() != 4 {
                    return Err(c.fail("expected a [1, C, H, W] input"));
                }
                let d = vec![1, dims[1], 1, 1];
                self.push(&c, k, LayerKind::GlobalAvgPool, refs(&[from]), d)
            }
            "Flatten" => {
                let axis = c.int("axis", 1);
                let src = c.need_input(0)?;
                if let Val::Const(_) = self.val(&c, src)? {
                    return Err(c.fail("flattening a constant is not supported"));
                }
                let (from, dims) = self.act(&c, src)?;
                let rank = dims.len() as i64;
                let axis = if axis < 0 { axis + rank } else { axis };
                if axis != 1 && axis != 0 {
                    return Err(c.fail(format!(
                        "axis {axis}; expected 1 (or 0: the batch is 1), which keeps the batch and flattens C, H, W"
                    )));
                }
                self.flatten(&c, k, from, dims)
            }
            "Reshape" => self.op_reshape(&c, k),
            "Gemm" => self.op_gemm(&c, k),
            "MatMul" => self.op_matmul(&c, k),
            "Add" | "Sub" | "Mul" | "Div" => self.op_arith(&c, k),
            "Softmax" => {
                let out = c.out()?;
                if out != self.output {
                    return Err(c.fail(
                        "Softmax is supported only as the last node (midge leaves it to the host); this one feeds other nodes",
                    ));
                }
                let src = c.need_input(0)?;
                let (_, dims) = self.act(&c, src)?;
                let rank = dims.len() as i64;
                let axis = c.int("axis", if c.opset < 13 { 1 } else { -1 });
                let ax = if axis < 0 { axis + rank } else { axis };
                let total: usize = dims.iter().product();
                // Softmax-13 normalises along one axis; earlier ones over
                // everything from `axis` on: that must be every score.
                let covered: usize = match dims.get(ax.max(0) as usize..) {
                    Some(rest) if c.opset < 13 && ax >= 1 => rest.iter().product(),
                    Some([d, ..]) if ax >= 1 => *d,
                    _ => 0,
                };
                if covered != total {
                    return Err(c.fail(format!(
                        "Softmax along axis {axis} of dims {dims:?} does not cover all {total} scores; expected it over the class scores"
                    )));
                }
                self.notes.push(format!(
                    "the trailing Softmax (node \"{}\") is left to the host: the device returns the scores before it (`midge classify` applies it)",
                    node.name.as_deref().unwrap_or("")
                ));
                self.alias(&c, src)
            }
            op => Err(c.fail(format!(
                "operator {op} is not supported; supported: {}",
                SUPPORTED.join(", ")
            ))),
        }
    }

    fn flatten(&mut self, c: &Ctx, k: usize, from: String, dims: Vec<usize>) -> Result<()> {
        if dims.len() == 2 {
            return self.alias(c, c.need_input(0)?);
        }
        let n = dims[1..].iter().product();
        self.push(c, k, LayerKind::Flatten, refs(&[from]), vec![1, n])
    }

    /// Scale and zero point inputs of a Q/DQ node: a per-tensor scalar pair
    /// (`per_axis` false) or per-axis vectors; the zero point's type says
    /// whether the integers are int8 (or int32, for biases) or uint8.
    fn qparams(&self, c: &Ctx, per_axis: bool) -> Result<(Vec<f32>, Vec<i64>, bool)> {
        let s = self.constant(c, c.need_input(1)?)?.floats();
        let (zp, unsigned) = match c.input(2) {
            Some(z) => {
                let k = self.constant(c, z)?;
                let t = self.dtypes.get(z).copied().unwrap_or(0);
                let u = t == proto::tensor_proto::DataType::Uint8 as i32;
                (
                    k.ints()
                        .map(<[i64]>::to_vec)
                        .unwrap_or_else(|| vec![0; k.len()]),
                    u,
                )
            }
            // onnx.proto operators: no zero point means uint8, zero point 0.
            None => (vec![0; s.len()], true),
        };
        if zp.len() != s.len() || (!per_axis && s.len() != 1) {
            return Err(c.fail(format!(
                "scale has {} values and zero point {}; expected one of each (per-tensor quantization of an activation)",
                s.len(),
                zp.len()
            )));
        }
        if let Some(x) = s.iter().find(|x| !(x.is_finite() && **x > 0.0)) {
            return Err(c.fail(format!("scale {x}; expected a positive finite number")));
        }
        Ok((s, zp, unsigned))
    }

    /// For a per-axis scale of `n` values along the node's `axis` of `k`:
    /// element index → scale index.
    fn axis_split(&self, c: &Ctx, k: &Const, n: usize) -> Result<Box<dyn Fn(usize) -> usize>> {
        if n == 1 {
            return Ok(Box::new(|_| 0));
        }
        let r = k.dims.len() as i64;
        let axis = c.int("axis", 1);
        let axis = if axis < 0 { axis + r } else { axis };
        if !(0..r).contains(&axis) || k.dims[axis as usize] != n {
            return Err(c.fail(format!(
                "{n} scales along axis {axis} of a tensor of dims {:?}",
                k.dims
            )));
        }
        let inner: usize = k.dims[axis as usize + 1..].iter().product();
        Ok(Box::new(move |i| (i / inner) % n))
    }

    fn op_quantize(&mut self, c: &Ctx) -> Result<()> {
        use proto::tensor_proto::DataType as D;
        let src = c.need_input(0)?;
        match self.val(c, src)?.clone() {
            Val::Const(k) => {
                // Fake-quantized weights: q = saturate(round_half_even(x / s) + zp).
                let (s, zp, unsigned) = self.qparams(c, true)?;
                let (lo, hi) = if unsigned { (0, 255) } else { (-128, 127) };
                let per = self.axis_split(c, &k, s.len())?;
                let v: Vec<i64> = k
                    .floats()
                    .iter()
                    .enumerate()
                    .map(|(i, &x)| {
                        let a = per(i);
                        ((x / s[a]).round_ties_even() as i64 + zp[a]).clamp(lo, hi)
                    })
                    .collect();
                let t = if unsigned { D::Uint8 } else { D::Int8 };
                self.dtypes.insert(c.out()?.to_string(), t as i32);
                self.set_const(
                    c,
                    Const {
                        dims: k.dims,
                        values: Values::I(v),
                    },
                )
            }
            v @ (Val::Act { .. } | Val::Input { .. }) => {
                let (s, zp, unsigned) = self.qparams(c, false)?;
                let zero_point = if unsigned { zp[0] - 128 } else { zp[0] };
                if !(-128..=127).contains(&zero_point) {
                    return Err(c.fail(format!("zero point {} is outside the 8-bit range", zp[0])));
                }
                self.vals.insert(
                    c.out()?.to_string(),
                    Val::Quantized {
                        inner: Box::new(v),
                        scale: s[0],
                        zero_point: zero_point as i32,
                        node: c.node.name.clone().unwrap_or_default(),
                    },
                );
                Ok(())
            }
            Val::Quantized { .. } => Err(c.fail("quantizes an already quantized tensor")),
        }
    }

    fn op_dequantize(&mut self, c: &Ctx) -> Result<()> {
        let src = c.need_input(0)?;
        match self.val(c, src)?.clone() {
            Val::Const(k) => {
                let (s, zp, _) = self.qparams(c, true)?;
                let per = self.axis_split(c, &k, s.len())?;
                let q = k
                    .ints()
                    .ok_or_else(|| c.fail("dequantizes a float constant; expected integers"))?;
                let v: Vec<f32> = q
                    .iter()
                    .enumerate()
                    .map(|(i, &x)| {
                        let a = per(i);
                        ((x - zp[a]) as f64 * s[a] as f64) as f32
                    })
                    .collect();
                self.set_const(
                    c,
                    Const {
                        dims: k.dims,
                        values: Values::F(v),
                    },
                )
            }
            Val::Quantized {
                inner,
                scale,
                zero_point,
                node,
            } => {
                let (s, zp, unsigned) = self.qparams(c, false)?;
                let z = if unsigned { zp[0] - 128 } else { zp[0] };
                if s[0] != scale || z != zero_point as i64 {
                    return Err(c.fail(format!(
                        "scale {} and zero point {} differ from its QuantizeLinear \"{node}\" ({scale}, {zero_point} as int8); expected a matching pair",
                        s[0], zp[0]
                    )));
                }
                match &*inner {
                    Val::Act { layer, .. } => self.qdq.push(GivenQuant {
                        layer: self.layer_name(*layer).to_string(),
                        node,
                        scale,
                        zero_point,
                    }),
                    _ => self.notes.push(format!(
                        "the quantization of the graph input by \"{node}\" is not used: the device's first layer quantizes the pixels from the normalisation"
                    )),
                }
                self.vals.insert(c.out()?.to_string(), *inner);
                Ok(())
            }
            _ => Err(c.fail(format!(
                "dequantizes \"{src}\", which is neither an integer constant nor a QuantizeLinear output"
            ))),
        }
    }

    fn op_constant(&mut self, c: &Ctx) -> Result<()> {
        let a = c
            .node
            .attribute
            .first()
            .ok_or_else(|| c.fail("has no value attribute"))?;
        let k = match a.name.as_deref().unwrap_or("") {
            "value" => {
                let t = a.t.as_ref().ok_or_else(|| c.fail("value holds no tensor"))?;
                self.dtypes
                    .insert(c.out()?.to_string(), t.data_type.unwrap_or(0));
                tensor_values(t, &c.place)?
            }
            "value_float" => Const {
                dims: vec![],
                values: Values::F(vec![a.f.unwrap_or(0.0)]),
            },
            "value_floats" => Const {
                dims: vec![a.floats.len()],
                values: Values::F(a.floats.clone()),
            },
            "value_int" => Const {
                dims: vec![],
                values: Values::I(vec![a.i.unwrap_or(0)]),
            },
            "value_ints" => Const {
                dims: vec![a.ints.len()],
                values: Values::I(a.ints.clone()),
            },
            other => {
                return Err(c.fail(format!(
                    "attribute {other} is not supported; expected value, value_float(s) or value_int(s)"
                )))
            }
        };
        self.set_const(c, k)
    }

    fn dims_of(&self, c: &Ctx, name: &str) -> Result<Vec<usize>> {
        let mut v = self.val(c, name)?;
        while let Val::Quantized { inner, .. } = v {
            v = inner;
        }
        Ok(match v {
            Val::Const(k) => k.dims.clone(),
            Val::Input { dims, .. } | Val::Act { dims, .. } => dims.clone(),
            Val::Quantized { .. } => unreachable!("unwrapped above"),
        })
    }

    fn op_shape(&mut self, c: &Ctx) -> Result<()> {
        let dims = self.dims_of(c, c.need_input(0)?)?;
        let r = dims.len() as i64;
        let clampi = |v: i64| (if v < 0 { v + r } else { v }).clamp(0, r) as usize;
        let start = clampi(c.int("start", 0));
        let end = clampi(c.int("end", r));
        let v: Vec<i64> = dims
            .get(start..end.max(start))
            .unwrap_or(&[])
            .iter()
            .map(|&d| d as i64)
            .collect();
        self.set_const(
            c,
            Const {
                dims: vec![v.len()],
                values: Values::I(v),
            },
        )
    }

    fn op_gather(&mut self, c: &Ctx) -> Result<()> {
        let data = self.constant(c, c.need_input(0)?)?;
        let idx = self.constant(c, c.need_input(1)?)?;
        let axis = c.int("axis", 0);
        if data.dims.len() != 1 || (axis != 0 && axis != -1) {
            return Err(c.fail(format!(
                "Gather on a constant of dims {:?} along axis {axis}; expected a 1-D constant (shape arithmetic)",
                data.dims
            )));
        }
        let n = data.dims[0] as i64;
        let ix = idx
            .ints()
            .ok_or_else(|| c.fail("indices are not integers"))?;
        let mut pick = Vec::with_capacity(ix.len());
        for &i in ix {
            let j = if i < 0 { i + n } else { i };
            if !(0..n).contains(&j) {
                return Err(c.fail(format!("index {i} is outside 0..{n}")));
            }
            pick.push(j as usize);
        }
        let values = match &data.values {
            Values::I(v) => Values::I(pick.iter().map(|&j| v[j]).collect()),
            Values::F(v) => Values::F(pick.iter().map(|&j| v[j]).collect()),
        };
        self.set_const(
            c,
            Const {
                dims: idx.dims.clone(),
                values,
            },
        )
    }

    /// The `axes` of Squeeze/Unsqueeze: an attribute before opset 13, an
    /// input from 13 on.
    fn axes(&self, c: &Ctx) -> Result<Option<Vec<i64>>> {
        if c.opset < 13 {
            return Ok(c.ints("axes"));
        }
        match c.input(1) {
            Some(a) => Ok(Some(
                self.constant(c, a)?
                    .ints()
                    .ok_or_else(|| c.fail("axes are not integers"))?
                    .to_vec(),
            )),
            None => Ok(None),
        }
    }

    fn op_squeeze(&mut self, c: &Ctx, k: usize) -> Result<()> {
        let src = c.need_input(0)?;
        let axes = self.axes(c)?;
        let dims = self.dims_of(c, src)?;
        let unsq = c.op == "Unsqueeze";
        let new_dims = if unsq {
            let axes = axes.ok_or_else(|| c.fail("has no axes"))?;
            let r = (dims.len() + axes.len()) as i64;
            let mut norm: Vec<usize> = axes
                .iter()
                .map(|&a| (if a < 0 { a + r } else { a }) as usize)
                .collect();
            norm.sort_unstable();
            let mut d = dims.clone();
            for a in norm {
                if a > d.len() {
                    return Err(c.fail(format!("axis {a} is out of range")));
                }
                d.insert(a, 1);
            }
            d
        } else {
            let r = dims.len() as i64;
            let drop: Vec<usize> = match axes {
                Some(ax) => ax
                    .iter()
                    .map(|&a| (if a < 0 { a + r } else { a }) as usize)
                    .collect(),
                None => (0..dims.len()).filter(|&i| dims[i] == 1).collect(),
            };
            if drop.iter().any(|&a| dims.get(a) != Some(&1)) {
                return Err(c.fail(format!(
                    "squeezes axes {drop:?} of dims {dims:?}; expected axes of size 1"
                )));
            }
            (0..dims.len())
                .filter(|i| !drop.contains(i))
                .map(|i| dims[i])
                .collect()
        };
        match self.val(c, src)?.clone() {
            Val::Const(mut kc) => {
                kc.dims = new_dims;
                self.set_const(c, kc)
            }
            _ => {
                let (from, dims) = self.act(c, src)?;
                let keeps_batch = new_dims.first() == Some(&1);
                if dims.len() == 4 && new_dims.len() == 2 && keeps_batch {
                    self.flatten(c, k, from, dims)
                } else if new_dims == dims {
                    self.alias(c, src)
                } else {
                    Err(c.fail(format!(
                        "{} of an activation from {dims:?} to {new_dims:?}; expected [1, C, 1, 1] to [1, C]",
                        c.op
                    )))
                }
            }
        }
    }

    fn op_concat(&mut self, c: &Ctx) -> Result<()> {
        let mut parts = Vec::new();
        for i in c.node.input.iter().filter(|i| !i.is_empty()) {
            parts.push(self.constant(c, i)?);
        }
        if parts.iter().any(|p| p.dims.len() != 1) {
            return Err(c.fail(
                "Concat of constants that are not 1-D; expected shape arithmetic (1-D integer lists)",
            ));
        }
        let values = if parts.iter().all(|p| p.ints().is_some()) {
            Values::I(
                parts
                    .iter()
                    .flat_map(|p| p.ints().unwrap().to_vec())
                    .collect(),
            )
        } else {
            Values::F(parts.iter().flat_map(|p| p.floats()).collect())
        };
        let n = match &values {
            Values::I(v) => v.len(),
            Values::F(v) => v.len(),
        };
        self.set_const(
            c,
            Const {
                dims: vec![n],
                values,
            },
        )
    }

    fn op_constant_of_shape(&mut self, c: &Ctx) -> Result<()> {
        let shape = self.constant(c, c.need_input(0)?)?;
        let dims: Vec<usize> = shape
            .ints()
            .ok_or_else(|| c.fail("shape is not integers"))?
            .iter()
            .map(|&d| usize::try_from(d).map_err(|_| c.fail(format!("dimension {d} is negative"))))
            .collect::<Result<_>>()?;
        let n = limits::product(dims.iter().map(|&d| d as u64));
        limits::check_opt(
            &c.place,
            "f32 bytes of the constant",
            n.and_then(|n| n.checked_mul(4)),
            limits::MAX_TENSOR_BYTES,
        )?;
        let n = n.expect("checked") as usize;
        let fill = match c.attr("value").and_then(|a| a.t.as_ref()) {
            Some(t) => tensor_values(t, &c.place)?,
            None => Const {
                dims: vec![1],
                values: Values::F(vec![0.0]),
            },
        };
        let values = match fill.values {
            Values::F(v) => Values::F(vec![*v.first().unwrap_or(&0.0); n]),
            Values::I(v) => Values::I(vec![*v.first().unwrap_or(&0); n]),
        };
        self.set_const(c, Const { dims, values })
    }

    fn op_cast(&mut self, c: &Ctx) -> Result<()> {
        use proto::tensor_proto::DataType as D;
        let src = c.need_input(0)?;
        let to = c.int("to", 0) as i32;
        match self.val(c, src)?.clone() {
            Val::Const(k) => {
                let values = match D::try_from(to) {
                    Ok(D::Float | D::Float16 | D::Bfloat16 | D::Double) => Values::F(k.floats()),
                    _ => Values::I(match &k.values {
                        Values::I(v) => v.clone(),
                        Values::F(v) => v.iter().map(|&x| x as i64).collect(),
                    }),
                };
                self.set_const(
                    c,
                    Const {
                        dims: k.dims,
                        values,
                    },
                )
            }
            _ if to == D::Float as i32 => self.alias(c, src),
            _ => Err(c.fail("Cast of an activation to a type other than FLOAT is not supported")),
        }
    }

    /// Padding, output size of a 2-D window from the node's attributes.
    fn geometry(
        &self,
        c: &Ctx,
        in_hw: (usize, usize),
        k: (usize, usize),
        s: (usize, usize),
        d: (usize, usize),
        ceil_mode: bool,
    ) -> Result<Geometry> {
        let auto = c.string("auto_pad").unwrap_or_else(|| "NOTSET".into());
        let eff = (d.0 * (k.0 - 1) + 1, d.1 * (k.1 - 1) + 1);
        let mut p = [0usize; 4];
        match auto.as_str() {
            "NOTSET" => {
                if let Some(v) = c.ints("pads") {
                    if v.len() != 4 || v.iter().any(|&x| x < 0) {
                        return Err(c.fail(format!(
                            "pads {v:?}; expected four non-negative values [top, left, bottom, right]"
                        )));
                    }
                    for (q, x) in p.iter_mut().zip(&v) {
                        *q = *x as usize;
                    }
                }
            }
            "VALID" => {}
            "SAME_UPPER" | "SAME_LOWER" => {
                for (ax, (inp, (e, st))) in [(in_hw.0, (eff.0, s.0)), (in_hw.1, (eff.1, s.1))]
                    .into_iter()
                    .enumerate()
                {
                    let out = inp.div_ceil(st);
                    let total = ((out - 1) * st + e).saturating_sub(inp);
                    let small = total / 2;
                    let big = total - small;
                    let (begin, end) = if auto == "SAME_UPPER" {
                        (small, big)
                    } else {
                        (big, small)
                    };
                    p[ax] = begin;
                    p[ax + 2] = end;
                }
            }
            other => {
                return Err(c.fail(format!(
                    "auto_pad \"{other}\"; expected NOTSET, VALID, SAME_UPPER or SAME_LOWER"
                )))
            }
        }
        let mut out = [0usize; 2];
        for ax in 0..2 {
            let padded = [in_hw.0, in_hw.1][ax] + p[ax] + p[ax + 2];
            let e = [eff.0, eff.1][ax];
            let st = [s.0, s.1][ax];
            if padded < e {
                return Err(c.fail(format!(
                    "the window ({}×{}, dilation {}×{}) does not fit the padded input {}×{}",
                    k.0,
                    k.1,
                    d.0,
                    d.1,
                    in_hw.0 + p[0] + p[2],
                    in_hw.1 + p[1] + p[3]
                )));
            }
            let floor = (padded - e) / st + 1;
            if ceil_mode && (padded - e).div_ceil(st) + 1 != floor {
                return Err(c.fail(
                    "ceil_mode 1 gives a larger output than floor rounding here; expected ceil_mode 0 (or sizes where both agree)",
                ));
            }
            out[ax] = floor;
        }
        let mut pads = [0u16; 4];
        for (q, v) in pads.iter_mut().zip(p) {
            *q = u16::try_from(v).map_err(|_| c.fail(format!("padding {v} exceeds 65535")))?;
        }
        Ok(Geometry {
            pads,
            out: (out[0], out[1]),
        })
    }

    fn pair_attr(&self, c: &Ctx, name: &str, default: usize) -> Result<(usize, usize)> {
        match c.ints(name) {
            None => Ok((default, default)),
            Some(v) if v.len() == 2 && v.iter().all(|&x| (1..=65535).contains(&x)) => {
                Ok((v[0] as usize, v[1] as usize))
            }
            Some(v) => Err(c.fail(format!(
                "{name} {v:?}; expected two values in 1..=65535 (a 2-D window)"
            ))),
        }
    }

    fn act4(&mut self, c: &Ctx) -> Result<(String, Vec<usize>)> {
        let (from, dims) = self.act(c, c.need_input(0)?)?;
        if dims.len() != 4 {
            return Err(c.fail(format!(
                "reads a tensor of dims {dims:?}; expected an image tensor [1, C, H, W]"
            )));
        }
        Ok((from, dims))
    }

    fn op_conv(&mut self, c: &Ctx, k: usize) -> Result<()> {
        let (from, dims) = self.act4(c)?;
        let w = self.constant(c, c.need_input(1)?)?;
        if w.dims.len() != 4 || w.ints().is_some() {
            return Err(c.fail(format!(
                "weight of dims {:?}; expected float [M, C/group, kH, kW] (2-D convolution)",
                w.dims
            )));
        }
        let (m, per, kh, kw) = (w.dims[0], w.dims[1], w.dims[2], w.dims[3]);
        let cin = dims[1];
        let group = c.int("group", 1);
        if let Some(ks) = c.ints("kernel_shape") {
            if ks != [kh as i64, kw as i64] {
                return Err(c.fail(format!(
                    "kernel_shape {ks:?} differs from the weight's {kh}×{kw}"
                )));
            }
        }
        let kind = if group == 1 && per == cin {
            LayerKind::Conv2d
        } else if group as usize == cin && per == 1 && m == cin {
            LayerKind::Depthwise
        } else {
            return Err(c.fail(format!(
                "group {group} with weight {:?} on {cin} input channels; expected group 1 (conv2d) or group = channels with one filter each (depthwise)",
                w.dims
            )));
        };
        let s = self.pair_attr(c, "strides", 1)?;
        let d = self.pair_attr(c, "dilations", 1)?;
        if kh == 0 || kw == 0 {
            return Err(c.fail("kernel has a zero side"));
        }
        let g = self.geometry(c, (dims[2], dims[3]), (kh, kw), s, d, false)?;
        let name_pending = self.peek_name(c.node, k);
        let mut l = refs(&[from]);
        l.kernel = Some(pair(kh, kw)?);
        l.stride = Some(pair(s.0, s.1)?);
        l.dilation = Some(pair(d.0, d.1)?);
        l.padding = Some(PaddingDesc(Padding::Explicit(g.pads)));
        if kind == LayerKind::Conv2d {
            l.out_channels = Some(u16::try_from(m).map_err(|_| c.fail("more than 65535 filters"))?);
        }
        self.tensors
            .insert(format!("{name_pending}.weight"), w.dims.clone(), w.floats());
        let has_bias = match c.input(2) {
            Some(b) => {
                let b = self.constant(c, b)?;
                if b.len() != m {
                    return Err(c.fail(format!("bias has {} values; expected {m}", b.len())));
                }
                self.tensors
                    .insert(format!("{name_pending}.bias"), vec![m], b.floats());
                true
            }
            None => false,
        };
        l.bias = Some(has_bias);
        self.push(c, k, kind, l, vec![1, m, g.out.0, g.out.1])
    }

    /// The name `push` will give this node (tensors are stored under it).
    fn peek_name(&self, node: &NodeProto, k: usize) -> String {
        let base = match node.name.as_deref() {
            Some(n) if !n.is_empty() => n.to_string(),
            _ => format!(
                "{}{}",
                node.op_type.as_deref().unwrap_or("node").to_lowercase(),
                k + 1
            ),
        };
        let mut name = base.clone();
        let mut j = 2;
        while self.used_names.contains(&name) {
            name = format!("{base}_{j}");
            j += 1;
        }
        name
    }

    fn op_batchnorm(&mut self, c: &Ctx, k: usize) -> Result<()> {
        self.only_first_output(c)?;
        if c.int("training_mode", 0) != 0 {
            return Err(c.fail("training_mode 1; expected inference (0)"));
        }
        if c.int("spatial", 1) != 1 {
            return Err(c.fail("spatial 0; expected 1 (statistics per channel)"));
        }
        let (from, dims) = self.act(c, c.need_input(0)?)?;
        let ch = dims[1];
        let name = self.peek_name(c.node, k);
        for (i, part) in ["weight", "bias", "running_mean", "running_var"]
            .into_iter()
            .enumerate()
        {
            let t = self.constant(c, c.need_input(i + 1)?)?;
            if t.len() != ch {
                return Err(c.fail(format!(
                    "input {} has {} values; expected {ch} (one per channel)",
                    i + 2,
                    t.len()
                )));
            }
            self.tensors
                .insert(format!("{name}.{part}"), vec![ch], t.floats());
        }
        let mut l = refs(&[from]);
        l.eps = Some(c.float("epsilon").unwrap_or(1e-5));
        self.push(c, k, LayerKind::BatchNorm, l, dims)
    }

    fn op_clip(&mut self, c: &Ctx, k: usize) -> Result<()> {
        let (lo, hi) = if c.opset < 11 {
            (c.float("min"), c.float("max"))
        } else {
            let get = |i: usize| -> Result<Option<f32>> {
                match c.input(i) {
                    Some(n) => {
                        let v = self.constant(c, n)?;
                        match v.floats()[..] {
                            [x] => Ok(Some(x)),
                            _ => Err(c.fail(format!("input {} is not a scalar", i + 1))),
                        }
                    }
                    None => Ok(None),
                }
            };
            (get(1)?, get(2)?)
        };
        // Opset 6 defaults are ±3.4028234e38 (f32::MAX): no bound.
        let hi = hi.filter(|&h| h < f32::MAX);
        let kind = match (lo, hi) {
            (Some(l), Some(h)) if l == 0.0 && h == 6.0 => LayerKind::Relu6,
            (Some(0.0), None) => LayerKind::Relu,
            _ => {
                return Err(c.fail(format!(
                    "Clip to [{}, {}]; expected [0, 6] (ReLU6) or [0, no maximum] (ReLU)",
                    lo.map_or("none".into(), |v| v.to_string()),
                    hi.map_or("none".into(), |v| v.to_string())
                )))
            }
        };
        let (from, dims) = self.act(c, c.need_input(0)?)?;
        self.push(c, k, kind, refs(&[from]), dims)
    }

    fn op_pool(&mut self, c: &Ctx, k: usize) -> Result<()> {
        self.only_first_output(c)?;
        let (from, dims) = self.act4(c)?;
        let ks = c
            .ints("kernel_shape")
            .ok_or_else(|| c.fail("has no kernel_shape"))?;
        if ks.len() != 2 || ks.iter().any(|&x| !(1..=65535).contains(&x)) {
            return Err(c.fail(format!(
                "kernel_shape {ks:?}; expected two values (a 2-D window)"
            )));
        }
        let kk = (ks[0] as usize, ks[1] as usize);
        let s = self.pair_attr(c, "strides", 1)?;
        let d = self.pair_attr(c, "dilations", 1)?;
        let ceil = c.int("ceil_mode", 0) != 0;
        let g = self.geometry(c, (dims[2], dims[3]), kk, s, d, ceil)?;
        let avg = c.op == "AveragePool";
        let padded = g.pads.iter().any(|&p| p != 0);
        if avg && d != (1, 1) {
            return Err(c.fail("AveragePool with dilations; expected dilations 1"));
        }
        if avg && padded && c.int("count_include_pad", 0) != 0 {
            return Err(c.fail(
                "AveragePool with padding and count_include_pad 1 (padded taps counted) is not supported: the device averages the in-bounds taps; expected count_include_pad 0 or pads 0",
            ));
        }
        let mut l = refs(&[from]);
        l.kernel = Some(pair(kk.0, kk.1)?);
        l.stride = Some(pair(s.0, s.1)?);
        if !avg {
            l.dilation = Some(pair(d.0, d.1)?);
        } else if padded {
            l.count_include_pad = Some(false);
        }
        l.padding = Some(PaddingDesc(Padding::Explicit(g.pads)));
        let kind = if avg {
            LayerKind::AvgPool
        } else {
            LayerKind::MaxPool
        };
        self.push(c, k, kind, l, vec![1, dims[1], g.out.0, g.out.1])
    }

    fn op_reshape(&mut self, c: &Ctx, k: usize) -> Result<()> {
        let src = c.need_input(0)?;
        let shape = self.constant(c, c.need_input(1)?)?;
        let target = shape
            .ints()
            .ok_or_else(|| c.fail("shape is not integers"))?
            .to_vec();
        let dims = self.dims_of(c, src)?;
        let allowzero = c.int("allowzero", 0) != 0;
        let total: usize = dims.iter().product();
        let mut out: Vec<Option<usize>> = Vec::with_capacity(target.len());
        for (i, &t) in target.iter().enumerate() {
            out.push(match t {
                0 if !allowzero => Some(*dims.get(i).ok_or_else(|| {
                    c.fail(format!(
                        "shape {target:?} copies dimension {i}, which {dims:?} lacks"
                    ))
                })?),
                -1 => None,
                t if t >= 0 => Some(t as usize),
                t => return Err(c.fail(format!("shape entry {t} is negative"))),
            });
        }
        let known: usize = out.iter().flatten().product();
        let holes = out.iter().filter(|o| o.is_none()).count();
        let fill = total.checked_div(known).unwrap_or(0);
        if holes > 1 || (holes == 0 && known != total) || (holes == 1 && fill * known != total) {
            return Err(c.fail(format!(
                "shape {target:?} does not fit a tensor of dims {dims:?}"
            )));
        }
        let new: Vec<usize> = out.into_iter().map(|o| o.unwrap_or(fill)).collect();
        match self.val(c, src)?.clone() {
            Val::Const(mut kc) => {
                kc.dims = new;
                self.set_const(c, kc)
            }
            _ => {
                let (from, dims) = self.act(c, src)?;
                if new == dims {
                    self.alias(c, src)
                } else if dims.len() == 4 && new == [1, total] {
                    self.flatten(c, k, from, dims)
                } else {
                    Err(c.fail(format!(
                        "Reshape of an activation from {dims:?} to {new:?}; expected flattening to [1, C·H·W]"
                    )))
                }
            }
        }
    }

    /// A dense layer from a `[1, K]` activation and weight `[N][K]`.
    fn dense(
        &mut self,
        c: &Ctx,
        k: usize,
        from: String,
        weight: Vec<f32>,
        n: usize,
        bias: Option<Vec<f32>>,
    ) -> Result<()> {
        let name = self.peek_name(c.node, k);
        let kk = weight.len() / n.max(1);
        self.tensors
            .insert(format!("{name}.weight"), vec![n, kk], weight);
        let mut l = refs(&[from]);
        l.out_features = Some(u16::try_from(n).map_err(|_| c.fail("more than 65535 outputs"))?);
        l.bias = Some(bias.is_some());
        if let Some(b) = bias {
            self.tensors.insert(format!("{name}.bias"), vec![n], b);
        }
        self.push(c, k, LayerKind::Dense, l, vec![1, n])
    }

    fn act2(&mut self, c: &Ctx, name: &str) -> Result<(String, usize)> {
        let (from, dims) = self.act(c, name)?;
        match dims[..] {
            [1, kk] => Ok((from, kk)),
            _ => Err(c.fail(format!(
                "reads a tensor of dims {dims:?}; expected [1, K] (add a Flatten before it)"
            ))),
        }
    }

    fn op_gemm(&mut self, c: &Ctx, k: usize) -> Result<()> {
        if c.int("transA", 0) != 0 {
            return Err(c.fail("transA 1; expected transA 0 with the activation as A [1, K]"));
        }
        let (from, kk) = self.act2(c, c.need_input(0)?)?;
        let b = self.constant(c, c.need_input(1)?)?;
        let trans_b = c.int("transB", 0) != 0;
        let (rows, cols) = match b.dims[..] {
            [r, cl] => (r, cl),
            _ => return Err(c.fail(format!("B has dims {:?}; expected 2-D", b.dims))),
        };
        let (n, kb) = if trans_b { (rows, cols) } else { (cols, rows) };
        if kb != kk {
            return Err(c.fail(format!(
                "B has dims {:?} (transB {}) for an input of {kk} features",
                b.dims, trans_b as u8
            )));
        }
        let alpha = c.float("alpha").unwrap_or(1.0);
        let beta = c.float("beta").unwrap_or(1.0);
        let bv = b.floats();
        let mut w = vec![0.0f32; n * kk];
        for o in 0..n {
            for i in 0..kk {
                let v = if trans_b {
                    bv[o * kk + i]
                } else {
                    bv[i * n + o]
                };
                w[o * kk + i] = v * alpha;
            }
        }
        let bias = match c.input(2) {
            Some(name) => {
                let cb = self.constant(c, name)?;
                let v = broadcast(&cb, n, &[vec![n], vec![1, n], vec![1], vec![]]).ok_or_else(
                    || {
                        c.fail(format!(
                            "C has dims {:?}; expected [{n}], [1, {n}] or a scalar",
                            cb.dims
                        ))
                    },
                )?;
                Some(v.into_iter().map(|x| x * beta).collect())
            }
            None => None,
        };
        self.dense(c, k, from, w, n, bias)
    }

    fn op_matmul(&mut self, c: &Ctx, k: usize) -> Result<()> {
        let (from, kk) = self.act2(c, c.need_input(0)?)?;
        let b = self.constant(c, c.need_input(1)?)?;
        let n = match b.dims[..] {
            [r, n] if r == kk => n,
            _ => {
                return Err(c.fail(format!(
                    "B has dims {:?}; expected [{kk}, N] (a constant weight)",
                    b.dims
                )))
            }
        };
        let bv = b.floats();
        let mut w = vec![0.0f32; n * kk];
        for o in 0..n {
            for i in 0..kk {
                w[o * kk + i] = bv[i * n + o];
            }
        }
        self.dense(c, k, from, w, n, None)
    }

    fn op_arith(&mut self, c: &Ctx, k: usize) -> Result<()> {
        let a_name = c.need_input(0)?.to_string();
        let b_name = c.need_input(1)?.to_string();
        let a = self.val(c, &a_name)?.clone();
        let b = self.val(c, &b_name)?.clone();
        match (&a, &b) {
            (Val::Const(x), Val::Const(y)) => {
                let r = const_arith(c.op, x, y).ok_or_else(|| {
                    c.fail(format!(
                        "{} of constants of dims {:?} and {:?}; expected equal dims or a scalar",
                        c.op, x.dims, y.dims
                    ))
                })?;
                self.set_const(c, r)
            }
            (Val::Input { dims, a: ia, b: ib }, Val::Const(kc))
            | (Val::Const(kc), Val::Input { dims, a: ia, b: ib }) => {
                let input_first = matches!(a, Val::Input { .. });
                let ch = dims[1];
                let v = per_channel(kc, dims).ok_or_else(|| {
                    c.fail(format!(
                        "normalises the input with a constant of dims {:?}; expected one value or one per channel ([{ch}, 1, 1] or [1, {ch}, 1, 1])",
                        kc.dims
                    ))
                })?;
                let (mut na, mut nb) = (ia.clone(), ib.clone());
                for ch in 0..ch {
                    let v = v[ch] as f64;
                    match (c.op, input_first) {
                        ("Add", _) => nb[ch] += v,
                        ("Sub", true) => nb[ch] -= v,
                        ("Sub", false) => {
                            na[ch] = -na[ch];
                            nb[ch] = v - nb[ch];
                        }
                        ("Mul", _) => {
                            na[ch] *= v;
                            nb[ch] *= v;
                        }
                        ("Div", true) if v != 0.0 => {
                            na[ch] /= v;
                            nb[ch] /= v;
                        }
                        _ => {
                            return Err(c.fail(
                                "divides by the input or by zero; expected normalisation x / std with std ≠ 0",
                            ))
                        }
                    }
                }
                self.vals.insert(
                    c.out()?.to_string(),
                    Val::Input {
                        dims: dims.clone(),
                        a: na,
                        b: nb,
                    },
                );
                Ok(())
            }
            (Val::Act { layer, dims }, Val::Const(kc)) | (Val::Const(kc), Val::Act { layer, dims })
                if c.op == "Add" =>
            {
                let src = if matches!(a, Val::Act { .. }) { &a_name } else { &b_name };
                let layer = *layer;
                let ch = dims[1];
                let kind = self.kinds[layer];
                let sole = self.consumers.get(src).copied().unwrap_or(0) == 1;
                let v = per_channel(kc, dims);
                match (kind, sole, v) {
                    (LayerKind::Conv2d | LayerKind::Depthwise | LayerKind::Dense, true, Some(v)) => {
                        let lname = self.layer_name(layer).to_string();
                        let key = format!("{lname}.bias");
                        let mut bias = self
                            .tensors
                            .get(&key)
                            .map(|t| t.data.clone())
                            .unwrap_or_else(|| vec![0.0; ch]);
                        bias.iter_mut().zip(&v).for_each(|(b, x)| *b += x);
                        self.tensors.insert(key, vec![ch], bias);
                        self.layers[layer].bias = Some(true);
                        self.vals.insert(c.out()?.to_string(), Val::Act { layer, dims: dims.clone() });
                        Ok(())
                    }
                    _ => Err(c.fail(format!(
                        "adds a constant of dims {:?} to \"{}\"; expected a per-channel bias right after Conv, Gemm or MatMul (read by nothing else), or normalisation of the graph input",
                        kc.dims,
                        self.layer_name(layer)
                    ))),
                }
            }
            (Val::Const(_), _) | (_, Val::Const(_)) => Err(c.fail(format!(
                "{} by a constant inside the network; expected it only as normalisation of the graph input",
                c.op
            ))),
            _ if c.op == "Add" => {
                let (fa, da) = self.act(c, &a_name)?;
                let (fb, db) = self.act(c, &b_name)?;
                if da != db {
                    return Err(c.fail(format!(
                        "adds tensors of dims {da:?} and {db:?}; expected equal dims (no broadcasting)"
                    )));
                }
                self.push(c, k, LayerKind::Add, refs(&[fa, fb]), da)
            }
            _ => Err(c.fail(format!(
                "{} of two activations; expected Add (a residual connection)",
                c.op
            ))),
        }
    }
}

/// A layer reading `from` (one name, or two for add).
fn refs(from: &[String]) -> LayerDesc {
    LayerDesc {
        from: Some(Refs(from.to_vec())),
        ..LayerDesc::default()
    }
}

fn pair(a: usize, b: usize) -> Result<Pair> {
    Ok(Pair(
        u16::try_from(a).map_err(|_| Error::new("", format!("{a} exceeds 65535")))?,
        u16::try_from(b).map_err(|_| Error::new("", format!("{b} exceeds 65535")))?,
    ))
}

/// `k` as `n` values when its dims are one of `shapes` (a one-value shape
/// is repeated).
fn broadcast(k: &Const, n: usize, shapes: &[Vec<usize>]) -> Option<Vec<f32>> {
    if !shapes.contains(&k.dims) {
        return None;
    }
    let v = k.floats();
    match v.len() {
        1 => Some(vec![v[0]; n]),
        l if l == n => Some(v),
        _ => None,
    }
}

/// One value per channel of an activation with ONNX `dims`, from a
/// constant that broadcasts along everything but the channel axis.
fn per_channel(k: &Const, dims: &[usize]) -> Option<Vec<f32>> {
    let ch = dims[1];
    let shapes: Vec<Vec<usize>> = if dims.len() == 4 {
        vec![
            vec![],
            vec![1],
            vec![1, 1, 1],
            vec![1, 1, 1, 1],
            vec![ch, 1, 1],
            vec![1, ch, 1, 1],
        ]
    } else {
        vec![vec![], vec![1], vec![ch], vec![1, ch]]
    };
    broadcast(k, ch, &shapes)
}

/// Elementwise arithmetic of two constants (equal dims or one scalar).
fn const_arith(op: &str, x: &Const, y: &Const) -> Option<Const> {
    let dims = if x.len() == 1 && x.dims.len() <= y.dims.len() {
        y.dims.clone()
    } else if y.len() == 1 || x.dims == y.dims {
        x.dims.clone()
    } else {
        return None;
    };
    let n = x.len().max(y.len());
    let at = |v: &[i64], i: usize| if v.len() == 1 { v[0] } else { v[i] };
    let values = match (x.ints(), y.ints()) {
        (Some(a), Some(b)) => Values::I(
            (0..n)
                .map(|i| {
                    let (p, q) = (at(a, i), at(b, i));
                    match op {
                        "Add" => p.checked_add(q),
                        "Sub" => p.checked_sub(q),
                        "Mul" => p.checked_mul(q),
                        _ => p.checked_div(q),
                    }
                })
                .collect::<Option<Vec<i64>>>()?,
        ),
        _ => {
            let (a, b) = (x.floats(), y.floats());
            let atf = |v: &[f32], i: usize| if v.len() == 1 { v[0] } else { v[i] };
            Values::F(
                (0..n)
                    .map(|i| {
                        let (p, q) = (atf(&a, i), atf(&b, i));
                        match op {
                            "Add" => p + q,
                            "Sub" => p - q,
                            "Mul" => p * q,
                            _ => p / q,
                        }
                    })
                    .collect(),
            )
        }
    };
    Some(Const { dims, values })
}
