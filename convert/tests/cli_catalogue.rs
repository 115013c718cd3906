//! The `midge` CLI against a catalogue of bad inputs, each built in its own
//! temporary folder from the tiny valid model of `quant_support`: every case
//! must exit with status 2, print exactly one line on stderr naming the
//! file / key / layer and the problem, leave no new file behind and leave
//! every existing file unchanged.

mod quant_support;

use std::collections::BTreeSet;
use std::fs;
use std::path::{Path, PathBuf};
use std::process::Command;

use midge_convert::quantize::{quantize_description, QuantizeOptions};
use midge_convert::weights::TensorMap;
use quant_support::{scratch, write_model};

/// One bad input: `prepare` damages a fresh copy of the tiny model in `dir`
/// and returns the arguments; stderr must contain every `expect` string.
struct Case {
    name: &'static str,
    prepare: fn(&Path) -> Vec<String>,
    expect: &'static [&'static str],
}

fn s(p: &Path) -> String {
    p.to_str().unwrap().to_string()
}

fn args(v: &[&str]) -> Vec<String> {
    v.iter().map(|a| a.to_string()).collect()
}

/// `quantize <dir>/model.toml -o <dir>/out.midge`.
fn quantize(dir: &Path) -> Vec<String> {
    args(&[
        "quantize",
        &s(&dir.join("model.toml")),
        "-o",
        &s(&dir.join("out.midge")),
    ])
}

fn weights(dir: &Path) -> PathBuf {
    dir.join("weights.safetensors")
}

/// Load the weights, change them, write them back.
fn edit_weights(dir: &Path, f: impl FnOnce(&mut TensorMap)) {
    let mut m = TensorMap::load(&weights(dir)).unwrap();
    f(&mut m);
    fs::write(weights(dir), m.to_safetensors_bytes().unwrap()).unwrap();
}

/// Replace `from` by `to` in the description (which must contain it).
fn edit_description(dir: &Path, from: &str, to: &str) {
    let p = dir.join("model.toml");
    let t = fs::read_to_string(&p).unwrap();
    assert!(t.contains(from), "description has no {from:?}");
    fs::write(&p, t.replacen(from, to, 1)).unwrap();
}

/// A valid model file `model.midge` converted from the tiny description.
fn write_midge(dir: &Path) -> PathBuf {
    let conv = quantize_description(&dir.join("model.toml"), &QuantizeOptions::default())
        .unwrap_or_else(|e| panic!("{e}"));
    let p = dir.join("model.midge");
    fs::write(&p, &conv.quantized.bytes).unwrap();
    p
}

fn show(p: &Path) -> Vec<String> {
    args(&["show", &s(p)])
}

