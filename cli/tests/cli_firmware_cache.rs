//! Firmware is built outside the checkout: `midge budget` with `MIDGE_CACHE`
//! set to a fresh folder builds the harness there from the sources the binary
//! carries and leaves `git status` of the checkout as it was; a missing
//! toolchain piece is one line naming it and how to get it, exit 2.

use std::path::{Path, PathBuf};
use std::process::Command;

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// `git status --porcelain --ignored` of the checkout, or `None` when this is
/// not a git checkout (a source archive) or git is not installed.
fn git_status() -> Option<String> {
    let o = Command::new("git")
        .current_dir(root())
        .args([
            "status",
            "--porcelain",
            "--ignored",
            "--untracked-files=all",
        ])
        .output()
        .ok()?;
    o.status
        .success()
        .then(|| String::from_utf8_lossy(&o.stdout).into_owned())
}

fn thumb_target_installed() -> bool {
    let o = Command::new("rustc")
        .args(["--print", "sysroot"])
        .output()
        .expect("rustc runs");
    Path::new(String::from_utf8_lossy(&o.stdout).trim())
        .join("lib/rustlib/thumbv7em-none-eabihf/lib")
        .is_dir()
}

#[test]
fn budget_builds_firmware_in_the_cache_not_the_checkout() {
    if !thumb_target_installed() {
        let why = "thumbv7em-none-eabihf not installed (rustup target add thumbv7em-none-eabihf)";
        assert!(
            std::env::var("MIDGE_REQUIRE_EMULATOR").as_deref() != Ok("1"),
            "MIDGE_REQUIRE_EMULATOR=1: {why}"
        );
        eprintln!("skipped: {why}");
        return;
    }
    let cache = std::env::temp_dir().join(format!("midge-cache-test-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&cache);
    let before = git_status();
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .current_dir(std::env::temp_dir())
        .env("MIDGE_CACHE", &cache)
        .arg("budget")
        .arg(root().join("models/caps/plain.toml"))
        .args(["--target", "m4-80", "--no-emulate", "--json"])
        .output()
        .expect("run midge");
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{stderr}");
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("budget JSON");
    let text = v.to_string();
    assert!(!text.contains("not measured: cargo"), "{text}");
    // The runtime's code was measured from a harness built in the cache:
    // `<cache>/build-<key>/ops/<triple>/<op set>/footprint` (sources.rs).
    let builds: Vec<PathBuf> = std::fs::read_dir(&cache)
        .expect("cache folder created")
        .flatten()
        .map(|e| e.path())
        .filter(|p| {
            p.file_name()
                .unwrap()
                .to_string_lossy()
                .starts_with("build-")
        })
        .collect();
    assert_eq!(builds.len(), 1, "one build folder: {builds:?}");
    let ops = builds[0].join("ops/thumbv7em-none-eabihf");
    let sets: Vec<PathBuf> = std::fs::read_dir(&ops)
        .expect("per-triple folder")
        .flatten()
        .map(|e| e.path())
        .collect();
    assert_eq!(sets.len(), 1, "one op set: {sets:?}");
    for elf in ["harness", "footprint", "baseline", "kernel_match"] {
        let bytes = std::fs::read(sets[0].join(elf)).expect(elf);
        // ELF magic (the ELF specification, System V ABI).
        assert_eq!(&bytes[..4], b"\x7fELF", "{elf}");
    }
    let src = std::fs::read_dir(&cache)
        .unwrap()
        .flatten()
        .find(|e| e.file_name().to_string_lossy().starts_with("src-"))
        .expect("unpacked sources");
    assert!(src
        .path()
        .join("bench/firmware/src/bin/harness.rs")
        .is_file());
    if let Some(before) = before {
        assert_eq!(
            git_status().as_deref(),
            Some(before.as_str()),
            "checkout changed"
        );
    }
    let _ = std::fs::remove_dir_all(&cache);
}

#[test]
fn a_missing_cargo_is_one_line_and_exit_2_when_required() {
    let cache = std::env::temp_dir().join(format!("midge-cache-nocargo-{}", std::process::id()));
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .env("MIDGE_CACHE", &cache)
        .env("CARGO", "/nonexistent/cargo")
        .env("MIDGE_REQUIRE_EMULATOR", "1")
        .arg("budget")
        .arg(root().join("models/caps/plain.toml"))
        .args(["--target", "m4-80", "--no-emulate"])
        .output()
        .expect("run midge");
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert_eq!(stderr.trim_end().lines().count(), 1, "{stderr}");
    assert!(stderr.contains("/nonexistent/cargo"), "{stderr}");
    assert!(stderr.contains("rustup"), "{stderr}");
    let _ = std::fs::remove_dir_all(&cache);
}
