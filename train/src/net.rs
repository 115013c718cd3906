//! The candle network built from a model description: NCHW tensors (as
//! PyTorch), parameters named `<tensor>.weight` / `.bias` / BatchNorm running
//! statistics, seeded initialization, train/eval forward, safetensors export.

use std::collections::HashMap;
use std::path::Path;

use candle_core::{DType, Device, Tensor, Var, D};
use midge_convert::description::{Description, LayerInfo, LayerKind};
use midge_convert::{Error, Result};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// PyTorch's BatchNorm momentum for running statistics (default 0.1).
pub const BN_MOMENTUM: f64 = 0.1;

/// Maps a candle error into ours, naming where it happened.
pub fn ce(place: impl Into<String>) -> impl FnOnce(candle_core::Error) -> Error {
    let place = place.into();
    move |e| Error::new(place, format!("candle: {e}"))
}

/// Running statistics of one BatchNorm layer, as PyTorch keeps them.
struct BnStats {
    mean: Tensor,
    var: Tensor,
    batches: i64,
}

/// A trainable network that follows the description's layers.
pub struct Net {
    layers: Vec<LayerInfo>,
    /// Trainable parameters in layer order: (safetensors name, variable).
    params: Vec<(String, Var)>,
    index: HashMap<String, usize>,
    bn: HashMap<String, BnStats>,
    /// Per-channel normalization: x = (p/255·range − mean) / std.
    mean: Vec<f32>,
    std: Vec<f32>,
    pixel_range: f32,
    pub input_hwc: (usize, usize, usize),
    pub classes: usize,
    device: Device,
}

fn gaussian(rng: &mut ChaCha8Rng) -> f32 {
    // Box–Muller transform (common practice).
    let u1: f32 = rng.gen_range(f32::EPSILON..1.0);
    let u2: f32 = rng.gen();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f32::consts::PI * u2).cos()
}

/// Every stride-th element along height and width of an NCHW tensor.
fn subsample(t: &Tensor, stride: usize) -> candle_core::Result<Tensor> {
    if stride == 1 {
        return Ok(t.clone());
    }
    let (n, c, h, w) = t.dims4()?;
    let (oh, ow) = ((h - 1) / stride + 1, (w - 1) / stride + 1);
    t.pad_with_zeros(2, 0, oh * stride - h)?
        .pad_with_zeros(3, 0, ow * stride - w)?
        .reshape((n, c, oh, stride, ow, stride))?
        .narrow(3, 0, 1)?
        .narrow(5, 0, 1)?
        .reshape((n, c, oh, ow))
}

/// The kH·kW shifted views of a zero-padded NCHW input (stride 1), each
/// N×C×H'×W', in kernel row-major order.
fn taps(
    x: &Tensor,
    pad: usize,
    kh: usize,
    kw: usize,
    dil: usize,
) -> candle_core::Result<Vec<Tensor>> {
    let x = if pad > 0 {
        x.pad_with_zeros(2, pad, pad)?.pad_with_zeros(3, pad, pad)?
    } else {
        x.clone()
    };
    let (_, _, h, w) = x.dims4()?;
    let (span_h, span_w) = (dil * (kh - 1) + 1, dil * (kw - 1) + 1);
    if span_h > h || span_w > w {
        candle_core::bail!("kernel {kh}×{kw} larger than the padded input {h}×{w}");
    }
    let (fh, fw) = (h - span_h + 1, w - span_w + 1);
    let mut v = Vec::with_capacity(kh * kw);
    for i in 0..kh {
        for j in 0..kw {
            v.push(x.narrow(2, i * dil, fh)?.narrow(3, j * dil, fw)?);
        }
    }
    Ok(v)
}

