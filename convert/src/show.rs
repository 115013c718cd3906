//! What `midge show` reports about a model file: one `Summary` read from the
//! parsed model (layers, tensors, quantization, file sections, memory plan),
//! printed as the text table or serialized as JSON.

use std::fmt::Write as _;

use midge_runtime::repr::Activation;
use midge_runtime::{ElemType, Model, SectionSizes, TensorRecord};
use serde::Serialize;

use crate::compare::{elem_name, op_name};
use crate::error::escape;
use crate::plan;

/// Byte counts of the file by kind: a serializable copy of the runtime's
/// `SectionSizes` (the runtime has no serde), used by every host report.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Sections {
    pub header: usize,
    pub tensor_table: usize,
    pub layer_table: usize,
    pub weights: usize,
    pub biases: usize,
    pub params: usize,
    pub strings: usize,
    pub padding: usize,
    /// The file length: the sum of the others.
    pub total: usize,
}

impl From<SectionSizes> for Sections {
    fn from(s: SectionSizes) -> Sections {
        Sections {
            header: s.header,
            tensor_table: s.tensor_table,
            layer_table: s.layer_table,
            weights: s.weights,
            biases: s.biases,
            params: s.params,
            strings: s.strings,
            padding: s.padding,
            total: s.total,
        }
    }
}

/// A tensor as the file records it.
#[derive(Clone, Debug, Serialize)]
pub struct Tensor {
    pub id: usize,
    /// Height, width, channels.
    pub shape: [u16; 3],
    /// "u8", "int8" or "fp16".
    pub elem: &'static str,
    pub scale: f32,
    /// Zero point (int8 tensors; 0 otherwise).
    pub zero_point: i32,
    /// Workspace offset (tensors 1..; the input is held by the caller).
    pub offset: u32,
    pub bytes: usize,
}

/// One layer of the file.
#[derive(Clone, Debug, Serialize)]
pub struct Layer {
    pub index: usize,
    pub op: &'static str,
    /// "-", "relu" or "relu6".
    pub activation: &'static str,
    pub inputs: Vec<usize>,
    pub output: Tensor,
    pub macs: u64,
    /// `[kh, kw, stride_h, stride_w]` for windowed ops.
    pub window: Option<[u16; 4]>,
}

/// When a tensor holds its workspace bytes.
#[derive(Clone, Debug, Serialize)]
pub struct Live {
    pub tensor: usize,
    pub offset: usize,
    pub end: usize,
    pub first_layer: usize,
    pub last_layer: usize,
}

/// Everything `midge show` prints.
#[derive(Clone, Debug, Serialize)]
pub struct Summary {
    pub name: String,
    pub file_bytes: usize,
    pub tensor_count: usize,
    pub labels: Vec<String>,
    pub sections: Sections,
    pub layers: Vec<Layer>,
    pub input: Tensor,
    pub output: Tensor,
    pub workspace_len: usize,
    /// Max over layers of the live tensor bytes.
    pub lower_bound: usize,
    pub live: Vec<Live>,
}

fn tensor(id: usize, t: &TensorRecord) -> Tensor {
    let int8 = t.elem == ElemType::I8;
    Tensor {
        id,
        shape: [t.shape.h, t.shape.w, t.shape.c],
        elem: elem_name(t.elem),
        scale: t.quant.scale,
        zero_point: if int8 { t.quant.zero_point } else { 0 },
        offset: t.offset,
        bytes: t.byte_len(),
    }
}

