//! `midge budget` end to end: the exit status is 0 when the bills are
//! exactly the target's limits and 4 (`does not fit`) one byte over; the
//! bills are read from the command's own `--json` on a roomy profile.

use std::path::{Path, PathBuf};
use std::process::Command;

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn profile(ram: u64, flash: u64) -> String {
    format!(
        "name = \"edge\"\ncore = \"cortex-m4\"\nrust_target = \"thumbv7em-none-eabihf\"\n\
         clock_hz = 1000000\ncycles_per_instruction = 1.0\nram_bytes = {ram}\nflash_bytes = {flash}\n\
         reserved_ram_bytes = 100\nreserved_flash_bytes = 200\n[emulator]\nmachine = \"mps2-an386\"\n"
    )
}

fn budget(desc: &Path, target: &Path) -> (i32, String) {
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .arg("budget")
        .arg(desc)
        .arg("--target")
        .arg(target)
        .args(["--json", "--no-emulate", "--no-runtime-size", "--seed", "3"])
        .output()
        .expect("run midge");
    (
        o.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&o.stdout).into_owned(),
    )
}

#[test]
fn exit_status_flips_one_byte_over_the_limit() {
    let desc = root().join("models/reference/kws-dscnn.toml");
    let dir = std::env::temp_dir().join(format!("midge-cli-budget-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let roomy = dir.join("roomy.toml");
    std::fs::write(&roomy, profile(1 << 30, 1 << 30)).unwrap();
    let (code, json) = budget(&desc, &roomy);
    assert_eq!(code, 0, "{json}");
    let v: serde_json::Value = serde_json::from_str(&json).unwrap();
    let (ram, flash) = (
        v["ram_bytes"].as_u64().unwrap(),
        v["flash_bytes"].as_u64().unwrap(),
    );
    let exact = dir.join("exact.toml");
    std::fs::write(&exact, profile(ram + 100, flash + 200)).unwrap();
    assert_eq!(budget(&desc, &exact).0, 0);
    let over = dir.join("over.toml");
    std::fs::write(&over, profile(ram + 99, flash + 200)).unwrap();
    assert_eq!(budget(&desc, &over).0, 4, "exit 4: does not fit");
    let _ = std::fs::remove_dir_all(&dir);
}
