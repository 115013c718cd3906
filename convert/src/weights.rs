//! Float weights from safetensors files: F32, F16 and BF16 tensors read into
//! f32 (`TensorMap`), with errors naming the tensor (missing, wrong shape,
//! unsupported dtype, NaN/Inf) and the list of tensors a description leaves unused.

use std::collections::BTreeMap;
use std::path::Path;

use safetensors::tensor::{Dtype, SafeTensors, TensorView};

use crate::description::Description;
use crate::{limits, Error, Result};

/// One tensor: PyTorch shape and row-major f32 values.
#[derive(Clone, Debug, PartialEq)]
pub struct Tensor {
    pub shape: Vec<usize>,
    pub data: Vec<f32>,
}

/// Tensors by name, all converted to f32.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct TensorMap {
    /// The file the tensors came from (for messages); may be empty.
    pub origin: String,
    pub tensors: BTreeMap<String, Tensor>,
    /// Tensors of a dtype other than F32/F16/BF16 (e.g. PyTorch's I64
    /// `num_batches_tracked`): name → why it was not loaded. Asking for one
    /// with `require` is an error naming the tensor and dtype.
    pub skipped: BTreeMap<String, String>,
}

fn shape_text(s: &[usize]) -> String {
    let v: Vec<String> = s.iter().map(|d| d.to_string()).collect();
    format!("[{}]", v.join(", "))
}

impl TensorMap {
    /// An empty map whose messages name `origin`.
    pub fn new(origin: impl Into<String>) -> TensorMap {
        TensorMap {
            origin: origin.into(),
            tensors: BTreeMap::new(),
            skipped: BTreeMap::new(),
        }
    }

    /// Read a safetensors file.
    pub fn load(path: &Path) -> Result<TensorMap> {
        let place = path.display().to_string();
        let bytes = crate::files::read(path, &crate::limits::WEIGHTS_FILE)?;
        TensorMap::from_bytes(&bytes, &place)
    }

    /// Parse safetensors bytes; `origin` names them in messages. Every value
    /// must be finite. Tensors of other dtypes are kept out (see `skipped`).
    pub fn from_bytes(bytes: &[u8], origin: &str) -> Result<TensorMap> {
        check_header(bytes, origin)?;
        let st = SafeTensors::deserialize(bytes).map_err(|e| {
            use safetensors::SafeTensorError as E;
            let why = match e {
                E::HeaderTooSmall | E::InvalidHeaderLength | E::MetadataIncompleteBuffer => {
                    format!("not a complete safetensors file (truncated or wrong format: {e})")
                }
                E::InvalidHeaderStart
                | E::InvalidHeader(_)
                | E::InvalidHeaderDeserialization(_)
                | E::HeaderTooLarge => {
                    format!("not a safetensors file ({e})")
                }
                _ => format!("damaged safetensors file: {e}"),
            };
            Error::new(origin, why)
        })?;
        let mut map = TensorMap::new(origin);
        for (name, view) in st.tensors() {
            let data = match to_f32(&view) {
                Ok(d) => d,
                Err(why) => {
                    map.skipped.insert(name, why);
                    continue;
                }
            };
            if let Some((i, x)) = data.iter().enumerate().find(|(_, x)| !x.is_finite()) {
                return Err(Error::new(
                    format!("{origin}: {name}"),
                    format!("value {x} at flat index {i} is not finite"),
                ));
            }
            map.tensors.insert(
                name,
                Tensor {
                    shape: view.shape().to_vec(),
                    data,
                },
            );
        }
        Ok(map)
    }

    /// Add or replace a tensor (tests, the trainer). Panics when the value
    /// count does not match the shape: that is a caller bug.
    pub fn insert(&mut self, name: impl Into<String>, shape: Vec<usize>, data: Vec<f32>) {
        assert_eq!(
            shape.iter().product::<usize>(),
            data.len(),
            "tensor data does not match its shape"
        );
        self.tensors.insert(name.into(), Tensor { shape, data });
    }

    pub fn get(&self, name: &str) -> Option<&Tensor> {
        self.tensors.get(name)
    }

    /// The values of `name`, which must exist with exactly `shape`.
    pub fn require(&self, name: &str, shape: &[usize]) -> Result<&[f32]> {
        if let Some(why) = self.skipped.get(name) {
            return Err(Error::new(format!("{}: {name}", self.origin), why.clone()));
        }
        let t = self.tensors.get(name).ok_or_else(|| {
            Error::new(
                &self.origin,
                format!("tensor \"{name}\" (shape {}) is missing", shape_text(shape)),
            )
        })?;
        if t.shape != shape {
            return Err(Error::new(
                format!("{}: {name}", self.origin),
                format!(
                    "shape mismatch: the description needs {}, the file has {}",
                    shape_text(shape),
                    shape_text(&t.shape)
                ),
            ));
        }
        Ok(&t.data)
    }