/// Convolution (weight O×C×kH×kW) as one matrix product over the unfolded
/// input (rows ordered C, kH, kW like the weight). Its gradient is plain
/// matmul and slicing, which candle runs far faster on the CPU than the
/// transposed convolution its conv2d backward uses.
fn conv_unfold(
    x: &Tensor,
    weight: &Tensor,
    pad: usize,
    stride: usize,
    dil: usize,
) -> candle_core::Result<Tensor> {
    let (o, c, kh, kw) = weight.dims4()?;
    let n = x.dim(0)?;
    let cols = if kh == 1 && kw == 1 && pad == 0 {
        subsample(x, stride)?
    } else {
        let views: Vec<Tensor> = taps(x, pad, kh, kw, dil)?
            .iter()
            .map(|v| v.unsqueeze(2))
            .collect::<candle_core::Result<_>>()?;
        // N×C×K×H'×W' → N×(C·K)×H'×W'
        let t = Tensor::cat(&views, 2)?;
        let (_, _, k, fh, fw) = t.dims5()?;
        subsample(&t.reshape((n, c * k, fh, fw))?, stride)?
    };
    let (_, ck, oh, ow) = cols.dims4()?;
    let y = weight
        .reshape((1, o, ck))?
        .broadcast_as((n, o, ck))?
        .matmul(&cols.reshape((n, ck, oh * ow))?)?;
    y.reshape((n, o, oh, ow))
}

/// Depthwise convolution (weight C×1×kH×kW) as a sum of shifted, per-channel
/// scaled views of the padded input; a stride above 1 keeps every stride-th
/// output. Same result as candle's grouped conv2d with groups = C, much
/// faster on the CPU than its one-convolution-per-channel path.
fn depthwise_taps(
    x: &Tensor,
    weight: &Tensor,
    pad: usize,
    stride: usize,
    dil: usize,
) -> candle_core::Result<Tensor> {
    let (c, _, kh, kw) = weight.dims4()?;
    let mut acc: Option<Tensor> = None;
    for (t, view) in taps(x, pad, kh, kw, dil)?.iter().enumerate() {
        let (i, j) = (t / kw, t % kw);
        let tap = weight
            .narrow(2, i, 1)?
            .narrow(3, j, 1)?
            .reshape((1, c, 1, 1))?;
        let term = view.broadcast_mul(&tap)?;
        acc = Some(match acc {
            Some(a) => (a + term)?,
            None => term,
        });
    }
    match acc {
        Some(a) => subsample(&a, stride),
        None => candle_core::bail!("empty depthwise kernel"),
    }
}

impl Net {
    /// Builds the layers of `desc` with weights drawn from ChaCha8(`seed`):
    /// conv2d/depthwise He-normal (std √(2/fan_in)), dense std √(1/fan_in),
    /// biases 0, BatchNorm weight 1, bias 0, running mean 0, variance 1.
    pub fn new(desc: &Description, seed: u64) -> Result<Net> {
        let place = desc.origin.display().to_string();
        let layers = desc.topology()?;
        let device = Device::Cpu;
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut params = Vec::new();
        let mut bn = HashMap::new();
        for l in &layers {
            let lp = format!("{place}: layer {} ({})", l.index + 1, l.name);
            for key in ["stride", "dilation"] {
                if let Some(w) = l.window {
                    let (a, b) = if key == "stride" {
                        (w.stride_h, w.stride_w)
                    } else {
                        (w.dil_h, w.dil_w)
                    };
                    if a != b {
                        return Err(Error::new(
                            &lp,
                            format!("the trainer needs equal {key} along height and width, found {a}×{b}"),
                        ));
                    }
                }
            }
            if l.kind == LayerKind::MaxPool {
                let w = l.window.unwrap_or_default();
                if w.pad_top | w.pad_left | w.pad_bottom | w.pad_right != 0 || w.dil_h != 1 {
                    return Err(Error::new(
                        &lp,
                        "the trainer supports maxpool without padding or dilation only",
                    ));
                }
            }
            let expected = l.expected_tensors();
            for (name, shape) in expected {
                let n: usize = shape.iter().product();
                let is_bias = name.ends_with(".bias");
                let data: Vec<f32> = match l.kind {
                    LayerKind::BatchNorm => {
                        let v = if name.ends_with(".weight") || name.ends_with(".running_var") {
                            1.0
                        } else {
                            0.0
                        };
                        vec![v; n]
                    }
                    _ if is_bias => vec![0.0; n],
                    _ => {
                        let fan_in: usize = shape[1..].iter().product();
                        let gain = if l.kind == LayerKind::Dense { 1.0 } else { 2.0 };
                        let sd = (gain / fan_in.max(1) as f32).sqrt();
                        (0..n).map(|_| sd * gaussian(&mut rng)).collect()
                    }
                };
                let t = Tensor::from_vec(data, shape.as_slice(), &device).map_err(ce(&lp))?;
                if name.ends_with(".running_mean") || name.ends_with(".running_var") {
                    continue; // kept in `bn` below
                }
                params.push((name, Var::from_tensor(&t).map_err(ce(&lp))?));
            }
            if l.kind == LayerKind::BatchNorm {
                let c = l.out_shape.c as usize;
                let prefix = l.tensor.clone().unwrap_or_default();
                bn.insert(
                    prefix,
                    BnStats {
                        mean: Tensor::zeros(c, DType::F32, &device).map_err(ce(&lp))?,
                        var: Tensor::ones(c, DType::F32, &device).map_err(ce(&lp))?,
                        batches: 0,
                    },
                );
            }
        }
        let index = params
            .iter()
            .enumerate()
            .map(|(i, (n, _))| (n.clone(), i))
            .collect();
        let s = desc.input_shape();
        let classes = layers.last().map_or(0, |l| l.out_shape.elems());
        Ok(Net {
            layers,
            params,
            index,
            bn,
            mean: desc.input.mean_values(),
            std: desc.input.std_values(),
            pixel_range: desc.input.pixel_range,
            input_hwc: (s.h as usize, s.w as usize, s.c as usize),
            classes,
            device,
        })
    }

