//! The float reference against candle (crates.io candle-core/candle-nn, an
//! outside general-purpose tensor library following PyTorch's NCHW
//! semantics): single layers with random geometry, whole small models,
//! BatchNorm folding and the flatten order.

use std::collections::BTreeMap;
use std::path::Path;

use candle_core::{DType, Device, Module, ModuleT, Tensor as Ct};
use midge_convert::description::{Description, LayerKind};
use midge_convert::float_ref;
use midge_convert::graph::{FloatGraph, FloatOp, Precision};
use midge_convert::weights::TensorMap;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// PyTorch-layout tensors by name.
type Pt = BTreeMap<String, (Vec<usize>, Vec<f32>)>;

/// Tolerance of float_ref vs candle: both compute in f32 but sum in
/// different orders, so we allow 1e-4 relative to the tensor's largest
/// magnitude (at least 1).
const TOL: f32 = 1e-4;

fn desc(text: &str) -> Description {
    Description::from_toml_str(text, Path::new("test.toml")).unwrap()
}

/// Random tensors with the names and PyTorch shapes the description asks
/// for. BatchNorm variances are positive.
fn random_tensors(d: &Description, rng: &mut ChaCha8Rng) -> Pt {
    let mut pt = Pt::new();
    for (name, shape) in d.expected_tensors().unwrap() {
        let n: usize = shape.iter().product();
        let data = (0..n)
            .map(|_| {
                if name.ends_with("running_var") {
                    rng.gen_range(0.3..2.0)
                } else if name.ends_with(".weight") && shape.len() == 1 {
                    rng.gen_range(0.5..1.5) // BN gamma
                } else {
                    rng.gen_range(-1.0..1.0)
                }
            })
            .collect();
        pt.insert(name, (shape, data));
    }
    pt
}

/// safetensors bytes written by the safetensors crate itself (F32,
/// little-endian, PyTorch layouts), so loading goes through the real path.
fn st_bytes(pt: &Pt) -> Vec<u8> {
    let raw: Vec<(String, Vec<usize>, Vec<u8>)> = pt
        .iter()
        .map(|(n, (s, d))| {
            let b = d.iter().flat_map(|x| x.to_le_bytes()).collect();
            (n.clone(), s.clone(), b)
        })
        .collect();
    let views: Vec<(String, safetensors::tensor::TensorView)> = raw
        .iter()
        .map(|(n, s, b)| {
            let v =
                safetensors::tensor::TensorView::new(safetensors::tensor::Dtype::F32, s.clone(), b)
                    .unwrap();
            (n.clone(), v)
        })
        .collect();
    safetensors::serialize(views, None).unwrap()
}

/// Our path: bytes → TensorMap → unfolded graph.
fn our_graph(d: &Description, pt: &Pt) -> FloatGraph {
    let tensors = TensorMap::from_bytes(&st_bytes(pt), "test.safetensors").unwrap();
    let unused = tensors.check(d).unwrap();
    assert!(unused.is_empty(), "unused: {unused:?}");
    FloatGraph::build(d, &tensors).unwrap()
}

fn random_pixels(d: &Description, rng: &mut ChaCha8Rng) -> Vec<u8> {
    (0..d.input_shape().elems()).map(|_| rng.gen()).collect()
}

fn ct(pt: &Pt, name: &str) -> Ct {
    let (s, d) = &pt[name];
    Ct::from_vec(d.clone(), s.as_slice(), &Device::Cpu).unwrap()
}

/// Zero (or `fill`) padding of an NCHW tensor on H and W.
fn pad(x: &Ct, top: usize, left: usize, bottom: usize, right: usize, fill: f32) -> Ct {
    let (n, c, h, w) = x.dims4().unwrap();
    let mut x = x.clone();
    let band = |x: &Ct, dim: usize, len: usize, at_end: bool| -> Ct {
        if len == 0 {
            return x.clone();
        }
        let mut shape = x.dims().to_vec();
        shape[dim] = len;
        let f = Ct::full(fill, shape.as_slice(), &Device::Cpu).unwrap();
        let parts = if at_end { [x, &f] } else { [&f, x] };
        Ct::cat(&parts, dim).unwrap()
    };
    x = band(&x, 2, top, false);
    x = band(&x, 2, bottom, true);
    x = band(&x, 3, left, false);
    x = band(&x, 3, right, true);
    assert_eq!(
        x.dims4().unwrap(),
        (n, c, h + top + bottom, w + left + right)
    );
    x
}

