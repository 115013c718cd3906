//! Per-layer sensitivity to int8: for each folded layer, the top-1 drop and
//! output SQNR when only that layer is int8 (the rest fp16) and when only
//! that layer stays fp16 (the rest int8), each measured by running the
//! runtime on the labelled images against the float32 reference.
//!
//! "Float" for the other layers is the runtime's fp16 path: that is what a
//! mixed model can really run on the device, so these are the numbers the
//! mixed-precision choice (`crate::mixed`) acts on.

use std::fmt::Write as _;
use std::path::Path;

use serde::Serialize;

use crate::compare::{evaluate, Report};
use crate::error::{escape, Result};
use crate::graph::Precision;
use crate::quantize::Conversion;

/// One layer's measurements.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SensitivityRow {
    pub layer: String,
    pub op: String,
    /// Only this layer int8, every other layer fp16.
    pub alone_int8_drop_pp: f64,
    pub alone_int8_sqnr_db: Option<f64>,
    /// Every layer int8 except this one (fp16).
    pub kept_fp16_drop_pp: f64,
    pub kept_fp16_sqnr_db: Option<f64>,
}

/// The sensitivity table, most sensitive layer first (largest gain from
/// keeping it in fp16, then largest drop when it alone is int8).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Sensitivity {
    pub model: String,
    pub images: usize,
    pub all_int8_drop_pp: f64,
    pub all_int8_sqnr_db: Option<f64>,
    pub all_fp16_drop_pp: f64,
    pub rows: Vec<SensitivityRow>,
}

/// Output (logit) SQNR of a report: its last runtime layer's.
pub fn output_sqnr(r: &Report) -> Option<f64> {
    r.layers.last().and_then(|l| l.sqnr_db)
}

/// Evaluate `conv` with the given per-node precisions on `dir`.
pub fn evaluate_mix(conv: &Conversion, precisions: &[Precision], dir: &Path) -> Result<Report> {
    evaluate(&conv.with_precisions(precisions)?, dir, false, false)
}

/// Node indices of the named layers (all when `only` is empty); an unknown
/// name is bad input naming it and the folded layers there are.
pub fn select(conv: &Conversion, only: &[String]) -> Result<Vec<usize>> {
    let names: Vec<&str> = conv.graph.nodes.iter().map(|n| n.name.as_str()).collect();
    if only.is_empty() {
        return Ok((0..names.len()).collect());
    }
    only.iter()
        .map(|l| {
            names.iter().position(|n| n == l).ok_or_else(|| {
                crate::Error::new(
                    "--layers",
                    format!(
                        "no folded layer {} in {}; expected one of: {}",
                        escape(l),
                        escape(&conv.graph.name),
                        names
                            .iter()
                            .map(|n| escape(n))
                            .collect::<Vec<_>>()
                            .join(", ")
                    ),
                )
            })
        })
        .collect()
}

/// Measure the folded layers `which` (node indices, see [`select`]) of
/// `conv` on the labelled folder `dir` (two model evaluations per layer,
/// plus all-int8 and all-fp16). With `skip_rows_above`, no layer is
/// measured when all-fp16 already drops more than that (no mix can meet it).
pub fn measure(
    conv: &Conversion,
    dir: &Path,
    which: &[usize],
    skip_rows_above: Option<f64>,
) -> Result<Sensitivity> {
    let n = conv.graph.nodes.len();
    let all = |p: Precision| vec![p; n];
    let int8 = evaluate_mix(conv, &all(Precision::Int8), dir)?;
    let fp16 = evaluate_mix(conv, &all(Precision::Fp16), dir)?;
    let which = match skip_rows_above {
        Some(bound) if fp16.drop_pp > bound => &[],
        _ => which,
    };
    let mut rows = Vec::with_capacity(which.len());
    for &k in which {
        let node = &conv.graph.nodes[k];
        let mut alone = all(Precision::Fp16);
        alone[k] = Precision::Int8;
        let a = evaluate_mix(conv, &alone, dir)?;
        let mut kept = all(Precision::Int8);
        kept[k] = Precision::Fp16;
        let b = evaluate_mix(conv, &kept, dir)?;
        rows.push(SensitivityRow {
            layer: node.name.clone(),
            op: node.op.name().to_string(),
            alone_int8_drop_pp: a.drop_pp,
            alone_int8_sqnr_db: output_sqnr(&a),
            kept_fp16_drop_pp: b.drop_pp,
            kept_fp16_sqnr_db: output_sqnr(&b),
        });
    }
    rows.sort_by(|x, y| {
        x.kept_fp16_drop_pp
            .total_cmp(&y.kept_fp16_drop_pp)
            .then(y.alone_int8_drop_pp.total_cmp(&x.alone_int8_drop_pp))
            .then(
                x.kept_fp16_sqnr_db
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&y.kept_fp16_sqnr_db.unwrap_or(f64::INFINITY))
                    .reverse(),
            )
    });
    Ok(Sensitivity {
        model: conv.graph.name.clone(),
        images: int8.images,
        all_int8_drop_pp: int8.drop_pp,
        all_int8_sqnr_db: output_sqnr(&int8),
        all_fp16_drop_pp: fp16.drop_pp,
        rows,
    })
}

fn db(v: Option<f64>) -> String {
    v.map_or("exact".into(), |v| format!("{v:.1}"))
}

impl Sensitivity {
    /// The terminal table.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "per-layer sensitivity of {} ({} images; drops in pp against the float32 reference, SQNR of the logits)",
            escape(&self.model),
            self.images
        );
        let _ = writeln!(
            s,
            "  all int8: drop {:.2} pp, SQNR {} dB; all fp16: drop {:.2} pp",
            self.all_int8_drop_pp,
            db(self.all_int8_sqnr_db),
            self.all_fp16_drop_pp
        );
        let _ = writeln!(
            s,
            "  {:<24} {:<15} {:>14} {:>9} {:>14} {:>9}",
            "layer", "op", "only int8 pp", "dB", "only fp16 pp", "dB"
        );
        for r in &self.rows {
            let _ = writeln!(
                s,
                "  {:<24} {:<15} {:>14.2} {:>9} {:>14.2} {:>9}",
                escape(&r.layer).chars().take(24).collect::<String>(),
                r.op,
                r.alone_int8_drop_pp,
                db(r.alone_int8_sqnr_db),
                r.kept_fp16_drop_pp,
                db(r.kept_fp16_sqnr_db)
            );
        }
        s
    }
}
