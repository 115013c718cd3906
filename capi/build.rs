//! Writes the op set the library links (`MIDGE_OPS`, a `midge_runtime::OpSet`
//! bitmask in hex or decimal, as bench/firmware reads it; every op when
//! unset) to `$OUT_DIR/ops.rs`.
use std::{env, path::PathBuf};

include!("../bench/firmware/ops_env.rs");

fn main() {
    println!("cargo:rerun-if-changed=build.rs");
    println!("cargo:rerun-if-changed=../bench/firmware/ops_env.rs");
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("OUT_DIR"));
    write_ops_rs(&out);
}
