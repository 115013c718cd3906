//! Seeded synthetic weights and calibration pixels for descriptions that
//! ship no weights (reference architectures, sweeps): the normal graph,
//! calibration and quantize path then gives a model of the true size.

use std::path::Path;

use crate::calibrate::{self, RangeMethod};
use crate::description::{Description, LayerKind};
use crate::float_ref;
use crate::graph::FloatGraph;
use crate::quantize::{self, Quantized};
use crate::weights::TensorMap;
use crate::Result;

/// A small seeded generator (SplitMix64, Steele, Lea & Flood, "Fast
/// splittable pseudorandom number generators", OOPSLA 2014).
#[derive(Clone, Debug)]
pub struct SplitMix(u64);

impl SplitMix {
    pub fn new(seed: u64) -> Self {
        SplitMix(seed)
    }
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    /// Uniform in [lo, hi).
    pub fn uniform(&mut self, lo: f32, hi: f32) -> f32 {
        let u = (self.next_u64() >> 40) as f32 / (1u64 << 24) as f32;
        lo + (hi - lo) * u
    }
}

/// Seeded random weights of every tensor the description reads. Conv2d,
/// depthwise and dense weights are uniform in ±1/sqrt(fan_in) and so are
/// their biases (PyTorch's default initialization bound, common practice);
/// BatchNorm gets weight and running variance in [0.5, 1.5), bias and
/// running mean in [−0.1, 0.1).
pub fn synth_weights(desc: &Description, seed: u64) -> Result<TensorMap> {
    let mut rng = SplitMix::new(seed);
    let mut map = TensorMap::new(format!("synthetic weights (seed {seed})"));
    for layer in desc.topology()? {
        let expected = layer.expected_tensors();
        let fan_in: usize = expected
            .first()
            .map_or(1, |(_, s)| s.iter().skip(1).product::<usize>().max(1));
        let bound = 1.0 / (fan_in as f32).sqrt();
        for (name, shape) in expected {
            let n: usize = shape.iter().product();
            let (lo, hi) = if layer.kind == LayerKind::BatchNorm {
                if name.ends_with(".weight") || name.ends_with(".running_var") {
                    (0.5, 1.5)
                } else {
                    (-0.1, 0.1)
                }
            } else {
                (-bound, bound)
            };
            let data = (0..n).map(|_| rng.uniform(lo, hi)).collect();
            map.insert(name, shape, data);
        }
    }
    Ok(map)
}

/// `count` seeded random images of the description's input size (HWC bytes).
pub fn synth_pixels(desc: &Description, count: usize, seed: u64) -> Vec<Vec<u8>> {
    let mut rng = SplitMix::new(seed ^ 0x5EED_0F1A_7A00);
    let n = desc.input_shape().elems();
    (0..count)
        .map(|_| (0..n).map(|_| (rng.next_u64() >> 56) as u8).collect())
        .collect()
}

/// Synthetic images used for calibrating a synthetic model.
pub const SYNTH_CALIBRATION_IMAGES: usize = 4;

/// The description quantized with synthetic weights, calibrated (min/max)
/// on synthetic images: the model file has the size and layout a trained
/// model of this architecture would have.
pub fn synth_quantize(desc: &Description, seed: u64) -> Result<Quantized> {
    let tensors = synth_weights(desc, seed)?;
    let graph = FloatGraph::build(desc, &tensors)?.fold()?;
    let pixels = synth_pixels(desc, SYNTH_CALIBRATION_IMAGES, seed);
    let method = RangeMethod::MinMax;
    let stats = calibrate::collect(pixels.len(), method, false, |i| {
        float_ref::run_finite(&graph, &pixels[i])
            .map_err(|e| e.error(Path::new(&format!("synthetic image {i}"))))
    })?;
    let ranges: Vec<_> = stats.iter().map(|s| s.range(method)).collect();
    quantize::quantize_graph(&graph, &ranges)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn splitmix_first_outputs() {
        // Reference outputs of SplitMix64 seeded with 0 (the C reference
        // implementation by Vigna, splitmix64.c; first value from memory:
        // 0xE220A8397B1DCDAF).
        let mut r = SplitMix::new(0);
        assert_eq!(r.next_u64(), 0xE220_A839_7B1D_CDAF);
        let u = r.uniform(-1.0, 1.0);
        assert!((-1.0..1.0).contains(&u));
    }
}
