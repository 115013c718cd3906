//! The `midge` command line: flag parsing (clap) and the wiring of library
//! calls for every subcommand (`quantize`, `compare`, `classify`, `show`,
//! `budget`, `assess`, `draft`, and `report`/`sweep` in `bench.rs`).

use std::path::{Path, PathBuf};

use clap::{Parser, Subcommand, ValueEnum};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;

use midge_convert::c_source;
use midge_convert::calibrate::RangeMethod;
use midge_convert::compare::{self, CompareOptions};
use midge_convert::error::{escape, escape_path, Error, Result};
use midge_convert::files::{parse_model, read_model};
use midge_convert::firmware_module;
use midge_convert::graph::Precision;
use midge_convert::output;
use midge_convert::quantize::{self, QuantizeOptions};

/// Exit status for bad input (missing file, parse error, ...).
pub const EXIT_BAD_INPUT: i32 = 2;
/// Exit status when `compare --max-drop` is exceeded.
pub const EXIT_DROP_EXCEEDED: i32 = 3;

#[derive(Parser, Debug)]
#[command(
    name = "midge",
    version,
    about = "Put small float CNN image classifiers onto microcontrollers: calibrate, quantize, plan memory, measure the accuracy drop, footprint and latency"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Calibrate and quantize a model description into a .midge file.
    Quantize(QuantizeArgs),
    /// Quantize in memory and report the accuracy drop on labelled images.
    Compare(CompareArgs),
    /// Classify images with a .midge model (midge-runtime on the host) or a
    /// description (.toml, the float reference).
    Classify(ClassifyArgs),
    /// Show a .midge model: layers, shapes, quantization, memory plan.
    Show(ShowArgs),
    /// Flash and RAM of a model on a target profile: fits or does not fit (exit 4).
    Budget(crate::bench::BudgetArgs),
    /// The whole job: quantize, accuracy-drop report and budget in one go.
    ///
    /// Quantizes and writes the model, reports the accuracy drop on the
    /// description's validation images and the budget on its default target
    /// profile. Exit 3 over --max-drop, 4 when it does not fit.
    Assess(AssessArgs),
    /// Draft a description from an ONNX model or a safetensors file.
    ///
    /// From ONNX everything but labels and image folders is read from the
    /// graph; from safetensors the layers are guessed from tensor names and
    /// shapes, with guesses and unknowable items marked for editing.
    Draft(midge_convert::draft::DraftArgs),
    /// Footprint, per-layer host latency, budgets and emulated runs of one
    /// model file or description.
    Report(crate::bench::ReportArgs),
    /// Scale a description in width and resolution and budget every variant.
    Sweep(crate::bench::SweepArgs),
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum PrecisionArg {
    Int8,
    Fp16,
}

