//! The accuracy-drop report: float reference vs the quantized model run by
//! midge-runtime itself on a labelled folder — top-1, drop, agreement,
//! per-class accuracy, confusion, per-layer SQNR and logit error.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use midge_runtime::embed::AlignedBytes;
use midge_runtime::{exec, ElemType, Model, Observer, TensorRecord};
use serde::Serialize;

use crate::calibrate::progress_bar;
use crate::error::{escape, Error, Result};
use crate::float_ref;
use crate::graph::{FloatGraph, Precision};
use crate::images;
use crate::quantize::{
    dequantize_tensor, image_spec, quantize_description, quantize_graph, Conversion,
    QuantizeOptions, Quantized,
};

/// Options of one comparison (the CLI's `compare` flags).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CompareOptions {
    pub quantize: QuantizeOptions,
    /// Also evaluate an all-fp16 conversion of the same model.
    pub also_fp16: bool,
    /// Labelled folder instead of the description's `validation`.
    pub images: Option<PathBuf>,
}

/// Per-layer signal-to-quantization-noise ratio.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LayerRow {
    pub name: String,
    pub op: String,
    /// `int8` or `fp16` (the layer's output).
    pub precision: String,
    /// 10·log10(Σx² / Σ(x − x̂)²) over all images, x the float activation and
    /// x̂ the dequantized runtime activation; `null` when the two are equal.
    pub sqnr_db: Option<f64>,
}

/// Accuracy of one class.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ClassRow {
    pub label: String,
    pub images: usize,
    pub float_top1: f64,
    pub quantized_top1: f64,
}

/// The all-fp16 variant, when asked for.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Fp16Row {
    pub top1: f64,
    pub drop_pp: f64,
    pub agreement: f64,
    pub mean_abs_logit_error: f64,
    pub max_abs_logit_error: f64,
    pub logit_error_histogram: ErrorHistogram,
}

/// Bins of the logit error x̂ − x (dequantized runtime logit minus float
/// logit) over every logit of every image: `counts[i]` errors fall in
/// `[lo + i·w, lo + (i+1)·w)` with `w = (hi − lo) / counts.len()` (the last
/// bin closed), `hi = −lo` = the largest |x̂ − x|, so zero sits in the middle
/// bin. Counts are integers, so the histogram does not depend on the order
/// images were evaluated in.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ErrorHistogram {
    pub lo: f64,
    pub hi: f64,
    pub counts: Vec<u64>,
}

/// Bins of [`ErrorHistogram`] (odd, so one bin is centred on zero).
pub const ERROR_BINS: usize = 41;

impl ErrorHistogram {
    /// The histogram of `errors` (each x̂ − x) in [`ERROR_BINS`] bins over
    /// ±max|error|; with no error at all, one bin around zero.
    pub fn of<'a>(errors: impl Iterator<Item = &'a [f64]> + Clone) -> ErrorHistogram {
        let hi = errors.clone().flatten().fold(0.0f64, |m, d| m.max(d.abs()));
        let mut counts = vec![0u64; ERROR_BINS];
        for &d in errors.flatten() {
            let bin = if hi > 0.0 {
                (((d + hi) / (2.0 * hi)) * ERROR_BINS as f64).floor() as usize
            } else {
                ERROR_BINS / 2
            };
            counts[bin.min(ERROR_BINS - 1)] += 1;
        }
        ErrorHistogram {
            lo: -hi,
            hi,
            counts,
        }
    }
}

