//! Workspace-lifetime checking at scale and against a plain reference:
//! a 2,000-layer chain whose tensors alternate between two workspace slots
//! (the reuse a memory planner produces) parses, and random workspace
//! offsets on the seed models give exactly the overlap verdict of a direct
//! implementation of the FORMAT.md rule. Regression for a hostile-input
//! finding: `check_lifetimes` used to be cubic in the layer count on such
//! chains (2,000 layers took over two minutes to parse at opt-level 1).

use midge_runtime::write::ModelSpec;
use midge_runtime::{repr::Padding, ElemType, Error, Op};
use midge_tests::seeds::{self, bare, pack, pixels_f16, tensor};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// pixels → F16, then `n − 1` 1×1 max pools, every tensor 1×1×1 F16; with
/// `pingpong` the tensors alternate between workspace offsets 0 and 8.
fn chain(n: usize, pingpong: bool) -> ModelSpec {
    let unit = Padding::Valid.resolve((1, 1), (1, 1), (1, 1), (1, 1));
    let mut tensors = vec![tensor(1, 1, 1, ElemType::U8, 1.0 / 255.0, 0)];
    let mut layers = vec![pixels_f16(1, 1)];
    tensors.push(tensor(1, 1, 1, ElemType::F16, 1.0, 0));
    for i in 1..n {
        tensors.push(tensor(1, 1, 1, ElemType::F16, 1.0, 0));
        layers.push(bare(Op::MaxPool, i as u16, i as u16 + 1, unit));
    }
    let mut spec = pack("chain", &[], tensors, layers, n as u16);
    if pingpong {
        for (k, t) in spec.tensors.iter_mut().enumerate().skip(1) {
            t.offset = if k % 2 == 0 { 8 } else { 0 };
        }
        spec.workspace_len = 16;
    }
    spec
}

#[test]
fn long_pingpong_chain_parses() {
    // emit() re-parses its output, so this runs the full check.
    let spec = chain(2000, true);
    let bytes = spec.emit().unwrap();
    assert!(bytes.len() > 2000 * 72);
    // Putting the last output over its own input is caught at the last layer.
    let mut bad = spec.clone();
    let last = bad.tensors.len() - 1;
    bad.tensors[last].offset = bad.tensors[last - 1].offset;
    assert_eq!(
        bad.emit().unwrap_err(),
        Error::Overlap {
            layer: 1999,
            output: 2000,
            live: 1999
        }
    );
}

/// The FORMAT.md rule, directly: tensor t (written by layer w(t)) is live
/// during layers w(t)..=last reader (the model output: to the end); layer i
/// must not write over a tensor live during it. First clash by layer, then
/// by the writing layer of the live tensor.
fn reference(spec: &ModelSpec) -> Option<Error> {
    let n = spec.layers.len();
    let outs: Vec<u16> = spec.layers.iter().map(|l| l.header.output).collect();
    let reads = |k: usize, t: u16| {
        let h = &spec.layers[k].header;
        h.inputs[..h.op.arity()].contains(&t)
    };
    let span = |t: u16| {
        let r = &spec.tensors[t as usize];
        r.offset as usize..r.offset as usize + r.byte_len()
    };
    for i in 0..n {
        let o = span(outs[i]);
        for j in 0..i {
            let t = outs[j];
            let live = t == spec.output || (i..n).any(|k| reads(k, t));
            let r = span(t);
            if live && o.start < r.end && r.start < o.end {
                return Some(Error::Overlap {
                    layer: i,
                    output: outs[i] as usize,
                    live: t as usize,
                });
            }
        }
    }
    None
}

#[test]
fn random_offsets_match_the_reference_rule() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x6c69_7665);
    let mut specs: Vec<ModelSpec> = seeds::all().into_iter().map(|(_, s)| s).collect();
    specs.push(chain(12, false));
    let (mut clashes, mut clean) = (0, 0);
    for round in 0..3000 {
        let mut s = specs[round % specs.len()].clone();
        let slots = rng.gen_range(1..=6);
        let mut end = 0;
        for t in s.tensors.iter_mut().skip(1) {
            t.offset = 8 * 32 * rng.gen_range(0..slots) as u32;
            end = end.max(t.offset as usize + t.byte_len());
        }
        s.workspace_len = end as u32;
        let want = reference(&s);
        match (s.emit(), want) {
            (Ok(_), None) => clean += 1,
            (Err(e), Some(w)) => {
                assert_eq!(e, w, "round {round}");
                clashes += 1;
            }
            (got, want) => panic!(
                "round {round}: parse says {:?}, rule says {want:?}",
                got.err()
            ),
        }
    }
    // Both verdicts occur often enough for the comparison to mean something.
    assert!(
        clashes > 300 && clean > 300,
        "{clashes} clashes, {clean} clean"
    );
}
