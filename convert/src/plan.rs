//! Memory planning: places every activation tensor of a layer sequence in one
//! workspace, reusing bytes of tensors whose lifetimes do not meet. Greedy by
//! size with best-fit offsets, then a bounded search for a placement inside
//! the lower bound when greedy misses it; also reports that lower bound.

/// Offsets inside the workspace are multiples of the layout's alignment.
pub use midge_runtime::format::ALIGN;

/// One tensor to place: its byte length and the inclusive range of layer
/// steps during which it must keep its bytes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Lifetime {
    pub bytes: usize,
    /// The step (layer index) that writes the tensor.
    pub first: usize,
    /// The last step that reads it (or the final step, for the model output).
    pub last: usize,
}

impl Lifetime {
    /// Whether two tensors are live at a common step. Inclusive ranges make a
    /// layer's output (first = k) meet every input it reads (last ≥ k).
    pub fn meets(&self, other: &Lifetime) -> bool {
        self.first <= other.last && other.first <= self.last
    }
}

/// The result of planning.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Plan {
    /// Byte offset of each tensor; `None` for tensors not in the workspace
    /// (the model input, tensors nobody writes).
    pub offsets: Vec<Option<usize>>,
    /// Lifetimes used, per tensor (same indexing as `offsets`).
    pub lifetimes: Vec<Option<Lifetime>>,
    /// Workspace length: the largest end offset of any placed tensor.
    pub workspace_len: usize,
    /// Max over steps of the summed byte length of the tensors live at that
    /// step: no placement can use fewer bytes.
    pub lower_bound: usize,
}

/// Lifetimes of the tensors of a layer sequence. `layers[k]` is (inputs,
/// output) of step k; tensor ids index `sizes`. Tensors in `external` (the
/// model input) get no lifetime. The `output` tensor lives to the last step.
/// The (inputs, output) tensor ids of each layer, the step list `lifetimes`
/// and `plan_layers` take, read from runtime layer headers.
pub fn steps<'a>(
    headers: impl IntoIterator<Item = &'a midge_runtime::repr::LayerHeader>,
) -> Vec<(Vec<usize>, usize)> {
    headers
        .into_iter()
        .map(|h| {
            let ins = h.inputs[..h.op.arity()]
                .iter()
                .map(|&t| t as usize)
                .collect();
            (ins, h.output as usize)
        })
        .collect()
}

pub fn lifetimes(
    sizes: &[usize],
    layers: &[(Vec<usize>, usize)],
    output: usize,
    external: &[usize],
) -> Vec<Option<Lifetime>> {
    let mut out: Vec<Option<Lifetime>> = vec![None; sizes.len()];
    for (k, (_, o)) in layers.iter().enumerate() {
        if *o < sizes.len() && !external.contains(o) && out[*o].is_none() {
            out[*o] = Some(Lifetime {
                bytes: sizes[*o],
                first: k,
                last: k,
            });
        }
    }
    for (k, (ins, _)) in layers.iter().enumerate() {
        for &i in ins {
            if let Some(Some(l)) = out.get_mut(i) {
                l.last = l.last.max(k);
            }
        }
    }
    if let Some(Some(l)) = out.get_mut(output) {
        l.last = layers.len().saturating_sub(1).max(l.first);
    }
    out
}

/// Plan a layer sequence (see `lifetimes`) and place it.
pub fn plan_layers(
    sizes: &[usize],
    layers: &[(Vec<usize>, usize)],
    output: usize,
    external: &[usize],
) -> Plan {
    place(&lifetimes(sizes, layers, output, external))
}

fn align_up(v: usize) -> usize {
    v.div_ceil(ALIGN) * ALIGN
}

/// Place tensors with the given lifetimes: greedy by size (`place_greedy`);
/// when that leaves the workspace above the lower bound, a bounded
/// depth-first search (`place_within`) looks for a placement whose every
/// tensor ends inside the bound, and the smaller of the two is kept.
pub fn place(lifetimes: &[Option<Lifetime>]) -> Plan {
    let (mut offsets, mut workspace_len) = place_greedy(lifetimes);
    let bound = lower_bound(lifetimes);
    if workspace_len > bound {
        // Aligned offsets may need the bound rounded up to `ALIGN`.
        for cap in [bound, align_up(bound)] {
            if cap >= workspace_len {
                break;
            }
            if let Some(found) = place_within(lifetimes, cap, SEARCH_NODES) {
                workspace_len = found
                    .iter()
                    .zip(lifetimes)
                    .filter_map(|(o, l)| Some((*o)? + (*l)?.bytes))
                    .max()
                    .unwrap_or(0);
                offsets = found;
                break;
            }
        }
    }
    Plan {
        offsets,
        lifetimes: lifetimes.to_vec(),
        workspace_len,
        lower_bound: bound,
    }
}

