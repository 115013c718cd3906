//! ONNX import against the standard's reference implementation: each model
//! of `tests/fixtures/onnx` (built by `make_fixtures.py` with onnx.helper)
//! is imported, run by midge's float reference on the fixture's pixels and
//! compared with the output the onnx package's reference evaluator gave
//! (the source and version are recorded in each fixture's JSON). Also: the
//! bundled caps model as ONNX gives the same float graph and the same
//! `.midge` bytes as its TOML description.

use std::fs;
use std::path::{Path, PathBuf};

use midge_convert::description::Description;
use midge_convert::float_ref;
use midge_convert::graph::FloatGraph;
use midge_convert::quantize::{quantize_description, QuantizeOptions};

fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../tests/fixtures/onnx")
}

fn models() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../models")
}

const FIXTURES: [&str; 6] = [
    "conv_relu_pool_gemm",
    "autopad_clip_attr_gemm",
    "depthwise_bn_clip_inputs",
    "residual_norm_flatten_chain",
    "mul_add_norm_opset21",
    "opset11_shape_chain",
];

struct Fixture {
    source: String,
    dims: Vec<usize>,
    pixels_nchw: Vec<u8>,
    output: Vec<f32>,
    softmax: bool,
}

fn fixture(name: &str) -> Fixture {
    let text = fs::read_to_string(fixtures().join(format!("{name}.json"))).unwrap();
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    let nums = |k: &str| -> Vec<f64> {
        v[k].as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect()
    };
    Fixture {
        source: v["source"].as_str().unwrap().to_string(),
        dims: nums("input_dims").iter().map(|&d| d as usize).collect(),
        pixels_nchw: nums("pixels_nchw").iter().map(|&p| p as u8).collect(),
        output: nums("output").iter().map(|&x| x as f32).collect(),
        softmax: v["softmax"].as_bool().unwrap(),
    }
}

/// A description naming `<name>.onnx` with `n` placeholder labels.
fn description(name: &str, n: usize, extra: &str) -> Description {
    let labels: Vec<String> = (0..n).map(|i| format!("\"c{i}\"")).collect();
    let text = format!(
        "labels = [{}]\nonnx = \"{name}.onnx\"\n{extra}",
        labels.join(", ")
    );
    Description::from_toml_str(&text, &fixtures().join(format!("{name}.toml")))
        .unwrap_or_else(|e| panic!("{name}: {e}"))
}

fn nchw_to_hwc(p: &[u8], d: &[usize]) -> Vec<u8> {
    let (c, h, w) = (d[1], d[2], d[3]);
    let mut out = vec![0; p.len()];
    for ch in 0..c {
        for y in 0..h {
            for x in 0..w {
                out[(y * w + x) * c + ch] = p[(ch * h + y) * w + x];
            }
        }
    }
    out
}

fn softmax(v: &[f32]) -> Vec<f32> {
    let m = v.iter().cloned().fold(f32::NEG_INFINITY, f32::max);
    let e: Vec<f64> = v.iter().map(|&x| ((x - m) as f64).exp()).collect();
    let s: f64 = e.iter().sum();
    e.iter().map(|x| (x / s) as f32).collect()
}

#[test]
fn fixtures_match_the_reference_evaluator() {
    for name in FIXTURES {
        let f = fixture(name);
        let desc = description(name, f.output.len(), "");
        let tensors = &desc.onnx_import.as_ref().expect("onnx import").tensors;
        let unfolded = FloatGraph::build(&desc, tensors).unwrap();
        let folded = unfolded.fold().unwrap_or_else(|e| panic!("{name}: {e}"));
        let pixels = nchw_to_hwc(&f.pixels_nchw, &f.dims);
        for (which, g) in [("unfolded", &unfolded), ("folded", &folded)] {
            let mut got = float_ref::logits(g, &pixels);
            if f.softmax {
                got = softmax(&got);
            }
            assert_eq!(got.len(), f.output.len(), "{name}");
            let scale = f.output.iter().fold(1.0f32, |m, x| m.max(x.abs()));
            for (i, (a, b)) in got.iter().zip(&f.output).enumerate() {
                // Expected values: f.source (the onnx package's reference
                // evaluator). Tolerance 1e-5 of the largest output
                // magnitude (at least 1): f32 sums in another order.
                assert!(
                    (a - b).abs() <= 1e-5 * scale,
                    "{name} ({which}) output {i}: midge {a}, {} {b}",
                    f.source
                );
            }
        }
    }
}

