//! Sweep variants built on many threads give the rows one thread gives, in
//! the same order (explicit pools of 1 and 3 threads).

use std::path::Path;

use midge_bench::budget::BudgetOptions;
use midge_bench::sweep::sweep;
use midge_bench::target::Target;
use midge_convert::description::Description;
use midge_convert::parallel::with_threads;

#[test]
fn sweep_rows_do_not_depend_on_the_thread_count() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../models/caps/plain.toml");
    let desc = Description::load(&path).unwrap();
    let targets = vec![Target::resolve("m4-80").unwrap()];
    let opts = BudgetOptions {
        measure_runtime: false,
        emulate: false,
        ..BudgetOptions::default()
    };
    let run = |threads| {
        with_threads(Some(threads), || {
            sweep(
                &desc,
                &[0.5, 1.0, 2.0],
                &[(32, 32), (24, 24), (4, 4)],
                &targets,
                &opts,
                3,
            )
            .unwrap()
        })
        .unwrap()
    };
    let one = run(1);
    assert_eq!(one.len(), 9);
    assert!(one.iter().any(|r| r.error.is_none()) && one.iter().any(|r| r.error.is_some()));
    let json = serde_json::to_string(&one).unwrap();
    let many = run(3);
    assert_eq!(one, many);
    assert_eq!(json, serde_json::to_string(&many).unwrap());
}
