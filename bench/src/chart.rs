//! The one chart library of the HTML reports: axis ticks on round numbers,
//! inline-SVG bar charts, histograms, capacity bars and heat maps, and the
//! self-contained page (inline CSS, no script, no fonts to fetch).

use std::fmt::Write as _;

/// Ticks of one axis: `values` from `lo` to `hi` (both ticks) every `step`,
/// printed with `decimals` digits after the point.
#[derive(Clone, Debug, PartialEq)]
pub struct Ticks {
    pub lo: f64,
    pub hi: f64,
    pub step: f64,
    pub decimals: usize,
    pub values: Vec<f64>,
}

/// The nice number near `x` > 0: 1, 2 or 5 (or 10) times a power of ten.
/// `round` picks the nearest (cuts at 1.5, 3, 7), otherwise the smallest not
/// below `x` — Heckbert's `nicenum` ("Nice numbers for graph labels",
/// Graphics Gems, 1990).
pub fn nice_number(x: f64, round: bool) -> f64 {
    if !(x.is_finite() && x > 0.0) {
        return 1.0;
    }
    let exp = x.log10().floor();
    let p = 10f64.powf(exp);
    let f = x / p;
    let nf = if round {
        match f {
            f if f < 1.5 => 1.0,
            f if f < 3.0 => 2.0,
            f if f < 7.0 => 5.0,
            _ => 10.0,
        }
    } else {
        match f {
            f if f <= 1.0 => 1.0,
            f if f <= 2.0 => 2.0,
            f if f <= 5.0 => 5.0,
            _ => 10.0,
        }
    };
    nf * p
}

/// About `n` ticks on round numbers covering `min..=max` (Heckbert's loose
/// labelling: the range made nice, the step the nice number nearest
/// range/(n − 1), the ends rounded outward to multiples of the step).
pub fn nice_ticks(min: f64, max: f64, n: usize) -> Ticks {
    let (mut min, mut max) = if min <= max { (min, max) } else { (max, min) };
    if !(min.is_finite() && max.is_finite()) {
        (min, max) = (0.0, 1.0);
    }
    if max - min <= 0.0 {
        // One value: a unit-wide axis (or one a tenth of it) around it.
        let pad = if min == 0.0 { 1.0 } else { min.abs() / 10.0 };
        if min >= 0.0 && min - pad < 0.0 {
            max = min + pad;
            min = 0.0;
        } else {
            (min, max) = (min - pad, max + pad);
        }
    }
    let range = nice_number(max - min, false);
    let step = nice_number(range / (n.max(2) - 1) as f64, true);
    let first = (min / step).floor();
    let last = (max / step).ceil();
    let decimals = (-step.log10().floor()).max(0.0) as usize;
    // Each tick from its integer multiple (no summed rounding error).
    let values: Vec<f64> = (0..=(last - first) as i64)
        .map(|k| round_to((first + k as f64) * step, decimals))
        .collect();
    Ticks {
        lo: values[0],
        hi: values[values.len() - 1],
        step,
        decimals,
        values,
    }
}

fn round_to(v: f64, decimals: usize) -> f64 {
    let p = 10f64.powi(decimals as i32);
    let r = (v * p).round() / p;
    if r == 0.0 {
        0.0
    } else {
        r
    }
}

impl Ticks {
    /// A tick's text: thousands as k, millions as M when the axis reaches
    /// 10 000, else the number with the axis's decimals.
    pub fn text(&self, v: f64) -> String {
        if v == 0.0 {
            return "0".into();
        }
        let top = self.lo.abs().max(self.hi.abs());
        for (div, suffix) in [(1e9, "G"), (1e6, "M"), (1e3, "k")] {
            if top >= 10.0 * div && self.step >= div / 10.0 {
                let d = (-(self.step / div).log10().floor()).max(0.0) as usize;
                return format!("{:.*}{suffix}", d, v / div);
            }
        }
        format!("{:.*}", self.decimals, v)
    }

    /// Where `v` falls between `lo` (0) and `hi` (1).
    fn frac(&self, v: f64) -> f64 {
        if self.hi > self.lo {
            (v - self.lo) / (self.hi - self.lo)
        } else {
            0.0
        }
    }
}

/// A dashed reference line of a chart: value and caption.
pub type RefLine = (f64, String);

/// Canvas and plot area of one chart (SVG user units).
struct Frame {
    w: f64,
    h: f64,
    left: f64,
    right: f64,
    top: f64,
    bottom: f64,
}