/// Keep every `sh`-th row and `sw`-th column, `oh`×`ow` of them (a stride
/// applied after a stride-1 convolution, for strides candle's scalar
/// stride cannot express).
fn subsample(x: &Ct, sh: usize, sw: usize, oh: usize, ow: usize) -> Ct {
    let rows: Vec<u32> = (0..oh).map(|i| (i * sh) as u32).collect();
    let cols: Vec<u32> = (0..ow).map(|i| (i * sw) as u32).collect();
    let r = Ct::new(rows.as_slice(), &Device::Cpu).unwrap();
    let c = Ct::new(cols.as_slice(), &Device::Cpu).unwrap();
    x.index_select(&r, 2).unwrap().index_select(&c, 3).unwrap()
}

/// The description run by candle with PyTorch semantics, straight from
/// the PyTorch-layout tensors: every layer's output, NCHW (or N×F after
/// flatten/dense).
fn candle_run(d: &Description, pt: &Pt, pixels: &[u8]) -> BTreeMap<String, Ct> {
    let dev = &Device::Cpu;
    let inp = &d.input;
    let (h, w, c) = (
        inp.height as usize,
        inp.width as usize,
        inp.channels as usize,
    );
    // ToTensor-style scaling then Normalize, in NCHW.
    let px: Vec<f32> = pixels.iter().map(|&p| p as f32).collect();
    let x = Ct::from_vec(px, (1, h, w, c), dev)
        .unwrap()
        .permute((0, 3, 1, 2))
        .unwrap();
    let mean = Ct::new(inp.mean_values().as_slice(), dev)
        .unwrap()
        .reshape((1, c, 1, 1))
        .unwrap();
    let std = Ct::new(inp.std_values().as_slice(), dev)
        .unwrap()
        .reshape((1, c, 1, 1))
        .unwrap();
    let x = ((x * (inp.pixel_range as f64 / 255.0))
        .unwrap()
        .broadcast_sub(&mean))
    .unwrap()
    .broadcast_div(&std)
    .unwrap();
    let mut named = BTreeMap::new();
    named.insert("input".to_string(), x.clone());
    let mut outs: Vec<Ct> = vec![x];
    for l in d.topology().unwrap() {
        let x = &outs[l.inputs[0]];
        let prefix = l.tensor.clone().unwrap_or_default();
        let y = match l.kind {
            LayerKind::Conv2d | LayerKind::Depthwise => {
                let win = l.window.unwrap();
                assert_eq!(win.dil_h, win.dil_w, "candle takes one dilation");
                let xp = pad(
                    x,
                    win.pad_top as usize,
                    win.pad_left as usize,
                    win.pad_bottom as usize,
                    win.pad_right as usize,
                    0.0,
                );
                let wt = ct(pt, &format!("{prefix}.weight"));
                let groups = if l.kind == LayerKind::Depthwise {
                    l.out_shape.c as usize
                } else {
                    1
                };
                let square = win.stride_h == win.stride_w;
                let s = if square { win.stride_h as usize } else { 1 };
                let mut y = xp.conv2d(&wt, 0, s, win.dil_h as usize, groups).unwrap();
                if !square {
                    y = subsample(
                        &y,
                        win.stride_h as usize,
                        win.stride_w as usize,
                        l.out_shape.h as usize,
                        l.out_shape.w as usize,
                    );
                }
                if l.bias {
                    let b = ct(pt, &format!("{prefix}.bias"))
                        .reshape((1, l.out_shape.c as usize, 1, 1))
                        .unwrap();
                    y = y.broadcast_add(&b).unwrap();
                }
                y
            }
            LayerKind::MaxPool => {
                let win = l.window.unwrap();
                let xp = pad(
                    x,
                    win.pad_top as usize,
                    win.pad_left as usize,
                    win.pad_bottom as usize,
                    win.pad_right as usize,
                    f32::NEG_INFINITY,
                );
                xp.max_pool2d_with_stride(
                    (win.kh as usize, win.kw as usize),
                    (win.stride_h as usize, win.stride_w as usize),
                )
                .unwrap()
            }
            LayerKind::AvgPool => {
                let win = l.window.unwrap();
                x.avg_pool2d_with_stride(
                    (win.kh as usize, win.kw as usize),
                    (win.stride_h as usize, win.stride_w as usize),
                )
                .unwrap()
            }
            LayerKind::GlobalAvgPool => x.mean_keepdim(2).unwrap().mean_keepdim(3).unwrap(),
            LayerKind::Flatten => x.flatten_from(1).unwrap(),
            LayerKind::Dense => {
                let x2 = x.flatten_from(1).unwrap();
                let wt = ct(pt, &format!("{prefix}.weight"));
                let b = l.bias.then(|| ct(pt, &format!("{prefix}.bias")));
                candle_nn::Linear::new(wt, b).forward(&x2).unwrap()
            }
            LayerKind::BatchNorm => {
                let bn = candle_nn::BatchNorm::new(
                    l.out_shape.c as usize,
                    ct(pt, &format!("{prefix}.running_mean")),
                    ct(pt, &format!("{prefix}.running_var")),
                    ct(pt, &format!("{prefix}.weight")),
                    ct(pt, &format!("{prefix}.bias")),
                    l.eps as f64,
                )
                .unwrap();
                bn.forward_t(x, false).unwrap()
            }
            LayerKind::Relu => x.relu().unwrap(),
            LayerKind::Relu6 => x.clamp(0f32, 6f32).unwrap(),
            LayerKind::Add => (x + &outs[l.inputs[1]]).unwrap(),
        };
        named.insert(l.name.clone(), y.clone());
        outs.push(y);
    }
    named
}

