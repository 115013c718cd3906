//! The bench harness: parses the model QEMU's loader placed at `JOB_ADDR`,
//! runs every input with per-layer SysTick readings, measures the stack
//! high-water mark by painting, and prints the line protocol that
//! `midge_bench::emulated` parses over semihosting stdout.
#![no_std]
#![no_main]

use core::fmt::Write;
use cortex_m_rt::{entry, exception};
use cortex_m_semihosting::{debug, hio};
use midge_firmware::*;
use midge_runtime::{Model, Observer, TensorRecord};
use panic_halt as _;

/// Layers the harness keeps readings for; more are reported as an error.
const MAX_LAYERS: usize = 512;

struct Clock {
    before: u64,
    ticks: [u64; MAX_LAYERS],
}

impl Observer for Clock {
    fn before_layer(&mut self, _index: usize) {
        self.before = ticks();
    }
    fn after_layer(&mut self, index: usize, _out: &TensorRecord, _bytes: &[u8]) {
        let now = ticks();
        if let Some(slot) = self.ticks.get_mut(index) {
            *slot = now.wrapping_sub(self.before);
        }
    }
}

#[exception]
fn SysTick() {
    clock_wrapped();
}

/// Ends the emulation with `status` (QEMU exits on the semihosting call).
fn halt(status: debug::ExitStatus) -> ! {
    debug::exit(status);
    loop {
        cortex_m::asm::wfi();
    }
}

fn fail(out: &mut hio::HostStream, what: core::fmt::Arguments) -> ! {
    let _ = writeln!(out, "error {what}");
    halt(debug::EXIT_FAILURE)
}

fn hex_line(out: &mut hio::HostStream, bytes: &[u8]) {
    const HEX: &[u8; 16] = b"0123456789abcdef";
    let mut buf = [0u8; 128];
    for chunk in bytes.chunks(64) {
        for (i, b) in chunk.iter().enumerate() {
            buf[2 * i] = HEX[(b >> 4) as usize];
            buf[2 * i + 1] = HEX[(b & 15) as usize];
        }
        let _ = out.write_all(&buf[..2 * chunk.len()]);
    }
    let _ = out.write_all(b"\n");
}

#[entry]
fn main() -> ! {
    let mut out = match hio::hstdout() {
        Ok(o) => o,
        Err(_) => halt(debug::EXIT_FAILURE),
    };
    let mut cp = match cortex_m::Peripherals::take() {
        Some(p) => p,
        None => fail(&mut out, format_args!("core peripherals taken twice")),
    };
    clock_start(&mut cp.SYST);
    let _ = writeln!(out, "harness 1");

    // Calibration: the two loops differ by exactly 40 000 NOPs.
    let a = ticks_of(|| nops40(1000));
    let b = ticks_of(|| nops80(1000));
    let _ = writeln!(out, "calibration a={a} b={b}");

    let (job, block) = match job_block() {
        Ok(j) => j,
        Err(e) => fail(&mut out, format_args!("{e}")),
    };
    let model = match Model::<OPS>::parse_with_ops(job.model(block).unwrap_or(&[])) {
        Ok(m) => m,
        Err(e) => fail(&mut out, format_args!("model: {e}")),
    };
    let ws_len = model.workspace_len();
    let ws = match workspace(&job, ws_len) {
        Ok(ws) => ws,
        Err(e) => fail(&mut out, format_args!("{e}")),
    };
    let layers = model.layer_count();
    if layers > MAX_LAYERS {
        fail(
            &mut out,
            format_args!("more layers than the harness keeps readings for"),
        );
    }
    let _ = writeln!(out, "model layers={layers} workspace={ws_len}");

    let mut clock = Clock {
        before: 0,
        ticks: [0; MAX_LAYERS],
    };
    let sp = paint_stack();
    for k in 0..job.input_count {
        let result = model.run_observed(job.input(block, k).unwrap_or(&[]), ws, &mut clock);
        let output = match result {
            Ok(o) => o,
            Err(e) => fail(&mut out, format_args!("run {k}: {e}")),
        };
        let _ = writeln!(out, "run {k}");
        for (i, t) in clock.ticks[..layers].iter().enumerate() {
            let _ = writeln!(out, "layer {i} {t}");
        }
        let _ = write!(out, "output {k} ");
        hex_line(&mut out, output);
    }
    let low = lowest_touched();
    let (_, top) = stack_bounds();
    let _ = writeln!(
        out,
        "stack total={} runtime={}",
        top.saturating_sub(low),
        sp.saturating_sub(low)
    );
    let _ = writeln!(out, "end");
    halt(debug::EXIT_SUCCESS)
}
