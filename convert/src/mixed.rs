//! Automatic mixed precision: the smallest set of layers kept in fp16 so the
//! top-1 drop stays within a bound — greedy in the order of measured
//! sensitivity (`crate::sensitivity`), each step checked on the whole model,
//! then every pick that is not needed dropped again — with the flash, RAM
//! and instruction cost of each step, and the description that keeps it.

use std::fmt::Write as _;
use std::path::Path;

use serde::Serialize;

use crate::error::{escape, Error, Result};
use crate::graph::Precision;
use crate::quantize::Conversion;
use crate::sensitivity::{evaluate_mix, Sensitivity};

/// What one mix costs on the device.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Cost {
    /// Model file bytes (flash for weights, biases, parameters, tables).
    pub model_bytes: usize,
    /// Workspace bytes (RAM for activations).
    pub workspace_len: usize,
    /// Instructions of one inference on the emulated core, when measured.
    pub instructions: Option<u64>,
    /// Why instructions were not measured, or on what they were.
    pub instructions_note: String,
}

/// One step of the search.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Step {
    /// `None` for the all-int8 start; otherwise what changed.
    pub action: Option<String>,
    pub fp16_layers: Vec<String>,
    pub drop_pp: f64,
    pub cost: Cost,
}

/// The outcome of a search.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Plan {
    pub bound_pp: f64,
    /// Whether the bound is met; `false` only when even all-fp16 misses it.
    pub met: bool,
    pub all_fp16_drop_pp: f64,
    pub steps: Vec<Step>,
    /// Per folded layer, the chosen precision (all int8 when not met).
    #[serde(skip)]
    pub precisions: Vec<Precision>,
    pub fp16_layers: Vec<String>,
}

/// Check a `--max-drop` bound for the search: a number of percentage points
/// in −100..=100 (a negative bound asks the quantized model to beat float).
pub fn check_bound(pp: f64) -> Result<()> {
    if pp.is_finite() && (-100.0..=100.0).contains(&pp) {
        Ok(())
    } else {
        Err(Error::new(
            "--max-drop",
            format!(
                "expected percentage points in -100..=100 for the mixed-precision search, found {pp}"
            ),
        ))
    }
}

/// Counts a model file's instructions on the emulated core, or says why not.
pub type InstructionCounter<'a> = dyn FnMut(&[u8]) -> (Option<u64>, String) + 'a;

/// Search the mix for `conv` on the labelled folder `dir`. `instructions`
/// measures a model file's instructions (or says why not).
pub fn choose(
    conv: &Conversion,
    dir: &Path,
    sens: &Sensitivity,
    bound_pp: f64,
    instructions: &mut InstructionCounter<'_>,
) -> Result<Plan> {
    check_bound(bound_pp)?;
    let names: Vec<&str> = conv.graph.nodes.iter().map(|n| n.name.as_str()).collect();
    let n = names.len();
    let mut cost_of = |p: &[Precision]| -> Result<Cost> {
        let c = conv.with_precisions(p)?;
        let (instr, note) = instructions(&c.quantized.bytes);
        Ok(Cost {
            model_bytes: c.quantized.bytes.len(),
            workspace_len: c.quantized.plan.workspace_len,
            instructions: instr,
            instructions_note: note,
        })
    };
    let fp16_of = |p: &[Precision]| -> Vec<String> {
        names
            .iter()
            .zip(p)
            .filter(|(_, p)| **p == Precision::Fp16)
            .map(|(n, _)| n.to_string())
            .collect()
    };
    let mut precisions = vec![Precision::Int8; n];
    let mut steps = Vec::new();
    let mut drop = sens.all_int8_drop_pp;
    steps.push(Step {
        action: None,
        fp16_layers: Vec::new(),
        drop_pp: drop,
        cost: cost_of(&precisions)?,
    });
    if sens.all_fp16_drop_pp > bound_pp {
        return Ok(Plan {
            bound_pp,
            met: false,
            all_fp16_drop_pp: sens.all_fp16_drop_pp,
            steps,
            precisions,
            fp16_layers: Vec::new(),
        });
    }
    // Greedy: keep the most sensitive layer in fp16 next.
    for row in &sens.rows {
        if drop <= bound_pp {
            break;
        }
        let Some(k) = names.iter().position(|&m| m == row.layer) else {
            continue;
        };
        precisions[k] = Precision::Fp16;
        drop = evaluate_mix(conv, &precisions, dir)?.drop_pp;
        steps.push(Step {
            action: Some(format!("keep {} in fp16", row.layer)),
            fp16_layers: fp16_of(&precisions),
            drop_pp: drop,
            cost: cost_of(&precisions)?,
        });
    }
    if drop > bound_pp {
        // Layers the table does not name (none in practice): all fp16.
        precisions = vec![Precision::Fp16; n];
    }
    // Then drop every pick the bound does not need, earliest first.
    for k in 0..n {
        if precisions[k] != Precision::Fp16 {
            continue;
        }
        let mut trial = precisions.clone();
        trial[k] = Precision::Int8;
        let d = evaluate_mix(conv, &trial, dir)?.drop_pp;
        if d <= bound_pp {
            precisions = trial;
            drop = d;
            steps.push(Step {
                action: Some(format!("{} back to int8 (not needed)", names[k])),
                fp16_layers: fp16_of(&precisions),
                drop_pp: drop,
                cost: cost_of(&precisions)?,
            });
        }
    }
    Ok(Plan {
        bound_pp,
        met: true,
        all_fp16_drop_pp: sens.all_fp16_drop_pp,
        steps,
        fp16_layers: fp16_of(&precisions),
        precisions,
    })
}