fn catalogue() -> Vec<Case> {
    vec![
        Case {
            name: "missing description file",
            prepare: |d| {
                args(&[
                    "quantize",
                    &s(&d.join("absent.toml")),
                    "-o",
                    &s(&d.join("out.midge")),
                ])
            },
            expect: &["absent.toml", "cannot read"],
        },
        Case {
            name: "description is not TOML",
            prepare: |d| {
                fs::write(d.join("model.toml"), "name = \"x\"\n[[layer]\nop = ").unwrap();
                quantize(d)
            },
            expect: &["model.toml", "line 2"],
        },
        Case {
            name: "weights file missing",
            prepare: |d| {
                fs::remove_file(weights(d)).unwrap();
                quantize(d)
            },
            expect: &["weights.safetensors", "cannot read"],
        },
        Case {
            name: "weights not a safetensors file",
            prepare: |d| {
                fs::write(weights(d), "this is a text file, not tensors\n").unwrap();
                quantize(d)
            },
            expect: &["weights.safetensors", "not a safetensors file"],
        },
        Case {
            name: "truncated safetensors",
            prepare: |d| {
                let b = fs::read(weights(d)).unwrap();
                fs::write(weights(d), &b[..b.len() / 2]).unwrap();
                quantize(d)
            },
            expect: &["weights.safetensors", "not a complete safetensors file"],
        },
        Case {
            name: "unsupported dtype",
            prepare: |d| {
                // Same-length edit of the JSON header: F32 → I32 for one tensor.
                let mut b = fs::read(weights(d)).unwrap();
                let key = br#""stem.weight":{"dtype":"F32""#;
                let at = b
                    .windows(key.len())
                    .position(|w| w == key)
                    .expect("stem.weight header entry");
                // key ends in `F32"`: the F is 4 bytes before its end.
                b[at + key.len() - 4] = b'I';
                fs::write(weights(d), b).unwrap();
                quantize(d)
            },
            expect: &["weights.safetensors", "stem.weight", "I32", "not supported"],
        },
        Case {
            name: "tensor missing",
            prepare: |d| {
                edit_weights(d, |m| {
                    m.tensors.remove("block.weight").unwrap();
                });
                quantize(d)
            },
            expect: &["weights.safetensors", "block.weight", "missing"],
        },
        Case {
            name: "shape mismatch",
            prepare: |d| {
                edit_weights(d, |m| {
                    m.insert("head.weight", vec![3, 5], vec![0.1; 15]);
                });
                quantize(d)
            },
            expect: &["head.weight", "shape mismatch", "[3, 4]", "[3, 5]"],
        },
        Case {
            name: "NaN weight",
            prepare: |d| {
                edit_weights(d, |m| {
                    let t = m.tensors.get_mut("block.weight").unwrap();
                    t.data[5] = f32::NAN;
                });
                quantize(d)
            },
            expect: &["block.weight", "NaN", "not finite"],
        },
        Case {
            name: "Inf weight",
            prepare: |d| {
                edit_weights(d, |m| {
                    let t = m.tensors.get_mut("head.bias").unwrap();
                    t.data[0] = f32::NEG_INFINITY;
                });
                quantize(d)
            },
            expect: &["head.bias", "inf", "not finite"],
        },
        Case {
            name: "unknown op",
            prepare: |d| {
                edit_description(d, "op = \"depthwise\"", "op = \"conv3d\"");
                quantize(d)
            },
            expect: &["model.toml", "dw", "unknown op", "conv3d"],
        },
        Case {
            name: "layer input refers to a later layer",
            prepare: |d| {
                edit_description(
                    d,
                    "from = [\"stem_relu\", \"block\"]",
                    "from = [\"stem_relu\", \"dw\"]",
                );
                quantize(d)
            },
            expect: &["model.toml", "sum", "dw", "later layer"],
        },
        Case {
            name: "description key misspelt",
            prepare: |d| {
                edit_description(d, "out_features = 3", "out_featurs = 3");
                quantize(d)
            },
            expect: &["model.toml", "out_featurs", "unknown field"],
        },
        Case {
            name: "empty calibration folder",
            prepare: |d| {
                let e = d.join("empty");
                fs::create_dir_all(&e).unwrap();
                let mut a = quantize(d);
                a.extend(args(&["--calibration", &s(&e)]));
                a
            },
            expect: &["empty", "no images"],
        },
        Case {
            name: "non-image file among calibration images",
            prepare: |d| {
                fs::write(d.join("calib").join("c99.png"), "not a picture").unwrap();
                quantize(d)
            },
            expect: &["c99.png", "not a readable"],
        },
        Case {
            name: "calibration image of the wrong size, resizing off",
            prepare: |d| {
                image::RgbImage::from_pixel(9, 8, image::Rgb([1, 2, 3]))
                    .save(d.join("calib").join("c98.png"))
                    .unwrap();
                quantize(d)
            },
            expect: &["c98.png", "9×8", "8×8"],
        },
        Case {
            name: "class folders do not match the labels",
            prepare: |d| {
                fs::rename(d.join("val").join("bar"), d.join("val").join("wheel")).unwrap();
                args(&["compare", &s(&d.join("model.toml"))])
            },
            expect: &["val", "wheel", "bar"],
        },
        Case {
            name: "--max-drop not a number",
            prepare: |d| args(&["compare", &s(&d.join("model.toml")), "--max-drop", "lots"]),
            expect: &["--max-drop", "lots"],
        },
        Case {
            name: "--max-drop not finite",
            prepare: |d| args(&["compare", &s(&d.join("model.toml")), "--max-drop", "NaN"]),
            expect: &["--max-drop", "NaN"],
        },
        Case {
            name: "output folder does not exist",
            prepare: |d| {
                args(&[
                    "quantize",
                    &s(&d.join("model.toml")),
                    "-o",
                    &s(&d.join("no-such-folder").join("out.midge")),
                ])
            },
            expect: &["no-such-folder", "cannot write"],
        },
        Case {
            name: "model file that is not ours",
            prepare: |d| show(&d.join("calib").join("c00.png")),
            expect: &["c00.png", "bad magic"],
        },
        Case {
            name: "model file of a newer version",
            prepare: |d| {
                let p = write_midge(d);
                let mut b = fs::read(&p).unwrap();
                b[8..10].copy_from_slice(&2u16.to_le_bytes());
                fs::write(&p, b).unwrap();
                show(&p)
            },
            expect: &["model.midge", "version 2", "not supported"],
        },
        Case {
            name: "model file with a corrupted CRC",
            prepare: |d| {
                let p = write_midge(d);
                let mut b = fs::read(&p).unwrap();
                let n = b.len();
                b[n / 2] ^= 0x10;
                fs::write(&p, b).unwrap();
                show(&p)
            },
            expect: &["model.midge", "CRC", "mismatch"],
        },
        Case {
            name: "truncated model file given to classify",
            prepare: |d| {
                let p = write_midge(d);
                let b = fs::read(&p).unwrap();
                fs::write(&p, &b[..b.len() - 8]).unwrap();
                args(&["classify", &s(&p), &s(&d.join("calib").join("c00.png"))])
            },
            expect: &["model.midge", "truncated"],
        },
        Case {
            name: "classify an image of the wrong size without --resize",
            prepare: |d| {
                let p = write_midge(d);
                let img = d.join("big.png");
                image::RgbImage::from_pixel(16, 16, image::Rgb([9, 9, 9]))
                    .save(&img)
                    .unwrap();
                args(&["classify", &s(&p), &s(&img)])
            },
            expect: &["big.png", "16×16", "8×8"],
        },
        Case {
            name: "invalid target profile",
            prepare: |d| {
                let p = write_midge(d);
                let t = d.join("board.toml");
                fs::write(&t, "name = \"board\"\nram_bytes = \"lots\"\n").unwrap();
                args(&[
                    "budget",
                    &s(&p),
                    "--target",
                    &s(&t),
                    "--no-emulate",
                    "--no-runtime-size",
                ])
            },
            expect: &["board.toml", "lots"],
        },
        Case {
            name: "unknown target profile name",
            prepare: |d| {
                let p = write_midge(d);
                args(&[
                    "budget",
                    &s(&p),
                    "--target",
                    "m9-9000",
                    "--no-emulate",
                    "--no-runtime-size",
                ])
            },
            expect: &["m9-9000", "no target profile"],
        },
    ]
}

