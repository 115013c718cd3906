//! midge-bench: memory footprint, host and emulated Cortex-M latency,
//! target budgets and architecture sweeps, rendered as tables, JSON or HTML.
//! `midge report` and `midge sweep` (cli/) only parse flags and call `bench_report`/`sweep`.

pub mod budget;
pub mod c_firmware;
pub mod emulated;
pub mod firmware;
pub mod footprint;
pub mod host;
pub mod report;
pub mod sources;
pub mod sweep;
pub mod target;

use std::path::Path;
use std::time::Duration;

use crate::budget::BudgetOptions;
use crate::footprint::model_footprint;
use crate::target::Target;
use midge_convert::compare::{self, CompareOptions};
use midge_convert::description::Description;
use midge_convert::synth::SplitMix;
pub use midge_convert::{Error, Result};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::{ElemType, Model};

use crate::report::BenchReport;

/// Seeded inputs for `model`: random bytes for u8/int8 inputs, values of
/// magnitude 2^-5..2 for fp16 inputs (so no NaN or infinity arises).
pub fn synth_inputs(model: &Model, count: usize, seed: u64) -> Vec<Vec<u8>> {
    let t = model.input();
    let mut rng = SplitMix::new(seed);
    (0..count)
        .map(|_| match t.elem {
            ElemType::F16 => (0..t.shape.elems())
                .flat_map(|_| {
                    let r = rng.next_u64();
                    let sign = (r & 1) as u16;
                    let exp = 10 + ((r >> 1) % 6) as u16;
                    let mant = ((r >> 8) & 0x3ff) as u16;
                    ((sign << 15) | (exp << 10) | mant).to_le_bytes()
                })
                .collect(),
            _ => (0..t.byte_len())
                .map(|_| (rng.next_u64() >> 56) as u8)
                .collect(),
        })
        .collect()
}

/// What `bench_report` measures.
#[derive(Clone, Debug)]
pub struct ReportOptions {
    pub targets: Vec<Target>,
    /// Timed host runs per input (0: no host timing).
    pub runs: usize,
    pub warmup: usize,
    /// Seeded random inputs to run.
    pub inputs: usize,
    pub emulate: bool,
    pub measure_runtime: bool,
    /// Include a compare run (per-layer SQNR) when the path is a
    /// description with weights and validation images.
    pub compare: bool,
    pub seed: u64,
    pub timeout: Duration,
}

impl Default for ReportOptions {
    fn default() -> Self {
        ReportOptions {
            targets: Vec::new(),
            runs: 20,
            warmup: 3,
            inputs: 1,
            emulate: true,
            measure_runtime: true,
            compare: false,
            seed: crate::budget::DEFAULT_SEED,
            timeout: Duration::from_secs(300),
        }
    }
}

/// Footprint, host latency, budgets and emulated runs of a model file or a
/// description (quantized as `midge budget` does).
pub fn bench_report(path: &Path, opts: &ReportOptions) -> Result<BenchReport> {
    let bytes = crate::budget::model_bytes_for(path, opts.seed)?;
    let aligned = AlignedBytes::from_slice(&bytes);
    let model = Model::parse(&aligned)
        .map_err(|e| Error::new(path.display().to_string(), e.to_string()))?;
    let inputs = synth_inputs(&model, opts.inputs.max(1), opts.seed);
    let host = if opts.runs > 0 {
        Some(host::host_latency(&bytes, &inputs, opts.runs, opts.warmup)?)
    } else {
        None
    };
    let bopts = BudgetOptions {
        measure_runtime: opts.measure_runtime,
        emulate: opts.emulate,
        emulator_timeout: opts.timeout,
    };
    let mut budgets = Vec::new();
    let mut emulated = Vec::new();
    let mut not_emulated = Vec::new();
    for t in &opts.targets {
        budgets.push(crate::budget::evaluate(&bytes, t, &bopts)?.budget);
        if !opts.emulate {
            continue;
        }
        let run = match emulated::unavailable(t) {
            Some(why) => Err(why),
            None => emulated::emulated_latency(&bytes, &inputs, t, opts.timeout)
                .map_err(|e| e.to_string()),
        };
        match run {
            Ok(r) => emulated.push(r),
            Err(why) => {
                firmware::may_skip(&format!("emulated run on {}: {why}", t.name))?;
                not_emulated.push((t.name.clone(), why));
            }
        }
    }
    let sqnr = if opts.compare && is_description(path) {
        let desc = Description::load(path)?;
        let weighted = desc.weights.is_some() || desc.onnx.is_some();
        if weighted && desc.validation.is_some() && desc.calibration.is_some() {
            Some(compare::compare(path, &CompareOptions::default())?.layers)
        } else {
            None
        }
    } else {
        None
    };
    Ok(BenchReport {
        footprint: model_footprint(&model),
        budgets,
        host,
        emulated,
        not_emulated,
        sqnr,
    })
}

fn is_description(path: &Path) -> bool {
    path.extension().and_then(|e| e.to_str()) == Some("toml")
}