/// Placement attempts `place_within` makes before giving up (keeps the
/// converter's run time bounded on any graph).
pub const SEARCH_NODES: usize = 200_000;
/// Most tensors `place_within` searches over (its recursion is one level
/// per tensor).
pub const SEARCH_TENSORS: usize = 4096;

/// A placement with every tensor inside `[0, cap)`, or `None` when the
/// search finds none within `nodes` attempts. Tensors are taken in the
/// order they are written (larger first among those written at the same
/// step); each tries the lowest and the highest free aligned offset among
/// the tensors it meets, backtracking on a dead end. Two ends suffice for
/// a chain whose live set is an input and an output: each new output goes
/// to the end its input does not occupy.
pub fn place_within(
    lifetimes: &[Option<Lifetime>],
    cap: usize,
    nodes: usize,
) -> Option<Vec<Option<usize>>> {
    let mut order: Vec<(usize, Lifetime)> = lifetimes
        .iter()
        .enumerate()
        .filter_map(|(i, l)| Some((i, (*l)?)))
        .collect();
    order.sort_by(|(a, la), (b, lb)| {
        la.first
            .cmp(&lb.first)
            .then(lb.bytes.cmp(&la.bytes))
            .then(a.cmp(b))
    });
    if order.len() > SEARCH_TENSORS || order.iter().any(|(_, l)| l.bytes > cap) {
        return None;
    }
    let mut offsets: Vec<Option<usize>> = vec![None; lifetimes.len()];
    let mut budget = nodes;
    if search(&order, 0, cap, &mut offsets, &mut budget) {
        Some(offsets)
    } else {
        None
    }
}

fn search(
    order: &[(usize, Lifetime)],
    at: usize,
    cap: usize,
    offsets: &mut [Option<usize>],
    budget: &mut usize,
) -> bool {
    let Some(&(t, me)) = order.get(at) else {
        return true;
    };
    if *budget == 0 {
        return false;
    }
    *budget -= 1;
    let mut busy: Vec<(usize, usize)> = order[..at]
        .iter()
        .filter(|(_, l)| l.meets(&me) && l.bytes > 0)
        .filter_map(|&(p, l)| Some((offsets[p]?, offsets[p]? + l.bytes)))
        .collect();
    busy.sort_unstable();
    let fits =
        |o: usize| o + me.bytes <= cap && busy.iter().all(|&(s, e)| o + me.bytes <= s || o >= e);
    // Lowest free offset: 0 or the end of a busy interval.
    let low = std::iter::once(0)
        .chain(busy.iter().map(|&(_, e)| align_up(e)))
        .filter(|&o| fits(o))
        .min();
    // Highest free offset: the cap or the start of a busy interval, minus the size.
    let high = std::iter::once(cap)
        .chain(busy.iter().map(|&(s, _)| s))
        .filter_map(|end| end.checked_sub(me.bytes))
        .map(|o| o / ALIGN * ALIGN)
        .filter(|&o| fits(o))
        .max();
    let mut tried = None;
    for o in [low, high].into_iter().flatten() {
        if tried == Some(o) {
            continue;
        }
        tried = Some(o);
        offsets[t] = Some(o);
        if search(order, at + 1, cap, offsets, budget) {
            return true;
        }
    }
    offsets[t] = None;
    false
}

