//! The writer of the flat layout (feature `write`): an owned `ModelSpec`
//! that `emit`s canonical bytes with the same field tables the reader uses,
//! re-parses its own output before returning, and `from_model` for round trips.

use std::string::{String, ToString};
use std::vec;
use std::vec::Vec;

use crate::embed::AlignedBytes;
use crate::error::{Error, Text};
use crate::format::{
    self, blob_types, canonical_sections, field, BlobType, FileHeader, HeaderView, InfoView,
    LayerRecord, LayerView, ModelInfo, Span, TensorView,
};
use crate::model::Model;
use crate::repr::{Bias, LayerHeader, Params, TensorRecord, Weights};

/// Owned weights of one layer (mirrors `repr::Weights`).
#[derive(Clone, Debug, PartialEq)]
pub enum WeightsBuf {
    None,
    I8(Vec<i8>),
    F16(Vec<half::f16>),
}

/// Owned bias of one layer (mirrors `repr::Bias`).
#[derive(Clone, Debug, PartialEq)]
pub enum BiasBuf {
    None,
    I32(Vec<i32>),
    F32(Vec<f32>),
}

/// Owned params of one layer (mirrors `repr::Params`). Requantization
/// params are `I32`, flat `[multiplier0, rshift0, multiplier1, rshift1, ...]`;
/// the op decides whether the reader sees them as `Params::Requant`.
#[derive(Clone, Debug, PartialEq)]
pub enum ParamsBuf {
    None,
    I32(Vec<i32>),
    F32(Vec<f32>),
}

/// One layer to write.
#[derive(Clone, Debug, PartialEq)]
pub struct LayerSpec {
    pub header: LayerHeader,
    pub weights: WeightsBuf,
    pub bias: BiasBuf,
    pub params: ParamsBuf,
}

/// A whole model to write. Tensor 0 is the input; layer `i` must write a
/// tensor no earlier layer wrote; see FORMAT.md for every rule `parse` checks.
#[derive(Clone, Debug, PartialEq)]
pub struct ModelSpec {
    pub name: String,
    pub labels: Vec<String>,
    pub tensors: Vec<TensorRecord>,
    pub layers: Vec<LayerSpec>,
    pub output: u16,
    pub workspace_len: u32,
}

impl WeightsBuf {
    fn bytes(&self) -> (BlobType, &[u8]) {
        match self {
            WeightsBuf::None => (BlobType::None, &[]),
            WeightsBuf::I8(v) => (BlobType::I8, bytemuck::cast_slice(v)),
            WeightsBuf::F16(v) => (BlobType::F16, bytemuck::cast_slice(v)),
        }
    }
}

impl BiasBuf {
    fn bytes(&self) -> (BlobType, &[u8]) {
        match self {
            BiasBuf::None => (BlobType::None, &[]),
            BiasBuf::I32(v) => (BlobType::I32, bytemuck::cast_slice(v)),
            BiasBuf::F32(v) => (BlobType::F32, bytemuck::cast_slice(v)),
        }
    }
}

impl ParamsBuf {
    fn bytes(&self) -> (BlobType, &[u8]) {
        match self {
            ParamsBuf::None => (BlobType::None, &[]),
            ParamsBuf::I32(v) => (BlobType::I32, bytemuck::cast_slice(v)),
            ParamsBuf::F32(v) => (BlobType::F32, bytemuck::cast_slice(v)),
        }
    }
}

fn count_u16(what: Text, n: usize) -> Result<u16, Error> {
    u16::try_from(n).map_err(|_| Error::BadField {
        what,
        value: u32::try_from(n).unwrap_or(u32::MAX),
    })
}

fn too_big() -> Error {
    Error::BadField {
        what: text!("file length (over 4 GiB)"),
        value: u32::MAX,
    }
}

