//! The checked-in C header is exactly what cbindgen generates from the
//! crate's source with `cbindgen.toml`; `MIDGE_BLESS=1` rewrites it.

use std::path::Path;

#[test]
fn header_matches_regeneration() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR"));
    let config = cbindgen::Config::from_file(dir.join("cbindgen.toml")).unwrap();
    let bindings = cbindgen::generate_with_config(dir, config).unwrap();
    let mut fresh = Vec::new();
    bindings.write(&mut fresh);
    let path = dir.join("include").join("midge.h");
    if std::env::var("MIDGE_BLESS").is_ok_and(|v| v == "1") {
        std::fs::write(&path, &fresh).unwrap();
    }
    let checked_in = std::fs::read(&path).unwrap_or_default();
    assert!(
        checked_in == fresh,
        "{} differs from what cbindgen generates; run `MIDGE_BLESS=1 cargo test -p midge-c --test header` and commit it",
        path.display()
    );
}
