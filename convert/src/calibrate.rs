//! Calibration: runs the float reference on calibration images, gathers
//! per-tensor statistics (min/max, then a histogram) and turns them into the
//! real-valued range each activation tensor is quantized to.

use std::io::IsTerminal;

use serde::Serialize;

use crate::error::{Error, Result};
use crate::parallel;

/// Histogram resolution used for percentile and MSE ranges.
pub const BINS: usize = 2048;

/// Histogram bins `collect` holds at once per thread (2^22 counts, 32 MiB). A model
/// with more tensors than that many bins cover gets its histograms filled
/// group by group, with one more pass over the samples per group.
pub const HIST_BUDGET_BINS: usize = 1 << 22;

/// How a tensor's range is chosen from its statistics.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub enum RangeMethod {
    /// Smallest and largest value seen.
    MinMax,
    /// Clip both tails: [quantile(1 − p/100), quantile(p/100)], `p` in percent.
    Percentile(f64),
    /// The clipping range minimizing the expected squared quantization error
    /// (see `Histogram::mse_range`).
    Mse,
}

impl RangeMethod {
    /// Whether the method needs a histogram (a second pass over the images).
    pub fn needs_histogram(self) -> bool {
        !matches!(self, RangeMethod::MinMax)
    }
}

/// A real-valued range [min, max].
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Range {
    pub min: f32,
    pub max: f32,
}

impl Range {
    /// The smallest range holding both this range and 0 (int8 activations
    /// must represent 0 exactly: padding and ReLU produce it).
    pub fn with_zero(self) -> Range {
        Range {
            min: self.min.min(0.0),
            max: self.max.max(0.0),
        }
    }
}

/// Fixed-width histogram over [lo, hi].
#[derive(Clone, Debug, PartialEq)]
pub struct Histogram {
    pub lo: f32,
    pub hi: f32,
    pub counts: Vec<u64>,
    pub total: u64,
}

impl Histogram {
    pub fn new(lo: f32, hi: f32, bins: usize) -> Histogram {
        Histogram {
            lo,
            hi,
            counts: vec![0; bins.max(1)],
            total: 0,
        }
    }

    fn width(&self) -> f64 {
        (self.hi as f64 - self.lo as f64) / self.counts.len() as f64
    }

    /// Counts `values`, which must be finite (`collect` refuses samples that
    /// are not); any other value is not counted.
    pub fn add(&mut self, values: &[f32]) {
        let n = self.counts.len();
        let w = self.width();
        for &v in values {
            if !v.is_finite() {
                continue;
            }
            let i = if w > 0.0 {
                (((v as f64 - self.lo as f64) / w).floor().max(0.0) as usize).min(n - 1)
            } else {
                0
            };
            self.counts[i] += 1;
            self.total += 1;
        }
    }

    /// Add the counts of `other`, a histogram with the same bins.
    pub fn merge(&mut self, other: &Histogram) {
        for (a, b) in self.counts.iter_mut().zip(&other.counts) {
            *a += b;
        }
        self.total += other.total;
    }

    /// The value below which a fraction `q` (0..=1) of the samples lie,
    /// interpolating linearly inside the bin that holds it.
    pub fn quantile(&self, q: f64) -> f32 {
        if self.total == 0 {
            return 0.0;
        }
        let target = q.clamp(0.0, 1.0) * self.total as f64;
        let w = self.width();
        let mut before = 0.0f64;
        for (i, &c) in self.counts.iter().enumerate() {
            let c = c as f64;
            if c > 0.0 && before + c >= target {
                let frac = ((target - before) / c).clamp(0.0, 1.0);
                return (self.lo as f64 + (i as f64 + frac) * w) as f32;
            }
            before += c;
        }
        self.hi
    }

    /// Expected squared error of quantizing the histogram's samples to 256
    /// levels over `r` (extended to hold 0): samples inside contribute the
    /// uniform rounding noise step²/12, samples outside their clipping
    /// distance squared (taken at the bin centre).
    pub fn quant_error(&self, r: Range) -> f64 {
        let r = r.with_zero();
        let (a, b) = (r.min as f64, r.max as f64);
        let step = (b - a) / 255.0;
        let noise = step * step / 12.0;
        let w = self.width();
        let mut err = 0.0;
        for (i, &c) in self.counts.iter().enumerate() {
            if c == 0 {
                continue;
            }
            let x = self.lo as f64 + (i as f64 + 0.5) * w;
            let e = if x < a {
                (a - x) * (a - x)
            } else if x > b {
                (x - b) * (x - b)
            } else {
                noise
            };
            err += c as f64 * e;
        }
        err
    }

