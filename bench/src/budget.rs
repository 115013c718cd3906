//! Budget verdict: a model's flash and RAM on a target profile against the
//! profile's limits minus what the application keeps, with margins, the
//! layer that sets peak RAM, and what could not be measured and why.

use std::path::Path;
use std::time::Duration;

use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;
use serde::Serialize;

use crate::firmware::{self, EmulatedRun};
use crate::footprint::{self, ModelFootprint};
use crate::target::Target;
use crate::{Error, Result};
use midge_convert::description::Description;
use midge_convert::quantize::{self, QuantizeOptions};
use midge_convert::synth;

/// One line of a flash or RAM bill.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Item {
    pub name: String,
    /// `None`: not measured (see `note`).
    pub bytes: Option<u64>,
    pub note: String,
}

impl Item {
    pub fn measured(name: &str, bytes: u64, note: &str) -> Item {
        Item {
            name: name.into(),
            bytes: Some(bytes),
            note: note.into(),
        }
    }
    pub fn missing(name: &str, why: &str) -> Item {
        Item {
            name: name.into(),
            bytes: None,
            note: format!("not measured: {why}"),
        }
    }
}

/// The layer whose step holds the most live workspace bytes.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PeakLayer {
    pub index: usize,
    pub op: String,
    pub live_bytes: u64,
}

/// The verdict for one model on one target.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Budget {
    pub target: String,
    pub model: String,
    pub flash: Vec<Item>,
    pub ram: Vec<Item>,
    /// Sums of the measured items.
    pub flash_bytes: u64,
    pub ram_bytes: u64,
    /// Profile total minus reserved.
    pub flash_limit: u64,
    pub ram_limit: u64,
    /// limit − bytes (negative: over by that much).
    pub flash_margin: i64,
    pub ram_margin: i64,
    pub fits: bool,
    /// Every item was measured (otherwise `fits` covers the measured ones only).
    pub complete: bool,
    pub peak_layer: Option<PeakLayer>,
    /// Instructions executed by one inference on the emulated core.
    pub instructions: Option<u64>,
    /// Estimated latency: instructions × the profile's CPI at its clock.
    pub estimated_ms: Option<f64>,
    /// The (op, precision) pairs the model uses (`op/precision`): the op set
    /// the measured firmware links, so the runtime items are this model's code.
    pub op_set: Vec<String>,
    /// The C example firmware's sizes beside the Rust harness's, when the
    /// Arm C toolchain is installed (not part of the bill).
    pub c_firmware: Option<footprint::CFirmwareCost>,
}

/// Sums `flash` and `ram` and compares them with the target's limits: a
/// model fits when both sums are at most the limits (equal fits). All sums
/// and margins are checked: a bill that does not fit in u64, or a margin
/// outside i64, is an error rather than a wrapped number.
pub fn verdict(
    target: &Target,
    model: &str,
    flash: Vec<Item>,
    ram: Vec<Item>,
    peak_layer: Option<PeakLayer>,
) -> Result<Budget> {
    let sum = |what: &str, v: &[Item]| -> Result<u64> {
        v.iter()
            .filter_map(|i| i.bytes)
            .try_fold(0u64, u64::checked_add)
            .ok_or_else(|| Error::new(model, format!("{what} bill overflows 64 bits")))
    };
    let margin = |what: &str, limit: u64, bytes: u64| -> Result<i64> {
        i64::try_from(limit)
            .ok()
            .zip(i64::try_from(bytes).ok())
            .and_then(|(l, b)| l.checked_sub(b))
            .ok_or_else(|| {
                Error::new(
                    model,
                    format!("{what} margin of {limit} B available against {bytes} B does not fit in 64 bits"),
                )
            })
    };
    let (flash_bytes, ram_bytes) = (sum("flash", &flash)?, sum("RAM", &ram)?);
    let (flash_limit, ram_limit) = (target.flash_available(), target.ram_available());
    let complete = flash.iter().chain(&ram).all(|i| i.bytes.is_some());
    Ok(Budget {
        target: target.name.clone(),
        model: model.to_string(),
        flash_margin: margin("flash", flash_limit, flash_bytes)?,
        ram_margin: margin("RAM", ram_limit, ram_bytes)?,
        fits: flash_bytes <= flash_limit && ram_bytes <= ram_limit,
        complete,
        flash,
        ram,
        flash_bytes,
        ram_bytes,
        flash_limit,
        ram_limit,
        peak_layer,
        instructions: None,
        estimated_ms: None,
        op_set: Vec::new(),
        c_firmware: None,
    })
}

