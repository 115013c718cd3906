//! Scratch measurement (not an assertion of time): parse cost of long chains.
use midge_runtime::embed::AlignedBytes;
use midge_runtime::{ElemType, Model, Op, Window};
use midge_tests::seeds::{bare, pack, tensor};

fn chain(n: usize, pingpong: bool) -> Vec<u8> {
    let mut tensors = vec![tensor(1, 1, 1, ElemType::F16, 1.0, 0)];
    let mut layers = Vec::new();
    for i in 0..n {
        tensors.push(tensor(1, 1, 1, ElemType::F16, 1.0, 0));
        let _ = i;
        layers.push(bare(Op::MaxPool, i as u16, i as u16 + 1, midge_runtime::Padding::Valid.resolve((1,1),(1,1),(1,1),(1,1))));
    }
    tensors[0] = tensor(1, 1, 1, ElemType::U8, 1.0 / 255.0, 0);
    let mut spec = pack("chain", &[], tensors, layers, n as u16);
    // first layer must be pixels
    spec.layers[0] = midge_tests::seeds::pixels_f16(1, 1);
    if pingpong {
        for (k, t) in spec.tensors.iter_mut().enumerate().skip(1) {
            t.offset = if k % 2 == 0 { 8 } else { 0 };
        }
        spec.workspace_len = 16;
    }
    let _ = Window::default();
    spec.emit().unwrap()
}

#[test]
fn measure() {
    for n in [250usize, 500, 1000, 2000] {
        for pp in [false, true] {
            let b = AlignedBytes::from_slice(&chain(n, pp));
            let t = std::time::Instant::now();
            Model::parse(&b).unwrap();
            eprintln!("layers {n} pingpong {pp}: parse {:?}", t.elapsed());
        }
    }
}