impl Frame {
    fn plot_w(&self) -> f64 {
        self.w - self.left - self.right
    }
    fn plot_h(&self) -> f64 {
        self.h - self.top - self.bottom
    }
    fn x(&self, t: &Ticks, v: f64) -> f64 {
        self.left + self.plot_w() * t.frac(v)
    }
    fn y(&self, t: &Ticks, v: f64) -> f64 {
        self.top + self.plot_h() * (1.0 - t.frac(v))
    }
    /// The opening tag; `chart` names the chart in `data-chart`.
    fn open(&self, chart: &str) -> String {
        format!(
            "<svg class='chart' data-chart='{}' viewBox='0 0 {} {}' xmlns='http://www.w3.org/2000/svg' role='img'>",
            esc(chart),
            self.w,
            self.h
        )
    }
    /// Horizontal grid lines and labels at the value ticks `t`.
    fn y_axis(&self, s: &mut String, t: &Ticks, unit: &str) {
        for &v in &t.values {
            let y = self.y(t, v);
            let _ = write!(
                s,
                "<line x1='{}' x2='{}' y1='{y:.1}' y2='{y:.1}' class='{}'/><text x='{}' y='{:.1}' class='tick' text-anchor='end'>{}</text>",
                self.left,
                self.w - self.right,
                if v == 0.0 { "axis" } else { "grid" },
                self.left - 6.0,
                y + 4.0,
                t.text(v)
            );
        }
        let _ = write!(
            s,
            "<text class='unit' x='{}' y='14'>{}</text>",
            self.left,
            esc(unit)
        );
    }
    /// Vertical grid lines and labels below the plot at the ticks `t`.
    fn x_axis(&self, s: &mut String, t: &Ticks, unit: &str) {
        let base = self.top + self.plot_h();
        for &v in &t.values {
            let x = self.x(t, v);
            let _ = write!(
                s,
                "<line x1='{x:.1}' x2='{x:.1}' y1='{}' y2='{base}' class='{}'/><text x='{x:.1}' y='{}' class='tick' text-anchor='middle'>{}</text>",
                self.top,
                if v == 0.0 { "axis" } else { "grid" },
                base + 14.0,
                t.text(v)
            );
        }
        let _ = write!(
            s,
            "<text class='unit' x='{}' y='{}' text-anchor='end'>{}</text>",
            self.w - self.right,
            base + 30.0,
            esc(unit)
        );
    }
}

/// A vertical bar chart as inline SVG: one bar per label (from zero, so
/// negative values hang below the axis), an optional highlighted bar and
/// dashed reference lines (value, caption); value ticks on round numbers.
pub fn bar_chart(
    chart: &str,
    labels: &[String],
    values: &[f64],
    unit: &str,
    highlight: Option<usize>,
    lines: &[RefLine],
) -> String {
    let n = values.len().max(1);
    let f = Frame {
        w: 900.0,
        h: 300.0,
        left: 70.0,
        right: 10.0,
        top: 26.0,
        bottom: 100.0,
    };
    let top_bar = values.iter().copied().fold(0.0f64, f64::max);
    // Reference lines far above the bars would flatten them: those are
    // named in a caption instead of drawn.
    let (drawn, off): (Vec<&RefLine>, Vec<&RefLine>) = lines
        .iter()
        .partition(|l| l.0 <= 3.0 * top_bar || top_bar <= 0.0);
    let finite = |v: &f64| v.is_finite();
    let max = values
        .iter()
        .copied()
        .chain(drawn.iter().map(|l| l.0))
        .filter(finite)
        .fold(0.0f64, f64::max);
    let min = values.iter().copied().filter(finite).fold(0.0f64, f64::min);
    let t = nice_ticks(min, max, 5);
    let bw = f.plot_w() / n as f64;
    let mut s = f.open(chart);
    f.y_axis(&mut s, &t, unit);
    let zero = f.y(&t, 0.0);
    for (i, &v) in values.iter().enumerate() {
        let x = f.left + bw * i as f64;
        let cls = if Some(i) == highlight {
            "bar hi"
        } else {
            "bar"
        };
        let label = labels.get(i).map(|l| esc(l)).unwrap_or_default();
        let y = f.y(&t, if v.is_finite() { v } else { 0.0 });
        let _ = write!(
            s,
            "<rect class='{cls}' x='{:.1}' y='{:.1}' width='{:.1}' height='{:.1}'><title>{label}: {} {}</title></rect>",
            x + bw * 0.12,
            y.min(zero),
            (bw * 0.76).max(0.5),
            (y - zero).abs().max(0.5),
            short(v),
            esc(unit)
        );
        if n <= 48 {
            let _ = write!(
                s,
                "<text class='lab' transform='translate({:.1},{:.1}) rotate(-55)' text-anchor='end'>{label}</text>",
                x + bw / 2.0 + 3.0,
                f.top + f.plot_h() + 10.0
            );
        }
    }
    for (v, cap) in drawn {
        let y = f.y(&t, *v);
        let _ = write!(
            s,
            "<line class='ref' x1='{}' x2='{}' y1='{y:.1}' y2='{y:.1}'/><text class='refcap' x='{}' y='{:.1}' text-anchor='end'>{} {}</text>",
            f.left,
            f.w - f.right,
            f.w - f.right - 2.0,
            y - 4.0,
            esc(cap),
            short(*v)
        );
    }
    if !off.is_empty() {
        let names: Vec<String> = off
            .iter()
            .map(|(v, c)| format!("{} {}", esc(c), short(*v)))
            .collect();
        let _ = write!(
            s,
            "<text class='refcap' x='{}' y='14'>off scale: {}</text>",
            f.left + 40.0,
            names.join(", ")
        );
    }
    s += "</svg>";
    s
}

