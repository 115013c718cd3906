//! Function-preserving per-channel rescale of a trained model's weights (the
//! bundled hard case for int8, `models/caps/hard.*`): a producer's output
//! channel c is multiplied by s_c > 0 and its consumer's input channel c divided by it.
//!
//! Exact in real arithmetic through ReLU, max and average pooling, which
//! are positively homogeneous: ReLU(s·x) = s·ReLU(x) for s > 0 (common
//! practice). The float function is unchanged while one tensor's channel
//! ranges spread over `decades` powers of ten, which one per-tensor int8
//! activation scale serves badly — the situation cross-layer equalization
//! (Nagel et al. 2019, ICCV) addresses.

use std::collections::HashMap;
use std::path::Path;

use candle_core::{DType, Device, Tensor};
use midge_convert::description::Description;
use midge_convert::{float_ref, graph, Error, Result};

use crate::images::GreySet;

/// Scale of channel `c` out of a cycle of `k`: 10^(decades·(c mod k)/(k−1) − decades/2),
/// so the scales run from 10^(−decades/2) to 10^(decades/2).
pub fn channel_scale(c: usize, k: usize, decades: f64) -> f64 {
    let k = k.max(2);
    let t = (c % k) as f64 / (k - 1) as f64;
    10f64.powf(decades * t - decades / 2.0)
}

/// The weight-file tensor prefix of the layer named `name`, its op, and its index.
fn layer<'a>(desc: &'a Description, place: &str, name: &str) -> Result<(usize, &'a str, String)> {
    let i = (0..desc.layers.len())
        .find(|&i| desc.layer_name(i) == name)
        .ok_or_else(|| Error::new(place, format!("no layer named {name}")))?;
    let l = &desc.layers[i];
    let tensor = l.tensor.clone().unwrap_or_else(|| name.to_string());
    Ok((i, l.op.as_str(), tensor))
}

/// Checks that `consumer` reads `producer` through only ReLU and pooling
/// layers, each reading the one before it, and that nothing else reads
/// the producer or the layers in between.
fn check_path(desc: &Description, place: &str, p: usize, q: usize) -> Result<()> {
    let names: Vec<String> = (0..desc.layers.len()).map(|i| desc.layer_name(i)).collect();
    if q <= p {
        return Err(Error::new(
            place,
            format!("{} does not come after {}", names[q], names[p]),
        ));
    }
    for i in p + 1..=q {
        let l = &desc.layers[i];
        if l.from.is_some() {
            return Err(Error::new(
                place,
                format!("layer {} has `from`: expected a straight chain", names[i]),
            ));
        }
        if i < q && !matches!(l.op.as_str(), "relu" | "maxpool" | "avgpool") {
            return Err(Error::new(
                place,
                format!(
                    "layer {} ({}) lies between {} and {}: expected only relu, maxpool or avgpool",
                    names[i], l.op, names[p], names[q]
                ),
            ));
        }
    }
    for (i, l) in desc.layers.iter().enumerate() {
        if let Some(from) = &l.from {
            if let Some(f) = from.0.iter().find(|f| names[p..q].contains(f)) {
                return Err(Error::new(
                    place,
                    format!(
                        "layer {} also reads {f}: the rescale would change it",
                        names[i]
                    ),
                ));
            }
        }
    }
    Ok(())
}

fn get<'a>(map: &'a HashMap<String, Tensor>, place: &str, key: &str) -> Result<&'a Tensor> {
    map.get(key)
        .ok_or_else(|| Error::new(place, format!("no tensor {key} in the weights")))
}

fn ce(place: &str) -> impl Fn(candle_core::Error) -> Error + '_ {
    move |e| Error::new(place, e.to_string())
}

/// One rescaled pair, for the printout.
#[derive(Clone, Debug)]
pub struct RescaledPair {
    pub producer: String,
    pub consumer: String,
    pub scales: Vec<f64>,
}