/// Every file under `dir`, relative paths.
fn files(dir: &Path) -> BTreeSet<PathBuf> {
    let mut out = BTreeSet::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                out.insert(p.strip_prefix(dir).unwrap().to_path_buf());
            }
        }
    }
    out
}

#[test]
fn bad_inputs_exit_2_with_one_line_and_no_output() {
    let cases = catalogue();
    assert!(cases.len() >= 20);
    run_cases("catalogue", &cases);
}

// ---------------------------------------------------------------------------
// Numeric and model-parse cases (issue 10, classes 5, 6, 9, 10, 11, 13),
// and the runner both catalogues share.

use midge_convert::graph::Precision;
use midge_runtime::format::field;

/// Offsets of the model-info block and its fields inside a model file.
const INFO: usize = field::header::LEN;

/// Write `value` at file offset `at` of the model file `p` and fix its CRC.
fn patch_midge(p: &Path, at: usize, value: &[u8]) {
    let mut b = fs::read(p).unwrap();
    b[at..at + value.len()].copy_from_slice(value);
    let crc = midge_runtime::crc::crc32(&b[field::header::LEN..]);
    b[field::header::CRC].copy_from_slice(&crc.to_le_bytes());
    fs::write(p, b).unwrap();
}

fn read_u32(b: &[u8], at: usize) -> usize {
    u32::from_le_bytes(b[at..at + 4].try_into().unwrap()) as usize
}

/// File offset of field `f` of tensor record `t`.
fn tensor_field(t: usize, f: field::Field) -> usize {
    INFO + field::info::LEN + t * field::tensor::LEN + f.start
}

/// An all-fp16 `model.midge` of the tiny description.
fn write_fp16_midge(dir: &Path) -> PathBuf {
    let opts = QuantizeOptions {
        precision: Some(Precision::Fp16),
        ..QuantizeOptions::default()
    };
    let conv =
        quantize_description(&dir.join("model.toml"), &opts).unwrap_or_else(|e| panic!("{e}"));
    let p = dir.join("model.midge");
    fs::write(&p, &conv.quantized.bytes).unwrap();
    p
}