/// The accuracy-drop report. Accuracies and agreement are percentages;
/// `drop_pp` is float minus quantized, in percentage points.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Report {
    pub model: String,
    pub images: usize,
    /// Precision of the quantized model: `int8`, `fp16` or `mixed`.
    pub precision: String,
    pub float_top1: f64,
    pub quantized_top1: f64,
    pub drop_pp: f64,
    pub agreement: f64,
    pub mean_abs_logit_error: f64,
    pub max_abs_logit_error: f64,
    pub logit_error_histogram: ErrorHistogram,
    pub fp16: Option<Fp16Row>,
    pub per_class: Vec<ClassRow>,
    pub labels: Vec<String>,
    /// Quantized model: `confusion[true][predicted]` image counts.
    pub confusion: Vec<Vec<usize>>,
    /// Float reference: `float_confusion[true][predicted]`.
    pub float_confusion: Vec<Vec<usize>>,
    pub layers: Vec<LayerRow>,
    pub workspace_len: usize,
    pub workspace_lower_bound: usize,
    pub model_bytes: usize,
    /// Pairs rescaled by `--equalize` (empty without it).
    pub equalized: Vec<crate::equalize::EqualizedPair>,
    /// Layers whose int8 bias `--bias-correct` shifted (empty without it).
    pub bias_correction: Vec<crate::bias_correct::BiasRow>,
    /// What `--calibration-method measured` chose.
    pub calibration_choice: Option<crate::calibrate_choice::CalibrationChoice>,
}

fn pct(n: usize, d: usize) -> f64 {
    if d == 0 {
        0.0
    } else {
        100.0 * n as f64 / d as f64
    }
}

/// Index of the largest value, lowest index on ties, NaN skipped.
pub fn argmax(v: &[f32]) -> Option<usize> {
    let mut best: Option<usize> = None;
    for (i, x) in v.iter().enumerate() {
        if x.is_nan() {
            continue;
        }
        if best.is_none_or(|b| *x > v[b]) {
            best = Some(i);
        }
    }
    best
}

/// Collects, per runtime layer, Σx² and Σ(x − x̂)² against the float tensors
/// of one image (each sum in element order).
struct Sqnr<'a> {
    source: &'a [Option<usize>],
    outputs: &'a [usize],
    float: &'a [Vec<f32>],
    signal: Vec<f64>,
    noise: Vec<f64>,
}

impl Observer for Sqnr<'_> {
    fn after_layer(&mut self, i: usize, out: &TensorRecord, bytes: &[u8]) {
        let Some(t) = self
            .outputs
            .get(i)
            .and_then(|&o| self.source.get(o).copied().flatten())
        else {
            return;
        };
        let Some(x) = self.float.get(t) else { return };
        let q = dequantize_tensor(out, bytes);
        for (a, b) in x.iter().zip(&q) {
            let (a, b) = (*a as f64, *b as f64);
            self.signal[i] += a * a;
            self.noise[i] += (a - b) * (a - b);
        }
    }
}

/// Most bytes a host tool allocates for one buffer of a model run, the
/// workspace or the input (256 MiB; a parsed model's workspace is exactly
/// what its tensors use, but a file can still describe up to 4 GiB).
pub const HOST_MAX_BUFFER: usize = 256 << 20;

/// A zeroed workspace for `model`, refused (naming `place`) when the
/// workspace or the input tensor is larger than `HOST_MAX_BUFFER`.
pub fn host_workspace(model: &Model<'_>, place: &str) -> Result<AlignedBytes> {
    for (what, len) in [
        ("workspace", model.workspace_len()),
        ("input tensor", model.input().byte_len()),
    ] {
        if len > HOST_MAX_BUFFER {
            return Err(Error::new(
                place,
                format!(
                    "{what} of {len} bytes is more than the host tools allocate ({HOST_MAX_BUFFER} bytes)"
                ),
            ));
        }
    }
    Ok(AlignedBytes::zeroed(model.workspace_len()))
}

/// One quantized model ready to run on the host.
#[derive(Clone)]
struct Runner {
    bytes: AlignedBytes,
    ws: AlignedBytes,
}

impl Runner {
    fn new(q: &Quantized, place: &str) -> Result<Runner> {
        let bytes = AlignedBytes::from_slice(&q.bytes);
        let model = Model::parse(&bytes)
            .map_err(|e| Error::new(place, format!("the runtime rejects the model: {e}")))?;
        let ws = host_workspace(&model, place)?;
        Ok(Runner { bytes, ws })
    }

    /// Run once; `(top-1, dequantized logits)`.
    fn run(
        &mut self,
        px: &[u8],
        obs: &mut impl Observer,
        place: &str,
    ) -> Result<(usize, Vec<f32>)> {
        let model = Model::parse(&self.bytes)
            .map_err(|e| Error::new(place, format!("the runtime rejects the model: {e}")))?;
        let out_rec = model.output();
        let out = model
            .run_observed(px, &mut self.ws, obs)
            .map_err(|e| Error::new(place, format!("the runtime failed: {e}")))?;
        let top = exec::top1(&out_rec, out)
            .map(|(i, _)| i)
            .ok_or_else(|| Error::new(place, "the model output has no top-1"))?;
        Ok((top, dequantize_tensor(&out_rec, out)))
    }
}

