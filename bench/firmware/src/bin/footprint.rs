//! Footprint probe: the smallest application that parses and runs a model
//! with midge-runtime. Its ELF minus `baseline`'s is the runtime's own code
//! and data on this target (measured by `midge_convert::footprint`).
#![no_std]
#![no_main]

use cortex_m_rt::entry;
use midge_firmware::{Job, JOB_ADDR, JOB_CAPACITY, JOB_HEADER_LEN};
use midge_runtime::Model;
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
                if let Ok(model) = Model::parse(model_bytes) {
                    let len = model.workspace_len();
                    if job.workspace_offset + len <= JOB_CAPACITY {
                        let ws = unsafe {
                            core::slice::from_raw_parts_mut(
                                (JOB_ADDR + job.workspace_offset) as *mut u8,
                                len,
                            )
                        };
                        if let Ok(out) = model.run(input, ws) {
                            sink = out.iter().map(|&b| b as u32).sum();
                        }
                    }
                }
            }
        }
    }
    unsafe { core::ptr::write_volatile(0x2000_0000 as *mut u32, sink) };
    loop {
        cortex_m::asm::wfi();
    }
}
