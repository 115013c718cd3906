//! Rendering bench results: terminal tables, JSON, and a self-contained HTML
//! page with inline SVG charts (memory timeline, per-layer latency,
//! per-layer SQNR) in midge's own look.

use std::fmt::Write as _;

use crate::budget::Budget;
use crate::footprint::ModelFootprint;
use midge_convert::compare::LayerRow as SqnrRow;
use midge_convert::error::escape;
use serde::Serialize;

use crate::emulated::EmulatedReport;
use crate::host::{HostLatency, Spread};
use crate::sweep::SweepRow;

/// Everything one `midge report` run found.
#[derive(Clone, Debug, Serialize)]
pub struct BenchReport {
    pub footprint: ModelFootprint,
    pub budgets: Vec<Budget>,
    pub host: Option<HostLatency>,
    pub emulated: Vec<EmulatedReport>,
    /// (target, reason) for targets whose emulated run was not possible.
    pub not_emulated: Vec<(String, String)>,
    /// Per-layer SQNR from a compare run, when one was included.
    pub sqnr: Option<Vec<SqnrRow>>,
}

/// A plain text table: first column left-aligned, the others right-aligned.
pub fn table(headers: &[&str], rows: &[Vec<String>]) -> String {
    let n = headers.len();
    let mut w: Vec<usize> = headers.iter().map(|h| h.chars().count()).collect();
    for r in rows {
        for (i, c) in r.iter().enumerate().take(n) {
            w[i] = w[i].max(c.chars().count());
        }
    }
    let line = |cells: Vec<&str>| -> String {
        let mut s = String::new();
        for (i, c) in cells.iter().enumerate() {
            let pad = w[i].saturating_sub(c.chars().count());
            if i == 0 {
                s += c;
                s += &" ".repeat(pad);
            } else {
                s += "  ";
                s += &" ".repeat(pad);
                s += c;
            }
        }
        s.trim_end().to_string() + "\n"
    };
    let mut out = line(headers.to_vec());
    out += &line(
        w.iter()
            .map(|&k| "-".repeat(k))
            .collect::<Vec<_>>()
            .iter()
            .map(|s| s.as_str())
            .collect(),
    );
    for r in rows {
        out += &line(r.iter().map(|s| s.as_str()).collect());
    }
    out
}

/// A per-layer table: `layer`, `op`, `MACs` and the `extra` columns of each
/// `(index, op, MACs, cells)` row, closed by an `all` row with the whole
/// model's MACs and `total` cells.
fn layer_table<'a>(
    extra: &[&str],
    layers: impl Iterator<Item = (usize, &'a str, u64, Vec<String>)>,
    macs: u64,
    total: Vec<String>,
) -> String {
    let headers: Vec<&str> = ["layer", "op", "MACs"]
        .iter()
        .chain(extra)
        .copied()
        .collect();
    let row = |index: String, op: &str, macs: u64, cells: Vec<String>| {
        let mut v = vec![index, op.to_string(), macs.to_string()];
        v.extend(cells);
        v
    };
    let mut rows: Vec<Vec<String>> = layers
        .map(|(i, op, m, cells)| row(i.to_string(), op, m, cells))
        .collect();
    rows.push(row("all".into(), "", macs, total));
    table(&headers, &rows)
}

fn shape(s: [u16; 3]) -> String {
    format!("{}×{}×{}", s[0], s[1], s[2])
}

fn us(ns: u64) -> String {
    format!("{:.1}", ns as f64 / 1e3)
}

