//! Resource limits on everything the converter reads: file sizes, description
//! keys, safetensors headers, image headers, and the float activation bytes
//! and MACs a description implies. One table of named limits, one check.

use crate::description::{LayerInfo, LayerKind};
use crate::error::{Error, Result};

const KIB: u64 = 1024;
const MIB: u64 = 1024 * KIB;

/// A cap on the bytes of one kind of input file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct FileCap {
    /// What the file is, for messages ("description", "weights", ...).
    pub what: &'static str,
    pub max_bytes: u64,
}

/// Description files (TOML).
pub const DESCRIPTION_FILE: FileCap = FileCap {
    what: "description",
    max_bytes: MIB,
};
/// Target profiles (TOML).
pub const TARGET_FILE: FileCap = FileCap {
    what: "target profile",
    max_bytes: 64 * KIB,
};
/// safetensors weight files.
pub const WEIGHTS_FILE: FileCap = FileCap {
    what: "weights",
    max_bytes: 256 * MIB,
};
/// ONNX model files (graph and weights inside).
pub const ONNX_FILE: FileCap = FileCap {
    what: "ONNX model",
    max_bytes: 256 * MIB,
};
/// Model files (.midge) read by `show`, `classify` and `budget`.
pub const MODEL_FILE: FileCap = FileCap {
    what: "model",
    max_bytes: 64 * MIB,
};
/// One image file (PNG, JPEG, BMP) as stored.
pub const IMAGE_FILE: FileCap = FileCap {
    what: "image",
    max_bytes: 64 * MIB,
};
/// Firmware ELF files built for the budget.
pub const ELF_FILE: FileCap = FileCap {
    what: "firmware ELF",
    max_bytes: 64 * MIB,
};

/// Input height and width (`[input] height`, `width`).
pub const MAX_INPUT_SIDE: u64 = 2048;
/// Channels: `[input] channels`, `out_channels`, `out_features`.
pub const MAX_CHANNELS: u64 = 4096;
/// Each side of `kernel`, `stride` and `dilation`.
pub const MAX_WINDOW_SIDE: u64 = 256;
/// `[[layer]]` tables in a description.
pub const MAX_LAYERS: u64 = 1024;
/// Nodes of an ONNX graph.
pub const MAX_ONNX_NODES: u64 = 16384;
/// Entries of `labels`.
pub const MAX_LABELS: u64 = 4096;
/// Bytes (UTF-8) of one label.
pub const MAX_LABEL_BYTES: u64 = 256;
/// Bytes (UTF-8) of the model name, a layer name, a `tensor` prefix or a `from` entry.
pub const MAX_NAME_BYTES: u64 = 256;
/// `[input] pixel_range`.
pub const MAX_PIXEL_RANGE: f32 = 65535.0;
/// f32 bytes of one weight tensor (description shape or safetensors header).
pub const MAX_TENSOR_BYTES: u64 = 64 * MIB;
/// f32 bytes of all the weights a description reads.
pub const MAX_WEIGHT_BYTES: u64 = 256 * MIB;
/// JSON header of a safetensors file.
pub const MAX_SAFETENSORS_HEADER_BYTES: u64 = 16 * MIB;
/// Tensors in a safetensors file.
pub const MAX_SAFETENSORS_TENSORS: u64 = 65536;
/// f32 bytes of every tensor of one float inference (the reference keeps
/// them all); the device workspace (1 or 2 bytes a value) is below this.
pub const MAX_ACTIVATION_BYTES: u64 = 256 * MIB;
/// Multiply-accumulates of one inference.
pub const MAX_MACS: u64 = 2_000_000_000;
/// Width and height read from an image header.
pub const MAX_IMAGE_SIDE: u64 = 8192;
/// Pixels (width × height) of an image that is to be resized.
pub const MAX_IMAGE_PIXELS: u64 = 16 * 1024 * 1024;
/// Bytes the decoder may allocate for one image.
pub const MAX_IMAGE_DECODE_BYTES: u64 = 256 * MIB;
/// Images in one calibration or validation folder (sub-folders included).
pub const MAX_IMAGES: u64 = 65536;
/// Input bytes of all calibration images together (they are held at once).
pub const MAX_CALIBRATION_BYTES: u64 = 1024 * MIB;

