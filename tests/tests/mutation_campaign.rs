//! The hostile-input campaign: well over 100,000 mutants of six valid seed
//! models (int8, fp16, mixed, residual add, pools, and the bundled digits
//! model as the converter writes it), most with the CRC re-sealed
//! so the deeper checks are reached, plus every misaligned placement.
//! Each mutant is rejected with an error or parses, runs and round-trips
//! (`midge_tests::parse_and_run`).

use std::collections::BTreeMap;

use midge_runtime::embed::AlignedBytes;
use midge_runtime::Error;
use midge_tests::mutate::{fix_crc, mutate, Kind};
use midge_tests::{error_kind, parse_and_run, parse_and_run_aligned, seeds, Outcome};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Mutants per run. Small models parse in microseconds, so this stays well
/// under a minute on two cores at the test profile's opt-level 1.
const MUTANTS: usize = 120_000;

#[derive(Default)]
struct Tally {
    tried: usize,
    ran: usize,
    rejected: BTreeMap<&'static str, usize>,
    by_kind: BTreeMap<Kind, (usize, usize)>,
}

impl Tally {
    fn record(&mut self, kind: Option<Kind>, bytes: &[u8], outcome: Result<Outcome, String>) {
        self.tried += 1;
        let ran = match outcome {
            Ok(Outcome::Rejected(e)) => {
                *self.rejected.entry(error_kind(&e)).or_default() += 1;
                false
            }
            Ok(Outcome::Ran(_)) => true,
            Err(e) => panic!(
                "a mutant ({kind:?}) exposed a runtime bug: {e}; bytes {:02x?}",
                bytes
            ),
        };
        if let Some(k) = kind {
            let e = self.by_kind.entry(k).or_default();
            e.0 += 1;
            e.1 += ran as usize;
        }
        if ran {
            self.ran += 1;
        }
    }
}

/// The bundled digits model through the converter's library entry: a real
/// file with planner-reused workspace, folded biases and fused clamps.
fn converted_digits() -> Vec<u8> {
    let desc = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../models/digits/model.toml");
    midge_convert::quantize::quantize_description(&desc, &Default::default())
        .unwrap_or_else(|e| panic!("{e}"))
        .quantized
        .bytes
}

#[test]
fn mutants_are_rejected_or_parse_and_run() {
    let mut seeds = seeds::all_bytes();
    seeds.push(("digits (converted)", converted_digits()));
    let mut rng = ChaCha8Rng::seed_from_u64(0x6361_7073);
    let mut t = Tally::default();

    // Every seed itself parses and runs.
    for (name, s) in &seeds {
        assert!(
            matches!(parse_and_run_aligned(s), Ok(Outcome::Ran(n)) if n > 0),
            "seed {name}"
        );
    }

    let mut misaligned_placements = 0;
    for i in 0..MUTANTS {
        let (_, seed) = &seeds[i % seeds.len()];
        let kind = Kind::ALL[rng.gen_range(0..Kind::ALL.len())];
        let mut b = mutate(&mut rng, seed, kind);
        // Re-seal most mutants so the checks behind the CRC are reached.
        if rng.gen_range(0..8) != 0 {
            fix_crc(&mut b);
        }
        let outcome = parse_and_run_aligned(&b);
        t.record(Some(kind), &b, outcome);

        // Every 16th mutant also at a misaligned address: always refused.
        if i % 16 == 0 {
            let shift = 1 + i / 16 % 7;
            let mut buf = AlignedBytes::zeroed(b.len() + 8);
            buf[shift..shift + b.len()].copy_from_slice(&b);
            let placed = &buf[shift..shift + b.len()];
            let outcome = parse_and_run(placed);
            assert!(
                matches!(outcome, Ok(Outcome::Rejected(Error::Misaligned { .. }))),
                "shift {shift}: {outcome:?}"
            );
            t.record(None, placed, outcome);
            misaligned_placements += 1;
        }
    }

    // Unmutated seeds at every misalignment 1..=7: refused, while the same
    // bytes at an aligned address run (see above).
    for (_, s) in &seeds {
        for shift in 1..8 {
            let mut buf = AlignedBytes::zeroed(s.len() + 8);
            buf[shift..shift + s.len()].copy_from_slice(s);
            let placed = &buf[shift..shift + s.len()];
            let outcome = parse_and_run(placed);
            assert!(matches!(
                outcome,
                Ok(Outcome::Rejected(Error::Misaligned { .. }))
            ));
            t.record(None, placed, outcome);
            misaligned_placements += 1;
        }
    }

    eprintln!(
        "mutation campaign: {} files tried ({} mutants + {} misaligned placements), {} parsed and ran and round-tripped",
        t.tried, MUTANTS, misaligned_placements, t.ran
    );
    let rejected: usize = t.rejected.values().sum();
    eprintln!("  rejected: {rejected}");
    for (k, n) in &t.rejected {
        eprintln!("    {k:<22} {n}");
    }
    eprintln!("  by mutation (tried, parsed+ran):");
    for (k, (n, ran)) in &t.by_kind {
        eprintln!("    {:<22} {n:>7} {ran:>7}", format!("{k:?}"));
    }

    assert!(t.tried >= 100_000);
    assert_eq!(rejected + t.ran, t.tried);
    // Every mutation operator was exercised.
    assert_eq!(t.by_kind.len(), Kind::ALL.len());
    // The campaign reaches the deep checks, not only the CRC: each of these
    // rejection kinds must occur.
    for kind in [
        "crc",
        "truncated",
        "misaligned",
        "layout",
        "tensor field",
        "layer field",
        "layer check",
        "tensor check",
        "workspace overlap",
        "header/info field",
        "version",
        "bad magic",
    ] {
        assert!(
            t.rejected.get(kind).copied().unwrap_or(0) > 0,
            "no mutant was rejected as {kind}: {:?}",
            t.rejected
        );
    }
    // Damage to weights and biases leaves valid models: many mutants run.
    assert!(t.ran >= 1_000, "only {} mutants parsed", t.ran);
}