impl BenchReport {
    pub fn render_text(&self) -> String {
        let fp = &self.footprint;
        let mut s = format!(
            "model {}: {} layers, {} parameters, {} MACs, file {} B, workspace {} B (lower bound {} B)\n\n",
            escape(&fp.name),
            fp.layers.len(),
            fp.params,
            fp.macs,
            fp.sections.total,
            fp.workspace_len,
            fp.lower_bound
        );
        let rows: Vec<Vec<String>> = fp
            .layers
            .iter()
            .map(|r| {
                vec![
                    r.index.to_string(),
                    r.op.to_string(),
                    r.elem.to_string(),
                    shape(r.output_shape),
                    r.params.to_string(),
                    r.weight_bytes.to_string(),
                    r.macs.to_string(),
                    r.live_bytes.to_string(),
                    if Some(r.index) == fp.peak_layer {
                        "◀ peak".into()
                    } else {
                        String::new()
                    },
                ]
            })
            .collect();
        s += &table(
            &[
                "layer", "op", "type", "output", "params", "weight B", "MACs", "live B", "",
            ],
            &rows,
        );
        let sec = &fp.sections;
        s += &format!(
            "\nfile sections: header {} + tensors {} + layers {} + weights {} + biases {} + params {} + strings {} + padding {} = {} B\n",
            sec.header, sec.tensor_table, sec.layer_table, sec.weights, sec.biases, sec.params, sec.strings, sec.padding, sec.total
        );
        if let Some(h) = &self.host {
            s += &format!(
                "\nhost latency ({} runs after {} warm-up; µs):\n",
                h.runs, h.warmup
            );
            let cells = |t: &Spread, macs_per_s: f64| {
                vec![
                    us(t.median_ns),
                    format!("{}–{}", us(t.min_ns), us(t.max_ns)),
                    format!("{:.0}", macs_per_s / 1e6),
                ]
            };
            s += &layer_table(
                &["median", "min–max", "MMAC/s"],
                h.layers
                    .iter()
                    .map(|l| (l.index, l.op, l.macs, cells(&l.time, l.macs_per_s))),
                h.macs,
                cells(&h.total, h.macs_per_s),
            );
        }
        for e in &self.emulated {
            s += &format!(
                "\nemulated on {} ({}, {}): calibration {} / {} ticks → {:.2} instructions per tick ({}); stack {} B (runtime), outputs {} the host's\n",
                e.target,
                e.machine,
                e.triple,
                e.calibration.0,
                e.calibration.1,
                e.instructions_per_tick,
                if e.calibration_ok { "40 000 NOPs = 1 000 ticks, ok" } else { "NOT the expected 1 000 ticks" },
                e.stack_runtime,
                if e.matches_host { "equal" } else { "DIFFER FROM" }
            );
            s += &layer_table(
                &["instructions", "est. cycles", "est. ms"],
                e.layers.iter().map(|l| {
                    let cells = vec![
                        l.instructions.to_string(),
                        format!("{:.0}", l.est_cycles),
                        format!("{:.3}", l.est_ms),
                    ];
                    (l.index, l.op, l.macs, cells)
                }),
                fp.macs,
                vec![
                    e.instructions.to_string(),
                    String::new(),
                    format!("{:.3}", e.est_ms),
                ],
            );
        }
        for (t, why) in &self.not_emulated {
            s += &format!("\nemulated on {t}: not measured: {why}\n");
        }
        if let Some(q) = &self.sqnr {
            s += "\nper-layer SQNR (float reference vs runtime):\n";
            let rows: Vec<Vec<String>> = q
                .iter()
                .map(|r| {
                    vec![
                        escape(&r.name).into_owned(),
                        r.op.clone(),
                        r.precision.clone(),
                        r.sqnr_db.map_or("exact".into(), |d| format!("{d:.1} dB")),
                    ]
                })
                .collect();
            s += &table(&["layer", "op", "precision", "SQNR"], &rows);
        }
        for b in &self.budgets {
            s += "\n";
            s += &b.render_text();
        }
        s
    }