/// Error unless `value <= limit`: names `place` and `key`, the value and the limit.
pub fn check(place: &str, key: &str, value: u64, limit: u64) -> Result<()> {
    if value <= limit {
        return Ok(());
    }
    Err(exceeded(place, key, &value.to_string(), &limit.to_string()))
}

/// Like [`check`] for a size that may not even fit a `u64` (`None`).
pub fn check_opt(place: &str, key: &str, value: Option<u64>, limit: u64) -> Result<()> {
    match value {
        Some(v) => check(place, key, v, limit),
        None => Err(exceeded(place, key, "more than 2^64", &limit.to_string())),
    }
}

/// Like [`check`] for a float key (non-finite values are refused too).
pub fn check_f32(place: &str, key: &str, value: f32, limit: f32) -> Result<()> {
    if value <= limit {
        return Ok(());
    }
    Err(exceeded(
        place,
        key,
        &format!("{value:e}"),
        &limit.to_string(),
    ))
}

fn exceeded(place: &str, key: &str, value: &str, limit: &str) -> Error {
    Error::new(
        if place.is_empty() {
            key.to_string()
        } else {
            format!("{place}: {key}")
        },
        format!("is {value}, above midge's limit of {limit} (README, \"Limits\")"),
    )
}

/// Product of `dims` as `u64`, `None` on overflow.
pub fn product(dims: impl IntoIterator<Item = u64>) -> Option<u64> {
    dims.into_iter().try_fold(1u64, |a, d| a.checked_mul(d))
}

/// f32 bytes of a tensor of `shape` (`None` on overflow).
pub fn f32_bytes(shape: &[usize]) -> Option<u64> {
    product(shape.iter().map(|&d| d as u64))?.checked_mul(4)
}

/// Multiply-accumulates of one checked description layer.
pub fn layer_macs(l: &LayerInfo) -> u64 {
    let out = l.out_shape.elems() as u64;
    let taps = l.window.map_or(1, |w| u64::from(w.kh) * u64::from(w.kw));
    let in_c = l.in_shapes.first().map_or(0, |s| u64::from(s.c));
    match l.kind {
        LayerKind::Conv2d => out * taps * in_c,
        LayerKind::Depthwise | LayerKind::MaxPool | LayerKind::AvgPool => out * taps,
        LayerKind::Dense => out * l.in_shapes.first().map_or(0, |s| s.elems() as u64),
        LayerKind::GlobalAvgPool => l.in_shapes.first().map_or(0, |s| s.elems() as u64),
        _ => out,
    }
}

/// The weight tensors of one checked layer, each against
/// `MAX_TENSOR_BYTES` (as f32), named by layer and tensor; returns their
/// bytes. Called as each layer is resolved, before any later check.
pub fn check_layer(place: &str, l: &LayerInfo) -> Result<u64> {
    let lp = format!("{place}: layer {} ({})", l.index + 1, l.name);
    let mut total = 0u64;
    for (name, shape) in l.expected_tensors() {
        let bytes = f32_bytes(&shape);
        check_opt(
            &lp,
            &format!("f32 bytes of tensor \"{name}\""),
            bytes,
            MAX_TENSOR_BYTES,
        )?;
        total = total.saturating_add(bytes.unwrap_or(u64::MAX));
    }
    Ok(total)
}