    /// The trainable variables (weights, biases, BatchNorm scale and shift).
    pub fn vars(&self) -> Vec<Var> {
        self.params.iter().map(|(_, v)| v.clone()).collect()
    }

    fn param(&self, name: &str) -> candle_core::Result<Tensor> {
        match self.index.get(name) {
            Some(&i) => Ok(self.params[i].1.as_tensor().clone()),
            None => candle_core::bail!("no parameter {name}"),
        }
    }

    /// Camera bytes of `n` HWC images → normalized NCHW batch, exactly as the
    /// description's `[input]` table says: (p/255·pixel_range − mean[c]) / std[c].
    pub fn batch(&self, pixels: &[u8], n: usize) -> candle_core::Result<Tensor> {
        let (h, w, c) = self.input_hwc;
        let v: Vec<f32> = pixels
            .iter()
            .enumerate()
            .map(|(i, &p)| {
                let ch = i % c;
                (p as f32 / 255.0 * self.pixel_range - self.mean[ch]) / self.std[ch]
            })
            .collect();
        Tensor::from_vec(v, (n, h, w, c), &self.device)?
            .permute((0, 3, 1, 2))?
            .contiguous()
    }

    /// Logits (N × classes) for a normalized NCHW batch. In training mode
    /// BatchNorm normalizes with the batch statistics and updates its running
    /// statistics (PyTorch: momentum 0.1, unbiased variance in the running value).
    pub fn forward(&mut self, x: &Tensor, train: bool) -> candle_core::Result<Tensor> {
        let mut t: Vec<Tensor> = vec![x.clone()];
        let layers = self.layers.clone();
        for l in &layers {
            let a = &t[l.inputs[0]];
            let y = match l.kind {
                LayerKind::Conv2d | LayerKind::Depthwise => self.conv(l, a)?,
                LayerKind::MaxPool | LayerKind::AvgPool => {
                    let w = l.window.unwrap_or_default();
                    let (k, s) = (
                        (w.kh as usize, w.kw as usize),
                        (w.stride_h as usize, w.stride_w as usize),
                    );
                    if l.kind == LayerKind::MaxPool {
                        a.max_pool2d_with_stride(k, s)?
                    } else {
                        a.avg_pool2d_with_stride(k, s)?
                    }
                }
                LayerKind::GlobalAvgPool => a.mean_keepdim((2, 3))?,
                LayerKind::Dense => {
                    let prefix = l.tensor.as_deref().unwrap_or_default();
                    let flat = a.flatten_from(1)?;
                    let mut y = flat.matmul(&self.param(&format!("{prefix}.weight"))?.t()?)?;
                    if l.bias {
                        y = y.broadcast_add(&self.param(&format!("{prefix}.bias"))?)?;
                    }
                    let n = y.dim(1)?;
                    y.reshape((y.dim(0)?, n, 1, 1))?
                }
                LayerKind::Add => (a + &t[l.inputs[1]])?,
                LayerKind::Relu => a.relu()?,
                LayerKind::Relu6 => a.clamp(0f32, 6f32)?,
                // NCHW flattened in C, H, W order, as PyTorch's `flatten(1)`.
                LayerKind::Flatten => {
                    let f = a.flatten_from(1)?;
                    let n = f.dim(1)?;
                    f.reshape((f.dim(0)?, n, 1, 1))?
                }
                LayerKind::BatchNorm => self.batchnorm(l, a, train)?,
            };
            t.push(y);
        }
        t.pop().unwrap_or_else(|| x.clone()).flatten_from(1)
    }

