//! Greyscale image sets held in memory (row-major bytes, one label each) and
//! their PNG export: a flat folder for calibration, one sub-folder per label
//! for validation — the layout the converter reads from a user.

use std::fs;
use std::path::{Path, PathBuf};

use midge_convert::{Error, Result};

/// A set of equally sized single-channel images with class indices.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct GreySet {
    pub h: usize,
    pub w: usize,
    /// `len() · h · w` bytes, image after image, rows top to bottom.
    pub pixels: Vec<u8>,
    /// One class index per image.
    pub labels: Vec<usize>,
}

impl GreySet {
    pub fn new(h: usize, w: usize) -> Self {
        GreySet {
            h,
            w,
            pixels: Vec::new(),
            labels: Vec::new(),
        }
    }

    pub fn len(&self) -> usize {
        self.labels.len()
    }

    pub fn is_empty(&self) -> bool {
        self.labels.is_empty()
    }

    /// Bytes of image `i`.
    pub fn image(&self, i: usize) -> &[u8] {
        let n = self.h * self.w;
        &self.pixels[i * n..(i + 1) * n]
    }

    /// Appends one image. Panics when it is not `h · w` bytes (a caller bug).
    pub fn push(&mut self, image: &[u8], label: usize) {
        assert_eq!(image.len(), self.h * self.w, "image size");
        self.pixels.extend_from_slice(image);
        self.labels.push(label);
    }

    /// Number of images per class index (length = largest label + 1).
    pub fn class_counts(&self) -> Vec<usize> {
        let mut counts = vec![0; self.labels.iter().max().map_or(0, |m| m + 1)];
        for &l in &self.labels {
            counts[l] += 1;
        }
        counts
    }

    /// Writes every image as `<dir>/<stem><i>.png` (no labels in the path).
    /// Existing PNGs in `dir` are removed first so the folder holds exactly this set.
    pub fn write_flat(&self, dir: &Path, stem: &str) -> Result<()> {
        clear_pngs(dir)?;
        for i in 0..self.len() {
            self.write_png(i, &dir.join(format!("{stem}{i:04}.png")))?;
        }
        Ok(())
    }

    /// Writes image `i` as `<dir>/<class name>/<stem><i>.png`, clearing old PNGs
    /// in each class folder first.
    pub fn write_by_label(&self, dir: &Path, class_names: &[&str], stem: &str) -> Result<()> {
        for name in class_names {
            clear_pngs(&dir.join(name))?;
        }
        for i in 0..self.len() {
            let name = class_names.get(self.labels[i]).ok_or_else(|| {
                Error::new(
                    dir.display().to_string(),
                    format!(
                        "label {} has no class name ({} names)",
                        self.labels[i],
                        class_names.len()
                    ),
                )
            })?;
            self.write_png(i, &dir.join(name).join(format!("{stem}{i:04}.png")))?;
        }
        Ok(())
    }

    fn write_png(&self, i: usize, path: &Path) -> Result<()> {
        let img = image::GrayImage::from_raw(self.w as u32, self.h as u32, self.image(i).to_vec())
            .ok_or_else(|| Error::new(path.display().to_string(), "image buffer size"))?;
        img.save_with_format(path, image::ImageFormat::Png)
            .map_err(|e| Error::new(path.display().to_string(), format!("writing PNG: {e}")))
    }
}

/// Creates `dir` and removes the `*.png` files directly inside it.
fn clear_pngs(dir: &Path) -> Result<()> {
    let place = || dir.display().to_string();
    fs::create_dir_all(dir).map_err(|e| Error::new(place(), format!("creating folder: {e}")))?;
    let entries = fs::read_dir(dir).map_err(|e| Error::new(place(), format!("listing: {e}")))?;
    let mut old: Vec<PathBuf> = Vec::new();
    for entry in entries {
        let p = entry
            .map_err(|e| Error::new(place(), format!("listing: {e}")))?
            .path();
        if p.extension().is_some_and(|x| x.eq_ignore_ascii_case("png")) {
            old.push(p);
        }
    }
    for p in old {
        fs::remove_file(&p)
            .map_err(|e| Error::new(p.display().to_string(), format!("removing: {e}")))?;
    }
    Ok(())
}

impl GreySet {
    /// A grid of the first `cols · rows` images, each enlarged `zoom` times,
    /// for looking at generated data by eye.
    pub fn contact_sheet(&self, cols: usize, rows: usize, zoom: usize) -> image::GrayImage {
        let (cw, ch) = (self.w * zoom + 2, self.h * zoom + 2);
        let mut sheet = image::GrayImage::new((cols * cw) as u32, (rows * ch) as u32);
        for i in 0..(cols * rows).min(self.len()) {
            let (ox, oy) = ((i % cols) * cw, (i / cols) * ch);
            let img = self.image(i);
            for y in 0..self.h * zoom {
                for x in 0..self.w * zoom {
                    let v = img[(y / zoom) * self.w + x / zoom];
                    sheet.put_pixel((ox + x) as u32, (oy + y) as u32, image::Luma([v]));
                }
            }
        }
        sheet
    }
}
