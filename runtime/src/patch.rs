//! Patch-by-patch execution of a model's first layers (Lin et al., NeurIPS 2021, memory-efficient patch-based inference): the plan (`PatchPlan`), its checks, the tile regions
//! back-propagated through each layer's window, and the tile walk over the ordinary kernels.

use crate::error::Error;
use crate::model::Model;
use crate::ops::run_layer_ops;
use crate::repr::{LayerRef, Op, Shape, TensorRecord, Window};

/// Most layers a patched stage may hold (regions live on the stack).
pub const MAX_STAGE: usize = 32;

/// Layers `first..=last` run one output tile of layer `last` at a time: its output is
/// cut into `rows`×`cols` tiles (tile `r` has rows `r·H/rows .. (r+1)·H/rows`, the same
/// for columns). Each stage layer writes its tile into slot `j % 2` (`j`: its place in
/// the stage) and reads the other slot; the first layer reads slot 1, where its input
/// region is gathered; the last layer's tile is scattered into its full output tensor.
/// Slots are workspace byte offsets; the stage needs `workspace_len` bytes in all.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PatchPlan {
    pub first: u16,
    pub last: u16,
    pub rows: u16,
    pub cols: u16,
    pub slots: [u32; 2],
    pub workspace_len: u32,
}

/// A half-open range of rows and of columns.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct Region {
    pub rows: (u16, u16),
    pub cols: (u16, u16),
}

impl Region {
    fn shape(self, c: u16) -> Shape {
        Shape::new(self.rows.1 - self.rows.0, self.cols.1 - self.cols.0, c)
    }
}

fn bad(problem: &'static str) -> Error {
    Error::Patch { problem }
}

/// The input range needed along one axis for outputs `o0..o1` of a window (kernel `k`,
/// stride `s`, dilation `d`, low padding `p`) on `n` inputs, clipped to `0..n`, and
/// the padding (low, high) a kernel call on that range needs so that it computes exactly
/// outputs `o0..o1`: padded taps stay the ones outside the whole input.
fn back_axis(o: (u16, u16), k: u16, s: u16, d: u16, p: u16, n: u16) -> ((u16, u16), (u16, u16)) {
    let (o0, o1) = (o.0 as i64, o.1 as i64);
    let start = o0 * s as i64 - p as i64;
    let end = (o1 - 1) * s as i64 - p as i64 + d as i64 * (k as i64 - 1) + 1;
    let (r0, r1) = (start.max(0), end.min(n as i64));
    let (lo, hi) = (r0 - start, end - r1);
    // Windows of a checked layer lie inside the padded input, so all four fit u16.
    let c = |v: i64| v.clamp(0, u16::MAX as i64) as u16;
    ((c(r0), c(r1)), (c(lo), c(hi)))
}

/// The input region a layer reads for output region `out`, and the window for a kernel
/// call on just that region (padding only where the region touches the input's border).
fn back(layer: &LayerRef<'_>, input: Shape, out: Region) -> (Region, Window) {
    let w = layer.header.window;
    if !layer.header.op.has_window() {
        return (out, w);
    }
    let (rows, (pt, pb)) = back_axis(out.rows, w.kh, w.stride_h, w.dil_h, w.pad_top, input.h);
    let (cols, (pl, pr)) = back_axis(out.cols, w.kw, w.stride_w, w.dil_w, w.pad_left, input.w);
    let mut sub = w;
    (sub.pad_top, sub.pad_bottom, sub.pad_left, sub.pad_right) = (pt, pb, pl, pr);
    (Region { rows, cols }, sub)
}

/// One stage layer as the tile walk needs it.
#[derive(Clone, Copy)]
struct Step<'a> {
    layer: LayerRef<'a>,
    a: TensorRecord,
    out: TensorRecord,
}

/// Tile `t` (row-major) of a `rows`×`cols` grid over `shape`.
fn tile(shape: Shape, rows: u16, cols: u16, t: usize) -> Region {
    let (r, c) = (t / cols as usize, t % cols as usize);
    let cut = |i: usize, n: u16, len: u16| (i * len as usize / n as usize) as u16;
    Region {
        rows: (cut(r, rows, shape.h), cut(r + 1, rows, shape.h)),
        cols: (cut(c, cols, shape.w), cut(c + 1, cols, shape.w)),
    }
}