/// Greedy by size (Pisarchyk & Lee,
/// "Efficient Memory Management for Deep Neural Net Inference", 2020, the
/// greedy-by-size offset strategy): largest first (ties by index, so the
/// result is deterministic); each goes into the smallest gap between
/// already-placed, lifetime-meeting tensors that holds it, else after the
/// last of them. Offsets are multiples of `ALIGN`. Returns the offsets and
/// the workspace length.
pub fn place_greedy(lifetimes: &[Option<Lifetime>]) -> (Vec<Option<usize>>, usize) {
    let mut order: Vec<(usize, Lifetime)> = lifetimes
        .iter()
        .enumerate()
        .filter_map(|(i, l)| Some((i, (*l)?)))
        .collect();
    order.sort_by(|(a, la), (b, lb)| lb.bytes.cmp(&la.bytes).then(a.cmp(b)));
    let steps = order.iter().map(|(_, l)| l.last + 1).max().unwrap_or(0);
    // Placed tensors live at each step: the tensors a new one meets are
    // those listed at its steps, so placing costs the summed lifetimes,
    // not the tensor count squared.
    let mut at_step: Vec<Vec<usize>> = vec![Vec::new(); steps];
    let mut offsets: Vec<Option<usize>> = vec![None; lifetimes.len()];
    let mut workspace_len = 0usize;
    for &(t, me) in &order {
        let mut meeting: Vec<usize> = at_step[me.first..=me.last].concat();
        meeting.sort_unstable();
        meeting.dedup();
        // Occupied intervals of meeting tensors, by offset.
        let mut busy: Vec<(usize, usize)> = meeting
            .iter()
            .filter_map(|&p| Some((offsets[p]?, offsets[p]? + lifetimes[p]?.bytes)))
            .collect();
        busy.sort_unstable();
        let mut best: Option<(usize, usize)> = None; // (gap size, offset)
        let mut cursor = 0usize;
        for &(start, end) in &busy {
            let at = align_up(cursor);
            if start >= at && start - at >= me.bytes {
                let gap = start - at;
                if best.is_none_or(|(g, _)| gap < g) {
                    best = Some((gap, at));
                }
            }
            cursor = cursor.max(end);
        }
        let offset = match best {
            Some((_, at)) => at,
            None => align_up(cursor),
        };
        offsets[t] = Some(offset);
        workspace_len = workspace_len.max(offset + me.bytes);
        for s in &mut at_step[me.first..=me.last] {
            s.push(t);
        }
    }
    (offsets, workspace_len)
}

/// Summed bytes of the tensors live at each step (index = step), from one
/// sweep over the lifetimes' starts and ends.
pub fn live_bytes(lifetimes: &[Option<Lifetime>]) -> Vec<usize> {
    let steps = lifetimes
        .iter()
        .flatten()
        .map(|l| l.last + 1)
        .max()
        .unwrap_or(0);
    let mut delta = vec![0i128; steps + 1];
    for l in lifetimes.iter().flatten() {
        delta[l.first] += l.bytes as i128;
        delta[l.last + 1] -= l.bytes as i128;
    }
    let mut live = 0i128;
    delta[..steps]
        .iter()
        .map(|d| {
            live += d;
            usize::try_from(live).unwrap_or(usize::MAX)
        })
        .collect()
}

/// Max over steps of the summed bytes of the tensors live at that step.
pub fn lower_bound(lifetimes: &[Option<Lifetime>]) -> usize {
    live_bytes(lifetimes).into_iter().max().unwrap_or(0)
}

/// Pairs of tensors that are live together and share bytes (empty for a
/// valid plan). Used by tests and as a self-check by the converter.
pub fn conflicts(plan: &Plan) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let n = plan.lifetimes.len();
    for a in 0..n {
        for b in a + 1..n {
            if let (Some(la), Some(lb), Some(oa), Some(ob)) = (
                plan.lifetimes[a],
                plan.lifetimes[b],
                plan.offsets[a],
                plan.offsets[b],
            ) {
                let share = oa < ob + lb.bytes && ob < oa + la.bytes;
                if la.meets(&lb) && share && la.bytes > 0 && lb.bytes > 0 {
                    out.push((a, b));
                }
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chain_reuses_two_buffers() {
        // input(0, external) → t1 → t2 → t3: each layer needs its input and
        // output live, so two buffers of 64 suffice.
        let sizes = [64, 64, 64, 64];
        let layers = vec![(vec![0], 1), (vec![1], 2), (vec![2], 3)];
        let p = plan_layers(&sizes, &layers, 3, &[0]);
        assert_eq!(p.offsets[0], None);
        assert_eq!(p.lower_bound, 128);
        assert_eq!(p.workspace_len, 128);
        assert!(conflicts(&p).is_empty());
    }

    #[test]
    fn offsets_are_aligned() {
        let sizes = [0, 5, 3, 7];
        let layers = vec![(vec![0], 1), (vec![1], 2), (vec![1, 2], 3)];
        let p = plan_layers(&sizes, &layers, 3, &[0]);
        for o in p.offsets.iter().flatten() {
            assert_eq!(o % ALIGN, 0);
        }
        assert!(conflicts(&p).is_empty());
        assert!(p.workspace_len >= p.lower_bound);
    }
}
