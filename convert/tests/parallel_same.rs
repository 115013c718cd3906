//! Images evaluated on many threads give what one thread gives, bit for
//! bit: calibration ranges, the model file and the whole accuracy-drop
//! report of the bundled caps models, on explicit pools of 1, 2 and 3
//! threads (independent of `RAYON_NUM_THREADS` and of the machine's cores).

use std::path::PathBuf;

use midge_convert::calibrate::RangeMethod;
use midge_convert::compare::{compare, CompareOptions};
use midge_convert::parallel::with_threads;
use midge_convert::quantize::{quantize_description, QuantizeOptions};

fn caps(file: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../models/caps")
        .join(file)
}

fn options(method: RangeMethod) -> QuantizeOptions {
    QuantizeOptions {
        method,
        progress: false,
        ..QuantizeOptions::default()
    }
}

#[test]
fn calibration_is_the_same_on_any_number_of_threads() {
    for method in [RangeMethod::Percentile(99.9), RangeMethod::Mse] {
        let run = |threads| {
            with_threads(Some(threads), || {
                quantize_description(&caps("separable.toml"), &options(method)).unwrap()
            })
            .unwrap()
        };
        let one = run(1);
        let bits = |c: &midge_convert::quantize::Conversion| -> Vec<(u32, u32)> {
            c.ranges
                .iter()
                .map(|r| (r.min.to_bits(), r.max.to_bits()))
                .collect()
        };
        for threads in [2, 3] {
            let many = run(threads);
            assert_eq!(bits(&one), bits(&many), "{method:?}, {threads} threads");
            assert_eq!(one.quantized.bytes, many.quantized.bytes, "{method:?}");
        }
    }
}

#[test]
fn compare_report_is_the_same_on_any_number_of_threads() {
    for file in ["plain.toml", "separable.toml"] {
        let opts = CompareOptions {
            quantize: options(RangeMethod::Percentile(99.99)),
            also_fp16: true,
            images: None,
        };
        let run =
            |threads| with_threads(Some(threads), || compare(&caps(file), &opts).unwrap()).unwrap();
        let one = run(1);
        // The JSON text tells every f64 apart (−0.0 from 0.0 too).
        let one_json = serde_json::to_string(&one).unwrap();
        assert!(one.images > 0 && one.layers.iter().any(|l| l.sqnr_db.is_some()));
        for threads in [2, 3] {
            let many = run(threads);
            assert_eq!(one, many, "{file}, {threads} threads");
            assert_eq!(one_json, serde_json::to_string(&many).unwrap(), "{file}");
        }
    }
}