    pub fn render_html(&self) -> String {
        let fp = &self.footprint;
        let mut body = String::new();
        let _ = write!(
            body,
            "<h1>{}</h1><p class=sub>{} layers · {} parameters · {} MACs · file {} · workspace {} (lower bound {})</p>",
            esc(&fp.name),
            fp.layers.len(),
            group(fp.params),
            group(fp.macs),
            kib(fp.sections.total as u64),
            kib(fp.workspace_len as u64),
            kib(fp.lower_bound as u64)
        );
        if !self.budgets.is_empty() {
            body += "<h2>Budgets</h2><div class=cards>";
            for b in &self.budgets {
                let _ = write!(
                    body,
                    "<div class='card {}'><b>{}</b><span>{}</span>flash {} / {}<br>RAM {} / {}{}</div>",
                    if b.fits { "ok" } else { "over" },
                    esc(&b.target),
                    if b.fits { "fits" } else { "does not fit" },
                    kib(b.flash_bytes),
                    kib(b.flash_limit),
                    kib(b.ram_bytes),
                    kib(b.ram_limit),
                    if b.complete { "" } else { "<br><i>some items not measured</i>" }
                );
            }
            body += "</div>";
            if let Some(b) = self.budgets.iter().find(|b| !b.op_set.is_empty()) {
                let _ = write!(
                    body,
                    "<p class=sub>runtime code measured on firmware linking the model's op set: {}</p>",
                    esc(&b.op_set.join(", "))
                );
            }
        }
        let labels: Vec<String> = fp
            .layers
            .iter()
            .map(|r| format!("{} {}", r.index, r.op))
            .collect();
        let live: Vec<f64> = fp.layers.iter().map(|r| r.live_bytes as f64).collect();
        let mut lines = vec![(fp.workspace_len as f64, "workspace".to_string())];
        for b in &self.budgets {
            lines.push((b.ram_limit as f64, format!("{} RAM", b.target)));
        }
        body += "<h2>Memory timeline</h2><p class=note>Workspace bytes live at each layer step; the darker bar sets the peak.</p>";
        body += &bar_chart(&labels, &live, "B", fp.peak_layer, &lines);
        if let Some(h) = &self.host {
            let v: Vec<f64> = h
                .layers
                .iter()
                .map(|l| l.time.median_ns as f64 / 1e3)
                .collect();
            let _ = write!(
                body,
                "<h2>Host latency per layer</h2><p class=note>Median of {} runs after {} warm-up, µs; whole model {} µs median ({}–{}).</p>",
                h.runs,
                h.warmup,
                us(h.total.median_ns),
                us(h.total.min_ns),
                us(h.total.max_ns)
            );
            body += &bar_chart(&labels, &v, "µs", None, &[]);
        }
        for e in &self.emulated {
            let v: Vec<f64> = e.layers.iter().map(|l| l.instructions as f64).collect();
            let _ = write!(
                body,
                "<h2>Emulated instructions per layer — {}</h2><p class=note>{} on {} (icount); {} instructions, estimate {:.2} ms at the profile's clock and CPI (an estimate, not a measurement). Calibration {}. Outputs {} the host's bit for bit. Stack {} B.</p>",
                esc(&e.target),
                esc(&e.machine),
                esc(&e.qemu),
                group(e.instructions),
                e.est_ms,
                if e.calibration_ok { "ok" } else { "off" },
                if e.matches_host { "equal" } else { "differ from" },
                e.stack_runtime
            );
            body += &bar_chart(&labels, &v, "instr", None, &[]);
        }
        for (t, why) in &self.not_emulated {
            let _ = write!(
                body,
                "<p class=note>Emulated run on {}: not measured: {}</p>",
                esc(t),
                esc(why)
            );
        }
        if let Some(q) = &self.sqnr {
            let l: Vec<String> = q.iter().map(|r| r.name.clone()).collect();
            let v: Vec<f64> = q.iter().map(|r| r.sqnr_db.unwrap_or(0.0)).collect();
            body += "<h2>Per-layer SQNR</h2><p class=note>Float reference vs the runtime, dB (higher is better; exact layers shown as 0).</p>";
            body += &bar_chart(&l, &v, "dB", None, &[]);
        }
        body += "<h2>Layers</h2><table><tr><th>#</th><th>op</th><th>type</th><th>output</th><th>params</th><th>weight B</th><th>MACs</th><th>live B</th></tr>";
        for r in &fp.layers {
            let _ = write!(
                body,
                "<tr{}><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                if Some(r.index) == fp.peak_layer { " class=peak" } else { "" },
                r.index,
                r.op,
                r.elem,
                shape(r.output_shape),
                group(r.params),
                group(r.weight_bytes as u64),
                group(r.macs),
                group(r.live_bytes as u64)
            );
        }
        body += "</table>";
        page(&format!("midge bench — {}", fp.name), &body)
    }
}