    fn conv(&self, l: &LayerInfo, x: &Tensor) -> candle_core::Result<Tensor> {
        let prefix = l.tensor.as_deref().unwrap_or_default();
        let w = l.window.unwrap_or_default();
        let weight = self.param(&format!("{prefix}.weight"))?;
        let groups = if l.kind == LayerKind::Depthwise {
            l.in_shapes[0].c as usize
        } else {
            1
        };
        let (pt, pl, pb, pr) = (w.pad_top, w.pad_left, w.pad_bottom, w.pad_right);
        let sym = pt == pb && pl == pr && pt == pl;
        let (x, pad) = if sym {
            (x.clone(), pt as usize)
        } else {
            let x = x.pad_with_zeros(2, pt as usize, pb as usize)?;
            (x.pad_with_zeros(3, pl as usize, pr as usize)?, 0)
        };
        let mut y = if groups > 1 {
            depthwise_taps(&x, &weight, pad, w.stride_h as usize, w.dil_h as usize)?
        } else {
            conv_unfold(&x, &weight, pad, w.stride_h as usize, w.dil_h as usize)?
        };
        if l.bias {
            let b = self.param(&format!("{prefix}.bias"))?;
            y = y.broadcast_add(&b.reshape((1, b.dim(0)?, 1, 1))?)?;
        }
        Ok(y)
    }

    fn batchnorm(&mut self, l: &LayerInfo, x: &Tensor, train: bool) -> candle_core::Result<Tensor> {
        let prefix = l.tensor.clone().unwrap_or_default();
        let c = x.dim(1)?;
        let gamma = self
            .param(&format!("{prefix}.weight"))?
            .reshape((1, c, 1, 1))?;
        let beta = self
            .param(&format!("{prefix}.bias"))?
            .reshape((1, c, 1, 1))?;
        let Some(stats) = self.bn.get_mut(&prefix) else {
            candle_core::bail!("no running statistics for {prefix}")
        };
        let (mean, var) = if train {
            let mean = x.mean_keepdim((0, 2, 3))?;
            let centred = x.broadcast_sub(&mean)?;
            let var = centred.sqr()?.mean_keepdim((0, 2, 3))?;
            let n = (x.elem_count() / c) as f64;
            let unbiased = (var.detach().flatten_all()? * (n / (n - 1.0).max(1.0)))?;
            stats.mean = ((&stats.mean * (1.0 - BN_MOMENTUM))?
                + (mean.detach().flatten_all()? * BN_MOMENTUM)?)?;
            stats.var = ((&stats.var * (1.0 - BN_MOMENTUM))? + (unbiased * BN_MOMENTUM)?)?;
            stats.batches += 1;
            (mean, var)
        } else {
            (
                stats.mean.reshape((1, c, 1, 1))?,
                stats.var.reshape((1, c, 1, 1))?,
            )
        };
        let inv = (var + f64::from(l.eps))?.sqrt()?.recip()?;
        x.broadcast_sub(&mean)?
            .broadcast_mul(&inv)?
            .broadcast_mul(&gamma)?
            .broadcast_add(&beta)
    }

    /// Predicted class per image of an HWC byte batch (eval mode).
    pub fn predict(&mut self, pixels: &[u8], n: usize) -> candle_core::Result<Vec<u32>> {
        let x = self.batch(pixels, n)?;
        self.forward(&x, false)?.argmax(D::Minus1)?.to_vec1::<u32>()
    }

    /// Every tensor as a PyTorch `state_dict` export names it: conv2d weights
    /// O×I×kH×kW, dense O×I, BatchNorm weight, bias, running_mean, running_var
    /// (F32) and num_batches_tracked (I64 scalar).
    pub fn state_dict(&self) -> candle_core::Result<Vec<(String, Tensor)>> {
        let mut out: Vec<(String, Tensor)> = self
            .params
            .iter()
            .map(|(n, v)| (n.clone(), v.as_tensor().detach()))
            .collect();
        for (prefix, s) in &self.bn {
            out.push((format!("{prefix}.running_mean"), s.mean.clone()));
            out.push((format!("{prefix}.running_var"), s.var.clone()));
            out.push((
                format!("{prefix}.num_batches_tracked"),
                Tensor::new(s.batches, &self.device)?,
            ));
        }
        out.sort_by(|a, b| a.0.cmp(&b.0));
        Ok(out)
    }

