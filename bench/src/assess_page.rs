//! The page `midge assess --html` writes: the accuracy drop (top-1, confusion
//! heat maps, per-class accuracy, per-layer SQNR, logit-error histogram), the
//! budget per target, the memory timeline and per-layer latency, in one file.

use midge_convert::compare::Report;

use crate::budget::Budget;
use crate::chart::{bar_chart, esc, group, page};
use crate::footprint::ModelFootprint;
use crate::host::HostLatency;
use crate::report::{
    accuracy_sections, budget_section, host_latency_section, layer_labels, layers_table,
    memory_section, model_heading,
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
        body += &accuracy_sections(r);
        body += &budget_section(self.budgets);
        body += &memory_section(fp, self.budgets);
        body += &self.latency_section();
        body += &layers_table(fp);
        page(&format!("midge assess — {}", r.model), "assess", &body)
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