fn precision_name(graph: &FloatGraph) -> String {
    let int8 = graph
        .nodes
        .iter()
        .filter(|n| n.precision == Precision::Int8)
        .count();
    match int8 {
        0 => "fp16".into(),
        n if n == graph.nodes.len() => "int8".into(),
        _ => "mixed".into(),
    }
}

/// Quantize the description (in memory) and evaluate it. See [`evaluate`].
pub fn compare(desc_path: &Path, opts: &CompareOptions) -> Result<Report> {
    let (conv, dir) = prepare(desc_path, opts)?;
    evaluate(&conv, &dir, opts.also_fp16, opts.quantize.progress)
}

/// The conversion `compare` evaluates and the labelled folder it reads
/// (`--images`, else the description's `validation`).
pub fn prepare(desc_path: &Path, opts: &CompareOptions) -> Result<(Conversion, PathBuf)> {
    let conv = quantize_description(desc_path, &opts.quantize)?;
    let dir = opts
        .images
        .clone()
        .or_else(|| conv.desc.validation.clone())
        .ok_or_else(|| {
            Error::new(
                desc_path.display().to_string(),
                "no validation images: set `validation` in the description or pass a folder",
            )
        })?;
    Ok((conv, dir))
}

/// Logit error of one image: Σ|x − x̂| (in element order) and max |x − x̂|.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
struct LogitError {
    sum: f64,
    max: f64,
}

/// Each logit's error x̂ − x, in element order.
fn logit_errors(float: &[f32], quantized: &[f32]) -> Vec<f64> {
    float
        .iter()
        .zip(quantized)
        .map(|(a, b)| *b as f64 - *a as f64)
        .collect()
}

impl LogitError {
    fn of(errors: &[f64]) -> LogitError {
        let mut e = LogitError::default();
        for d in errors {
            e.sum += d.abs();
            e.max = e.max.max(d.abs());
        }
        e
    }

    /// Fold in the next image's error (sums in image order).
    fn add(&mut self, next: LogitError) {
        self.sum += next.sum;
        self.max = self.max.max(next.max);
    }
}

/// What one image contributes to the report.
struct ImageResult {
    truth: usize,
    float_top: usize,
    quantized_top: usize,
    /// Each logit's error x̂ − x (its count is the mean's denominator).
    errors: Vec<f64>,
    /// Per runtime layer Σx² and Σ(x − x̂)².
    signal: Vec<f64>,
    noise: Vec<f64>,
    /// The all-fp16 variant: top-1 and each logit's error.
    fp16: Option<(usize, Vec<f64>)>,
}

/// The models one worker runs (each with its own workspace).
struct Runners {
    main: Runner,
    fp16: Option<Runner>,
}

/// Evaluate a conversion on the labelled folder `dir`. Images are evaluated
/// in parallel on the current rayon pool (see [`crate::parallel`]); the
/// report is the same for any number of threads: each image's sums are
/// taken in element order and added up in image order.
pub fn evaluate(conv: &Conversion, dir: &Path, also_fp16: bool, progress: bool) -> Result<Report> {
    let graph = &conv.graph;
    let q = &conv.quantized;
    let files = images::labelled_folder(dir, &graph.labels)?;
    let place = graph.name.clone();
    let main = Runner::new(q, &place)?;
    let fp16 = if also_fp16 {
        let mut g = graph.clone();
        g.nodes
            .iter_mut()
            .for_each(|n| n.precision = Precision::Fp16);
        let q16 = quantize_graph(&g, &conv.ranges)?;
        Some(Runner::new(&q16, &place)?)
    } else {
        None
    };
    let outputs: Vec<usize> = q
        .spec
        .layers
        .iter()
        .map(|l| l.header.output as usize)
        .collect();
    let spec = image_spec(&conv.desc);
    let bar = progress_bar(progress, files.len() as u64, "evaluating");
    let results = crate::parallel::map_ordered(
        files.len(),
        || Runners {
            main: main.clone(),
            fp16: fp16.clone(),
        },
        |r, i| {
            let (file, truth) = &files[i];
            let px = images::load_image(file, &spec)?;
            let res = evaluate_image(conv, &outputs, r, (file, &px), *truth, &place);
            bar.inc(1);
            res
        },
    );
    bar.finish_and_clear();
    let results: Vec<ImageResult> = results.into_iter().collect::<Result<_>>()?;
    let model = Model::parse(&main.bytes)
        .map_err(|e| Error::new(&place, format!("the runtime rejects the model: {e}")))?;
    Ok(tally(conv, &model, &outputs, &results, also_fp16))
}

