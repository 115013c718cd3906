//! `midge budget`, `midge report` and `midge sweep`: their flags and the calls into the
//! midge-bench library (`bench_report`, `sweep::sweep`, the renderers).

use std::path::PathBuf;
use std::time::Duration;

use midge_bench::budget::{BudgetOptions, DEFAULT_SEED};
use midge_bench::report::{sweep_html, sweep_text};
use midge_bench::target::Target;
use midge_bench::{bench_report, sweep, Error, ReportOptions, Result};
use midge_convert::description::Description;
use midge_convert::output::{check_destinations, write_outputs};

#[derive(clap::Args, Debug)]
pub struct Common {
    /// Target profiles (names under models/targets or files), comma-separated.
    #[arg(long, value_delimiter = ',')]
    targets: Vec<String>,
    /// Skip the emulated (QEMU) runs.
    #[arg(long)]
    no_emulate: bool,
    /// Do not build firmware to measure the runtime's code size.
    #[arg(long)]
    no_runtime_size: bool,
    /// Seed of synthetic weights and inputs.
    #[arg(long, default_value_t = DEFAULT_SEED)]
    seed: u64,
    /// Seconds allowed for one emulated run.
    #[arg(long, default_value_t = 300)]
    timeout: u64,
    /// Print JSON instead of tables.
    #[arg(long)]
    json: bool,
    /// Also write a self-contained HTML report.
    #[arg(long, value_name = "FILE")]
    html: Option<PathBuf>,
}

/// Flags of `midge report`.
#[derive(clap::Args, Debug)]
pub struct ReportArgs {
    /// A .midge model file or a description (TOML).
    model: PathBuf,
    #[command(flatten)]
    common: Common,
    /// Timed host runs per input (0: none).
    #[arg(long, default_value_t = 20)]
    runs: usize,
    /// Untimed runs first.
    #[arg(long, default_value_t = 3)]
    warmup: usize,
    /// Number of seeded random inputs.
    #[arg(long, default_value_t = 1)]
    inputs: usize,
    /// Include a compare run (accuracy drop, confusion, per-layer SQNR,
    /// logit error) for a description with weights, calibration and
    /// validation images.
    #[arg(long)]
    compare: bool,
}

/// Flags of `midge sweep`.
#[derive(clap::Args, Debug)]
pub struct SweepArgs {
    description: PathBuf,
    /// Width multipliers, comma-separated.
    #[arg(long, value_delimiter = ',', default_value = "1")]
    width: Vec<f32>,
    /// Input sizes, comma-separated: 32 (square) or 49x10 (height x
    /// width) [default: the description's].
    #[arg(long, value_delimiter = ',')]
    resolution: Vec<String>,
    #[command(flatten)]
    common: Common,
}

fn targets(names: &[String]) -> Result<Vec<Target>> {
    names.iter().map(|n| Target::resolve(n)).collect()
}

/// `midge report`: footprint, host latency, budgets and emulated runs.
pub fn cmd_report(a: ReportArgs) -> Result<i32> {
    let ReportArgs {
        model,
        common,
        runs,
        warmup,
        inputs,
        compare,
    } = a;
    let opts = ReportOptions {
        targets: targets(&common.targets)?,
        runs,
        warmup,
        inputs,
        emulate: !common.no_emulate,
        measure_runtime: !common.no_runtime_size,
        compare,
        seed: common.seed,
        timeout: Duration::from_secs(common.timeout),
    };
    // The HTML destination is checked before the (long) measurement.
    if let Some(h) = &common.html {
        check_destinations(&[h], &[&model])?;
    }
    let r = bench_report(&model, &opts)?;
    if let Some(h) = &common.html {
        write_outputs(&[(h, r.render_html().as_bytes())], &[&model])?;
    }
    if common.json {
        println!("{}", serde_json::to_string_pretty(&r).unwrap_or_default());
    } else {
        print!("{}", r.render_text());
    }
    Ok(0)
}

