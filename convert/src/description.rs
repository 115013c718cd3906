//! The model description: our TOML format for one deployment job (labels,
//! input normalization, layer list, weight and image folders), its parsing
//! with errors that name file, line, layer and key, and shape validation.

use std::collections::{BTreeSet, HashMap};
use std::fmt;
use std::path::{Path, PathBuf};

use midge_runtime::{
    repr::{Padding, Window},
    Shape,
};
use serde::de::{self, Deserializer, SeqAccess, Visitor};
use serde::ser::{SerializeSeq, Serializer};
use serde::{Deserialize, Serialize};

use crate::{limits, Error, Result};

/// Numeric precision of a layer on the device.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Precision {
    #[default]
    Int8,
    Fp16,
}

impl Precision {
    pub const fn name(self) -> &'static str {
        match self {
            Precision::Int8 => "int8",
            Precision::Fp16 => "fp16",
        }
    }
}

/// One deployment job as written in a description file. Relative paths are
/// resolved against the folder of the file by [`Description::load`] and
/// [`Description::from_toml_str`], so the fields hold usable paths.
///
/// ```toml
/// name = "capcheck-plain"
/// labels = ["sealed", "missing", "tilted", "torn"]
/// weights = "weights.safetensors"   # optional; relative to this file
/// # onnx = "model.onnx"             # instead of weights and [[layer]] lists:
///                                   # see crate::onnx::describe
/// calibration = "calib"             # optional folder of images
/// validation = "val"                # optional, one sub-folder per label
/// target = "../targets/m4-80.toml"  # optional default target profile
/// precision = "int8"                # layer default: "int8" | "fp16"
/// [input]
/// height = 32
/// width = 32
/// channels = 1
/// mean = [0.5]        # per channel, after pixel_range (default 0)
/// std = [0.25]        # per channel (default 1)
/// pixel_range = 1.0   # byte 255 maps to this before normalization
/// resize = true       # resize other sizes instead of rejecting them
/// [[layer]]
/// name = "stem"       # default "<op><n>", n = 1-based layer number
/// op = "conv2d"       # conv2d depthwise maxpool avgpool global_avgpool
///                     # dense add relu relu6 flatten batchnorm
/// tensor = "features.0"  # safetensors prefix; default: the name
/// from = "input"      # or ["a", "b"] for add; default: previous layer
/// out_channels = 8    # conv2d; dense takes out_features
/// kernel = 3          # or [kh, kw]
/// stride = 1          # or [sh, sw]; pools default to the kernel
/// dilation = 1        # conv2d, depthwise, maxpool
/// padding = "same"    # "valid" | "same" | p | [ph, pw] | [t, l, b, r]
/// bias = true         # conv2d, depthwise, dense (default true)
/// eps = 1e-5          # batchnorm
/// count_include_pad = false  # avgpool: padding allowed, in-bounds average
/// precision = "fp16"  # per-layer override
/// ```
///
/// Sizes (input, channels, windows, layer and label counts, name lengths,
/// weight and activation bytes) are bounded by `crate::limits`, whose
/// table is README's "Limits". Keys that do not apply to a layer's op are errors. Avgpool takes
/// padding only with `count_include_pad = false` (PyTorch's default counts padded taps).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Description {
    pub name: String,
    pub labels: Vec<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub weights: Option<PathBuf>,
    /// An ONNX model instead of `weights` and a layer list (see
    /// `crate::onnx::describe`): the layers are read from its graph.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub onnx: Option<PathBuf>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub calibration: Option<PathBuf>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub validation: Option<PathBuf>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub target: Option<PathBuf>,
    /// Default precision of the layers.
    #[serde(default)]
    pub precision: Precision,
    pub input: InputDesc,
    #[serde(rename = "layer")]
    pub layers: Vec<LayerDesc>,
    /// The file this description came from (for messages); not a TOML key.
    #[serde(skip)]
    pub origin: PathBuf,
    /// What the `onnx` model gave besides layers: weights, quantization
    /// parameters of QDQ pairs, notes; not a TOML key.
    #[serde(skip)]
    pub onnx_import: Option<crate::onnx::Imported>,
}

/// The `[input]` table.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InputDesc {
    pub height: u16,
    pub width: u16,
    pub channels: u16,
    /// Per channel, in normalized pixel units (after the pixel range is
    /// applied); default 0 for every channel.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mean: Option<Vec<f32>>,
    /// Per channel; default 1 for every channel.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub std: Option<Vec<f32>>,
    /// The value a byte 255 maps to before normalization (default 1.0).
    #[serde(default = "one")]
    pub pixel_range: f32,
    /// Resize images of another size instead of rejecting them.
    #[serde(default)]
    pub resize: bool,
}

fn one() -> f32 {
    1.0
}