impl From<PrecisionArg> for Precision {
    fn from(p: PrecisionArg) -> Precision {
        match p {
            PrecisionArg::Int8 => Precision::Int8,
            PrecisionArg::Fp16 => Precision::Fp16,
        }
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum MethodArg {
    /// Smallest to largest value seen.
    Minmax,
    /// Clip both tails at --percentile.
    Percentile,
    /// Clip where the expected squared quantization error is least.
    Mse,
    /// Try min/max, percentile and MSE on a held-apart part of the
    /// calibration images and keep the best (reported).
    Measured,
}

/// Calibration and precision flags shared by `quantize` and `compare`.
#[derive(clap::Args, Debug, Clone)]
pub struct ConvertFlags {
    /// Default precision of layers that set none in the description.
    #[arg(long, value_enum)]
    pub precision: Option<PrecisionArg>,
    /// How activation ranges are chosen from calibration statistics.
    #[arg(long, value_enum, default_value = "percentile")]
    pub calibration_method: MethodArg,
    /// Percentile (in percent, 50..=100) for --calibration-method percentile.
    #[arg(long, default_value_t = 99.99, allow_negative_numbers = true, value_parser = parse_percentile)]
    pub percentile: f64,
    /// Calibration image folder instead of the description's `calibration`.
    #[arg(long, value_name = "DIR")]
    pub calibration: Option<PathBuf>,
    /// Cross-layer equalization of conv/depthwise pairs before calibration
    /// (Nagel et al. 2019); the float function is unchanged.
    #[arg(long)]
    pub equalize: bool,
    /// Empirical bias correction of int8 layers from the calibration images
    /// (Nagel et al. 2019).
    #[arg(long)]
    pub bias_correct: bool,
}

/// `--percentile`: a number of percent in 50..=100.
fn parse_percentile(s: &str) -> std::result::Result<f64, String> {
    let p: f64 = s
        .trim()
        .parse()
        .map_err(|_| "expected a number of percent in 50..=100".to_string())?;
    if (50.0..=100.0).contains(&p) {
        Ok(p)
    } else {
        Err(format!(
            "expected a number of percent in 50..=100, found {p}"
        ))
    }
}

impl ConvertFlags {
    pub fn options(&self) -> QuantizeOptions {
        QuantizeOptions {
            precision: self.precision.map(Into::into),
            method: match self.calibration_method {
                MethodArg::Minmax => RangeMethod::MinMax,
                MethodArg::Percentile => RangeMethod::Percentile(self.percentile),
                MethodArg::Mse | MethodArg::Measured => RangeMethod::Mse,
            },
            calibration: self.calibration.clone(),
            progress: true,
            equalize: self.equalize,
            bias_correct: self.bias_correct,
            choose_calibration: self.calibration_method == MethodArg::Measured,
        }
    }
}

#[derive(clap::Args, Debug)]
pub struct QuantizeArgs {
    /// Model description (TOML).
    pub description: PathBuf,
    /// Output model file [default: the description's path with extension .midge].
    #[arg(short, long, value_name = "FILE")]
    pub output: Option<PathBuf>,
    #[command(flatten)]
    pub flags: ConvertFlags,
    /// Also write a Rust module embedding the model (for firmware crates).
    #[arg(long, value_name = "FILE")]
    pub rust_module: Option<PathBuf>,
    /// Also write the model as C source: this `.c` file (the bytes as an
    /// 8-byte aligned const array) and a `.h` beside it (sizes as macros).
    #[arg(long, value_name = "FILE")]
    pub c_source: Option<PathBuf>,
}

#[derive(clap::Args, Debug)]
pub struct CompareArgs {
    /// Model description (TOML).
    pub description: PathBuf,
    #[command(flatten)]
    pub flags: ConvertFlags,
    /// Also evaluate an all-fp16 conversion.
    #[arg(long)]
    pub also_fp16: bool,
    /// Print the report as JSON instead of a table.
    #[arg(long)]
    pub json: bool,
    /// Exit with status 3 when the top-1 drop exceeds this many percentage points.
    #[arg(long, value_name = "PP", allow_negative_numbers = true)]
    pub max_drop: Option<f64>,
    /// Labelled image folder (one sub-folder per label) instead of the
    /// description's `validation`.
    #[arg(long, value_name = "DIR")]
    pub images: Option<PathBuf>,
    /// Per-layer sensitivity: top-1 drop and logit SQNR with only this
    /// layer int8 (the rest fp16) and with only this layer fp16 (the rest int8).
    #[arg(long)]
    pub sensitivity: bool,
    /// Only these folded layers in the sensitivity table (comma-separated).
    #[arg(
        long,
        value_delimiter = ',',
        value_name = "NAMES",
        requires = "sensitivity"
    )]
    pub layers: Vec<String>,
    /// Choose the fewest layers to keep in fp16 so the drop stays within
    /// --max-drop and write that description here (exit 3, nothing written,
    /// when even all-fp16 misses the bound).
    #[arg(long, value_name = "FILE", requires = "max_drop")]
    pub mixed_description: Option<PathBuf>,
    /// With --mixed-description: do not count each mix's instructions on the
    /// emulated core of the description's target.
    #[arg(long, requires = "mixed_description")]
    pub no_emulate: bool,
    /// Also write the report (and the sensitivity charts) as a
    /// self-contained HTML page.
    #[arg(long, value_name = "FILE")]
    pub html: Option<PathBuf>,
}

