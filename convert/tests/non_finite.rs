//! Non-finite numbers in the float reference are errors naming the layer
//! and the image, in evaluation as in calibration (the CLI catalogue covers
//! calibration through the binary).

mod quant_support;

use midge_convert::compare::evaluate;
use midge_convert::graph::FloatOp;
use midge_convert::quantize::{quantize_description, QuantizeOptions};
use quant_support::{scratch, write_model};

#[test]
fn evaluation_names_the_layer_and_the_validation_image() {
    let dir = scratch("non-finite-eval");
    let desc = write_model(&dir, "", 3);
    let mut conv = quantize_description(&desc, &QuantizeOptions::default()).unwrap();
    // Calibrated and quantized with sane weights; then the float graph gets
    // head weights whose sums over the (non-negative) pooled inputs pass
    // f32::MAX ≈ 3.4e38 (IEEE 754 binary32; common practice).
    let head = conv
        .graph
        .nodes
        .iter_mut()
        .find(|n| n.name == "head")
        .unwrap();
    let FloatOp::Dense { weight, .. } = &mut head.op else {
        panic!("head is dense")
    };
    weight.iter_mut().for_each(|w| *w = 3.0e38);
    let e = evaluate(&conv, &dir.join("val"), false, false).unwrap_err();
    assert!(
        e.place().contains("val") && e.place().ends_with(".png"),
        "{e}"
    );
    assert!(
        e.problem().contains("layer head") && e.problem().contains("inf"),
        "{e}"
    );
    assert_eq!(e.to_string().lines().count(), 1);
}
