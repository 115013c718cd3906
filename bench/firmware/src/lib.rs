//! Shared pieces of the harness binaries: the job block that QEMU's loader
//! places in RAM (layout owned by `midge_bench::emulated`, mirrored here),
//! the SysTick instruction clock, and the op set `OPS` the binaries link.
#![no_std]

include!(concat!(env!("OUT_DIR"), "/ops.rs"));

use core::sync::atomic::{AtomicU32, Ordering};
use cortex_m::peripheral::{syst::SystClkSource, SYST};

/// Where the host's loader puts the job block (ZBT SSRAM2/3 + 1 MiB, the
/// same address on mps2-an385, -an386 and -an500).
pub const JOB_ADDR: usize = 0x2010_0000;
/// Bytes from `JOB_ADDR` to the end of SSRAM2/3.
pub const JOB_CAPACITY: usize = 3 * 1024 * 1024;
/// First eight bytes of a job block.
pub const JOB_MAGIC: [u8; 8] = *b"midgejob";
pub const JOB_VERSION: u32 = 1;
pub const JOB_HEADER_LEN: usize = 64;

/// The job header's fields, all little-endian u32 after the magic.
#[derive(Clone, Copy, Debug)]
pub struct Job {
    pub model_offset: usize,
    pub model_len: usize,
    pub input_offset: usize,
    pub input_len: usize,
    pub input_count: usize,
    pub workspace_offset: usize,
}

impl Job {
    /// Reads the header (the first `JOB_HEADER_LEN` bytes of the block).
    pub fn parse_header(head: &[u8]) -> Result<Job, &'static str> {
        let head = head.get(..JOB_HEADER_LEN).ok_or("job block too short")?;
        if head[..8] != JOB_MAGIC {
            return Err("no job block at 0x20100000 (bad magic)");
        }
        let word = |i: usize| {
            let o = 8 + 4 * i;
            u32::from_le_bytes([head[o], head[o + 1], head[o + 2], head[o + 3]]) as usize
        };
        if word(0) != JOB_VERSION as usize {
            return Err("job block version is not 1");
        }
        Ok(Job {
            model_offset: word(1),
            model_len: word(2),
            input_offset: word(3),
            input_len: word(4),
            input_count: word(5),
            workspace_offset: word(6),
        })
    }

    /// Checks that model and inputs lie inside `block` (the job area up to
    /// the workspace) and that offsets are aligned.
    pub fn check(&self, block: &[u8]) -> Result<(), &'static str> {
        let job = self;
        let inputs_end = job
            .input_len
            .checked_mul(job.input_count)
            .and_then(|n| n.checked_add(job.input_offset));
        let model_end = job.model_offset.checked_add(job.model_len);
        match (model_end, inputs_end) {
            (Some(m), Some(i)) if m <= block.len() && i <= block.len() => {}
            _ => return Err("job block fields reach outside the job area"),
        }
        if !job.workspace_offset.is_multiple_of(8) || !job.model_offset.is_multiple_of(8) {
            return Err("job block offsets are not 8-byte aligned");
        }
        Ok(())
    }
}

impl Job {
    /// The model bytes inside `block` (checked by `check`).
    pub fn model<'a>(&self, block: &'a [u8]) -> &'a [u8] {
        &block[self.model_offset..self.model_offset + self.model_len]
    }

    /// Input `k` (< `input_count`) inside `block` (checked by `check`).
    pub fn input<'a>(&self, block: &'a [u8], k: usize) -> &'a [u8] {
        let start = self.input_offset + k * self.input_len;
        &block[start..start + self.input_len]
    }

    /// The `len`-byte workspace at `workspace_offset`, when it fits in the
    /// job area.
    pub fn workspace(&self, len: usize) -> Result<&'static mut [u8], &'static str> {
        if self.workspace_offset + len > JOB_CAPACITY {
            return Err("workspace does not fit in the job area");
        }
        // SAFETY: inside the job area, after the model and inputs (`check`),
        // and taken once per run.
        Ok(unsafe {
            core::slice::from_raw_parts_mut((JOB_ADDR + self.workspace_offset) as *mut u8, len)
        })
    }
}