#[derive(clap::Args, Debug)]
pub struct AssessArgs {
    /// Model description (TOML) with weights, calibration and validation folders.
    pub description: PathBuf,
    /// Output model file [default: the description's path with extension .midge].
    #[arg(short, long, value_name = "FILE")]
    pub output: Option<PathBuf>,
    #[command(flatten)]
    pub flags: ConvertFlags,
    /// Target profile instead of the description's `target` (a name under
    /// models/targets or a profile file).
    #[arg(long)]
    pub target: Option<String>,
    /// Also evaluate an all-fp16 conversion.
    #[arg(long)]
    pub also_fp16: bool,
    /// Skip the emulated run (no stack high-water mark, no instruction count).
    #[arg(long)]
    pub no_emulate: bool,
    /// Exit with status 3 when the top-1 drop exceeds this many percentage points.
    #[arg(long, value_name = "PP", allow_negative_numbers = true)]
    pub max_drop: Option<f64>,
    /// Print one JSON object {"model", "report", "budget"} instead of tables.
    #[arg(long)]
    pub json: bool,
    /// Also write one self-contained HTML page: accuracy drop, confusion,
    /// per-layer SQNR, logit error, budget, memory timeline, latency.
    #[arg(long, value_name = "FILE")]
    pub html: Option<PathBuf>,
}

#[derive(clap::Args, Debug)]
pub struct ClassifyArgs {
    /// Model file (.midge), or a description (.toml) to run its float
    /// reference on the same images.
    pub model: PathBuf,
    /// Images (PNG, JPEG or BMP).
    #[arg(required = true)]
    pub images: Vec<PathBuf>,
    /// Resize images of another size (bilinear) instead of refusing them.
    #[arg(long)]
    pub resize: bool,
    /// How many classes to list per image.
    #[arg(long, default_value_t = 3)]
    pub top: usize,
    /// Print one JSON document: per image the label and index, logits, raw
    /// output values and probabilities.
    #[arg(long)]
    pub json: bool,
}

#[derive(clap::Args, Debug)]
pub struct ShowArgs {
    /// Model file (.midge).
    pub model: PathBuf,
    /// Print JSON instead of the tables.
    #[arg(long)]
    pub json: bool,
}

/// Run a parsed command line; `Ok(status)` with what to print already
/// printed. Errors are bad input (exit status 2).
pub fn run(cli: Cli) -> Result<i32> {
    match cli.command {
        Command::Quantize(a) => cmd_quantize(&a),
        Command::Compare(a) => cmd_compare(&a),
        Command::Classify(a) => cmd_classify(&a),
        Command::Show(a) => cmd_show(&a),
        Command::Budget(a) => crate::bench::cmd_budget(&a),
        Command::Assess(a) => cmd_assess(&a),
        Command::Draft(a) => midge_convert::draft::cmd_draft(&a),
        Command::Report(a) => crate::bench::cmd_report(a),
        Command::Sweep(a) => crate::bench::cmd_sweep(a),
    }
}

fn default_output(desc: &Path) -> PathBuf {
    desc.with_extension("midge")
}

fn method_text(m: RangeMethod) -> String {
    match m {
        RangeMethod::MinMax => "min/max".into(),
        RangeMethod::Percentile(p) => format!("percentile {p}"),
        RangeMethod::Mse => "MSE clip search".into(),
    }
}