impl InputDesc {
    /// Per-channel mean, defaults filled in.
    pub fn mean_values(&self) -> Vec<f32> {
        self.mean
            .clone()
            .unwrap_or_else(|| vec![0.0; self.channels as usize])
    }
    /// Per-channel standard deviation, defaults filled in.
    pub fn std_values(&self) -> Vec<f32> {
        self.std
            .clone()
            .unwrap_or_else(|| vec![1.0; self.channels as usize])
    }
    pub fn shape(&self) -> Shape {
        Shape::new(self.height, self.width, self.channels)
    }
}

/// One `[[layer]]` table, as written. [`Description::topology`] checks it
/// and turns it into a [`LayerInfo`].
#[derive(Clone, Debug, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LayerDesc {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub name: Option<String>,
    pub op: String,
    /// safetensors prefix (`<tensor>.weight`, `<tensor>.bias`, ...);
    /// defaults to the layer name.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tensor: Option<String>,
    /// Earlier layer names or "input"; default: the previous layer.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub from: Option<Refs>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub out_channels: Option<u16>,
    /// Dense layers: output size (`out_channels` is accepted too).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub out_features: Option<u16>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub kernel: Option<Pair>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stride: Option<Pair>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dilation: Option<Pair>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub padding: Option<PaddingDesc>,
    /// Default true (PyTorch's default for Conv2d and Linear).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub bias: Option<bool>,
    /// BatchNorm epsilon; default 1e-5 (PyTorch's default).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub eps: Option<f32>,
    /// Avgpool: `false` allows padding, averaged over the in-bounds taps
    /// only (ONNX's default); `true` (PyTorch's default) with padding is
    /// refused, as the device never counts padded taps.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub count_include_pad: Option<bool>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub precision: Option<Precision>,
}

/// `3` or `[3, 5]`: a (height, width) pair.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Pair(pub u16, pub u16);

/// `"input"`/`"stem"` or `["stem", "block1"]`.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Refs(pub Vec<String>);

/// `"valid"`, `"same"`, `1`, `[ph, pw]` or `[top, left, bottom, right]`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PaddingDesc(pub Padding);

/// The operation of a description layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum LayerKind {
    Conv2d,
    Depthwise,
    MaxPool,
    AvgPool,
    GlobalAvgPool,
    Dense,
    Add,
    Relu,
    Relu6,
    Flatten,
    BatchNorm,
}

impl LayerKind {
    pub const ALL: [LayerKind; 11] = [
        LayerKind::Conv2d,
        LayerKind::Depthwise,
        LayerKind::MaxPool,
        LayerKind::AvgPool,
        LayerKind::GlobalAvgPool,
        LayerKind::Dense,
        LayerKind::Add,
        LayerKind::Relu,
        LayerKind::Relu6,
        LayerKind::Flatten,
        LayerKind::BatchNorm,
    ];

    /// The name used in description files.
    pub const fn name(self) -> &'static str {
        match self {
            LayerKind::Conv2d => "conv2d",
            LayerKind::Depthwise => "depthwise",
            LayerKind::MaxPool => "maxpool",
            LayerKind::AvgPool => "avgpool",
            LayerKind::GlobalAvgPool => "global_avgpool",
            LayerKind::Dense => "dense",
            LayerKind::Add => "add",
            LayerKind::Relu => "relu",
            LayerKind::Relu6 => "relu6",
            LayerKind::Flatten => "flatten",
            LayerKind::BatchNorm => "batchnorm",
        }
    }

    pub fn from_name(name: &str) -> Option<LayerKind> {
        LayerKind::ALL.into_iter().find(|k| k.name() == name)
    }

    /// Layers that read weights from the safetensors file.
    pub const fn has_tensors(self) -> bool {
        matches!(
            self,
            LayerKind::Conv2d | LayerKind::Depthwise | LayerKind::Dense | LayerKind::BatchNorm
        )
    }

    /// Keys (besides `name`, `op`, `from`) a layer of this kind accepts.
    fn keys(self) -> &'static [&'static str] {
        match self {
            LayerKind::Conv2d => &[
                "tensor",
                "out_channels",
                "kernel",
                "stride",
                "dilation",
                "padding",
                "bias",
                "precision",
            ],
            LayerKind::Depthwise => &[
                "tensor",
                "kernel",
                "stride",
                "dilation",
                "padding",
                "bias",
                "precision",
            ],
            LayerKind::MaxPool => &["kernel", "stride", "dilation", "padding", "precision"],
            LayerKind::AvgPool => &[
                "kernel",
                "stride",
                "padding",
                "count_include_pad",
                "precision",
            ],
            LayerKind::GlobalAvgPool | LayerKind::Add => &["precision"],
            LayerKind::Dense => &[
                "tensor",
                "out_features",
                "out_channels",
                "bias",
                "precision",
            ],
            LayerKind::BatchNorm => &["tensor", "eps"],
            LayerKind::Relu | LayerKind::Relu6 | LayerKind::Flatten => &[],
        }
    }
}

