//! Determinism: converting the same description twice gives byte-identical
//! model files (bundled digits model, every calibration method), and running
//! a model gives identical output bytes run to run, whatever the workspace held.

use std::path::{Path, PathBuf};

use midge_convert::calibrate::RangeMethod;
use midge_convert::images;
use midge_convert::quantize::{image_spec, quantize_description, QuantizeOptions};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;
use midge_tests::{fixed_input, seeds};

fn digits() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../models/digits/model.toml")
}

fn convert(method: RangeMethod) -> Vec<u8> {
    let opts = QuantizeOptions {
        method,
        ..QuantizeOptions::default()
    };
    quantize_description(&digits(), &opts)
        .unwrap_or_else(|e| panic!("{e}"))
        .quantized
        .bytes
}

#[test]
fn converting_twice_gives_identical_files() {
    for method in [
        RangeMethod::Percentile(99.99),
        RangeMethod::MinMax,
        RangeMethod::Mse,
    ] {
        let a = convert(method);
        let b = convert(method);
        assert!(!a.is_empty());
        assert!(a == b, "{method:?}: two conversions differ");
        // And the file is a valid model.
        Model::parse(&AlignedBytes::from_slice(&a)).unwrap();
    }
}

/// Runs `bytes` on `input` with a workspace pre-filled with `fill`, three
/// times, and returns the output; every run must give the same bytes.
fn run_thrice(bytes: &[u8], input: &[u8]) -> Vec<u8> {
    let buf = AlignedBytes::from_slice(bytes);
    let m = Model::parse(&buf).unwrap();
    let mut first: Option<Vec<u8>> = None;
    for fill in [0x00u8, 0xFF, 0x5A] {
        let mut ws = AlignedBytes::from_slice(&vec![fill; m.workspace_len()]);
        let out = m.run(input, &mut ws).unwrap().to_vec();
        match &first {
            None => first = Some(out),
            Some(f) => assert_eq!(&out, f, "workspace fill {fill:#04x} changed the output"),
        }
    }
    first.unwrap()
}

#[test]
fn outputs_are_identical_run_to_run() {
    // Seed models (int8, fp16, mixed, residual, pools) on a fixed input.
    for (name, bytes) in seeds::all_bytes() {
        let buf = AlignedBytes::from_slice(&bytes);
        let len = Model::parse(&buf).unwrap().input().byte_len();
        let out = run_thrice(&bytes, &fixed_input(len));
        assert!(!out.is_empty(), "{name}");
    }
    // The converted digits model on its own calibration images: identical
    // outputs run to run, and from two separately converted files.
    let a = convert(RangeMethod::Percentile(99.99));
    let b = convert(RangeMethod::Percentile(99.99));
    let desc = midge_convert::description::Description::load(&digits()).unwrap();
    let spec = image_spec(&desc);
    let dir = digits().parent().unwrap().join("calib");
    let files = images::all_images(&dir).unwrap();
    assert!(!files.is_empty());
    let mut distinct = std::collections::BTreeSet::new();
    for f in files.iter().take(16) {
        let px = images::load_image(f, &spec).unwrap();
        let out_a = run_thrice(&a, &px);
        assert_eq!(out_a, run_thrice(&b, &px), "{}", f.display());
        distinct.insert(out_a);
    }
    // Not a constant model: different images give different outputs.
    assert!(distinct.len() > 1);
}
