//! The int8 conv2d tile kernel of each emulated core against the portable
//! tile kernel and the reference loop nest: bench/firmware's `kernel_match`
//! runs 1 200 random layer cases, and 1 100 random 3×3 depthwise cases
//! through the row driver (`kernels::depthwise`), under QEMU and must
//! report no mismatch.
//! On the Cortex-M4 build the DSP kernel is the one under test; on the
//! Cortex-M0+ build (no DSP) the portable kernel meets the reference.
//! Skips with a printed reason only when qemu-system-arm or a Rust thumb
//! target is missing, and fails instead under `MIDGE_REQUIRE_EMULATOR=1`.

use std::process::{Command, Stdio};

use midge_bench::emulated::unavailable;
use midge_bench::target::Target;
use midge_runtime::OpSet;

fn kernel_match(target: &str, want_dsp: bool) {
    let t = Target::resolve(target).unwrap();
    if let Some(why) = unavailable(&t) {
        midge_bench::firmware::may_skip(&why).unwrap();
        println!("skipped: emulated run on {target} not possible here: {why}");
        return;
    }
    let build = midge_bench::firmware::build(&t.rust_target, OpSet::ALL).unwrap();
    let bin = build.kernel_match;
    let out = Command::new("qemu-system-arm")
        .args(["-M", &t.emulator.machine, "-nographic", "-monitor", "none"])
        .args([
            "-serial",
            "none",
            "-semihosting-config",
            "enable=on,target=native",
        ])
        .args(["-icount", "shift=0", "-kernel"])
        .arg(&bin)
        .stdin(Stdio::null())
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    let last = text.lines().last().unwrap_or("");
    let want = format!(
        "kernel-match dsp={} cases=1200 mismatches=0",
        want_dsp as u8
    );
    assert_eq!(last, want, "{target}: {text}");
    let dw = format!(
        "depthwise3x3-match dsp={} cases=1100 mismatches=0",
        want_dsp as u8
    );
    assert!(text.lines().any(|l| l == dw), "{target}: {text}");
    assert!(out.status.success(), "{target}: {text}");
}

#[test]
fn dsp_kernel_equals_portable_on_m4() {
    kernel_match("m4-80", true);
}

#[test]
fn portable_kernel_equals_reference_on_m0plus() {
    kernel_match("m0plus-48", false);
}
