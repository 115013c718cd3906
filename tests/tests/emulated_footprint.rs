//! The runtime's measured code size: our ELF section reader against GNU
//! binutils' `readelf -S` on the real firmware ELFs, the runtime's share
//! (footprint − baseline) present on both Cortex-M builds, and the budget's
//! per-model firmware: smaller than the all-ops build, naming the model's
//! own op set. Skips with a printed reason when a thumb target or readelf is
//! missing (a thumb target: fails instead under `MIDGE_REQUIRE_EMULATOR=1`).

use std::collections::BTreeSet;
use std::path::Path;
use std::process::Command;

use midge_bench::budget::{evaluate, model_bytes_for, BudgetOptions, DEFAULT_SEED};
use midge_bench::firmware;
use midge_bench::footprint::{elf_sizes, runtime_cost, ElfSizes};
use midge_bench::target::Target;
use midge_runtime::OpSet;

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

/// Whether `triple` can be built here; prints why not (a skip), or fails
/// under `MIDGE_REQUIRE_EMULATOR=1`.
fn installed(triple: &str) -> bool {
    match firmware::rust_target_installed(triple) {
        Ok(()) => true,
        Err(e) => {
            firmware::may_skip(&e.to_string()).unwrap();
            println!("skipped: {e}");
            false
        }
    }
}

fn check(triple: &str) {
    if !installed(triple) {
        return;
    }
    let build = firmware::build(triple, OpSet::ALL).unwrap();
    for elf in [&build.footprint, &build.baseline, &build.harness] {
        let ours = elf_sizes(&std::fs::read(elf).unwrap(), "elf").unwrap();
        match readelf_sizes(elf) {
            Some(theirs) => assert_eq!(ours, theirs, "{}", elf.display()),
            None => println!("readelf not available: section sums not cross-checked"),
        }
    }
    let rc = runtime_cost(triple, OpSet::ALL).unwrap();
    assert_eq!(rc.op_set.len(), 20);
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

/// `midge budget` of the int8 bottle-cap model: the runtime items measure a
/// firmware that links the model's op set, whose code is smaller than the
/// all-ops build's, and the op list the bill names is exactly the set of
/// (op, precision) pairs of the model's per-layer table.
fn per_model_bill(target: &str) {
    let t = Target::resolve(target).unwrap();
    if !installed(&t.rust_target) {
        return;
    }
    let desc = Path::new(env!("CARGO_MANIFEST_DIR")).join("../models/caps/plain.toml");
    let bytes = model_bytes_for(&desc, DEFAULT_SEED).unwrap();
    let opts = BudgetOptions {
        emulate: false,
        ..BudgetOptions::default()
    };
    let ev = evaluate(&bytes, &t, &opts).unwrap();
    let from_layers: BTreeSet<String> = ev
        .footprint
        .layers
        .iter()
        .map(|r| format!("{}/{}", r.op, r.elem))
        .collect();
    let billed: BTreeSet<String> = ev.budget.op_set.iter().cloned().collect();
    assert_eq!(billed, from_layers);
    assert_eq!(billed.len(), ev.budget.op_set.len(), "no pair twice");
    let item = |name: &str| {
        ev.budget
            .flash
            .iter()
            .find(|i| i.name == name)
            .and_then(|i| i.bytes)
            .unwrap_or_else(|| panic!("{name} not measured: {:?}", ev.budget.flash))
    };
    let (text, rodata) = (
        item("runtime code (.text)"),
        item("runtime read-only data (.rodata)"),
    );
    let all = runtime_cost(&t.rust_target, OpSet::ALL).unwrap();
    println!(
        "{}: caps-plain .text {text} B, .rodata {rodata} B; all ops .text {} B, .rodata {} B",
        t.rust_target, all.sizes.text, all.sizes.rodata
    );
    assert!(text < all.sizes.text, "{text} vs {:?}", all.sizes);
    assert!(rodata <= all.sizes.rodata, "{rodata} vs {:?}", all.sizes);
    let text_out = ev.budget.render_text();
    assert!(
        text_out.contains(&ev.budget.op_set.join(", ")),
        "{text_out}"
    );
}

#[test]
fn per_model_bill_on_thumbv7em() {
    per_model_bill("m4-80");
}

#[test]
fn per_model_bill_on_thumbv6m() {
    per_model_bill("m0plus-48");
}