impl fmt::Display for LayerKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// A checked layer: kind, resolved inputs, window and shapes.
#[derive(Clone, Debug, PartialEq)]
pub struct LayerInfo {
    /// Position in `Description::layers` (0-based; messages say `index + 1`).
    pub index: usize,
    pub name: String,
    pub kind: LayerKind,
    /// Tensor ids read: 0 = the normalized input, k ≥ 1 = output of layer k−1.
    pub inputs: Vec<usize>,
    pub in_shapes: Vec<Shape>,
    /// Flatten: 1×1×(H·W·C); dense: 1×1×out.
    pub out_shape: Shape,
    /// Explicit window of conv2d, depthwise, maxpool and avgpool.
    pub window: Option<Window>,
    /// Conv2d, depthwise, dense: whether a `<tensor>.bias` is read.
    pub bias: bool,
    /// safetensors prefix of conv2d, depthwise, dense and batchnorm.
    pub tensor: Option<String>,
    /// BatchNorm epsilon.
    pub eps: f32,
    pub precision: Precision,
}

impl LayerInfo {
    /// Names and PyTorch shapes of the tensors this layer reads.
    pub fn expected_tensors(&self) -> Vec<(String, Vec<usize>)> {
        let Some(prefix) = &self.tensor else {
            return Vec::new();
        };
        let out_c = self.out_shape.c as usize;
        let in_c = self.in_shapes.first().map_or(0, |s| s.c as usize);
        let mut v = Vec::new();
        match self.kind {
            LayerKind::Conv2d | LayerKind::Depthwise => {
                let w = self.window.unwrap_or_default();
                let per_group = if self.kind == LayerKind::Conv2d {
                    in_c
                } else {
                    1
                };
                v.push((
                    format!("{prefix}.weight"),
                    vec![out_c, per_group, w.kh as usize, w.kw as usize],
                ));
            }
            LayerKind::Dense => {
                let in_n = self.in_shapes.first().map_or(0, |s| s.elems());
                v.push((format!("{prefix}.weight"), vec![out_c, in_n]));
            }
            LayerKind::BatchNorm => {
                for part in ["weight", "bias", "running_mean", "running_var"] {
                    v.push((format!("{prefix}.{part}"), vec![out_c]));
                }
                return v;
            }
            _ => return v,
        }
        if self.bias {
            v.push((format!("{prefix}.bias"), vec![out_c]));
        }
        v
    }

    /// Tensors that may be present and are ignored (BatchNorm's
    /// `num_batches_tracked`, shape `[]`).
    pub fn optional_tensors(&self) -> Vec<String> {
        match (&self.tensor, self.kind) {
            (Some(p), LayerKind::BatchNorm) => vec![format!("{p}.num_batches_tracked")],
            _ => Vec::new(),
        }
    }
}

/// PyTorch's default BatchNorm epsilon.
pub const DEFAULT_BN_EPS: f32 = 1e-5;

impl Description {
    /// Read, parse and validate a description file.
    pub fn load(path: &Path) -> Result<Description> {
        let text = crate::files::read_text(path, &crate::limits::DESCRIPTION_FILE)?;
        Description::from_toml_str(&text, path)
    }

    /// Parse and validate description text; `origin` is the file it came
    /// from (for messages and to resolve relative paths).
    pub fn from_toml_str(text: &str, origin: &Path) -> Result<Description> {
        let place = origin.display().to_string();
        let table: toml::Table = toml::from_str(text).map_err(|e| toml_error(&place, text, &e))?;
        let mut desc: Description = if table.contains_key("onnx") {
            crate::onnx::describe::from_table(table, origin)?
        } else {
            toml::from_str(text).map_err(|e| toml_error(&place, text, &e))?
        };
        desc.origin = origin.to_path_buf();
        let base = origin.parent().unwrap_or(Path::new(""));
        for p in [
            &mut desc.weights,
            &mut desc.onnx,
            &mut desc.calibration,
            &mut desc.validation,
            &mut desc.target,
        ]
        .into_iter()
        .flatten()
        {
            if p.is_relative() {
                *p = base.join(&*p);
            }
        }
        desc.topology()?;
        Ok(desc)
    }

    fn place(&self) -> String {
        self.origin.display().to_string()
    }

    fn layer_place(&self, i: usize, name: &str) -> String {
        format!("{}: layer {} ({})", self.place(), i + 1, name)
    }

    /// Name of layer `i`: its `name` or `<op><i+1>`.
    pub fn layer_name(&self, i: usize) -> String {
        let l = &self.layers[i];
        l.name
            .clone()
            .unwrap_or_else(|| format!("{}{}", l.op, i + 1))
    }

    /// Shape of the normalized input tensor.
    pub fn input_shape(&self) -> Shape {
        self.input.shape()
    }

