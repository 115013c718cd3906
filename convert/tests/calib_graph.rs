//! Calibration over a real graph: min/max ranges equal the extremes of the
//! float reference's tensors over the calibration images, fused ReLU/ReLU6
//! outputs stay within [0, ∞) / [0, 6], and percentile ranges sit inside them.

mod quant_support;

use midge_convert::calibrate::RangeMethod;
use midge_convert::float_ref;
use midge_convert::images;
use midge_convert::quantize::{calibrate_graph, image_spec, load_with_precision};
use midge_runtime::repr::Activation;
use quant_support::*;

#[test]
fn ranges_follow_the_float_reference() {
    let dir = scratch("calib-graph");
    let desc_path = write_model(&dir, "", 12);
    let (desc, graph, _) = load_with_precision(&desc_path, None).unwrap();
    let calib = dir.join("calib");
    let (mm, n) = calibrate_graph(&graph, &desc, &calib, RangeMethod::MinMax, false).unwrap();
    assert_eq!(n, 12);
    assert_eq!(mm.len(), graph.nodes.len() + 1);
    // Direct extremes over all images.
    let spec = image_spec(&desc);
    let mut lo = vec![f32::INFINITY; mm.len()];
    let mut hi = vec![f32::NEG_INFINITY; mm.len()];
    for f in images::all_images(&calib).unwrap() {
        let px = images::load_image(&f, &spec).unwrap();
        for (t, v) in float_ref::run(&graph, &px).iter().enumerate() {
            for &x in v {
                lo[t] = lo[t].min(x);
                hi[t] = hi[t].max(x);
            }
        }
    }
    for t in 0..mm.len() {
        assert_eq!((mm[t].min, mm[t].max), (lo[t], hi[t]), "tensor {t}");
    }
    for (k, node) in graph.nodes.iter().enumerate() {
        match node.act {
            Activation::Relu => assert!(mm[k + 1].min >= 0.0),
            Activation::Relu6 => assert!(mm[k + 1].min >= 0.0 && mm[k + 1].max <= 6.0),
            Activation::None => {}
        }
    }
    let (pc, _) =
        calibrate_graph(&graph, &desc, &calib, RangeMethod::Percentile(99.0), false).unwrap();
    for t in 0..mm.len() {
        assert!(
            pc[t].min >= mm[t].min && pc[t].max <= mm[t].max,
            "tensor {t}"
        );
    }
    std::fs::remove_dir_all(&dir).unwrap();
}
