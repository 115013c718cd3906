//! Open-data check of the main job: the bundled handwritten-digits CNN,
//! converted through the same library path as `midge compare`, evaluated on
//! the fixed test split of the UCI "Optical Recognition of Handwritten
//! Digits" data set (Alpaydin & Kaynak, UCI Machine Learning Repository,
//! CC BY 4.0; the copy shipped in the scikit-learn wheel, see
//! models/digits/README.md).

use std::path::PathBuf;

use midge_convert::compare::{compare, CompareOptions};
use midge_convert::quantize::QuantizeOptions;

fn digits() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../models/digits/model.toml")
}

#[test]
fn digits_int8_and_fp16_drops_stay_within_bounds() {
    let opts = CompareOptions {
        quantize: QuantizeOptions::default(),
        also_fp16: true,
        images: None,
    };
    let report = compare(&digits(), &opts).expect("compare digits");
    eprintln!("{}", report.to_text());

    // The test split holds 400 images (models/digits/README.md).
    assert_eq!(report.images, 400);
    // Float model quality bound of the bundled weights: ≥ 95 % top-1.
    assert!(
        report.float_top1 >= 95.0,
        "float top-1 {}",
        report.float_top1
    );
    // Acceptance bounds of this project for int8: drop ≤ 1.0 percentage
    // point, agreement with the float reference ≥ 98 %.
    assert!(report.drop_pp <= 1.0, "int8 drop {} pp", report.drop_pp);
    assert!(
        report.agreement >= 98.0,
        "int8 agreement {} %",
        report.agreement
    );
    // fp16: drop ≤ 0.2 percentage points.
    let fp16 = report.fp16.as_ref().expect("fp16 row");
    assert!(fp16.drop_pp <= 0.2, "fp16 drop {} pp", fp16.drop_pp);
    assert!(
        fp16.agreement >= 99.0,
        "fp16 agreement {} %",
        fp16.agreement
    );

    // Internal consistency of the report: the drop is the difference of the
    // two accuracies, and the confusion matrix counts every image once.
    assert!((report.drop_pp - (report.float_top1 - report.quantized_top1)).abs() < 1e-9);
    let counted: usize = report.confusion.iter().flatten().sum();
    assert_eq!(counted, report.images);
    // Every layer reports a finite SQNR (or null when exact) and int8 error
    // enters gradually: no layer below 10 dB on this well-conditioned model.
    assert!(!report.layers.is_empty());
    for layer in &report.layers {
        if let Some(db) = layer.sqnr_db {
            assert!(db.is_finite() && db > 10.0, "{}: {db} dB", layer.name);
        }
    }
}
