//! The runtime's doc examples run `runtime/fixtures/digits.midge`; it must be
//! exactly what the converter writes for `models/digits/model.toml` today, so
//! the examples show current output (regenerate as DEVELOPERS.md says).

use midge_convert::quantize::{quantize_description, QuantizeOptions};
use std::path::Path;

#[test]
fn runtime_doc_fixture_is_current() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let conv = quantize_description(
        &root.join("models/digits/model.toml"),
        &QuantizeOptions::default(),
    )
    .unwrap();
    let fixture = std::fs::read(root.join("runtime/fixtures/digits.midge")).unwrap();
    assert!(
        conv.quantized.bytes == fixture,
        "runtime/fixtures/digits.midge is stale: regenerate it with `cargo run -p midge-cli \
         --release -- quantize models/digits/model.toml -o runtime/fixtures/digits.midge`"
    );
}
