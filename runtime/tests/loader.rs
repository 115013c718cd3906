//! The loader against damaged and inconsistent files: every truncation and
//! random byte flips (with and without a fixed-up CRC) give an error, never a
//! panic; overlapping live tensors are rejected; emit→parse→emit round-trips.
#![cfg(feature = "write")]

use midge_runtime::crc::crc32;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::format::field;
use midge_runtime::write::{BiasBuf, LayerSpec, ModelSpec, ParamsBuf, WeightsBuf};
use midge_runtime::{
    repr::{Activation, LayerHeader, Padding, Window},
    ElemType, Error, Model, Observer, Op, OpSet, Quant, Shape, TensorRecord,
};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const NO_FP_CLAMP: [f32; 2] = [-65504.0, 65504.0];

fn t(h: u16, w: u16, c: u16, elem: ElemType, scale: f32, zp: i32, offset: u32) -> TensorRecord {
    TensorRecord {
        shape: Shape::new(h, w, c),
        elem,
        quant: Quant {
            scale,
            zero_point: zp,
        },
        offset,
    }
}

fn layer(op: Op, act: Activation, inputs: [u16; 2], output: u16, window: Window) -> LayerHeader {
    LayerHeader {
        op,
        act,
        inputs,
        output,
        window,
        clamp_i8: [-128, 127],
        clamp_f32: NO_FP_CLAMP,
    }
}

fn spec(header: LayerHeader, w: WeightsBuf, b: BiasBuf, p: ParamsBuf) -> LayerSpec {
    LayerSpec {
        header,
        weights: w,
        bias: b,
        params: p,
    }
}

fn none(header: LayerHeader) -> LayerSpec {
    spec(header, WeightsBuf::None, BiasBuf::None, ParamsBuf::None)
}

/// A model using every kind of layer record: pixels, conv2d, depthwise, add,
/// max pool, global average pool, dequantize, fp16 dense, quantize.
/// Workspace bytes are reused where lifetimes allow (see the offsets).
fn mixed_spec() -> ModelSpec {
    use ElemType::*;
    let same3 = Padding::Same.resolve((4, 4), (3, 3), (1, 1), (1, 1));
    let pool = Padding::Valid.resolve((4, 4), (2, 2), (2, 2), (1, 1));
    let rq = |c: usize| ParamsBuf::I32((0..c).flat_map(|_| [1 << 30, 36]).collect());
    ModelSpec {
        name: "bottle-cap check".into(),
        labels: vec!["good".into(), "dented".into()],
        tensors: vec![
            t(4, 4, 2, U8, 1.0 / 255.0, 0, 0), // 0 input
            t(4, 4, 2, I8, 0.02, -3, 0),       // 1: live layers 0..=1, bytes 0..32
            t(4, 4, 3, I8, 0.05, 1, 48),       // 2: live 1..=3, bytes 48..96
            t(4, 4, 3, I8, 0.05, 2, 0),        // 3: live 2..=3, bytes 0..48 (t1 is dead)
            t(4, 4, 3, I8, 0.1, 0, 96),        // 4: live 3..=4, bytes 96..144
            t(2, 2, 3, I8, 0.1, 0, 0),         // 5: live 4..=5
            t(1, 1, 3, I8, 0.1, 0, 16),        // 6: live 5..=6
            t(1, 1, 3, F16, 1.0, 0, 0),        // 7: live 6..=7
            t(1, 1, 2, F16, 1.0, 0, 8),        // 8: live 7..=8
            t(1, 1, 2, I8, 0.1, 0, 16),        // 9: output, live 8..end
        ],
        layers: vec![
            spec(
                layer(Op::Pixels, Activation::None, [0, 0], 1, Window::default()),
                WeightsBuf::None,
                BiasBuf::None,
                ParamsBuf::I32(vec![100, 1 << 30, 38, -50, 1 << 30, 38]),
            ),
            spec(
                layer(Op::Conv2d, Activation::Relu, [1, 0], 2, same3),
                WeightsBuf::I8((0..54).map(|i| (i % 7 - 3) as i8).collect()),
                BiasBuf::I32(vec![5, -7, 100]),
                rq(3),
            ),
            spec(
                layer(Op::Depthwise, Activation::None, [2, 0], 3, same3),
                WeightsBuf::I8((0..27).map(|i| (i % 5 - 2) as i8).collect()),
                BiasBuf::I32(vec![0, 1, -1]),
                rq(3),
            ),
            spec(
                layer(Op::Add, Activation::Relu6, [2, 3], 4, Window::default()),
                WeightsBuf::None,
                BiasBuf::None,
                ParamsBuf::I32(vec![1 << 30, 1 << 30, 32]),
            ),
            none(layer(Op::MaxPool, Activation::None, [4, 0], 5, pool)),
            none(layer(
                Op::GlobalAvgPool,
                Activation::None,
                [5, 0],
                6,
                Window::default(),
            )),
            none(layer(
                Op::Dequantize,
                Activation::None,
                [6, 0],
                7,
                Window::default(),
            )),
            spec(
                layer(Op::Dense, Activation::None, [7, 0], 8, Window::default()),
                WeightsBuf::F16(
                    [0.5f32, -1.0, 0.25, 2.0, 1.5, -0.75]
                        .map(half::f16::from_f32)
                        .to_vec(),
                ),
                BiasBuf::F32(vec![0.125, -0.5]),
                ParamsBuf::None,
            ),
            none(layer(
                Op::Quantize,
                Activation::None,
                [8, 0],
                9,
                Window::default(),
            )),
        ],
        output: 9,
        workspace_len: 144,
    }
}

