//! Descriptions that name an ONNX file: the `onnx` key replaces `weights`
//! and the layer list; labels, calibration, validation, target and the pixel
//! range stay the description's, and `[[layer]]` tables set only precision.
//!
//! ```toml
//! name = "caps"                 # default: the ONNX file's stem
//! labels = ["sealed", "missing", "tilted", "torn"]
//! onnx = "caps.onnx"            # relative to this file
//! calibration = "calib"
//! [input]
//! pixel_range = 1.0             # mean/std: normalisation done before the graph
//! [[layer]]
//! name = "fc"                   # an ONNX node name
//! precision = "fp16"
//! ```
//!
//! Normalisation inside the graph (Sub/Div or Mul/Add by constants at its
//! input) is folded into `[input] mean` and `std`; height, width and
//! channels come from the graph input (given, they must agree).

use std::path::Path;

use toml::{Table, Value};

use super::{lower, OnnxModel};
use crate::description::{Description, LayerDesc};
use crate::{Error, Result};

const TOP_KEYS: &[&str] = &[
    "name",
    "labels",
    "onnx",
    "calibration",
    "validation",
    "target",
    "precision",
    "input",
    "layer",
];
const INPUT_KEYS: &[&str] = &[
    "height",
    "width",
    "channels",
    "mean",
    "std",
    "pixel_range",
    "resize",
];

