//! Emulated latency: per-layer instructions executed by the harness firmware
//! on the target's QEMU machine, an estimate in cycles and milliseconds from
//! the profile's clock and CPI factor, and the bit-exactness check vs the host.

use std::time::Duration;

use crate::firmware::{self, EmulatedRun};
use crate::target::Target;
use midge_convert::compare::op_name;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;
use serde::Serialize;

use crate::{Error, Result};

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct EmulatedLayer {
    pub index: usize,
    pub op: &'static str,
    pub macs: u64,
    /// Instructions executed (SysTick ticks × calibrated instructions per tick).
    pub instructions: u64,
    /// Estimate: instructions × the profile's CPI factor.
    pub est_cycles: f64,
    /// Estimate at the profile's clock.
    pub est_ms: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct EmulatedReport {
    pub target: String,
    pub machine: String,
    pub triple: String,
    pub qemu: String,
    /// Ticks of the 40-NOP and 80-NOP loops; their difference should be 1 000.
    pub calibration: (u64, u64),
    pub calibration_ok: bool,
    pub instructions_per_tick: f64,
    pub layers: Vec<EmulatedLayer>,
    pub instructions: u64,
    pub est_ms: f64,
    pub stack_runtime: usize,
    pub stack_total: usize,
    /// Output bytes per input as the emulated core computed them.
    pub outputs: Vec<Vec<u8>>,
    /// Whether they equal the host's outputs for the same inputs.
    pub matches_host: bool,
}

/// Why the emulated run is not available on this machine, if it is not:
/// QEMU or the target's standard library missing, with the install command.
pub fn unavailable(target: &Target) -> Option<String> {
    if let Err(e) = firmware::qemu_version() {
        return Some(e.to_string());
    }
    firmware::rust_target_installed(&target.rust_target)
        .err()
        .map(|e| e.to_string())
}

/// Runs `inputs` on the emulated core of `target`; per-layer counts are from
/// input 0. Host outputs are computed with the same runtime for the check.
pub fn emulated_latency(
    model_bytes: &[u8],
    inputs: &[Vec<u8>],
    target: &Target,
    timeout: Duration,
) -> Result<EmulatedReport> {
    let aligned = AlignedBytes::from_slice(model_bytes);
    let model = Model::parse(&aligned)
        .map_err(|e| Error::runtime("model", "not a valid midge model", e))?;
    let build = firmware::build(&target.rust_target, model.op_set())?;
    let refs: Vec<&[u8]> = inputs.iter().map(|v| v.as_slice()).collect();
    let job = firmware::job_block(&aligned, &refs, model.workspace_len())?;
    let run: EmulatedRun = firmware::run(&target.emulator.machine, &build.harness, &job, timeout)?;
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    let mut host = Vec::new();
    for (k, inp) in inputs.iter().enumerate() {
        let out = model
            .run(inp, &mut ws)
            .map_err(|e| Error::runtime(format!("input {k}"), "the runtime failed", e))?;
        host.push(out.to_vec());
    }
    let instr = run.layer_instructions(0);
    let layers: Vec<EmulatedLayer> = instr
        .iter()
        .enumerate()
        .map(|(i, &n)| EmulatedLayer {
            index: i,
            op: model.layer(i).map_or("?", |l| op_name(l.header.op)),
            macs: model.layer_macs(i),
            instructions: n,
            est_cycles: target.estimate_cycles(n),
            est_ms: target.estimate_ms(n),
        })
        .collect();
    let instructions = instr.iter().sum();
    Ok(EmulatedReport {
        target: target.name.clone(),
        machine: run.machine.clone(),
        triple: target.rust_target.clone(),
        qemu: run.qemu.clone(),
        calibration: run.calibration,
        calibration_ok: run.calibration_ok(),
        instructions_per_tick: run.instructions_per_tick,
        layers,
        instructions,
        est_ms: target.estimate_ms(instructions),
        stack_runtime: run.stack_runtime,
        stack_total: run.stack_total,
        matches_host: run.outputs == host,
        outputs: run.outputs,
    })
}
