//! A tiny residual model built on disk for the quantizer, compare and CLI
//! tests: random weights (seeded), a description, calibration images and a
//! labelled validation folder in a fresh temporary folder.
#![allow(dead_code)]

use std::fs;
use std::path::{Path, PathBuf};

use midge_convert::description::Description;
use midge_convert::weights::TensorMap;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

pub const LABELS: [&str; 3] = ["ring", "dot", "bar"];

/// The tiny model: stem conv2d + BN + ReLU, a second conv2d, a residual
/// add + ReLU, max pool, depthwise + ReLU6, global average pool, dense.
/// `extra` is appended to the `[[layer]]` named `block` (e.g. a precision key).
pub fn description_text(block_extra: &str) -> String {
    format!(
        r#"
name = "tiny-residual"
labels = ["ring", "dot", "bar"]
weights = "weights.safetensors"
calibration = "calib"
validation = "val"

[input]
height = 8
width = 8
channels = 3
pixel_range = 1.0
mean = [0.5, 0.4, 0.3]
std = [0.25, 0.3, 0.2]

[[layer]]
name = "stem"
op = "conv2d"
out_channels = 4
kernel = 3
padding = 1

[[layer]]
name = "stem_bn"
op = "batchnorm"

[[layer]]
name = "stem_relu"
op = "relu"

[[layer]]
name = "block"
op = "conv2d"
out_channels = 4
kernel = 3
padding = 1
{block_extra}

[[layer]]
name = "sum"
op = "add"
from = ["stem_relu", "block"]

[[layer]]
op = "relu"

[[layer]]
name = "pool"
op = "maxpool"
kernel = 2

[[layer]]
name = "dw"
op = "depthwise"
kernel = 3
padding = 1

[[layer]]
op = "relu6"

[[layer]]
name = "gap"
op = "global_avgpool"

[[layer]]
op = "flatten"

[[layer]]
name = "head"
op = "dense"
out_features = 3
"#
    )
}

/// A fresh, empty scratch folder unique to this test.
pub fn scratch(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("midge-{tag}-{}", std::process::id()));
    let _ = fs::remove_dir_all(&d);
    fs::create_dir_all(&d).unwrap();
    d
}

/// One 8×8 RGB image of class `k` with noise: a ring, a centre dot or a bar.
pub fn image(k: usize, rng: &mut ChaCha8Rng) -> image::RgbImage {
    image::RgbImage::from_fn(8, 8, |x, y| {
        let (dx, dy) = (x as i32 * 2 - 7, y as i32 * 2 - 7);
        let r2 = dx * dx + dy * dy;
        let on = match k {
            0 => (20..=40).contains(&r2),
            1 => r2 <= 10,
            _ => (3..=4).contains(&y),
        };
        let base: u8 = if on { 200 } else { 40 };
        let n: i32 = rng.gen_range(-30..=30);
        let v = (base as i32 + n).clamp(0, 255) as u8;
        image::Rgb([v, v.saturating_sub(20), v / 2 + 60])
    })
}

/// Write the model (weights seeded by `seed`), 12 calibration images and a
/// validation folder of 4 images per class into `dir`; returns the
/// description path.
pub fn write_model(dir: &Path, block_extra: &str, seed: u64) -> PathBuf {
    let text = description_text(block_extra);
    let desc_path = dir.join("model.toml");
    fs::write(&desc_path, &text).unwrap();
    let desc = Description::load(&desc_path).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut map = TensorMap::new("weights.safetensors");
    for (name, shape) in desc.expected_tensors().unwrap() {
        let n: usize = shape.iter().product();
        let data: Vec<f32> = (0..n)
            .map(|_| {
                // BatchNorm variances and gammas positive, the rest signed.
                if name.ends_with("running_var") || (name.ends_with(".weight") && shape.len() == 1)
                {
                    rng.gen_range(0.5..1.5)
                } else {
                    rng.gen_range(-0.6..0.6)
                }
            })
            .collect();
        map.insert(name, shape, data);
    }
    fs::write(
        dir.join("weights.safetensors"),
        map.to_safetensors_bytes().unwrap(),
    )
    .unwrap();
    fs::create_dir_all(dir.join("calib")).unwrap();
    for i in 0..12 {
        image(i % 3, &mut rng)
            .save(dir.join("calib").join(format!("c{i:02}.png")))
            .unwrap();
    }
    for (k, l) in LABELS.iter().enumerate() {
        let d = dir.join("val").join(l);
        fs::create_dir_all(&d).unwrap();
        for i in 0..4 {
            image(k, &mut rng)
                .save(d.join(format!("v{i}.png")))
                .unwrap();
        }
    }
    desc_path
}