/// A checked patch plan over a parsed model: run it with `run`.
pub struct Patched<'m, 'a, const OPS: u32> {
    model: &'m Model<'a, OPS>,
    plan: PatchPlan,
    steps: [Option<Step<'a>>; MAX_STAGE],
    /// Bytes each slot must hold (largest region placed there over all tiles).
    slot_len: [usize; 2],
}

impl<'m, 'a, const OPS: u32> Patched<'m, 'a, OPS> {
    /// Checks `plan` against `model`: a chain of window or per-pixel layers (conv2d,
    /// depthwise, max/avg pool, pixels, quantize, dequantize) whose inner tensors no
    /// later layer reads, non-empty tiles, and slots inside the plan's workspace that
    /// overlap neither each other nor the stage's full input and output tensors.
    pub fn new(model: &'m Model<'a, OPS>, plan: PatchPlan) -> Result<Self, Error> {
        let (first, last) = (plan.first as usize, plan.last as usize);
        if first > last || last >= model.layer_count() {
            return Err(bad("stage layers out of range"));
        }
        if last - first >= MAX_STAGE {
            return Err(bad("stage longer than 32 layers"));
        }
        let mut steps = [None; MAX_STAGE];
        for (j, i) in (first..=last).enumerate() {
            let layer = model.layer(i).ok_or(bad("stage layer missing"))?;
            let h = layer.header;
            if !matches!(
                h.op,
                Op::Conv2d
                    | Op::Depthwise
                    | Op::MaxPool
                    | Op::AvgPool
                    | Op::Pixels
                    | Op::Quantize
                    | Op::Dequantize
            ) {
                return Err(bad(
                    "only conv2d, depthwise, pools and per-pixel layers can be patched",
                ));
            }
            if j > 0 {
                let prev = model.layer(i - 1).ok_or(bad("stage layer missing"))?;
                if h.inputs[0] != prev.header.output {
                    return Err(bad("stage layers must form a chain"));
                }
            }
            let a = model
                .tensor(h.inputs[0] as usize)
                .ok_or(bad("tensor missing"))?;
            let out = model
                .tensor(h.output as usize)
                .ok_or(bad("tensor missing"))?;
            steps[j] = Some(Step { layer, a, out });
        }
        // Inner tensors (outputs of first..last) exist only as tiles.
        for i in last + 1..model.layer_count() {
            let h = model.layer(i).ok_or(bad("layer missing"))?.header;
            for j in first..last {
                let inner = model.layer(j).ok_or(bad("layer missing"))?.header.output;
                let reads_b = h.op.arity() == 2 && h.inputs[1] == inner;
                if h.inputs[0] == inner || reads_b {
                    return Err(bad("a layer after the stage reads a tensor inside it"));
                }
            }
        }
        let s_out = steps[last - first].ok_or(bad("stage layer missing"))?.out;
        if plan.rows == 0
            || plan.cols == 0
            || plan.rows > s_out.shape.h
            || plan.cols > s_out.shape.w
        {
            return Err(bad(
                "tile grid must be 1..=height by 1..=width of the stage output",
            ));
        }
        let mut me = Patched {
            model,
            plan,
            steps,
            slot_len: [0; 2],
        };
        let mut regions = [Region::default(); MAX_STAGE + 1];
        for t in 0..plan.rows as usize * plan.cols as usize {
            me.regions(t, &mut regions)?;
            for j in 0..=last - first {
                let st = me.step(j)?;
                let r = regions[j + 1];
                let len = r.shape(st.out.shape.c).elems() * st.out.elem.size();
                me.slot_len[j % 2] = me.slot_len[j % 2].max(len);
            }
            let st0 = me.step(0)?;
            let len = regions[0].shape(st0.a.shape.c).elems() * st0.a.elem.size();
            me.slot_len[1] = me.slot_len[1].max(len);
        }
        me.check_placement(first, s_out)?;
        Ok(me)
    }

    fn step(&self, j: usize) -> Result<Step<'a>, Error> {
        self.steps
            .get(j)
            .copied()
            .flatten()
            .ok_or(bad("stage layer missing"))
    }

    /// Slots 8-aligned, inside `workspace_len`, disjoint from each other, from the
    /// stage's full input (when it is in the workspace) and output, and the model's own
    /// plan (`Model::workspace_len`) inside the plan's workspace.
    fn check_placement(&self, first: usize, s_out: TensorRecord) -> Result<(), Error> {
        let ws = self.plan.workspace_len as usize;
        if ws < self.model.workspace_len() {
            return Err(bad(
                "workspace smaller than the model's layer-by-layer plan",
            ));
        }
        let mut ranges = [(0usize, 0usize); 4];
        for (k, range) in ranges.iter_mut().take(2).enumerate() {
            let s = self.plan.slots[k] as usize;
            if !s.is_multiple_of(8) {
                return Err(bad("slot offset not a multiple of 8"));
            }
            let e = s
                .checked_add(self.slot_len[k])
                .ok_or(bad("slot overflows"))?;
            if e > ws {
                return Err(bad("slot outside the workspace"));
            }
            *range = (s, e);
        }
        let span = |t: &TensorRecord| (t.offset as usize, t.offset as usize + t.byte_len());
        ranges[2] = span(&s_out);
        let st0 = self.step(0)?;
        if self.model.layer(first).map(|l| l.header.inputs[0]) != Some(0) {
            ranges[3] = span(&st0.a);
        }
        let meets = |a: (usize, usize), b: (usize, usize)| a.0 < b.1 && b.0 < a.1;
        for i in 0..4 {
            for j in i + 1..4 {
                if meets(ranges[i], ranges[j]) {
                    return Err(bad("live buffers of the stage overlap"));
                }
            }
        }
        // Tensors made before the stage and read after it are live throughout.
        for i in self.plan.last as usize + 1..self.model.layer_count() {
            let h = self.model.layer(i).ok_or(bad("layer missing"))?.header;
            for &id in &h.inputs[..h.op.arity().min(2)] {
                let made_before =
                    (0..first).any(|l| self.model.layer(l).is_some_and(|l| l.header.output == id));
                let t = self
                    .model
                    .tensor(id as usize)
                    .ok_or(bad("tensor missing"))?;
                if made_before && (meets(ranges[0], span(&t)) || meets(ranges[1], span(&t))) {
                    return Err(bad("a slot overlaps a tensor live across the stage"));
                }
            }
        }
        Ok(())
    }