    /// Writes [`Net::state_dict`] to `path` (a temporary file, then renamed).
    pub fn save(&self, path: &Path) -> Result<()> {
        let place = path.display().to_string();
        let map: HashMap<String, Tensor> =
            self.state_dict().map_err(ce(&place))?.into_iter().collect();
        let tmp = path.with_extension("safetensors.tmp");
        candle_core::safetensors::save(&map, &tmp).map_err(ce(&place))?;
        std::fs::rename(&tmp, path).map_err(|e| Error::new(&place, format!("renaming: {e}")))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Largest |ours − theirs| after checking the two have the same dims
    /// (`case` names the case in the failure message).
    fn max_gap(ours: &Tensor, theirs: &Tensor, case: &str) -> f32 {
        assert_eq!(ours.dims(), theirs.dims(), "{case}");
        (ours - theirs)
            .unwrap()
            .abs()
            .unwrap()
            .flatten_all()
            .unwrap()
            .max(0)
            .unwrap()
            .to_scalar::<f32>()
            .unwrap()
    }

    /// The shifted-view depthwise against candle's grouped conv2d (the
    /// general-purpose reference, groups = channels), strides 1 and 2.
    #[test]
    fn depthwise_taps_match_grouped_conv2d() {
        let dev = Device::Cpu;
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let xs: Vec<f32> = (0..2 * 3 * 7 * 6).map(|_| gaussian(&mut rng)).collect();
        let ws: Vec<f32> = (0..3 * 9).map(|_| gaussian(&mut rng)).collect();
        let x = Tensor::from_vec(xs, (2, 3, 7, 6), &dev).unwrap();
        let w = Tensor::from_vec(ws, (3, 1, 3, 3), &dev).unwrap();
        for (pad, stride, dil) in [(1, 1, 1), (1, 2, 1), (0, 2, 1), (2, 1, 2)] {
            let ours = depthwise_taps(&x, &w, pad, stride, dil).unwrap();
            let theirs = x.conv2d(&w, pad, stride, dil, 3).unwrap();
            let case = format!("pad {pad} stride {stride} dil {dil}");
            let gap = max_gap(&ours, &theirs, &case);
            assert!(gap < 1e-5, "{case}: {gap}");
        }
    }

    /// The unfolded matmul convolution against candle's conv2d (the
    /// general-purpose reference), including 1×1 and strided cases.
    #[test]
    fn unfolded_conv_matches_candle_conv2d() {
        let dev = Device::Cpu;
        let mut rng = ChaCha8Rng::seed_from_u64(6);
        let xs: Vec<f32> = (0..2 * 3 * 7 * 6).map(|_| gaussian(&mut rng)).collect();
        let x = Tensor::from_vec(xs, (2, 3, 7, 6), &dev).unwrap();
        for (k, pad, stride, dil) in [
            (3, 1, 1, 1),
            (3, 1, 2, 1),
            (1, 0, 1, 1),
            (1, 0, 2, 1),
            (3, 0, 1, 2),
            (2, 0, 2, 1),
        ] {
            let ws: Vec<f32> = (0..5 * 3 * k * k).map(|_| gaussian(&mut rng)).collect();
            let w = Tensor::from_vec(ws, (5, 3, k, k), &dev).unwrap();
            let ours = conv_unfold(&x, &w, pad, stride, dil).unwrap();
            let theirs = x.conv2d(&w, pad, stride, dil, 1).unwrap();
            let case = format!("k {k} pad {pad} stride {stride} dil {dil}");
            let gap = max_gap(&ours, &theirs, &case);
            assert!(gap < 1e-4, "{case}: {gap}");
        }
    }

    const SMALL: &str = r#"
name = "small"
labels = ["a", "b", "c"]
[input]
height = 6
width = 6
channels = 1
mean = [0.5]
std = [0.25]
[[layer]]
name = "c1"
op = "conv2d"
out_channels = 4
kernel = 3
padding = 1
bias = false
[[layer]]
name = "bn"
op = "batchnorm"
[[layer]]
name = "r1"
op = "relu6"
[[layer]]
name = "dw"
op = "depthwise"
kernel = 3
stride = 2
padding = 1
[[layer]]
name = "pw"
op = "conv2d"
out_channels = 4
kernel = 1
[[layer]]
name = "sum"
op = "add"
from = ["pw", "dw"]
[[layer]]
name = "flat"
op = "flatten"
[[layer]]
name = "fc"
tensor = "head.0"
op = "dense"
out_features = 3
"#;

    fn small() -> (Description, Net) {
        let d = Description::from_toml_str(SMALL, Path::new("small.toml")).unwrap();
        let net = Net::new(&d, 3).unwrap();
        (d, net)
    }

    /// The exported names and shapes are exactly what the converter expects
    /// from a PyTorch state_dict, plus BatchNorm's int64 counter.
    #[test]
    fn state_dict_matches_the_description() {
        let (d, mut net) = small();
        let px: Vec<u8> = (0..2 * 36).map(|i| (i * 7 % 256) as u8).collect();
        let x = net.batch(&px, 2).unwrap();
        let y = net.forward(&x, true).unwrap();
        assert_eq!(y.dims(), &[2, 3]);
        let sd = net.state_dict().unwrap();
        let mut want = d.expected_tensors().unwrap();
        want.push(("bn.num_batches_tracked".into(), vec![]));
        want.sort();
        let got: Vec<(String, Vec<usize>)> = sd
            .iter()
            .map(|(n, t)| (n.clone(), t.dims().to_vec()))
            .collect();
        assert_eq!(got, want);
        let count = sd
            .iter()
            .find(|(n, _)| n == "bn.num_batches_tracked")
            .unwrap();
        assert_eq!(count.1.dtype(), DType::I64);
        assert_eq!(count.1.to_scalar::<i64>().unwrap(), 1);
    }

    /// BatchNorm in training mode, as the PyTorch `BatchNorm2d` documentation
    /// describes it (recalled from memory): running = (1 − 0.1)·running +
    /// 0.1·batch statistic, the unbiased variance in the running value and the
    /// biased one for normalizing.
    #[test]
    fn batchnorm_running_statistics_follow_pytorch() {
        let (_, mut net) = small();
        let px: Vec<u8> = (0..3 * 36).map(|i| (i * 37 % 251) as u8).collect();
        let x = net.batch(&px, 3).unwrap();
        let conv = conv_unfold(&x, &net.param("c1.weight").unwrap(), 1, 1, 1).unwrap();
        let layers = net.layers.clone();
        let bn = layers.iter().find(|l| l.name == "bn").unwrap();
        let out = net.batchnorm(bn, &conv, true).unwrap();
        // By hand, per channel, from the conv output.
        let v = conv.permute((1, 0, 2, 3)).unwrap().flatten_from(1).unwrap();
        let rows = v.to_vec2::<f32>().unwrap();
        let stats = &net.bn["bn"];
        let rm = stats.mean.to_vec1::<f32>().unwrap();
        let rv = stats.var.to_vec1::<f32>().unwrap();
        let outs = out
            .permute((1, 0, 2, 3))
            .unwrap()
            .flatten_from(1)
            .unwrap()
            .to_vec2::<f32>()
            .unwrap();
        for (c, row) in rows.iter().enumerate() {
            let n = row.len() as f32;
            let mean = row.iter().sum::<f32>() / n;
            let var = row.iter().map(|a| (a - mean).powi(2)).sum::<f32>() / n;
            assert!((rm[c] - 0.1 * mean).abs() < 1e-5, "channel {c} mean");
            assert!(
                (rv[c] - (0.9 + 0.1 * var * n / (n - 1.0))).abs() < 1e-4,
                "channel {c} var"
            );
            // weight 1, bias 0 at start: the output is the standardized input.
            let z = (row[5] - mean) / (var + 1e-5).sqrt();
            assert!((outs[c][5] - z).abs() < 1e-4, "channel {c} output");
        }
    }

    /// The written file is what the converter's weight loader accepts.
    #[test]
    fn saved_file_loads_in_the_converter() {
        let (d, net) = small();
        let dir = std::env::temp_dir().join(format!("midge-train-net-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("w.safetensors");
        net.save(&path).unwrap();
        let map = midge_convert::weights::TensorMap::load(&path).unwrap();
        let unused = map.check(&d).unwrap();
        assert!(unused.is_empty(), "{unused:?}");
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
