//! The `midge` CLI against a catalogue of bad inputs, each built in its own
//! temporary folder from the tiny valid model of `quant_support`: every case
//! must exit with status 2, print exactly one line on stderr naming the
//! file / key / layer and the problem, leave no new file behind and leave
//! every file that was there (a previous `out.midge` among them) as it was.

#[path = "../../convert/tests/quant_support/mod.rs"]
mod quant_support;

use std::collections::BTreeMap;
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

/// Every entry under `dir` (symbolic links and special files not followed),
/// relative paths, with the bytes of the regular files.
fn files(dir: &Path) -> BTreeMap<PathBuf, Option<Vec<u8>>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            let t = fs::symlink_metadata(&p).unwrap().file_type();
            if t.is_dir() {
                stack.push(p);
            } else {
                let bytes = t.is_file().then(|| fs::read(&p).unwrap());
                out.insert(p.strip_prefix(dir).unwrap().to_path_buf(), bytes);
            }
        }
    }
    out
}

/// Run midge with `argv`, killed after two minutes so that a case that
/// hangs (a FIFO opened for reading, say) fails instead of stalling the
/// suite; the bound is a guard, not a timing assertion.
fn run_bounded(argv: &[String]) -> std::process::Output {
    use std::process::Stdio;
    let mut child = Command::new(env!("CARGO_BIN_EXE_midge"))
        .args(argv)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("run midge");
    let start = std::time::Instant::now();
    while child.try_wait().expect("wait for midge").is_none() {
        if start.elapsed() > std::time::Duration::from_secs(120) {
            let _ = child.kill();
            break;
        }
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    child.wait_with_output().expect("midge output")
}

/// Bytes of the output file every case finds in place before it runs.
const PREVIOUS_OUTPUT: &[u8] = b"the user's previous model file";

#[test]
fn bad_inputs_exit_2_with_one_line_and_no_output() {
    let cases: Vec<Case> = catalogue().into_iter().chain(hostile_catalogue()).collect();
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
    use midge_runtime::{
        repr::{Activation, LayerHeader, Padding, Window},
        ElemType, Op, Quant, Shape,
    };
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

/// Runs every case in its own fresh copy of the tiny model: exit status 2,
/// exactly one stderr line mentioning every `expect` string, no NaN on
/// stdout, no new file, and every file that existed before the run
/// byte-for-byte unchanged.
fn run_cases(tag: &str, cases: &[Case]) {
    let mut failures = Vec::new();
    for (i, case) in cases.iter().enumerate() {
        let dir = scratch(&format!("{tag}-{i}"));
        write_model(&dir, "", 7);
        fs::write(dir.join("out.midge"), PREVIOUS_OUTPUT).unwrap();
        let argv = (case.prepare)(&dir);
        let before = files(&dir);
        let o = run_bounded(&argv);
        let err = String::from_utf8_lossy(&o.stderr).into_owned();
        let after = files(&dir);
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
        let new: Vec<_> = after.keys().filter(|k| !before.contains_key(*k)).collect();
        if !new.is_empty() {
            problems.push(format!("left files behind: {new:?}"));
        }
        let changed: Vec<_> = before
            .iter()
            .filter(|(k, v)| after.get(*k) != Some(v))
            .map(|(k, _)| k)
            .collect();
        if !changed.is_empty() {
            problems.push(format!("changed or removed files: {changed:?}"));
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

// ---- Hostile input (issue 10, input/output half): limits, special files,
// ---- outputs that must not lose the user's files, escaping.

/// A FIFO (named pipe) at `p`, made by the `mkfifo` command.
fn mkfifo(p: &Path) {
    let ok = Command::new("mkfifo").arg(p).status().expect("run mkfifo");
    assert!(ok.success(), "mkfifo {}", p.display());
}

/// A character device node at `p` (a copy of /dev/null's numbers, 1:3, from
/// the Linux devices list; common practice) when this process may make one,
/// otherwise a FIFO: either is a special file midge must not replace.
fn special_file(p: &Path) {
    let made = Command::new("mknod")
        .arg(p)
        .args(["c", "1", "3"])
        .stderr(std::process::Stdio::null())
        .status()
        .is_ok_and(|s| s.success());
    if !made {
        mkfifo(p);
    }
}

/// Replace the whole `[input]` table's size lines.
fn set_input(dir: &Path, h: u32, w: u32, extra: &str) {
    edit_description(
        dir,
        "height = 8\nwidth = 8\n",
        &format!("height = {h}\nwidth = {w}\n{extra}\n"),
    );
}

/// A 54-byte BMP header (BITMAPFILEHEADER + BITMAPINFOHEADER, 24 bits per
/// pixel; Microsoft's BMP file format) claiming `w`×`h` pixels, with no
/// pixel data: only its header can be read.
fn bmp_header(w: i32, h: i32) -> Vec<u8> {
    let mut b = Vec::new();
    b.extend(b"BM");
    b.extend(54u32.to_le_bytes()); // file size as written here
    b.extend([0u8; 4]);
    b.extend(54u32.to_le_bytes()); // pixel data offset
    b.extend(40u32.to_le_bytes());
    b.extend(w.to_le_bytes());
    b.extend(h.to_le_bytes());
    b.extend(1u16.to_le_bytes()); // planes
    b.extend(24u16.to_le_bytes()); // bits per pixel
    b.extend([0u8; 24]); // no compression, sizes and palette left zero
    b
}

/// A safetensors file whose header names one tensor `name` of `shape`.
fn safetensors_claiming(name: &str, shape: &[u64]) -> Vec<u8> {
    let dims: Vec<String> = shape.iter().map(|d| d.to_string()).collect();
    let mut header = format!(
        r#"{{"{name}":{{"dtype":"F32","shape":[{}],"data_offsets":[0,4]}}}}"#,
        dims.join(",")
    )
    .into_bytes();
    while header.len() % 8 != 0 {
        header.push(b' ');
    }
    let mut b = (header.len() as u64).to_le_bytes().to_vec();
    b.extend(header);
    b.extend([0u8; 4]);
    b
}

fn hostile_catalogue() -> Vec<Case> {
    vec![
        // Class 1: resource limits, checked before anything is allocated.
        Case {
            name: "input of 65535×65535 with resizing on",
            prepare: |d| {
                set_input(d, 65535, 65535, "resize = true");
                quantize(d)
            },
            expect: &["model.toml: input.height", "65535", "limit of 2048"],
        },
        Case {
            name: "input that needs gigabytes of activations",
            prepare: |d| {
                set_input(d, 2048, 2048, "resize = true");
                quantize(d)
            },
            expect: &["model.toml", "activation bytes", "limit of"],
        },
        Case {
            name: "huge kernel",
            prepare: |d| {
                edit_description(
                    d,
                    "kernel = 3\npadding = 1\n",
                    "kernel = 60000\npadding = 1\n",
                );
                quantize(d)
            },
            expect: &["layer 1 (stem): kernel", "60000", "limit of 256"],
        },
        Case {
            name: "huge dense layer",
            prepare: |d| {
                edit_description(d, "out_features = 3", "out_features = 60000");
                quantize(d)
            },
            expect: &["(head): out_features", "60000", "limit of 4096"],
        },
        Case {
            name: "conv2d weight tensor of gigabytes",
            prepare: |d| {
                edit_description(
                    d,
                    "out_channels = 4\nkernel = 3\npadding = 1\n",
                    "out_channels = 4096\nkernel = 256\npadding = 128\n",
                );
                quantize(d)
            },
            expect: &[
                "layer 1 (stem): f32 bytes of tensor \"stem.weight\"",
                "3221225472",
                "limit of 67108864",
            ],
        },
        Case {
            name: "too many layers",
            prepare: |d| {
                let p = d.join("model.toml");
                let mut t = fs::read_to_string(&p).unwrap();
                t.push_str(&"\n[[layer]]\nop = \"relu\"\n".repeat(1100));
                fs::write(&p, t).unwrap();
                quantize(d)
            },
            expect: &["model.toml: [[layer]] tables", "1112", "limit of 1024"],
        },
        Case {
            name: "over-long label",
            prepare: |d| {
                let long = "l".repeat(300);
                edit_description(d, "\"ring\", \"dot\"", &format!("\"ring\", \"{long}\""));
                quantize(d)
            },
            expect: &["model.toml: labels[1] (bytes)", "300", "limit of 256"],
        },
        Case {
            name: "over-long layer name",
            prepare: |d| {
                let long = "n".repeat(300);
                edit_description(d, "name = \"stem\"", &format!("name = \"{long}\""));
                quantize(d)
            },
            expect: &["model.toml: layer 1: name (bytes)", "300", "limit of 256"],
        },
        Case {
            name: "over-long model name",
            prepare: |d| {
                let long = "m".repeat(70000);
                edit_description(d, "name = \"tiny-residual\"", &format!("name = \"{long}\""));
                quantize(d)
            },
            expect: &["model.toml: name (bytes)", "70000", "limit of 256"],
        },
        Case {
            name: "empty label",
            prepare: |d| {
                edit_description(d, "\"dot\"", "\"\"");
                quantize(d)
            },
            expect: &["model.toml: labels[1]", "label is empty"],
        },
        Case {
            name: "pixel_range 3e38",
            prepare: |d| {
                edit_description(d, "pixel_range = 1.0", "pixel_range = 3e38");
                quantize(d)
            },
            expect: &["model.toml: input.pixel_range", "limit of 65535"],
        },
        Case {
            name: "safetensors tensor whose shape needs gigabytes",
            prepare: |d| {
                fs::write(
                    weights(d),
                    safetensors_claiming("stem.weight", &[100000, 100000]),
                )
                .unwrap();
                quantize(d)
            },
            expect: &[
                "weights.safetensors: stem.weight",
                "[100000, 100000]",
                "limit of",
            ],
        },
        Case {
            name: "safetensors shape that overflows 64 bits",
            prepare: |d| {
                let big = u64::MAX / 2;
                fs::write(weights(d), safetensors_claiming("head.bias", &[big, big])).unwrap();
                quantize(d)
            },
            expect: &["weights.safetensors: head.bias", "more than 2^64"],
        },
        Case {
            name: "image header of 20000×20000 pixels (never decoded)",
            prepare: |d| {
                fs::write(d.join("calib").join("c97.bmp"), bmp_header(20000, 20000)).unwrap();
                quantize(d)
            },
            expect: &["c97.bmp: image width or height", "20000", "limit of 8192"],
        },
        Case {
            name: "image of the wrong size refused by its header",
            prepare: |d| {
                fs::write(d.join("calib").join("c96.bmp"), bmp_header(4000, 3000)).unwrap();
                quantize(d)
            },
            expect: &["c96.bmp", "4000×3000", "8×8"],
        },
        Case {
            name: "image too large to resize",
            prepare: |d| {
                set_input(d, 8, 8, "resize = true");
                fs::write(d.join("calib").join("c95.bmp"), bmp_header(8000, 8000)).unwrap();
                quantize(d)
            },
            expect: &["c95.bmp: pixels of an image to resize", "64000000"],
        },
        Case {
            name: "--percentile -5",
            prepare: |d| {
                let mut a = quantize(d);
                a.extend(args(&["--percentile", "-5"]));
                a
            },
            expect: &["--percentile", "-5", "50..=100"],
        },
        // Class 2: only regular files are opened, never a FIFO or device.
        Case {
            name: "FIFO among the calibration images",
            prepare: |d| {
                mkfifo(&d.join("calib").join("c50.png"));
                quantize(d)
            },
            expect: &["c50.png", "FIFO", "expected image files and folders"],
        },
        Case {
            name: "FIFO in a validation class folder",
            prepare: |d| {
                mkfifo(&d.join("val").join("dot").join("v9.png"));
                args(&["compare", &s(&d.join("model.toml"))])
            },
            expect: &["v9.png", "FIFO"],
        },
        Case {
            name: "weights file is a FIFO",
            prepare: |d| {
                fs::remove_file(weights(d)).unwrap();
                mkfifo(&weights(d));
                quantize(d)
            },
            expect: &["weights.safetensors", "FIFO", "regular weights file"],
        },
        Case {
            name: "weights are /dev/zero",
            prepare: |d| {
                edit_description(d, "\"weights.safetensors\"", "\"/dev/zero\"");
                quantize(d)
            },
            expect: &["/dev/zero", "character device", "regular weights file"],
        },
        Case {
            name: "model file is /dev/zero",
            prepare: |_| show(Path::new("/dev/zero")),
            expect: &["/dev/zero", "character device", "regular model file"],
        },
        Case {
            name: "description is a folder",
            prepare: |d| {
                args(&[
                    "quantize",
                    &s(&d.join("calib")),
                    "-o",
                    &s(&d.join("out.midge")),
                ])
            },
            expect: &["calib", "a folder", "regular description file"],
        },
        Case {
            name: "target profile is a FIFO",
            prepare: |d| {
                let p = write_midge(d);
                let t = d.join("board.toml");
                mkfifo(&t);
                args(&[
                    "budget",
                    &s(&p),
                    "--target",
                    &s(&t),
                    "--no-emulate",
                    "--no-runtime-size",
                ])
            },
            expect: &["board.toml", "FIFO", "regular target profile file"],
        },
        // Classes 3 and 4: all-or-nothing output that never replaces the
        // user's inputs or anything but a regular file.
        Case {
            name: "--rust-module names a folder (previous -o kept)",
            prepare: |d| {
                let m = d.join("module");
                fs::create_dir(&m).unwrap();
                let mut a = quantize(d);
                a.extend(args(&["--rust-module", &s(&m)]));
                a
            },
            expect: &["module", "is a folder", "regular files"],
        },
        Case {
            name: "--rust-module in a missing folder (previous -o kept)",
            prepare: |d| {
                let mut a = quantize(d);
                a.extend(args(&[
                    "--rust-module",
                    &s(&d.join("gone").join("model.rs")),
                ]));
                a
            },
            expect: &["gone/model.rs", "cannot write"],
        },
        Case {
            name: "--c-source whose header is a folder (previous -o kept)",
            prepare: |d| {
                fs::create_dir(d.join("model.h")).unwrap();
                let mut a = quantize(d);
                a.extend(args(&["--c-source", &s(&d.join("model.c"))]));
                a
            },
            expect: &["model.h", "is a folder", "regular files"],
        },
        Case {
            name: "--c-source names the header it would write",
            prepare: |d| {
                let mut a = quantize(d);
                a.extend(args(&["--c-source", &s(&d.join("model.h"))]));
                a
            },
            expect: &["model.h", "names the same file as the output"],
        },
        Case {
            name: "-o and --rust-module name the same file",
            prepare: |d| {
                let mut a = quantize(d);
                a.extend(args(&[
                    "--rust-module",
                    &s(&d.join("calib").join("..").join("out.midge")),
                ]));
                a
            },
            expect: &["out.midge", "names the same file as the output"],
        },
        Case {
            name: "-o is the description itself",
            prepare: |d| {
                args(&[
                    "quantize",
                    &s(&d.join("model.toml")),
                    "-o",
                    &s(&d.join("./model.toml")),
                ])
            },
            expect: &["model.toml", "is the input", "choose another output path"],
        },
        Case {
            name: "-o is the weights file",
            prepare: |d| args(&["quantize", &s(&d.join("model.toml")), "-o", &s(&weights(d))]),
            expect: &["weights.safetensors", "is the input"],
        },
        Case {
            name: "-o is a device node",
            prepare: |d| {
                let p = d.join("device");
                special_file(&p);
                args(&["quantize", &s(&d.join("model.toml")), "-o", &s(&p)])
            },
            expect: &[
                "device",
                "midge writes only new files or replaces regular files",
            ],
        },
        Case {
            name: "-o is a symbolic link to a device",
            prepare: |d| {
                let p = d.join("null-link");
                std::os::unix::fs::symlink("/dev/null", &p).unwrap();
                args(&["quantize", &s(&d.join("model.toml")), "-o", &s(&p)])
            },
            expect: &["null-link", "a symbolic link"],
        },
        Case {
            name: "assess -o is the description",
            prepare: |d| {
                args(&[
                    "assess",
                    &s(&d.join("model.toml")),
                    "-o",
                    &s(&d.join("model.toml")),
                ])
            },
            expect: &["model.toml", "is the input"],
        },
        Case {
            name: "-o names a folder's parent, not a file",
            prepare: |d| {
                args(&[
                    "quantize",
                    &s(&d.join("model.toml")),
                    "-o",
                    &s(&d.join("calib").join("..")),
                ])
            },
            expect: &["calib/..", "names no file"],
        },
        // Class 7: one line whatever the names hold.
        Case {
            name: "carriage return in a flag value",
            prepare: |d| {
                let mut a = quantize(d);
                a.extend(args(&["--precision", "int4\rfp16"]));
                a
            },
            expect: &["--precision", "int4\\rfp16"],
        },
        Case {
            name: "newline in a layer name",
            prepare: |d| {
                edit_description(d, "name = \"stem\"", "name = \"st\\nem\\u001b[2J\"");
                edit_description(d, "kernel = 3\npadding = 1\n", "kernel = 0\npadding = 1\n");
                quantize(d)
            },
            expect: &["layer 1 (st\\nem\\u{1b}[2J)", "`kernel` must be at least 1"],
        },
        Case {
            name: "newline in a missing file's name",
            prepare: |d| {
                args(&[
                    "quantize",
                    &s(&d.join("a\nb.toml")),
                    "-o",
                    &s(&d.join("out.midge")),
                ])
            },
            expect: &["a\\nb.toml", "cannot read"],
        },
        Case {
            name: "newline and escape codes in a duplicate layer name",
            prepare: |d| {
                edit_description(d, "name = \"block\"", "name = \"x\\ny\\u001b[31m\"");
                edit_description(d, "name = \"pool\"", "name = \"x\\ny\\u001b[31m\"");
                quantize(d)
            },
            expect: &["x\\ny\\u{1b}[31m", "already used"],
        },
        // The extension test is not case-sensitive: MODEL.TOML is a description.
        Case {
            name: "budget of a description named in upper case",
            prepare: |d| {
                edit_description(d, "op = \"depthwise\"", "op = \"conv3d\"");
                let up = d.join("UPPER.TOML");
                fs::rename(d.join("model.toml"), &up).unwrap();
                args(&[
                    "budget",
                    &s(&up),
                    "--target",
                    "m4-80",
                    "--no-emulate",
                    "--no-runtime-size",
                ])
            },
            expect: &["UPPER.TOML", "unknown op", "conv3d"],
        },
    ]
}

/// Run midge with `argv`; (status, stdout, stderr).
fn midge(argv: &[String]) -> (Option<i32>, String, String) {
    let o = run_bounded(argv);
    (
        o.status.code(),
        String::from_utf8_lossy(&o.stdout).into_owned(),
        String::from_utf8_lossy(&o.stderr).into_owned(),
    )
}

/// Class 7 and 8 on success: a model name and a label holding a newline,
/// Rust code and a terminal escape are shown escaped by `show` and land
/// only inside string literals of the generated Rust module.
#[test]
fn hostile_names_are_escaped_in_show_and_in_generated_source() {
    let d = scratch("catalogue-hostile-names");
    write_model(&d, "", 7);
    edit_description(
        &d,
        "name = \"tiny-residual\"",
        "name = \"evil\\npub fn injected() {}\\n//\\u001b[2J\"",
    );
    edit_description(&d, "\"bar\"", "\"b\\nar\"");
    // The label is a class folder name too.
    fs::rename(d.join("val").join("bar"), d.join("val").join("b\nar")).unwrap();
    let out = d.join("out.midge");
    let module = d.join("model.rs");
    let mut a = quantize(&d);
    a.extend(args(&["--rust-module", &s(&module)]));
    let (code, stdout, stderr) = midge(&a);
    assert_eq!(code, Some(0), "{stderr}");
    assert!(!stdout.contains('\u{1b}'), "{stdout}");
    let text = fs::read_to_string(&module).unwrap();
    for line in text.lines() {
        assert!(
            line.starts_with("//")
                || line.starts_with("pub ")
                || line.is_empty()
                // The op-set expression's continuation lines: no user strings.
                || (line.starts_with("    .") && !line.contains('"')),
            "line outside the module's shape: {line:?}"
        );
        assert!(!line.starts_with("pub fn"), "{line:?}");
    }
    assert!(
        text.contains(r#""evil\npub fn injected() {}\n//\u{1b}[2J""#),
        "{text}"
    );
    assert!(text.contains(r#""b\nar""#), "{text}");
    let (code, stdout, _) = midge(&show(&out));
    assert_eq!(code, Some(0));
    assert!(!stdout.contains('\u{1b}'), "{stdout}");
    let first = stdout.lines().next().unwrap();
    assert!(
        first.contains(r"evil\npub fn injected() {}\n//\u{1b}[2J"),
        "{first}"
    );
    assert!(stdout.contains(r"b\nar"), "{stdout}");
    assert!(!stdout.lines().any(|l| l.starts_with("pub fn")), "{stdout}");
    fs::remove_dir_all(&d).unwrap();
}

#[test]
fn numeric_bad_inputs_exit_2_with_one_line_and_leave_files_alone() {
    run_cases("numeric-catalogue", &numeric_catalogue());
}
