//! Footprint baseline: the same skeleton as `footprint` without the runtime,
//! so the difference of the two ELFs is what midge-runtime adds.
#![no_std]
#![no_main]

use cortex_m_rt::entry;
use midge_firmware::{job_block, keep};
use panic_halt as _;

#[entry]
fn main() -> ! {
    let mut sink = 0u32;
    if let Ok((job, block)) = job_block() {
        let input = job.input(block, 0).unwrap_or(&[]);
        sink = job.model(block).unwrap_or(&[]).len() as u32
            ^ input.iter().map(|&b| b as u32).sum::<u32>();
    }
    keep(sink)
}