    /// Check the description and resolve every layer: inputs, windows,
    /// shapes. Called by `load`; call again after editing a description.
    pub fn topology(&self) -> Result<Vec<LayerInfo>> {
        let place = self.place();
        self.check_top(&place)?;
        let names: Vec<String> = (0..self.layers.len()).map(|i| self.layer_name(i)).collect();
        let mut index_of: HashMap<&str, usize> = HashMap::new();
        for (i, n) in names.iter().enumerate() {
            if n == "input" {
                return Err(Error::new(
                    self.layer_place(i, n),
                    "the name \"input\" is reserved for the model input",
                ));
            }
            if let Some(j) = index_of.insert(n.as_str(), i) {
                return Err(Error::new(
                    self.layer_place(i, n),
                    format!("name \"{n}\" is already used by layer {}", j + 1),
                ));
            }
        }
        let mut shapes = vec![self.input.shape()];
        let mut out = Vec::with_capacity(self.layers.len());
        for (i, l) in self.layers.iter().enumerate() {
            let lp = self.layer_place(i, &names[i]);
            let info = self.resolve_layer(i, l, &names, &index_of, &shapes, &lp)?;
            limits::check_layer(&place, &info)?;
            shapes.push(info.out_shape);
            out.push(info);
        }
        // Flatten only feeds dense layers (it is a view of a dense input).
        for info in &out {
            for &t in &info.inputs {
                if t >= 1 && out[t - 1].kind == LayerKind::Flatten && info.kind != LayerKind::Dense
                {
                    return Err(Error::new(
                        self.layer_place(info.index, &info.name),
                        format!(
                            "reads flatten layer \"{}\"; only dense layers may read a flatten",
                            out[t - 1].name
                        ),
                    ));
                }
            }
        }
        limits::check_description(&place, self.input.shape().elems() as u64, &out)?;
        let last = out.last().expect("checked non-empty");
        let s = last.in_shapes[0];
        if last.kind == LayerKind::Flatten && s.h as usize * s.w as usize > 1 && s.c > 1 {
            return Err(Error::new(
                self.layer_place(last.index, &last.name),
                format!(
                    "the model ends in a flatten of a {}×{}×{} tensor: its output order (PyTorch's C,H,W) is not the device's H,W,C; end in a dense or global_avgpool",
                    s.h, s.w, s.c
                ),
            ));
        }
        if last.out_shape.elems() != self.labels.len() {
            return Err(Error::new(
                format!("{place}: labels"),
                format!(
                    "{} labels, but the last layer \"{}\" has {} outputs ({}×{}×{})",
                    self.labels.len(),
                    last.name,
                    last.out_shape.elems(),
                    last.out_shape.h,
                    last.out_shape.w,
                    last.out_shape.c
                ),
            ));
        }
        Ok(out)
    }

    fn check_top(&self, place: &str) -> Result<()> {
        limits::check(
            place,
            "name (bytes)",
            self.name.len() as u64,
            limits::MAX_NAME_BYTES,
        )?;
        if self.labels.is_empty() {
            return Err(Error::new(format!("{place}: labels"), "no labels given"));
        }
        limits::check(
            place,
            "labels (count)",
            self.labels.len() as u64,
            limits::MAX_LABELS,
        )?;
        let mut seen = BTreeSet::new();
        for (k, l) in self.labels.iter().enumerate() {
            let key = format!("labels[{k}]");
            if l.is_empty() {
                return Err(Error::new(
                    format!("{place}: {key}"),
                    "label is empty; expected a name (it is also the class folder's name)",
                ));
            }
            limits::check(
                place,
                &format!("{key} (bytes)"),
                l.len() as u64,
                limits::MAX_LABEL_BYTES,
            )?;
            if !seen.insert(l) {
                return Err(Error::new(
                    format!("{place}: labels"),
                    format!("label \"{l}\" appears twice"),
                ));
            }
        }
        let inp = &self.input;
        let ip = format!("{place}: input");
        for (key, v, limit) in [
            ("input.height", inp.height, limits::MAX_INPUT_SIDE),
            ("input.width", inp.width, limits::MAX_INPUT_SIDE),
            ("input.channels", inp.channels, limits::MAX_CHANNELS),
        ] {
            limits::check(place, key, v.into(), limit)?;
        }
        if inp.height == 0 || inp.width == 0 || inp.channels == 0 {
            return Err(Error::new(
                ip,
                format!(
                    "height, width and channels must be at least 1, found {}×{}×{}",
                    inp.height, inp.width, inp.channels
                ),
            ));
        }
        for (key, v) in [("mean", &inp.mean), ("std", &inp.std)] {
            if let Some(v) = v {
                if v.len() != inp.channels as usize {
                    return Err(Error::new(
                        format!("{ip}.{key}"),
                        format!(
                            "expected {} values (one per channel), found {}",
                            inp.channels,
                            v.len()
                        ),
                    ));
                }
                if let Some(x) = v.iter().find(|x| !x.is_finite()) {
                    return Err(Error::new(
                        format!("{ip}.{key}"),
                        format!("value {x} is not finite"),
                    ));
                }
            }
        }
        if let Some(s) = inp.std_values().iter().find(|&&s| s <= 0.0) {
            return Err(Error::new(
                format!("{ip}.std"),
                format!("must be positive, found {s}"),
            ));
        }
        if !(inp.pixel_range.is_finite() && inp.pixel_range > 0.0) {
            return Err(Error::new(
                format!("{ip}.pixel_range"),
                format!("must be positive, found {}", inp.pixel_range),
            ));
        }
        limits::check_f32(
            place,
            "input.pixel_range",
            inp.pixel_range,
            limits::MAX_PIXEL_RANGE,
        )?;
        if self.layers.is_empty() {
            return Err(Error::new(place, "no [[layer]] given"));
        }
        limits::check(
            place,
            "[[layer]] tables",
            self.layers.len() as u64,
            limits::MAX_LAYERS,
        )?;
        for (i, l) in self.layers.iter().enumerate() {
            let lp = format!("{place}: layer {}", i + 1);
            let refs = l.from.iter().flat_map(|r| r.0.iter());
            for (key, s) in l
                .name
                .iter()
                .map(|n| ("name", n))
                .chain(l.tensor.iter().map(|n| ("tensor", n)))
                .chain(refs.map(|n| ("from", n)))
            {
                limits::check(
                    &lp,
                    &format!("{key} (bytes)"),
                    s.len() as u64,
                    limits::MAX_NAME_BYTES,
                )?;
            }
        }
        Ok(())
    }

