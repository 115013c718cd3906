//! Footprint probe: the smallest application that parses and runs a model
//! with midge-runtime. Its ELF minus `baseline`'s is the runtime's own code
//! and data on this target (measured by `midge_bench::footprint`).
#![no_std]
#![no_main]

use cortex_m_rt::entry;
use midge_firmware::{job_block, keep, workspace, OPS};
use midge_runtime::Model;
use panic_halt as _;

#[entry]
fn main() -> ! {
    let mut sink = 0u32;
    if let Ok((job, block)) = job_block() {
        if let Ok(model) = Model::<OPS>::parse_with_ops(job.model(block).unwrap_or(&[])) {
            if let Ok(ws) = workspace(&job, model.workspace_len()) {
                if let Ok(out) = model.run(job.input(block, 0).unwrap_or(&[]), ws) {
                    sink = out.iter().map(|&b| b as u32).sum();
                }
            }
        }
    }
    keep(sink)
}
