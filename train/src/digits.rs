//! The open digits data (UCI "Optical Recognition of Handwritten Digits",
//! Alpaydin & Kaynak, CC BY 4.0, as shipped in the scikit-learn wheel): reading
//! `digits.csv.gz`, the fixed train / calibration / test split, and the PNG export.

use std::io::Read;
use std::path::Path;

use midge_convert::{Error, Result};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::images::GreySet;

/// Image side in pixels.
pub const SIDE: usize = 8;
/// Grey levels in the file run 0..=16 (UCI description: counts of on pixels in 4×4 blocks).
pub const MAX_LEVEL: u8 = 16;
/// Number of images in the file (scikit-learn `digits.rst`: 1797 instances).
pub const COUNT: usize = 1797;
/// Seed of the ChaCha8 permutation that defines the split.
pub const SPLIT_SEED: u64 = 20_260_901;
/// Sizes of the three parts, in permutation order: train, calibration, test.
pub const TRAIN: usize = 1197;
pub const CALIBRATION: usize = 200;
pub const TEST: usize = 400;
/// Class folder names: the digit itself.
pub const CLASS_NAMES: [&str; 10] = ["0", "1", "2", "3", "4", "5", "6", "7", "8", "9"];

/// One 0..=16 level → one byte: round(v·255/16), halves away from zero (8 → 128).
pub fn level_to_byte(v: u8) -> u8 {
    (f64::from(v) * 255.0 / f64::from(MAX_LEVEL)).round() as u8
}

/// Reads the gzip CSV: 64 levels then the label per line. Pixels are returned
/// already mapped to bytes with [`level_to_byte`].
pub fn load(path: &Path) -> Result<GreySet> {
    let place = path.display().to_string();
    let file =
        std::fs::File::open(path).map_err(|e| Error::new(&place, format!("opening: {e}")))?;
    let mut text = String::new();
    flate2::read::GzDecoder::new(file)
        .read_to_string(&mut text)
        .map_err(|e| Error::new(&place, format!("gunzip: {e}")))?;
    parse_csv(&text, &place)
}

fn parse_csv(text: &str, place: &str) -> Result<GreySet> {
    let mut set = GreySet::new(SIDE, SIDE);
    let mut row = Vec::with_capacity(SIDE * SIDE);
    for (n, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        let at = || format!("{place}: line {}", n + 1);
        let fields: Vec<&str> = line.split(',').collect();
        if fields.len() != SIDE * SIDE + 1 {
            return Err(Error::new(
                at(),
                format!(
                    "expected {} fields, found {}",
                    SIDE * SIDE + 1,
                    fields.len()
                ),
            ));
        }
        row.clear();
        for f in &fields[..SIDE * SIDE] {
            let v: f64 = f
                .trim()
                .parse()
                .map_err(|_| Error::new(at(), format!("not a number: {f:?}")))?;
            if !(0.0..=f64::from(MAX_LEVEL)).contains(&v) || v.fract() != 0.0 {
                return Err(Error::new(at(), format!("level {v} outside 0..=16")));
            }
            row.push(level_to_byte(v as u8));
        }
        let label: f64 = fields[SIDE * SIDE]
            .trim()
            .parse()
            .map_err(|_| Error::new(at(), "label is not a number"))?;
        if !(0.0..=9.0).contains(&label) || label.fract() != 0.0 {
            return Err(Error::new(at(), format!("label {label} outside 0..=9")));
        }
        set.push(&row, label as usize);
    }
    Ok(set)
}

/// The three parts of the fixed split.
pub struct Split {
    pub train: GreySet,
    pub calibration: GreySet,
    pub test: GreySet,
}

/// Permutation of `0..n` drawn with ChaCha8 seeded by [`SPLIT_SEED`]
/// (rand 0.8 `SliceRandom::shuffle`).
pub fn split_order(n: usize) -> Vec<usize> {
    let mut order: Vec<usize> = (0..n).collect();
    order.shuffle(&mut ChaCha8Rng::seed_from_u64(SPLIT_SEED));
    order
}

/// Splits the full file: the first [`TRAIN`] images of the permutation train,
/// the next [`CALIBRATION`] calibrate, the last [`TEST`] test.
pub fn split(all: &GreySet) -> Result<Split> {
    if all.len() != COUNT {
        return Err(Error::new(
            "digits",
            format!("expected {COUNT} images, found {}", all.len()),
        ));
    }
    let order = split_order(all.len());
    let take = |idx: &[usize]| {
        let mut s = GreySet::new(SIDE, SIDE);
        for &i in idx {
            s.push(all.image(i), all.labels[i]);
        }
        s
    };
    Ok(Split {
        train: take(&order[..TRAIN]),
        calibration: take(&order[TRAIN..TRAIN + CALIBRATION]),
        test: take(&order[TRAIN + CALIBRATION..]),
    })
}

/// Writes `<dir>/calib/*.png` and `<dir>/test/<digit>/*.png` from `<dir>/digits.csv.gz`.
pub fn export(dir: &Path) -> Result<Split> {
    let parts = split(&load(&dir.join("digits.csv.gz"))?)?;
    parts.calibration.write_flat(&dir.join("calib"), "c")?;
    parts
        .test
        .write_by_label(&dir.join("test"), &CLASS_NAMES, "t")?;
    Ok(parts)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn levels_map_to_full_byte_range() {
        // round(v·255/16): 0 → 0, 16 → 255, 8 → 127.5 → 128 (half away from zero).
        assert_eq!(level_to_byte(0), 0);
        assert_eq!(level_to_byte(16), 255);
        assert_eq!(level_to_byte(8), 128);
        assert_eq!(level_to_byte(1), 16); // 15.94
    }

    #[test]
    fn split_is_a_permutation() {
        let order = split_order(COUNT);
        let mut sorted = order.clone();
        sorted.sort_unstable();
        assert_eq!(sorted, (0..COUNT).collect::<Vec<_>>());
        assert_ne!(order, sorted, "the seeded shuffle must move something");
        assert_eq!(TRAIN + CALIBRATION + TEST, COUNT);
    }

    #[test]
    fn csv_errors_name_the_line() {
        let bad = "0,".repeat(64) + "3\n" + &"0,".repeat(63) + "0\n";
        let e = parse_csv(&bad, "x.csv").unwrap_err();
        assert!(e.place().contains("line 2"), "{e}");
        assert!(e.problem().contains("expected 65 fields, found 64"), "{e}");
    }
}
