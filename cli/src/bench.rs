//! `midge report` and `midge sweep`: their flags and the calls into the
//! midge-bench library (`bench_report`, `sweep::sweep`, the renderers).

use std::path::PathBuf;
use std::time::Duration;

use midge_bench::report::{sweep_html, sweep_text};
use midge_bench::{bench_report, sweep, ReportOptions, Result};
use midge_convert::budget::{BudgetOptions, DEFAULT_SEED};
use midge_convert::description::Description;
use midge_convert::output::{check_destinations, write_outputs};
use midge_convert::target::Target;

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
    /// Include a compare run (per-layer SQNR) for a description with
    /// weights, calibration and validation images.
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