/// A histogram as inline SVG: `counts` in equal bins from `lo` to `hi`,
/// both axes ticked on round numbers.
pub fn histogram(chart: &str, lo: f64, hi: f64, counts: &[u64], x_unit: &str) -> String {
    // An empty range (every value equal) is drawn one unit wide around it.
    let (lo, hi) = if hi > lo {
        (lo, hi)
    } else {
        (lo - 0.5, lo + 0.5)
    };
    let f = Frame {
        w: 900.0,
        h: 260.0,
        left: 70.0,
        right: 14.0,
        top: 26.0,
        bottom: 44.0,
    };
    let xt = nice_ticks(lo, hi, 9);
    let top = counts.iter().copied().max().unwrap_or(0) as f64;
    let yt = nice_ticks(0.0, top.max(1.0), 5);
    let mut s = f.open(chart);
    f.y_axis(&mut s, &yt, "count");
    f.x_axis(&mut s, &xt, x_unit);
    let n = counts.len().max(1) as f64;
    let width = (hi - lo) / n;
    let base = f.y(&yt, 0.0);
    for (i, &c) in counts.iter().enumerate() {
        let (a, b) = (lo + width * i as f64, lo + width * (i + 1) as f64);
        let (x0, x1) = (f.x(&xt, a), f.x(&xt, b));
        let y = f.y(&yt, c as f64);
        let _ = write!(
            s,
            "<rect class='bar' x='{x0:.1}' y='{y:.1}' width='{:.1}' height='{:.1}'><title>{} to {}: {c}</title></rect>",
            (x1 - x0 - 0.6).max(0.5),
            (base - y).max(if c > 0 { 0.5 } else { 0.0 }),
            short(a),
            short(b)
        );
    }
    s += "</svg>";
    s
}

/// One row of a capacity chart: what is used of what is available.
#[derive(Clone, Debug, PartialEq)]
pub struct Capacity {
    pub label: String,
    pub used: u64,
    pub available: u64,
}

