//! safetensors loading: F16/BF16 conversion against published bit
//! patterns, rejected dtypes and values, damaged files, missing tensors,
//! shape mismatches, unused tensors, and `load_graph` end to end.

use std::collections::BTreeMap;
use std::path::PathBuf;

use midge_convert::description::Description;
use midge_convert::graph::{load_graph, FloatOp};
use midge_convert::weights::TensorMap;
use safetensors::tensor::{Dtype, TensorView};

/// safetensors bytes from raw (dtype, shape, little-endian bytes).
fn st(tensors: &[(&str, Dtype, Vec<usize>, Vec<u8>)]) -> Vec<u8> {
    let views: BTreeMap<String, TensorView> = tensors
        .iter()
        .map(|(n, dt, s, b)| (n.to_string(), TensorView::new(*dt, s.clone(), b).unwrap()))
        .collect();
    safetensors::serialize(views, None).unwrap()
}

fn f32_bytes(v: &[f32]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

fn u16_bytes(v: &[u16]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

#[test]
fn f16_and_bf16_are_converted() {
    // binary16 bit patterns from IEEE 754-2008 §3.6 (5-bit exponent,
    // bias 15): 0x3C00 = 1.0, 0xC000 = −2.0, 0x7BFF = 65504 (largest
    // finite), 0x0001 = 2^−24 (smallest subnormal).
    // bfloat16 is the upper half of binary32 (common practice):
    // 0x3F80 = 1.0, 0xC040 = −3.0, 0x4049 = 3.140625.
    let bytes = st(&[
        (
            "h",
            Dtype::F16,
            vec![2, 2],
            u16_bytes(&[0x3C00, 0xC000, 0x7BFF, 0x0001]),
        ),
        (
            "b",
            Dtype::BF16,
            vec![3],
            u16_bytes(&[0x3F80, 0xC040, 0x4049]),
        ),
    ]);
    let m = TensorMap::from_bytes(&bytes, "w.safetensors").unwrap();
    let h = m.get("h").unwrap();
    assert_eq!(h.shape, [2, 2]);
    assert_eq!(h.data, [1.0, -2.0, 65504.0, 2f32.powi(-24)]);
    assert_eq!(m.get("b").unwrap().data, [1.0, -3.0, 3.140625]);
}

#[test]
fn other_dtypes_are_rejected_by_name_when_needed() {
    let bytes = st(&[("steps", Dtype::I64, vec![], 5i64.to_le_bytes().to_vec())]);
    let m = TensorMap::from_bytes(&bytes, "w.safetensors").unwrap();
    let e = m.require("steps", &[]).unwrap_err();
    assert_eq!(e.place(), "w.safetensors: steps");
    assert!(
        e.problem().contains("I64") && e.problem().contains("F32, F16 or BF16"),
        "{e}"
    );
    let mut t = desc_tensors();
    t.retain(|x| x.0 != "fc.weight");
    t.push(("fc.weight", Dtype::I32, vec![2, 8], vec![0; 64]));
    let e = check(&t).unwrap_err();
    assert!(
        e.place().ends_with("fc.weight") && e.problem().contains("I32"),
        "{e}"
    );
}

#[test]
fn nan_and_inf_are_rejected_with_index() {
    let bytes = st(&[(
        "fc.weight",
        Dtype::F32,
        vec![2, 2],
        f32_bytes(&[0.0, 1.0, f32::NAN, 2.0]),
    )]);
    let e = TensorMap::from_bytes(&bytes, "w.safetensors").unwrap_err();
    assert_eq!(e.place(), "w.safetensors: fc.weight");
    assert!(
        e.problem().contains("NaN") && e.problem().contains("index 2"),
        "{e}"
    );
    // 0x7C00 is +∞ in binary16 (IEEE 754-2008).
    let bytes = st(&[("h", Dtype::F16, vec![1], u16_bytes(&[0x7C00]))]);
    let e = TensorMap::from_bytes(&bytes, "w.safetensors").unwrap_err();
    assert!(
        e.problem().contains("inf") && e.problem().contains("index 0"),
        "{e}"
    );
}

#[test]
fn damaged_files_are_errors() {
    let good = st(&[("a", Dtype::F32, vec![4], f32_bytes(&[1.0, 2.0, 3.0, 4.0]))]);
    let e = TensorMap::from_bytes(&good[..good.len() - 3], "cut.safetensors").unwrap_err();
    assert_eq!(e.place(), "cut.safetensors");
    assert!(e.problem().contains("truncated"), "{e}");
    let e = TensorMap::from_bytes(b"name = \"not weights\"\n", "x.safetensors").unwrap_err();
    assert!(e.problem().contains("safetensors"), "{e}");
    let e = TensorMap::from_bytes(b"", "empty.safetensors").unwrap_err();
    assert!(e.problem().contains("safetensors"), "{e}");
    let e = TensorMap::load(std::path::Path::new("/nonexistent/w.safetensors")).unwrap_err();
    assert!(e.problem().contains("cannot read"), "{e}");
}

const DESC: &str = r#"
name = "w"
labels = ["a", "b"]
weights = "w.safetensors"
[input]
height = 4
width = 4
channels = 1
[[layer]]
name = "conv"
op = "conv2d"
out_channels = 2
kernel = 3
[[layer]]
name = "bn"
op = "batchnorm"
[[layer]]
op = "relu"
[[layer]]
op = "flatten"
[[layer]]
name = "fc"
op = "dense"
out_features = 2
bias = false
"#;

/// Tensors for DESC with PyTorch shapes, values 0.1·index.
fn desc_tensors() -> Vec<(&'static str, Dtype, Vec<usize>, Vec<u8>)> {
    let t = |n: &'static str, s: Vec<usize>| {
        let len: usize = s.iter().product();
        let v: Vec<f32> = (0..len).map(|i| 0.1 * i as f32 + 0.5).collect();
        (n, Dtype::F32, s, f32_bytes(&v))
    };
    vec![
        t("conv.weight", vec![2, 1, 3, 3]),
        t("conv.bias", vec![2]),
        t("bn.weight", vec![2]),
        t("bn.bias", vec![2]),
        t("bn.running_mean", vec![2]),
        t("bn.running_var", vec![2]),
        (
            "bn.num_batches_tracked",
            Dtype::I64,
            vec![],
            3i64.to_le_bytes().to_vec(),
        ),
        t("fc.weight", vec![2, 8]),
    ]
}

fn check(
    tensors: &[(&'static str, Dtype, Vec<usize>, Vec<u8>)],
) -> midge_convert::Result<Vec<String>> {
    let d = Description::from_toml_str(DESC, std::path::Path::new("d.toml")).unwrap();
    TensorMap::from_bytes(&st(tensors), "w.safetensors")?.check(&d)
}

#[test]
fn missing_and_misshapen_tensors_are_named() {
    let mut t = desc_tensors();
    t.retain(|x| x.0 != "bn.running_var");
    let e = check(&t).unwrap_err();
    assert!(
        e.problem().contains("\"bn.running_var\"") && e.problem().contains("missing"),
        "{e}"
    );

    let mut t = desc_tensors();
    t.retain(|x| x.0 != "fc.weight");
    t.push(("fc.weight", Dtype::F32, vec![2, 9], f32_bytes(&[0.0; 18])));
    let e = check(&t).unwrap_err();
    assert_eq!(e.place(), "w.safetensors: fc.weight");
    assert!(
        e.problem().contains("[2, 8]") && e.problem().contains("[2, 9]"),
        "{e}"
    );
}

#[test]
fn unused_tensors_are_returned() {
    let mut t = desc_tensors();
    t.push(("aux.weight", Dtype::F32, vec![1], f32_bytes(&[1.0])));
    assert_eq!(check(&t).unwrap(), ["aux.weight"]);
}

#[test]
fn load_graph_reads_files_and_folds() {
    let dir = std::env::temp_dir().join(format!("midge-weights-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let dpath: PathBuf = dir.join("d.toml");
    std::fs::write(&dpath, DESC).unwrap();
    // num_batches_tracked as I64, as PyTorch's state_dict holds it: not
    // loadable, not needed, not reported.
    let mut t = desc_tensors();
    t.push(("extra", Dtype::F32, vec![1], f32_bytes(&[1.0])));
    t.push((
        "extra_steps",
        Dtype::I64,
        vec![],
        9i64.to_le_bytes().to_vec(),
    ));
    std::fs::write(dir.join("w.safetensors"), st(&t)).unwrap();
    let (d, g, unused) = load_graph(&dpath).unwrap();
    assert_eq!(d.name, "w");
    assert_eq!(unused, ["extra", "extra_steps"]);
    let kinds: Vec<&str> = g.nodes.iter().map(|n| n.op.name()).collect();
    assert_eq!(kinds, ["conv2d", "dense"]);
    assert!(matches!(g.nodes[0].op, FloatOp::Conv2d { .. }));
    // No weights key → error naming the description.
    std::fs::write(&dpath, DESC.replace("weights = \"w.safetensors\"\n", "")).unwrap();
    let e = load_graph(&dpath).unwrap_err();
    assert!(e.problem().contains("weights"), "{e}");
    std::fs::remove_dir_all(&dir).unwrap();
}
