//! The C example firmware (capi/examples/mps2, linking the midge-c static library) run
//! under QEMU on the Cortex-M4 MPS2 board gives the host runtime's output bytes bit for bit
//! on 200 inputs of the bottle-cap model in int8 and in fp16; the library also links for a
//! Cortex-M0+. Skips with a printed reason only when QEMU, a thumb target or
//! arm-none-eabi-gcc is missing, and fails instead under `MIDGE_REQUIRE_EMULATOR=1`.

use std::path::{Path, PathBuf};
use std::time::Duration;

use midge_bench::{c_firmware, firmware};
use midge_convert::graph::Precision;
use midge_convert::images;
use midge_convert::quantize::{image_spec, quantize_description, QuantizeOptions};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::{exec, Model, OpSet};

fn models() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../models")
}

/// (model bytes, `n` inputs: the calibration images, then the validation
/// images, cycled when there are fewer than `n`)
fn caps(precision: Precision, n: usize) -> (Vec<u8>, Vec<Vec<u8>>) {
    let opts = QuantizeOptions {
        precision: Some(precision),
        ..QuantizeOptions::default()
    };
    let conv = quantize_description(&models().join("caps/plain.toml"), &opts).unwrap();
    let spec = image_spec(&conv.desc);
    let mut files = images::all_images(conv.desc.calibration.as_ref().unwrap()).unwrap();
    if let Some(val) = &conv.desc.validation {
        files.extend(images::all_images(val).unwrap());
    }
    let inputs = files
        .iter()
        .cycle()
        .take(n)
        .map(|f| images::load_image(f, &spec).unwrap())
        .collect();
    (conv.quantized.bytes, inputs)
}

/// Why the emulated C run cannot happen here, if it cannot.
fn unavailable(triple: &str) -> Option<String> {
    if let Err(e) = firmware::qemu_version() {
        return Some(e.to_string());
    }
    c_firmware::unavailable(triple)
}

#[test]
fn c_example_matches_the_host_on_200_caps_inputs_int8_and_fp16_on_m4() {
    let triple = "thumbv7em-none-eabihf";
    if let Some(why) = unavailable(triple) {
        firmware::may_skip(&why).unwrap();
        println!("skipped: C example on mps2-an386 not possible here: {why}");
        return;
    }
    let elf = c_firmware::build(triple, OpSet::ALL).unwrap();
    for precision in [Precision::Int8, Precision::Fp16] {
        let (bytes, inputs) = caps(precision, 200);
        let aligned = AlignedBytes::from_slice(&bytes);
        let model = Model::parse(&aligned).unwrap();
        let refs: Vec<&[u8]> = inputs.iter().map(|v| v.as_slice()).collect();
        let job = firmware::job_block(&aligned, &refs, model.workspace_len()).unwrap();
        let run = firmware::run("mps2-an386", &elf, &job, Duration::from_secs(600)).unwrap();
        // 40 000 NOPs read as 1 000 SysTick ticks at 40 instructions per tick under
        // -icount shift=0 (QEMU mps2 documentation, common practice), as for the Rust harness.
        assert!(run.calibration_ok(), "calibration {:?}", run.calibration);
        assert_eq!(run.workspace_len, model.workspace_len());
        assert_eq!(run.outputs.len(), inputs.len());
        let mut ws = AlignedBytes::zeroed(model.workspace_len());
        let mut classes = vec![0usize; model.output().shape.elems()];
        for (k, input) in inputs.iter().enumerate() {
            let host = model.run(input, &mut ws).unwrap();
            assert_eq!(
                run.outputs[k], host,
                "{precision:?} input {k}: C firmware ≠ host"
            );
            classes[exec::top1(&model.output(), host).unwrap().0] += 1;
        }
        // The per-layer hook timed every layer of every run; layers with MACs
        // execute at least one instruction per MAC.
        assert_eq!(run.layer_ticks.len(), inputs.len());
        for (i, n) in run.layer_instructions(0).iter().enumerate() {
            assert!(*n >= model.layer_macs(i), "layer {i}: {n} instructions");
        }
        println!(
            "mps2-an386 C example, caps-plain {precision:?}: {} inputs equal the host's bit for bit (classes {classes:?})",
            inputs.len()
        );
    }
}

