//! Puts memory.x where the linker finds it and links with cortex-m-rt's
//! link.x, so the build works from any working directory; writes the op
//! set the binaries link (`MIDGE_OPS`, a `midge_runtime::OpSet` bitmask in
//! hex or decimal; every op when unset) to `$OUT_DIR/ops.rs`.
use std::{env, fs, path::PathBuf};

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("OUT_DIR"));
    fs::copy("memory.x", out.join("memory.x")).expect("copy memory.x");
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rustc-link-arg-bins=-Tlink.x");
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=build.rs");
    println!("cargo:rerun-if-env-changed=MIDGE_OPS");
    let ops = match env::var("MIDGE_OPS") {
        Err(_) => "midge_runtime::ALL_OPS".to_string(),
        Ok(v) if v.trim().is_empty() => "midge_runtime::ALL_OPS".to_string(),
        Ok(v) => {
            let v = v.trim();
            let bits = match v.strip_prefix("0x") {
                Some(hex) => u32::from_str_radix(hex, 16),
                None => v.parse(),
            };
            match bits {
                Ok(b) => format!("{b:#x}"),
                Err(_) => panic!(
                    "MIDGE_OPS: expected an op-set bitmask (hex 0x… or decimal), found {v:?}"
                ),
            }
        }
    };
    let text = format!(
        "/// The op set this build links (from `MIDGE_OPS` at build time).\n\
         pub const OPS: u32 = {ops};\n"
    );
    fs::write(out.join("ops.rs"), text).expect("write ops.rs");
}
