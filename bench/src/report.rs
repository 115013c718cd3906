//! Rendering bench results: terminal tables, JSON, the `report` and `sweep`
//! HTML pages, and the page sections the assess page shares (budgets, memory
//! timeline, host latency, per-layer SQNR, layer table); charts: `chart.rs`.

use std::fmt::Write as _;

use crate::budget::Budget;
use crate::chart::{
    bar_chart, capacity_chart, esc, group, heat_map, histogram, kib, page, Capacity,
};
use crate::footprint::ModelFootprint;

use midge_convert::compare::{ErrorHistogram, LayerRow as SqnrRow, Report};
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
    /// The accuracy-drop report of a compare run (per-layer SQNR included),
    /// when one was asked for.
    pub accuracy: Option<Report>,
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
        if let Some(q) = self.accuracy.as_ref().map(|a| &a.layers) {
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
        let labels = layer_labels(fp);
        let mut body = model_heading(fp);
        body += &budget_section(&self.budgets);
        body += &memory_section(fp, &self.budgets);
        if let Some(h) = &self.host {
            body += &host_latency_section("host-latency", h, &labels);
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
            body += &bar_chart(
                &format!("instructions-{}", e.target),
                &labels,
                &v,
                "instructions",
                None,
                &[],
            );
        }
        for (t, why) in &self.not_emulated {
            let _ = write!(
                body,
                "<p class=note>Emulated run on {}: not measured: {}</p>",
                esc(t),
                esc(why)
            );
        }
        if let Some(a) = &self.accuracy {
            body += &accuracy_sections(a);
        }
        body += &layers_table(fp);
        page(&format!("midge bench — {}", fp.name), "bench", &body)
    }
}

/// `index op` of every layer: the x labels of per-layer charts.
pub fn layer_labels(fp: &ModelFootprint) -> Vec<String> {
    fp.layers
        .iter()
        .map(|r| format!("{} {}", r.index, r.op))
        .collect()
}

/// The page title and the model's one-line summary.
pub fn model_heading(fp: &ModelFootprint) -> String {
    format!(
        "<h1>{}</h1><p class=sub>{} layers · {} parameters · {} MACs · file {} · workspace {} (lower bound {})</p>",
        esc(&fp.name),
        fp.layers.len(),
        group(fp.params),
        group(fp.macs),
        kib(fp.sections.total as u64),
        kib(fp.workspace_len as u64),
        kib(fp.lower_bound as u64)
    )
}

/// Budgets: a verdict card per target and flash/RAM used against what each
/// target has available (empty without budgets).
pub fn budget_section(budgets: &[Budget]) -> String {
    if budgets.is_empty() {
        return String::new();
    }
    let mut body = String::from("<h2>Budgets</h2><div class=cards>");
    for b in budgets {
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
            if b.complete {
                ""
            } else {
                "<br><i>some items not measured</i>"
            }
        );
    }
    body += "</div>";
    let rows: Vec<Capacity> = budgets
        .iter()
        .flat_map(|b| {
            [
                Capacity {
                    label: format!("{} flash", b.target),
                    used: b.flash_bytes,
                    available: b.flash_limit,
                },
                Capacity {
                    label: format!("{} RAM", b.target),
                    used: b.ram_bytes,
                    available: b.ram_limit,
                },
            ]
        })
        .collect();
    body += "<p class=note>Measured bill items against the profile's memory minus what it reserves for the application; the dashed line is all of it.</p>";
    body += &capacity_chart("budget", &rows);
    if let Some(b) = budgets.iter().find(|b| !b.op_set.is_empty()) {
        let _ = write!(
            body,
            "<p class=sub>runtime code measured on firmware linking the model's op set: {}</p>",
            esc(&b.op_set.join(", "))
        );
    }
    body
}