impl ModelSpec {
    /// The canonical bytes of this model. Fails when a count or string does
    /// not fit its field, when a blob's type does not match what the layer's
    /// op and tensor types require, or when the result does not pass
    /// `Model::parse` (the writer never returns bytes the reader rejects).
    pub fn emit(&self) -> Result<Vec<u8>, Error> {
        if self.layers.len() > format::MAX_LAYERS {
            return Err(Error::BadField {
                what: text!("layer count (at most 32768)"),
                value: u32::try_from(self.layers.len()).unwrap_or(u32::MAX),
            });
        }
        let tensor_count = count_u16(text!("tensor count"), self.tensors.len())?;
        let layer_count = count_u16(text!("layer count"), self.layers.len())?;
        let label_count = count_u16(text!("label count"), self.labels.len())?;

        // Blob bytes per layer, with their types checked against the op.
        let mut blobs: Vec<[&[u8]; 3]> = Vec::with_capacity(self.layers.len());
        for (i, l) in self.layers.iter().enumerate() {
            let h = &l.header;
            let elem = |what, id: u16| {
                self.tensors
                    .get(id as usize)
                    .map(|t| t.elem)
                    .ok_or(Error::LayerField {
                        index: i,
                        what,
                        value: id as u32,
                    })
            };
            let a = elem(text!("first input tensor id"), h.inputs[0])?;
            let b = if h.op.arity() == 2 {
                Some(elem(text!("second input tensor id"), h.inputs[1])?)
            } else {
                None
            };
            let out = elem(text!("output tensor id"), h.output)?;
            let want = blob_types(h.op, a, b, out)
                .map_err(|problem| Error::Layer { index: i, problem })?;
            let (wt, wb) = l.weights.bytes();
            let (bt, bb) = l.bias.bytes();
            let (pt, pb) = l.params.bytes();
            for (what, got, expected) in [
                (
                    text!("weights type does not match the op and tensor types"),
                    wt,
                    want.weights,
                ),
                (
                    text!("bias type does not match the op and tensor types"),
                    bt,
                    want.bias,
                ),
                (
                    text!("params type does not match the op and tensor types"),
                    pt,
                    want.params,
                ),
            ] {
                if got != expected {
                    return Err(Error::Layer {
                        index: i,
                        problem: what,
                    });
                }
            }
            blobs.push([wb, bb, pb]);
        }

        // Blob placement: packed in layer order, each at an 8-aligned offset.
        let (empty, _) = canonical_sections(tensor_count, layer_count, 0, 0).ok_or_else(too_big)?;
        let blob_start = empty[2].offset as usize;
        let mut cursor = blob_start;
        let mut spans: Vec<[Span; 3]> = Vec::with_capacity(blobs.len());
        for layer in &blobs {
            let mut s = [Span::EMPTY; 3];
            for (span, bytes) in s.iter_mut().zip(layer) {
                if bytes.is_empty() {
                    continue;
                }
                let off = format::align_up(cursor).ok_or_else(too_big)?;
                *span = Span {
                    offset: u32::try_from(off).map_err(|_| too_big())?,
                    len: u32::try_from(bytes.len()).map_err(|_| too_big())?,
                };
                cursor = off.checked_add(bytes.len()).ok_or_else(too_big)?;
            }
            spans.push(s);
        }
        let blobs_len = u32::try_from(cursor - blob_start).map_err(|_| too_big())?;

        let mut strings = Vec::new();
        for (k, s) in core::iter::once(&self.name).chain(&self.labels).enumerate() {
            let len = u16::try_from(s.len()).map_err(|_| Error::BadField {
                what: text!("string length (name is string 0, label i is string i+1)"),
                value: k as u32,
            })?;
            strings.extend_from_slice(&len.to_le_bytes());
            strings.extend_from_slice(s.as_bytes());
        }
        let strings_len = u32::try_from(strings.len()).map_err(|_| too_big())?;

        let (sections, file_len) =
            canonical_sections(tensor_count, layer_count, blobs_len, strings_len)
                .ok_or_else(too_big)?;
        let mut out = vec![0u8; file_len as usize];

        let info = ModelInfo {
            workspace_len: self.workspace_len,
            output: self.output,
            tensor_count,
            layer_count,
            label_count,
            tensors: sections[0],
            layers: sections[1],
            blobs: sections[2],
            strings: sections[3],
        };
        info.emit(&mut InfoView::new_checked(&mut out[field::header::LEN..])?);
        let mut at = sections[0].offset as usize;
        for t in &self.tensors {
            t.emit(&mut TensorView::new_checked(&mut out[at..])?);
            at += field::tensor::LEN;
        }
        let mut at = sections[1].offset as usize;
        for ((l, s), bytes) in self.layers.iter().zip(&spans).zip(&blobs) {
            let rec = LayerRecord {
                header: l.header,
                weights: s[0],
                bias: s[1],
                params: s[2],
            };
            rec.emit(&mut LayerView::new_checked(&mut out[at..])?);
            at += field::layer::LEN;
            for (span, b) in s.iter().zip(bytes) {
                if let Some(dst) = span.range().and_then(|r| out.get_mut(r)) {
                    dst.copy_from_slice(b);
                }
            }
        }
        let st = sections[3].offset as usize;
        out[st..st + strings.len()].copy_from_slice(&strings);

        let crc = crate::crc::crc32(&out[field::header::LEN..]);
        FileHeader { file_len, crc }.emit(&mut HeaderView::new_checked(&mut out[..])?);

        // The writer must not produce what the reader rejects.
        Model::parse(&AlignedBytes::from_slice(&out))?;
        Ok(out)
    }

    /// The spec of a parsed model; `from_model(&Model::parse(b)?)?.emit()`
    /// gives back `b` (up to the file length) byte for byte.
    pub fn from_model(model: &Model<'_>) -> ModelSpec {
        let labels = model.labels().map(|l| l.to_string()).collect();
        let tensors = (0..model.tensor_count())
            .filter_map(|i| model.tensor(i))
            .collect();
        let layers = (0..model.layer_count())
            .filter_map(|i| model.layer(i))
            .map(|l| LayerSpec {
                header: l.header,
                weights: match l.weights {
                    Weights::None => WeightsBuf::None,
                    Weights::I8(s) => WeightsBuf::I8(s.to_vec()),
                    Weights::F16(s) => WeightsBuf::F16(s.to_vec()),
                },
                bias: match l.bias {
                    Bias::None => BiasBuf::None,
                    Bias::I32(s) => BiasBuf::I32(s.to_vec()),
                    Bias::F32(s) => BiasBuf::F32(s.to_vec()),
                },
                params: match l.params {
                    Params::None => ParamsBuf::None,
                    Params::Requant(s) | Params::I32(s) => ParamsBuf::I32(s.to_vec()),
                    Params::F32(s) => ParamsBuf::F32(s.to_vec()),
                },
            })
            .collect();
        ModelSpec {
            name: model.name().to_string(),
            labels,
            tensors,
            layers,
            output: model.output_id() as u16,
            workspace_len: model.workspace_len() as u32,
        }
    }
}