/// Horizontal bars of use against capacity, in percent of each row's
/// capacity (ticks on round numbers, a dashed line at 100 %), with the
/// bytes written beside each bar.
pub fn capacity_chart(chart: &str, rows: &[Capacity]) -> String {
    let row_h = 34.0;
    let f = Frame {
        w: 900.0,
        h: 44.0 + row_h * rows.len().max(1) as f64,
        left: 130.0,
        right: 250.0,
        top: 8.0,
        bottom: 36.0,
    };
    let pct = |r: &Capacity| {
        if r.available == 0 {
            if r.used == 0 {
                0.0
            } else {
                f64::INFINITY
            }
        } else {
            100.0 * r.used as f64 / r.available as f64
        }
    };
    let top = rows
        .iter()
        .map(pct)
        .filter(|p| p.is_finite())
        .fold(100.0f64, f64::max);
    let t = nice_ticks(0.0, top, 6);
    let mut s = f.open(chart);
    f.x_axis(&mut s, &t, "% of available");
    let limit = f.x(&t, 100.0);
    for (i, r) in rows.iter().enumerate() {
        let y = f.top + row_h * i as f64 + 6.0;
        let p = pct(r);
        let over = p > 100.0;
        let x1 = f.x(&t, p.min(t.hi));
        let _ = write!(
            s,
            "<text class='lab' x='{}' y='{:.1}' text-anchor='end'>{}</text><rect class='room' x='{}' y='{y:.1}' width='{:.1}' height='{:.1}'/><rect class='{}' x='{}' y='{y:.1}' width='{:.1}' height='{:.1}'><title>{}: {} of {}</title></rect><text class='lab' x='{}' y='{:.1}'>{} of {} ({})</text>",
            f.left - 8.0,
            y + 15.0,
            esc(&r.label),
            f.left,
            limit - f.left,
            row_h - 12.0,
            if over { "bar over" } else { "bar" },
            f.left,
            (x1 - f.left).max(0.5),
            row_h - 12.0,
            esc(&r.label),
            kib(r.used),
            kib(r.available),
            f.w - f.right + 8.0,
            y + 15.0,
            kib(r.used),
            kib(r.available),
            if p.is_finite() { format!("{p:.1} %") } else { "no room".into() }
        );
    }
    let _ = write!(
        s,
        "<line class='ref' x1='{limit:.1}' x2='{limit:.1}' y1='{}' y2='{}'/>",
        f.top,
        f.top + f.plot_h()
    );
    s += "</svg>";
    s
}

/// A square heat map of counts (`m[row][col]`), rows and columns named by
/// `labels`; each cell shaded by its share of its row, the diagonal in the
/// bar colour and the rest in the warning colour, counts written in.
pub fn heat_map(
    chart: &str,
    labels: &[String],
    m: &[Vec<usize>],
    rows: &str,
    cols: &str,
) -> String {
    let k = labels.len().max(1) as f64;
    let longest = labels.iter().map(|l| l.chars().count()).max().unwrap_or(1) as f64;
    let left = (longest * 7.5 + 40.0).clamp(70.0, 200.0);
    // Two maps of up to ~12 classes fit side by side in the page's column.
    let cell = (300.0 / k).clamp(14.0, 64.0);
    let top = 40.0 + (longest * 5.5).min(120.0);
    let (w, h) = (left + cell * k + 20.0, top + cell * k + 16.0);
    let mut s = format!(
        "<svg class='chart heat' data-chart='{}' viewBox='0 0 {w} {h}' width='{w}' xmlns='http://www.w3.org/2000/svg' role='img'>",
        esc(chart)
    );
    let _ = write!(
        s,
        "<text class='unit' x='{left}' y='14'>{} →</text><text class='unit' x='{}' y='{}' text-anchor='end'>{} ↓</text>",
        esc(cols),
        left - 6.0,
        top - 6.0,
        esc(rows)
    );
    for (j, l) in labels.iter().enumerate() {
        let _ = write!(
            s,
            "<text class='lab' transform='translate({:.1},{:.1}) rotate(-45)'>{}</text>",
            left + cell * (j as f64 + 0.5) - 2.0,
            top - 6.0,
            esc(l)
        );
    }
    let font = (cell * 0.36).clamp(8.0, 14.0);
    for (i, l) in labels.iter().enumerate() {
        let row = m.get(i).map(|r| r.as_slice()).unwrap_or(&[]);
        let total: usize = row.iter().sum();
        let y = top + cell * i as f64;
        let _ = write!(
            s,
            "<text class='lab' x='{:.1}' y='{:.1}' text-anchor='end'>{}</text>",
            left - 6.0,
            y + cell / 2.0 + 4.0,
            esc(l)
        );
        for j in 0..labels.len() {
            let c = row.get(j).copied().unwrap_or(0);
            let share = if total > 0 {
                c as f64 / total as f64
            } else {
                0.0
            };
            let (cls, opacity) = match (i == j, c) {
                (_, 0) => ("cell", 1.0),
                (true, _) => ("cell hit", 0.15 + 0.85 * share),
                (false, _) => ("cell miss", 0.25 + 0.75 * share),
            };
            let x = left + cell * j as f64;
            let _ = write!(
                s,
                "<rect class='{cls}' x='{x:.1}' y='{y:.1}' width='{:.1}' height='{:.1}' fill-opacity='{opacity:.2}'><title>true {}, predicted {}: {c}</title></rect><text class='count{}' x='{:.1}' y='{:.1}' text-anchor='middle' font-size='{font:.0}'>{c}</text>",
                cell - 2.0,
                cell - 2.0,
                esc(l),
                esc(labels.get(j).map(|s| s.as_str()).unwrap_or("")),
                match c {
                    0 => " zero",
                    _ if opacity > 0.6 => " light",
                    _ => "",
                },
                x + cell / 2.0 - 1.0,
                y + cell / 2.0 + font * 0.35
            );
        }
    }
    s += "</svg>";
    s
}