/// What `evaluate` measures beyond the model file itself.
#[derive(Clone, Debug)]
pub struct BudgetOptions {
    /// Build the firmware for the target and measure the runtime's code.
    pub measure_runtime: bool,
    /// Run the model on the emulated core for the stack high-water mark.
    pub emulate: bool,
    pub emulator_timeout: Duration,
}

impl Default for BudgetOptions {
    fn default() -> Self {
        BudgetOptions {
            measure_runtime: true,
            emulate: true,
            emulator_timeout: Duration::from_secs(300),
        }
    }
}

/// Everything `evaluate` found.
#[derive(Clone, Debug)]
pub struct Evaluation {
    pub budget: Budget,
    pub footprint: ModelFootprint,
    pub emulated: Option<EmulatedRun>,
}

/// Flash and RAM bills of a model file on `target`, and the verdict.
pub fn evaluate(model_bytes: &[u8], target: &Target, opts: &BudgetOptions) -> Result<Evaluation> {
    let aligned = AlignedBytes::from_slice(model_bytes);
    let model = Model::parse(&aligned)
        .map_err(|e| Error::runtime("model", "not a valid midge model", e))?;
    let fp = footprint::model_footprint(&model);
    let ops = model.op_set();
    let s = &fp.sections;
    let mut flash = vec![
        Item::measured("model weights", s.weights as u64, "model file"),
        Item::measured("model biases", s.biases as u64, "model file"),
        Item::measured(
            "model requantization parameters",
            s.params as u64,
            "model file",
        ),
        Item::measured(
            "model header, tables, strings, padding",
            (s.header + s.tensor_table + s.layer_table + s.strings + s.padding) as u64,
            "model file",
        ),
    ];
    let mut ram = vec![
        Item::measured("workspace", fp.workspace_len as u64, "memory plan"),
        Item::measured("input tensor", fp.input_bytes as u64, "held by the caller"),
    ];
    let triple = target.rust_target.as_str();
    let runtime = if opts.measure_runtime {
        footprint::runtime_cost(triple, ops).map_err(|e| e.to_string())
    } else {
        Err("skipped (runtime measurement off)".to_string())
    };
    if let (true, Err(why)) = (opts.measure_runtime, &runtime) {
        firmware::may_skip(&format!("runtime code on {triple}: {why}"))?;
    }
    match &runtime {
        Ok(rc) => {
            let note = format!(
                "firmware ELF for {triple} linking the model's {} op/precision pairs, minus baseline",
                rc.op_set.len()
            );
            flash.push(Item::measured("runtime code (.text)", rc.sizes.text, &note));
            flash.push(Item::measured(
                "runtime read-only data (.rodata)",
                rc.sizes.rodata,
                &note,
            ));
            flash.push(Item::measured(
                "runtime initialized data (.data)",
                rc.sizes.data,
                &note,
            ));
            ram.push(Item::measured(
                "runtime static data (.data + .bss)",
                rc.sizes.ram(),
                &note,
            ));
        }
        Err(why) => {
            flash.push(Item::missing("runtime code and data", why));
            ram.push(Item::missing("runtime static data", why));
        }
    }
    let emulated = if opts.emulate {
        emulate_once(&aligned, &model, target, opts.emulator_timeout).map_err(|e| e.to_string())
    } else {
        Err("skipped (emulation off)".to_string())
    };
    if let (true, Err(why)) = (opts.emulate, &emulated) {
        firmware::may_skip(&format!("emulated run on {}: {why}", target.name))?;
    }
    match &emulated {
        Ok(run) => ram.push(Item::measured(
            "stack high-water (runtime)",
            run.stack_runtime as u64,
            &format!("painted stack on {} under QEMU", run.machine),
        )),
        Err(why) => ram.push(Item::missing("stack high-water", why)),
    }
    let peak = fp
        .peak_layer
        .and_then(|i| fp.layers.get(i))
        .map(|r| PeakLayer {
            index: r.index,
            op: r.op.to_string(),
            live_bytes: r.live_bytes as u64,
        });
    let mut budget = verdict(target, &fp.name, flash, ram, peak)?;
    budget.op_set = midge_convert::compare::op_set_names(ops);
    if runtime.is_ok() && crate::c_firmware::unavailable(triple).is_none() {
        match footprint::c_firmware_cost(triple, ops) {
            Ok(c) => budget.c_firmware = Some(c),
            Err(e) => firmware::may_skip(&format!("C firmware on {triple}: {e}"))?,
        }
    }
    if let Ok(run) = &emulated {
        let instr: u64 = run.layer_instructions(0).iter().sum();
        budget.instructions = Some(instr);
        budget.estimated_ms = Some(target.estimate_ms(instr));
    }
    Ok(Evaluation {
        budget,
        footprint: fp,
        emulated: emulated.ok(),
    })
}