/// Rescales each (producer, consumer) pair of layer names of `desc` in
/// `weights` (its state_dict): a producer `batchnorm` has its weight and bias
/// multiplied by s_c, a `conv2d`/`depthwise` with bias its output channel's
/// weights and bias; the consumer `conv2d` has input channel c of its
/// [out, in, kh, kw] weight divided by s_c.
pub fn rescale(
    desc: &Description,
    weights: &mut HashMap<String, Tensor>,
    pairs: &[(String, String)],
    k: usize,
    decades: f64,
) -> Result<Vec<RescaledPair>> {
    let place = desc.origin.display().to_string();
    let place = place.as_str();
    let mut done = Vec::new();
    for (producer, consumer) in pairs {
        let (p, p_op, pt) = layer(desc, place, producer)?;
        let (q, q_op, qt) = layer(desc, place, consumer)?;
        check_path(desc, place, p, q)?;
        if q_op != "conv2d" {
            return Err(Error::new(
                place,
                format!("consumer {consumer} is {q_op}: expected conv2d"),
            ));
        }
        let w_key = format!("{qt}.weight");
        let w = get(weights, place, &w_key)?
            .to_dtype(DType::F32)
            .map_err(ce(place))?;
        let dims = w.dims().to_vec();
        if dims.len() != 4 {
            return Err(Error::new(
                place,
                format!("{w_key}: expected [out, in, kh, kw], found {dims:?}"),
            ));
        }
        let c = dims[1];
        let scales: Vec<f64> = (0..c).map(|i| channel_scale(i, k, decades)).collect();
        let s = Tensor::from_vec(scales.iter().map(|&v| v as f32).collect(), c, &Device::Cpu)
            .map_err(ce(place))?;
        let scaled_in = w
            .broadcast_div(&s.reshape((1, c, 1, 1)).map_err(ce(place))?)
            .map_err(ce(place))?;
        // The producer's own tensors, multiplied along their channel axis.
        let keys: Vec<(String, usize)> = match p_op {
            "batchnorm" => vec![(format!("{pt}.weight"), 1), (format!("{pt}.bias"), 1)],
            "conv2d" | "depthwise" => vec![(format!("{pt}.weight"), 4), (format!("{pt}.bias"), 1)],
            other => {
                return Err(Error::new(
                    place,
                    format!(
                        "producer {producer} is {other}: expected batchnorm, conv2d or depthwise"
                    ),
                ))
            }
        };
        let mut updates = vec![(w_key, scaled_in)];
        for (key, rank) in keys {
            let t = get(weights, place, &key)?
                .to_dtype(DType::F32)
                .map_err(ce(place))?;
            if t.dims().len() != rank || t.dims()[0] != c {
                return Err(Error::new(
                    place,
                    format!(
                        "{key}: expected {c} channels along the first axis, found {:?}",
                        t.dims()
                    ),
                ));
            }
            let shape: Vec<usize> = (0..rank).map(|a| if a == 0 { c } else { 1 }).collect();
            let m = t
                .broadcast_mul(&s.reshape(shape).map_err(ce(place))?)
                .map_err(ce(place))?;
            updates.push((key, m));
        }
        weights.extend(updates);
        done.push(RescaledPair {
            producer: producer.clone(),
            consumer: consumer.clone(),
            scales,
        });
    }
    Ok(done)
}

/// Reads `input`, rescales `pairs` and writes `output` (a temporary file,
/// then renamed).
pub fn rescale_file(
    desc: &Description,
    input: &Path,
    output: &Path,
    pairs: &[(String, String)],
    k: usize,
    decades: f64,
) -> Result<Vec<RescaledPair>> {
    let place = input.display().to_string();
    let mut map = candle_core::safetensors::load(input, &Device::Cpu).map_err(ce(&place))?;
    let done = rescale(desc, &mut map, pairs, k, decades)?;
    let out = output.display().to_string();
    let tmp = output.with_extension("safetensors.tmp");
    candle_core::safetensors::save(&map, &tmp).map_err(ce(&out))?;
    std::fs::rename(&tmp, output).map_err(|e| Error::new(&out, format!("renaming: {e}")))?;
    Ok(done)
}