    /// The range [t·lo, t·hi], t = k/256 for k in 1..=256, with the least
    /// `quant_error` (the largest t on ties). Both ends shrink together, so
    /// for ReLU outputs (lo = 0) only the top end moves.
    pub fn mse_range(&self) -> Range {
        let full = Range {
            min: self.lo.min(0.0),
            max: self.hi.max(0.0),
        };
        let mut best = (self.quant_error(full), full);
        for k in (1..256).rev() {
            let t = k as f32 / 256.0;
            let r = Range {
                min: full.min * t,
                max: full.max * t,
            };
            let e = self.quant_error(r);
            if e < best.0 {
                best = (e, r);
            }
        }
        best.1
    }
}

/// Statistics of one tensor over all calibration images.
#[derive(Clone, Debug, PartialEq)]
pub struct TensorStats {
    pub min: f32,
    pub max: f32,
    pub hist: Option<Histogram>,
    /// When `collect` had to drop the histogram to stay within
    /// `HIST_BUDGET_BINS`: the range its method chose from it.
    pub chosen: Option<Range>,
}

impl TensorStats {
    fn empty() -> TensorStats {
        TensorStats {
            min: f32::INFINITY,
            max: f32::NEG_INFINITY,
            hist: None,
            chosen: None,
        }
    }

    /// Widen [min, max] to hold `values`, in IEEE 754 total order (so
    /// −0 < +0 and the result does not depend on the order values come in).
    fn see_extremes(&mut self, values: &[f32]) {
        for &v in values {
            if v.total_cmp(&self.min).is_lt() {
                self.min = v;
            }
            if v.total_cmp(&self.max).is_gt() {
                self.max = v;
            }
        }
    }

    /// The range chosen by `method`. Needs the histogram for all but min/max
    /// (or, for a dropped one, `chosen`: the range of the method `collect` ran with).
    pub fn range(&self, method: RangeMethod) -> Range {
        if let (Some(r), false) = (self.chosen, method == RangeMethod::MinMax) {
            return r;
        }
        if self.min > self.max {
            return Range { min: 0.0, max: 0.0 };
        }
        let full = Range {
            min: self.min,
            max: self.max,
        };
        match (method, &self.hist) {
            (RangeMethod::MinMax, _) | (_, None) => full,
            (RangeMethod::Percentile(p), Some(h)) => {
                let q = (p / 100.0).clamp(0.5, 1.0);
                Range {
                    min: h.quantile(1.0 - q),
                    max: h.quantile(q),
                }
            }
            (RangeMethod::Mse, Some(h)) => h.mse_range(),
        }
    }
}

/// Gather statistics of every tensor from a sample source. `run(i)` returns
/// all tensors (indexed by tensor id) for sample `i` of `count`; it is called
/// once per sample for min/max and, when the method needs a histogram, once
/// more per sample (and tensor group) to fill it, so memory stays at one
/// sample's tensors per thread. Samples run in parallel on the current
/// rayon pool ([`crate::parallel`]); the statistics are the same for any
/// number of threads (min/max in IEEE 754 total order, integer bin counts),
/// and an error is the one of the lowest-numbered failing sample.
pub fn collect(
    count: usize,
    method: RangeMethod,
    show_progress: bool,
    run: impl Fn(usize) -> Result<Vec<Vec<f32>>> + Sync,
) -> Result<Vec<TensorStats>> {
    if count == 0 {
        return Err(Error::new("calibration", "no calibration images"));
    }
    if let RangeMethod::Percentile(p) = method {
        if !(50.0..=100.0).contains(&p) {
            return Err(Error::new(
                "calibration",
                format!("percentile must be in 50..=100, found {p}"),
            ));
        }
    }
    let bar = progress_bar(show_progress, count as u64, "calibrating");
    let parts = parallel::chunked(count, |samples| {
        let mut stats: Vec<TensorStats> = Vec::new();
        for i in samples {
            let tensors = run(i)?;
            for (t, v) in tensors.iter().enumerate() {
                if let Some(x) = v.iter().find(|x| !x.is_finite()) {
                    return Err(Error::new(
                        "calibration",
                        format!("sample {i}: tensor t{t} holds {x}; ranges need finite values"),
                    ));
                }
            }
            if stats.is_empty() {
                stats = vec![TensorStats::empty(); tensors.len()];
            }
            for (s, t) in stats.iter_mut().zip(&tensors) {
                s.see_extremes(t);
            }
            bar.inc(1);
        }
        Ok(stats)
    });
    let mut stats: Vec<TensorStats> = Vec::new();
    for part in parts {
        let part = part?;
        if stats.is_empty() {
            stats = part;
        } else {
            for (s, p) in stats.iter_mut().zip(&part) {
                s.see_extremes(&[p.min, p.max]);
            }
        }
    }
    if method.needs_histogram() {
        let group = (HIST_BUDGET_BINS / BINS).max(1);
        let keep = stats.len() <= group;
        let groups = stats.len().div_ceil(group);
        bar.set_length((count * (1 + groups)) as u64);
        for g0 in (0..stats.len()).step_by(group) {
            let g1 = (g0 + group).min(stats.len());
            fill_histograms(&mut stats[g0..g1], g0, count, &run, &bar)?;
            if !keep {
                for s in &mut stats[g0..g1] {
                    s.chosen = Some(s.range(method));
                    s.hist = None;
                }
            }
        }
    }
    bar.finish_and_clear();
    Ok(stats)
}