/// Memory timeline: workspace bytes live at each layer step from the plan,
/// with the workspace, its lower bound and each target's RAM as lines.
pub fn memory_section(fp: &ModelFootprint, budgets: &[Budget]) -> String {
    let live: Vec<f64> = fp.layers.iter().map(|r| r.live_bytes as f64).collect();
    let mut lines = if fp.lower_bound == fp.workspace_len {
        vec![(
            fp.workspace_len as f64,
            "workspace = lower bound".to_string(),
        )]
    } else {
        vec![
            (fp.workspace_len as f64, "workspace".to_string()),
            (fp.lower_bound as f64, "lower bound".to_string()),
        ]
    };
    for b in budgets {
        lines.push((b.ram_limit as f64, format!("{} RAM", b.target)));
    }
    let mut body = String::from("<h2>Memory timeline</h2><p class=note>Workspace bytes live at each layer step; the darker bar sets the peak (the lower bound of any placement).</p>");
    body += &bar_chart(
        "memory",
        &layer_labels(fp),
        &live,
        "B",
        fp.peak_layer,
        &lines,
    );
    body
}

/// Host latency per layer: median µs per layer over the timed runs.
pub fn host_latency_section(chart: &str, h: &HostLatency, labels: &[String]) -> String {
    let v: Vec<f64> = h
        .layers
        .iter()
        .map(|l| l.time.median_ns as f64 / 1e3)
        .collect();
    let mut body = format!(
        "<h2>Host latency per layer</h2><p class=note>Median of {} runs after {} warm-up, µs; whole model {} µs median ({}–{}).</p>",
        h.runs,
        h.warmup,
        us(h.total.median_ns),
        us(h.total.min_ns),
        us(h.total.max_ns)
    );
    body += &bar_chart(chart, labels, &v, "µs", None, &[]);
    body
}

/// The accuracy drop of a compare run: top-1 cards, confusion heat maps,
/// per-class table, per-layer SQNR and the logit-error histograms.
pub fn accuracy_sections(r: &Report) -> String {
    let mut s = top1_and_confusion(r);
    s += &sqnr_section(&r.layers);
    s += &logit_error_section(r);
    s
}

fn top1_and_confusion(r: &Report) -> String {
    let mut s = format!(
        "<h2>Accuracy</h2><p class=note>Top-1 on {} labelled validation images: the float reference against the {} model as midge-runtime runs it.</p><div class=cards>",
        group(r.images as u64),
        esc(&r.precision)
    );
    let card = |s: &mut String, cls: &str, name: &str, top1: f64, extra: String| {
        let _ = write!(
            s,
            "<div class='card {cls}'><b>{}</b><big>{top1:.2} %</big>{extra}</div>",
            esc(name)
        );
    };
    card(&mut s, "plain", "float", r.float_top1, "reference".into());
    let verdict = |drop: f64| if drop > 0.0 { "over" } else { "ok" };
    card(
        &mut s,
        verdict(r.drop_pp),
        &r.precision,
        r.quantized_top1,
        format!("drop {:.2} pp · agrees {:.1} %", r.drop_pp, r.agreement),
    );
    if let Some(h) = &r.fp16 {
        card(
            &mut s,
            verdict(h.drop_pp),
            "all fp16",
            h.top1,
            format!("drop {:.2} pp · agrees {:.1} %", h.drop_pp, h.agreement),
        );
    }
    s += "</div><h2>Confusion</h2><p class=note>Rows are the true class, columns the predicted one; counts of images, shaded by their share of the row (dark teal: right, orange: wrong).</p><div class=cards>";
    for (chart, title, m) in [
        ("confusion", r.precision.as_str(), &r.confusion),
        ("confusion-float", "float", &r.float_confusion),
    ] {
        let _ = write!(
            s,
            "<div><p class=sub>{}</p>{}</div>",
            esc(title),
            heat_map(chart, &r.labels, m, "true", "predicted")
        );
    }
    s +=
        "</div><h2>Per-class accuracy</h2><table><tr><th>class</th><th>images</th><th>float %</th>";
    let _ = write!(s, "<th>{} %</th><th>change pp</th></tr>", esc(&r.precision));
    for c in &r.per_class {
        let _ = write!(
            s,
            "<tr><td>{}</td><td>{}</td><td>{:.1}</td><td>{:.1}</td><td>{:+.1}</td></tr>",
            esc(&c.label),
            c.images,
            c.float_top1,
            c.quantized_top1,
            c.quantized_top1 - c.float_top1
        );
    }
    s += "</table>";
    s
}