/// One image through the float reference, the quantized model and (when
/// given) the all-fp16 one.
fn evaluate_image(
    conv: &Conversion,
    outputs: &[usize],
    r: &mut Runners,
    (file, px): (&Path, &[u8]),
    truth: usize,
    place: &str,
) -> Result<ImageResult> {
    let tensors = float_ref::run_finite(&conv.graph, px).map_err(|e| e.error(file))?;
    let logits = tensors.last().cloned().unwrap_or_default();
    let n_layers = outputs.len();
    let mut obs = Sqnr {
        source: &conv.quantized.source,
        outputs,
        float: &tensors,
        signal: vec![0.0; n_layers],
        noise: vec![0.0; n_layers],
    };
    let (quantized_top, q_logits) = r.main.run(px, &mut obs, place)?;
    let fp16 = match r.fp16.as_mut() {
        Some(h) => {
            let (top, h_logits) = h.run(px, &mut (), place)?;
            Some((top, logit_errors(&logits, &h_logits)))
        }
        None => None,
    };
    Ok(ImageResult {
        truth,
        float_top: argmax(&logits).unwrap_or(0),
        quantized_top,
        errors: logit_errors(&logits, &q_logits),
        signal: obs.signal,
        noise: obs.noise,
        fp16,
    })
}

/// Add one count to `m[row][col]` (out-of-range indices are not counted).
fn count(m: &mut [Vec<usize>], row: usize, col: usize) {
    if let Some(cell) = m.get_mut(row).and_then(|r| r.get_mut(col)) {
        *cell += 1;
    }
}