    /// Resolves one `[[layer]]` table: its op, its inputs, its output shape
    /// and its window. Each step is a function below so each rule has one
    /// place.
    #[allow(clippy::too_many_arguments)]
    fn resolve_layer(
        &self,
        i: usize,
        l: &LayerDesc,
        names: &[String],
        index_of: &HashMap<&str, usize>,
        shapes: &[Shape],
        lp: &str,
    ) -> Result<LayerInfo> {
        let err = |m: String| Error::new(lp, m);
        let kind = LayerKind::from_name(&l.op).ok_or_else(|| {
            let all: Vec<&str> = LayerKind::ALL.iter().map(|k| k.name()).collect();
            err(format!(
                "unknown op \"{}\"; expected one of {}",
                l.op,
                all.join(", ")
            ))
        })?;
        check_keys(kind, l, lp)?;
        let (refs, inputs) = resolve_inputs(kind, l, i, names, index_of, lp)?;
        let in_shapes: Vec<Shape> = inputs.iter().map(|&t| shapes[t]).collect();
        let ins = in_shapes[0];
        let mut window = None;
        let bias = matches!(
            kind,
            LayerKind::Conv2d | LayerKind::Depthwise | LayerKind::Dense
        ) && l.bias.unwrap_or(true);
        let out_shape = match kind {
            LayerKind::Conv2d | LayerKind::Depthwise | LayerKind::MaxPool | LayerKind::AvgPool => {
                let (shape, w) = windowed_shape(kind, l, ins, lp)?;
                window = Some(w);
                shape
            }
            LayerKind::GlobalAvgPool => Shape::new(1, 1, ins.c),
            LayerKind::Dense => dense_shape(l, ins, lp)?,
            LayerKind::Add => {
                if in_shapes[0] != in_shapes[1] {
                    let (a, b) = (in_shapes[0], in_shapes[1]);
                    return Err(err(format!(
                        "add inputs differ in shape: \"{}\" is {}×{}×{}, \"{}\" is {}×{}×{}",
                        refs[0], a.h, a.w, a.c, refs[1], b.h, b.w, b.c
                    )));
                }
                ins
            }
            LayerKind::Relu | LayerKind::Relu6 | LayerKind::BatchNorm => ins,
            LayerKind::Flatten => {
                let n = u16::try_from(ins.elems()).map_err(|_| {
                    err(format!(
                        "flattened size {}×{}×{} = {} exceeds 65535",
                        ins.h,
                        ins.w,
                        ins.c,
                        ins.elems()
                    ))
                })?;
                Shape::new(1, 1, n)
            }
        };
        let eps = l.eps.unwrap_or(DEFAULT_BN_EPS);
        if kind == LayerKind::BatchNorm && !(eps.is_finite() && eps >= 0.0) {
            return Err(err(format!("`eps` must be non-negative, found {eps}")));
        }
        let tensor = kind
            .has_tensors()
            .then(|| l.tensor.clone().unwrap_or_else(|| names[i].clone()));
        Ok(LayerInfo {
            index: i,
            name: names[i].clone(),
            kind,
            inputs,
            in_shapes,
            out_shape,
            window,
            bias,
            tensor,
            eps,
            precision: l.precision.unwrap_or(self.precision),
        })
    }

    /// Names and PyTorch shapes of every tensor the description reads
    /// (conv2d O×I×kH×kW, depthwise C×1×kH×kW, dense O×I, batchnorm
    /// weight/bias/running_mean/running_var `[C]`). BatchNorm's optional
    /// `num_batches_tracked` is not listed (see `LayerInfo::optional_tensors`).
    pub fn expected_tensors(&self) -> Result<Vec<(String, Vec<usize>)>> {
        Ok(self
            .topology()?
            .iter()
            .flat_map(|l| l.expected_tensors())
            .collect())
    }

