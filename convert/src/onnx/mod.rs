//! ONNX models (the open interchange standard): decoding a `.onnx` file with
//! the prost code generated from the standard's `onnx.proto`, initializers
//! and constants as f32 or i64 values, the opset check, and the entry points
//! that turn an ONNX file into the description and weights midge converts.

pub mod describe;
pub mod lower;
pub mod qdq;

use std::path::Path;

use prost::Message;

use crate::{limits, Error, Result};

/// The prost code generated from `onnx.proto` (see `convert/onnx-gen`);
/// the schema file is the one the onnx 1.23.2 Python package ships,
/// unchanged (Apache-2.0, its header kept).
#[allow(clippy::all, missing_docs, rustdoc::all)]
pub mod proto {
    include!("onnx_proto.rs");
}

pub use lower::{lower, GivenQuant, Lowered};

/// What a description's ONNX model gives besides its layers.
#[derive(Clone, Debug, PartialEq)]
pub struct Imported {
    /// Weights in PyTorch layouts under the layer names.
    pub tensors: crate::weights::TensorMap,
    /// What the import did that the user should know.
    pub notes: Vec<String>,
    /// Activation quantization carried by QuantizeLinear/DequantizeLinear
    /// pairs (quantization-aware training), used instead of calibration.
    pub qdq: Vec<GivenQuant>,
}

/// Opsets of the default domain midge reads (ai.onnx).
pub const MIN_OPSET: i64 = 9;
pub const MAX_OPSET: i64 = 21;

/// A decoded model and the file it came from.
pub struct OnnxModel {
    pub origin: String,
    pub model: proto::ModelProto,
    /// Opset of the default domain.
    pub opset: i64,
}

impl OnnxModel {
    /// Read and decode an ONNX file (regular file, size capped).
    pub fn load(path: &Path) -> Result<OnnxModel> {
        let bytes = crate::files::read(path, &limits::ONNX_FILE)?;
        OnnxModel::from_bytes(&bytes, &path.display().to_string())
    }

    /// Decode ONNX bytes; `origin` names them in messages.
    pub fn from_bytes(bytes: &[u8], origin: &str) -> Result<OnnxModel> {
        let model = proto::ModelProto::decode(bytes).map_err(|e| {
            Error::new(
                origin,
                format!("not an ONNX model (protobuf ModelProto expected): {e}"),
            )
        })?;
        let mut opset = None;
        for o in &model.opset_import {
            match o.domain.as_deref().unwrap_or("") {
                "" | "ai.onnx" => opset = o.version,
                _ => {}
            }
        }
        let opset = opset.ok_or_else(|| {
            Error::new(
                origin,
                "no opset of the default domain (ai.onnx) in opset_import; expected one of 9..=21",
            )
        })?;
        if !(MIN_OPSET..=MAX_OPSET).contains(&opset) {
            return Err(Error::new(
                origin,
                format!("opset {opset} of the default domain is not supported; expected {MIN_OPSET}..={MAX_OPSET}"),
            ));
        }
        if model.graph.is_none() {
            return Err(Error::new(origin, "the model has no graph"));
        }
        Ok(OnnxModel {
            origin: origin.to_string(),
            model,
            opset,
        })
    }

    pub fn graph(&self) -> &proto::GraphProto {
        self.model.graph.as_ref().expect("checked in from_bytes")
    }
}

/// Values of a constant tensor: floats (FLOAT, FLOAT16, BFLOAT16, DOUBLE)
/// or integers (INT64, INT32, INT8, UINT8, BOOL, ...), row-major.
#[derive(Clone, Debug, PartialEq)]
pub enum Values {
    F(Vec<f32>),
    I(Vec<i64>),
}

/// A constant: dims and values.
#[derive(Clone, Debug, PartialEq)]
pub struct Const {
    pub dims: Vec<usize>,
    pub values: Values,
}

impl Const {
    pub fn len(&self) -> usize {
        match &self.values {
            Values::F(v) => v.len(),
            Values::I(v) => v.len(),
        }
    }
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// The values as f32 (integers converted).
    pub fn floats(&self) -> Vec<f32> {
        match &self.values {
            Values::F(v) => v.clone(),
            Values::I(v) => v.iter().map(|&x| x as f32).collect(),
        }
    }
    /// The values as integers, if they are integers.
    pub fn ints(&self) -> Option<&[i64]> {
        match &self.values {
            Values::I(v) => Some(v),
            Values::F(_) => None,
        }
    }
}

