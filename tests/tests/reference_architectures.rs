//! The MLPerf Tiny reference architectures (models/reference/*.toml) built
//! with synthetic weights: parameter and MAC counts against counts worked by
//! hand, and the int8 flash size against the benchmark's published sizes.

use std::path::{Path, PathBuf};

use midge_bench::footprint::{model_footprint, ModelFootprint};
use midge_convert::description::Description;
use midge_convert::synth;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;

fn reference(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../models/reference")
        .join(format!("{name}.toml"))
}

/// (description-level tensor elements, the int8 model's footprint)
fn build(name: &str) -> (usize, ModelFootprint) {
    let desc = Description::load(&reference(name)).unwrap();
    let described: usize = desc
        .expected_tensors()
        .unwrap()
        .iter()
        .map(|(_, s)| s.iter().product::<usize>())
        .sum();
    let q = synth::synth_quantize(&desc, 7).unwrap();
    let bytes = AlignedBytes::from_slice(&q.bytes);
    let model = Model::parse(&bytes).unwrap();
    (described, model_footprint(&model))
}

// ResNet-8, 32×32×3 (MLPerf Tiny image classification; Banbury et al.,
// NeurIPS Datasets & Benchmarks 2021). Parameters by hand (conv k·k·in·out
// + out bias; BatchNorm 4 per channel):
//   stem 3·3·3·16+16 = 448                   BN 16·4 = 64
//   s1_a, s1_b 2·(3·3·16·16+16) = 4 640       BN 2·64 = 128
//   s2_a 3·3·16·32+32 = 4 640, s2_b 3·3·32·32+32 = 9 248, s2_short 16·32+32 = 544   BN 2·128 = 256
//   s3_a 3·3·32·64+64 = 18 496, s3_b 3·3·64·64+64 = 36 928, s3_short 32·64+64 = 2 112  BN 2·256 = 512
//   dense 64·10+10 = 650
//   weights+biases 77 706, BatchNorm 960, total 78 666 — the Keras summary's
//   "Total params: 78,666" of the reference model (from memory).
// After folding BatchNorm into the convolutions the model holds 77 706.
// MACs by hand (out_h·out_w·out_c·k·k·in_c):
//   stem 32·32·16·27 = 442 368; s1_a, s1_b 2·32·32·16·144 = 4 718 592;
//   s2_a 16·16·32·144 = 1 179 648; s2_b 16·16·32·288 = 2 359 296; s2_short 16·16·32·16 = 131 072;
//   s3_a 8·8·64·288 = 1 179 648; s3_b 8·8·64·576 = 2 359 296; s3_short 8·8·64·32 = 131 072;
//   dense 640 → 12 501 632 (about 12.5 M, the published figure, from memory).
#[test]
fn resnet8_counts_and_size() {
    let (described, fp) = build("resnet8");
    assert_eq!(described, 78_666);
    assert_eq!(fp.params, 77_706);
    assert_eq!(fp.macs, 12_501_632);
    // Published int8 model size about 96 KB (from published summaries of the
    // benchmark, recalled from memory).
    assert!(fp.sections.total < 96_000, "{} bytes", fp.sections.total);
    // One byte per weight at least: the file cannot be smaller than that.
    assert!(fp.sections.weights >= 77_706 - 346);
}

// DS-CNN keyword spotting, 49×10×1 (MLPerf Tiny KWS reference). By hand:
//   stem 10·4·1·64+64 = 2 624                            BN 256
//   4 × (depthwise 3·3·64+64 = 640, pointwise 64·64+64 = 4 160) = 19 200   BN 4·512 = 2 048
//   dense 64·12+12 = 780
//   weights+biases 22 604; with BatchNorm 24 908.
// MACs: stem output 25×5×64 (same padding, stride 2: ceil(49/2), ceil(10/2)):
//   25·5·64·40 = 320 000; each block 25·5·64·9 = 72 000 + 25·5·64·64 = 512 000;
//   4 blocks 2 336 000; dense 768 → 2 656 768 (about 2.7 M, from memory).
#[test]
fn kws_dscnn_counts_and_size() {
    let (described, fp) = build("kws-dscnn");
    assert_eq!(described, 24_908);
    assert_eq!(fp.params, 22_604);
    assert_eq!(fp.macs, 2_656_768);
    // Published int8 model size about 53 KB (recalled from memory).
    assert!(fp.sections.total < 53_000, "{} bytes", fp.sections.total);
}

// MobileNetV1 ×0.25, 96×96×3, 2 classes (MLPerf Tiny visual wake words).
// Channels 32·0.25 = 8 … 1024·0.25 = 256. Convolutions have no bias.
//   stem 3·3·3·8 = 216
//   depthwise 9·(8+16+32+32+64+64+128·6+256) = 9·1 240 = 11 160
//   pointwise 8·16+16·32+32·32+32·64+64·64+64·128+5·128·128+128·256+256·256 = 196 224
//   dense 256·2+2 = 514                           → 208 114
//   BatchNorm 4·(8 + 1 240 + 1 488) = 10 944      → 219 058
// Cross-check: with the 1000-class 1×1 head (256·1000+1000 = 257 000) instead
// of the dense 2 this is 475 544, Keras's "0.47 M" for MobileNet 0.25 (from memory).
// Folded: every convolution gains a bias per output channel (8+1 240+1 488
// = 2 736) → 208 114 + 2 736 = 210 850.
// MACs: stem 48·48·8·27 = 497 664; blocks (depthwise + pointwise)
//   48²: 165 888 + 294 912; s2→24²: 82 944 + 294 912; 24²: 165 888 + 589 824;
//   s2→12²: 41 472 + 294 912; 12²: 82 944 + 589 824; s2→6²: 20 736 + 294 912;
//   5 × 6²: 5·(41 472 + 589 824) = 3 156 480; s2→3²: 10 368 + 294 912;
//   3²: 20 736 + 589 824; dense 512 → 7 489 664 (about 7.5 M, from memory).
#[test]
fn vww_mobilenet_counts_and_size() {
    let (described, fp) = build("vww-mobilenet-025");
    assert_eq!(described, 219_058);
    assert_eq!(fp.params, 210_850);
    assert_eq!(fp.macs, 7_489_664);
    // Published int8 model size about 325 KB (recalled from memory).
    assert!(fp.sections.total < 325_000, "{} bytes", fp.sections.total);
}
