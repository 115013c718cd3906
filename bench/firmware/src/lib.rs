//! Shared pieces of the harness binaries: the job block that QEMU's loader
//! places in RAM (layout defined once in `midge-job`, bench/job),
//! the SysTick instruction clock, and the op set `OPS` the binaries link.
#![no_std]

include!(concat!(env!("OUT_DIR"), "/ops.rs"));

use core::sync::atomic::{AtomicU32, Ordering};
use cortex_m::peripheral::{syst::SystClkSource, SYST};

pub use midge_job::{Job, JobError, JOB_CAPACITY, JOB_HEADER_LEN};

/// `midge_job::JOB_ADDR` as an address.
pub const JOB_ADDR: usize = midge_job::JOB_ADDR as usize;

/// The job the host's loader placed at `JOB_ADDR`: its header, parsed, and
/// the job area up to the workspace, checked (`Job::check`).
pub fn job_block() -> Result<(Job, &'static [u8]), JobError> {
    // SAFETY: the host's loader wrote the job block there before reset; the
    // firmware's own data and stack live below JOB_ADDR (memory.x).
    let head = unsafe { core::slice::from_raw_parts(JOB_ADDR as *const u8, JOB_HEADER_LEN) };
    let job = Job::parse_header(head)?;
    // `parse_header` checked workspace_offset <= JOB_CAPACITY.
    let block = unsafe { core::slice::from_raw_parts(JOB_ADDR as *const u8, job.workspace_offset) };
    job.check(block)?;
    Ok((job, block))
}

/// The `len`-byte workspace at the job's `workspace_offset`, when it fits
/// in the job area.
pub fn workspace(job: &Job, len: usize) -> Result<&'static mut [u8], JobError> {
    if !job.workspace_fits(len) {
        return Err(JobError::TooLarge(job.workspace_offset.saturating_add(len)));
    }
    // SAFETY: inside the job area, after the model and inputs (`check`),
    // and taken once per run.
    Ok(unsafe {
        core::slice::from_raw_parts_mut((JOB_ADDR + job.workspace_offset) as *mut u8, len)
    })
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
