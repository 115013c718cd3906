//! The demo models run on emulated Cortex-M cores (QEMU, bench/firmware)
//! give the host's output bytes bit for bit, for int8 and fp16 models and
//! for thumbv7em (M4, M7) and thumbv6m (M0+) builds, each firmware linking
//! the model's own op set. Skips with a printed reason only when
//! qemu-system-arm or a Rust thumb target is missing, and fails instead
//! under `MIDGE_REQUIRE_EMULATOR=1`.

use std::path::{Path, PathBuf};
use std::time::Duration;

use midge_bench::emulated::{emulated_latency, unavailable};
use midge_bench::firmware;
use midge_bench::target::Target;
use midge_convert::graph::Precision;
use midge_convert::images;
use midge_convert::quantize::{image_spec, quantize_description, QuantizeOptions};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::{Model, OpSet};

fn models() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../models")
}

/// (model bytes, the first `n` calibration images as inputs)
fn demo(desc: &str, precision: Option<Precision>, n: usize) -> (Vec<u8>, Vec<Vec<u8>>) {
    let path = models().join(desc);
    let opts = QuantizeOptions {
        precision,
        ..QuantizeOptions::default()
    };
    let conv = quantize_description(&path, &opts).unwrap();
    let spec = image_spec(&conv.desc);
    let dir = conv.desc.calibration.clone().unwrap();
    let inputs = images::all_images(&dir).unwrap()[..n]
        .iter()
        .map(|f| images::load_image(f, &spec).unwrap())
        .collect();
    (conv.quantized.bytes, inputs)
}

fn check(target: &str, desc: &str, precision: Option<Precision>) {
    check_inputs(target, desc, precision, 3);
}

fn check_inputs(target: &str, desc: &str, precision: Option<Precision>, n: usize) {
    let t = Target::resolve(target).unwrap();
    if let Some(why) = unavailable(&t) {
        firmware::may_skip(&why).unwrap();
        println!("skipped: emulated run on {target} not possible here: {why}");
        return;
    }
    let (bytes, inputs) = demo(desc, precision, n);
    let r = emulated_latency(&bytes, &inputs, &t, Duration::from_secs(300)).unwrap();
    // SysTick at the MPS2 boards' 25 MHz core clock under -icount shift=0
    // (1 ns of virtual time per instruction): 40 instructions per tick, so
    // 40 000 NOPs read as 1 000 ticks (QEMU mps2 documentation, common practice).
    assert!(r.calibration_ok, "calibration {:?}", r.calibration);
    assert_eq!(r.outputs.len(), inputs.len());
    assert!(
        r.matches_host,
        "{target} {desc}: emulated outputs differ from the host's"
    );
    // Every layer with MACs executes at least one instruction per MAC.
    for l in &r.layers {
        assert!(
            l.instructions >= l.macs,
            "layer {} {}: {l:?}",
            l.index,
            l.op
        );
    }
    assert!(r.stack_runtime > 0 && r.stack_runtime <= r.stack_total);
}

#[test]
fn digits_int8_on_m4() {
    check("m4-80", "digits/model.toml", None);
}

/// Host = device on the Cortex-M4 for all 200 calibration images of the
/// digits model (open data, models/digits/README.md), in int8 and in fp16.
#[test]
fn digits_200_inputs_int8_and_fp16_on_m4() {
    for precision in [Some(Precision::Int8), Some(Precision::Fp16)] {
        check_inputs("m4-80", "digits/model.toml", precision, 200);
        println!("m4-80 digits {precision:?}: 200 inputs, outputs equal the host's");
    }
}

#[test]
fn caps_separable_int8_on_m0plus() {
    check("m0plus-48", "caps/separable.toml", None);
}

#[test]
fn caps_plain_fp16_on_m7() {
    check("m7-400", "caps/plain.toml", Some(Precision::Fp16));
}

/// A model whose body no longer matches its CRC is refused by `parse` on
/// the device too, and the harness's error line reaches the host as an error.
#[test]
fn corrupted_model_is_reported_by_the_harness() {
    let t = Target::resolve("m4-80").unwrap();
    if let Some(why) = unavailable(&t) {
        firmware::may_skip(&why).unwrap();
        println!("skipped: emulated run on m4-80 not possible here: {why}");
        return;
    }
    let (mut bytes, inputs) = demo("digits/model.toml", None, 1);
    let last = bytes.len() - 1;
    bytes[last] ^= 0x5a;
    let err = emulated_latency(&bytes, &inputs, &t, Duration::from_secs(120));
    // The host refuses it first (same runtime, same check).
    assert!(err.is_err());
    let build = firmware::build(&t.rust_target, OpSet::ALL).unwrap();
    let job = firmware::job_block(&bytes, &[&inputs[0]], 4096).unwrap();
    let e = firmware::run(
        &t.emulator.machine,
        &build.harness,
        &job,
        Duration::from_secs(120),
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("harness: model:"), "{e}");
}

/// A harness built for one model's op set (caps-plain: int8 conv2d, pools,
/// dense) refuses, on the device, a model needing an op outside it (the
/// separable model's depthwise and add): parse names the first such layer
/// and its op, and the harness reports it as an error line, not a crash.
#[test]
fn model_outside_the_firmware_op_set_is_refused_on_the_device() {
    let t = Target::resolve("m4-80").unwrap();
    if let Some(why) = unavailable(&t) {
        firmware::may_skip(&why).unwrap();
        println!("skipped: emulated run on m4-80 not possible here: {why}");
        return;
    }
    let (plain, _) = demo("caps/plain.toml", None, 1);
    let (separable, inputs) = demo("caps/separable.toml", None, 1);
    let ops = Model::parse(&AlignedBytes::from_slice(&plain))
        .unwrap()
        .op_set();
    let aligned = AlignedBytes::from_slice(&separable);
    let sep = Model::parse(&aligned).unwrap();
    let (first, op, elem) = (0..sep.layer_count())
        .find_map(|i| {
            let l = sep.layer(i).unwrap();
            let elem = sep.tensor(l.header.output as usize).unwrap().elem;
            (!ops.has(l.header.op, elem)).then_some((i, l.header.op, elem))
        })
        .expect("separable uses an op caps-plain does not");
    let build = firmware::build(&t.rust_target, ops).unwrap();
    let job = firmware::job_block(&separable, &[&inputs[0]], sep.workspace_len()).unwrap();
    let e = firmware::run(
        &t.emulator.machine,
        &build.harness,
        &job,
        Duration::from_secs(120),
    )
    .unwrap_err()
    .to_string();
    let want =
        format!("harness: model: layer {first}: {op:?} with {elem:?} output is not in the op set");
    assert!(e.contains(&want), "{e}\nwant {want}");
}