/// Largest relative logit difference between the float references of two
/// descriptions over `set`: max over images of max|a − b| / max|a|.
pub fn float_gap(a: &Path, b: &Path, set: &GreySet) -> Result<f64> {
    let (_, ga, _) = graph::load_graph(a)?;
    let (_, gb, _) = graph::load_graph(b)?;
    let mut gap = 0f64;
    for i in 0..set.len() {
        let la = float_ref::logits(&ga, set.image(i));
        let lb = float_ref::logits(&gb, set.image(i));
        let scale = la.iter().fold(0f64, |m, v| m.max(v.abs() as f64));
        let diff = la
            .iter()
            .zip(&lb)
            .fold(0f64, |m, (x, y)| m.max((x - y).abs() as f64));
        if scale > 0.0 {
            gap = gap.max(diff / scale);
        }
    }
    Ok(gap)
}

#[cfg(test)]
mod tests {
    use super::*;

    const DESC: &str = r#"
name = "t"
labels = ["a", "b"]
[input]
height = 4
width = 4
channels = 2
[[layer]]
name = "dw"
op = "depthwise"
kernel = 3
padding = 1
bias = false
[[layer]]
name = "bn"
op = "batchnorm"
[[layer]]
op = "relu"
[[layer]]
name = "pw"
op = "conv2d"
out_channels = 3
kernel = 1
bias = false
[[layer]]
name = "pw2"
op = "conv2d"
out_channels = 2
kernel = 1
bias = false
[[layer]]
op = "global_avgpool"
"#;

    fn tensor(v: &[f32], shape: &[usize]) -> Tensor {
        Tensor::from_vec(v.to_vec(), shape, &Device::Cpu).unwrap()
    }

    #[test]
    fn batchnorm_times_s_and_consumer_input_divided_by_s() {
        let desc = Description::from_toml_str(DESC, Path::new("t.toml")).unwrap();
        let mut w = HashMap::new();
        w.insert("bn.weight".to_string(), tensor(&[1.0, 2.0], &[2]));
        w.insert("bn.bias".to_string(), tensor(&[0.5, -0.5], &[2]));
        w.insert(
            "pw.weight".to_string(),
            tensor(&[1.0, 1.0, 2.0, 2.0, 3.0, 3.0], &[3, 2, 1, 1]),
        );
        // k = 2, 2 decades: s = [0.1, 10].
        let done = rescale(&desc, &mut w, &[("bn".into(), "pw".into())], 2, 2.0).unwrap();
        assert_eq!(done.len(), 1);
        let v = |k: &str| w[k].flatten_all().unwrap().to_vec1::<f32>().unwrap();
        let close = |a: &[f32], b: &[f32]| a.iter().zip(b).all(|(x, y)| (x - y).abs() < 1e-5);
        assert!(close(&v("bn.weight"), &[0.1, 20.0]), "{:?}", v("bn.weight"));
        assert!(close(&v("bn.bias"), &[0.05, -5.0]), "{:?}", v("bn.bias"));
        assert!(
            close(&v("pw.weight"), &[10.0, 0.1, 20.0, 0.2, 30.0, 0.3]),
            "{:?}",
            v("pw.weight")
        );
    }

    #[test]
    fn a_conv_in_between_is_refused() {
        let desc = Description::from_toml_str(DESC, Path::new("t.toml")).unwrap();
        let mut w = HashMap::new();
        let e = rescale(&desc, &mut w, &[("bn".into(), "pw2".into())], 2, 2.0)
            .unwrap_err()
            .to_string();
        assert!(e.contains("pw") && e.contains("lies between"), "{e}");
        let e = rescale(&desc, &mut w, &[("bn".into(), "nosuch".into())], 2, 2.0)
            .unwrap_err()
            .to_string();
        assert!(e.contains("no layer named nosuch"), "{e}");
    }

    #[test]
    fn scales_span_the_decades() {
        // k = 5, 2 decades: 0.1, 10^−0.5, 1, 10^0.5, 10, then again.
        let s: Vec<f64> = (0..6).map(|c| channel_scale(c, 5, 2.0)).collect();
        assert!((s[0] - 0.1).abs() < 1e-12);
        assert!((s[2] - 1.0).abs() < 1e-12);
        assert!((s[4] - 10.0).abs() < 1e-12);
        assert!((s[5] - 0.1).abs() < 1e-12);
    }
}
