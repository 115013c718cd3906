//! Writes the seed models of `midge_tests::seeds` (int8, fp16, mixed,
//! residual, pools) into a corpus folder for the fuzz target:
//! `cargo run --bin seed_corpus -- corpus/parse_run`.

fn main() {
    let dir = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "corpus/parse_run".into());
    std::fs::create_dir_all(&dir).expect("create the corpus folder");
    for (name, bytes) in midge_tests::seeds::all_bytes() {
        let path = std::path::Path::new(&dir).join(format!("seed-{name}.midge"));
        std::fs::write(&path, bytes).expect("write a seed");
        println!("{}", path.display());
    }
}