/// Data type codes of `TensorProto.DataType` (onnx.proto).
fn dtype_name(t: i32) -> String {
    proto::tensor_proto::DataType::try_from(t)
        .map(|d| d.as_str_name().to_string())
        .unwrap_or_else(|_| format!("data type {t}"))
}

/// A tensor's values. `place` names it in messages (file and tensor).
/// External data is refused; sizes are checked against `limits` before
/// anything is allocated; float values must be finite.
pub fn tensor_values(t: &proto::TensorProto, place: &str) -> Result<Const> {
    use proto::tensor_proto::{DataLocation, DataType as D};
    if t.data_location == Some(DataLocation::External as i32) || !t.external_data.is_empty() {
        let file = t
            .external_data
            .iter()
            .find(|e| e.key.as_deref() == Some("location"))
            .and_then(|e| e.value.clone())
            .unwrap_or_default();
        return Err(Error::new(
            place,
            format!(
                "weights are in an external data file (\"{file}\"); midge reads only weights stored inside the .onnx file: save the model with its data inside (onnx.save_model(m, path, save_as_external_data=False))"
            ),
        ));
    }
    if t.segment.is_some() {
        return Err(Error::new(place, "segmented tensors are not supported"));
    }
    let mut dims = Vec::with_capacity(t.dims.len());
    for &d in &t.dims {
        dims.push(
            usize::try_from(d)
                .map_err(|_| Error::new(place, format!("dimension {d} is negative")))?,
        );
    }
    let count = limits::product(dims.iter().map(|&d| d as u64));
    limits::check_opt(
        place,
        "f32 bytes of the tensor",
        count.and_then(|n| n.checked_mul(4)),
        limits::MAX_TENSOR_BYTES,
    )?;
    let n = count.expect("checked") as usize;
    let dt = t.data_type.unwrap_or(0);
    let raw = t.raw_data.as_deref();
    let dims_text = format!("{dims:?}");
    let wrong_len = |found: String| {
        Error::new(
            place,
            format!(
                "holds {found} of {}, but its dims {dims_text} need {n} values",
                dtype_name(dt)
            ),
        )
    };
    let values = match D::try_from(dt) {
        Ok(D::Float) => Values::F(match raw {
            Some(b) => le_chunks::<4>(b, n, wrong_len)?
                .map(f32::from_le_bytes)
                .collect(),
            None => t.float_data.clone(),
        }),
        Ok(D::Double) => Values::F(match raw {
            Some(b) => le_chunks::<8>(b, n, wrong_len)?
                .map(|c| f64::from_le_bytes(c) as f32)
                .collect(),
            None => t.double_data.iter().map(|&x| x as f32).collect(),
        }),
        Ok(D::Float16) | Ok(D::Bfloat16) => {
            let bf = D::try_from(dt) == Ok(D::Bfloat16);
            let bits: Vec<u16> = match raw {
                Some(b) => le_chunks::<2>(b, n, wrong_len)?
                    .map(u16::from_le_bytes)
                    .collect(),
                // onnx.proto: float16 and bfloat16 values are stored as
                // their bit patterns in int32_data.
                None => t.int32_data.iter().map(|&x| x as u16).collect(),
            };
            Values::F(
                bits.into_iter()
                    .map(|b| {
                        if bf {
                            half::bf16::from_bits(b).to_f32()
                        } else {
                            half::f16::from_bits(b).to_f32()
                        }
                    })
                    .collect(),
            )
        }
        Ok(D::Int64) => Values::I(match raw {
            Some(b) => le_chunks::<8>(b, n, wrong_len)?
                .map(i64::from_le_bytes)
                .collect(),
            None => t.int64_data.clone(),
        }),
        Ok(D::Int32) => Values::I(match raw {
            Some(b) => le_chunks::<4>(b, n, wrong_len)?
                .map(|c| i32::from_le_bytes(c) as i64)
                .collect(),
            None => t.int32_data.iter().map(|&x| x as i64).collect(),
        }),
        Ok(D::Int8) | Ok(D::Uint8) | Ok(D::Bool) | Ok(D::Int16) | Ok(D::Uint16) => {
            let signed8 = D::try_from(dt) == Ok(D::Int8);
            Values::I(match raw {
                Some(b) if matches!(D::try_from(dt), Ok(D::Int16) | Ok(D::Uint16)) => {
                    let s = D::try_from(dt) == Ok(D::Int16);
                    le_chunks::<2>(b, n, wrong_len)?
                        .map(|c| {
                            if s {
                                i16::from_le_bytes(c) as i64
                            } else {
                                u16::from_le_bytes(c) as i64
                            }
                        })
                        .collect()
                }
                Some(b) => {
                    if b.len() != n {
                        return Err(wrong_len(format!("{} raw bytes", b.len())));
                    }
                    b.iter()
                        .map(|&x| if signed8 { x as i8 as i64 } else { x as i64 })
                        .collect()
                }
                None => t.int32_data.iter().map(|&x| x as i64).collect(),
            })
        }
        _ => {
            return Err(Error::new(
                place,
                format!(
                    "{} tensors are not supported; expected FLOAT, FLOAT16, BFLOAT16 (weights) or INT64/INT32 (shapes)",
                    dtype_name(dt)
                ),
            ))
        }
    };
    let c = Const { dims, values };
    if c.len() != n {
        return Err(wrong_len(format!("{} values", c.len())));
    }
    if let Values::F(v) = &c.values {
        if let Some((i, x)) = v.iter().enumerate().find(|(_, x)| !x.is_finite()) {
            return Err(Error::new(
                place,
                format!("value {x} at flat index {i} is not finite"),
            ));
        }
    }
    Ok(c)
}