/// NCHW (or N×F) candle tensor → our HWC order.
fn to_hwc(t: &Ct) -> Vec<f32> {
    let t = if t.rank() == 4 {
        t.permute((0, 2, 3, 1)).unwrap()
    } else {
        t.clone()
    };
    t.flatten_all()
        .unwrap()
        .to_dtype(DType::F32)
        .unwrap()
        .to_vec1()
        .unwrap()
}

fn assert_close(what: &str, ours: &[f32], theirs: &[f32], tol: f32) {
    assert_eq!(ours.len(), theirs.len(), "{what}: lengths");
    let scale = theirs.iter().fold(1.0f32, |m, v| m.max(v.abs()));
    for (i, (a, b)) in ours.iter().zip(theirs).enumerate() {
        assert!(
            (a - b).abs() <= tol * scale,
            "{what}: index {i}: ours {a}, reference {b} (tolerance {})",
            tol * scale
        );
    }
}

/// Every node of our unfolded graph against the candle layer of the same
/// name. Returns our tensors.
fn check_against_candle(d: &Description, pt: &Pt, pixels: &[u8]) -> (FloatGraph, Vec<Vec<f32>>) {
    let g = our_graph(d, pt);
    let ours = float_ref::run(&g, pixels);
    let theirs = candle_run(d, pt, pixels);
    assert_close("normalized input", &ours[0], &to_hwc(&theirs["input"]), TOL);
    for (k, node) in g.nodes.iter().enumerate() {
        let t = &theirs[&node.name];
        assert_close(
            &format!("{} ({})", node.name, node.op.name()),
            &ours[k + 1],
            &to_hwc(t),
            TOL,
        );
    }
    (g, ours)
}