fn parse_owned(bytes: &[u8]) -> Result<(), Error> {
    let buf = AlignedBytes::from_slice(bytes);
    let m = Model::parse(&buf)?;
    // What parses must also run: `run` cannot fail for a parsed model.
    let input: Vec<u8> = (0..m.input().byte_len()).map(|i| (i * 37) as u8).collect();
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    m.run(&input, &mut ws)
        .expect("a model that parsed must run");
    Ok(())
}

fn fix_crc(bytes: &mut [u8]) {
    let crc = crc32(&bytes[field::header::LEN..]);
    bytes[field::header::CRC].copy_from_slice(&crc.to_le_bytes());
}

#[test]
fn round_trip_is_byte_identical() {
    let bytes = mixed_spec().emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    let back = ModelSpec::from_model(&m);
    assert_eq!(back, mixed_spec());
    assert_eq!(back.emit().unwrap(), bytes);
}

#[test]
fn counts_and_sections() {
    let bytes = mixed_spec().emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    // conv2d: out 4·4·3 · kh·kw 3·3 · in_c 2 = 864; depthwise 4·4·3 · 3·3 = 432;
    // dense 3·2 = 6; others 0 (counting rule of `Model::layer_macs`).
    let macs: Vec<u64> = (0..m.layer_count()).map(|i| m.layer_macs(i)).collect();
    assert_eq!(macs, [0, 864, 432, 0, 0, 0, 0, 6, 0]);
    let params: Vec<u64> = (0..m.layer_count()).map(|i| m.layer_params(i)).collect();
    assert_eq!(params, [0, 54 + 3, 27 + 3, 0, 0, 0, 0, 6 + 2, 0]);
    let s = m.sections();
    assert_eq!(s.weights, 54 + 27 + 12);
    assert_eq!(s.biases, 12 + 12 + 8);
    assert_eq!(s.params, 24 + 24 + 24 + 12);
    assert_eq!(
        s.header
            + s.tensor_table
            + s.layer_table
            + s.weights
            + s.biases
            + s.params
            + s.strings
            + s.padding,
        s.total
    );
    assert_eq!(s.total, bytes.len());
}

#[test]
fn every_truncation_is_an_error() {
    let bytes = mixed_spec().emit().unwrap();
    for len in 0..bytes.len() {
        assert!(parse_owned(&bytes[..len]).is_err(), "length {len}");
    }
    parse_owned(&bytes).unwrap();
}

