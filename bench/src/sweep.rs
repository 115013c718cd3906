//! Architecture sweeps: one description scaled in width and input
//! resolution, each variant quantized with synthetic weights and budgeted on
//! every target (flash, peak RAM, emulated instructions, estimated latency).

use crate::budget::{self, BudgetOptions};
use crate::footprint::model_footprint;
use crate::target::Target;
use midge_convert::description::Description;
use midge_convert::synth;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;
use serde::Serialize;

use crate::{Error, Result};

/// One variant on one target.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SweepCell {
    pub target: String,
    pub flash_bytes: u64,
    pub ram_bytes: u64,
    /// The target's limits (total − reserved).
    pub flash_limit: u64,
    pub ram_limit: u64,
    pub fits: bool,
    /// Every bill item was measured.
    pub complete: bool,
    pub instructions: Option<u64>,
    pub est_ms: Option<f64>,
}

/// One width × resolution variant.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SweepRow {
    pub width: f32,
    /// Input height and width (the description's own when not swept).
    pub input_hw: (u16, u16),
    /// Why the variant could not be built (e.g. a kernel larger than a
    /// shrunken input); the other fields are then zero.
    pub error: Option<String>,
    pub params: u64,
    pub macs: u64,
    pub model_bytes: usize,
    pub workspace_len: usize,
    pub cells: Vec<SweepCell>,
}

/// Every width × input size (height, width; none given: the description's
/// own size) on every target. The variants are built (synthetic weights,
/// calibration, quantization) in parallel on the current rayon pool, rows in
/// the order of `widths` × `resolutions`; their budgets, which may build
/// firmware and run the emulator, are evaluated one after another.
pub fn sweep(
    desc: &Description,
    widths: &[f32],
    resolutions: &[(u16, u16)],
    targets: &[Target],
    opts: &BudgetOptions,
    seed: u64,
) -> Result<Vec<SweepRow>> {
    let sizes: Vec<Option<(u16, u16)>> = if resolutions.is_empty() {
        vec![None]
    } else {
        resolutions.iter().map(|&r| Some(r)).collect()
    };
    let variants: Vec<(f32, Option<(u16, u16)>)> = widths
        .iter()
        .flat_map(|&w| sizes.iter().map(move |&hw| (w, hw)))
        .collect();
    let built = midge_convert::parallel::map_ordered(
        variants.len(),
        || (),
        |_, i| build_variant(desc, variants[i].0, variants[i].1, seed),
    );
    let mut rows = Vec::with_capacity(built.len());
    for b in built {
        let (mut row, bytes) = b?;
        if let Some(bytes) = bytes {
            for t in targets {
                let ev = budget::evaluate(&bytes, t, opts)?;
                row.cells.push(SweepCell {
                    target: t.name.clone(),
                    flash_bytes: ev.budget.flash_bytes,
                    ram_bytes: ev.budget.ram_bytes,
                    flash_limit: ev.budget.flash_limit,
                    ram_limit: ev.budget.ram_limit,
                    fits: ev.budget.fits,
                    complete: ev.budget.complete,
                    instructions: ev.budget.instructions,
                    est_ms: ev.budget.estimated_ms,
                });
            }
        }
        rows.push(row);
    }
    Ok(rows)
}

/// One variant's row without its target cells, and its model file (`None`
/// when the variant could not be built: `row.error` says why).
fn build_variant(
    desc: &Description,
    w: f32,
    hw: Option<(u16, u16)>,
    seed: u64,
) -> Result<(SweepRow, Option<Vec<u8>>)> {
    let variant = desc.scaled(w, hw);
    let mut row = SweepRow {
        width: w,
        input_hw: hw.unwrap_or((desc.input.height, desc.input.width)),
        error: None,
        params: 0,
        macs: 0,
        model_bytes: 0,
        workspace_len: 0,
        cells: Vec::new(),
    };
    let bytes = match synth::synth_quantize(&variant, seed) {
        Ok(q) => q.bytes,
        Err(e) => {
            row.error = Some(e.to_string());
            return Ok((row, None));
        }
    };
    let aligned = AlignedBytes::from_slice(&bytes);
    let model = Model::parse(&aligned)
        .map_err(|e| Error::runtime("sweep", "not a valid midge model", e))?;
    let fp = model_footprint(&model);
    row.params = fp.params;
    row.macs = fp.macs;
    row.model_bytes = fp.sections.total;
    row.workspace_len = fp.workspace_len;
    Ok((row, Some(bytes)))
}

/// An input size as written on the command line: `32` (square) or `49x10`
/// (height × width).
pub fn parse_resolution(text: &str) -> Result<(u16, u16)> {
    let bad = || {
        Error::new(
            format!("--resolution {text}"),
            "expected a size like 32 or 49x10 (height x width, 1..=65535)",
        )
    };
    let num = |s: &str| {
        s.trim()
            .parse::<u16>()
            .ok()
            .filter(|&v| v > 0)
            .ok_or_else(bad)
    };
    match text.split_once(['x', '×']) {
        Some((h, w)) => Ok((num(h)?, num(w)?)),
        None => num(text).map(|v| (v, v)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn resolutions_parse() {
        assert_eq!(parse_resolution("32").unwrap(), (32, 32));
        assert_eq!(parse_resolution("49x10").unwrap(), (49, 10));
        assert!(parse_resolution("0").is_err());
        assert!(parse_resolution("4x")
            .unwrap_err()
            .to_string()
            .contains("49x10"));
    }
}