fn instr_text(c: &Cost) -> String {
    match c.instructions {
        Some(i) => format!("{i} instructions"),
        None => format!("instructions not measured ({})", c.instructions_note),
    }
}

impl Plan {
    /// The terminal lines of the search.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "mixed precision for a drop of at most {} pp:",
            self.bound_pp
        );
        for st in &self.steps {
            let _ = writeln!(
                s,
                "  {:<44} drop {:>6.2} pp  flash {:>7} B  RAM {:>7} B  {}",
                escape(st.action.as_deref().unwrap_or("all int8")),
                st.drop_pp,
                st.cost.model_bytes,
                st.cost.workspace_len,
                instr_text(&st.cost)
            );
        }
        if self.met {
            let list = if self.fp16_layers.is_empty() {
                "none".to_string()
            } else {
                self.fp16_layers
                    .iter()
                    .map(|l| escape(l))
                    .collect::<Vec<_>>()
                    .join(", ")
            };
            let _ = writeln!(s, "  chosen fp16 layers: {list}");
        } else {
            let _ = writeln!(
                s,
                "  not reachable: even all-fp16 drops {:.2} pp, more than {} pp",
                self.all_fp16_drop_pp, self.bound_pp
            );
        }
        s
    }
}

/// The text of a description equal to `conv`'s (read from `source`, its
/// file) with every folded layer's `precision` set as `precisions` says,
/// to be written to `dest`. Relative paths are kept when `dest` is in the
/// same folder as `source`, and made absolute otherwise.
pub fn description_text(
    conv: &Conversion,
    source: &Path,
    dest: &Path,
    precisions: &[Precision],
) -> Result<String> {
    let place = source.display().to_string();
    let text = crate::files::read_text(source, &crate::limits::DESCRIPTION_FILE)?;
    let mut table: toml::Table =
        toml::from_str(&text).map_err(|e| Error::new(&place, format!("not TOML: {e}")))?;
    let onnx = table.contains_key("onnx");
    let parent = |p: &Path| {
        let d = p
            .parent()
            .filter(|d| !d.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        std::fs::canonicalize(d).ok()
    };
    if parent(source).is_none() || parent(source) != parent(dest) {
        let d = &conv.desc;
        for (key, value) in [
            ("weights", &d.weights),
            ("onnx", &d.onnx),
            ("calibration", &d.calibration),
            ("validation", &d.validation),
            ("target", &d.target),
        ] {
            if let Some(p) = value {
                let abs = std::fs::canonicalize(p).unwrap_or_else(|_| p.clone());
                table.insert(key.into(), toml::Value::String(abs.display().to_string()));
            }
        }
    }
    let layers = table
        .entry("layer")
        .or_insert_with(|| toml::Value::Array(Vec::new()));
    let Some(layers) = layers.as_array_mut() else {
        return Err(Error::new(&place, "`layer` is not an array of tables"));
    };
    let infos = if onnx {
        Vec::new()
    } else {
        conv.desc.topology()?
    };
    for (node, p) in conv.graph.nodes.iter().zip(precisions) {
        let value = toml::Value::String(p.name().to_string());
        let at = if onnx {
            layers
                .iter()
                .position(|l| l.get("name").and_then(|v| v.as_str()) == Some(node.name.as_str()))
        } else {
            infos
                .iter()
                .rev()
                .find(|i| i.name == node.name)
                .map(|i| i.index)
        };
        match at
            .and_then(|i| layers.get_mut(i))
            .and_then(|l| l.as_table_mut())
        {
            Some(l) => {
                l.insert("precision".into(), value);
            }
            None if onnx => {
                let mut l = toml::Table::new();
                l.insert("name".into(), toml::Value::String(node.name.clone()));
                l.insert("precision".into(), value);
                layers.push(toml::Value::Table(l));
            }
            None => {
                return Err(Error::new(
                    &place,
                    format!(
                        "layer {} of the folded model has no [[layer]] table",
                        escape(&node.name)
                    ),
                ))
            }
        }
    }
    let body = toml::to_string(&table)
        .map_err(|e| Error::new(&place, format!("cannot write the description: {e}")))?;
    let fp16: Vec<&str> = conv
        .graph
        .nodes
        .iter()
        .zip(precisions)
        .filter(|(_, p)| **p == Precision::Fp16)
        .map(|(n, _)| n.name.as_str())
        .collect();
    let header = format!(
        "# Written by `midge compare --mixed-description` from {}: per-layer\n# precisions chosen by measurement; fp16 layers: {}.\n",
        source.display().to_string().replace('\n', " "),
        if fp16.is_empty() { "none".to_string() } else { fp16.join(", ").replace('\n', " ") }
    );
    Ok(header + &body)
}