    /// A variant for architecture sweeps: every conv2d `out_channels` and
    /// dense output multiplied by `width` (rounded, at least 1), and the
    /// input size replaced when `input_hw` is given. Layers that produce the
    /// final output (traced back from the last layer through channel-keeping
    /// ops) keep their size, so the labels still fit. The weights path is
    /// (and ONNX model) dropped when anything changed (the stored weights no longer fit).
    /// Call `topology()` on the result: a smaller input may not fit a kernel.
    pub fn scaled(&self, width: f32, input_hw: Option<(u16, u16)>) -> Description {
        let mut d = self.clone();
        let names: Vec<String> = (0..self.layers.len()).map(|i| self.layer_name(i)).collect();
        let index_of: HashMap<&str, usize> = names
            .iter()
            .enumerate()
            .map(|(i, n)| (n.as_str(), i))
            .collect();
        // Layers whose output channels fix the final output size.
        let mut fixed = vec![false; self.layers.len()];
        let mut stack: Vec<usize> = self.layers.len().checked_sub(1).into_iter().collect();
        let mut seen = vec![false; self.layers.len()];
        while let Some(i) = stack.pop() {
            if std::mem::replace(&mut seen[i], true) {
                continue;
            }
            let l = &self.layers[i];
            match LayerKind::from_name(&l.op) {
                Some(LayerKind::Conv2d) | Some(LayerKind::Dense) | None => fixed[i] = true,
                Some(_) => {
                    let refs: Vec<String> = match &l.from {
                        Some(r) => r.0.clone(),
                        None if i == 0 => vec![],
                        None => vec![names[i - 1].clone()],
                    };
                    stack.extend(
                        refs.iter()
                            .filter_map(|r| index_of.get(r.as_str()).copied()),
                    );
                }
            }
        }
        let scale = |c: u16| -> u16 {
            let v = (c as f32 * width).round();
            if v.is_finite() {
                v.clamp(1.0, u16::MAX as f32) as u16
            } else {
                1
            }
        };
        for (i, l) in d.layers.iter_mut().enumerate() {
            if fixed[i] {
                continue;
            }
            l.out_channels = l.out_channels.map(scale);
            l.out_features = l.out_features.map(scale);
        }
        if let Some((h, w)) = input_hw {
            d.input.height = h;
            d.input.width = w;
        }
        if d != *self {
            d.weights = None;
            d.onnx = None;
            d.onnx_import = None;
        }
        d
    }

    /// The description as TOML text (paths as stored, i.e. resolved).
    pub fn to_toml_string(&self) -> Result<String> {
        toml::to_string(self)
            .map_err(|e| Error::new(self.place(), format!("cannot write TOML: {e}")))
    }
}

/// One-line error from a TOML parse error: file, line, layer and message.
/// Refuses keys that do not apply to the layer's op.
fn check_keys(kind: LayerKind, l: &LayerDesc, lp: &str) -> Result<()> {
    let given: [(&str, bool); 11] = [
        ("tensor", l.tensor.is_some()),
        ("out_channels", l.out_channels.is_some()),
        ("out_features", l.out_features.is_some()),
        ("kernel", l.kernel.is_some()),
        ("stride", l.stride.is_some()),
        ("dilation", l.dilation.is_some()),
        ("padding", l.padding.is_some()),
        ("bias", l.bias.is_some()),
        ("eps", l.eps.is_some()),
        ("count_include_pad", l.count_include_pad.is_some()),
        ("precision", l.precision.is_some()),
    ];
    match given
        .iter()
        .find(|(key, set)| *set && !kind.keys().contains(key))
    {
        None => Ok(()),
        Some((key, _)) => Err(Error::new(
            lp,
            format!(
                "key \"{key}\" does not apply to {kind}; {kind} takes {}",
                if kind.keys().is_empty() {
                    "no keys besides name, op and from".to_string()
                } else {
                    kind.keys().join(", ")
                }
            ),
        )),
    }
}

/// The layer's input references (`from`, or the previous layer) and the
/// tensor index each one names (0 = the model input, j + 1 = layer j).
fn resolve_inputs(
    kind: LayerKind,
    l: &LayerDesc,
    i: usize,
    names: &[String],
    index_of: &HashMap<&str, usize>,
    lp: &str,
) -> Result<(Vec<String>, Vec<usize>)> {
    let err = |m: String| Error::new(lp, m);
    let refs: Vec<String> = match &l.from {
        Some(r) => r.0.clone(),
        None if i == 0 => vec!["input".into()],
        None => vec![names[i - 1].clone()],
    };
    let arity = if kind == LayerKind::Add { 2 } else { 1 };
    if refs.len() != arity {
        return Err(err(format!(
            "{kind} reads {arity} input{}, `from` names {}",
            if arity == 1 { "" } else { "s" },
            refs.len()
        )));
    }
    let mut inputs = Vec::with_capacity(arity);
    for r in &refs {
        let t = if r == "input" {
            0
        } else {
            match index_of.get(r.as_str()) {
                Some(&j) if j < i => j + 1,
                Some(&j) if j == i => {
                    return Err(err(format!("input \"{r}\" refers to the layer itself")))
                }
                Some(_) => return Err(err(format!("input \"{r}\" refers to a later layer"))),
                None => {
                    return Err(err(format!(
                        "input \"{r}\" names no layer (use \"input\" or an earlier layer's name)"
                    )))
                }
            }
        };
        inputs.push(t);
    }
    Ok((refs, inputs))
}

