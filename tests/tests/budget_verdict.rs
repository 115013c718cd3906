//! Budget verdicts at the limit (one byte under and over flips them), the
//! CLI's exit status 4, and the memory plan's lower bound on a residual
//! model (ResNet-8) against a hand count.

use std::path::{Path, PathBuf};

use midge_bench::budget::{evaluate, model_bytes_for, BudgetOptions};
use midge_bench::footprint::model_footprint;
use midge_bench::target::Target;
use midge_convert::description::Description;
use midge_convert::synth;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn offline() -> BudgetOptions {
    BudgetOptions {
        measure_runtime: false,
        emulate: false,
        ..BudgetOptions::default()
    }
}

fn profile(ram: u64, flash: u64) -> String {
    format!(
        "name = \"edge\"\ncore = \"cortex-m4\"\nrust_target = \"thumbv7em-none-eabihf\"\n\
         clock_hz = 1000000\ncycles_per_instruction = 1.0\nram_bytes = {ram}\nflash_bytes = {flash}\n\
         reserved_ram_bytes = 100\nreserved_flash_bytes = 200\n[emulator]\nmachine = \"mps2-an386\"\n"
    )
}

#[test]
fn verdict_flips_one_byte_over_the_limit() {
    let desc = root().join("models/reference/kws-dscnn.toml");
    let bytes = model_bytes_for(&desc, 3).unwrap();
    let roomy = Target::from_toml_str(&profile(1 << 30, 1 << 30), "roomy").unwrap();
    let b = evaluate(&bytes, &roomy, &offline()).unwrap().budget;
    // Offline, the bills are the model file and the workspace + input.
    assert_eq!(b.flash_bytes, bytes.len() as u64);
    let (flash, ram) = (b.flash_bytes, b.ram_bytes);
    // Limits are total − reserved (100 B RAM, 200 B flash kept by the application).
    let exact = Target::from_toml_str(&profile(ram + 100, flash + 200), "exact").unwrap();
    let e = evaluate(&bytes, &exact, &offline()).unwrap().budget;
    assert!(e.fits);
    assert_eq!((e.ram_margin, e.flash_margin), (0, 0));
    let ram_short = Target::from_toml_str(&profile(ram + 99, flash + 200), "ram").unwrap();
    let r = evaluate(&bytes, &ram_short, &offline()).unwrap().budget;
    assert!(!r.fits);
    assert_eq!(r.ram_margin, -1);
    let flash_short = Target::from_toml_str(&profile(ram + 100, flash + 199), "flash").unwrap();
    let f = evaluate(&bytes, &flash_short, &offline()).unwrap().budget;
    assert!(!f.fits);
    assert_eq!(f.flash_margin, -1);
}

// ResNet-8 (models/reference/resnet8.toml), int8. Tensor bytes by hand:
// input normalization 32·32·3 = 3 072; stem, s1_a, s1_b, s1 add 32·32·16 =
// 16 384 each; stack 2 tensors 16·16·32 = 8 192; stack 3 8·8·64 = 4 096.
// At the step of s1_b (and of the s1 add) three 16 384-byte tensors are
// live: the stem output (kept for the identity shortcut), s1_a's output (or
// s1_b's) and the step's own output → 3·16 384 = 49 152. Every step of
// stacks 2 and 3 holds less (at most 16 384 + 2·8 192 = 32 768), and the
// stem step holds 3 072 + 16 384. So the lower bound is 49 152 B.
#[test]
fn residual_plan_lower_bound_by_hand() {
    let desc = Description::load(&root().join("models/reference/resnet8.toml")).unwrap();
    let q = synth::synth_quantize(&desc, 11).unwrap();
    let aligned = AlignedBytes::from_slice(&q.bytes);
    let model = Model::parse(&aligned).unwrap();
    let fp = model_footprint(&model);
    assert_eq!(fp.lower_bound, 49_152);
    assert_eq!(q.plan.lower_bound, 49_152, "the planner's own bound");
    assert!(fp.workspace_len >= fp.lower_bound);
    let peak = &fp.layers[fp.peak_layer.unwrap()];
    assert_eq!(peak.output_shape, [32, 32, 16]);
}