/// Histograms of tensors `first..first + group.len()` over all samples:
/// one partial histogram per thread, summed (exact integer counts).
fn fill_histograms(
    group: &mut [TensorStats],
    first: usize,
    count: usize,
    run: &(impl Fn(usize) -> Result<Vec<Vec<f32>>> + Sync),
    bar: &indicatif::ProgressBar,
) -> Result<()> {
    let empty: Vec<Option<Histogram>> = group
        .iter()
        .map(|s| (s.min <= s.max).then(|| Histogram::new(s.min, s.max, BINS)))
        .collect();
    let parts = parallel::chunked(count, |samples| {
        let mut hists = empty.clone();
        for i in samples {
            let tensors = run(i)?;
            let part = tensors.get(first..first + hists.len()).unwrap_or(&[]);
            for (h, t) in hists.iter_mut().zip(part) {
                if let Some(h) = h.as_mut() {
                    h.add(t);
                }
            }
            bar.inc(1);
        }
        Ok(hists)
    });
    for (s, h) in group.iter_mut().zip(empty) {
        s.hist = h;
    }
    for part in parts {
        for (s, h) in group.iter_mut().zip(part?) {
            if let (Some(total), Some(h)) = (s.hist.as_mut(), h) {
                total.merge(&h);
            }
        }
    }
    Ok(())
}