#[test]
fn random_flips_never_panic() {
    let bytes = mixed_spec().emit().unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(0x6D69_6467);
    let mut rejected_deep = 0;
    for round in 0..3000 {
        let mut b = bytes.clone();
        let flips = 1 + round % 3;
        for _ in 0..flips {
            let at = rng.gen_range(0..b.len());
            b[at] ^= 1 << rng.gen_range(0..8);
        }
        // Without fixing the CRC every damaged file is rejected
        // (CRC-32 detects every error burst of up to 32 bits; with more flips
        // we only ask for no panic and a consistent result).
        let plain = parse_owned(&b);
        if flips == 1 {
            assert!(plain.is_err(), "round {round}: single flip accepted");
        }
        // With the CRC recomputed the deeper checks are reached: any result
        // is allowed (a flipped weight is still a valid model), but no panic,
        // and a model that parses must run.
        fix_crc(&mut b);
        if parse_owned(&b).is_err() {
            rejected_deep += 1;
        }
    }
    // Most flips hit structure (ids, offsets, types, shapes), so most are rejected.
    assert!(rejected_deep > 1000, "only {rejected_deep} rejected");
}

#[test]
fn flipping_every_structural_byte_is_caught_or_harmless() {
    // Exhaustive: every byte of the header, model info and tables, each set
    // to 0xFF with the CRC fixed up. No panic; whatever parses also runs.
    let bytes = mixed_spec().emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    let s = m.sections();
    let end = s.header + s.tensor_table + s.layer_table + 8;
    for at in 0..end.min(bytes.len()) {
        let mut b = bytes.clone();
        b[at] = 0xFF;
        fix_crc(&mut b);
        let _ = parse_owned(&b);
    }
}

fn expect_err(spec: &ModelSpec) -> Error {
    spec.emit()
        .expect_err("the writer must refuse what the reader rejects")
}

#[test]
fn overlapping_live_tensors_are_rejected() {
    // Tensor 3 over tensor 2, which layer 3 still reads.
    let mut s = mixed_spec();
    s.tensors[3].offset = 48;
    assert_eq!(
        expect_err(&s),
        Error::Overlap {
            layer: 2,
            output: 3,
            live: 2
        }
    );
    // An output over its own layer's input.
    let mut s = mixed_spec();
    s.tensors[2].offset = 16;
    assert_eq!(
        expect_err(&s),
        Error::Overlap {
            layer: 1,
            output: 2,
            live: 1
        }
    );
    // A later output over the model output? The output is written last here,
    // so make an earlier tensor the output: tensor 8 must then stay live.
    let mut s = mixed_spec();
    s.output = 8;
    s.tensors[9].offset = 8;
    assert_eq!(
        expect_err(&s),
        Error::Overlap {
            layer: 8,
            output: 9,
            live: 8
        }
    );
    // Reuse of a dead tensor's bytes is fine (tensor 3 over tensor 1 above).
    mixed_spec().emit().unwrap();
}

#[test]
fn graph_rules_are_enforced() {
    // Reading a tensor written later.
    let mut s = mixed_spec();
    s.layers[1].header.inputs[0] = 3;
    assert!(matches!(expect_err(&s), Error::Layer { index: 1, .. }));
    // Two writers of one tensor: layer i must write tensor i + 1.
    let mut s = mixed_spec();
    s.layers[2].header.output = 2;
    assert!(matches!(
        expect_err(&s),
        Error::LayerField {
            index: 2,
            value: 2,
            ..
        }
    ));
    // Tensor outside the workspace.
    let mut s = mixed_spec();
    s.workspace_len = 100;
    assert!(matches!(expect_err(&s), Error::Tensor { index: 4, .. }));
    // Unaligned workspace offset.
    let mut s = mixed_spec();
    s.tensors[6].offset = 17;
    assert!(matches!(
        expect_err(&s),
        Error::TensorField { index: 6, .. }
    ));
    // Output id 0 or out of range.
    let mut s = mixed_spec();
    s.output = 0;
    assert!(matches!(expect_err(&s), Error::BadField { .. }));
    // Blob of the wrong type for the op.
    let mut s = mixed_spec();
    s.layers[1].weights = WeightsBuf::F16(vec![half::f16::ZERO; 54]);
    assert!(matches!(expect_err(&s), Error::Layer { index: 1, .. }));
    // A blob on an op that takes none.
    let mut s = mixed_spec();
    s.layers[4].params = ParamsBuf::I32(vec![1]);
    assert!(matches!(expect_err(&s), Error::Layer { index: 4, .. }));
}

