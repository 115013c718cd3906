//! Writes the op set the library links (`MIDGE_OPS`, a `midge_runtime::OpSet`
//! bitmask in hex or decimal, as bench/firmware reads it; every op when
//! unset) to `$OUT_DIR/ops.rs`.
use std::{env, fs, path::PathBuf};

fn main() {
    println!("cargo:rerun-if-changed=build.rs");
    println!("cargo:rerun-if-env-changed=MIDGE_OPS");
    let ops = match env::var("MIDGE_OPS").map(|v| v.trim().to_string()) {
        Ok(v) if !v.is_empty() => {
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
        _ => "midge_runtime::ALL_OPS".to_string(),
    };
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("OUT_DIR"));
    let text = format!(
        "/// The op set this build links (from `MIDGE_OPS` at build time).\n\
         pub const OPS: u32 = {ops};\n"
    );
    fs::write(out.join("ops.rs"), text).expect("write ops.rs");
}