/// Terminal table of a sweep: one row per variant, per target flash, RAM,
/// fit mark and estimated latency.
pub fn sweep_text(rows: &[SweepRow]) -> String {
    let targets: Vec<String> = rows
        .iter()
        .find(|r| !r.cells.is_empty())
        .map(|r| r.cells.iter().map(|c| c.target.clone()).collect())
        .unwrap_or_default();
    let mut headers: Vec<String> = ["width", "input", "params", "MACs", "file B", "workspace B"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    for t in &targets {
        headers.push(format!("{t} flash/RAM"));
        headers.push(format!("{t} est. ms"));
    }
    let body: Vec<Vec<String>> = rows
        .iter()
        .map(|r| {
            let mut v = vec![
                format!("{}", r.width),
                format!("{}×{}", r.input_hw.0, r.input_hw.1),
            ];
            if let Some(e) = &r.error {
                v.push(format!("not built: {e}"));
                return v;
            }
            v.extend([
                r.params.to_string(),
                r.macs.to_string(),
                r.model_bytes.to_string(),
                r.workspace_len.to_string(),
            ]);
            for c in &r.cells {
                v.push(format!(
                    "{} {}/{}",
                    if c.fits { "✓" } else { "✗" },
                    c.flash_bytes,
                    c.ram_bytes
                ));
                v.push(c.est_ms.map_or("—".into(), |m| format!("{m:.2}")));
            }
            v
        })
        .collect();
    let h: Vec<&str> = headers.iter().map(|s| s.as_str()).collect();
    table(&h, &body) + "✓ fits, ✗ does not fit (flash/RAM in bytes; est. ms from emulated instructions × the profile's CPI, an estimate)\n"
}

/// HTML page of a sweep: the table plus charts of MACs, flash and RAM.
pub fn sweep_html(name: &str, rows: &[SweepRow]) -> String {
    let ok: Vec<&SweepRow> = rows.iter().filter(|r| r.error.is_none()).collect();
    let labels: Vec<String> = ok
        .iter()
        .map(|r| format!("×{} {}×{}", r.width, r.input_hw.0, r.input_hw.1))
        .collect();
    let mut body = format!("<h1>Sweep of {}</h1>", esc(name));
    type Series = (&'static str, &'static str, fn(&SweepRow) -> f64);
    let series: [Series; 3] = [
        ("MACs per variant", "MACs", |r| r.macs as f64),
        ("Model file size per variant", "B", |r| r.model_bytes as f64),
        ("Workspace per variant", "B", |r| r.workspace_len as f64),
    ];
    for (title, unit, value) in series {
        let _ = write!(body, "<h2>{title}</h2>");
        let values: Vec<f64> = ok.iter().map(|r| value(r)).collect();
        body += &bar_chart(&labels, &values, unit, None, &[]);
    }
    let targets: Vec<String> = ok
        .first()
        .map(|r| r.cells.iter().map(|c| c.target.clone()).collect())
        .unwrap_or_default();
    for (k, t) in targets.iter().enumerate() {
        let ram: Vec<f64> = ok
            .iter()
            .map(|r| r.cells.get(k).map_or(0.0, |c| c.ram_bytes as f64))
            .collect();
        let fits = ok
            .iter()
            .map(|r| match r.cells.get(k) {
                Some(c) if c.fits => "fits",
                _ => "does not fit",
            })
            .collect::<Vec<_>>()
            .join(", ");
        let _ = write!(
            body,
            "<h2>RAM on {}</h2><p class=note>Workspace, input, runtime data and stack per variant: {}.</p>",
            esc(t),
            fits
        );
        let limit = ok
            .iter()
            .find_map(|r| r.cells.get(k))
            .map_or(0, |c| c.ram_limit);
        body += &bar_chart(
            &labels,
            &ram,
            "B",
            None,
            &[(limit as f64, format!("{t} RAM available"))],
        );
        let ms: Vec<f64> = ok
            .iter()
            .map(|r| r.cells.get(k).and_then(|c| c.est_ms).unwrap_or(0.0))
            .collect();
        if ms.iter().any(|&m| m > 0.0) {
            let _ = write!(
                body,
                "<h2>Estimated latency on {}</h2><p class=note>Emulated instructions × the profile's CPI at its clock, ms (an estimate).</p>",
                esc(t)
            );
            body += &bar_chart(&labels, &ms, "ms", None, &[]);
        }
    }
    body += "<h2>Table</h2><pre>";
    body += &esc(&sweep_text(rows));
    body += "</pre>";
    page(&format!("midge sweep — {name}"), &body)
}

/// HTML page of `midge compare --html`: the accuracy-drop report, and when
/// measured, per-layer sensitivity charts and the mixed-precision steps.
pub fn accuracy_html(
    report: &midge_convert::compare::Report,
    sens: Option<&midge_convert::sensitivity::Sensitivity>,
    plan: Option<&midge_convert::mixed::Plan>,
) -> String {
    let mut body = format!(
        "<h1>Accuracy of {}</h1><p class=sub>{} images: float top-1 {:.2} %, {} top-1 {:.2} %, drop {:.2} pp</p>",
        esc(&report.model),
        report.images,
        report.float_top1,
        esc(&report.precision),
        report.quantized_top1,
        report.drop_pp
    );
    if let Some(sens) = sens {
        let labels: Vec<String> = sens.rows.iter().map(|r| r.layer.clone()).collect();
        let all = vec![(sens.all_int8_drop_pp, "all int8".to_string())];
        type Pick = fn(&midge_convert::sensitivity::SensitivityRow) -> f64;
        let charts: [(&str, Pick); 2] = [
            ("Drop with only this layer int8 (the rest fp16)", |r| {
                r.alone_int8_drop_pp
            }),
            ("Drop with only this layer fp16 (the rest int8)", |r| {
                r.kept_fp16_drop_pp
            }),
        ];
        for (title, pick) in charts {
            let _ = write!(
                body,
                "<h2>{title}</h2><p class=note>Top-1 drop in pp against the float32 reference, most sensitive layer first; gains are drawn as 0.</p>"
            );
            let values: Vec<f64> = sens.rows.iter().map(pick).collect();
            body += &bar_chart(&labels, &values, "pp", Some(0), &all);
        }
        body += "<h2>Sensitivity table</h2><pre>";
        body += &esc(&sens.to_text());
        body += "</pre>";
    }
    if let Some(plan) = plan {
        body += "<h2>Mixed precision</h2><pre>";
        body += &esc(&plan.to_text());
        body += "</pre>";
    }
    body += "<h2>Report</h2><pre>";
    body += &esc(&report.to_text());
    body += "</pre>";
    page(&format!("midge compare — {}", report.model), &body)
}

fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
        .replace('\'', "&#39;")
}