/// The report from the per-image results, summed in image order.
fn tally(
    conv: &Conversion,
    model: &Model<'_>,
    outputs: &[usize],
    results: &[ImageResult],
    also_fp16: bool,
) -> Report {
    let graph = &conv.graph;
    let q = &conv.quantized;
    let labels = &graph.labels;
    let k = labels.len();
    let n_layers = outputs.len();
    let mut confusion = vec![vec![0usize; k]; k];
    let mut float_confusion = vec![vec![0usize; k]; k];
    let mut signal = vec![0.0f64; n_layers];
    let mut noise = vec![0.0f64; n_layers];
    let (mut agree, mut err, mut err_n) = (0, LogitError::default(), 0usize);
    let (mut h_ok, mut h_agree, mut h_err) = (0, 0, LogitError::default());
    for r in results {
        count(&mut confusion, r.truth, r.quantized_top);
        count(&mut float_confusion, r.truth, r.float_top);
        agree += (r.float_top == r.quantized_top) as usize;
        err.add(LogitError::of(&r.errors));
        err_n += r.errors.len();
        for (total, x) in signal.iter_mut().zip(&r.signal) {
            *total += x;
        }
        for (total, x) in noise.iter_mut().zip(&r.noise) {
            *total += x;
        }
        if let Some((top, e)) = &r.fp16 {
            h_ok += (*top == r.truth) as usize;
            h_agree += (*top == r.float_top) as usize;
            h_err.add(LogitError::of(e));
        }
    }
    let n = results.len();
    let right =
        |top: fn(&ImageResult) -> usize| results.iter().filter(|r| top(r) == r.truth).count();
    let float_top1 = pct(right(|r| r.float_top), n);
    let quantized_top1 = pct(right(|r| r.quantized_top), n);
    let mean = |e: LogitError| if err_n > 0 { e.sum / err_n as f64 } else { 0.0 };
    let per_class = labels
        .iter()
        .enumerate()
        .map(|(c, l)| {
            let images = results.iter().filter(|r| r.truth == c).count();
            ClassRow {
                label: l.clone(),
                images,
                float_top1: pct(float_confusion[c][c], images),
                quantized_top1: pct(confusion[c][c], images),
            }
        })
        .collect();
    let layers = (0..n_layers)
        .map(|i| {
            let h = model.layer(i).map(|l| l.header);
            let out = model.tensor(outputs[i]);
            LayerRow {
                name: q.layer_names.get(i).cloned().unwrap_or_default(),
                op: h.map(|h| op_name(h.op)).unwrap_or("?").into(),
                precision: match out.map(|t| t.elem) {
                    Some(ElemType::F16) => "fp16".into(),
                    _ => "int8".into(),
                },
                sqnr_db: sqnr_db(signal[i], noise[i]),
            }
        })
        .collect();
    Report {
        model: graph.name.clone(),
        images: n,
        precision: precision_name(graph),
        float_top1,
        quantized_top1,
        drop_pp: float_top1 - quantized_top1,
        agreement: pct(agree, n),
        mean_abs_logit_error: mean(err),
        max_abs_logit_error: err.max,
        logit_error_histogram: ErrorHistogram::of(results.iter().map(|r| r.errors.as_slice())),
        fp16: also_fp16.then(|| Fp16Row {
            top1: pct(h_ok, n),
            drop_pp: float_top1 - pct(h_ok, n),
            agreement: pct(h_agree, n),
            mean_abs_logit_error: mean(h_err),
            max_abs_logit_error: h_err.max,
            logit_error_histogram: ErrorHistogram::of(
                results
                    .iter()
                    .filter_map(|r| r.fp16.as_ref().map(|(_, e)| e.as_slice())),
            ),
        }),
        per_class,
        labels: labels.clone(),
        confusion,
        float_confusion,
        layers,
        workspace_len: q.plan.workspace_len,
        workspace_lower_bound: q.plan.lower_bound,
        model_bytes: q.bytes.len(),
        equalized: conv.equalized.clone(),
        bias_correction: crate::bias_correct::rows(graph, &conv.bias_shifts),
        calibration_choice: conv.calibration_choice.clone(),
    }
}

/// 10·log10(signal / noise); `None` when the noise is zero.
pub fn sqnr_db(signal: f64, noise: f64) -> Option<f64> {
    if noise > 0.0 {
        Some(10.0 * (signal / noise).log10())
    } else {
        None
    }
}

/// Our short names of the runtime ops, for tables (the runtime's `Op::name`).
pub fn op_name(op: midge_runtime::Op) -> &'static str {
    op.name()
}

/// Our short names of the element types, for tables.
pub fn elem_name(e: midge_runtime::ElemType) -> &'static str {
    use midge_runtime::ElemType;
    match e {
        ElemType::U8 => "u8",
        ElemType::I8 => "int8",
        ElemType::F16 => "fp16",
    }
}

/// The pairs of an op set as `op/precision` (e.g. `conv2d/int8`), in op-code order.
pub fn op_set_names(ops: midge_runtime::OpSet) -> Vec<String> {
    ops.iter()
        .map(|(op, e)| format!("{}/{}", op_name(op), elem_name(e)))
        .collect()
}