/// Output shape and resolved window of a conv2d, depthwise or pool layer.
fn windowed_shape(kind: LayerKind, l: &LayerDesc, ins: Shape, lp: &str) -> Result<(Shape, Window)> {
    let err = |m: String| Error::new(lp, m);
    let Some(Pair(kh, kw)) = l.kernel else {
        return Err(err(format!("{kind} needs a `kernel`")));
    };
    let is_pool = matches!(kind, LayerKind::MaxPool | LayerKind::AvgPool);
    let stride = match l.stride {
        Some(s) => s,
        None if is_pool => Pair(kh, kw), // PyTorch pools: stride defaults to the kernel
        None => Pair(1, 1),
    };
    let dil = l.dilation.unwrap_or(Pair(1, 1));
    for (key, Pair(a, b)) in [
        ("kernel", Pair(kh, kw)),
        ("stride", stride),
        ("dilation", dil),
    ] {
        if a == 0 || b == 0 {
            return Err(err(format!("`{key}` must be at least 1, found [{a}, {b}]")));
        }
        limits::check(lp, key, a.max(b).into(), limits::MAX_WINDOW_SIDE)?;
    }
    let pad = l.padding.map_or(Padding::Valid, |p| p.0);
    let w = pad.resolve(
        (ins.h, ins.w),
        (kh, kw),
        (stride.0, stride.1),
        (dil.0, dil.1),
    );
    let (oh, ow) = w.output_hw(ins.h, ins.w).ok_or_else(|| {
        err(format!(
            "kernel {kh}×{kw} (dilation {}×{}) does not fit the padded input {}×{} (input {}×{}, padding top {} left {} bottom {} right {})",
            dil.0, dil.1,
            ins.h as u32 + w.pad_top as u32 + w.pad_bottom as u32,
            ins.w as u32 + w.pad_left as u32 + w.pad_right as u32,
            ins.h, ins.w, w.pad_top, w.pad_left, w.pad_bottom, w.pad_right
        ))
    })?;
    let padded = w.pad_top | w.pad_left | w.pad_bottom | w.pad_right != 0;
    if kind == LayerKind::AvgPool && padded && l.count_include_pad != Some(false) {
        return Err(err(
            "avgpool with padding is not supported: PyTorch counts padded taps by default (count_include_pad) while midge averages in-bounds taps only; use padding = \"valid\", or count_include_pad = false when the model averages in-bounds taps".into(),
        ));
    }
    if kind == LayerKind::MaxPool {
        // PyTorch: padding at most half the (effective) kernel.
        let eh = (dil.0 as u32 * (kh as u32 - 1)).div_ceil(2);
        let ew = (dil.1 as u32 * (kw as u32 - 1)).div_ceil(2);
        if w.pad_top.max(w.pad_bottom) as u32 > eh || w.pad_left.max(w.pad_right) as u32 > ew {
            return Err(err(format!(
                "maxpool padding (top {} left {} bottom {} right {}) exceeds half the kernel",
                w.pad_top, w.pad_left, w.pad_bottom, w.pad_right
            )));
        }
    }
    let c = match kind {
        LayerKind::Conv2d => l
            .out_channels
            .ok_or_else(|| err("conv2d needs `out_channels`".into()))?,
        _ => ins.c,
    };
    if c == 0 {
        return Err(err("`out_channels` must be at least 1".into()));
    }
    limits::check(lp, "out_channels", c.into(), limits::MAX_CHANNELS)?;
    Ok((Shape::new(oh, ow, c), w))
}

/// Output shape of a dense layer (`out_features`, or `out_channels` as its
/// synonym) reading a 1×1×C tensor.
fn dense_shape(l: &LayerDesc, ins: Shape, lp: &str) -> Result<Shape> {
    let err = |m: String| Error::new(lp, m);
    if ins.h != 1 || ins.w != 1 {
        return Err(err(format!(
            "dense reads a {}×{}×{} tensor; add a flatten layer before it (or a global_avgpool)",
            ins.h, ins.w, ins.c
        )));
    }
    let (n, key) = match (l.out_features, l.out_channels) {
        (Some(_), Some(_)) => {
            return Err(err(
                "give either `out_features` or `out_channels`, not both".into(),
            ))
        }
        (Some(n), None) => (n, "out_features"),
        (None, Some(n)) => (n, "out_channels"),
        (None, None) => return Err(err("dense needs `out_features`".into())),
    };
    if n == 0 {
        return Err(err("`out_features` must be at least 1".into()));
    }
    limits::check(lp, key, n.into(), limits::MAX_CHANNELS)?;
    Ok(Shape::new(1, 1, n))
}

