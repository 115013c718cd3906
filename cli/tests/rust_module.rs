//! `midge quantize --rust-module` output compiles in a crate of its own
//! against midge-runtime: the firmware-style program parses the model with
//! the module's op set, gives the host's output bytes, and refuses a model
//! file whose ops are outside that set with the op named.

#[path = "../../convert/tests/quant_support/mod.rs"]
mod quant_support;

use std::path::{Path, PathBuf};
use std::process::Command;

use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;
use quant_support::*;

const MAIN: &str = r#"mod model;

use midge_runtime::embed::{Aligned, AlignedBytes};

fn main() {
    let m = model::Model::parse_with_ops(model::MODEL).expect("the module's own model");
    let mut ws = Aligned { bytes: [0u8; model::WORKSPACE_LEN] };
    let input: Vec<u8> = (0..model::INPUT_LEN).map(|i| (i * 7) as u8).collect();
    let out = m.run(&input, &mut ws.bytes).expect("run");
    println!("output {out:?}");
    let other = std::env::args().nth(1).expect("a second model file");
    let bytes = AlignedBytes::from_slice(&std::fs::read(other).expect("read"));
    match model::Model::parse_with_ops(&bytes) {
        Ok(_) => println!("other parsed"),
        Err(e) => println!("other refused: {e}"),
    }
}
"#;

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

#[test]
fn generated_module_builds_and_links_its_op_set() {
    let dir = scratch("rust-module");
    let desc = write_model(&dir, "", 4);
    let krate = dir.join("fw");
    std::fs::create_dir_all(krate.join("src")).unwrap();
    let int8 = krate.join("tiny.midge");
    let fp16 = dir.join("tiny-fp16.midge");
    let midge = |args: &[&Path]| {
        let o = Command::new(env!("CARGO_BIN_EXE_midge"))
            .arg("quantize")
            .args(args)
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    };
    let module = krate.join("src").join("model.rs");
    midge(&[
        &desc,
        Path::new("-o"),
        &int8,
        Path::new("--rust-module"),
        &module,
    ]);
    midge(&[
        &desc,
        Path::new("-o"),
        &fp16,
        Path::new("--precision"),
        Path::new("fp16"),
    ]);
    let text = std::fs::read_to_string(&module).unwrap();
    assert!(text.contains("pub const OPS: u32"), "{text}");

    std::fs::write(krate.join("src").join("main.rs"), MAIN).unwrap();
    let runtime = root().join("runtime").canonicalize().unwrap();
    std::fs::write(
        krate.join("Cargo.toml"),
        format!(
            "[package]\nname = \"module-check\"\nversion = \"0.0.0\"\nedition = \"2021\"\npublish = false\n\
             [workspace]\n[dependencies]\nmidge-runtime = {{ path = {:?}, features = [\"std\"] }}\n",
            runtime.display().to_string()
        ),
    )
    .unwrap();
    // The workspace's lock file pins the same dependency versions (no network needed).
    std::fs::copy(root().join("Cargo.lock"), krate.join("Cargo.lock")).unwrap();
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let o = Command::new(cargo)
        .current_dir(&krate)
        .args(["run", "--quiet", "--"])
        .arg(&fp16)
        .env(
            "CARGO_TARGET_DIR",
            root().join("target").join("module-check"),
        )
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));

    // The host, with every op linked, on the same input.
    let bytes = AlignedBytes::from_slice(&std::fs::read(&int8).unwrap());
    let m = Model::parse(&bytes).unwrap();
    let input: Vec<u8> = (0..m.input().byte_len()).map(|i| (i * 7) as u8).collect();
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    let want = m.run(&input, &mut ws).unwrap();
    assert!(
        stdout.contains(&format!("output {want:?}")),
        "{stdout}\nwant {want:?}"
    );
    // The fp16 file starts with pixels → fp16, which the int8 set lacks.
    assert!(
        stdout.contains("other refused: layer 0: Pixels with F16 output is not in the op set"),
        "{stdout}"
    );
    std::fs::remove_dir_all(&dir).unwrap();
}