/// Text escaped for HTML and SVG (element content and quoted attributes).
pub fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
        .replace('\'', "&#39;")
}

/// Digits grouped in threes with thin spaces.
pub fn group(v: u64) -> String {
    let s = v.to_string();
    let mut out = String::new();
    for (i, ch) in s.chars().enumerate() {
        if i > 0 && (s.len() - i).is_multiple_of(3) {
            out.push('\u{2009}');
        }
        out.push(ch);
    }
    out
}

/// Bytes as `n B` below 1 KiB, else KiB with one decimal.
pub fn kib(b: u64) -> String {
    if b >= 1024 {
        format!("{:.1} KiB", b as f64 / 1024.0)
    } else {
        format!("{b} B")
    }
}

/// A value in a few characters (k, M, G for large ones).
pub fn short(v: f64) -> String {
    let a = v.abs();
    if a >= 1e9 {
        format!("{:.1}G", v / 1e9)
    } else if a >= 1e6 {
        format!("{:.1}M", v / 1e6)
    } else if a >= 1e4 {
        format!("{:.1}k", v / 1e3)
    } else if a >= 100.0 || v == v.trunc() {
        format!("{v:.0}")
    } else if a >= 0.01 {
        format!("{v:.2}")
    } else {
        format!("{v:.2e}")
    }
}

/// The whole page: `title`, the header band naming the tool `part`, `body`.
pub fn page(title: &str, part: &str, body: &str) -> String {
    format!(
        "<!doctype html><html lang=en><head><meta charset=utf-8><title>{}</title><style>{}</style></head><body><header>midge · {}</header><main>{}</main></body></html>\n",
        esc(title),
        STYLE,
        esc(part),
        body
    )
}