/// The description of a parsed TOML table that has an `onnx` key; its
/// paths are left as written (the caller resolves them), the ONNX file is
/// read from beside `origin`.
pub fn from_table(mut t: Table, origin: &Path) -> Result<Description> {
    let place = origin.display().to_string();
    let at = |key: &str| format!("{place}: {key}");
    for k in t.keys() {
        if k == "weights" {
            return Err(Error::new(
                at("weights"),
                "give either `weights` (with a [[layer]] list) or `onnx`, not both",
            ));
        }
        if !TOP_KEYS.contains(&k.as_str()) {
            return Err(Error::new(
                at(k),
                format!(
                    "unknown key; a description with `onnx` takes {}",
                    TOP_KEYS.join(", ")
                ),
            ));
        }
    }
    let file = match t.get("onnx") {
        Some(Value::String(s)) => s.clone(),
        _ => return Err(Error::new(at("onnx"), "expected a file name (a string)")),
    };
    let path = origin.parent().unwrap_or(Path::new("")).join(&file);
    let model = OnnxModel::load(&path)?;
    let low = lower(&model)?;
    let (h, w, c) = low.input_hwc;

    // [input]: ours, checked against the graph.
    let mut input = match t.remove("input") {
        None => Table::new(),
        Some(Value::Table(i)) => i,
        Some(_) => return Err(Error::new(at("input"), "expected a table")),
    };
    for (k, v) in &input {
        if !INPUT_KEYS.contains(&k.as_str()) {
            return Err(Error::new(
                at(&format!("input.{k}")),
                format!("unknown key; expected one of {}", INPUT_KEYS.join(", ")),
            ));
        }
        for (key, n) in [("height", h), ("width", w), ("channels", c)] {
            if k == key && v.as_integer() != Some(n as i64) {
                return Err(Error::new(
                    at(&format!("input.{k}")),
                    format!("is {v}, but the ONNX graph input has {key} {n}"),
                ));
            }
        }
    }
    let floats = |key: &str, default: f64| -> Result<Vec<f64>> {
        match input.get(key) {
            None => Ok(vec![default; c as usize]),
            Some(Value::Array(a)) => a
                .iter()
                .map(|x| {
                    x.as_float()
                        .or_else(|| x.as_integer().map(|i| i as f64))
                        .ok_or_else(|| Error::new(at(&format!("input.{key}")), "expected numbers"))
                })
                .collect::<Result<Vec<f64>>>()
                .and_then(|v| {
                    if v.len() == c as usize {
                        Ok(v)
                    } else {
                        Err(Error::new(
                            at(&format!("input.{key}")),
                            format!(
                                "has {} values; the ONNX graph input has {c} channels",
                                v.len()
                            ),
                        ))
                    }
                }),
            Some(_) => Err(Error::new(
                at(&format!("input.{key}")),
                "expected an array of numbers",
            )),
        }
    };
    let (mean_u, std_u) = (floats("mean", 0.0)?, floats("std", 1.0)?);
    // The graph sees x' = (x − mean_u)/std_u and computes on a·x' + b,
    // i.e. (x − mean)/std with std = std_u/a, mean = mean_u − b·std_u/a.
    let mut mean = Vec::with_capacity(c as usize);
    let mut std = Vec::with_capacity(c as usize);
    for (ch, &(a, b)) in low.affine.iter().enumerate() {
        if a <= 0.0 {
            return Err(Error::new(
                format!("{}: input normalisation", model.origin),
                format!(
                    "channel {ch} is scaled by {a}; expected a positive scale (x − mean) / std"
                ),
            ));
        }
        std.push(Value::Float((std_u[ch] / a) as f32 as f64));
        mean.push(Value::Float((mean_u[ch] - b * std_u[ch] / a) as f32 as f64));
    }
    input.insert("height".into(), Value::Integer(h.into()));
    input.insert("width".into(), Value::Integer(w.into()));
    input.insert("channels".into(), Value::Integer(c.into()));
    input.insert("mean".into(), Value::Array(mean));
    input.insert("std".into(), Value::Array(std));
    t.insert("input".into(), Value::Table(input));

    // [[layer]]: only precision, by name.
    let mut layers = low.layers.clone();
    let overrides = match t.remove("layer") {
        None => Vec::new(),
        Some(Value::Array(a)) => a,
        Some(_) => return Err(Error::new(at("layer"), "expected [[layer]] tables")),
    };
    for (i, o) in overrides.into_iter().enumerate() {
        let lp = format!("{place}: layer {}", i + 1);
        let Value::Table(o) = o else {
            return Err(Error::new(lp, "expected a table"));
        };
        if let Some(k) = o.keys().find(|k| *k != "name" && *k != "precision") {
            return Err(Error::new(
                format!("{lp}: {k}"),
                "with `onnx`, a [[layer]] table sets only `name` (an ONNX node name) and `precision`",
            ));
        }
        let name = o
            .get("name")
            .and_then(Value::as_str)
            .ok_or_else(|| Error::new(lp.clone(), "needs `name`, an ONNX node name"))?;
        let precision = match o.get("precision") {
            Some(p) => Some(p.clone().try_into().map_err(|_| {
                Error::new(format!("{lp}: precision"), "expected \"int8\" or \"fp16\"")
            })?),
            None => None,
        };
        let k = layers
            .iter()
            .zip(&low.node_names)
            .position(|(l, n)| l.name.as_deref() == Some(name) || n == name)
            .ok_or_else(|| {
                let known: Vec<&str> = layers
                    .iter()
                    .filter_map(|l| l.name.as_deref())
                    .take(12)
                    .collect();
                Error::new(
                    format!("{lp} ({name})"),
                    format!(
                        "no layer of that name in {}; layers: {}{}",
                        model.origin,
                        known.join(", "),
                        if layers.len() > known.len() {
                            ", ..."
                        } else {
                            ""
                        }
                    ),
                )
            })?;
        layers[k].precision = precision;
    }
    let layer_values: Vec<Value> = layers
        .iter()
        .map(|l: &LayerDesc| {
            Value::try_from(l)
                .map_err(|e| Error::new(&model.origin, format!("cannot describe a layer: {e}")))
        })
        .collect::<Result<_>>()?;
    t.insert("layer".into(), Value::Array(layer_values));
    if !t.contains_key("name") {
        // The file's stem: exporters name graphs generically ("main_graph").
        let stem = path
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        t.insert("name".into(), Value::String(stem));
    }
    let mut desc: Description = Value::Table(t)
        .try_into()
        .map_err(|e: toml::de::Error| Error::new(&place, e.message().trim().replace('\n', " ")))?;
    desc.onnx_import = Some(super::Imported {
        tensors: low.tensors,
        notes: low.notes,
        qdq: low.qdq,
    });
    Ok(desc)
}
