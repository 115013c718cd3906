//! The `midge-train` binary: flag parsing over the library — data export for
//! the digits and bottle-cap sets, and training of a described model.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};
use midge_convert::description::Description;
use midge_convert::{Error, Result};
use midge_train::fit::{self, FitConfig, FixedSet, TrainSource};
use midge_train::net::Net;
use midge_train::{caps, digits};

#[derive(Parser)]
#[command(
    name = "midge-train",
    about = "Maintainers' aid: bundled data and float training"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Split models/digits/digits.csv.gz and write calib/ and test/<digit>/ PNGs.
    DigitsData {
        #[arg(long, default_value = "models/digits")]
        dir: PathBuf,
    },
    /// Render the bottle-cap calib/ and val/<class>/ PNGs.
    CapsData {
        #[arg(long, default_value = "models/caps")]
        dir: PathBuf,
        /// Also write an enlarged grid of validation images to this PNG.
        #[arg(long)]
        sheet: Option<PathBuf>,
    },
    /// Train the model of a description and write its `weights` file.
    Fit {
        /// The description (model.toml); weights go to its `weights` path.
        #[arg(long)]
        model: PathBuf,
        /// Training images: `digits` (the fixed split) or `caps` (generated).
        #[arg(long)]
        data: DataKind,
        #[arg(long, default_value_t = 1)]
        seed: u64,
        #[arg(long, default_value_t = 30)]
        epochs: usize,
        #[arg(long, default_value_t = 32)]
        batch: usize,
        #[arg(long, default_value_t = 0.003)]
        lr: f64,
        #[arg(long, default_value_t = 0.0001)]
        weight_decay: f64,
        /// Generated images per epoch (caps).
        #[arg(long, default_value_t = 4000)]
        per_epoch: usize,
        /// Random one-pixel shifts of the training images (digits).
        #[arg(long)]
        shift: bool,
        /// The digits file (digits).
        #[arg(long, default_value = "models/digits/digits.csv.gz")]
        digits: PathBuf,
    },
    /// Write a function-preserving per-channel rescale of a model's weights
    /// (the int8 hard case): producer channel c times s_c, consumer input
    /// channel c divided by s_c; prints float top-1 and the logit gap of both.
    Rescale {
        /// The description whose `weights` are read.
        #[arg(long)]
        model: PathBuf,
        /// The description whose `weights` path is written (same layers).
        #[arg(long)]
        to: PathBuf,
        /// PRODUCER:CONSUMER layer names, e.g. b0_dw_bn:b0_pw (repeatable).
        #[arg(long = "pair", required = true)]
        pairs: Vec<String>,
        /// Scales repeat every K channels.
        #[arg(long, default_value_t = 5)]
        cycle: usize,
        /// The scales span this many powers of ten, centred on 1.
        #[arg(long, default_value_t = 2.0)]
        decades: f64,
    },
    /// Top-1 of the converter's float reference on the description's
    /// validation images, reading its committed weights (no training).
    Check {
        #[arg(long)]
        model: PathBuf,
    },
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum DataKind {
    Digits,
    Caps,
}

#[allow(clippy::too_many_arguments)]
fn run_fit(
    model: PathBuf,
    data: DataKind,
    cfg: FitConfig,
    per_epoch: usize,
    shift: bool,
    digits_path: PathBuf,
) -> Result<()> {
    let desc = Description::load(&model)?;
    let weights = desc.weights.clone().ok_or_else(|| {
        Error::new(
            model.display().to_string(),
            "no `weights` key: nowhere to write",
        )
    })?;
    let val = fit::validation_set(&desc)?;
    let mut source: Box<dyn TrainSource> = match data {
        DataKind::Digits => Box::new(FixedSet {
            set: digits::split(&digits::load(&digits_path)?)?.train,
            shift,
            seed: cfg.seed,
        }),
        DataKind::Caps => Box::new(caps::TrainStream { per_epoch }),
    };
    let mut net = Net::new(&desc, cfg.seed)?;
    println!("{cfg:?}");
    fit::fit(&mut net, source.as_mut(), &cfg, Some(&val))?;
    net.save(&weights)?;
    let ours = fit::accuracy(&mut net, &val)?;
    println!("wrote {}", weights.display());
    println!(
        "candle float top-1 on {} ({} images): {:.2} %",
        desc.validation
            .as_ref()
            .map_or(String::new(), |p| p.display().to_string()),
        val.len(),
        100.0 * ours
    );
    match fit::reference_accuracy(&model, &val) {
        Ok(r) => println!("converter float reference top-1: {:.2} %", 100.0 * r),
        Err(e) => println!("converter float reference not available: {e}"),
    }
    match fit::logit_gap(&mut net, &model, &val, 64) {
        Ok(g) => {
            println!("largest logit difference candle vs float reference (64 images): {g:.2e}")
        }
        Err(e) => println!("logit comparison not available: {e}"),
    }
    Ok(())
}