/// `midge sweep`: every width and resolution variant budgeted on every target.
pub fn cmd_sweep(a: SweepArgs) -> Result<i32> {
    let SweepArgs {
        description,
        width,
        resolution,
        common,
    } = a;
    if let Some(h) = &common.html {
        check_destinations(&[h], &[&description])?;
    }
    let desc = Description::load(&description)?;
    let opts = BudgetOptions {
        measure_runtime: !common.no_runtime_size,
        emulate: !common.no_emulate,
        emulator_timeout: Duration::from_secs(common.timeout),
    };
    let t = targets(&common.targets)?;
    let sizes = resolution
        .iter()
        .map(|r| sweep::parse_resolution(r))
        .collect::<Result<Vec<_>>>()?;
    let rows = sweep::sweep(&desc, &width, &sizes, &t, &opts, common.seed)?;
    if let Some(h) = &common.html {
        write_outputs(
            &[(h, sweep_html(&desc.name, &rows).as_bytes())],
            &[&description],
        )?;
    }
    if common.json {
        println!(
            "{}",
            serde_json::to_string_pretty(&rows).unwrap_or_default()
        );
    } else {
        print!("{}", sweep_text(&rows));
    }
    Ok(0)
}

/// Flags of `midge budget`.
#[derive(clap::Args, Debug)]
pub struct BudgetArgs {
    /// A .midge model file, or a description (TOML); a description without
    /// weights gets seeded synthetic weights.
    pub model: PathBuf,
    /// Target profile: a name under models/targets (m4-80, m0plus-48,
    /// m7-400) or a profile file.
    #[arg(long)]
    pub target: String,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
    /// Skip the emulated run (no stack high-water mark).
    #[arg(long)]
    pub no_emulate: bool,
    /// Do not build firmware to measure the runtime's code size.
    #[arg(long)]
    pub no_runtime_size: bool,
    /// Seed of synthetic weights.
    #[arg(long, default_value_t = DEFAULT_SEED)]
    pub seed: u64,
}

/// `midge budget`: prints the bill and verdict; returns the exit status
/// (0 fits, `midge_bench::budget::EXIT_DOES_NOT_FIT` otherwise).
pub fn cmd_budget(a: &BudgetArgs) -> Result<i32> {
    let target = Target::resolve(&a.target)?;
    let bytes = midge_bench::budget::model_bytes_for(&a.model, a.seed)?;
    let opts = BudgetOptions {
        measure_runtime: !a.no_runtime_size,
        emulate: !a.no_emulate,
        ..BudgetOptions::default()
    };
    let ev = midge_bench::budget::evaluate(&bytes, &target, &opts)
        .map_err(|e| Error::new(a.model.display().to_string(), e.to_string()))?;
    if a.json {
        let text = serde_json::to_string_pretty(&ev.budget)
            .map_err(|e| Error::new("budget", format!("cannot write JSON: {e}")))?;
        println!("{text}");
    } else {
        print!("{}", ev.budget.render_text());
    }
    Ok(if ev.budget.fits {
        0
    } else {
        midge_bench::budget::EXIT_DOES_NOT_FIT
    })
}

/// Instructions of one inference of a model file on `target`'s emulated
/// core (for `compare --mixed-description`), or why they were not counted.
pub fn instructions(model: &[u8], target: Option<&Target>) -> (Option<u64>, String) {
    let Some(target) = target else {
        return (
            None,
            "--no-emulate, or no target in the description".to_string(),
        );
    };
    let opts = BudgetOptions {
        measure_runtime: false,
        emulate: true,
        ..BudgetOptions::default()
    };
    match midge_bench::budget::evaluate(model, target, &opts) {
        Ok(ev) => match ev.budget.instructions {
            Some(i) => (Some(i), format!("emulated {}", target.name)),
            None => (None, "the emulated run reported no layers".to_string()),
        },
        Err(e) => (None, e.to_string()),
    }
}