/// File offset of the first weights blob of `p` (a conv2d's, in the tiny model).
fn first_weights_blob(p: &Path) -> usize {
    let b = fs::read(p).unwrap();
    let table = read_u32(&b, INFO + field::info::LAYERS.start);
    let layers = u16::from_le_bytes(b[INFO + 8..INFO + 10].try_into().unwrap()) as usize;
    (0..layers)
        .map(|i| {
            read_u32(
                &b,
                table + i * field::layer::LEN + field::layer::WEIGHTS.start,
            )
        })
        .find(|&off| off != 0)
        .expect("a layer with weights")
}

/// Head weights of 3e38: the head reads non-negative averages of ReLU6
/// outputs, so its sums pass f32::MAX (equal weights on signed inputs, as
/// in the stem, may cancel instead).
fn overflow_head(d: &Path) {
    edit_weights(d, |m| {
        let w = &mut m.tensors.get_mut("head.weight").unwrap().data;
        w.iter_mut().for_each(|v| *v = 3.0e38);
    });
}

/// `classify` on the model file `p` after setting tensor `t`'s scale.
fn classify_with_scale(p: &Path, d: &Path, t: usize, scale: f32) -> Vec<String> {
    patch_midge(
        p,
        tensor_field(t, field::tensor::SCALE),
        &scale.to_le_bytes(),
    );
    classify(p, d)
}

fn classify(p: &Path, d: &Path) -> Vec<String> {
    args(&["classify", &s(p), &s(&d.join("calib").join("c00.png"))])
}

fn profile_with(d: &Path, key_line: &str) -> PathBuf {
    let t = d.join("board.toml");
    let text = fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("../models/targets/m4-80.toml"),
    )
    .unwrap();
    let key = key_line.split('=').next().unwrap().trim();
    let line = text
        .lines()
        .find(|l| l.starts_with(&format!("{key} ")))
        .unwrap_or_else(|| panic!("m4-80.toml has no {key}"));
    fs::write(&t, text.replacen(line, key_line, 1)).unwrap();
    t
}

fn budget_with(d: &Path, key_line: &str) -> Vec<String> {
    let p = write_midge(d);
    let t = profile_with(d, key_line);
    args(&[
        "budget",
        &s(&p),
        "--target",
        &s(&t),
        "--no-emulate",
        "--no-runtime-size",
    ])
}

/// A valid 3-layer model file of a few hundred bytes whose 65535×65535
/// camera image and first tensor need a 4 GiB workspace: pixels, then a
/// 1×1 max pool of stride 65535 down to one value.
fn huge_workspace_model() -> Vec<u8> {
    use midge_runtime::write::{BiasBuf, LayerSpec, ModelSpec, ParamsBuf, WeightsBuf};
    use midge_runtime::{Activation, ElemType, LayerHeader, Op, Padding, Quant, Shape, Window};
    let t = |h, w, elem, offset| midge_runtime::TensorRecord {
        shape: Shape::new(h, w, 1),
        elem,
        quant: Quant {
            scale: 1.0 / 255.0,
            zero_point: 0,
        },
        offset,
    };
    let head = |op, input, output, window| LayerHeader {
        op,
        act: Activation::None,
        inputs: [input, 0],
        output,
        window,
        clamp_i8: [-128, 127],
        clamp_f32: [-65504.0, 65504.0],
    };
    let big = 65535u32 * 65535;
    let out_at = big.div_ceil(8) * 8;
    let spec = ModelSpec {
        name: "huge".into(),
        labels: vec!["only".into()],
        tensors: vec![
            t(65535, 65535, ElemType::U8, 0),
            t(65535, 65535, ElemType::I8, 0),
            t(1, 1, ElemType::I8, out_at),
        ],
        layers: vec![
            LayerSpec {
                header: head(Op::Pixels, 0, 1, Window::default()),
                weights: WeightsBuf::None,
                bias: BiasBuf::None,
                params: ParamsBuf::I32(vec![128 * 256, 1 << 30, 38]),
            },
            LayerSpec {
                header: head(
                    Op::MaxPool,
                    1,
                    2,
                    Padding::Valid.resolve((65535, 65535), (1, 1), (65535, 65535), (1, 1)),
                ),
                weights: WeightsBuf::None,
                bias: BiasBuf::None,
                params: ParamsBuf::None,
            },
        ],
        output: 2,
        workspace_len: out_at + 1,
    };
    spec.emit().unwrap()
}

