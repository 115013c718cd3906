//! Calibration by measurement: ranges from min/max, percentile and MSE are
//! fitted on three quarters of the calibration images, and each is scored
//! by the logit SQNR of the quantized model against the float reference on
//! the held-apart quarter; the best method for the whole model is kept, then
//! each tensor in turn takes another method's range when that scores better.

use std::path::PathBuf;

use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;
use serde::Serialize;

use crate::calibrate::{self, Range, RangeMethod};
use crate::compare::{host_workspace, sqnr_db};
use crate::error::{Error, Result};
use crate::float_ref;
use crate::graph::FloatGraph;
use crate::quantize::{dequantize_tensor, quantize_graph};

/// The methods tried, in this order (ties keep the earlier one).
pub const CANDIDATES: [RangeMethod; 4] = [
    RangeMethod::MinMax,
    RangeMethod::Percentile(99.99),
    RangeMethod::Percentile(99.9),
    RangeMethod::Mse,
];

/// A tensor takes another method only when that raises the held-apart
/// SQNR by more than this (smaller gains on a few images are noise).
pub const PER_TENSOR_MARGIN_DB: f64 = 0.5;

/// Every `HOLD`-th calibration image (indices ≡ HOLD − 1) is held apart.
pub const HOLD: usize = 4;

/// What the measurement chose.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CalibrationChoice {
    pub fitted_images: usize,
    pub held_images: usize,
    /// Logit SQNR on the held-apart images per candidate (whole model).
    pub per_method_db: Vec<(String, Option<f64>)>,
    pub model_method: String,
    /// Tensors (by the layer writing them) that took another method.
    pub per_tensor: Vec<(String, String)>,
    /// Held-apart logit SQNR of the kept choice (ranges fitted on the
    /// other images; the final ranges use the same methods on all images).
    pub final_db: Option<f64>,
}

/// Short name of a method for reports.
pub fn method_name(m: RangeMethod) -> String {
    match m {
        RangeMethod::MinMax => "minmax".into(),
        RangeMethod::Percentile(p) => format!("percentile {p}"),
        RangeMethod::Mse => "mse".into(),
    }
}

/// Logit SQNR (dB) of `graph` quantized with `ranges` on held images whose
/// float logits are given; `None` when exact.
fn score(
    graph: &FloatGraph,
    ranges: &[Range],
    held: &[&[u8]],
    float: &[Vec<f32>],
) -> Result<Option<f64>> {
    let q = quantize_graph(graph, ranges)?;
    let bytes = AlignedBytes::from_slice(&q.bytes);
    let place = graph.name.as_str();
    let model = Model::parse(&bytes)
        .map_err(|e| Error::new(place, format!("the runtime rejects the model: {e}")))?;
    let mut ws = host_workspace(&model, place)?;
    let out = model.output();
    let (mut signal, mut noise) = (0.0f64, 0.0f64);
    for (px, x) in held.iter().zip(float) {
        let y = model
            .run(px, &mut ws)
            .map_err(|e| Error::new(place, format!("the runtime failed: {e}")))?;
        for (a, b) in x.iter().zip(dequantize_tensor(&out, y)) {
            signal += (*a as f64).powi(2);
            noise += (*a as f64 - b as f64).powi(2);
        }
    }
    Ok(sqnr_db(signal, noise))
}

fn better(a: Option<f64>, b: Option<f64>) -> bool {
    a.unwrap_or(f64::INFINITY) > b.unwrap_or(f64::INFINITY)
}