fn run_rescale(
    model: PathBuf,
    to: PathBuf,
    pairs: Vec<String>,
    cycle: usize,
    decades: f64,
) -> Result<()> {
    let pairs = pairs
        .iter()
        .map(|p| {
            p.split_once(':')
                .map(|(a, b)| (a.to_string(), b.to_string()))
                .ok_or_else(|| {
                    Error::new("--pair", format!("expected PRODUCER:CONSUMER, found {p}"))
                })
        })
        .collect::<Result<Vec<_>>>()?;
    let src = Description::load(&model)?;
    let dst = Description::load(&to)?;
    let weight_path = |d: &Description, p: &PathBuf| {
        d.weights
            .clone()
            .ok_or_else(|| Error::new(p.display().to_string(), "no `weights` key"))
    };
    let (input, output) = (weight_path(&src, &model)?, weight_path(&dst, &to)?);
    if input == output {
        return Err(Error::new(
            to.display().to_string(),
            "`weights` is the file it is made from: expected another path",
        ));
    }
    let done = midge_train::rescale::rescale_file(&src, &input, &output, &pairs, cycle, decades)?;
    println!("wrote {}", output.display());
    for p in &done {
        let s: Vec<String> = p.scales.iter().map(|v| format!("{v:.3}")).collect();
        println!("  {} → {}: s = [{}]", p.producer, p.consumer, s.join(", "));
    }
    let val = fit::validation_set(&dst)?;
    println!(
        "converter float reference top-1: {:.2} % ({}), {:.2} % ({})",
        100.0 * fit::reference_accuracy(&model, &val)?,
        model.display(),
        100.0 * fit::reference_accuracy(&to, &val)?,
        to.display()
    );
    println!(
        "largest relative logit difference over {} images: {:.2e}",
        val.len(),
        midge_train::rescale::float_gap(&model, &to, &val)?
    );
    Ok(())
}

fn main() -> ExitCode {
    // One compute thread unless the caller says otherwise: these models are
    // too small to gain from candle's thread pool on a busy 2-core machine
    // (measured: ~5× less CPU time), and one thread keeps the summation order fixed.
    if std::env::var_os("RAYON_NUM_THREADS").is_none() {
        std::env::set_var("RAYON_NUM_THREADS", "1");
    }
    let cli = Cli::parse();
    let result = match cli.command {
        Command::DigitsData { dir } => digits::export(&dir).map(|s| {
            println!(
                "digits: {} train, {} calibration, {} test (split seed {})",
                s.train.len(),
                s.calibration.len(),
                s.test.len(),
                digits::SPLIT_SEED
            );
        }),
        Command::CapsData { dir, sheet } => caps::export(&dir).and_then(|(calib, val)| {
            println!(
                "caps: {} calibration, {} validation {:?}",
                calib.len(),
                val.len(),
                val.class_counts()
            );
            if let Some(path) = sheet {
                val.contact_sheet(16, 8, 4)
                    .save(&path)
                    .map_err(|e| Error::new(path.display().to_string(), e.to_string()))?;
            }
            Ok(())
        }),
        Command::Check { model } => Description::load(&model)
            .and_then(|d| fit::validation_set(&d))
            .and_then(|val| {
                let m = fit::reference_confusion(&model, &val)?;
                let right: usize = (0..m.len()).map(|k| m[k][k]).sum();
                println!(
                    "{}: converter float reference top-1 {:.2} % ({right} / {}); rows true, columns predicted:",
                    model.display(),
                    100.0 * right as f64 / val.len().max(1) as f64,
                    val.len()
                );
                for row in &m {
                    let cells: Vec<String> = row.iter().map(|c| format!("{c:>4}")).collect();
                    println!("{}", cells.join(""));
                }
                Ok(())
            }),
        Command::Rescale {
            model,
            to,
            pairs,
            cycle,
            decades,
        } => run_rescale(model, to, pairs, cycle, decades),
        Command::Fit {
            model,
            data,
            seed,
            epochs,
            batch,
            lr,
            weight_decay,
            per_epoch,
            shift,
            digits,
        } => run_fit(
            model,
            data,
            FitConfig {
                seed,
                epochs,
                batch,
                lr,
                weight_decay,
            },
            per_epoch,
            shift,
            digits,
        ),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("midge-train: {e}");
            ExitCode::from(2)
        }
    }
}