impl Summary {
    pub fn of(model: &Model<'_>) -> Summary {
        let sec = model.sections();
        let mut sizes = vec![0usize; model.tensor_count()];
        let mut steps = Vec::new();
        let mut layers = Vec::new();
        for i in 0..model.layer_count() {
            let Some(l) = model.layer(i) else { continue };
            let h = l.header;
            let ins: Vec<usize> = h.inputs[..h.op.arity()]
                .iter()
                .map(|&t| t as usize)
                .collect();
            steps.push((ins.clone(), h.output as usize));
            let Some(t) = model.tensor(h.output as usize) else {
                continue;
            };
            if let Some(s) = sizes.get_mut(h.output as usize) {
                *s = t.byte_len();
            }
            let w = h.window;
            layers.push(Layer {
                index: i,
                op: op_name(h.op),
                activation: match h.act {
                    Activation::None => "-",
                    Activation::Relu => "relu",
                    Activation::Relu6 => "relu6",
                },
                inputs: ins,
                output: tensor(h.output as usize, &t),
                macs: model.layer_macs(i),
                window: h
                    .op
                    .has_window()
                    .then_some([w.kh, w.kw, w.stride_h, w.stride_w]),
            });
        }
        let lt = plan::lifetimes(&sizes, &steps, model.output_id(), &[0]);
        let live = lt
            .iter()
            .enumerate()
            .filter_map(|(t, l)| {
                let (l, rec) = (l.as_ref()?, model.tensor(t)?);
                Some(Live {
                    tensor: t,
                    offset: rec.offset as usize,
                    end: rec.offset as usize + rec.byte_len(),
                    first_layer: l.first,
                    last_layer: l.last,
                })
            })
            .collect();
        Summary {
            name: model.name().to_string(),
            file_bytes: model.bytes().len(),
            tensor_count: model.tensor_count(),
            labels: model.labels().map(str::to_string).collect(),
            sections: sec.into(),
            layers,
            input: tensor(0, &model.input()),
            output: tensor(model.output_id(), &model.output()),
            workspace_len: model.workspace_len(),
            lower_bound: plan::lower_bound(&lt),
            live,
        }
    }

    /// The text `midge show` prints.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let labels: Vec<String> = self.labels.iter().map(|l| escape(l).into_owned()).collect();
        let _ = writeln!(
            s,
            "model {} — {} bytes, {} layers, {} tensors",
            escape(&self.name),
            self.file_bytes,
            self.layers.len(),
            self.tensor_count
        );
        let _ = writeln!(s, "labels: {}", labels.join(", "));
        let sec = &self.sections;
        let _ = writeln!(
            s,
            "file: header {} B, tensor table {} B, layer table {} B, weights {} B, biases {} B, params {} B, strings {} B, padding {} B",
            sec.header, sec.tensor_table, sec.layer_table, sec.weights, sec.biases, sec.params, sec.strings, sec.padding
        );
        let _ = writeln!(s);
        let _ = writeln!(
            s,
            "  {:>3}  {:<15} {:<6} {:>9}  {:>4} {:<14} {:<5} {:>11} {:>5} {:>8} {:>7} {:>10}",
            "#",
            "op",
            "act",
            "inputs",
            "out",
            "shape HxWxC",
            "type",
            "scale",
            "zp",
            "offset",
            "bytes",
            "MACs"
        );
        for l in &self.layers {
            let t = &l.output;
            let ins: Vec<String> = l.inputs.iter().map(|t| format!("t{t}")).collect();
            let (scale, zp) = if t.elem == "int8" {
                (format!("{:.5e}", t.scale), t.zero_point.to_string())
            } else {
                ("-".into(), "-".into())
            };
            let win = l
                .window
                .map(|[kh, kw, sh, _]| format!(" k{kh}x{kw} s{sh}"))
                .unwrap_or_default();
            let _ = writeln!(
                s,
                "  {:>3}  {:<15} {:<6} {:>9}  {:>4} {:<14} {:<5} {:>11} {:>5} {:>8} {:>7} {:>10}{}",
                l.index,
                l.op,
                l.activation,
                ins.join(","),
                format!("t{}", t.id),
                format!("{}x{}x{}", t.shape[0], t.shape[1], t.shape[2]),
                t.elem,
                scale,
                zp,
                t.offset,
                t.bytes,
                l.macs,
                win
            );
        }
        let (inp, out) = (&self.input, &self.output);
        let _ = writeln!(s);
        let _ = writeln!(
            s,
            "input t0: {}x{}x{} {} (scale {}, passed by the caller)",
            inp.shape[0], inp.shape[1], inp.shape[2], inp.elem, inp.scale
        );
        let _ = writeln!(
            s,
            "output t{}: {}x{}x{} {}",
            out.id, out.shape[0], out.shape[1], out.shape[2], out.elem
        );
        let _ = writeln!(
            s,
            "memory plan: workspace {} bytes, lower bound {} bytes (max over layers of the live tensor bytes)",
            self.workspace_len, self.lower_bound
        );
        for l in &self.live {
            let _ = writeln!(
                s,
                "  t{:<3} [{:>7}, {:>7})  live layers {}..={}",
                l.tensor, l.offset, l.end, l.first_layer, l.last_layer
            );
        }
        s
    }
}
