//! `midge classify` on the bundled caps model: `--json` parses, its arg-max
//! is the text output's label, its logits and raw values are what
//! midge-runtime returns for the image, and a description (.toml) runs the
//! float reference with the same output (no raw values).

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use midge_convert::float_ref;
use midge_convert::images;
use midge_convert::quantize::{dequantize_tensor, image_spec, quantize_description};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;
use serde_json::Value;

fn caps() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../models/caps/plain.toml")
}

/// Two validation images of every class.
fn val_images() -> Vec<PathBuf> {
    let root = caps().with_file_name("val");
    let mut out = Vec::new();
    for label in ["sealed", "missing", "tilted", "torn"] {
        let mut files: Vec<PathBuf> = std::fs::read_dir(root.join(label))
            .unwrap()
            .map(|e| e.unwrap().path())
            .collect();
        files.sort();
        out.extend(files.into_iter().take(2));
    }
    out
}

fn midge(args: &[&Path]) -> Output {
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .args(args)
        .output()
        .expect("run midge");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    o
}

/// `classify` as text (the label of each line) and as JSON.
fn classify_both(model: &Path, imgs: &[PathBuf]) -> (Vec<String>, Value) {
    let mut args: Vec<&Path> = vec![Path::new("classify"), model];
    args.extend(imgs.iter().map(PathBuf::as_path));
    let text = String::from_utf8(midge(&args).stdout).unwrap();
    let labels: Vec<String> = text
        .lines()
        .map(|l| {
            let (_, rest) = l.rsplit_once(".png: ").expect(l);
            rest.split(' ').next().unwrap().to_string()
        })
        .collect();
    args.insert(1, Path::new("--json"));
    let json: Value = serde_json::from_slice(&midge(&args).stdout).expect("JSON parses");
    (labels, json)
}

fn floats(v: &Value) -> Vec<f32> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap() as f32)
        .collect()
}

/// Each image's arg-max of the JSON logits is its `index`, its `label` and
/// the text output's label; probabilities sum to 1.
fn check_consistent(json: &Value, text_labels: &[String], imgs: &[PathBuf]) {
    let labels = json["labels"].as_array().unwrap();
    let images = json["images"].as_array().unwrap();
    assert_eq!(images.len(), imgs.len());
    for ((r, text), img) in images.iter().zip(text_labels).zip(imgs) {
        assert_eq!(r["file"].as_str().unwrap(), img.display().to_string());
        let logits = floats(&r["logits"]);
        let best = midge_convert::compare::argmax(&logits).unwrap();
        assert_eq!(r["index"].as_u64().unwrap() as usize, best);
        assert_eq!(r["label"], labels[best]);
        assert_eq!(r["label"].as_str().unwrap(), text);
        let p: f64 = r["probabilities"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .sum();
        assert!((p - 1.0).abs() < 1e-9, "{p}");
    }
}

#[test]
fn json_of_a_model_file_is_the_runtime_output() {
    let dir = std::env::temp_dir().join(format!("midge-classify-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let conv = quantize_description(&caps(), &Default::default()).unwrap();
    let file = dir.join("plain.midge");
    std::fs::write(&file, &conv.quantized.bytes).unwrap();
    let imgs = val_images();
    let (text_labels, json) = classify_both(&file, &imgs);
    assert_eq!(json["source"], "runtime");
    check_consistent(&json, &text_labels, &imgs);
    // The same image run by midge-runtime here: the JSON logits are its
    // dequantized output and the raw values its int8 bytes.
    let bytes = AlignedBytes::from_slice(&conv.quantized.bytes);
    let model = Model::parse(&bytes).unwrap();
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    let spec = image_spec(&conv.desc);
    assert_eq!(json["output"]["type"], "int8");
    for (r, img) in json["images"].as_array().unwrap().iter().zip(&imgs) {
        let px = images::load_image(img, &spec).unwrap();
        let out = model.run(&px, &mut ws).unwrap();
        assert_eq!(
            floats(&r["logits"]),
            dequantize_tensor(&model.output(), out)
        );
        let raw: Vec<i64> = r["raw"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_i64().unwrap())
            .collect();
        assert_eq!(raw, out.iter().map(|&b| b as i8 as i64).collect::<Vec<_>>());
    }
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_description_runs_the_float_reference() {
    let imgs = val_images();
    let (text_labels, json) = classify_both(&caps(), &imgs);
    assert_eq!(json["source"], "float");
    check_consistent(&json, &text_labels, &imgs);
    let conv = midge_convert::graph::load_graph(&caps()).unwrap();
    let spec = image_spec(&conv.0);
    for (r, img) in json["images"].as_array().unwrap().iter().zip(&imgs) {
        assert!(
            r.get("raw").is_none(),
            "no raw values for the float reference"
        );
        let px = images::load_image(img, &spec).unwrap();
        assert_eq!(floats(&r["logits"]), float_ref::logits(&conv.1, &px));
    }
    assert!(json.get("output").is_none());
}

#[test]
fn a_missing_description_is_bad_input() {
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .args(["classify", "--json", "no-such-model.toml"])
        .arg(&val_images()[0])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(o.stdout.is_empty());
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("no-such-model.toml"), "{err}");
}