fn cmd_quantize(a: &QuantizeArgs) -> Result<i32> {
    let opts = a.flags.options();
    let out = a
        .output
        .clone()
        .unwrap_or_else(|| default_output(&a.description));
    let c_header = a.c_source.as_deref().map(c_source::header_path);
    let mut outs: Vec<&Path> = vec![&out];
    outs.extend(a.rust_module.as_deref());
    outs.extend(a.c_source.as_deref());
    outs.extend(c_header.as_deref());
    output::check_destinations(&outs, &[&a.description])?;
    let conv = quantize::quantize_description(&a.description, &opts)?;
    let q = &conv.quantized;
    let aligned = AlignedBytes::from_slice(&q.bytes);
    let ops = || -> Result<midge_runtime::OpSet> {
        Model::parse(&aligned)
            .map(|m| m.op_set())
            .map_err(|e| Error::new(out.display().to_string(), e.to_string()))
    };
    let module = match &a.rust_module {
        Some(m) => {
            let text = firmware_module::module_source(&q.spec, ops()?, &out, m);
            Some((m.clone(), text))
        }
        None => None,
    };
    let c_files = match (&a.c_source, &c_header) {
        (Some(c), Some(h)) => Some((c, h, c_source::c_sources(&q.spec, ops()?, &q.bytes, c))),
        _ => None,
    };
    let mut files: Vec<(&Path, &[u8])> = vec![(&out, &q.bytes)];
    if let Some((path, text)) = &module {
        files.push((path, text.as_bytes()));
    }
    if let Some((c, h, (c_text, h_text))) = &c_files {
        files.push((c, c_text.as_bytes()));
        files.push((h, h_text.as_bytes()));
    }
    output::write_outputs(&files, &conv.inputs(&a.description))?;
    for w in &conv.warnings {
        eprintln!(
            "warning: {}: weight tensor {} is not used by the description",
            escape_path(&a.description),
            escape(w)
        );
    }
    for n in conv.desc.onnx_import.iter().flat_map(|i| &i.notes) {
        eprintln!("note: {}: {}", escape_path(&a.description), escape(n));
    }
    let int8 = conv
        .graph
        .nodes
        .iter()
        .filter(|n| n.precision == Precision::Int8)
        .count();
    println!(
        "wrote {} ({} bytes): model {}, {} runtime layers for {} folded layers ({} int8, {} fp16)",
        escape_path(&out),
        q.bytes.len(),
        escape(&q.spec.name),
        q.spec.layers.len(),
        conv.graph.nodes.len(),
        int8,
        conv.graph.nodes.len() - int8
    );
    match &conv.calibration_choice {
        Some(c) => println!(
            "calibration: {} images, {}",
            conv.calibration_images,
            c.to_text().trim_end()
        ),
        None => println!(
            "calibration: {} images, {}",
            conv.calibration_images,
            method_text(opts.method)
        ),
    }
    let adjust = midge_convert::bias_correct::adjustments_text(
        &conv.equalized,
        &midge_convert::bias_correct::rows(&conv.graph, &conv.bias_shifts),
    );
    if !adjust.is_empty() {
        print!("{adjust}");
    }
    println!(
        "memory plan: workspace {} bytes (lower bound {} bytes, {:.1} % above)",
        q.plan.workspace_len,
        q.plan.lower_bound,
        over(q.plan.workspace_len, q.plan.lower_bound)
    );
    if let Some((path, _)) = &module {
        println!("rust module: {}", escape_path(path));
    }
    if let Some((c, h, _)) = &c_files {
        println!("c source: {} and {}", escape_path(c), escape_path(h));
    }
    Ok(0)
}

fn over(achieved: usize, bound: usize) -> f64 {
    if bound == 0 {
        0.0
    } else {
        100.0 * (achieved as f64 - bound as f64) / bound as f64
    }
}

fn check_max_drop(max_drop: Option<f64>) -> Result<()> {
    match max_drop {
        Some(d) if !d.is_finite() => Err(Error::new(
            "--max-drop",
            format!("must be a number of percentage points, found {d}"),
        )),
        _ => Ok(()),
    }
}

/// Exit status for a report under an optional `--max-drop` gate.
fn drop_status(drop_pp: f64, max_drop: Option<f64>) -> i32 {
    match max_drop {
        Some(limit) if drop_pp > limit => {
            eprintln!("midge: accuracy drop {drop_pp:.2} pp exceeds --max-drop {limit}");
            EXIT_DROP_EXCEEDED
        }
        _ => 0,
    }
}