/// The description-wide sums once every layer passed [`check_layer`]: all
/// weight bytes, the f32 activation bytes of one inference and its MACs.
/// `place` names the description file.
pub fn check_description(place: &str, input_elems: u64, layers: &[LayerInfo]) -> Result<()> {
    let mut weights = 0u64;
    let mut acts = input_elems * 4;
    let mut macs = 0u64;
    for l in layers {
        weights = weights.saturating_add(check_layer(place, l)?);
        acts = acts.saturating_add(l.out_shape.elems() as u64 * 4);
        macs = macs.saturating_add(layer_macs(l));
    }
    check(place, "f32 bytes of all weights", weights, MAX_WEIGHT_BYTES)?;
    check(
        place,
        "f32 activation bytes of one inference (all layer outputs)",
        acts,
        MAX_ACTIVATION_BYTES,
    )?;
    check(
        place,
        "multiply-accumulates of one inference",
        macs,
        MAX_MACS,
    )
}

/// Rows of the README's "Limits" table, in its order: (what, limit). A
/// test keeps the README in step with these values.
pub fn table() -> Vec<(&'static str, String)> {
    let size = |b: u64| {
        if b >= MIB {
            format!("{} MiB", b / MIB)
        } else {
            format!("{} KiB", b / KIB)
        }
    };
    vec![
        ("description file", size(DESCRIPTION_FILE.max_bytes)),
        ("target profile file", size(TARGET_FILE.max_bytes)),
        ("weights file", size(WEIGHTS_FILE.max_bytes)),
        ("ONNX model file", size(ONNX_FILE.max_bytes)),
        ("ONNX graph nodes", MAX_ONNX_NODES.to_string()),
        ("model file", size(MODEL_FILE.max_bytes)),
        ("image file", size(IMAGE_FILE.max_bytes)),
        ("input height, width", MAX_INPUT_SIDE.to_string()),
        ("channels", MAX_CHANNELS.to_string()),
        ("kernel, stride, dilation", MAX_WINDOW_SIDE.to_string()),
        ("layers", MAX_LAYERS.to_string()),
        ("labels", MAX_LABELS.to_string()),
        ("label", format!("{MAX_LABEL_BYTES} bytes")),
        ("name", format!("{MAX_NAME_BYTES} bytes")),
        ("pixel_range", MAX_PIXEL_RANGE.to_string()),
        ("one weight tensor", size(MAX_TENSOR_BYTES)),
        ("all weights", size(MAX_WEIGHT_BYTES)),
        ("safetensors header", size(MAX_SAFETENSORS_HEADER_BYTES)),
        ("safetensors tensors", MAX_SAFETENSORS_TENSORS.to_string()),
        ("activations", size(MAX_ACTIVATION_BYTES)),
        ("MACs", MAX_MACS.to_string()),
        ("image width, height", MAX_IMAGE_SIDE.to_string()),
        ("image to resize", format!("{MAX_IMAGE_PIXELS} pixels")),
        ("image decoder", size(MAX_IMAGE_DECODE_BYTES)),
        ("images in a folder", MAX_IMAGES.to_string()),
        ("calibration images held", size(MAX_CALIBRATION_BYTES)),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn readme_states_every_limit() {
        let readme = include_str!("../../README.md");
        let section = readme
            .split("\n## Limits\n")
            .nth(1)
            .expect("README has a Limits section");
        let section = section.split("\n## ").next().unwrap_or(section);
        for (what, value) in table() {
            let row = format!("| {what} | {value} |");
            assert!(section.contains(&row), "README Limits lacks {row:?}");
        }
    }

    #[test]
    fn check_names_key_value_and_limit() {
        assert!(check("m.toml", "labels", 3, 3).is_ok());
        let e = check("m.toml", "labels", 4, 3).unwrap_err();
        assert_eq!(e.place(), "m.toml: labels");
        assert_eq!(
            e.problem(),
            "is 4, above midge's limit of 3 (README, \"Limits\")"
        );
        let e = check_opt("w", "bytes", None, 9).unwrap_err();
        assert!(e.problem().contains("2^64"), "{e}");
        assert_eq!(f32_bytes(&[usize::MAX, 2]), None);
        assert_eq!(f32_bytes(&[3, 5]), Some(60));
    }
}
