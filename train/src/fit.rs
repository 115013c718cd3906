//! The training loop: seeded mini-batch Adam on cross-entropy with a cosine
//! learning-rate schedule, accuracy on labelled images, and the check that the
//! converter's float reference reads the written weights to the same accuracy.

use std::path::Path;

use candle_core::Tensor;
use candle_nn::{AdamW, Optimizer, ParamsAdamW};
use midge_convert::description::Description;
use midge_convert::images::{labelled_folder, load_image, ImageSpec};
use midge_convert::{float_ref, graph, Error, Result};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::images::GreySet;
use crate::net::{ce, Net};

/// Hyper-parameters of one run.
#[derive(Clone, Debug)]
pub struct FitConfig {
    /// Seeds weight initialization and batch order.
    pub seed: u64,
    pub epochs: usize,
    pub batch: usize,
    /// Peak learning rate; decays along a half cosine to 2 % of it.
    pub lr: f64,
    /// Decoupled weight decay (AdamW).
    pub weight_decay: f64,
}

/// Where the training images of each epoch come from.
pub trait TrainSource {
    /// The images of epoch `epoch` (0-based), in any order.
    fn epoch(&mut self, epoch: usize) -> GreySet;
}

/// A fixed training set, optionally shifted by up to one pixel per image
/// (a fresh random shift each epoch) to stretch a small data set.
pub struct FixedSet {
    pub set: GreySet,
    pub shift: bool,
    pub seed: u64,
}

impl TrainSource for FixedSet {
    fn epoch(&mut self, epoch: usize) -> GreySet {
        if !self.shift {
            return self.set.clone();
        }
        let mut rng = ChaCha8Rng::seed_from_u64(self.seed ^ (epoch as u64).wrapping_mul(0x9E37));
        let (h, w) = (self.set.h, self.set.w);
        let mut out = GreySet::new(h, w);
        let mut img = vec![0u8; h * w];
        for i in 0..self.set.len() {
            let src = self.set.image(i);
            let dy = *[-1isize, 0, 1].choose(&mut rng).unwrap_or(&0);
            let dx = *[-1isize, 0, 1].choose(&mut rng).unwrap_or(&0);
            for y in 0..h as isize {
                for x in 0..w as isize {
                    let (sy, sx) = (y - dy, x - dx);
                    img[(y as usize) * w + x as usize] =
                        if sy >= 0 && sx >= 0 && sy < h as isize && sx < w as isize {
                            src[sy as usize * w + sx as usize]
                        } else {
                            0
                        };
                }
            }
            out.push(&img, self.set.labels[i]);
        }
        out
    }
}

/// Trains `net`; prints one line per epoch with the mean loss and, when given,
/// the accuracy on `check`.
pub fn fit(
    net: &mut Net,
    source: &mut dyn TrainSource,
    cfg: &FitConfig,
    check: Option<&GreySet>,
) -> Result<()> {
    let place = "training";
    let params = ParamsAdamW {
        lr: cfg.lr,
        weight_decay: cfg.weight_decay,
        ..ParamsAdamW::default()
    };
    let mut opt = AdamW::new(net.vars(), params).map_err(ce(place))?;
    let mut rng = ChaCha8Rng::seed_from_u64(cfg.seed);
    let mut step = 0usize;
    for epoch in 0..cfg.epochs {
        let data = source.epoch(epoch);
        let steps_per_epoch = data.len().div_ceil(cfg.batch);
        let total = steps_per_epoch * cfg.epochs;
        let mut order: Vec<usize> = (0..data.len()).collect();
        order.shuffle(&mut rng);
        let (mut loss_sum, mut batches) = (0.0f64, 0usize);
        for chunk in order.chunks(cfg.batch) {
            // Half-cosine decay from lr to 0.02·lr over all steps.
            let progress = step as f64 / total.max(1) as f64;
            opt.set_learning_rate(
                cfg.lr * (0.02 + 0.98 * 0.5 * (1.0 + (std::f64::consts::PI * progress).cos())),
            );
            let mut px = Vec::with_capacity(chunk.len() * data.h * data.w);
            let mut labels = Vec::with_capacity(chunk.len());
            for &i in chunk {
                px.extend_from_slice(data.image(i));
                labels.push(data.labels[i] as u32);
            }
            let loss = (|| {
                let x = net.batch(&px, chunk.len())?;
                let y = Tensor::new(labels.as_slice(), &candle_core::Device::Cpu)?;
                let logits = net.forward(&x, true)?;
                let loss = candle_nn::loss::cross_entropy(&logits, &y)?;
                opt.backward_step(&loss)?;
                loss.to_scalar::<f32>()
            })()
            .map_err(ce(format!("{place}: epoch {}", epoch + 1)))?;
            loss_sum += f64::from(loss);
            batches += 1;
            step += 1;
        }
        let mut line = format!(
            "epoch {:>3}/{}  loss {:.4}",
            epoch + 1,
            cfg.epochs,
            loss_sum / batches.max(1) as f64
        );
        if let Some(check) = check {
            line += &format!("  accuracy {:.2} %", 100.0 * accuracy(net, check)?);
        }
        println!("{line}");
    }
    Ok(())
}

