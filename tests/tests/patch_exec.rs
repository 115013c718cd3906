//! Patch-by-patch execution (Lin et al., NeurIPS 2021, memory-efficient patch-based inference: run the first stage one output tile at a time,
//! recomputing the overlapping halo): the patched run gives the same output bytes as the
//! layer-by-layer run on every reference and bundled model, for every stage the model
//! allows and several tile grids; hostile plans are refused, never panic.

use std::path::{Path, PathBuf};

use midge_convert::description::Description;
use midge_convert::synth;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::patch::{PatchPlan, Patched};
use midge_runtime::{Model, Op};

fn desc(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../models")
        .join(rel)
}

fn model_bytes(rel: &str) -> AlignedBytes {
    let d = Description::load(&desc(rel)).unwrap();
    let q = synth::synth_quantize(&d, 11).unwrap();
    AlignedBytes::from_slice(&q.bytes)
}

/// Deterministic pseudo-random bytes (64-bit LCG, Knuth's MMIX constants).
fn noise(n: usize, mut seed: u64) -> Vec<u8> {
    (0..n)
        .map(|_| {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (seed >> 33) as u8
        })
        .collect()
}

/// The longest stage prefix the executor accepts: window and per-pixel layers in a chain.
fn chain_len(m: &Model) -> usize {
    let mut n = 0;
    for i in 0..m.layer_count() {
        let h = m.layer(i).unwrap().header;
        let ok = matches!(
            h.op,
            Op::Conv2d | Op::Depthwise | Op::MaxPool | Op::AvgPool | Op::Pixels
        );
        if !ok || (i > 0 && h.inputs[0] != m.layer(i - 1).unwrap().header.output) {
            break;
        }
        n += 1;
    }
    n
}

/// A plan for stage `0..=last` with slots placed after the model's own workspace, or
/// `None` when the executor refuses the stage (e.g. a residual reads an inner tensor).
fn plan_after(m: &Model, last: u16, rows: u16, cols: u16) -> Option<PatchPlan> {
    let base = m.workspace_len().div_ceil(8) * 8;
    // The slot sizes do not depend on where the slots are: measure them far apart.
    let probe = PatchPlan {
        first: 0,
        last,
        rows,
        cols,
        slots: [base as u32, (base + (1 << 24)) as u32],
        workspace_len: u32::MAX,
    };
    let len0 = Patched::new(m, probe).ok()?.slot_len()[0];
    let s1 = (base + len0).div_ceil(8) * 8;
    let mut p = PatchPlan {
        slots: [base as u32, s1 as u32],
        ..probe
    };
    let x = Patched::new(m, p).unwrap();
    p.workspace_len = (s1 + x.slot_len()[1]) as u32;
    Some(p)
}

fn check_model(rel: &str) {
    let bytes = model_bytes(rel);
    let m = Model::parse(&bytes).unwrap();
    let n = chain_len(&m);
    assert!(n >= 2, "{rel}: stage of {n} layers");
    let input = noise(m.input().byte_len(), 5);
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    let expected = m.run(&input, &mut ws).unwrap().to_vec();
    let s_out = |last: usize| {
        m.tensor(m.layer(last).unwrap().header.output as usize)
            .unwrap()
    };
    let mut tested = 0;
    for last in 0..n.min(12) {
        let sh = s_out(last).shape;
        for (rows, cols) in [(1, 1), (2, 2), (3, 2), (4, 4), (sh.h, sh.w)] {
            if rows > sh.h || cols > sh.w {
                continue;
            }
            let Some(plan) = plan_after(&m, last as u16, rows, cols) else {
                continue;
            };
            tested += 1;
            let p = Patched::new(&m, plan).unwrap();
            let mut ws = AlignedBytes::zeroed(p.workspace_len());
            let got = p.run(&input, &mut ws).unwrap();
            assert_eq!(
                got,
                &expected[..],
                "{rel}: stage 0..={last}, {rows}x{cols} tiles"
            );
            // Halo recomputation only adds work; one tile adds none.
            let base: u64 = (0..m.layer_count()).map(|i| m.layer_macs(i)).sum();
            assert!(p.macs() >= base);
            if rows == 1 && cols == 1 {
                assert_eq!(p.macs(), base);
            }
        }
    }
    assert!(tested >= 5, "{rel}: only {tested} plans ran");
}

