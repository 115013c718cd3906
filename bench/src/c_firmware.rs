//! The C example firmware as the host sees it: building the midge-c static library for a
//! thumb target and op set and linking capi/examples/mps2 against it with arm-none-eabi-gcc
//! (cached per process); it prints the same line protocol as the Rust harness (`firmware`).

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::{Mutex, OnceLock};

use midge_runtime::OpSet;

use crate::firmware::{ops_key, rust_target_installed};
use crate::{Error, Result};

const INSTALL_GCC: &str =
    "apt-get update && apt-get install -y gcc-arm-none-eabi libnewlib-arm-none-eabi make";

/// The example's folder (main.c, startup, linker script, Makefile), unpacked
/// with the rest of the packed sources (`sources::tree`).
pub fn example_dir() -> Result<PathBuf> {
    Ok(crate::sources::tree()?
        .join("capi")
        .join("examples")
        .join("mps2"))
}

/// The `-mcpu` the example is built with for a Rust thumb target.
fn cpu_of(triple: &str) -> Result<&'static str> {
    match triple {
        "thumbv7em-none-eabihf" => Ok("cortex-m4"),
        "thumbv6m-none-eabi" => Ok("cortex-m0plus"),
        _ => Err(Error::new(
            triple,
            "the C example builds for thumbv7em-none-eabihf and thumbv6m-none-eabi only",
        )),
    }
}

/// Why the C example cannot be built here, if it cannot: cargo's thumb
/// target, arm-none-eabi-gcc (with newlib) or make missing.
pub fn unavailable(triple: &str) -> Option<String> {
    if let Err(e) = rust_target_installed(triple) {
        return Some(e.to_string());
    }
    for tool in ["arm-none-eabi-gcc", "make"] {
        let runs = Command::new(tool)
            .arg("--version")
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .status()
            .is_ok_and(|s| s.success());
        if !runs {
            return Some(format!(
                "{tool}: not installed; install with `{INSTALL_GCC}`"
            ));
        }
    }
    None
}

/// The C example's ELF for `triple`, its library linking the op set `ops`.
pub fn build(triple: &str, ops: OpSet) -> Result<PathBuf> {
    type Builds = HashMap<(String, u32), Result<PathBuf>>;
    static BUILDS: OnceLock<Mutex<Builds>> = OnceLock::new();
    let map = BUILDS.get_or_init(|| Mutex::new(HashMap::new()));
    let mut map = map.lock().unwrap_or_else(|p| p.into_inner());
    map.entry((triple.to_string(), ops.bits()))
        .or_insert_with(|| build_now(triple, ops, None))
        .clone()
}

/// The C example built with the model in flash: `model_c` is a `model.c`
/// written by `midge quantize --c-source` (its `model.h` beside it); the ELF
/// is written into `model_c`'s folder. Not cached.
pub fn build_embedded(triple: &str, ops: OpSet, model_c: &Path) -> Result<PathBuf> {
    build_now(triple, ops, Some(model_c))
}

fn run_step(cmd: &mut Command, what: &str) -> Result<()> {
    let out = cmd
        .stdin(Stdio::null())
        .output()
        .map_err(|e| Error::new(what, format!("cannot run: {e}")))?;
    if out.status.success() {
        return Ok(());
    }
    let err = String::from_utf8_lossy(&out.stderr);
    let first = err
        .lines()
        .find(|l| l.contains("error"))
        .or_else(|| err.lines().next())
        .unwrap_or("(no output)");
    Err(Error::new(what, format!("failed: {first}")))
}

fn build_now(triple: &str, ops: OpSet, model_c: Option<&Path>) -> Result<PathBuf> {
    if let Some(why) = unavailable(triple) {
        return Err(Error::new("C example", why));
    }
    let cpu = cpu_of(triple)?;
    let root = crate::sources::tree()?;
    let example = example_dir()?;
    // Own target folder per op set: the library's build script reads MIDGE_OPS.
    let target = crate::sources::cargo_target()?
        .join("c-firmware")
        .join(ops_key(ops));
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    run_step(
        Command::new(cargo)
            .current_dir(&root)
            .args(["build", "--quiet", "-p", "midge-c", "--profile", "c-lib"])
            .args(["--target", triple])
            .env("CARGO_TARGET_DIR", &target)
            .env("MIDGE_OPS", ops_key(ops))
            .env_remove("RUSTFLAGS")
            .env_remove("CARGO_ENCODED_RUSTFLAGS")
            .env_remove("CARGO_BUILD_TARGET"),
        &format!("cargo build -p midge-c --target {triple}"),
    )?;
    let lib = target.join(triple).join("c-lib").join("libmidge_c.a");
    let out = match model_c.and_then(Path::parent) {
        Some(dir) => dir.to_path_buf(),
        None => crate::sources::builds()?
            .join("c-example")
            .join(triple)
            .join(ops_key(ops)),
    };
    let mut make = Command::new("make");
    make.arg("-C")
        .arg(&example)
        .arg("--quiet")
        .arg(format!("CPU={cpu}"))
        .arg(format!("LIB={}", lib.display()))
        .arg(format!("OUT={}", out.display()));
    if let Some(m) = model_c {
        make.arg(format!("MODEL_C={}", m.display()));
    }
    run_step(&mut make, &format!("make -C {}", example.display()))?;
    Ok(out.join("midge-c-example.elf"))
}
