//! Description files: parsing, defaults, path resolution, validation
//! errors (file, line, layer, key; expected vs found), expected tensor
//! shapes, width scaling and the TOML round trip.

use std::path::{Path, PathBuf};

use midge_convert::description::{Description, LayerKind, Precision};
use midge_convert::float_ref;
use midge_convert::graph::load_graph;
use midge_runtime::Shape;

const EXAMPLE: &str = r#"
name = "capcheck-plain"
labels = ["sealed", "missing", "tilted", "torn"]
weights = "weights.safetensors"
calibration = "../data/caps/calib"
validation = "/abs/val"
precision = "int8"
[input]
height = 32
width = 32
channels = 1
mean = [0.5]
std = [0.25]
pixel_range = 1.0
resize = true
[[layer]]
name = "stem"
op = "conv2d"
tensor = "features.0"
out_channels = 8
kernel = 3
stride = 1
dilation = 1
padding = "same"
bias = true
[[layer]]
op = "batchnorm"
tensor = "features.1"
[[layer]]
op = "relu"
[[layer]]
name = "block1"
op = "conv2d"
tensor = "features.3"
out_channels = 8
kernel = [3, 3]
padding = [1, 1]
precision = "fp16"
[[layer]]
op = "add"
from = ["stem", "block1"]
[[layer]]
op = "maxpool"
kernel = 2
[[layer]]
op = "depthwise"
kernel = 3
stride = 2
padding = [0, 0, 1, 1]
[[layer]]
op = "global_avgpool"
[[layer]]
op = "flatten"
[[layer]]
name = "head"
op = "dense"
tensor = "classifier"
out_features = 4
"#;

fn parse(text: &str) -> Result<Description, midge_convert::Error> {
    Description::from_toml_str(text, Path::new("models/x.toml"))
}

fn err(text: &str) -> String {
    parse(text).unwrap_err().to_string()
}

#[test]
fn example_parses_with_defaults_and_resolved_paths() {
    let d = parse(EXAMPLE).unwrap();
    assert_eq!(d.weights, Some(PathBuf::from("models/weights.safetensors")));
    assert_eq!(
        d.calibration,
        Some(PathBuf::from("models/../data/caps/calib"))
    );
    assert_eq!(d.validation, Some(PathBuf::from("/abs/val")));
    assert_eq!(d.target, None);
    let t = d.topology().unwrap();
    let names: Vec<&str> = t.iter().map(|l| l.name.as_str()).collect();
    assert_eq!(
        names,
        [
            "stem",
            "batchnorm2",
            "relu3",
            "block1",
            "add5",
            "maxpool6",
            "depthwise7",
            "global_avgpool8",
            "flatten9",
            "head"
        ]
    );
    // Default input: the previous layer; the first layer reads the input.
    assert_eq!(t[0].inputs, [0]);
    assert_eq!(t[1].inputs, [1]);
    assert_eq!(t[4].inputs, [1, 4]);
    assert_eq!(t[3].precision, Precision::Fp16);
    assert_eq!(t[4].precision, Precision::Int8);
    assert_eq!(t[5].out_shape, Shape::new(16, 16, 8));
    // Depthwise 3×3 stride 2 with one row/column of padding at the bottom
    // and right: floor((16 + 1 − 3) / 2) + 1 = 8 (Dumoulin & Visin 2016,
    // relationship 6, output = floor((i + 2p − k) / s) + 1, written here
    // with the two paddings separately).
    assert_eq!(t[6].out_shape, Shape::new(8, 8, 8));
    assert_eq!(t[8].out_shape, Shape::new(1, 1, 8));
    assert_eq!(t[9].kind, LayerKind::Dense);
    assert!(d.input.resize);
}

#[test]
fn expected_tensors_use_pytorch_shapes() {
    // Shapes as PyTorch stores them (torch.nn.Conv2d.weight is
    // (out_channels, in_channels / groups, kH, kW); Linear.weight is
    // (out_features, in_features); BatchNorm2d buffers are (C,)) — from the
    // PyTorch documentation, recalled from memory.
    let d = parse(EXAMPLE).unwrap();
    let e = d.expected_tensors().unwrap();
    let get = |n: &str| {
        e.iter()
            .find(|(k, _)| k == n)
            .unwrap_or_else(|| panic!("{n} missing from {e:?}"))
            .1
            .clone()
    };
    assert_eq!(get("features.0.weight"), [8, 1, 3, 3]);
    assert_eq!(get("features.0.bias"), [8]);
    assert_eq!(get("features.1.running_var"), [8]);
    assert_eq!(get("features.3.weight"), [8, 8, 3, 3]);
    assert_eq!(get("depthwise7.weight"), [8, 1, 3, 3]);
    assert_eq!(get("classifier.weight"), [4, 8]);
    assert_eq!(e.len(), 2 + 4 + 2 + 2 + 2);
}