#[test]
fn run_checks_buffers() {
    let bytes = mixed_spec().emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    let input = vec![0u8; 32];
    let mut ws = AlignedBytes::zeroed(m.workspace_len() + 8);
    assert_eq!(
        m.run(&input[..31], &mut ws).unwrap_err(),
        Error::InputLength {
            expected: 32,
            found: 31
        }
    );
    assert_eq!(
        m.run(&input, &mut ws[..143]).unwrap_err(),
        Error::WorkspaceLength {
            expected: 144,
            found: 143
        }
    );
    assert_eq!(
        m.run(&input, &mut ws[1..]).unwrap_err(),
        Error::WorkspaceMisaligned
    );
    // Larger than needed is accepted.
    assert_eq!(m.run(&input, &mut ws).unwrap().len(), 2);
}

#[derive(Default)]
struct Trace {
    events: Vec<(bool, usize)>,
    last: Vec<u8>,
}

impl Observer for Trace {
    fn before_layer(&mut self, index: usize) {
        self.events.push((false, index));
    }
    fn after_layer(&mut self, index: usize, output: &TensorRecord, bytes: &[u8]) {
        assert_eq!(bytes.len(), output.byte_len());
        self.events.push((true, index));
        self.last = bytes.to_vec();
    }
}

#[test]
fn observer_sees_every_layer_in_order() {
    let bytes = mixed_spec().emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    let input: Vec<u8> = (0..32).map(|i| (i * 8) as u8).collect();
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    let mut trace = Trace::default();
    let out = m
        .run_observed(&input, &mut ws, &mut trace)
        .unwrap()
        .to_vec();
    let want: Vec<(bool, usize)> = (0..m.layer_count())
        .flat_map(|i| [(false, i), (true, i)])
        .collect();
    assert_eq!(trace.events, want);
    assert_eq!(trace.last, out);
    // Same result without the observer, and independent of stale workspace bytes.
    let mut ws2 = AlignedBytes::from_slice(&vec![0xA5; m.workspace_len()]);
    assert_eq!(m.run(&input, &mut ws2).unwrap(), &out[..]);
}

#[test]
fn strings_and_counts_that_do_not_fit_are_refused() {
    let mut s = mixed_spec();
    s.name = "x".repeat(70_000);
    assert!(matches!(expect_err(&s), Error::BadField { .. }));
    let mut s = mixed_spec();
    s.labels = vec![String::new(); 70_000];
    assert!(matches!(expect_err(&s), Error::BadField { .. }));
    // Non-ASCII UTF-8 labels survive a round trip.
    let mut s = mixed_spec();
    s.labels = vec!["verschlossen ✓".into(), "beschädigt".into()];
    let bytes = s.emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    assert_eq!(m.label(1), Some("beschädigt"));
}

#[test]
fn shared_workspace_matches_separate_buffers() {
    // The same layers run one by one by the reference kernels on a separate
    // buffer per tensor must give the bytes `run` leaves in the shared,
    // reused workspace, layer by layer (checks the workspace splitting).
    let bytes = mixed_spec().emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    let input: Vec<u8> = (0..32).map(|i| (i * 29 % 256) as u8).collect();

    let mut store: Vec<AlignedBytes> = (0..m.tensor_count())
        .map(|i| AlignedBytes::zeroed(m.tensor(i).unwrap().byte_len()))
        .collect();
    store[0].copy_from_slice(&input);
    for i in 0..m.layer_count() {
        let l = m.layer(i).unwrap();
        let h = l.header;
        let rec = |id: u16| m.tensor(id as usize).unwrap();
        let (a, ta) = (store[h.inputs[0] as usize].clone(), rec(h.inputs[0]));
        let b =
            (h.op.arity() == 2).then(|| (store[h.inputs[1] as usize].clone(), rec(h.inputs[1])));
        let to = rec(h.output);
        let mut out = AlignedBytes::zeroed(to.byte_len());
        midge_runtime::exec::run_layer_reference(
            &l,
            (&ta, &a),
            b.as_ref().map(|(bytes, t)| (t, &bytes[..])),
            (&to, &mut out),
        )
        .unwrap();
        store[h.output as usize] = out;
    }

    #[derive(Default)]
    struct Dumps(Vec<Vec<u8>>);
    impl Observer for Dumps {
        fn after_layer(&mut self, _: usize, _: &TensorRecord, bytes: &[u8]) {
            self.0.push(bytes.to_vec());
        }
    }
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    let mut dumps = Dumps::default();
    let out = m
        .run_observed(&input, &mut ws, &mut dumps)
        .unwrap()
        .to_vec();
    for i in 0..m.layer_count() {
        let id = m.layer(i).unwrap().header.output as usize;
        assert_eq!(dumps.0[i], &store[id][..], "layer {i}");
    }
    assert_eq!(out, &store[m.output_id()][..]);
    // Not a trivial model: the output is not all one value.
    assert!(store[3].iter().any(|&v| v != store[3][0]));
}

