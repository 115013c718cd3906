//! The `midge` CLI against ONNX models it must refuse: each case builds a
//! small model with the prost types of `onnx.proto` (a good base graph,
//! changed in one place) beside a description naming it, runs `midge
//! quantize`, and requires exit status 2, one stderr line naming the node,
//! its op and what was expected, no new file and no changed file.

use std::collections::BTreeMap;
use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

use midge_convert::onnx::proto::{
    attribute_proto::AttributeType, tensor_proto::DataType, tensor_shape_proto, type_proto,
    AttributeProto, GraphProto, ModelProto, NodeProto, OperatorSetIdProto, StringStringEntryProto,
    TensorProto, TensorShapeProto, TypeProto, ValueInfoProto,
};
use prost::Message;

fn tensor(name: &str, dims: &[i64], data: Vec<f32>) -> TensorProto {
    TensorProto {
        name: Some(name.into()),
        dims: dims.to_vec(),
        data_type: Some(DataType::Float as i32),
        float_data: data,
        ..Default::default()
    }
}

fn ints_tensor(name: &str, v: &[i64]) -> TensorProto {
    TensorProto {
        name: Some(name.into()),
        dims: vec![v.len() as i64],
        data_type: Some(DataType::Int64 as i32),
        int64_data: v.to_vec(),
        ..Default::default()
    }
}

fn ai(name: &str, v: i64) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::Int as i32),
        i: Some(v),
        ..Default::default()
    }
}

fn af(name: &str, v: f32) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::Float as i32),
        f: Some(v),
        ..Default::default()
    }
}

fn aints(name: &str, v: &[i64]) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::Ints as i32),
        ints: v.to_vec(),
        ..Default::default()
    }
}

fn node(
    op: &str,
    name: &str,
    inputs: &[&str],
    output: &str,
    attrs: Vec<AttributeProto>,
) -> NodeProto {
    NodeProto {
        op_type: Some(op.into()),
        name: Some(name.into()),
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: vec![output.into()],
        attribute: attrs,
        ..Default::default()
    }
}

fn value_info(name: &str, dims: &[tensor_shape_proto::dimension::Value]) -> ValueInfoProto {
    ValueInfoProto {
        name: Some(name.into()),
        r#type: Some(TypeProto {
            value: Some(type_proto::Value::TensorType(type_proto::Tensor {
                elem_type: Some(DataType::Float as i32),
                shape: Some(TensorShapeProto {
                    dim: dims
                        .iter()
                        .map(|d| tensor_shape_proto::Dimension {
                            value: Some(d.clone()),
                            ..Default::default()
                        })
                        .collect(),
                }),
            })),
            ..Default::default()
        }),
        ..Default::default()
    }
}

fn dv(v: i64) -> tensor_shape_proto::dimension::Value {
    tensor_shape_proto::dimension::Value::DimValue(v)
}

/// The base model: x [N, 1, 4, 4] → Conv 2×1×3×3 (pads 1) → Relu →
/// GlobalAveragePool → Flatten → Gemm (transB) → y [1, 2].
struct Base {
    nodes: Vec<NodeProto>,
    inits: Vec<TensorProto>,
    inputs: Vec<ValueInfoProto>,
    opset: i64,
}

fn base() -> Base {
    Base {
        nodes: vec![
            node(
                "Conv",
                "conv",
                &["x", "w", "b"],
                "c",
                vec![aints("pads", &[1, 1, 1, 1])],
            ),
            node("Relu", "relu", &["c"], "r", vec![]),
            node("GlobalAveragePool", "gap", &["r"], "g", vec![]),
            node("Flatten", "flat", &["g"], "f", vec![]),
            node("Gemm", "fc", &["f", "fw", "fb"], "y", vec![ai("transB", 1)]),
        ],
        inits: vec![
            tensor(
                "w",
                &[2, 1, 3, 3],
                (0..18).map(|i| i as f32 / 10.0 - 0.9).collect(),
            ),
            tensor("b", &[2], vec![0.1, -0.1]),
            tensor("fw", &[2, 2], vec![1.0, -1.0, 0.5, 0.25]),
            tensor("fb", &[2], vec![0.0, 0.5]),
        ],
        inputs: vec![value_info(
            "x",
            &[
                tensor_shape_proto::dimension::Value::DimParam("N".into()),
                dv(1),
                dv(4),
                dv(4),
            ],
        )],
        opset: 13,
    }
}