/// `b` as `n` little-endian chunks of `N` bytes, or the length error.
fn le_chunks<const N: usize>(
    b: &[u8],
    n: usize,
    wrong_len: impl Fn(String) -> Error,
) -> Result<impl Iterator<Item = [u8; N]> + '_> {
    if Some(b.len()) != n.checked_mul(N) {
        return Err(wrong_len(format!("{} raw bytes", b.len())));
    }
    Ok(b.chunks_exact(N)
        .map(|c| c.try_into().expect("chunks_exact gives N bytes")))
}

#[cfg(test)]
mod tests {
    use super::proto::tensor_proto::DataType;
    use super::proto::TensorProto;
    use super::*;

    fn t(dt: DataType, dims: &[i64]) -> TensorProto {
        TensorProto {
            name: Some("w".into()),
            dims: dims.to_vec(),
            data_type: Some(dt as i32),
            ..Default::default()
        }
    }

    #[test]
    fn half_and_bfloat16_from_raw_and_typed_fields() {
        // IEEE 754 binary16 1.5 = 0x3E00, −2 = 0xC000; bfloat16 is the top
        // half of binary32 (1.5f32 = 0x3FC0_0000): common practice.
        let mut a = t(DataType::Float16, &[2]);
        a.raw_data = Some(vec![0x00, 0x3E, 0x00, 0xC0]);
        assert_eq!(tensor_values(&a, "a").unwrap().floats(), [1.5, -2.0]);
        let mut b = t(DataType::Bfloat16, &[1]);
        b.int32_data = vec![0x3FC0];
        assert_eq!(tensor_values(&b, "b").unwrap().floats(), [1.5]);
        let mut c = t(DataType::Float16, &[1]);
        c.int32_data = vec![0xC000];
        assert_eq!(tensor_values(&c, "c").unwrap().floats(), [-2.0]);
        let mut d = t(DataType::Int64, &[2]);
        d.raw_data = Some([-1i64, 7].iter().flat_map(|x| x.to_le_bytes()).collect());
        assert_eq!(
            tensor_values(&d, "d").unwrap().ints(),
            Some(&[-1i64, 7][..])
        );
    }

    #[test]
    fn bad_tensors_are_refused_by_name() {
        let mut e = t(DataType::Float, &[1]);
        e.data_location = Some(proto::tensor_proto::DataLocation::External as i32);
        let err = tensor_values(&e, "m.onnx: initializer \"w\"").unwrap_err();
        assert!(err.to_string().contains("external data file"), "{err}");
        let mut n = t(DataType::Float, &[2]);
        n.float_data = vec![1.0, f32::NAN];
        let err = tensor_values(&n, "w").unwrap_err();
        assert!(
            err.problem().contains("flat index 1 is not finite"),
            "{err}"
        );
        let mut s = t(DataType::String, &[1]);
        s.string_data = vec![b"x".to_vec()];
        assert!(tensor_values(&s, "w")
            .unwrap_err()
            .problem()
            .contains("STRING"));
        let mut huge = t(DataType::Float, &[1 << 20, 1 << 20]);
        huge.float_data = vec![0.0];
        let err = tensor_values(&huge, "w").unwrap_err();
        assert!(err.to_string().contains("limit"), "{err}");
        let mut neg = t(DataType::Float, &[-1]);
        neg.float_data = vec![0.0];
        assert!(tensor_values(&neg, "w")
            .unwrap_err()
            .problem()
            .contains("negative"));
    }
}