/// An all-fp16 model: pixels → F16, conv2d (valid), average pool, add.
fn fp16_spec() -> ModelSpec {
    use ElemType::*;
    let conv = Padding::Valid.resolve((4, 4), (3, 3), (1, 1), (1, 1));
    let pool = Padding::Valid.resolve((2, 2), (2, 2), (1, 1), (1, 1));
    let w: Vec<f32> = (0..18).map(|i| ((i % 5) as f32 - 2.0) * 0.25).collect();
    ModelSpec {
        name: "fp16".into(),
        labels: vec![],
        tensors: vec![
            t(4, 4, 1, U8, 1.0 / 255.0, 0, 0),
            t(4, 4, 1, F16, 1.0, 0, 0),  // bytes 0..32, live 0..=1
            t(2, 2, 2, F16, 1.0, 0, 32), // bytes 32..48, live 1..=2
            t(1, 1, 2, F16, 1.0, 0, 0),  // bytes 0..4 (tensor 1 is dead), live 2..=3
            t(1, 1, 2, F16, 1.0, 0, 8),  // output
        ],
        layers: vec![
            spec(
                layer(Op::Pixels, Activation::None, [0, 0], 1, Window::default()),
                WeightsBuf::None,
                BiasBuf::None,
                ParamsBuf::F32(vec![1.0 / 255.0, 0.0]),
            ),
            spec(
                layer(Op::Conv2d, Activation::None, [1, 0], 2, conv),
                WeightsBuf::F16(w.iter().map(|&v| half::f16::from_f32(v)).collect()),
                BiasBuf::F32(vec![0.1, -0.2]),
                ParamsBuf::None,
            ),
            none(layer(Op::AvgPool, Activation::None, [2, 0], 3, pool)),
            none(layer(
                Op::Add,
                Activation::None,
                [3, 3],
                4,
                Window::default(),
            )),
        ],
        output: 4,
        workspace_len: 48,
    }
}

#[test]
fn fp16_model_round_trips_and_runs() {
    let bytes = fp16_spec().emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let m = Model::parse(&buf).unwrap();
    assert_eq!(ModelSpec::from_model(&m), fp16_spec());
    assert_eq!(ModelSpec::from_model(&m).emit().unwrap(), bytes);
    for len in 0..bytes.len() {
        assert!(parse_owned(&bytes[..len]).is_err(), "length {len}");
    }

    // Independent f64 evaluation of the same network from its definition
    // (HWC, conv weights [out_c][kh][kw][in_c], mean pool, x + x).
    let p: Vec<u8> = (0..16).map(|i| (i * 16 + 5) as u8).collect();
    let x: Vec<f64> = p.iter().map(|&v| v as f64 / 255.0).collect();
    let w: Vec<f64> = (0..18).map(|i| ((i % 5) as f64 - 2.0) * 0.25).collect();
    let bias = [0.1, -0.2];
    let mut want = [0.0f64; 2];
    for (o, want_o) in want.iter_mut().enumerate() {
        let mut pooled = 0.0;
        for oy in 0..2 {
            for ox in 0..2 {
                let mut acc = bias[o];
                for ky in 0..3 {
                    for kx in 0..3 {
                        acc += w[o * 9 + ky * 3 + kx] * x[(oy + ky) * 4 + ox + kx];
                    }
                }
                pooled += acc / 4.0;
            }
        }
        *want_o = 2.0 * pooled;
    }
    let mut ws = AlignedBytes::zeroed(m.workspace_len());
    let out = m.run(&p, &mut ws).unwrap();
    let got: Vec<f64> = out
        .chunks_exact(2)
        .map(|c| half::f16::from_le_bytes([c[0], c[1]]).to_f64())
        .collect();
    for (g, w) in got.iter().zip(want) {
        // fp16 keeps 11 significant bits; a few roundings along the way.
        assert!(
            (g - w).abs() <= 0.01 * w.abs().max(1.0),
            "got {g}, want {w}"
        );
    }
}