/// One emulated run of `model` on a zero input.
fn emulate_once(
    bytes: &[u8],
    model: &Model,
    target: &Target,
    timeout: Duration,
) -> Result<EmulatedRun> {
    firmware::qemu_version()?;
    let build = firmware::build(&target.rust_target, model.op_set())?;
    let len = model.input().byte_len();
    if len > firmware::JOB_CAPACITY {
        return Err(Error::new(
            "emulator job",
            format!(
                "the input tensor needs {len} bytes, the harness's job area holds {}",
                firmware::JOB_CAPACITY
            ),
        ));
    }
    let input = vec![0u8; len];
    let job = firmware::job_block(bytes, &[&input], model.workspace_len())?;
    firmware::run(&target.emulator.machine, &build.harness, &job, timeout)
}

/// Exit status of `midge budget` when the model does not fit.
pub const EXIT_DOES_NOT_FIT: i32 = 4;

/// Seed for synthetic weights when a description has none.
pub const DEFAULT_SEED: u64 = 0x6D_6964_6765;

/// Model bytes for `path`: a model file as is, or a description (`.toml`)
/// quantized with its weights and calibration images when it names both,
/// else with seeded synthetic weights and synthetic calibration images.
pub fn model_bytes_for(path: &Path, seed: u64) -> Result<Vec<u8>> {
    let is_toml = path
        .extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| e.eq_ignore_ascii_case("toml"));
    if is_toml {
        let desc = Description::load(path)?;
        if desc.weights.is_some() && desc.calibration.is_some() {
            return Ok(
                quantize::quantize_description(path, &QuantizeOptions::default())?
                    .quantized
                    .bytes,
            );
        }
        return Ok(synth::synth_quantize(&desc, seed)?.bytes);
    }
    midge_convert::files::read(path, &midge_convert::limits::MODEL_FILE)
}

fn fmt_bytes(b: u64) -> String {
    if b >= 10 * 1024 {
        format!("{b} B ({:.1} KiB)", b as f64 / 1024.0)
    } else {
        format!("{b} B")
    }
}