fn logit_error_section(r: &Report) -> String {
    let mut s = String::from("<h2>Logit error</h2>");
    let mut one = |chart: &str, name: &str, h: &ErrorHistogram, mean: f64, max: f64| {
        let _ = write!(
            s,
            "<p class=note>{}: dequantized runtime logit minus float logit, every class of every image ({} values); mean |error| {mean:.4}, largest {max:.4}.</p>",
            esc(name),
            group(h.counts.iter().sum())
        );
        s += &histogram(chart, h.lo, h.hi, &h.counts, "logit error");
    };
    one(
        "logit-error",
        &r.precision,
        &r.logit_error_histogram,
        r.mean_abs_logit_error,
        r.max_abs_logit_error,
    );
    if let Some(h) = &r.fp16 {
        one(
            "logit-error-fp16",
            "all fp16",
            &h.logit_error_histogram,
            h.mean_abs_logit_error,
            h.max_abs_logit_error,
        );
    }
    s
}

/// Per-layer SQNR of a compare run as a bar chart.
pub fn sqnr_section(q: &[SqnrRow]) -> String {
    let l: Vec<String> = q.iter().map(|r| r.name.clone()).collect();
    let v: Vec<f64> = q.iter().map(|r| r.sqnr_db.unwrap_or(0.0)).collect();
    let mut body = String::from("<h2>Per-layer SQNR</h2><p class=note>Float reference vs the runtime, dB over all images (higher is better; layers equal to the float reference are shown as 0).</p>");
    body += &bar_chart("sqnr", &l, &v, "dB", None, &[]);
    body
}

/// The layer table of the footprint, the peak layer marked.
pub fn layers_table(fp: &ModelFootprint) -> String {
    let mut body = String::from("<h2>Layers</h2><table><tr><th>#</th><th>op</th><th>type</th><th>output</th><th>params</th><th>weight B</th><th>MACs</th><th>live B</th></tr>");
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
    body
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
    type Series = (
        &'static str,
        &'static str,
        &'static str,
        fn(&SweepRow) -> f64,
    );
    let series: [Series; 3] = [
        ("macs", "MACs per variant", "MACs", |r| r.macs as f64),
        ("file", "Model file size per variant", "B", |r| {
            r.model_bytes as f64
        }),
        ("workspace", "Workspace per variant", "B", |r| {
            r.workspace_len as f64
        }),
    ];
    for (chart, title, unit, value) in series {
        let _ = write!(body, "<h2>{title}</h2>");
        let values: Vec<f64> = ok.iter().map(|r| value(r)).collect();
        body += &bar_chart(chart, &labels, &values, unit, None, &[]);
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
            &format!("ram-{t}"),
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
            body += &bar_chart(&format!("ms-{t}"), &labels, &ms, "ms", None, &[]);
        }
    }
    body += "<h2>Table</h2><pre>";
    body += &esc(&sweep_text(rows));
    body += "</pre>";
    page(&format!("midge sweep — {name}"), "sweep", &body)
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
        for ((title, pick), chart) in charts.into_iter().zip(["sens-int8", "sens-fp16"]) {
            let _ = write!(
                body,
                "<h2>{title}</h2><p class=note>Top-1 drop in pp against the float32 reference, most sensitive layer first; gains are drawn as 0.</p>"
            );
            let values: Vec<f64> = sens.rows.iter().map(pick).collect();
            body += &bar_chart(chart, &labels, &values, "pp", Some(0), &all);
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
    body += &accuracy_sections(report);
    body += "<h2>Report</h2><pre>";
    body += &esc(&report.to_text());
    body += "</pre>";
    page(
        &format!("midge compare — {}", report.model),
        "compare",
        &body,
    )
}

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
}