/// The folded graph's logits against the unfolded graph's (`ours`, from
/// `check_against_candle`): BN folding is exact up to f32 rounding (1e-5
/// relative).
fn assert_folding_exact(folded: &FloatGraph, pixels: &[u8], ours: &[Vec<f32>]) {
    let f = float_ref::run(folded, pixels);
    assert_close(
        "folded logits",
        f.last().unwrap(),
        ours.last().unwrap(),
        1e-5,
    );
}

fn pick<T: Copy>(rng: &mut ChaCha8Rng, v: &[T]) -> T {
    v[rng.gen_range(0..v.len())]
}

#[test]
fn conv2d_random_geometry_matches_candle() {
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let mut ran = 0;
    for case in 0..60 {
        let h = rng.gen_range(4..12);
        let w = rng.gen_range(4..12);
        let cin = rng.gen_range(1..5);
        let cout = rng.gen_range(1..6);
        let kh = rng.gen_range(1..5);
        let kw = rng.gen_range(1..5);
        let (sh, sw) = (rng.gen_range(1..4), rng.gen_range(1..4));
        let dil = rng.gen_range(1..3);
        let padding = pick(
            &mut rng,
            &[
                "\"valid\"",
                "\"same\"",
                "1",
                "[2, 0]",
                "[0, 1, 2, 1]",
                "[1, 2, 0, 0]",
            ],
        );
        let op = if case % 3 == 0 { "depthwise" } else { "conv2d" };
        let out = if op == "conv2d" {
            format!("out_channels = {cout}\n")
        } else {
            String::new()
        };
        let bias = rng.gen_bool(0.7);
        let text = format!(
            "name = \"t\"\nlabels = [\"a\"]\n[input]\nheight = {h}\nwidth = {w}\nchannels = {cin}\n\
             [[layer]]\nname = \"c\"\nop = \"{op}\"\n{out}kernel = [{kh}, {kw}]\nstride = [{sh}, {sw}]\n\
             dilation = {dil}\npadding = {padding}\nbias = {bias}\n\
             [[layer]]\nop = \"flatten\"\n[[layer]]\nname = \"fc\"\nop = \"dense\"\nout_features = 1\n"
        );
        let d = match Description::from_toml_str(&text, Path::new("case.toml")) {
            Ok(d) => d,
            Err(e) if e.problem().contains("does not fit") => continue,
            Err(e) => panic!("{e}"),
        };
        let pt = random_tensors(&d, &mut rng);
        let px = random_pixels(&d, &mut rng);
        check_against_candle(&d, &pt, &px);
        ran += 1;
    }
    assert!(ran >= 40, "only {ran} cases fitted");
}

#[test]
fn pools_and_dense_match_candle() {
    let mut rng = ChaCha8Rng::seed_from_u64(2);
    for (kernel, stride, padding) in [
        ("2", "2", "\"valid\""),
        ("3", "2", "1"),
        ("[3, 2]", "[1, 2]", "[1, 0]"),
        ("3", "1", "\"same\""),
        ("[2, 3]", "[2, 1]", "\"valid\""),
    ] {
        let avg_padding_ok = padding == "\"valid\"";
        let text = format!(
            r#"
name = "pools"
labels = ["a", "b", "c"]
[input]
height = 9
width = 10
channels = 3
mean = [0.4, 0.5, 0.6]
std = [0.2, 0.25, 0.3]
pixel_range = 1.0
[[layer]]
name = "mp"
op = "maxpool"
kernel = {kernel}
stride = {stride}
padding = {padding}
[[layer]]
name = "ap"
op = "avgpool"
from = "input"
kernel = {kernel}
stride = {stride}
{ap_pad}
[[layer]]
name = "gp"
op = "global_avgpool"
from = "mp"
[[layer]]
name = "gp2"
op = "global_avgpool"
from = "ap"
[[layer]]
name = "sum"
op = "add"
from = ["gp", "gp2"]
[[layer]]
name = "fc"
op = "dense"
out_features = 3
"#,
            ap_pad = if avg_padding_ok {
                format!("padding = {padding}")
            } else {
                String::new()
            }
        );
        let d = desc(&text);
        let pt = random_tensors(&d, &mut rng);
        let px = random_pixels(&d, &mut rng);
        check_against_candle(&d, &pt, &px);
    }
}

