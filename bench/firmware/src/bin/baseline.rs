//! Footprint baseline: the same skeleton as `footprint` without the runtime,
//! so the difference of the two ELFs is what midge-runtime adds.
#![no_std]
#![no_main]

use cortex_m_rt::entry;
use midge_firmware::{Job, JOB_ADDR, JOB_CAPACITY, JOB_HEADER_LEN};
use panic_halt as _;

#[entry]
fn main() -> ! {
    let head = unsafe { core::slice::from_raw_parts(JOB_ADDR as *const u8, JOB_HEADER_LEN) };
    let mut sink = 0u32;
    if let Ok(job) = Job::parse_header(head) {
        if job.workspace_offset <= JOB_CAPACITY {
            let block =
                unsafe { core::slice::from_raw_parts(JOB_ADDR as *const u8, job.workspace_offset) };
            if job.check(block).is_ok() {
                let model_bytes = &block[job.model_offset..job.model_offset + job.model_len];
                let input = &block[job.input_offset..job.input_offset + job.input_len];
                sink = model_bytes.len() as u32 ^ input.iter().map(|&b| b as u32).sum::<u32>();
            }
        }
    }
    unsafe { core::ptr::write_volatile(0x2000_0000 as *mut u32, sink) };
    loop {
        cortex_m::asm::wfi();
    }
}