#[test]
fn misspelt_key_names_the_key_line_and_layer() {
    let text = EXAMPLE.replace("kernel = [3, 3]", "kernal = [3, 3]");
    let e = err(&text);
    assert!(e.starts_with("models/x.toml: line "), "{e}");
    assert!(e.contains("layer 4"), "{e}");
    assert!(e.contains("kernal"), "{e}");
    assert!(!e.contains('\n'));
    let e = err(&EXAMPLE.replace("pixel_range", "pixel_rang"));
    assert!(e.contains("pixel_rang") && !e.contains("layer"), "{e}");
}

#[test]
fn unknown_op_names_file_layer_and_choices() {
    let e = err(&EXAMPLE.replace(
        "op = \"conv2d\"\ntensor = \"features.0\"",
        "op = \"conv3d\"\ntensor = \"features.0\"",
    ));
    assert!(
        e.starts_with(
            "models/x.toml: layer 1 (stem): unknown op \"conv3d\"; expected one of conv2d,"
        ),
        "{e}"
    );
}

#[test]
fn references_must_be_earlier_layers() {
    let e = err(&EXAMPLE.replace(
        "from = [\"stem\", \"block1\"]",
        "from = [\"stem\", \"head\"]",
    ));
    assert!(
        e.contains("layer 5 (add5): input \"head\" refers to a later layer"),
        "{e}"
    );
    let e = err(&EXAMPLE.replace(
        "from = [\"stem\", \"block1\"]",
        "from = [\"stem\", \"nope\"]",
    ));
    assert!(e.contains("\"nope\" names no layer"), "{e}");
    let e = err(&EXAMPLE.replace("from = [\"stem\", \"block1\"]", "from = \"stem\""));
    assert!(e.contains("add reads 2 inputs"), "{e}");
}

#[test]
fn shape_errors_say_expected_and_found() {
    // Add of tensors with different channel counts.
    let e = err(&EXAMPLE.replace(
        "out_channels = 8\nkernel = [3, 3]",
        "out_channels = 6\nkernel = [3, 3]",
    ));
    assert!(
        e.contains("add inputs differ in shape") && e.contains("32×32×8") && e.contains("32×32×6"),
        "{e}"
    );
    // Labels vs the final output size.
    let e = err(&EXAMPLE.replace("out_features = 4", "out_features = 5"));
    assert!(e.contains("4 labels") && e.contains("5 outputs"), "{e}");
    // Mean per channel.
    let e = err(&EXAMPLE.replace("mean = [0.5]", "mean = [0.5, 0.5, 0.5]"));
    assert!(
        e.contains("input.mean") && e.contains("expected 1 values") && e.contains("found 3"),
        "{e}"
    );
    // Kernel larger than the input.
    let e = err(&EXAMPLE.replace("kernel = 2\n", "kernel = 40\n"));
    assert!(e.contains("does not fit"), "{e}");
    // Dense on a spatial tensor without flatten.
    let e = err(&EXAMPLE.replace(
        "op = \"global_avgpool\"\n[[layer]]\nop = \"flatten\"\n",
        "op = \"relu\"\n",
    ));
    assert!(e.contains("add a flatten layer"), "{e}");
    // A model ending in a flatten of a spatial tensor would give logits in
    // PyTorch's C,H,W order.
    let e = err(&EXAMPLE.replace(
        "op = \"global_avgpool\"\n[[layer]]\nop = \"flatten\"\n[[layer]]\nname = \"head\"\nop = \"dense\"\ntensor = \"classifier\"\nout_features = 4\n",
        "op = \"conv2d\"\nout_channels = 2\nkernel = 7\n[[layer]]\nop = \"flatten\"\n",
    ));
    assert!(e.contains("ends in a flatten of a 2×2×2 tensor"), "{e}");
}