impl Report {
    /// The terminal table.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "{} — {} images, {} model ({} bytes, workspace {} B, lower bound {} B)",
            escape(&self.model),
            self.images,
            self.precision,
            self.model_bytes,
            self.workspace_len,
            self.workspace_lower_bound
        );
        let _ = writeln!(s);
        let _ = writeln!(
            s,
            "  {:<10} {:>8} {:>10} {:>10} {:>12} {:>12}",
            "", "top-1 %", "drop pp", "agree %", "mean |err|", "max |err|"
        );
        let _ = writeln!(
            s,
            "  {:<10} {:>8.2} {:>10} {:>10} {:>12} {:>12}",
            "float", self.float_top1, "-", "-", "-", "-"
        );
        let _ = writeln!(
            s,
            "  {:<10} {:>8.2} {:>10.2} {:>10.2} {:>12.4} {:>12.4}",
            self.precision,
            self.quantized_top1,
            self.drop_pp,
            self.agreement,
            self.mean_abs_logit_error,
            self.max_abs_logit_error
        );
        if let Some(h) = &self.fp16 {
            let _ = writeln!(
                s,
                "  {:<10} {:>8.2} {:>10.2} {:>10.2} {:>12.4} {:>12.4}",
                "all fp16",
                h.top1,
                h.drop_pp,
                h.agreement,
                h.mean_abs_logit_error,
                h.max_abs_logit_error
            );
        }
        let _ = writeln!(s);
        let _ = writeln!(s, "  per class        images  float %  quant %");
        for c in &self.per_class {
            let _ = writeln!(
                s,
                "  {:<16} {:>6} {:>8.1} {:>8.1}",
                escape(&c.label),
                c.images,
                c.float_top1,
                c.quantized_top1
            );
        }
        let _ = writeln!(s);
        let _ = writeln!(s, "  confusion (quantized; rows true, columns predicted)");
        let w = self
            .labels
            .iter()
            .map(|l| escape(l).chars().count())
            .max()
            .unwrap_or(4)
            .clamp(4, 12);
        let _ = write!(s, "  {:<w$}", "");
        for l in &self.labels {
            let _ = write!(s, " {:>w$}", truncate(l, w));
        }
        let _ = writeln!(s);
        for (l, row) in self.labels.iter().zip(&self.confusion) {
            let _ = write!(s, "  {:<w$}", truncate(l, w));
            for v in row {
                let _ = write!(s, " {v:>w$}");
            }
            let _ = writeln!(s);
        }
        let _ = writeln!(s);
        let _ = writeln!(
            s,
            "  layer                    op              out    SQNR dB"
        );
        for l in &self.layers {
            let db = match l.sqnr_db {
                Some(v) => format!("{v:>9.1}"),
                None => format!("{:>9}", "exact"),
            };
            let _ = writeln!(
                s,
                "  {:<24} {:<15} {:<5} {db}",
                truncate(&l.name, 24),
                l.op,
                l.precision
            );
        }
        s += &crate::bias_correct::adjustments_text(&self.equalized, &self.bias_correction);
        if let Some(c) = &self.calibration_choice {
            s += "\n  calibration: ";
            s += &c.to_text();
        }
        s
    }
}

/// The first `n` characters of `s` with control characters escaped.
fn truncate(s: &str, n: usize) -> String {
    escape(s).chars().take(n).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sqnr_and_argmax() {
        // Signal power 100, noise power 1 → 20 dB (definition of the decibel:
        // 10·log10 of a power ratio; common practice).
        assert!((sqnr_db(100.0, 1.0).unwrap() - 20.0).abs() < 1e-12);
        assert_eq!(sqnr_db(5.0, 0.0), None);
        assert_eq!(argmax(&[1.0, 3.0, 3.0, f32::NAN]), Some(1));
        assert_eq!(argmax(&[f32::NAN]), None);
    }

    #[test]
    fn error_histogram_bins_by_hand() {
        // Errors −1, −0.5, 0, 0, 0.99, 1 over ±1 in 41 bins of width 2/41:
        // bin = floor((d + 1)·41/2) → 0, 10 (20.5/2 = 10.25), 20, 20, 40
        // (40.795), and 41 → the closed last bin 40 (worked by hand).
        let a = [-1.0, -0.5, 0.0];
        let b = [0.0, 0.99, 1.0];
        let h = ErrorHistogram::of([&a[..], &b[..]].into_iter());
        assert_eq!((h.lo, h.hi), (-1.0, 1.0));
        let mut want = vec![0u64; ERROR_BINS];
        want[0] = 1;
        want[10] = 1;
        want[20] = 2;
        want[40] = 2;
        assert_eq!(h.counts, want);
        // Order of the images does not matter.
        assert_eq!(ErrorHistogram::of([&b[..], &a[..]].into_iter()), h);
        // No error at all: everything in the middle bin.
        let z = ErrorHistogram::of([&[0.0, 0.0][..]].into_iter());
        assert_eq!((z.hi, z.counts[ERROR_BINS / 2]), (0.0, 2));
    }
}