#[test]
fn fixtures_quantize_to_int8_and_mostly_agree() {
    // int8 agreement bound (ours): the quantized logits stay within 10 % of
    // the float logits' range, calibrated on the fixture's own pixels and
    // 15 shifted copies of them.
    for name in FIXTURES {
        let f = fixture(name);
        let dir =
            std::env::temp_dir().join(format!("midge-onnx-int8-{name}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        fs::create_dir_all(dir.join("calib")).unwrap();
        let (c, h, w) = (f.dims[1], f.dims[2], f.dims[3]);
        let hwc = nchw_to_hwc(&f.pixels_nchw, &f.dims);
        for k in 0..16u8 {
            let px: Vec<u8> = hwc.iter().map(|&p| p.wrapping_add(k * 16)).collect();
            let path = dir.join(format!("calib/{k}.png"));
            match c {
                1 => image::GrayImage::from_raw(w as u32, h as u32, px)
                    .unwrap()
                    .save(&path),
                3 => image::RgbImage::from_raw(w as u32, h as u32, px)
                    .unwrap()
                    .save(&path),
                _ => {
                    // Two channels: no PNG layout; skip the int8 check.
                    break;
                }
            }
            .unwrap();
        }
        if c == 2 {
            continue;
        }
        fs::copy(
            fixtures().join(format!("{name}.onnx")),
            dir.join(format!("{name}.onnx")),
        )
        .unwrap();
        let labels: Vec<String> = (0..f.output.len()).map(|i| format!("\"c{i}\"")).collect();
        let toml = format!(
            "labels = [{}]\nonnx = \"{name}.onnx\"\ncalibration = \"calib\"\n",
            labels.join(", ")
        );
        fs::write(dir.join("model.toml"), toml).unwrap();
        let conv = quantize_description(&dir.join("model.toml"), &QuantizeOptions::default())
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        let model = midge_runtime::Model::parse(&conv.quantized.bytes).unwrap();
        let mut ws = vec![0u8; model.workspace_len()];
        let out = model.run(&hwc, &mut ws).unwrap();
        let q = midge_convert::quantize::dequantize_tensor(&model.output(), out);
        let fl = float_ref::logits(&conv.graph, &hwc);
        let range = fl.iter().fold(0.0f32, |m, x| m.max(x.abs())).max(1e-3);
        for (a, b) in q.iter().zip(&fl) {
            assert!(
                (a - b).abs() <= 0.1 * range,
                "{name}: int8 {a} vs float {b}"
            );
        }
        fs::remove_dir_all(&dir).ok();
    }
}

#[test]
fn caps_onnx_matches_the_toml_route() {
    // Both bundled networks (plain: conv2d/BN/ReLU/maxpool; separable:
    // strided conv2d, depthwise, ReLU6 as Clip, a residual add), written as
    // ONNX by make_fixtures.py from their descriptions and weights.
    let caps = models().join("caps");
    for (stem, labels) in [("plain", "caps-plain"), ("separable", "caps-separable")] {
        let toml_path = caps.join(format!("{stem}.toml"));
        let toml_desc = Description::load(&toml_path).unwrap();
        let text = format!(
            "name = \"{labels}\"\nlabels = [\"sealed\", \"missing\", \"tilted\", \"torn\"]\nonnx = \"{}\"\ncalibration = \"{}\"\n[input]\npixel_range = 1.0\n",
            fixtures().join(format!("caps_{stem}.onnx")).display(),
            caps.join("calib").display()
        );
        let dir =
            std::env::temp_dir().join(format!("midge-onnx-caps-{stem}-{}", std::process::id()));
        fs::create_dir_all(&dir).unwrap();
        let onnx_path = dir.join("caps.toml");
        fs::write(&onnx_path, text).unwrap();
        let onnx_desc = Description::load(&onnx_path).unwrap();
        assert_eq!(
            onnx_desc.input, toml_desc.input,
            "{stem}: normalisation folded to mean/std"
        );
        let t = midge_convert::weights::TensorMap::load(&caps.join(format!("{stem}.safetensors")))
            .unwrap();
        let a = FloatGraph::build(&toml_desc, &t).unwrap().fold().unwrap();
        let b = FloatGraph::build(&onnx_desc, &onnx_desc.onnx_import.as_ref().unwrap().tensors)
            .unwrap()
            .fold()
            .unwrap();
        assert_eq!(a.nodes, b.nodes, "{stem}: same folded float graph");
        let qa = quantize_description(&toml_path, &QuantizeOptions::default()).unwrap();
        let qb = quantize_description(&onnx_path, &QuantizeOptions::default()).unwrap();
        assert!(
            qa.quantized.bytes == qb.quantized.bytes,
            "{stem}: byte-identical .midge"
        );
        fs::remove_dir_all(&dir).ok();
    }
}

#[test]
fn qdq_scales_are_kept_and_the_int8_run_follows_the_qdq_graph() {
    let name = "qdq_conv_gap_gemm";
    let text = fs::read_to_string(fixtures().join(format!("{name}.json"))).unwrap();
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    let f = fixture(name);
    let floats = |k: &str| -> Vec<f32> {
        v[k].as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap() as f32)
            .collect()
    };
    // The float reference runs the dequantized weights; activation pairs
    // do not change float values (they only fix the int8 parameters).
    let desc = description(name, 3, "");
    let g = FloatGraph::build(&desc, &desc.onnx_import.as_ref().unwrap().tensors)
        .unwrap()
        .fold()
        .unwrap();
    let hwc = nchw_to_hwc(&f.pixels_nchw, &f.dims);
    let got = float_ref::logits(&g, &hwc);
    let want = floats("output_without_activation_qdq");
    for (a, b) in got.iter().zip(&want) {
        // Source: f.source on the graph without activation pairs; 1e-5 relative.
        assert!((a - b).abs() <= 1e-5 * b.abs().max(1.0), "float {a} vs {b}");
    }
    // int8: calibrated on the fixture's own pixels, except where the pairs
    // give the parameters.
    let dir = std::env::temp_dir().join(format!("midge-onnx-qdq-{}", std::process::id()));
    let _ = fs::remove_dir_all(&dir);
    fs::create_dir_all(dir.join("calib")).unwrap();
    image::RgbImage::from_raw(6, 6, hwc.clone())
        .unwrap()
        .save(dir.join("calib/0.png"))
        .unwrap();
    fs::copy(fixtures().join(format!("{name}.onnx")), dir.join("m.onnx")).unwrap();
    fs::write(
        dir.join("m.toml"),
        "labels = [\"a\", \"b\", \"c\"]\nonnx = \"m.onnx\"\ncalibration = \"calib\"\n",
    )
    .unwrap();
    let conv = quantize_description(&dir.join("m.toml"), &QuantizeOptions::default()).unwrap();
    let notes = &conv.desc.onnx_import.as_ref().unwrap().notes;
    {
        let (layer, scale, zp) = ("conv1", 0.05f32, -128);
        let fid = conv
            .graph
            .nodes
            .iter()
            .position(|n| n.name == layer)
            .unwrap()
            + 1;
        let t = conv.quantized.spec.tensors[conv.quantized.map[fid] as usize];
        // Source: the fixture's QuantizeLinear scale and zero point (uint8
        // zero point 0 is int8 −128 at the same scale; common practice).
        assert_eq!((t.quant.scale, t.quant.zero_point), (scale, zp), "{layer}");
        assert!(
            notes
                .iter()
                .any(|n| n.contains(&format!("output of \"{layer}\""))
                    && n.contains("calibration would choose")),
            "{layer}: {notes:?}"
        );
    }
    assert!(notes.iter().any(|n| n.contains("graph input")), "{notes:?}");
    // int8 pooling keeps its input's parameters: the pair on "gap" is
    // reported unused, and the tensor carries conv1's.
    assert!(
        notes
            .iter()
            .any(|n| n.contains("\"q_gap\" on \"gap\" is not used")),
        "{notes:?}"
    );
    let model = midge_runtime::Model::parse(&conv.quantized.bytes).unwrap();
    let mut ws = vec![0u8; model.workspace_len()];
    let out = model.run(&hwc, &mut ws).unwrap();
    let q = midge_convert::quantize::dequantize_tensor(&model.output(), out);
    let out_scale = model.output().quant.scale;
    let want = floats("output");
    for (a, b) in q.iter().zip(&want) {
        // Against the QDQ graph's own output (f.source). Bound (ours): two
        // steps of the output tensor's int8 scale — its rounding plus the
        // requantization rounding the fake-quantized graph does in float.
        assert!(
            (a - b).abs() <= 2.0 * out_scale,
            "int8 {a} vs QDQ graph {b} (output scale {out_scale})"
        );
    }
    fs::remove_dir_all(&dir).ok();
}

#[test]
fn damaged_onnx_files_give_errors_not_panics() {
    use rand::{Rng, SeedableRng};
    // Seeded byte damage (flips, truncations, overwrites) of every fixture:
    // decoding and lowering must return Ok or an error, never panic.
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(12);
    let mut errors = 0;
    for name in FIXTURES.iter().chain(&["qdq_conv_gap_gemm"]) {
        let good = fs::read(fixtures().join(format!("{name}.onnx"))).unwrap();
        for _ in 0..300 {
            let mut b = good.clone();
            match rng.gen_range(0..3) {
                0 => {
                    let i = rng.gen_range(0..b.len());
                    b[i] ^= 1 << rng.gen_range(0..8);
                }
                1 => b.truncate(rng.gen_range(0..b.len())),
                _ => {
                    let i = rng.gen_range(0..b.len());
                    b[i] = rng.gen();
                }
            }
            let r = std::panic::catch_unwind(|| {
                midge_convert::onnx::OnnxModel::from_bytes(&b, "damaged.onnx")
                    .and_then(|m| midge_convert::onnx::lower(&m))
                    .is_err()
            });
            match r {
                Ok(is_err) => errors += is_err as usize,
                Err(_) => panic!("{name}: a damaged file made the import panic"),
            }
        }
    }
    // Most damage is noticed (a flipped bit inside a weight may not be).
    assert!(errors > 100, "only {errors} damaged files refused");
}

#[test]
fn normalisation_before_and_inside_the_graph_compose() {
    // The graph computes ((x − 0.5)/0.25, (x − 0.4)/0.3) (its Sub/Div, see
    // make_fixtures.py); a description mean m and std s applied before it
    // give ((x − m)/s − g_mean)/g_std = (x − (m + g_mean·s)) / (s·g_std).
    let name = "residual_norm_flatten_chain";
    let d = description(name, 3, "[input]\nmean = [0.1, 0.2]\nstd = [0.5, 2.0]\n");
    let (mean, std) = (d.input.mean_values(), d.input.std_values());
    let want_mean = [0.1 + 0.5 * 0.5, 0.2 + 0.4 * 2.0];
    let want_std = [0.5 * 0.25, 2.0 * 0.3];
    for c in 0..2 {
        assert!((mean[c] - want_mean[c]).abs() < 1e-6, "mean {mean:?}");
        assert!((std[c] - want_std[c]).abs() < 1e-6, "std {std:?}");
    }
    // Without a description mean/std the graph's own normalisation is it.
    let d = description(name, 3, "");
    assert_eq!(d.input.mean_values(), [0.5, 0.4]);
    assert_eq!(d.input.std_values(), [0.25, 0.3]);
}