    /// Check every tensor the description needs (name and shape) and return
    /// the names of tensors in the file that it does not use (sorted, those
    /// of unsupported dtypes last).
    pub fn check(&self, desc: &Description) -> Result<Vec<String>> {
        let mut used = std::collections::BTreeSet::new();
        for layer in desc.topology()? {
            for (name, shape) in layer.expected_tensors() {
                self.require(&name, &shape)?;
                used.insert(name);
            }
            used.extend(layer.optional_tensors());
        }
        Ok(self
            .tensors
            .keys()
            .chain(self.skipped.keys())
            .filter(|k| !used.contains(*k))
            .cloned()
            .collect())
    }

    /// The map as safetensors bytes, every tensor F32.
    pub fn to_safetensors_bytes(&self) -> Result<Vec<u8>> {
        let raw: Vec<(String, Vec<usize>, Vec<u8>)> = self
            .tensors
            .iter()
            .map(|(n, t)| {
                let b = t.data.iter().flat_map(|x| x.to_le_bytes()).collect();
                (n.clone(), t.shape.clone(), b)
            })
            .collect();
        let mut views = Vec::with_capacity(raw.len());
        for (n, s, b) in &raw {
            let v = TensorView::new(Dtype::F32, s.clone(), b)
                .map_err(|e| Error::new(format!("{}: {n}", self.origin), e.to_string()))?;
            views.push((n.clone(), v));
        }
        safetensors::serialize(views, None)
            .map_err(|e| Error::new(&self.origin, format!("cannot write safetensors: {e}")))
    }
}

/// Sizes claimed by a safetensors header, checked against `limits` before
/// the file is parsed: header length, tensor count, each tensor's and all
/// tensors' f32 bytes (named by tensor). A header that is not JSON is left
/// to the safetensors parser to describe.
fn check_header(bytes: &[u8], origin: &str) -> Result<()> {
    let Some(len) = bytes.get(..8) else {
        return Ok(());
    };
    let len = u64::from_le_bytes(len.try_into().expect("8 bytes"));
    if len > bytes.len() as u64 - 8 {
        // Not a header at all (or a truncated file): the parser says which.
        return Ok(());
    }
    limits::check(
        origin,
        "safetensors header length",
        len,
        limits::MAX_SAFETENSORS_HEADER_BYTES,
    )?;
    let Some(header) = bytes.get(8..8 + len as usize) else {
        return Ok(());
    };
    let Ok(serde_json::Value::Object(entries)) = serde_json::from_slice(header) else {
        return Ok(());
    };
    limits::check(
        origin,
        "safetensors tensors",
        entries.len() as u64,
        limits::MAX_SAFETENSORS_TENSORS,
    )?;
    let mut total = 0u64;
    for (name, info) in &entries {
        let Some(shape) = info.get("shape").and_then(|s| s.as_array()) else {
            continue;
        };
        let dims: Option<Vec<u64>> = shape.iter().map(|d| d.as_u64()).collect();
        let Some(dims) = dims else { continue };
        let text: Vec<String> = dims.iter().map(|d| d.to_string()).collect();
        let bytes = limits::product(dims).and_then(|n| n.checked_mul(4));
        limits::check_opt(
            &format!("{origin}: {name}"),
            &format!("f32 bytes of shape [{}]", text.join(", ")),
            bytes,
            limits::MAX_TENSOR_BYTES,
        )?;
        total = total.saturating_add(bytes.unwrap_or(u64::MAX));
    }
    limits::check(
        origin,
        "f32 bytes of all tensors",
        total,
        limits::MAX_WEIGHT_BYTES,
    )
}

fn to_f32(view: &TensorView<'_>) -> std::result::Result<Vec<f32>, String> {
    let b = view.data();
    let two = |f: fn([u8; 2]) -> f32| b.chunks_exact(2).map(|c| f([c[0], c[1]])).collect();
    match view.dtype() {
        Dtype::F32 => Ok(b
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect()),
        Dtype::F16 => Ok(two(|c| half::f16::from_le_bytes(c).to_f32())),
        Dtype::BF16 => Ok(two(|c| half::bf16::from_le_bytes(c).to_f32())),
        other => Err(format!(
            "dtype {other:?} is not supported; expected F32, F16 or BF16"
        )),
    }
}