fn numeric_catalogue() -> Vec<Case> {
    vec![
        // Class 5: a CRC-valid file claiming a 4 GiB workspace.
        Case {
            name: "model claims a 4 GiB workspace",
            prepare: |d| {
                let p = write_midge(d);
                patch_midge(
                    &p,
                    INFO + field::info::WORKSPACE_LEN.start,
                    &u32::MAX.to_le_bytes(),
                );
                classify(&p, d)
            },
            expect: &["model.midge", "workspace length", "4294967295"],
        },
        Case {
            name: "valid model whose workspace needs 4 GiB",
            prepare: |d| {
                let p = d.join("model.midge");
                fs::write(&p, huge_workspace_model()).unwrap();
                classify(&p, d)
            },
            expect: &[
                "model.midge",
                "workspace of 4294836233 bytes",
                "host tools allocate",
            ],
        },
        // Class 6: layer-count limit, in a model file and in a description.
        Case {
            name: "model file claims more layers than the format allows",
            prepare: |d| {
                let p = write_midge(d);
                patch_midge(
                    &p,
                    INFO + field::info::LAYER_COUNT.start,
                    &40000u16.to_le_bytes(),
                );
                show(&p)
            },
            expect: &["model.midge", "layer count", "32768", "40000"],
        },
        Case {
            name: "description with more layers than a model file holds",
            prepare: |d| {
                let p = d.join("model.toml");
                let mut t = fs::read_to_string(&p).unwrap();
                for _ in 0..32768 {
                    t.push_str("\n[[layer]]\nop = \"maxpool\"\nkernel = 1\n");
                }
                fs::write(&p, t).unwrap();
                quantize(d)
            },
            expect: &["model.toml", "layers", "32768"],
        },
        // Class 9: fp16 overflow is refused, naming the layer, value and range.
        Case {
            name: "--precision fp16 on a weight beyond 65504",
            prepare: |d| {
                edit_weights(d, |m| {
                    m.tensors.get_mut("block.weight").unwrap().data[5] = 1.0e5;
                });
                let mut a = quantize(d);
                a.extend(args(&["--precision", "fp16"]));
                a
            },
            expect: &["layer block", "1e5", "fp16 range", "65504"],
        },
        Case {
            name: "fp16 model file with an infinite weight",
            prepare: |d| {
                let p = write_fp16_midge(d);
                let at = first_weights_blob(&p);
                patch_midge(&p, at, &0x7C00u16.to_le_bytes()); // binary16 +inf
                show(&p)
            },
            expect: &["model.midge", "fp16 weights must be finite"],
        },
        // Class 10: non-finite float reference during calibration.
        Case {
            name: "weights overflow the float reference (quantize)",
            prepare: |d| {
                overflow_head(d);
                quantize(d)
            },
            expect: &[
                "calib",
                ".png",
                "float reference",
                "layer head",
                "overflow f32",
            ],
        },
        Case {
            name: "weights overflow the float reference (compare)",
            prepare: |d| {
                overflow_head(d);
                args(&["compare", &s(&d.join("model.toml"))])
            },
            expect: &[".png", "float reference", "layer head", "inf"],
        },
        Case {
            // Finite but huge activations would need an int8 scale beyond 2^32.
            name: "activation range beyond the int8 scale limit",
            prepare: |d| {
                edit_weights(d, |m| {
                    let w = &mut m.tensors.get_mut("head.weight").unwrap().data;
                    w.iter_mut().for_each(|v| *v = 1.0e37);
                });
                quantize(d)
            },
            expect: &["layer head", "int8 activation scale", "outside"],
        },
        // Class 11: profile values beyond the sane maxima.
        Case {
            name: "target profile RAM beyond 4 GiB",
            prepare: |d| budget_with(d, "ram_bytes = 9223372036854775807"),
            expect: &["board.toml", "ram_bytes", "4 GiB"],
        },
        Case {
            name: "target profile clock beyond 4 GHz",
            prepare: |d| budget_with(d, "clock_hz = 80000000000"),
            expect: &["board.toml", "clock_hz", "4000000000"],
        },
        // Class 13: absurd and non-finite scales; classify never prints NaN.
        Case {
            name: "model output scale 3e38",
            prepare: |d| {
                let p = write_midge(d);
                let b = fs::read(&p).unwrap();
                let out = u16::from_le_bytes(b[INFO + 4..INFO + 6].try_into().unwrap());
                classify_with_scale(&p, d, out as usize, 3.0e38)
            },
            expect: &["model.midge", "scale 3e38", "2^32"],
        },
        Case {
            // With infinite clamps an fp16 head could store ±inf, which
            // `classify` would have turned into NaN scores.
            name: "fp16 model with infinite clamp bounds",
            prepare: |d| {
                let p = write_fp16_midge(d);
                let b = fs::read(&p).unwrap();
                let table = read_u32(&b, INFO + field::info::LAYERS.start);
                let layers = u16::from_le_bytes(b[INFO + 8..INFO + 10].try_into().unwrap());
                let last = table + (layers as usize - 1) * field::layer::LEN;
                let mut inf = f32::NEG_INFINITY.to_le_bytes().to_vec();
                inf.extend(f32::INFINITY.to_le_bytes());
                patch_midge(&p, last + field::layer::CLAMP_F32_MIN.start, &inf);
                classify(&p, d)
            },
            expect: &["model.midge", "fp16 clamp", "65504"],
        },
        Case {
            name: "model tensor scale NaN",
            prepare: |d| {
                let p = write_midge(d);
                classify_with_scale(&p, d, 1, f32::NAN)
            },
            expect: &["model.midge", "tensor 1", "scale NaN"],
        },
    ]
}