const STYLE: &str = "\
body{margin:0;background:#f6f3ee;color:#2b2a28;font:15px/1.45 'Iowan Old Style',Georgia,serif}\
header{background:#23403a;color:#f6f3ee;padding:10px 28px;font:600 13px/1 ui-monospace,Menlo,monospace;letter-spacing:.18em;text-transform:uppercase}\
main{max-width:960px;margin:0 auto;padding:8px 28px 48px}\
h1{font-weight:600;margin:22px 0 2px}h2{font-size:17px;margin:30px 0 4px;border-bottom:2px solid #d9cbb3;padding-bottom:3px}\
.sub,.note{color:#6b655c;margin:2px 0 8px}\
.cards{display:flex;gap:12px;flex-wrap:wrap;margin:8px 0}.card{padding:10px 14px;border-radius:6px;background:#fff;border-left:6px solid #3f8f7f;font:13px ui-monospace,Menlo,monospace}\
.card.over{border-left-color:#c2572f}.card b{display:block;font-size:14px}.card span{float:right;margin-left:12px;font-weight:700}\
.card.ok span{color:#2f7d6d}.card.over span{color:#c2572f}.card.plain{border-left-color:#9a9184}\
.card big{display:block;font-size:22px;font-weight:700}\
svg.chart{width:100%;height:auto;background:#fff;border-radius:6px;display:block}svg.heat{max-width:100%;width:auto}\
.grid{stroke:#ece5d9}.axis{stroke:#b9ad9a}.tick,.lab,.unit{font:10px ui-monospace,Menlo,monospace;fill:#6b655c}.lab{font-size:11px;fill:#2b2a28}\
.bar{fill:#5fa596}.bar.hi{fill:#23403a}.bar.over{fill:#c2572f}.bar:hover{fill:#d9953b}.room{fill:#efe9df}\
.cell{fill:#f3efe8}.cell.hit{fill:#23403a}.cell.miss{fill:#c2572f}.count{font-family:ui-monospace,Menlo,monospace;fill:#2b2a28}.count.light{fill:#fff}.count.zero{fill:#c9bfb0}\
.ref{stroke:#c2572f;stroke-dasharray:5 4}.refcap{font:11px ui-monospace,Menlo,monospace;fill:#c2572f}\
table{border-collapse:collapse;font:12px ui-monospace,Menlo,monospace;background:#fff}\
td,th{padding:3px 9px;text-align:right;border-bottom:1px solid #eee6d8}td:nth-child(2),th:nth-child(2){text-align:left}\
td:first-child,th:first-child{text-align:left}\
tr.peak td{background:#f3e3cc;font-weight:700}pre{font:12px ui-monospace,Menlo,monospace;background:#fff;padding:10px;overflow:auto}";

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nice_numbers_follow_the_rule() {
        // Heckbert 1990: nice numbers are 1, 2, 5 × 10^k; "round" cuts at
        // 1.5, 3 and 7, otherwise the next nice number not below x. Each
        // expectation below is worked by hand from that rule.
        assert_eq!(nice_number(87.0, false), 100.0); // 8.7 > 5 → 10 × 10
        assert_eq!(nice_number(25.0, true), 20.0); // 2.5 < 3 → 2 × 10
        assert_eq!(nice_number(1.4, true), 1.0); // 1.4 < 1.5 → 1
        assert_eq!(nice_number(0.035, true), 0.05); // 3.5 < 7 → 5 × 10⁻²
        assert_eq!(nice_number(7.0, true), 10.0); // 7 is not < 7 → 10
        assert_eq!(nice_number(2.0, false), 2.0); // ≤ 2 → 2
        assert_eq!(nice_number(2.01, false), 5.0);
        assert_eq!(nice_number(4096.0, false), 5000.0);
    }

    #[test]
    fn loose_labels_worked_by_hand() {
        let v = |a: f64, b: f64, n| nice_ticks(a, b, n).values;
        // The brief's example, by hand: range nice(87) = 100, step
        // nice(100/4 = 25, round) = 20, ends floor(0/20)·20 = 0 and
        // ceil(87/20)·20 = 100.
        assert_eq!(v(0.0, 87.0, 5), [0.0, 20.0, 40.0, 60.0, 80.0, 100.0]);
        // nice(1) = 1, step nice(0.25) = 0.2, ticks 0..1 by 0.2 (no 0.6000…1).
        assert_eq!(v(0.0, 1.0, 5), [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]);
        // nice(7.9) = 10, step nice(2.5) = 2, ends −4 and 6.
        assert_eq!(v(-3.2, 4.7, 5), [-4.0, -2.0, 0.0, 2.0, 4.0, 6.0]);
        // nice(4096) = 5000, step nice(1250) = 1000, ends 0 and 5000.
        assert_eq!(
            v(0.0, 4096.0, 5),
            [0.0, 1000.0, 2000.0, 3000.0, 4000.0, 5000.0]
        );
        // nice(0.034) = 0.05, step nice(0.0125) = 0.01, ends −0.02 and 0.02.
        let t = nice_ticks(-0.017, 0.017, 5);
        assert_eq!(t.values, [-0.02, -0.01, 0.0, 0.01, 0.02]);
        assert_eq!(t.decimals, 2);
        assert_eq!(t.text(-0.01), "-0.01");
    }

    #[test]
    fn every_tick_is_one_two_or_five_times_a_power_of_ten_apart() {
        // Property of the rule over many ranges: the step is a nice number,
        // the ticks cover the range, and each tick is a multiple of the step.
        for i in 1..400 {
            let max = i as f64 * 3.7 + 0.013 * i as f64 * i as f64;
            let min = -(i as f64 % 7.0) * 1.3;
            let t = nice_ticks(min, max, 5);
            let e = t.step.log10().floor();
            let m = t.step / 10f64.powf(e);
            assert!(
                [1.0, 2.0, 5.0, 10.0].iter().any(|n| (m - n).abs() < 1e-9),
                "step {}",
                t.step
            );
            assert!(t.lo <= min && t.hi >= max, "{min}..{max}: {t:?}");
            for v in &t.values {
                let k = v / t.step;
                assert!((k - k.round()).abs() < 1e-6, "{v} / {}", t.step);
            }
            assert!((4..=12).contains(&t.values.len()), "{t:?}");
        }
    }

    #[test]
    fn degenerate_ranges_still_give_an_axis() {
        assert_eq!(nice_ticks(0.0, 0.0, 5).values.first(), Some(&0.0));
        assert!(nice_ticks(0.0, 0.0, 5).values.len() >= 2);
        let t = nice_ticks(50.0, 50.0, 5);
        assert!(t.lo < 50.0 && t.hi > 50.0);
        let t = nice_ticks(f64::NAN, 3.0, 5);
        assert!(t.values.len() >= 2);
    }

    #[test]
    fn tick_text_uses_k_for_large_axes() {
        let t = nice_ticks(0.0, 48_000.0, 5);
        assert_eq!(t.values[1], 10_000.0);
        assert_eq!(t.text(10_000.0), "10k");
        assert_eq!(t.text(0.0), "0");
        assert_eq!(nice_ticks(0.0, 870.0, 5).text(200.0), "200");
    }

    #[test]
    fn chart_escapes_and_highlights() {
        let svg = bar_chart(
            "x",
            &["0 <conv>".into(), "1 add".into()],
            &[10.0, 20.0],
            "B",
            Some(1),
            &[(15.0, "limit".into())],
        );
        assert!(svg.contains("&lt;conv&gt;") && !svg.contains("<conv>"));
        assert_eq!(svg.matches("class='bar hi'").count(), 1);
        assert!(svg.contains("class='ref'") && svg.contains("data-chart='x'"));
        assert_eq!(group(1234567), "1\u{2009}234\u{2009}567");
    }

    #[test]
    fn negative_bars_hang_below_the_zero_line() {
        let svg = bar_chart(
            "q",
            &["a".into(), "b".into()],
            &[-5.0, 10.0],
            "dB",
            None,
            &[],
        );
        // Ticks −5..10 → nice(15)=20, step 5: −5, 0, 5, 10; the zero line is
        // drawn as the axis.
        assert!(svg.contains(">-5</text>") && svg.contains("class='axis'"));
        let ys: Vec<f64> = svg
            .split("<rect class='bar' x='")
            .skip(1)
            .map(|r| {
                r.split("y='")
                    .nth(1)
                    .unwrap()
                    .split('\'')
                    .next()
                    .unwrap()
                    .parse()
                    .unwrap()
            })
            .collect();
        // The negative bar starts at the zero line, below the positive one's top.
        assert!(ys[0] > ys[1], "{ys:?}");
    }

    #[test]
    fn heat_map_writes_counts_and_shades_by_row_share() {
        let svg = heat_map(
            "c",
            &["a".into(), "b".into()],
            &[vec![9, 1], vec![0, 4]],
            "true",
            "predicted",
        );
        assert_eq!(svg.matches("<rect").count(), 4);
        assert!(svg.contains(">9</text>") && svg.contains(">4</text>"));
        assert_eq!(svg.matches("cell hit").count(), 2);
        assert_eq!(svg.matches("cell miss").count(), 1);
        // 9 of 10 in its row: 0.15 + 0.85·0.9 = 0.915 → 0.92 (by hand).
        assert!(svg.contains("fill-opacity='0.92'"));
        // Zero counts are written faintly.
        assert_eq!(svg.matches("class='count zero'").count(), 1);
    }

    #[test]
    fn capacity_chart_marks_rows_over_capacity() {
        let svg = capacity_chart(
            "b",
            &[
                Capacity {
                    label: "RAM".into(),
                    used: 150,
                    available: 100,
                },
                Capacity {
                    label: "flash".into(),
                    used: 50,
                    available: 100,
                },
            ],
        );
        assert_eq!(svg.matches("class='bar over'").count(), 1);
        assert!(svg.contains("(150.0 %)") && svg.contains("(50.0 %)"));
        // Axis 0..150 → nice(150)=200, step nice(40)=50 → ends 0 and 150.
        assert!(svg.contains(">150</text>") && !svg.contains(">200</text>"));
    }

    #[test]
    fn histogram_places_bins_on_the_value_axis() {
        let svg = histogram("h", -1.0, 1.0, &[1, 0, 3, 2], "logit");
        assert_eq!(svg.matches("<rect").count(), 4);
        assert!(svg.contains("<title>-0.50 to 0: 0</title>"));
        assert!(svg.contains(">-1.0</text>") && svg.contains(">0.2</text>"));
        // All errors zero: the middle of three bins spans −1/6..1/6.
        let svg = histogram("h", 0.0, 0.0, &[0, 5, 0], "logit");
        assert!(svg.contains("<title>-0.17 to 0.17: 5</title>"), "{svg}");
    }
}
