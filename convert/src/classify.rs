//! Classifying images (`midge classify`): per image the predicted label and
//! index, the logits, the model's raw output values and softmax probabilities,
//! from a model file run by midge-runtime or a description run by the float reference.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use midge_runtime::{exec, ElemType, Model};
use serde::Serialize;

use crate::compare::{argmax, host_workspace};
use crate::error::{escape, escape_path, Error, Result};
use crate::float_ref;
use crate::graph::load_graph;
use crate::images::{self, ImageSpec};
use crate::quantize::{dequantize_tensor, image_spec};

/// How the output tensor of a model file holds its values:
/// `logit = scale · (raw − zero_point)` for int8, `logit = raw` for fp16.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct OutputEncoding {
    /// `int8` or `fp16`.
    #[serde(rename = "type")]
    pub elem: String,
    pub scale: f32,
    pub zero_point: i32,
}

/// The output tensor's values as stored: int8 integers or fp16 values.
#[derive(Clone, Debug, PartialEq, Serialize)]
#[serde(untagged)]
pub enum RawOutput {
    Int8(Vec<i8>),
    Fp16(Vec<f32>),
}

/// One image's result.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ImageClass {
    pub file: String,
    /// Predicted class: the arg-max of the output (lowest index on ties).
    pub index: usize,
    pub label: String,
    /// Dequantized (model file) or float-reference logits.
    pub logits: Vec<f32>,
    /// The output tensor as the runtime wrote it; absent for the float
    /// reference (its logits are its raw values).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub raw: Option<RawOutput>,
    /// Softmax of the logits (host side, f64).
    pub probabilities: Vec<f64>,
}

/// What `midge classify` prints, as text or (serialized) as JSON.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Classification {
    pub model: String,
    /// `runtime` (a model file run by midge-runtime) or `float` (a
    /// description run by the float reference).
    pub source: String,
    /// The model file's output encoding; absent for the float reference.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output: Option<OutputEncoding>,
    pub labels: Vec<String>,
    pub images: Vec<ImageClass>,
}

/// Softmax of logits (host side, f64, shifted by the maximum).
pub fn softmax(logits: &[f32]) -> Vec<f64> {
    let m = logits.iter().fold(f32::NEG_INFINITY, |a, &b| a.max(b)) as f64;
    let e: Vec<f64> = logits.iter().map(|&v| (v as f64 - m).exp()).collect();
    let s: f64 = e.iter().sum();
    e.iter().map(|v| v / s).collect()
}

fn label_of(labels: &[String], i: usize) -> String {
    labels
        .get(i)
        .cloned()
        .unwrap_or_else(|| format!("class {i}"))
}

/// Classify `images` with a model file (`path`: `.toml` → the description
/// run by the float reference, anything else → a `.midge` file run by
/// midge-runtime). `resize`: resize other image sizes instead of refusing.
pub fn classify_path(path: &Path, images: &[PathBuf], resize: bool) -> Result<Classification> {
    if path.extension().is_some_and(|e| e == "toml") {
        classify_float(path, images, resize)
    } else {
        let bytes = crate::files::read_model(path)?;
        let model = crate::files::parse_model(&bytes, path)?;
        classify_model(&model, &path.display().to_string(), images, resize)
    }
}

