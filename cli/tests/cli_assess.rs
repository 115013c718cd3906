//! The README's main-job command on the bundled bottle-cap demo: `midge
//! assess` writes the model, reports the accuracy drop and the budget, and
//! its JSON agrees with a model file that parses and runs in midge-runtime.

use std::path::PathBuf;
use std::process::Command;

use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;

#[test]
fn assess_runs_the_demo_job() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("..");
    let desc = root.join("models/caps/plain.toml");
    let dir = std::env::temp_dir().join(format!("midge-assess-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let out = dir.join("plain.midge");
    // --no-emulate keeps this test independent of QEMU; the emulated path
    // is covered by midge-tests' emulated_* tests.
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .args([
            "assess",
            desc.to_str().unwrap(),
            "--json",
            "--no-emulate",
            "-o",
        ])
        .arg(&out)
        .output()
        .expect("run midge");
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(
        matches!(o.status.code(), Some(0) | Some(4)),
        "status {:?}: {stderr}",
        o.status
    );
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("JSON on stdout");
    let report = &v["report"];
    for key in ["float_top1", "quantized_top1", "drop_pp", "agreement"] {
        assert!(report[key].is_number(), "report.{key} missing");
    }
    assert!(report["layers"].as_array().is_some_and(|l| !l.is_empty()));
    let budget = &v["budget"];
    assert!(budget["flash_bytes"].is_u64() && budget["ram_bytes"].is_u64());
    assert_eq!(
        o.status.code() == Some(0),
        budget["fits"].as_bool().unwrap()
    );

    // The written file is a valid model whose size the report states.
    let bytes = AlignedBytes::from_slice(&std::fs::read(&out).unwrap());
    let model = Model::parse(&bytes).expect("written model parses");
    assert_eq!(
        report["model_bytes"].as_u64().unwrap() as usize,
        bytes.len()
    );
    assert_eq!(model.label_count(), 4);
    std::fs::remove_dir_all(&dir).ok();
}
