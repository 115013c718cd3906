//! Puts memory.x where the linker finds it and links with cortex-m-rt's
//! link.x, so the build works from any working directory; writes the op
//! set the binaries link (`MIDGE_OPS`, a `midge_runtime::OpSet` bitmask in
//! hex or decimal; every op when unset) to `$OUT_DIR/ops.rs`.
use std::{env, fs, path::PathBuf};

include!("ops_env.rs");

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("OUT_DIR"));
    fs::copy("memory.x", out.join("memory.x")).expect("copy memory.x");
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rustc-link-arg-bins=-Tlink.x");
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=build.rs");
    println!("cargo:rerun-if-changed=ops_env.rs");
    write_ops_rs(&out);
}