/// A damaged model is refused by `midge_open` on the device, and the
/// example's error line names the status text.
#[test]
fn c_example_reports_a_damaged_model() {
    let triple = "thumbv7em-none-eabihf";
    if let Some(why) = unavailable(triple) {
        firmware::may_skip(&why).unwrap();
        println!("skipped: C example on mps2-an386 not possible here: {why}");
        return;
    }
    let elf = c_firmware::build(triple, OpSet::ALL).unwrap();
    let (mut bytes, inputs) = caps(Precision::Int8, 1);
    let last = bytes.len() - 1;
    bytes[last] ^= 0x5a;
    let job = firmware::job_block(&bytes, &[&inputs[0]], 4096).unwrap();
    let e = firmware::run("mps2-an386", &elf, &job, Duration::from_secs(120))
        .unwrap_err()
        .to_string();
    assert!(e.contains("harness: model: model CRC-32 mismatch"), "{e}");
}

/// The library built for a Cortex-M0+ (thumbv6m-none-eabi, no FPU) links
/// into the same C example with arm-none-eabi-gcc -mcpu=cortex-m0plus.
#[test]
fn c_example_links_for_m0plus() {
    let triple = "thumbv6m-none-eabi";
    if let Some(why) = c_firmware::unavailable(triple) {
        firmware::may_skip(&why).unwrap();
        println!("skipped: C example for {triple} not possible here: {why}");
        return;
    }
    let elf = c_firmware::build(triple, OpSet::ALL).unwrap();
    assert!(std::fs::metadata(&elf).unwrap().len() > 0);
}

/// The model in flash: `midge quantize --c-source model.c`'s pair compiled
/// into the C example (the model read from the 8-byte aligned const array,
/// not from the job block) gives the host's outputs on 20 caps inputs.
#[test]
fn c_example_with_the_model_from_c_source_matches_the_host() {
    let triple = "thumbv7em-none-eabihf";
    if let Some(why) = unavailable(triple) {
        firmware::may_skip(&why).unwrap();
        println!("skipped: C example on mps2-an386 not possible here: {why}");
        return;
    }
    let (bytes, inputs) = caps(Precision::Int8, 20);
    let aligned = AlignedBytes::from_slice(&bytes);
    let model = Model::parse(&aligned).unwrap();
    let dir = std::env::temp_dir().join(format!("midge-c-embedded-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let model_c = dir.join("model.c");
    let spec = midge_runtime::write::ModelSpec::from_model(&model);
    let (c, h) = midge_convert::c_source::c_sources(&spec, model.op_set(), &bytes, &model_c);
    std::fs::write(&model_c, c).unwrap();
    std::fs::write(dir.join("model.h"), h).unwrap();
    let elf = c_firmware::build_embedded(triple, model.op_set(), &model_c).unwrap();
    // The job block's own model is damaged: only the embedded one can give these outputs.
    let mut damaged = bytes.clone();
    let last = damaged.len() - 1;
    damaged[last] ^= 0x5a;
    let refs: Vec<&[u8]> = inputs.iter().map(|v| v.as_slice()).collect();
    let job = firmware::job_block(&damaged, &refs, model.workspace_len()).unwrap();
    let run = firmware::run("mps2-an386", &elf, &job, Duration::from_secs(300)).unwrap();
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    assert_eq!(run.outputs.len(), inputs.len());
    for (k, input) in inputs.iter().enumerate() {
        assert_eq!(
            run.outputs[k],
            model.run(input, &mut ws).unwrap(),
            "input {k}"
        );
    }
    let _ = std::fs::remove_dir_all(&dir);
}