/// A progress bar on stderr, drawn only when asked and stderr is a terminal.
pub fn progress_bar(show: bool, len: u64, what: &str) -> indicatif::ProgressBar {
    if !show || !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(len);
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("{msg:>12} [{bar:30}] {pos}/{len} {elapsed}")
    {
        bar.set_style(style.progress_chars("=> "));
    }
    bar.set_message(what.to_string());
    bar
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn stats_of(values: &[f32], method: RangeMethod) -> TensorStats {
        let v = values.to_vec();
        collect(1, method, false, |_| Ok(vec![v.clone()]))
            .unwrap()
            .remove(0)
    }

    /// Standard normal samples by the Box–Muller transform (common practice).
    fn normal(n: usize, seed: u64) -> Vec<f32> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        (0..n)
            .map(|_| {
                let u1: f64 = rng.gen_range(f64::MIN_POSITIVE..1.0);
                let u2: f64 = rng.gen();
                ((-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()) as f32
            })
            .collect()
    }

    #[test]
    fn minmax_is_exact_extremes() {
        let s = stats_of(&[0.5, -3.25, 7.0, 2.0], RangeMethod::MinMax);
        assert_eq!(
            s.range(RangeMethod::MinMax),
            Range {
                min: -3.25,
                max: 7.0
            }
        );
        assert!(s.hist.is_none());
    }

    #[test]
    fn percentile_of_uniform() {
        // Uniform on [a, b]: the p-quantile is a + p(b − a) (definition of the
        // uniform distribution's CDF; any statistics handbook).
        let (a, b) = (-2.0f32, 6.0f32);
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let v: Vec<f32> = (0..400_000).map(|_| rng.gen_range(a..b)).collect();
        let s = stats_of(&v, RangeMethod::Percentile(99.0));
        let r = s.range(RangeMethod::Percentile(99.0));
        let expect_hi = a + 0.99 * (b - a);
        let expect_lo = a + 0.01 * (b - a);
        // Sampling error of a quantile ~ sqrt(p(1−p)/n)·(b−a) ≈ 1.3e-3; bins 4e-3.
        assert!((r.max - expect_hi).abs() < 0.02, "{} vs {expect_hi}", r.max);
        assert!((r.min - expect_lo).abs() < 0.02, "{} vs {expect_lo}", r.min);
        // Median: a + 0.5(b − a).
        let h = s.hist.as_ref().unwrap();
        assert!((h.quantile(0.5) - 2.0).abs() < 0.02);
    }

    #[test]
    fn percentile_of_standard_normal() {
        // The standard normal 97.5 % quantile is 1.959964 (standard normal
        // table, e.g. Abramowitz & Stegun, Handbook of Mathematical Functions,
        // table 26.5; value from memory).
        let v = normal(400_000, 11);
        let s = stats_of(&v, RangeMethod::Percentile(97.5));
        let r = s.range(RangeMethod::Percentile(97.5));
        assert!((r.max - 1.959964).abs() < 0.03, "{}", r.max);
        assert!((r.min + 1.959964).abs() < 0.03, "{}", r.min);
        // And its 84.13 % quantile is 1.0 (one standard deviation; same table).
        let h = s.hist.as_ref().unwrap();
        assert!((h.quantile(0.8413) - 1.0).abs() < 0.03);
    }

    #[test]
    fn percentile_100_is_minmax() {
        let v = normal(10_000, 3);
        let s = stats_of(&v, RangeMethod::Percentile(100.0));
        let r = s.range(RangeMethod::Percentile(100.0));
        assert!((r.max - s.max).abs() < 1e-4 && (r.min - s.min).abs() < 1e-4);
    }

    #[test]
    fn mse_clips_a_heavy_tail_and_keeps_a_uniform_range() {
        // Laplace(0, 1) by inverse CDF (common practice). For 8 bits the
        // MSE-optimal symmetric clip of a Laplace(b) is about 9.9·b (Banner,
        // Nahshan & Soudry, "Post training 4-bit quantization of convolutional
        // networks for rapid-deployment", 2019, table of optimal clipping
        // values; from memory), well inside the sample maximum (≈ ln(n/2)·b ≈ 12
        // for n = 300 000).
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let v: Vec<f32> = (0..300_000)
            .map(|_| {
                let u: f64 = rng.gen_range(-0.5..0.5);
                (-u.signum() * (1.0 - 2.0 * u.abs()).ln()) as f32
            })
            .collect();
        let s = stats_of(&v, RangeMethod::Mse);
        let r = s.range(RangeMethod::Mse);
        let half_width = (r.max - r.min) / 2.0;
        assert!(
            r.max < s.max && r.min > s.min,
            "{r:?} vs [{}, {}]",
            s.min,
            s.max
        );
        assert!((half_width - 9.9).abs() < 2.0, "{r:?}");
        // Plain uniform data: clipping only hurts, the range stays (nearly) full.
        let u: Vec<f32> = (0..100_000).map(|_| rng.gen_range(-1.0..1.0)).collect();
        let s = stats_of(&u, RangeMethod::Mse);
        let r = s.range(RangeMethod::Mse);
        assert!(r.max > 0.95 && r.min < -0.95, "{r:?}");
    }

    #[test]
    fn collection_is_deterministic_and_checks_inputs() {
        let v = normal(5000, 9);
        let a = stats_of(&v, RangeMethod::Mse);
        let b = stats_of(&v, RangeMethod::Mse);
        assert_eq!(a, b);
        assert!(collect(0, RangeMethod::MinMax, false, |_| Ok(vec![])).is_err());
        let e = collect(1, RangeMethod::Percentile(20.0), false, |_| Ok(vec![])).unwrap_err();
        assert!(e.problem().contains("20"));
        // Non-finite samples are refused, not dropped.
        for bad in [f32::NAN, f32::INFINITY, f32::NEG_INFINITY] {
            let e = collect(2, RangeMethod::Mse, false, |i| {
                Ok(vec![
                    vec![0.5, 1.0],
                    vec![2.0, if i == 1 { bad } else { 0.0 }],
                ])
            })
            .unwrap_err();
            assert!(
                e.problem().contains("sample 1") && e.problem().contains("t1"),
                "{e}"
            );
        }
    }

    #[test]
    fn grouped_histograms_give_the_same_ranges() {
        // More tensors than one group's budget: ranges equal those of each
        // tensor collected on its own (where the histogram is kept).
        let n = HIST_BUDGET_BINS / BINS + 3;
        let samples: Vec<Vec<Vec<f32>>> = (0..3)
            .map(|i| {
                (0..n)
                    .map(|t| normal(40, (i * n + t) as u64))
                    .collect::<Vec<_>>()
            })
            .collect();
        // (Percentile only: an MSE search over thousands of tensors is slow
        // at test opt-level; both methods share the grouping code.)
        let method = RangeMethod::Percentile(99.0);
        let all = collect(3, method, false, |i| Ok(samples[i].clone())).unwrap();
        assert!(all.iter().all(|s| s.hist.is_none() && s.chosen.is_some()));
        for t in [0, n / 2, n - 1] {
            let one = collect(3, method, false, |i| Ok(vec![samples[i][t].clone()])).unwrap();
            assert!(one[0].hist.is_some());
            assert_eq!(all[t].range(method), one[0].range(method), "tensor {t}");
        }
    }

    #[test]
    fn with_zero_extends() {
        let r = Range { min: 0.5, max: 2.0 }.with_zero();
        assert_eq!(r, Range { min: 0.0, max: 2.0 });
        let r = Range {
            min: -3.0,
            max: -1.0,
        }
        .with_zero();
        assert_eq!(
            r,
            Range {
                min: -3.0,
                max: 0.0
            }
        );
    }
}
