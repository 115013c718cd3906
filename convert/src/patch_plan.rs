//! Choosing a patch plan (Lin et al., NeurIPS 2021, patch-based inference): the split layer and tile
//! grid of a model's first stage that minimise planned peak workspace subject to a bound on
//! the extra MACs the recomputed halos cost; the region arithmetic is the runtime's (`patch`).

use midge_runtime::patch::{PatchPlan, Patched};
use midge_runtime::Model;

use crate::plan::{self, Lifetime};

/// Largest tile count per axis tried.
pub const MAX_TILES: u16 = 8;

/// One chosen plan and what it buys.
#[derive(Clone, Debug, PartialEq)]
pub struct Choice {
    /// Stage `0..=last`, cut into `rows`×`cols` tiles of layer `last`'s output.
    pub last: u16,
    pub rows: u16,
    pub cols: u16,
    /// Bytes of each tile slot.
    pub slot_len: [usize; 2],
    /// Planned workspace with the stage patched (slots, stage output, the rest).
    pub workspace_len: usize,
    /// The layer-by-layer lower bound of the unpatched model.
    pub layer_by_layer_bound: usize,
    /// MACs of one patched inference and of one layer-by-layer inference.
    pub macs: u64,
    pub base_macs: u64,
}

impl Choice {
    /// Extra MACs in percent of the layer-by-layer run.
    pub fn extra_macs_pct(&self) -> f64 {
        (self.macs as f64 - self.base_macs as f64) * 100.0 / self.base_macs.max(1) as f64
    }
}

/// Lifetimes of the model's tensors, layer by layer.
fn model_lifetimes(m: &Model) -> Vec<Option<Lifetime>> {
    let sizes: Vec<usize> = (0..m.tensor_count())
        .map(|i| m.tensor(i).map_or(0, |t| t.byte_len()))
        .collect();
    let headers: Vec<_> = (0..m.layer_count())
        .filter_map(|i| m.layer(i).map(|l| l.header))
        .collect();
    plan::lifetimes(&sizes, &plan::steps(&headers), m.output_id(), &[0])
}

/// Lifetimes with stage `0..=last` patched: inner tensors gone, the stage output written
/// from the first tile on, and the two slots live through the whole stage.
fn patched_lifetimes(m: &Model, last: usize, slot_len: [usize; 2]) -> Vec<Option<Lifetime>> {
    let mut lt = model_lifetimes(m);
    for i in 0..=last {
        let Some(out) = m.layer(i).map(|l| l.header.output as usize) else {
            continue;
        };
        if i < last {
            lt[out] = None;
        } else if let Some(l) = lt[out].as_mut() {
            l.first = 0;
        }
    }
    for bytes in slot_len {
        lt.push(Some(Lifetime {
            bytes,
            first: 0,
            last,
        }));
    }
    lt
}

/// The plan with the smallest planned workspace whose extra MACs stay within
/// `max_extra_pct` percent, or `None` when no stage beats the layer-by-layer bound.
pub fn choose(m: &Model, max_extra_pct: f64) -> Option<Choice> {
    let bound = plan::lower_bound(&model_lifetimes(m));
    let base_macs: u64 = (0..m.layer_count()).map(|i| m.layer_macs(i)).sum();
    let mut best: Option<(usize, u64, Choice)> = None;
    for last in 0..m.layer_count().min(midge_runtime::patch::MAX_STAGE) {
        let out = m.tensor(m.layer(last)?.header.output as usize)?.shape;
        for rows in 1..=out.h.min(MAX_TILES) {
            for cols in 1..=out.w.min(MAX_TILES) {
                // Slots far apart and an open workspace: only the stage's shape is checked.
                let probe = PatchPlan {
                    first: 0,
                    last: last as u16,
                    rows,
                    cols,
                    slots: [1 << 29, 1 << 30],
                    workspace_len: u32::MAX,
                };
                let Ok(p) = Patched::new(m, probe) else {
                    continue;
                };
                let macs = p.macs();
                let c = Choice {
                    last: last as u16,
                    rows,
                    cols,
                    slot_len: p.slot_len(),
                    workspace_len: 0,
                    layer_by_layer_bound: bound,
                    macs,
                    base_macs,
                };
                if c.extra_macs_pct() > max_extra_pct {
                    continue;
                }
                let need = plan::lower_bound(&patched_lifetimes(m, last, c.slot_len));
                if best.as_ref().is_none_or(|b| (need, macs) < (b.0, b.1)) {
                    best = Some((need, macs, c));
                }
            }
        }
    }
    let (need, _, mut c) = best?;
    if need >= bound {
        return None;
    }
    c.workspace_len = plan::place(&patched_lifetimes(m, c.last as usize, c.slot_len)).workspace_len;
    Some(c)
}