/// Every file under `dir` with its contents.
fn contents(dir: &Path) -> std::collections::BTreeMap<PathBuf, Vec<u8>> {
    files(dir)
        .into_iter()
        .map(|p| {
            let b = fs::read(dir.join(&p)).unwrap();
            (p, b)
        })
        .collect()
}

/// Runs every case in its own fresh copy of the tiny model: exit status 2,
/// exactly one stderr line mentioning every `expect` string, no NaN on
/// stdout, no new file, and every file that existed before the run
/// byte-for-byte unchanged.
fn run_cases(tag: &str, cases: &[Case]) {
    let mut failures = Vec::new();
    for (i, case) in cases.iter().enumerate() {
        let dir = scratch(&format!("{tag}-{i}"));
        write_model(&dir, "", 7);
        let argv = (case.prepare)(&dir);
        let before = contents(&dir);
        let o = Command::new(env!("CARGO_BIN_EXE_midge"))
            .args(&argv)
            .output()
            .expect("run midge");
        let err = String::from_utf8_lossy(&o.stderr).into_owned();
        let after = contents(&dir);
        let mut problems = Vec::new();
        if o.status.code() != Some(2) {
            problems.push(format!("exit status {:?}, expected 2", o.status.code()));
        }
        if err.lines().count() != 1 {
            problems.push(format!("{} stderr lines, expected 1", err.lines().count()));
        }
        if String::from_utf8_lossy(&o.stdout).contains("NaN") {
            problems.push("stdout shows NaN".into());
        }
        for e in case.expect {
            if !err.contains(e) {
                problems.push(format!("stderr does not mention {e:?}"));
            }
        }
        let new: Vec<_> = after.keys().filter(|p| !before.contains_key(*p)).collect();
        if !new.is_empty() {
            problems.push(format!("left files behind: {new:?}"));
        }
        let changed: Vec<_> = before
            .iter()
            .filter(|(p, b)| after.get(*p) != Some(b))
            .map(|(p, _)| p)
            .collect();
        if !changed.is_empty() {
            problems.push(format!("changed or removed existing files: {changed:?}"));
        }
        eprintln!("  {:<52} {}", case.name, err.trim_end());
        if problems.is_empty() {
            let _ = fs::remove_dir_all(&dir);
        } else {
            failures.push(format!(
                "{}: {}\n    args {argv:?}\n    stderr {err:?}",
                case.name,
                problems.join("; ")
            ));
        }
    }
    eprintln!(
        "CLI {tag}: {} bad inputs, {} failed",
        cases.len(),
        failures.len()
    );
    assert!(failures.is_empty(), "\n{}", failures.join("\n"));
}

#[test]
fn numeric_bad_inputs_exit_2_with_one_line_and_leave_files_alone() {
    run_cases("numeric-catalogue", &numeric_catalogue());
}
