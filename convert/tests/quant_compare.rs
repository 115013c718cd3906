//! The accuracy-drop report on the tiny residual model: its counts agree
//! with an independent run of the float reference and midge-runtime, fp16
//! beats int8 on every layer's SQNR, and bad folders are named.

mod quant_support;

use midge_convert::compare::{compare, CompareOptions};
use midge_convert::float_ref;
use midge_convert::graph::Precision;
use midge_convert::images;
use midge_convert::quantize::{
    dequantize_tensor, image_spec, quantize_description, QuantizeOptions,
};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;
use quant_support::*;

#[test]
fn report_matches_an_independent_run() {
    let dir = scratch("qc-report");
    let desc = write_model(&dir, "", 8);
    let opts = CompareOptions {
        also_fp16: true,
        ..Default::default()
    };
    let r = compare(&desc, &opts).unwrap();
    assert_eq!(r.images, 12);
    let total: usize = r.confusion.iter().flatten().sum();
    assert_eq!(total, 12);
    assert_eq!(r.float_confusion.iter().flatten().sum::<usize>(), 12);
    assert!((r.drop_pp - (r.float_top1 - r.quantized_top1)).abs() < 1e-9);
    for (c, row) in r.per_class.iter().enumerate() {
        assert_eq!(row.images, 4);
        assert!((row.quantized_top1 - 25.0 * r.confusion[c][c] as f64).abs() < 1e-9);
    }
    // Independent run: same conversion, runtime and float reference called
    // directly, argmax of the dequantized output.
    let conv = quantize_description(&desc, &QuantizeOptions::default()).unwrap();
    let bytes = AlignedBytes::from_slice(&conv.quantized.bytes);
    let model = Model::parse(&bytes).unwrap();
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    let spec = image_spec(&conv.desc);
    let files = images::labelled_folder(&dir.join("val"), &conv.graph.labels).unwrap();
    let (mut q_ok, mut agree, mut max_err) = (0, 0, 0.0f64);
    let am = |v: &[f32]| (0..v.len()).fold(0, |b, i| if v[i] > v[b] { i } else { b });
    for (f, truth) in &files {
        let px = images::load_image(f, &spec).unwrap();
        let fl = float_ref::logits(&conv.graph, &px);
        let q = dequantize_tensor(&model.output(), model.run(&px, &mut ws).unwrap());
        q_ok += (am(&q) == *truth) as usize;
        agree += (am(&q) == am(&fl)) as usize;
        for (a, b) in fl.iter().zip(&q) {
            max_err = max_err.max((a - b).abs() as f64);
        }
    }
    assert!((r.quantized_top1 - 100.0 * q_ok as f64 / 12.0).abs() < 1e-9);
    assert!((r.agreement - 100.0 * agree as f64 / 12.0).abs() < 1e-9);
    assert!((r.max_abs_logit_error - max_err).abs() < 1e-6);
    // One row per runtime layer, named after the description.
    let names: Vec<&str> = r.layers.iter().map(|l| l.name.as_str()).collect();
    assert_eq!(
        names,
        ["pixels", "stem", "block", "sum", "pool", "dw", "gap", "head"]
    );
    // An 8-bit uniform quantizer keeps roughly 6 dB per bit (common
    // practice); 30 dB is a loose floor for every layer here.
    for l in &r.layers {
        assert!(l.sqnr_db.unwrap() > 30.0, "{l:?}");
    }
    let h = r.fp16.as_ref().unwrap();
    assert!(h.max_abs_logit_error <= r.max_abs_logit_error);
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn fp16_layers_have_higher_sqnr_than_int8() {
    let dir = scratch("qc-sqnr");
    let desc = write_model(&dir, "", 9);
    let int8 = compare(&desc, &CompareOptions::default()).unwrap();
    let opts = CompareOptions {
        quantize: QuantizeOptions {
            precision: Some(Precision::Fp16),
            ..Default::default()
        },
        ..Default::default()
    };
    let fp16 = compare(&desc, &opts).unwrap();
    assert_eq!(fp16.precision, "fp16");
    assert_eq!(int8.precision, "int8");
    for (a, b) in int8.layers.iter().zip(&fp16.layers) {
        // binary16 keeps 11 significant bits against int8's 8 (IEEE 754-2008).
        let b_db = b.sqnr_db.unwrap_or(f64::INFINITY);
        assert!(b_db > a.sqnr_db.unwrap() + 6.0, "{a:?} vs {b:?}");
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn folder_problems_are_named() {
    let dir = scratch("qc-bad");
    let desc = write_model(&dir, "", 10);
    std::fs::rename(dir.join("val").join("bar"), dir.join("val").join("stick")).unwrap();
    let e = compare(&desc, &CompareOptions::default()).unwrap_err();
    assert!(
        e.problem().contains("bar") && e.problem().contains("stick"),
        "{e}"
    );
    let opts = CompareOptions {
        images: Some(dir.join("nowhere")),
        ..Default::default()
    };
    let e = compare(&desc, &opts).unwrap_err();
    assert!(e.place().contains("nowhere"), "{e}");
    std::fs::remove_dir_all(&dir).unwrap();
}