/// The job the host's loader placed at `JOB_ADDR`: its header, parsed, and
/// the job area up to the workspace, checked (`Job::check`).
pub fn job_block() -> Result<(Job, &'static [u8]), &'static str> {
    // SAFETY: the host's loader wrote the job block there before reset; the
    // firmware's own data and stack live below JOB_ADDR (memory.x).
    let head = unsafe { core::slice::from_raw_parts(JOB_ADDR as *const u8, JOB_HEADER_LEN) };
    let job = Job::parse_header(head)?;
    if job.workspace_offset > JOB_CAPACITY {
        return Err("workspace offset outside the job area");
    }
    let block = unsafe { core::slice::from_raw_parts(JOB_ADDR as *const u8, job.workspace_offset) };
    job.check(block)?;
    Ok((job, block))
}

/// End of the footprint probes: stores `sink` where the optimiser must keep
/// everything it depends on, then sleeps.
pub fn keep(sink: u32) -> ! {
    unsafe { core::ptr::write_volatile(0x2000_0000 as *mut u32, sink) };
    loop {
        cortex_m::asm::wfi();
    }
}

static WRAPS: AtomicU32 = AtomicU32::new(0);
const RELOAD: u32 = 0x00FF_FFFF;

/// Starts SysTick on the core clock, free running, wrap interrupt on.
pub fn clock_start(syst: &mut SYST) {
    syst.set_clock_source(SystClkSource::Core);
    syst.set_reload(RELOAD);
    syst.clear_current();
    syst.enable_interrupt();
    syst.enable_counter();
    // The counter holds 0 until its first reload; wait for it so the first
    // reading is not mistaken for a full period.
    while SYST::get_current() == 0 {}
}

/// Called from the SysTick exception: one more full period elapsed.
pub fn clock_wrapped() {
    // Single core; the exception is the only writer.
    WRAPS.store(
        WRAPS.load(Ordering::Relaxed).wrapping_add(1),
        Ordering::Relaxed,
    );
}

/// SysTick ticks since `clock_start`, extended to 64 bits.
#[inline(always)]
pub fn ticks() -> u64 {
    loop {
        let w1 = WRAPS.load(Ordering::Relaxed);
        let v = SYST::get_current();
        let w2 = WRAPS.load(Ordering::Relaxed);
        if w1 == w2 {
            return (w1 as u64) * (RELOAD as u64 + 1) + (RELOAD - v) as u64;
        }
    }
}

/// Waits for the next tick edge, so two measurements start at the same
/// phase of the 40-instruction tick and differ by whole ticks.
#[inline(never)]
pub fn tick_edge() {
    let v = SYST::get_current();
    while SYST::get_current() == v {}
}

/// Ticks taken by `f`, started right after a tick edge.
#[inline(never)]
pub fn ticks_of(f: impl FnOnce()) -> u64 {
    tick_edge();
    let t0 = ticks();
    f();
    ticks() - t0
}

/// `iters` iterations of 40 NOPs plus the loop's own two instructions.
#[inline(never)]
pub fn nops40(iters: u32) {
    unsafe {
        core::arch::asm!(
            "2:", ".rept 40", "nop", ".endr", "subs r0, r0, #1", "bne 2b",
            inout("r0") iters => _, options(nomem, nostack)
        );
    }
}

/// `iters` iterations of 80 NOPs plus the loop's own two instructions.
#[inline(never)]
pub fn nops80(iters: u32) {
    unsafe {
        core::arch::asm!(
            "2:", ".rept 80", "nop", ".endr", "subs r0, r0, #1", "bne 2b",
            inout("r0") iters => _, options(nomem, nostack)
        );
    }
}

/// The byte pattern painted below the stack pointer (our own choice).
pub const PAINT: u32 = 0x6D69_6467;

extern "C" {
    static mut __sheap: u32;
    static mut _stack_start: u32;
}

/// Lowest and highest address of the stack region (end of .bss up to the
/// initial stack pointer).
pub fn stack_bounds() -> (usize, usize) {
    (
        core::ptr::addr_of!(__sheap) as usize,
        core::ptr::addr_of!(_stack_start) as usize,
    )
}

/// Paints every word from the bottom of the stack region to 32 bytes below
/// the current stack pointer; returns that stack pointer.
#[inline(never)]
pub fn paint_stack() -> usize {
    let sp = cortex_m::register::msp::read() as usize;
    let (bottom, _) = stack_bounds();
    let mut p = (bottom + 3) & !3;
    while p + 4 <= sp - 32 {
        unsafe { core::ptr::write_volatile(p as *mut u32, PAINT) };
        p += 4;
    }
    sp
}

/// Lowest address whose painted word was overwritten.
pub fn lowest_touched() -> usize {
    let (bottom, top) = stack_bounds();
    let mut p = (bottom + 3) & !3;
    while p + 4 <= top {
        if unsafe { core::ptr::read_volatile(p as *const u32) } != PAINT {
            return p;
        }
        p += 4;
    }
    top
}