/// Classify `images` with a parsed model file (`place` names it in errors).
pub fn classify_model(
    model: &Model<'_>,
    place: &str,
    images: &[PathBuf],
    resize: bool,
) -> Result<Classification> {
    let inp = model.input();
    let spec = ImageSpec {
        h: inp.shape.h as u32,
        w: inp.shape.w as u32,
        c: inp.shape.c as u32,
        resize,
    };
    let rec = model.output();
    let labels: Vec<String> = model.labels().map(str::to_string).collect();
    let mut ws = host_workspace(model, place)?;
    let mut results = Vec::with_capacity(images.len());
    for img in images {
        let px = images::load_image(img, &spec)?;
        let out = model.run(&px, &mut ws).map_err(|e| {
            Error::new(
                img.display().to_string(),
                format!("the runtime failed: {e}"),
            )
        })?;
        let logits = dequantize_tensor(&rec, out);
        // Scores are never printed as NaN: a non-finite output (an fp16
        // overflow inside the model) is an error naming the image.
        if let Some(v) = logits.iter().find(|v| !v.is_finite()) {
            return Err(Error::new(
                img.display().to_string(),
                format!(
                    "model output t{} holds {v}: the model overflows fp16 on this image, no scores to print",
                    model.output_id()
                ),
            ));
        }
        let index = exec::top1(&rec, out).map(|(i, _)| i).unwrap_or(0);
        let raw = match rec.elem {
            ElemType::F16 => RawOutput::Fp16(logits.clone()),
            ElemType::I8 | ElemType::U8 => RawOutput::Int8(out.iter().map(|&b| b as i8).collect()),
        };
        results.push(ImageClass {
            file: img.display().to_string(),
            index,
            label: label_of(&labels, index),
            probabilities: softmax(&logits),
            logits,
            raw: Some(raw),
        });
    }
    Ok(Classification {
        model: model.name().to_string(),
        source: "runtime".into(),
        output: Some(OutputEncoding {
            elem: match rec.elem {
                ElemType::F16 => "fp16".into(),
                _ => "int8".into(),
            },
            scale: rec.quant.scale,
            zero_point: rec.quant.zero_point,
        }),
        labels,
        images: results,
    })
}

/// Classify `images` with the float reference of the description at
/// `desc_path` (its weights folded, as `compare` runs it).
pub fn classify_float(
    desc_path: &Path,
    images: &[PathBuf],
    resize: bool,
) -> Result<Classification> {
    let (desc, graph, _unused) = load_graph(desc_path)?;
    let mut spec = image_spec(&desc);
    spec.resize |= resize;
    let mut results = Vec::with_capacity(images.len());
    for img in images {
        let px = images::load_image(img, &spec)?;
        let tensors = float_ref::run_finite(&graph, &px).map_err(|e| e.error(img))?;
        let logits = tensors.last().cloned().unwrap_or_default();
        let index = argmax(&logits).unwrap_or(0);
        results.push(ImageClass {
            file: img.display().to_string(),
            index,
            label: label_of(&graph.labels, index),
            probabilities: softmax(&logits),
            logits,
            raw: None,
        });
    }
    Ok(Classification {
        model: graph.name.clone(),
        source: "float".into(),
        output: None,
        labels: graph.labels.clone(),
        images: results,
    })
}

impl Classification {
    /// One line per image: `file: label (p)  [label p, ...]` with the `top`
    /// most probable classes (at least one), three decimals.
    pub fn to_text(&self, top: usize) -> String {
        let mut s = String::new();
        for r in &self.images {
            let p = &r.probabilities;
            let mut order: Vec<usize> = (0..p.len()).collect();
            order.sort_by(|&i, &j| p[j].total_cmp(&p[i]).then(i.cmp(&j)));
            let rest: Vec<String> = order
                .iter()
                .take(top.max(1))
                .map(|&i| format!("{} {:.3}", escape(&label_of(&self.labels, i)), p[i]))
                .collect();
            let _ = writeln!(
                s,
                "{}: {} ({:.3})  [{}]",
                escape_path(Path::new(&r.file)),
                escape(&r.label),
                p.get(r.index).copied().unwrap_or(0.0),
                rest.join(", ")
            );
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn softmax_sums_to_one_and_keeps_order() {
        // softmax(x)_i = e^{x_i} / Σ e^{x_j} (definition, common practice):
        // for [0, ln 3] it is [1/4, 3/4].
        let p = softmax(&[0.0, 3f32.ln()]);
        assert!(
            (p[0] - 0.25).abs() < 1e-7 && (p[1] - 0.75).abs() < 1e-7,
            "{p:?}"
        );
        let p = softmax(&[2.0, -1.0, 0.5]);
        assert!((p.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        assert!(p[0] > p[2] && p[2] > p[1]);
    }
}