#[test]
fn avgpool_padding_is_rejected_and_keys_must_apply() {
    let e = err(&EXAMPLE.replace(
        "op = \"maxpool\"\nkernel = 2",
        "op = \"avgpool\"\nkernel = 3\npadding = 1",
    ));
    assert!(e.contains("count_include_pad"), "{e}");
    let e = err(&EXAMPLE.replace("op = \"relu\"\n", "op = \"relu\"\nkernel = 3\n"));
    assert!(
        e.contains("layer 3 (relu3): key \"kernel\" does not apply to relu"),
        "{e}"
    );
    let e = err(&EXAMPLE.replace("precision = \"fp16\"", "precision = \"int4\""));
    assert!(e.contains("int4") && e.contains("line"), "{e}");
    let e = err(&EXAMPLE.replace("padding = \"same\"", "padding = \"full\""));
    assert!(e.contains("unknown padding \"full\""), "{e}");
}

#[test]
fn duplicate_names_and_labels_are_errors() {
    let e = err(&EXAMPLE.replace("name = \"block1\"", "name = \"stem\""));
    assert!(e.contains("already used by layer 1"), "{e}");
    let e = err(&EXAMPLE.replace("\"torn\"", "\"sealed\""));
    assert!(e.contains("label \"sealed\" appears twice"), "{e}");
}

#[test]
fn scaled_keeps_the_classifier_and_drops_weights() {
    let d = parse(EXAMPLE).unwrap();
    let s = d.scaled(0.5, Some((24, 20)));
    let t = s.topology().unwrap();
    assert_eq!(t[0].out_shape, Shape::new(24, 20, 4));
    assert_eq!(t[9].out_shape.c, 4, "classifier keeps one output per label");
    assert_eq!(s.weights, None);
    // Rounding with a floor of one channel.
    let tiny = d.scaled(0.01, None);
    assert_eq!(tiny.topology().unwrap()[0].out_shape.c, 1);
    // Unchanged when the width is 1 and no size is given.
    assert_eq!(d.scaled(1.0, None), d);
    // An all-convolutional model: the last conv2d feeds the labels.
    let allconv = r#"
name = "allconv"
labels = ["a", "b", "c"]
[input]
height = 8
width = 8
channels = 1
[[layer]]
op = "conv2d"
out_channels = 10
kernel = 3
[[layer]]
op = "conv2d"
out_channels = 3
kernel = 1
[[layer]]
op = "relu"
[[layer]]
op = "global_avgpool"
"#;
    let s = parse(allconv).unwrap().scaled(2.0, None);
    let t = s.topology().unwrap();
    assert_eq!(t[0].out_shape.c, 20);
    assert_eq!(t[1].out_shape.c, 3);
}

#[test]
fn toml_round_trip() {
    let d = parse(EXAMPLE).unwrap();
    let text = d.to_toml_string().unwrap();
    let back = Description::from_toml_str(&text, Path::new("x.toml")).unwrap();
    let mut expect = d.clone();
    expect.origin = PathBuf::from("x.toml");
    assert_eq!(back, expect);
}

#[test]
fn load_reads_a_file_and_reports_missing_ones() {
    let dir = std::env::temp_dir().join(format!("midge-desc-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("m.toml");
    std::fs::write(&path, EXAMPLE).unwrap();
    let d = Description::load(&path).unwrap();
    assert_eq!(d.weights, Some(dir.join("weights.safetensors")));
    let e = Description::load(&dir.join("absent.toml")).unwrap_err();
    assert!(
        e.place().ends_with("absent.toml") && e.problem().contains("cannot read"),
        "{e}"
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn repository_descriptions_load() {
    // Every model description shipped in models/ (target profiles live in
    // models/targets and are another format).
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../models");
    let mut stack = vec![root];
    let mut loaded = 0;
    while let Some(dir) = stack.pop() {
        for entry in std::fs::read_dir(&dir).unwrap() {
            let p = entry.unwrap().path();
            if p.is_dir() && p.file_name().is_some_and(|n| n != "targets") {
                stack.push(p);
            } else if p.extension().is_some_and(|e| e == "toml") {
                let d = Description::load(&p).unwrap_or_else(|e| panic!("{e}"));
                d.expected_tensors().unwrap();
                // Trained weights, when present, fit the description and
                // give finite logits on a mid-grey image.
                if d.weights.as_ref().is_some_and(|w| w.exists()) {
                    let (_, g, _) = load_graph(&p).unwrap_or_else(|e| panic!("{e}"));
                    let px = vec![128u8; d.input_shape().elems()];
                    let logits = float_ref::logits(&g, &px);
                    assert_eq!(logits.len(), d.labels.len());
                    assert!(logits.iter().all(|v| v.is_finite()), "{}", p.display());
                }
                loaded += 1;
            }
        }
    }
    assert!(loaded >= 1, "no descriptions found");
}
