//! Derives the `midge_dsp` cfg from the compilation target: set for Cortex-M
//! cores with the DSP extension (thumbv7em, and thumbv8m.main when built with
//! the `dsp` target feature), which selects the kernel in src/kernels/dsp.rs.
use std::env;

fn main() {
    println!("cargo:rustc-check-cfg=cfg(midge_dsp)");
    println!("cargo:rerun-if-changed=build.rs");
    let target = env::var("TARGET").unwrap_or_default();
    let features = env::var("CARGO_CFG_TARGET_FEATURE").unwrap_or_default();
    let has_dsp_feature = features.split(',').any(|f| f == "dsp");
    let dsp =
        target.starts_with("thumbv7em") || (target.starts_with("thumbv8m.main") && has_dsp_feature);
    if dsp {
        println!("cargo:rustc-cfg=midge_dsp");
    }
}