fn toml_error(place: &str, text: &str, e: &toml::de::Error) -> Error {
    let mut where_ = place.to_string();
    if let Some(span) = e.span() {
        let before = &text[..span.start.min(text.len())];
        let line = before.matches('\n').count() + 1;
        where_ = format!("{place}: line {line}");
        let layer = before
            .lines()
            .filter(|l| l.trim_start().starts_with("[[layer]]"))
            .count();
        let in_other_table = before
            .lines()
            .rev()
            .find(|l| l.trim_start().starts_with('['))
            .is_some_and(|l| !l.trim_start().starts_with("[[layer]]"));
        if layer > 0 && !in_other_table {
            where_ = format!("{where_}: layer {layer}");
        }
    }
    Error::new(where_, e.message().trim().replace('\n', " "))
}

// ---- serde for the small value types ----

fn to_u16<E: de::Error>(v: i64) -> std::result::Result<u16, E> {
    u16::try_from(v).map_err(|_| E::custom(format!("expected 0..=65535, found {v}")))
}

fn seq_u16<'de, A: SeqAccess<'de>>(mut seq: A) -> std::result::Result<Vec<u16>, A::Error> {
    let mut v = Vec::new();
    while let Some(x) = seq.next_element::<i64>()? {
        v.push(to_u16(x)?);
    }
    Ok(v)
}

impl<'de> Deserialize<'de> for Pair {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = Pair;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("an integer or an array [height, width]")
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> std::result::Result<Pair, E> {
                let v = to_u16(v)?;
                Ok(Pair(v, v))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> std::result::Result<Pair, E> {
                self.visit_i64(i64::try_from(v).unwrap_or(-1))
            }
            fn visit_seq<A: SeqAccess<'de>>(self, seq: A) -> std::result::Result<Pair, A::Error> {
                match seq_u16(seq)?[..] {
                    [h, w] => Ok(Pair(h, w)),
                    ref v => Err(de::Error::custom(format!(
                        "expected [height, width], found {} values",
                        v.len()
                    ))),
                }
            }
        }
        d.deserialize_any(V)
    }
}

impl Serialize for Pair {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        if self.0 == self.1 {
            s.serialize_u16(self.0)
        } else {
            [self.0, self.1].serialize(s)
        }
    }
}

impl<'de> Deserialize<'de> for Refs {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = Refs;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a layer name or an array of layer names")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> std::result::Result<Refs, E> {
                Ok(Refs(vec![v.to_string()]))
            }
            fn visit_seq<A: SeqAccess<'de>>(
                self,
                mut seq: A,
            ) -> std::result::Result<Refs, A::Error> {
                let mut v = Vec::new();
                while let Some(x) = seq.next_element::<String>()? {
                    v.push(x);
                }
                Ok(Refs(v))
            }
        }
        d.deserialize_any(V)
    }
}

impl Serialize for Refs {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        let mut seq = s.serialize_seq(Some(self.0.len()))?;
        for r in &self.0 {
            seq.serialize_element(r)?;
        }
        seq.end()
    }
}

impl<'de> Deserialize<'de> for PaddingDesc {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = PaddingDesc;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str(
                    "\"valid\", \"same\", an integer, [pad_h, pad_w] or [top, left, bottom, right]",
                )
            }
            fn visit_str<E: de::Error>(self, v: &str) -> std::result::Result<PaddingDesc, E> {
                match v {
                    "valid" => Ok(PaddingDesc(Padding::Valid)),
                    "same" => Ok(PaddingDesc(Padding::Same)),
                    _ => Err(E::custom(format!(
                        "unknown padding \"{v}\"; expected \"valid\", \"same\" or numbers"
                    ))),
                }
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> std::result::Result<PaddingDesc, E> {
                let p = to_u16(v)?;
                Ok(PaddingDesc(Padding::Explicit([p; 4])))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> std::result::Result<PaddingDesc, E> {
                self.visit_i64(i64::try_from(v).unwrap_or(-1))
            }
            fn visit_seq<A: SeqAccess<'de>>(
                self,
                seq: A,
            ) -> std::result::Result<PaddingDesc, A::Error> {
                match seq_u16(seq)?[..] {
                    [h, w] => Ok(PaddingDesc(Padding::Explicit([h, w, h, w]))),
                    [t, l, b, r] => Ok(PaddingDesc(Padding::Explicit([t, l, b, r]))),
                    ref v => Err(de::Error::custom(format!(
                        "padding takes 2 or 4 values, found {}",
                        v.len()
                    ))),
                }
            }
        }
        d.deserialize_any(V)
    }
}

impl Serialize for PaddingDesc {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        match self.0 {
            Padding::Valid => s.serialize_str("valid"),
            Padding::Same => s.serialize_str("same"),
            Padding::Explicit(p) => p.serialize(s),
        }
    }
}