const SMALL_MODEL: &str = r#"
name = "small"
labels = ["sealed", "missing", "tilted", "torn"]
[input]
height = 12
width = 12
channels = 3
mean = [0.485, 0.456, 0.406]
std = [0.229, 0.224, 0.225]
[[layer]]
name = "conv1"
op = "conv2d"
tensor = "features.0"
out_channels = 6
kernel = 3
padding = 1
bias = false
[[layer]]
name = "bn1"
op = "batchnorm"
tensor = "features.1"
[[layer]]
op = "relu"
[[layer]]
name = "pool1"
op = "maxpool"
kernel = 2
[[layer]]
name = "conv2"
op = "conv2d"
tensor = "features.4"
out_channels = 5
kernel = 3
stride = 2
padding = "same"
[[layer]]
name = "bn2"
op = "batchnorm"
tensor = "features.5"
eps = 0.001
[[layer]]
op = "relu6"
[[layer]]
op = "flatten"
[[layer]]
name = "fc"
op = "dense"
tensor = "classifier"
out_features = 4
"#;

#[test]
fn small_model_matches_candle_and_folds_exactly() {
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let d = desc(SMALL_MODEL);
    let mut pt = random_tensors(&d, &mut rng);
    // PyTorch state_dicts carry num_batches_tracked (I64 in PyTorch; an F32
    // scalar here); it is accepted and not reported as unused.
    pt.insert("features.1.num_batches_tracked".into(), (vec![], vec![7.0]));
    for _ in 0..3 {
        let px = random_pixels(&d, &mut rng);
        let (g, ours) = check_against_candle(&d, &pt, &px);
        let folded = g.fold().unwrap();
        assert!(folded.nodes.iter().all(|n| !matches!(
            n.op,
            FloatOp::BatchNorm { .. } | FloatOp::Relu | FloatOp::Relu6
        )));
        assert_eq!(folded.nodes.len(), 4, "conv1, pool1, conv2, fc");
        assert_folding_exact(&folded, &px, &ours);
    }
}

#[test]
fn residual_block_matches_candle_and_folds() {
    let mut rng = ChaCha8Rng::seed_from_u64(4);
    let d = desc(
        r#"
name = "residual"
labels = ["a", "b"]
[input]
height = 8
width = 8
channels = 2
[[layer]]
name = "stem"
op = "conv2d"
out_channels = 4
kernel = 3
padding = "same"
[[layer]]
name = "stem_relu"
op = "relu"
[[layer]]
name = "dw"
op = "depthwise"
kernel = 3
padding = 1
bias = false
[[layer]]
name = "dw_bn"
op = "batchnorm"
[[layer]]
op = "relu"
[[layer]]
name = "pw"
op = "conv2d"
out_channels = 4
kernel = 1
precision = "fp16"
[[layer]]
name = "pw_bn"
op = "batchnorm"
[[layer]]
name = "sum"
op = "add"
from = ["pw_bn", "stem_relu"]
[[layer]]
op = "relu"
[[layer]]
name = "gap"
op = "global_avgpool"
[[layer]]
name = "fc"
op = "dense"
out_features = 2
"#,
    );
    let pt = random_tensors(&d, &mut rng);
    let px = random_pixels(&d, &mut rng);
    let (g, ours) = check_against_candle(&d, &pt, &px);
    let folded = g.fold().unwrap();
    let kinds: Vec<&str> = folded.nodes.iter().map(|n| n.op.name()).collect();
    assert_eq!(
        kinds,
        [
            "conv2d",
            "depthwise",
            "conv2d",
            "add",
            "global_avgpool",
            "dense"
        ]
    );
    // Per-layer precision survives folding; folding a folded graph changes nothing.
    assert_eq!(folded.nodes[2].precision, Precision::Fp16);
    assert_eq!(folded.nodes[3].precision, Precision::Int8);
    assert_eq!(folded.fold().unwrap(), folded);
    assert_folding_exact(&folded, &px, &ours);
}