    /// Regions of tile `t`: `out[0]` the stage input's, `out[j + 1]` stage layer `j`'s output.
    fn regions(&self, t: usize, out: &mut [Region; MAX_STAGE + 1]) -> Result<(), Error> {
        let n = (self.plan.last - self.plan.first) as usize + 1;
        let last = self.step(n - 1)?;
        out[n] = tile(last.out.shape, self.plan.rows, self.plan.cols, t);
        for j in (0..n).rev() {
            let st = self.step(j)?;
            out[j] = back(&st.layer, st.a.shape, out[j + 1]).0;
        }
        Ok(())
    }

    /// Bytes of workspace the plan needs.
    pub fn workspace_len(&self) -> usize {
        self.plan.workspace_len as usize
    }

    /// One inference: the stage tile by tile, then the remaining layers layer by layer.
    /// Same output bytes as `Model::run`.
    pub fn run<'w>(&self, input: &[u8], workspace: &'w mut [u8]) -> Result<&'w [u8], Error> {
        let m = self.model;
        m.check_call(input, workspace, self.workspace_len())?;
        let (first, last) = (self.plan.first as usize, self.plan.last as usize);
        let n = last - first + 1;
        m.run_layers(0..first, input, workspace, &mut ())?;
        let mut regions = [Region::default(); MAX_STAGE + 1];
        let slot = |k: usize, len: usize| {
            let s = self.plan.slots[k] as usize;
            (s, s + len)
        };
        for t in 0..self.plan.rows as usize * self.plan.cols as usize {
            self.regions(t, &mut regions)?;
            let st0 = self.step(0)?;
            let in_shape = regions[0].shape(st0.a.shape.c);
            let in_len = in_shape.elems() * st0.a.elem.size();
            let dst = slot(1, in_len);
            if m.layer(first).map(|l| l.header.inputs[0]) == Some(0) {
                let d = workspace
                    .get_mut(dst.0..dst.1)
                    .ok_or(bad("slot outside the workspace"))?;
                gather(input, st0.a.shape, st0.a.elem.size(), regions[0], d)?;
            } else {
                let src = span(&st0.a);
                let (s, d) = pair(workspace, src, dst)?;
                gather(s, st0.a.shape, st0.a.elem.size(), regions[0], d)?;
            }
            let mut in_len = in_len;
            for j in 0..n {
                let st = self.step(j)?;
                let (in_reg, win) = back(&st.layer, st.a.shape, regions[j + 1]);
                let mut layer = st.layer;
                layer.header.window = win;
                let a = TensorRecord {
                    shape: in_reg.shape(st.a.shape.c),
                    ..st.a
                };
                let o = TensorRecord {
                    shape: regions[j + 1].shape(st.out.shape.c),
                    ..st.out
                };
                let src = slot((j + 1) % 2, in_len);
                let dst = slot(j % 2, o.byte_len());
                let (x, y) = pair(workspace, src, dst)?;
                run_layer_ops::<OPS>(&layer, (&a, x), None, (&o, y))
                    .map_err(|e| crate::exec::at_layer(e, first + j))?;
                in_len = o.byte_len();
            }
            let st = self.step(n - 1)?;
            let (y, full) = pair(workspace, slot((n - 1) % 2, in_len), span(&st.out))?;
            let full: &mut [u8] = full;
            scatter(y, st.out.shape, st.out.elem.size(), regions[n], full)?;
        }
        m.run_layers(last + 1..m.layer_count(), input, workspace, &mut ())?;
        m.output_bytes(workspace)
    }

    /// The tile count.
    pub fn tiles(&self) -> usize {
        self.plan.rows as usize * self.plan.cols as usize
    }

    /// Multiply-accumulates of one patched inference (halos computed again included).
    pub fn macs(&self) -> u64 {
        let (first, last) = (self.plan.first as usize, self.plan.last as usize);
        let mut total: u64 = (0..self.model.layer_count())
            .filter(|i| *i < first || *i > last)
            .map(|i| self.model.layer_macs(i))
            .sum();
        let mut regions = [Region::default(); MAX_STAGE + 1];
        for t in 0..self.tiles() {
            if self.regions(t, &mut regions).is_err() {
                return u64::MAX;
            }
            for j in 0..=last - first {
                let Ok(st) = self.step(j) else {
                    return u64::MAX;
                };
                let o = TensorRecord {
                    shape: regions[j + 1].shape(st.out.shape.c),
                    ..st.out
                };
                let a = TensorRecord {
                    shape: regions[j].shape(st.a.shape.c),
                    ..st.a
                };
                total = total.saturating_add(crate::ops::layer_macs(&st.layer, &a, &o));
            }
        }
        total
    }

    /// Peak bytes live during the stage: both slots, the full stage output and (when in
    /// the workspace) the full stage input.
    pub fn stage_bytes(&self) -> usize {
        let (Ok(st0), Ok(stn)) = (
            self.step(0),
            self.step((self.plan.last - self.plan.first) as usize),
        ) else {
            return usize::MAX;
        };
        let input = if self
            .model
            .layer(self.plan.first as usize)
            .map(|l| l.header.inputs[0])
            == Some(0)
        {
            0
        } else {
            st0.a.byte_len()
        };
        self.slot_len[0] + self.slot_len[1] + stn.out.byte_len() + input
    }

    /// Bytes each slot holds at most.
    pub fn slot_len(&self) -> [usize; 2] {
        self.slot_len
    }
}

