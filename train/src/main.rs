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
