//! The runtime's measured code size: our ELF section reader against GNU
//! binutils' `readelf -S` on the real firmware ELFs, and the runtime's share
//! (footprint − baseline) present on both Cortex-M builds. Skips with a
//! printed reason when a thumb target or readelf is missing.

use std::process::Command;

use midge_convert::firmware;
use midge_convert::footprint::{elf_sizes, runtime_cost, ElfSizes};

/// Allocated section bytes by kind as `readelf -S -W` lists them (GNU
/// binutils; flags A alloc, X execute, W write; type NOBITS).
fn readelf_sizes(path: &std::path::Path) -> Option<ElfSizes> {
    let out = Command::new("readelf")
        .args(["-S", "-W"])
        .arg(path)
        .output()
        .ok()?;
    let text = String::from_utf8_lossy(&out.stdout);
    let mut s = ElfSizes::default();
    for line in text.lines() {
        let Some(rest) = line.trim_start().strip_prefix('[') else {
            continue;
        };
        let Some((_, cols)) = rest.split_once(']') else {
            continue;
        };
        let f: Vec<&str> = cols.split_whitespace().collect();
        // Name Type Addr Off Size ES [Flg] Lk Inf Al
        if f.len() < 9 || f[0] == "Name" {
            continue;
        }
        let flags = if f.len() == 10 { f[6] } else { "" };
        if !flags.contains('A') {
            continue;
        }
        let size = u64::from_str_radix(f[4], 16).ok()?;
        if f[1] == "NOBITS" {
            s.bss += size;
        } else if flags.contains('X') {
            s.text += size;
        } else if flags.contains('W') {
            s.data += size;
        } else {
            s.rodata += size;
        }
    }
    Some(s)
}

fn check(triple: &str) {
    if let Err(e) = firmware::rust_target_installed(triple) {
        println!("skipped: {e}");
        return;
    }
    let build = firmware::build(triple).unwrap();
    for elf in [&build.footprint, &build.baseline, &build.harness] {
        let ours = elf_sizes(&std::fs::read(elf).unwrap(), "elf").unwrap();
        match readelf_sizes(elf) {
            Some(theirs) => assert_eq!(ours, theirs, "{}", elf.display()),
            None => println!("readelf not available: section sums not cross-checked"),
        }
    }
    let rc = runtime_cost(triple).unwrap();
    assert!(rc.sizes.text > 0, "{rc:?}");
    assert_eq!(rc.with_runtime.text - rc.baseline.text, rc.sizes.text);
}

#[test]
fn runtime_size_on_thumbv7em() {
    check("thumbv7em-none-eabihf");
}

#[test]
fn runtime_size_on_thumbv6m() {
    check("thumbv6m-none-eabi");
}