impl Base {
    fn bytes(&self) -> Vec<u8> {
        ModelProto {
            ir_version: Some(7),
            opset_import: vec![OperatorSetIdProto {
                domain: Some(String::new()),
                version: Some(self.opset),
            }],
            graph: Some(GraphProto {
                name: Some("g".into()),
                node: self.nodes.clone(),
                initializer: self.inits.clone(),
                input: self.inputs.clone(),
                output: vec![value_info("y", &[dv(1), dv(2)])],
                ..Default::default()
            }),
            ..Default::default()
        }
        .encode_to_vec()
    }
    fn node(&mut self, name: &str) -> &mut NodeProto {
        self.nodes
            .iter_mut()
            .find(|n| n.name.as_deref() == Some(name))
            .unwrap()
    }
}

const DESCRIPTION: &str = "labels = [\"a\", \"b\"]\nonnx = \"m.onnx\"\ncalibration = \"calib\"\n";

struct Case {
    name: &'static str,
    /// Changes the base model; returns extra description text.
    model: fn(&mut Base) -> &'static str,
    expect: &'static [&'static str],
}

fn catalogue() -> Vec<Case> {
    vec![
        Case {
            name: "ConvTranspose",
            model: |b| {
                b.node("conv").op_type = Some("ConvTranspose".into());
                ""
            },
            expect: &[
                "node \"conv\" (ConvTranspose, opset 13)",
                "transposed convolution",
                "expected Conv",
            ],
        },
        Case {
            name: "unsupported operator",
            model: |b| {
                b.node("relu").op_type = Some("LeakyRelu".into());
                ""
            },
            expect: &[
                "node \"relu\" (LeakyRelu, opset 13)",
                "not supported",
                "supported: Conv",
            ],
        },
        Case {
            name: "Clip bounds neither ReLU nor ReLU6",
            model: |b| {
                b.inits.push(tensor("lo", &[], vec![0.0]));
                b.inits.push(tensor("hi", &[], vec![3.0]));
                *b.node("relu") = node("Clip", "clip", &["c", "lo", "hi"], "r", vec![]);
                ""
            },
            expect: &[
                "node \"clip\" (Clip, opset 13)",
                "Clip to [0, 3]",
                "expected [0, 6]",
            ],
        },
        Case {
            name: "Clip attributes in opset 9 outside ReLU6",
            model: |b| {
                b.opset = 9;
                *b.node("relu") = node(
                    "Clip",
                    "clip",
                    &["c"],
                    "r",
                    vec![af("min", -1.0), af("max", 1.0)],
                );
                ""
            },
            expect: &["node \"clip\" (Clip, opset 9)", "Clip to [-1, 1]"],
        },
        Case {
            name: "AveragePool counting padded taps",
            model: |b| {
                *b.node("gap") = node(
                    "AveragePool",
                    "avg",
                    &["r"],
                    "g",
                    vec![
                        aints("kernel_shape", &[4, 4]),
                        aints("pads", &[1, 1, 1, 1]),
                        ai("count_include_pad", 1),
                    ],
                );
                ""
            },
            expect: &[
                "node \"avg\" (AveragePool",
                "count_include_pad 1",
                "expected count_include_pad 0 or pads 0",
            ],
        },
        Case {
            name: "grouped convolution",
            model: |b| {
                b.inputs[0] = value_info("x", &[dv(1), dv(4), dv(4), dv(4)]);
                b.inits[0] = tensor("w", &[2, 2, 3, 3], vec![0.1; 36]);
                b.node("conv").attribute.push(ai("group", 2));
                ""
            },
            expect: &[
                "node \"conv\" (Conv",
                "group 2",
                "expected group 1 (conv2d) or group = channels",
            ],
        },
        Case {
            name: "weights in an external data file",
            model: |b| {
                let w = &mut b.inits[0];
                w.float_data.clear();
                w.data_location = Some(1);
                w.external_data = vec![StringStringEntryProto {
                    key: Some("location".into()),
                    value: Some("weights.bin".into()),
                }];
                ""
            },
            expect: &[
                "initializer \"w\"",
                "external data file (\"weights.bin\")",
                "save_as_external_data=False",
            ],
        },
        Case {
            name: "opset 8",
            model: |b| {
                b.opset = 8;
                ""
            },
            expect: &["m.onnx", "opset 8", "expected 9..=21"],
        },
        Case {
            name: "symbolic height",
            model: |b| {
                b.inputs[0] = value_info(
                    "x",
                    &[
                        dv(1),
                        dv(1),
                        tensor_shape_proto::dimension::Value::DimParam("H".into()),
                        dv(4),
                    ],
                );
                ""
            },
            expect: &["input \"x\"", "symbolic (\"H\")", "static shape"],
        },
        Case {
            name: "batch of two",
            model: |b| {
                b.inputs[0] = value_info("x", &[dv(2), dv(1), dv(4), dv(4)]);
                ""
            },
            expect: &["input \"x\"", "batch size 2", "expected 1"],
        },
        Case {
            name: "Softmax inside the network",
            model: |b| {
                *b.node("relu") = node("Softmax", "sm", &["c"], "r", vec![]);
                ""
            },
            expect: &["node \"sm\" (Softmax", "only as the last node"],
        },
        Case {
            name: "trailing Softmax along the batch axis",
            model: |b| {
                b.node("fc").output[0] = "z".into();
                b.nodes
                    .push(node("Softmax", "sm", &["z"], "y", vec![ai("axis", 0)]));
                ""
            },
            expect: &[
                "node \"sm\" (Softmax",
                "axis 0 of dims [1, 2]",
                "does not cover all 2 scores",
            ],
        },
        Case {
            name: "Gemm transA",
            model: |b| {
                b.node("fc").attribute.push(ai("transA", 1));
                ""
            },
            expect: &["node \"fc\" (Gemm", "transA 1", "expected transA 0"],
        },
        Case {
            name: "Reshape that is not a flatten",
            model: |b| {
                b.inits.push(ints_tensor("shape", &[1, 2, 16]));
                *b.node("gap") = node("Reshape", "rs", &["r", "shape"], "g", vec![]);
                ""
            },
            expect: &["node \"rs\" (Reshape", "[1, 2, 16]", "expected flattening"],
        },
        Case {
            name: "Sub by a constant inside the network",
            model: |b| {
                b.inits.push(tensor("k", &[], vec![1.0]));
                *b.node("relu") = node("Sub", "sub", &["c", "k"], "r", vec![]);
                ""
            },
            expect: &[
                "node \"sub\" (Sub",
                "only as normalisation of the graph input",
            ],
        },
        Case {
            name: "input divided by zero",
            model: |b| {
                b.inits.push(tensor("z", &[], vec![0.0]));
                b.nodes
                    .insert(0, node("Div", "div", &["x", "z"], "xn", vec![]));
                b.node("conv").input[0] = "xn".into();
                ""
            },
            expect: &["node \"div\" (Div", "std ≠ 0"],
        },
        Case {
            name: "BatchNormalization in training mode",
            model: |b| {
                b.opset = 15;
                for n in ["s", "bb", "m", "v"] {
                    b.inits.push(tensor(n, &[2], vec![1.0, 1.0]));
                }
                *b.node("relu") = node(
                    "BatchNormalization",
                    "bn",
                    &["c", "s", "bb", "m", "v"],
                    "r",
                    vec![ai("training_mode", 1)],
                );
                ""
            },
            expect: &[
                "node \"bn\" (BatchNormalization, opset 15)",
                "training_mode 1",
            ],
        },
        Case {
            name: "two graph inputs",
            model: |b| {
                let extra = value_info("x2", &[dv(1), dv(1), dv(4), dv(4)]);
                b.inputs.push(extra);
                ""
            },
            expect: &["m.onnx", "2 inputs (\"x\", \"x2\")", "exactly one"],
        },
        Case {
            name: "integer weights",
            model: |b| {
                b.inits[0] = TensorProto {
                    name: Some("w".into()),
                    dims: vec![2, 1, 3, 3],
                    data_type: Some(DataType::Int64 as i32),
                    int64_data: vec![1; 18],
                    ..Default::default()
                };
                ""
            },
            expect: &["node \"conv\" (Conv", "expected float [M, C/group, kH, kW]"],
        },
        Case {
            name: "raw data of the wrong length",
            model: |b| {
                let w = &mut b.inits[1];
                w.float_data.clear();
                w.raw_data = Some(vec![0; 6]);
                ""
            },
            expect: &["initializer \"b\"", "6 raw bytes of FLOAT", "need 2 values"],
        },
        Case {
            name: "weights and onnx together",
            model: |_| "weights = \"w.safetensors\"\n",
            expect: &["weights", "either `weights`", "or `onnx`"],
        },
        Case {
            name: "precision for an unknown node",
            model: |_| "[[layer]]\nname = \"nope\"\nprecision = \"fp16\"\n",
            expect: &["layer 1 (nope)", "no layer of that name", "conv, relu"],
        },
        Case {
            name: "layer table with an op",
            model: |_| "[[layer]]\nname = \"conv\"\nop = \"conv2d\"\n",
            expect: &["layer 1: op", "sets only `name`"],
        },
        Case {
            name: "input size that differs from the graph",
            model: |_| "[input]\nchannels = 3\n",
            expect: &["input.channels", "the ONNX graph input has channels 1"],
        },
        Case {
            name: "labels that do not match the outputs",
            model: |b| {
                b.inits[2] = tensor("fw", &[3, 2], vec![0.5; 6]);
                b.inits[3] = tensor("fb", &[3], vec![0.0; 3]);
                ""
            },
            expect: &["labels", "2 labels", "\"fc\" has 3 outputs"],
        },
    ]
}

