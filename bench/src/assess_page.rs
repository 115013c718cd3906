//! The page `midge assess --html` writes: the accuracy drop (top-1, confusion
//! heat maps, per-class accuracy, per-layer SQNR, logit-error histogram), the
//! budget per target, the memory timeline and per-layer latency, in one file.

use std::fmt::Write as _;

use midge_convert::compare::{ErrorHistogram, Report};

use crate::budget::Budget;
use crate::chart::{bar_chart, esc, group, heat_map, histogram, page};
use crate::footprint::ModelFootprint;
use crate::host::HostLatency;
use crate::report::{
    budget_section, host_latency_section, layer_labels, layers_table, memory_section,
    model_heading, sqnr_section,
};

/// Per-layer latency as measured: emulated instructions when the target was
/// run under QEMU, else host time, else why neither is there.
#[derive(Clone, Debug)]
pub enum Latency<'a> {
    Emulated {
        target: &'a str,
        machine: &'a str,
        /// Instructions of each layer for one inference.
        instructions: Vec<u64>,
        /// The target profile's estimate for the whole model.
        estimated_ms: Option<f64>,
    },
    Host(&'a HostLatency),
    Missing(String),
}

/// Everything the page shows, as plain data from the libraries.
#[derive(Clone, Debug)]
pub struct AssessPage<'a> {
    pub report: &'a Report,
    pub footprint: &'a ModelFootprint,
    pub budgets: &'a [Budget],
    pub latency: Latency<'a>,
}

impl AssessPage<'_> {
    /// The self-contained HTML page (inline CSS and SVG, no script).
    pub fn render(&self) -> String {
        let r = self.report;
        let fp = self.footprint;
        let mut body = model_heading(fp);
        body += &self.accuracy();
        body += &sqnr_section(&r.layers);
        body += &logit_error_section(r);
        body += &budget_section(self.budgets);
        body += &memory_section(fp, self.budgets);
        body += &self.latency_section();
        body += &layers_table(fp);
        page(&format!("midge assess — {}", r.model), "assess", &body)
    }

    fn accuracy(&self) -> String {
        let r = self.report;
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
        s += "</div><h2>Per-class accuracy</h2><table><tr><th>class</th><th>images</th><th>float %</th>";
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

    fn latency_section(&self) -> String {
        let labels = layer_labels(self.footprint);
        match &self.latency {
            Latency::Emulated {
                target,
                machine,
                instructions,
                estimated_ms,
            } => {
                let total: u64 = instructions.iter().sum();
                let mut s = format!(
                    "<h2>Instructions per layer — {}</h2><p class=note>Executed on the emulated {} (QEMU icount) for one inference: {} instructions{}.</p>",
                    esc(target),
                    esc(machine),
                    group(total),
                    estimated_ms.map_or(String::new(), |ms| format!(
                        ", about {ms:.2} ms at the profile's clock and CPI (an estimate)"
                    ))
                );
                let v: Vec<f64> = instructions.iter().map(|&n| n as f64).collect();
                s += &bar_chart("latency", &labels, &v, "instructions", None, &[]);
                s
            }
            Latency::Host(h) => host_latency_section("latency", h, &labels),
            Latency::Missing(why) => format!(
                "<h2>Latency per layer</h2><p class=note>Not measured: {}</p>",
                esc(why)
            ),
        }
    }
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
