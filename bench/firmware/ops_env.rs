// The one reader of `MIDGE_OPS` for build scripts (bench/firmware and
// capi `include!` it): writes `$OUT_DIR/ops.rs` holding `pub const OPS`,
// the `midge_runtime::OpSet` bitmask given in hex (0x…) or decimal, or
// every op when the variable is unset or empty.

fn write_ops_rs(out: &std::path::Path) {
    println!("cargo:rerun-if-env-changed=MIDGE_OPS");
    let ops = match std::env::var("MIDGE_OPS").map(|v| v.trim().to_string()) {
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
    let text = format!(
        "/// The op set this build links (from `MIDGE_OPS` at build time).\n\
         pub const OPS: u32 = {ops};\n"
    );
    std::fs::write(out.join("ops.rs"), text).expect("write ops.rs");
}