fn group(v: u64) -> String {
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

fn kib(b: u64) -> String {
    if b >= 1024 {
        format!("{:.1} KiB", b as f64 / 1024.0)
    } else {
        format!("{b} B")
    }
}

/// A dashed reference line of a chart: value and caption.
pub type RefLine = (f64, String);

/// A vertical bar chart as inline SVG: one bar per label, an optional
/// highlighted bar and dashed reference lines (value, caption).
pub fn bar_chart(
    labels: &[String],
    values: &[f64],
    unit: &str,
    highlight: Option<usize>,
    lines: &[RefLine],
) -> String {
    let n = values.len().max(1);
    let (w, h, left, bottom, top) = (900.0f64, 300.0f64, 70.0f64, 100.0f64, 26.0f64);
    let plot_w = w - left - 10.0;
    let plot_h = h - bottom - top;
    let top_bar = values.iter().copied().fold(0.0f64, f64::max);
    // Reference lines far above the bars would flatten them: those are
    // named in a caption instead of drawn.
    let (drawn, off): (Vec<&RefLine>, Vec<&RefLine>) = lines
        .iter()
        .partition(|l| l.0 <= 3.0 * top_bar || top_bar <= 0.0);
    let max = values
        .iter()
        .copied()
        .chain(drawn.iter().map(|l| l.0))
        .fold(0.0f64, f64::max)
        .max(1e-9);
    let y = |v: f64| top + plot_h * (1.0 - v.max(0.0) / max);
    let bw = plot_w / n as f64;
    let mut s = format!(
        "<svg class='chart' viewBox='0 0 {w} {h}' xmlns='http://www.w3.org/2000/svg' role='img'>"
    );
    for k in 0..=4 {
        let v = max * k as f64 / 4.0;
        let _ = write!(
            s,
            "<line x1='{left}' x2='{}' y1='{y:.1}' y2='{y:.1}' class='grid'/><text x='{}' y='{:.1}' class='tick' text-anchor='end'>{}</text>",
            w - 10.0,
            left - 6.0,
            y(v) + 4.0,
            short(v),
            y = y(v)
        );
    }
    for (i, &v) in values.iter().enumerate() {
        let x = left + bw * i as f64;
        let cls = if Some(i) == highlight {
            "bar hi"
        } else {
            "bar"
        };
        let label = labels.get(i).map(|l| esc(l)).unwrap_or_default();
        let _ = write!(
            s,
            "<rect class='{cls}' x='{:.1}' y='{:.1}' width='{:.1}' height='{:.1}'><title>{label}: {} {unit}</title></rect>",
            x + bw * 0.12,
            y(v),
            (bw * 0.76).max(0.5),
            (top + plot_h - y(v)).max(0.0),
            short(v)
        );
        if n <= 48 {
            let _ = write!(
                s,
                "<text class='lab' transform='translate({:.1},{:.1}) rotate(-55)' text-anchor='end'>{label}</text>",
                x + bw / 2.0 + 3.0,
                top + plot_h + 10.0
            );
        }
    }
    for (v, cap) in drawn {
        let _ = write!(
            s,
            "<line class='ref' x1='{left}' x2='{}' y1='{:.1}' y2='{:.1}'/><text class='refcap' x='{}' y='{:.1}' text-anchor='end'>{} {}</text>",
            w - 10.0,
            y(*v),
            y(*v),
            w - 12.0,
            y(*v) - 4.0,
            esc(cap),
            short(*v)
        );
    }
    let _ = write!(s, "<text class='unit' x='{left}' y='14'>{unit}</text>");
    if !off.is_empty() {
        let names: Vec<String> = off
            .iter()
            .map(|(v, c)| format!("{} {}", esc(c), short(*v)))
            .collect();
        let _ = write!(
            s,
            "<text class='refcap' x='{}' y='14'>off scale: {}</text>",
            left + 40.0,
            names.join(", ")
        );
    }
    s += "</svg>";
    s
}

fn short(v: f64) -> String {
    let a = v.abs();
    if a >= 1e9 {
        format!("{:.1}G", v / 1e9)
    } else if a >= 1e6 {
        format!("{:.1}M", v / 1e6)
    } else if a >= 1e4 {
        format!("{:.1}k", v / 1e3)
    } else if a >= 100.0 || v == v.trunc() {
        format!("{v:.0}")
    } else {
        format!("{v:.2}")
    }
}

fn page(title: &str, body: &str) -> String {
    format!(
        "<!doctype html><html lang=en><head><meta charset=utf-8><title>{}</title><style>{}</style></head><body><header>midge · bench</header><main>{}</main></body></html>\n",
        esc(title),
        STYLE,
        body
    )
}

const STYLE: &str = "\
body{margin:0;background:#f6f3ee;color:#2b2a28;font:15px/1.45 'Iowan Old Style',Georgia,serif}\
header{background:#23403a;color:#f6f3ee;padding:10px 28px;font:600 13px/1 ui-monospace,Menlo,monospace;letter-spacing:.18em;text-transform:uppercase}\
main{max-width:960px;margin:0 auto;padding:8px 28px 48px}\
h1{font-weight:600;margin:22px 0 2px}h2{font-size:17px;margin:30px 0 4px;border-bottom:2px solid #d9cbb3;padding-bottom:3px}\
.sub,.note{color:#6b655c;margin:2px 0 8px}\
.cards{display:flex;gap:12px;flex-wrap:wrap}.card{padding:10px 14px;border-radius:6px;background:#fff;border-left:6px solid #3f8f7f;font:13px ui-monospace,Menlo,monospace}\
.card.over{border-left-color:#c2572f}.card b{display:block;font-size:14px}.card span{float:right;margin-left:12px;font-weight:700}\
.card.ok span{color:#2f7d6d}.card.over span{color:#c2572f}\
svg.chart{width:100%;height:auto;background:#fff;border-radius:6px}\
.grid{stroke:#ece5d9}.tick,.lab,.unit{font:10px ui-monospace,Menlo,monospace;fill:#6b655c}\
.bar{fill:#5fa596}.bar.hi{fill:#23403a}.bar:hover{fill:#d9953b}\
.ref{stroke:#c2572f;stroke-dasharray:5 4}.refcap{font:11px ui-monospace,Menlo,monospace;fill:#c2572f}\
table{border-collapse:collapse;font:12px ui-monospace,Menlo,monospace;background:#fff}\
td,th{padding:3px 9px;text-align:right;border-bottom:1px solid #eee6d8}td:nth-child(2),th:nth-child(2){text-align:left}\
tr.peak td{background:#f3e3cc;font-weight:700}pre{font:12px ui-monospace,Menlo,monospace;background:#fff;padding:10px;overflow:auto}";

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_aligns_columns() {
        let t = table(
            &["a", "bb"],
            &[
                vec!["xyz".into(), "1".into()],
                vec!["q".into(), "200".into()],
            ],
        );
        let lines: Vec<&str> = t.lines().collect();
        assert_eq!(lines[0], "a     bb");
        assert_eq!(lines[2], "xyz    1");
        assert_eq!(lines[3], "q    200");
    }

    #[test]
    fn chart_escapes_and_highlights() {
        let svg = bar_chart(
            &["0 <conv>".into(), "1 add".into()],
            &[10.0, 20.0],
            "B",
            Some(1),
            &[(15.0, "limit".into())],
        );
        assert!(svg.contains("&lt;conv&gt;") && !svg.contains("<conv>"));
        assert_eq!(svg.matches("class='bar hi'").count(), 1);
        assert!(svg.contains("class='ref'"));
        assert_eq!(group(1234567), "1\u{2009}234\u{2009}567");
    }
}