fn span(t: &TensorRecord) -> (usize, usize) {
    (t.offset as usize, t.offset as usize + t.byte_len())
}

/// `src` for reading and `dst` for writing, two disjoint ranges of `ws`.
fn pair(
    ws: &mut [u8],
    src: (usize, usize),
    dst: (usize, usize),
) -> Result<(&[u8], &mut [u8]), Error> {
    let outside = bad("buffer outside the workspace");
    if src.0 > src.1 || dst.0 > dst.1 || (src.0 < dst.1 && dst.0 < src.1) {
        return Err(bad("live buffers of the stage overlap"));
    }
    if src.1 <= dst.0 {
        let (lo, hi) = ws.split_at_mut_checked(dst.0).ok_or(outside)?;
        let s = lo.get(src.0..src.1).ok_or(outside)?;
        let d = hi.get_mut(..dst.1 - dst.0).ok_or(outside)?;
        Ok((s, d))
    } else {
        let (lo, hi) = ws.split_at_mut_checked(src.0).ok_or(outside)?;
        let s = hi.get(..src.1 - src.0).ok_or(outside)?;
        let d = lo.get_mut(dst.0..dst.1).ok_or(outside)?;
        Ok((s, d))
    }
}

/// For each row of region `r` of an HWC tensor (shape `shape`, `es` bytes an element):
/// its byte range in the full tensor and in the packed tile.
fn region_rows(
    shape: Shape,
    es: usize,
    r: Region,
) -> impl Iterator<Item = (core::ops::Range<usize>, core::ops::Range<usize>)> {
    let (row_bytes, run) = (
        shape.w as usize * shape.c as usize * es,
        shape.c as usize * es,
    );
    let width = (r.cols.1 - r.cols.0) as usize * run;
    (r.rows.0..r.rows.1).enumerate().map(move |(k, y)| {
        let s = y as usize * row_bytes + r.cols.0 as usize * run;
        (s..s + width, k * width..(k + 1) * width)
    })
}

/// Copies region `r` of the HWC tensor `full` into the packed `tile`.
fn gather(full: &[u8], shape: Shape, es: usize, r: Region, tile: &mut [u8]) -> Result<(), Error> {
    for (f, t) in region_rows(shape, es, r) {
        let src = full.get(f).ok_or(bad("region outside its tensor"))?;
        let dst = tile.get_mut(t).ok_or(bad("tile larger than its slot"))?;
        dst.copy_from_slice(src);
    }
    Ok(())
}

/// Copies the packed `tile` into region `r` of the HWC tensor `full`.
fn scatter(tile: &[u8], shape: Shape, es: usize, r: Region, full: &mut [u8]) -> Result<(), Error> {
    for (f, t) in region_rows(shape, es, r) {
        let dst = full.get_mut(f).ok_or(bad("region outside its tensor"))?;
        let src = tile.get(t).ok_or(bad("tile larger than its slot"))?;
        dst.copy_from_slice(src);
    }
    Ok(())
}
