//! Fuzz target: any bytes through `Model::parse`, as given and with the CRC
//! re-sealed (so mutations reach the checks behind it); whatever parses must
//! run on a fixed input and round-trip through the writer (`parse_and_run`).
#![no_main]

use libfuzzer_sys::fuzz_target;
use midge_runtime::embed::AlignedBytes;
use midge_tests::mutate::fix_crc;
use midge_tests::parse_and_run;

fn check(bytes: &[u8]) {
    if let Err(bug) = parse_and_run(&AlignedBytes::from_slice(bytes)) {
        panic!("{bug}");
    }
}

fuzz_target!(|data: &[u8]| {
    check(data);
    let mut sealed = data.to_vec();
    fix_crc(&mut sealed);
    if sealed != data {
        check(&sealed);
    }
});