#[test]
fn flatten_order_matches_candle_chw() {
    // conv → flatten → dense: PyTorch (and candle) flatten NCHW as C,H,W;
    // our tensors are HWC, so build() permutes the dense weights.
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let d = desc(
        r#"
name = "flat"
labels = ["a", "b", "c"]
[input]
height = 5
width = 4
channels = 2
[[layer]]
name = "conv"
op = "conv2d"
out_channels = 3
kernel = [2, 1]
[[layer]]
op = "flatten"
[[layer]]
name = "fc"
op = "dense"
out_features = 3
"#,
    );
    let pt = random_tensors(&d, &mut rng);
    let px = random_pixels(&d, &mut rng);
    let (g, _) = check_against_candle(&d, &pt, &px);
    // The permutation is not the identity here, so this test can fail.
    let FloatOp::Dense { weight, .. } = &g.nodes[1].op else {
        panic!("dense expected")
    };
    assert_ne!(weight, &pt["fc.weight"].1);
}

#[test]
fn relu_after_maxpool_fuses_into_the_conv() {
    // The common PyTorch pattern relu(max_pool2d(conv(x))).
    let mut rng = ChaCha8Rng::seed_from_u64(6);
    let d = desc(
        r#"
name = "mp_relu"
labels = ["a", "b"]
[input]
height = 8
width = 8
channels = 1
[[layer]]
name = "conv"
op = "conv2d"
out_channels = 3
kernel = 3
[[layer]]
op = "maxpool"
kernel = 2
[[layer]]
op = "relu"
[[layer]]
op = "flatten"
[[layer]]
name = "fc"
op = "dense"
out_features = 2
"#,
    );
    let pt = random_tensors(&d, &mut rng);
    let px = random_pixels(&d, &mut rng);
    let (g, ours) = check_against_candle(&d, &pt, &px);
    let folded = g.fold().unwrap();
    assert_eq!(folded.nodes.len(), 3);
    assert_eq!(folded.nodes[0].act, midge_runtime::repr::Activation::Relu);
    let f = float_ref::run(&folded, &px);
    assert_eq!(f.last(), ours.last(), "max commutes with relu exactly");
}

#[test]
fn dense_batchnorm1d_folds() {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let d = desc(
        r#"
name = "bn1d"
labels = ["a", "b"]
[input]
height = 3
width = 3
channels = 2
[[layer]]
op = "flatten"
[[layer]]
name = "fc1"
op = "dense"
out_features = 5
bias = false
[[layer]]
name = "bn"
op = "batchnorm"
[[layer]]
op = "relu"
[[layer]]
name = "fc2"
op = "dense"
out_features = 2
"#,
    );
    let pt = random_tensors(&d, &mut rng);
    let px = random_pixels(&d, &mut rng);
    let (g, ours) = check_against_candle(&d, &pt, &px);
    let folded = g.fold().unwrap();
    assert_eq!(folded.nodes.len(), 2);
    assert_folding_exact(&folded, &px, &ours);
}

fn fold_error(text: &str) -> String {
    let mut rng = ChaCha8Rng::seed_from_u64(8);
    let d = desc(text);
    let pt = random_tensors(&d, &mut rng);
    our_graph(&d, &pt).fold().unwrap_err().to_string()
}