fn cmd_assess(a: &AssessArgs) -> Result<i32> {
    check_max_drop(a.max_drop)?;
    let opts = a.flags.options();
    let out = a
        .output
        .clone()
        .unwrap_or_else(|| default_output(&a.description));
    let mut outs: Vec<&Path> = vec![&out];
    outs.extend(a.html.as_deref());
    output::check_destinations(&outs, &[&a.description])?;
    let conv = quantize::quantize_description(&a.description, &opts)?;
    let place = a.description.display().to_string();
    let target = match (&a.target, &conv.desc.target) {
        (Some(t), _) => midge_bench::target::Target::resolve(t)?,
        (None, Some(path)) => midge_bench::target::Target::load(path)?,
        (None, None) => {
            return Err(Error::new(
                &place,
                "no target profile: set `target` in the description or pass --target",
            ))
        }
    };
    let validation = conv.desc.validation.clone().ok_or_else(|| {
        Error::new(
            &place,
            "no validation images: set `validation` in the description",
        )
    })?;
    let report = compare::evaluate(&conv, &validation, a.also_fp16, opts.progress)?;
    let budget_opts = midge_bench::budget::BudgetOptions {
        emulate: !a.no_emulate,
        ..midge_bench::budget::BudgetOptions::default()
    };
    let q = &conv.quantized;
    let ev = midge_bench::budget::evaluate(&q.bytes, &target, &budget_opts)
        .map_err(|e| Error::new(&place, e.to_string()))?;
    let mut inputs = conv.inputs(&a.description);
    let target_path = a.target.as_ref().map(PathBuf::from);
    inputs.extend(target_path.as_deref());
    let page = match &a.html {
        Some(path) => Some((path, assess_page(&report, &ev, &target, &q.bytes, &place)?)),
        None => None,
    };
    let mut files: Vec<(&Path, &[u8])> = vec![(&out, &q.bytes)];
    if let Some((path, text)) = &page {
        files.push((path, text.as_bytes()));
    }
    output::write_outputs(&files, &inputs)?;
    if a.json {
        let value = serde_json::json!({
            "model": out.display().to_string(),
            "report": report,
            "budget": ev.budget,
        });
        println!("{}", json_text(&value)?);
    } else {
        println!(
            "wrote {} ({} bytes; workspace {} bytes, lower bound {} bytes)\n",
            escape_path(&out),
            q.bytes.len(),
            q.plan.workspace_len,
            q.plan.lower_bound
        );
        print!("{}", report.to_text());
        println!();
        print!("{}", ev.budget.render_text());
    }
    let status = drop_status(report.drop_pp, a.max_drop);
    if status != 0 {
        return Ok(status);
    }
    Ok(if ev.budget.fits {
        0
    } else {
        midge_bench::budget::EXIT_DOES_NOT_FIT
    })
}

/// The `assess --html` page: latency from the emulated run when there was
/// one, else timed on the host (20 runs of a seeded input after 3 warm-up).
fn assess_page(
    report: &compare::Report,
    ev: &midge_bench::budget::Evaluation,
    target: &midge_bench::target::Target,
    model_bytes: &[u8],
    place: &str,
) -> Result<String> {
    use midge_bench::assess_page::{AssessPage, Latency};
    let host;
    let latency = match &ev.emulated {
        Some(run) => Latency::Emulated {
            target: &target.name,
            machine: &run.machine,
            instructions: run.layer_instructions(0),
            estimated_ms: ev.budget.estimated_ms,
        },
        None => {
            let bytes = AlignedBytes::from_slice(model_bytes);
            let model = Model::parse(&bytes).map_err(|e| Error::new(place, e.to_string()))?;
            let inputs = midge_bench::synth_inputs(&model, 1, midge_bench::budget::DEFAULT_SEED);
            host = midge_bench::host::host_latency(model_bytes, &inputs, 20, 3)?;
            Latency::Host(&host)
        }
    };
    Ok(AssessPage {
        report,
        footprint: &ev.footprint,
        budgets: std::slice::from_ref(&ev.budget),
        latency,
    }
    .render())
}

fn cmd_compare(a: &CompareArgs) -> Result<i32> {
    check_max_drop(a.max_drop)?;
    let opts = CompareOptions {
        quantize: a.flags.options(),
        also_fp16: a.also_fp16,
        images: a.images.clone(),
    };
    if a.sensitivity || a.mixed_description.is_some() {
        return compare_sensitivity(a, &opts);
    }
    if let Some(html) = &a.html {
        output::check_destinations(&[html], &[&a.description])?;
    }
    let (conv, dir) = compare::prepare(&a.description, &opts)?;
    let report = compare::evaluate(&conv, &dir, opts.also_fp16, opts.quantize.progress)?;
    write_html(a, &conv, &report)?;
    if a.json {
        let text = serde_json::to_string_pretty(&report)
            .map_err(|e| Error::new("report", format!("cannot write JSON: {e}")))?;
        println!("{text}");
    } else {
        print!("{}", report.to_text());
    }
    Ok(drop_status(report.drop_pp, a.max_drop))
}

/// `compare --html`: the page, written all or nothing.
fn write_html(
    a: &CompareArgs,
    conv: &quantize::Conversion,
    report: &compare::Report,
) -> Result<()> {
    let Some(path) = &a.html else { return Ok(()) };
    let page = midge_bench::report::accuracy_html(report, None, None);
    output::write_outputs(&[(path, page.as_bytes())], &conv.inputs(&a.description))
}

fn json_text(value: &serde_json::Value) -> Result<String> {
    serde_json::to_string_pretty(value)
        .map_err(|e| Error::new("report", format!("cannot write JSON: {e}")))
}

