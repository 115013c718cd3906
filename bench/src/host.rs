//! Host latency: per-layer and whole-model wall times over N runs after a
//! warm-up, through the runtime's `Observer`, with MACs and MAC/s. Reports
//! numbers only; nothing here asserts a time.

use std::time::Instant;

use midge_convert::compare::op_name;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::{Model, Observer, TensorRecord};
use serde::Serialize;

use crate::{Error, Result};

/// Median, min and max of one quantity over the runs, in nanoseconds.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize)]
pub struct Spread {
    pub median_ns: u64,
    pub min_ns: u64,
    pub max_ns: u64,
}

impl Spread {
    /// Median (lower middle for even counts), min and max of `v`.
    pub fn of(v: &mut [u64]) -> Spread {
        if v.is_empty() {
            return Spread::default();
        }
        v.sort_unstable();
        Spread {
            median_ns: v[(v.len() - 1) / 2],
            min_ns: v[0],
            max_ns: v[v.len() - 1],
        }
    }
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LayerLatency {
    pub index: usize,
    pub op: &'static str,
    pub macs: u64,
    pub time: Spread,
    /// MACs per second at the median time (0 when the layer has no MACs).
    pub macs_per_s: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct HostLatency {
    pub runs: usize,
    pub warmup: usize,
    pub layers: Vec<LayerLatency>,
    pub total: Spread,
    pub macs: u64,
    pub macs_per_s: f64,
    /// Output bytes for each input (from the last run).
    pub outputs: Vec<Vec<u8>>,
}

struct Stopwatch {
    start: Option<Instant>,
    ns: Vec<Vec<u64>>,
}

impl Observer for Stopwatch {
    fn before_layer(&mut self, _index: usize) {
        self.start = Some(Instant::now());
    }
    fn after_layer(&mut self, index: usize, _out: &TensorRecord, _bytes: &[u8]) {
        if let (Some(s), Some(v)) = (self.start.take(), self.ns.get_mut(index)) {
            v.push(s.elapsed().as_nanos() as u64);
        }
    }
}

fn rate(macs: u64, ns: u64) -> f64 {
    if ns == 0 {
        0.0
    } else {
        macs as f64 * 1e9 / ns as f64
    }
}

/// Runs every input `warmup` times untimed, then `runs` times timed.
pub fn host_latency(
    model_bytes: &[u8],
    inputs: &[Vec<u8>],
    runs: usize,
    warmup: usize,
) -> Result<HostLatency> {
    let aligned = AlignedBytes::from_slice(model_bytes);
    let model = Model::parse(&aligned)
        .map_err(|e| Error::runtime("model", "not a valid midge model", e))?;
    let mut ws = midge_convert::compare::host_workspace(&model, "model")?;
    let n = model.layer_count();
    let mut watch = Stopwatch {
        start: None,
        ns: vec![Vec::new(); n],
    };
    let mut totals = Vec::new();
    let mut outputs = vec![Vec::new(); inputs.len()];
    let run_err = |k: usize, e: midge_runtime::Error| {
        Error::runtime(format!("input {k}"), "the runtime failed", e)
    };
    for _ in 0..warmup {
        for (k, inp) in inputs.iter().enumerate() {
            model.run(inp, &mut ws).map_err(|e| run_err(k, e))?;
        }
    }
    for _ in 0..runs.max(1) {
        for (k, inp) in inputs.iter().enumerate() {
            let t = Instant::now();
            let out = model
                .run_observed(inp, &mut ws, &mut watch)
                .map_err(|e| run_err(k, e))?;
            totals.push(t.elapsed().as_nanos() as u64);
            outputs[k] = out.to_vec();
        }
    }
    let layers: Vec<LayerLatency> = (0..n)
        .map(|i| {
            let macs = model.layer_macs(i);
            let time = Spread::of(&mut watch.ns[i]);
            LayerLatency {
                index: i,
                op: model.layer(i).map_or("?", |l| op_name(l.header.op)),
                macs,
                time,
                macs_per_s: rate(macs, time.median_ns),
            }
        })
        .collect();
    let total = Spread::of(&mut totals);
    let macs = layers.iter().map(|l| l.macs).sum();
    Ok(HostLatency {
        runs: runs.max(1),
        warmup,
        layers,
        total,
        macs,
        macs_per_s: rate(macs, total.median_ns),
        outputs,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spread_median_min_max() {
        assert_eq!(
            Spread::of(&mut [5, 1, 9, 3]),
            Spread {
                median_ns: 3,
                min_ns: 1,
                max_ns: 9
            }
        );
        assert_eq!(Spread::of(&mut [7]).median_ns, 7);
        assert_eq!(Spread::of(&mut []), Spread::default());
    }
}