/// Top-1 accuracy of `net` (eval mode) on a labelled set.
pub fn accuracy(net: &mut Net, set: &GreySet) -> Result<f64> {
    let n = set.h * set.w;
    let mut right = 0usize;
    for start in (0..set.len()).step_by(256) {
        let end = (start + 256).min(set.len());
        let pred = net
            .predict(&set.pixels[start * n..end * n], end - start)
            .map_err(ce("evaluation"))?;
        right += pred
            .iter()
            .zip(&set.labels[start..end])
            .filter(|(p, l)| **p as usize == **l)
            .count();
    }
    Ok(right as f64 / set.len().max(1) as f64)
}

/// Loads the description's `validation` folder (one sub-folder per label)
/// through the converter's image reader, as a grey set.
pub fn validation_set(desc: &Description) -> Result<GreySet> {
    let dir = desc
        .validation
        .as_ref()
        .ok_or_else(|| Error::new(desc.origin.display().to_string(), "no `validation` key"))?;
    let s = desc.input_shape();
    if s.c != 1 {
        return Err(Error::new(
            desc.origin.display().to_string(),
            format!("the trainer handles grey (1-channel) inputs, found {}", s.c),
        ));
    }
    let spec = ImageSpec {
        h: s.h as u32,
        w: s.w as u32,
        c: 1,
        resize: desc.input.resize,
    };
    let mut set = GreySet::new(s.h as usize, s.w as usize);
    for (path, label) in labelled_folder(dir, &desc.labels)? {
        set.push(&load_image(&path, &spec)?, label);
    }
    Ok(set)
}

/// Accuracy of the converter's folded float reference, reading the
/// description's weights file, on the same labelled images.
pub fn reference_accuracy(desc_path: &Path, set: &GreySet) -> Result<f64> {
    let m = reference_confusion(desc_path, set)?;
    let right: usize = (0..m.len()).map(|k| m[k][k]).sum();
    Ok(right as f64 / set.len().max(1) as f64)
}

/// Confusion counts of the converter's float reference: `m[true][predicted]`.
pub fn reference_confusion(desc_path: &Path, set: &GreySet) -> Result<Vec<Vec<usize>>> {
    let (desc, g, _) = graph::load_graph(desc_path)?;
    let k = desc.labels.len();
    let mut m = vec![vec![0usize; k]; k];
    for i in 0..set.len() {
        let logits = float_ref::logits(&g, set.image(i));
        let best = logits
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.total_cmp(b.1))
            .map_or(0, |(k, _)| k);
        if let Some(row) = m.get_mut(set.labels[i]) {
            if let Some(cell) = row.get_mut(best) {
                *cell += 1;
            }
        }
    }
    Ok(m)
}

/// Largest absolute difference between candle's eval-mode logits and the
/// converter's float reference over the first `n` images of `set`.
pub fn logit_gap(net: &mut Net, desc_path: &Path, set: &GreySet, n: usize) -> Result<f32> {
    let (_, g, _) = graph::load_graph(desc_path)?;
    let n = n.min(set.len());
    let px = &set.pixels[..n * set.h * set.w];
    let ours = (|| {
        let x = net.batch(px, n)?;
        net.forward(&x, false)?.to_vec2::<f32>()
    })()
    .map_err(ce("evaluation"))?;
    let mut gap = 0f32;
    for (i, row) in ours.iter().enumerate() {
        let theirs = float_ref::logits(&g, set.image(i));
        for (a, b) in row.iter().zip(&theirs) {
            gap = gap.max((a - b).abs());
        }
    }
    Ok(gap)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn shifted(src: &[u8], h: usize, w: usize, dy: isize, dx: isize) -> Vec<u8> {
        let mut out = vec![0u8; h * w];
        for y in 0..h as isize {
            for x in 0..w as isize {
                let (sy, sx) = (y - dy, x - dx);
                if (0..h as isize).contains(&sy) && (0..w as isize).contains(&sx) {
                    out[y as usize * w + x as usize] = src[sy as usize * w + sx as usize];
                }
            }
        }
        out
    }

    #[test]
    fn shift_moves_each_image_by_at_most_one_pixel() {
        let mut set = GreySet::new(4, 5);
        for k in 0..6u8 {
            let img: Vec<u8> = (0..20u8).map(|i| i * 10 + k + 1).collect();
            set.push(&img, k as usize % 3);
        }
        let mut src = FixedSet {
            set: set.clone(),
            shift: true,
            seed: 9,
        };
        let a = src.epoch(0);
        assert_eq!(a, src.epoch(0), "same epoch, same shifts");
        assert_eq!(a.labels, set.labels);
        let mut moved = 0;
        for i in 0..set.len() {
            let options: Vec<Vec<u8>> = (-1..=1)
                .flat_map(|dy| (-1..=1).map(move |dx| (dy, dx)))
                .map(|(dy, dx)| shifted(set.image(i), 4, 5, dy, dx))
                .collect();
            assert!(options.iter().any(|o| o == a.image(i)), "image {i}");
            moved += usize::from(a.image(i) != set.image(i));
        }
        assert!(moved > 0, "some image must move");
        let plain = FixedSet {
            shift: false,
            ..src
        }
        .epoch(3);
        assert_eq!(plain, set);
    }
}