/// Choose a method per tensor for `graph` (precisions as set; bias
/// correction is not part of the score) on calibration images `pixels`, and
/// return the ranges those methods give on all of them.
pub fn choose(
    graph: &FloatGraph,
    pixels: &[(PathBuf, Vec<u8>)],
    progress: bool,
) -> Result<(Vec<Range>, CalibrationChoice)> {
    if pixels.len() < HOLD {
        return Err(Error::new(
            "calibration",
            format!(
                "calibration by measurement needs at least {HOLD} images (one in {HOLD} is held apart), found {}",
                pixels.len()
            ),
        ));
    }
    let (fit, held): (Vec<_>, Vec<_>) = pixels
        .iter()
        .enumerate()
        .partition(|(i, _)| i % HOLD != HOLD - 1);
    let fit: Vec<&(PathBuf, Vec<u8>)> = fit.into_iter().map(|(_, p)| p).collect();
    let held: Vec<&(PathBuf, Vec<u8>)> = held.into_iter().map(|(_, p)| p).collect();
    let stats = calibrate::collect(fit.len(), RangeMethod::Mse, progress, |i| {
        float_ref::run_finite(graph, &fit[i].1).map_err(|e| e.error(&fit[i].0))
    })?;
    let float: Vec<Vec<f32>> = held
        .iter()
        .map(|p| {
            float_ref::run_finite(graph, &p.1)
                .map(|mut t| t.pop().unwrap_or_default())
                .map_err(|e| e.error(&p.0))
        })
        .collect::<Result<_>>()?;
    let held_px: Vec<&[u8]> = held.iter().map(|p| p.1.as_slice()).collect();
    let per: Vec<Vec<Range>> = CANDIDATES
        .iter()
        .map(|&m| stats.iter().map(|s| s.range(m)).collect())
        .collect();
    let mut per_method_db = Vec::new();
    let mut best = 0;
    let mut best_db = None;
    for (k, ranges) in per.iter().enumerate() {
        let db = score(graph, ranges, &held_px, &float)?;
        per_method_db.push((method_name(CANDIDATES[k]), db));
        if k == 0 || better(db, best_db) {
            best = k;
            best_db = db;
        }
    }
    let mut ranges = per[best].clone();
    let mut choice = vec![best; ranges.len()];
    let mut per_tensor = Vec::new();
    for t in 1..ranges.len() {
        let mut pick = None;
        for (k, r) in per.iter().enumerate() {
            if r[t] == ranges[t] {
                continue;
            }
            let mut trial = ranges.clone();
            trial[t] = r[t];
            let db = score(graph, &trial, &held_px, &float)?;
            if better(db.map(|v| v - PER_TENSOR_MARGIN_DB), best_db) {
                best_db = db;
                pick = Some((k, r[t]));
            }
        }
        if let Some((k, r)) = pick {
            ranges[t] = r;
            choice[t] = k;
            per_tensor.push((graph.nodes[t - 1].name.clone(), method_name(CANDIDATES[k])));
        }
    }
    // The kept methods, applied to statistics of all the images.
    let all = calibrate::collect(pixels.len(), RangeMethod::Mse, progress, |i| {
        float_ref::run_finite(graph, &pixels[i].1).map_err(|e| e.error(&pixels[i].0))
    })?;
    let ranges = all
        .iter()
        .zip(&choice)
        .map(|(s, &k)| s.range(CANDIDATES[k]))
        .collect();
    Ok((
        ranges,
        CalibrationChoice {
            fitted_images: fit.len(),
            held_images: held.len(),
            per_method_db,
            model_method: method_name(CANDIDATES[best]),
            per_tensor,
            final_db: best_db,
        },
    ))
}

fn db(v: Option<f64>) -> String {
    v.map_or("exact".into(), |v| format!("{v:.2} dB"))
}

impl CalibrationChoice {
    /// The report lines (first line continues a "calibration: " prefix).
    pub fn to_text(&self) -> String {
        let mut s = format!(
            "range method by measurement: {} (logit SQNR on {} held-apart images, ranges fitted on {}):\n",
            self.model_method, self.held_images, self.fitted_images
        );
        for (m, v) in &self.per_method_db {
            s += &format!("  {m:<16} {}\n", db(*v));
        }
        for (t, m) in &self.per_tensor {
            s += &format!("  tensor of {} takes {m}\n", crate::error::escape(t));
        }
        s += &format!("  kept: {}\n", db(self.final_db));
        s
    }
}