/// `compare --sensitivity` and `--mixed-description`: the report, the
/// per-layer table and the mixed-precision search on one conversion.
fn compare_sensitivity(a: &CompareArgs, opts: &CompareOptions) -> Result<i32> {
    use midge_convert::{mixed, sensitivity};
    if let (Some(_), Some(d)) = (&a.mixed_description, a.max_drop) {
        mixed::check_bound(d)?;
    }
    let mut outs: Vec<&Path> = a.mixed_description.iter().map(|p| p.as_path()).collect();
    outs.extend(a.html.as_deref());
    output::check_destinations(&outs, &[&a.description])?;
    let (conv, dir) = compare::prepare(&a.description, opts)?;
    let which = sensitivity::select(&conv, if a.sensitivity { &a.layers } else { &[] })?;
    let report = compare::evaluate(&conv, &dir, opts.also_fp16, opts.quantize.progress)?;
    // Only the search asked for: no table when no mix can meet the bound.
    let skip = if a.sensitivity { None } else { a.max_drop };
    let sens = sensitivity::measure(&conv, &dir, &which, skip)?;
    let plan = match (&a.mixed_description, a.max_drop) {
        (Some(_), Some(bound)) => {
            let target = match (&conv.desc.target, a.no_emulate) {
                (Some(path), false) => Some(midge_bench::target::Target::load(path)?),
                _ => None,
            };
            let mut instructions =
                |bytes: &[u8]| crate::bench::instructions(bytes, target.as_ref());
            Some(mixed::choose(&conv, &dir, &sens, bound, &mut instructions)?)
        }
        _ => None,
    };
    // The description (when the bound is met) and the page, all or nothing.
    let mut files: Vec<(&Path, Vec<u8>)> = Vec::new();
    if let (Some(dest), Some(p)) = (&a.mixed_description, &plan) {
        if p.met {
            let text = mixed::description_text(&conv, &a.description, dest, &p.precisions)?;
            files.push((dest, text.into_bytes()));
        }
    }
    if let Some(path) = &a.html {
        let page = midge_bench::report::accuracy_html(&report, Some(&sens), plan.as_ref());
        files.push((path, page.into_bytes()));
    }
    let files: Vec<(&Path, &[u8])> = files.iter().map(|(p, b)| (*p, b.as_slice())).collect();
    output::write_outputs(&files, &conv.inputs(&a.description))?;
    if a.json {
        let value = serde_json::json!({
            "report": report,
            "sensitivity": sens,
            "mixed": plan,
        });
        println!("{}", json_text(&value)?);
    } else {
        print!("{}", report.to_text());
        println!();
        print!("{}", sens.to_text());
        if let Some(p) = &plan {
            println!();
            print!("{}", p.to_text());
        }
    }
    match (&plan, &a.mixed_description) {
        (Some(p), Some(dest)) if p.met => {
            if !a.json {
                println!("wrote {}", escape_path(dest));
            }
            Ok(0)
        }
        (Some(p), _) => {
            eprintln!(
                "midge: {}: even all-fp16 drops {:.2} pp, more than --max-drop {}; no description written",
                escape_path(&a.description),
                p.all_fp16_drop_pp,
                p.bound_pp
            );
            Ok(EXIT_DROP_EXCEEDED)
        }
        (None, _) => Ok(drop_status(report.drop_pp, a.max_drop)),
    }
}

fn cmd_classify(a: &ClassifyArgs) -> Result<i32> {
    let result = midge_convert::classify::classify_path(&a.model, &a.images, a.resize)?;
    if a.json {
        let text = serde_json::to_string_pretty(&result)
            .map_err(|e| Error::new("classify", format!("cannot write JSON: {e}")))?;
        println!("{text}");
    } else {
        print!("{}", result.to_text(a.top));
    }
    Ok(0)
}

fn cmd_show(a: &ShowArgs) -> Result<i32> {
    let bytes = read_model(&a.model)?;
    let model = parse_model(&bytes, &a.model)?;
    let summary = midge_convert::show::Summary::of(&model);
    if a.json {
        let text = serde_json::to_string_pretty(&summary)
            .map_err(|e| Error::new("show", format!("cannot write JSON: {e}")))?;
        println!("{text}");
    } else {
        print!("{}", summary.to_text());
    }
    Ok(0)
}