impl Budget {
    /// The terminal report.
    pub fn render_text(&self) -> String {
        let mut s = format!(
            "budget of {} on {}\n",
            midge_convert::error::escape(&self.model),
            midge_convert::error::escape(&self.target)
        );
        if !self.op_set.is_empty() {
            s += &format!(
                "runtime built with the model's op set: {}\n",
                self.op_set.join(", ")
            );
        }
        for (title, items, total, limit, margin) in [
            (
                "flash",
                &self.flash,
                self.flash_bytes,
                self.flash_limit,
                self.flash_margin,
            ),
            (
                "RAM",
                &self.ram,
                self.ram_bytes,
                self.ram_limit,
                self.ram_margin,
            ),
        ] {
            s += &format!("\n{title}\n");
            for i in items {
                let b = i.bytes.map_or("—".to_string(), fmt_bytes);
                s += &format!("  {:<40} {:>22}  {}\n", i.name, b, i.note);
            }
            s += &format!("  {:<40} {:>22}\n", "total", fmt_bytes(total));
            s += &format!(
                "  {:<40} {:>22}\n",
                "available (total − reserved)",
                fmt_bytes(limit)
            );
            let m = if margin >= 0 {
                format!(
                    "{} free ({:.1}%)",
                    fmt_bytes(margin as u64),
                    100.0 * margin as f64 / limit.max(1) as f64
                )
            } else {
                format!("over by {}", fmt_bytes(margin.unsigned_abs()))
            };
            s += &format!("  {:<40} {:>22}\n", "margin", m);
        }
        if let Some(p) = &self.peak_layer {
            s += &format!(
                "\npeak RAM set by layer {} ({}): {} live in the workspace\n",
                p.index,
                p.op,
                fmt_bytes(p.live_bytes)
            );
        }
        if let Some(c) = &self.c_firmware {
            let line = |what: &str, e: &footprint::ElfSizes| {
                format!(
                    "  {what:<40} .text {:>8}  .rodata {:>7}  .data {:>5}  .bss {:>6}\n",
                    e.text, e.rodata, e.data, e.bss
                )
            };
            s += &format!("\nwhole firmware on {} (bytes, same op set):\n", c.triple);
            s += &line("C firmware (capi/examples/mps2)", &c.c_example);
            s += &line("Rust harness (bench/firmware)", &c.rust_harness);
        }
        if let (Some(i), Some(ms)) = (self.instructions, self.estimated_ms) {
            s += &format!("emulated: {i} instructions per inference; estimate {ms:.2} ms (CPI factor of the profile)\n");
        }
        let missing: Vec<&str> = self
            .flash
            .iter()
            .chain(&self.ram)
            .filter(|i| i.bytes.is_none())
            .map(|i| i.name.as_str())
            .collect();
        s += &format!(
            "\nverdict: {}{}\n",
            if self.fits { "FITS" } else { "DOES NOT FIT" },
            if missing.is_empty() {
                String::new()
            } else {
                format!(" without {} (not measured, see above)", missing.join(", "))
            }
        );
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn missing_items_make_it_incomplete() {
        let t = Target::resolve("m4-80").unwrap();
        let b = verdict(
            &t,
            "m",
            vec![Item::measured("a", 10, "")],
            vec![Item::missing("stack", "no qemu")],
            None,
        )
        .unwrap();
        assert!(b.fits && !b.complete);
        assert_eq!(b.flash_margin, t.flash_available() as i64 - 10);
        assert!(b.render_text().contains("not measured: no qemu"));
        assert!(
            b.render_text()
                .contains("verdict: FITS without stack (not measured, see above)"),
            "{}",
            b.render_text()
        );
    }

    #[test]
    fn bills_that_overflow_are_errors_not_wrapped_margins() {
        let t = Target::resolve("m4-80").unwrap();
        let huge = || {
            vec![
                Item::measured("a", u64::MAX, ""),
                Item::measured("b", 1, ""),
            ]
        };
        let e = verdict(&t, "m", huge(), vec![], None).unwrap_err();
        assert!(e.to_string().contains("flash bill overflows"), "{e}");
        let e = verdict(
            &t,
            "m",
            vec![],
            vec![Item::measured("a", u64::MAX, "")],
            None,
        )
        .unwrap_err();
        assert!(e.to_string().contains("RAM margin"), "{e}");
    }
}