/// The pairs of `mixed_spec`, written out from its layer list above.
const MIXED_OPS: u32 = {
    use ElemType::{F16, I8};
    OpSet::EMPTY
        .with(Op::Pixels, I8)
        .with(Op::Conv2d, I8)
        .with(Op::Depthwise, I8)
        .with(Op::Add, I8)
        .with(Op::MaxPool, I8)
        .with(Op::GlobalAvgPool, I8)
        .with(Op::Dequantize, F16)
        .with(Op::Dense, F16)
        .with(Op::Quantize, I8)
        .bits()
};

/// `op_set` is the set of (op, output type) of the layers; a model parsed
/// with its own op set runs exactly as with every op; with one pair fewer,
/// `parse_with_ops` names the first layer that needs it (never a panic),
/// and the dispatch refuses a layer outside its set the same way.
#[test]
fn op_set_selects_what_a_build_links() {
    let spec = mixed_spec();
    let bytes = spec.emit().unwrap();
    let buf = AlignedBytes::from_slice(&bytes);
    let all = Model::parse(&buf).unwrap();
    let from_spec = spec.layers.iter().fold(OpSet::EMPTY, |s, l| {
        s.with(l.header.op, spec.tensors[l.header.output as usize].elem)
    });
    assert_eq!(all.op_set(), from_spec);
    assert_eq!(all.op_set(), OpSet::from_bits(MIXED_OPS));

    let own = Model::<MIXED_OPS>::parse_with_ops(&buf).unwrap();
    let input: Vec<u8> = (0..32).map(|i| (i * 8) as u8).collect();
    let mut ws = AlignedBytes::zeroed(all.workspace_len());
    let want = all.run(&input, &mut ws).unwrap().to_vec();
    let mut ws2 = AlignedBytes::zeroed(all.workspace_len());
    assert_eq!(own.run(&input, &mut ws2).unwrap(), &want[..]);

    const NO_DEPTHWISE: u32 = MIXED_OPS & !OpSet::EMPTY.with(Op::Depthwise, ElemType::I8).bits();
    let e = Model::<NO_DEPTHWISE>::parse_with_ops(&buf).unwrap_err();
    assert_eq!(
        e,
        Error::NotLinked {
            layer: 2,
            op: Op::Depthwise,
            elem: ElemType::I8
        }
    );
    assert!(e.to_string().starts_with("layer 2: Depthwise"), "{e}");
    // The fp16 dense is refused when only the int8 dense is linked.
    const INT8_DENSE: u32 = (MIXED_OPS & !OpSet::EMPTY.with(Op::Dense, ElemType::F16).bits())
        | OpSet::EMPTY.with(Op::Dense, ElemType::I8).bits();
    assert!(matches!(
        Model::<INT8_DENSE>::parse_with_ops(&buf),
        Err(Error::NotLinked {
            layer: 7,
            op: Op::Dense,
            elem: ElemType::F16
        })
    ));
    // Below parse: the dispatch of an empty op set refuses layer 0.
    let l0 = all.layer(0).unwrap();
    let (t0, t1) = (all.tensor(0).unwrap(), all.tensor(1).unwrap());
    let mut y = vec![0u8; t1.byte_len()];
    let r = midge_runtime::exec::run_layer_ops::<0>(&l0, (&t0, &input), None, (&t1, &mut y));
    assert!(
        matches!(r, Err(Error::NotLinked { op: Op::Pixels, .. })),
        "{r:?}"
    );
}