fn run(argv: &[String]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_midge"))
        .args(argv)
        .stdin(Stdio::null())
        .output()
        .expect("run midge")
}

fn scratch(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("midge-onnx-{tag}-{}", std::process::id()));
    let _ = fs::remove_dir_all(&d);
    fs::create_dir_all(d.join("calib")).unwrap();
    // One 4×4 grey calibration image.
    image::GrayImage::from_raw(4, 4, (0..16).map(|i| i * 16).collect())
        .unwrap()
        .save(d.join("calib/0.png"))
        .unwrap();
    d
}

fn files(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut m = BTreeMap::new();
    for e in fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_file() {
            m.insert(p.clone(), fs::read(&p).unwrap());
        }
    }
    m
}

fn s(p: &Path) -> String {
    p.to_str().unwrap().to_string()
}

#[test]
fn the_base_model_converts() {
    let dir = scratch("base");
    fs::write(dir.join("m.onnx"), base().bytes()).unwrap();
    fs::write(dir.join("m.toml"), DESCRIPTION).unwrap();
    let o = run(&[
        "quantize".into(),
        s(&dir.join("m.toml")),
        "-o".into(),
        s(&dir.join("m.midge")),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(dir.join("m.midge").is_file());
    fs::remove_dir_all(&dir).ok();
}

#[test]
fn refused_onnx_models_exit_2_with_one_line_and_no_output() {
    let cases = catalogue();
    let mut failures = Vec::new();
    for (i, case) in cases.iter().enumerate() {
        let dir = scratch(&format!("case{i}"));
        let mut b = base();
        let extra = (case.model)(&mut b);
        fs::write(dir.join("m.onnx"), b.bytes()).unwrap();
        fs::write(dir.join("m.toml"), format!("{DESCRIPTION}{extra}")).unwrap();
        fs::write(dir.join("out.midge"), b"previous").unwrap();
        let before = files(&dir);
        let o = run(&[
            "quantize".into(),
            s(&dir.join("m.toml")),
            "-o".into(),
            s(&dir.join("out.midge")),
        ]);
        let err = String::from_utf8_lossy(&o.stderr).into_owned();
        let mut problems = Vec::new();
        if o.status.code() != Some(2) {
            problems.push(format!("exit status {:?}, expected 2", o.status.code()));
        }
        if err.lines().count() != 1 {
            problems.push(format!("{} stderr lines, expected 1", err.lines().count()));
        }
        for e in case.expect {
            if !err.contains(e) {
                problems.push(format!("stderr does not mention {e:?}"));
            }
        }
        if files(&dir) != before {
            problems.push("files were added or changed".into());
        }
        eprintln!("  {:<44} {}", case.name, err.trim_end());
        if problems.is_empty() {
            fs::remove_dir_all(&dir).ok();
        } else {
            failures.push(format!(
                "{}: {} (stderr {err:?})",
                case.name,
                problems.join("; ")
            ));
        }
    }
    assert!(failures.is_empty(), "\n{}", failures.join("\n"));
}

#[test]
fn outputs_never_replace_the_onnx_file_and_drafts_never_replace_files() {
    let dir = scratch("outputs");
    let bytes = base().bytes();
    fs::write(dir.join("m.onnx"), &bytes).unwrap();
    fs::write(dir.join("m.toml"), DESCRIPTION).unwrap();
    let o = run(&[
        "quantize".into(),
        s(&dir.join("m.toml")),
        "-o".into(),
        s(&dir.join("m.onnx")),
    ]);
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert_eq!(fs::read(dir.join("m.onnx")).unwrap(), bytes);
    // A draft over the existing description is refused, the file kept.
    let o = run(&[
        "draft".into(),
        s(&dir.join("m.onnx")),
        "-o".into(),
        s(&dir.join("m.toml")),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("a draft never replaces a file"));
    assert_eq!(fs::read_to_string(dir.join("m.toml")).unwrap(), DESCRIPTION);
    // Not a model file at all.
    fs::write(dir.join("junk.onnx"), b"\xff\xff\xff\xff not protobuf").unwrap();
    let o = run(&["draft".into(), s(&dir.join("junk.onnx"))]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("not an ONNX model"));
    assert!(!dir.join("junk.toml").exists());
    fs::remove_dir_all(&dir).ok();
}

#[test]
fn drafts_of_every_fixture_convert_without_edits() {
    let fixtures = Path::new(env!("CARGO_MANIFEST_DIR")).join("../tests/fixtures/onnx");
    let dir = scratch("drafts");
    for name in [
        "conv_relu_pool_gemm",
        "autopad_clip_attr_gemm",
        "depthwise_bn_clip_inputs",
        "residual_norm_flatten_chain",
        "mul_add_norm_opset21",
        "opset11_shape_chain",
        "caps_plain",
        "caps_separable",
        "qdq_conv_gap_gemm",
    ] {
        let onnx = dir.join(format!("{name}.onnx"));
        fs::copy(fixtures.join(format!("{name}.onnx")), &onnx).unwrap();
        let desc = dir.join(format!("{name}.toml"));
        // Calibration images of the fixture's input size (grey or RGB; the
        // two-channel fixtures have no image format and are only loaded).
        let m = midge_convert::onnx::OnnxModel::load(&onnx).unwrap();
        let (h, w, c) = midge_convert::onnx::lower(&m).unwrap().input_hwc;
        let calib = dir.join(format!("calib-{name}"));
        fs::create_dir_all(&calib).unwrap();
        let n = h as usize * w as usize * c as usize;
        let px: Vec<u8> = (0..n).map(|i| (i * 37 % 256) as u8).collect();
        match c {
            1 => image::GrayImage::from_raw(w.into(), h.into(), px)
                .unwrap()
                .save(calib.join("0.png"))
                .unwrap(),
            3 => image::RgbImage::from_raw(w.into(), h.into(), px)
                .unwrap()
                .save(calib.join("0.png"))
                .unwrap(),
            _ => {}
        }
        let o = run(&["draft".into(), s(&onnx), "--calibration".into(), s(&calib)]);
        assert!(
            o.status.success(),
            "{name}: {}",
            String::from_utf8_lossy(&o.stderr)
        );
        assert!(
            String::from_utf8_lossy(&o.stdout).contains("it loads as it is"),
            "{name}"
        );
        let d = midge_convert::description::Description::load(&desc).unwrap();
        assert_eq!(d.onnx.as_deref(), Some(onnx.as_path()), "{name}");
        if c == 2 {
            continue;
        }
        let o = run(&[
            "quantize".into(),
            s(&desc),
            "-o".into(),
            s(&dir.join(format!("{name}.midge"))),
        ]);
        assert!(
            o.status.success(),
            "{name}: {}",
            String::from_utf8_lossy(&o.stderr)
        );
    }
    fs::remove_dir_all(&dir).ok();
}

#[test]
fn assess_works_on_an_onnx_description() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let caps = root.join("models/caps");
    let dir = scratch("assess");
    fs::copy(
        root.join("tests/fixtures/onnx/caps_plain.onnx"),
        dir.join("caps.onnx"),
    )
    .unwrap();
    let desc = dir.join("caps.toml");
    fs::write(
        &desc,
        format!(
            "name = \"caps-plain\"\nlabels = [\"sealed\", \"missing\", \"tilted\", \"torn\"]\nonnx = \"caps.onnx\"\ncalibration = {:?}\nvalidation = {:?}\ntarget = {:?}\n[input]\npixel_range = 1.0\n",
            s(&caps.join("calib")),
            s(&caps.join("val")),
            s(&root.join("models/targets/m4-80.toml"))
        ),
    )
    .unwrap();
    let out = dir.join("caps.midge");
    // --no-emulate: as in cli_assess.rs, QEMU runs are midge-tests' part.
    let o = run(&[
        "assess".into(),
        s(&desc),
        "--json".into(),
        "--no-emulate".into(),
        "-o".into(),
        s(&out),
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(matches!(o.status.code(), Some(0) | Some(4)), "{stderr}");
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("JSON on stdout");
    assert!(v["report"]["quantized_top1"].is_number());
    // The same model file as the TOML description of the same network.
    let toml_route = midge_convert::quantize::quantize_description(
        &caps.join("plain.toml"),
        &midge_convert::quantize::QuantizeOptions::default(),
    )
    .unwrap();
    assert!(
        fs::read(&out).unwrap() == toml_route.quantized.bytes,
        "same .midge bytes"
    );
    fs::remove_dir_all(&dir).ok();
}
