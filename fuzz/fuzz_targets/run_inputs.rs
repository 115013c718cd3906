//! Fuzz target: arbitrary input pixels through the valid seed models (first
//! byte picks the model, the rest fills the input, repeated). Every run must
//! succeed, without overflow (fuzz builds check arithmetic), and give the
//! same bytes whatever the workspace held before.
#![no_main]

use std::sync::OnceLock;

use libfuzzer_sys::fuzz_target;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;

fn seeds() -> &'static [AlignedBytes] {
    static SEEDS: OnceLock<Vec<AlignedBytes>> = OnceLock::new();
    SEEDS.get_or_init(|| {
        midge_tests::seeds::all_bytes()
            .iter()
            .map(|(_, b)| AlignedBytes::from_slice(b))
            .collect()
    })
}

fuzz_target!(|data: &[u8]| {
    let Some((&pick, rest)) = data.split_first() else {
        return;
    };
    let all = seeds();
    let model = Model::parse(&all[pick as usize % all.len()]).expect("seed parses");
    let len = model.input().byte_len();
    let input: Vec<u8> = if rest.is_empty() {
        vec![0; len]
    } else {
        rest.iter().copied().cycle().take(len).collect()
    };
    let mut first = None;
    for fill in [0x00u8, 0xA5] {
        let mut ws = AlignedBytes::from_slice(&vec![fill; model.workspace_len()]);
        let out = model
            .run(&input, &mut ws)
            .expect("a parsed model runs")
            .to_vec();
        match &first {
            None => first = Some(out),
            Some(f) => assert_eq!(f, &out, "output depends on stale workspace bytes"),
        }
    }
});