#[test]
fn vww_patched_is_bit_identical() {
    check_model("reference/vww-mobilenet-025.toml");
}

#[test]
fn resnet8_patched_is_bit_identical() {
    check_model("reference/resnet8.toml");
}

#[test]
fn kws_patched_is_bit_identical() {
    check_model("reference/kws-dscnn.toml");
}

#[test]
fn caps_and_digits_patched_are_bit_identical() {
    check_model("caps/plain.toml");
    check_model("caps/separable.toml");
    check_model("digits/model.toml");
}

/// Hostile plans: every field varied at random; `new` refuses or the run succeeds with
/// the layer-by-layer bytes — never a panic, never different bytes.
#[test]
fn hostile_plans_are_refused_or_exact() {
    let bytes = model_bytes("caps/plain.toml");
    let m = Model::parse(&bytes).unwrap();
    let input = noise(m.input().byte_len(), 9);
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    let expected = m.run(&input, &mut ws).unwrap().to_vec();
    let r = noise(16 * 4000, 3);
    let mut accepted = 0;
    for c in r.chunks_exact(16) {
        let u16_at = |i: usize| u16::from_le_bytes([c[i], c[i + 1]]);
        let plan = PatchPlan {
            first: u16_at(0) % 6,
            last: u16_at(2) % 10,
            rows: u16_at(4) % 40,
            cols: u16_at(6) % 40,
            slots: [u16_at(8) as u32 * 2, u16_at(10) as u32 * 2],
            workspace_len: m.workspace_len() as u32 + u16_at(12) as u32 * 4,
        };
        if let Ok(p) = Patched::new(&m, plan) {
            accepted += 1;
            let mut ws = AlignedBytes::zeroed(p.workspace_len());
            assert_eq!(p.run(&input, &mut ws).unwrap(), &expected[..], "{plan:?}");
        }
    }
    assert!(
        accepted > 0,
        "no random plan was valid; the test checks nothing"
    );
}

/// The converter's choice (`patch_plan::choose`, extra MACs ≤ 20 %, the default):
/// planned workspace against the layer-by-layer bound, per model; the chosen stage and grid
/// also run bit-identically. The vww goal (≤ 27,648 B, half the bound of 55,296 B) is the
/// issue's; the planned figure counts slots, the stage output and the rest of the model.
#[test]
fn chosen_plans_beat_the_layer_by_layer_bound() {
    use midge_convert::patch_plan::choose;
    println!("model | bound B | patched B | stage | tiles | extra MACs %");
    for rel in [
        "reference/vww-mobilenet-025.toml",
        "reference/resnet8.toml",
        "reference/kws-dscnn.toml",
        "caps/plain.toml",
        "caps/separable.toml",
        "digits/model.toml",
    ] {
        let bytes = model_bytes(rel);
        let m = Model::parse(&bytes).unwrap();
        let Some(c) = choose(&m, 20.0) else {
            println!("{rel} | no plan beats the bound");
            continue;
        };
        println!(
            "{rel} | {} | {} | 0..={} | {}x{} | {:.1}",
            c.layer_by_layer_bound,
            c.workspace_len,
            c.last,
            c.rows,
            c.cols,
            c.extra_macs_pct()
        );
        assert!(c.extra_macs_pct() <= 20.0);
        assert!(c.workspace_len < c.layer_by_layer_bound);
        if rel.starts_with("reference/vww") {
            assert!(c.workspace_len <= 27_648, "{} B", c.workspace_len);
        }
        let input = noise(m.input().byte_len(), 21);
        let mut ws = AlignedBytes::zeroed(m.workspace_len());
        let expected = m.run(&input, &mut ws).unwrap().to_vec();
        let plan = plan_after(&m, c.last, c.rows, c.cols).unwrap();
        let p = Patched::new(&m, plan).unwrap();
        assert_eq!(p.macs(), c.macs);
        let mut ws = AlignedBytes::zeroed(p.workspace_len());
        assert_eq!(p.run(&input, &mut ws).unwrap(), &expected[..], "{rel}");
    }
}