#[test]
fn unfoldable_batchnorm_and_relu_are_errors_naming_the_layer() {
    let head = "name = \"m\"\nlabels = [\"a\"]\n[input]\nheight = 4\nwidth = 4\nchannels = 1\n";
    // BN after a pool.
    let e = fold_error(&format!(
        "{head}[[layer]]\nop = \"conv2d\"\nout_channels = 1\nkernel = 1\n\
         [[layer]]\nop = \"avgpool\"\nkernel = 2\n[[layer]]\nname = \"bnx\"\nop = \"batchnorm\"\n\
         [[layer]]\nop = \"global_avgpool\"\n"
    ));
    assert!(e.contains("bnx") && e.contains("avgpool"), "{e}");
    // BN on a conv output that is also read by an add.
    let e = fold_error(&format!(
        "{head}[[layer]]\nname = \"c\"\nop = \"conv2d\"\nout_channels = 1\nkernel = 1\n\
         [[layer]]\nname = \"bny\"\nop = \"batchnorm\"\n[[layer]]\nop = \"add\"\nfrom = [\"c\", \"bny\"]\n\
         [[layer]]\nop = \"global_avgpool\"\n"
    ));
    assert!(e.contains("bny") && e.contains("other consumers"), "{e}");
    // ReLU straight on the input.
    let e = fold_error(&format!(
        "{head}[[layer]]\nname = \"r\"\nop = \"relu\"\n[[layer]]\nop = \"global_avgpool\"\n"
    ));
    assert!(e.contains("layer r") && e.contains("model input"), "{e}");
}

#[test]
fn repository_models_with_weights_match_candle() {
    // The shipped descriptions whose trained weights are present, on
    // random images: every layer against candle.
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../models");
    let mut rng = ChaCha8Rng::seed_from_u64(9);
    for sub in ["digits", "caps"] {
        let Ok(dir) = std::fs::read_dir(root.join(sub)) else {
            continue;
        };
        for entry in dir {
            let p = entry.unwrap().path();
            if p.extension().is_none_or(|e| e != "toml") {
                continue;
            }
            let d = Description::load(&p).unwrap();
            let Some(w) = d.weights.clone().filter(|w| w.exists()) else {
                continue;
            };
            let tensors = TensorMap::load(&w).unwrap();
            let mut pt = Pt::new();
            for (name, _) in d.expected_tensors().unwrap() {
                let t = tensors.get(&name).unwrap();
                pt.insert(name, (t.shape.clone(), t.data.clone()));
            }
            let px = random_pixels(&d, &mut rng);
            check_against_candle(&d, &pt, &px);
            eprintln!("checked {}", p.display());
        }
    }
}

#[test]
fn float_classify_logits_match_candle() {
    // `midge classify model.toml` (the float reference) against candle-core
    // 0.11 conv2d/linear as the outside reference, on the bundled caps
    // models and validation images of every class.
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../models/caps");
    for file in ["plain.toml", "separable.toml"] {
        let path = root.join(file);
        let d = Description::load(&path).unwrap();
        let tensors = TensorMap::load(d.weights.as_ref().unwrap()).unwrap();
        let mut pt = Pt::new();
        for (name, _) in d.expected_tensors().unwrap() {
            let t = tensors.get(&name).unwrap();
            pt.insert(name, (t.shape.clone(), t.data.clone()));
        }
        // The first two images (by name) of every class.
        let mut imgs: Vec<std::path::PathBuf> = Vec::new();
        for l in &d.labels {
            let mut files: Vec<_> = std::fs::read_dir(root.join("val").join(l))
                .unwrap()
                .map(|e| e.unwrap().path())
                .collect();
            files.sort();
            imgs.extend(files.into_iter().take(2));
        }
        assert_eq!(imgs.len(), 2 * d.labels.len(), "{imgs:?}");
        let ours = midge_convert::classify::classify_float(&path, &imgs, false).unwrap();
        assert_eq!(ours.source, "float");
        let last = d.topology().unwrap().last().unwrap().name.clone();
        let spec = midge_convert::quantize::image_spec(&d);
        for (r, img) in ours.images.iter().zip(&imgs) {
            let px = midge_convert::images::load_image(img, &spec).unwrap();
            let theirs = to_hwc(&candle_run(&d, &pt, &px)[&last]);
            assert_close(
                &format!("{file} {}", img.display()),
                &r.logits,
                &theirs,
                TOL,
            );
            assert!(r.raw.is_none());
        }
    }
}
