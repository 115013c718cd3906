//! Image input for calibration, evaluation and `classify`: PNG/JPEG/BMP files
//! into HWC u8 pixels of the model's input size, plain folders (sorted) and
//! labelled folders (one sub-folder per class label).

use std::io::Cursor;
use std::path::{Path, PathBuf};

use image::imageops::FilterType;

use crate::error::{Error, Result};
use crate::files;
use crate::limits;

/// What the model's input wants: size, channel count (1 = grey, 3 = RGB) and
/// whether other sizes are resized (bilinear, `FilterType::Triangle`) or refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ImageSpec {
    pub h: u32,
    pub w: u32,
    pub c: u32,
    pub resize: bool,
}

/// Load one image as HWC u8 pixels matching `spec`. Colour images become
/// grey by the `image` crate's luma conversion (ITU-R BT.709 weights) when
/// the model takes one channel; grey images are repeated into R, G and B
/// when it takes three. Alpha is dropped. The size is read from the image
/// header and checked (against `spec` and `limits`) before decoding, and
/// the decoder runs under `limits::MAX_IMAGE_DECODE_BYTES`.
pub fn load_image(path: &Path, spec: &ImageSpec) -> Result<Vec<u8>> {
    let place = path.display().to_string();
    let bytes = files::read(path, &limits::IMAGE_FILE)?;
    let reader = || {
        image::ImageReader::new(Cursor::new(&bytes[..]))
            .with_guessed_format()
            .map_err(|e| Error::io(&place, "cannot read", &e))
    };
    let unreadable = |e: image::ImageError| {
        Error::new(&place, format!("not a readable PNG/JPEG/BMP image: {e}"))
    };
    // The header's size first: refuse before the decoder allocates.
    let (w, h) = reader()?.into_dimensions().map_err(unreadable)?;
    let side = w.max(h) as u64;
    limits::check(
        &place,
        "image width or height",
        side,
        limits::MAX_IMAGE_SIDE,
    )?;
    if (h, w) != (spec.h, spec.w) {
        if !spec.resize {
            return Err(wrong_size(&place, (w, h), spec));
        }
        limits::check(
            &place,
            "pixels of an image to resize",
            w as u64 * h as u64,
            limits::MAX_IMAGE_PIXELS,
        )?;
    }
    let mut decoder_limits = image::Limits::default();
    decoder_limits.max_image_width = Some(limits::MAX_IMAGE_SIDE as u32);
    decoder_limits.max_image_height = Some(limits::MAX_IMAGE_SIDE as u32);
    decoder_limits.max_alloc = Some(limits::MAX_IMAGE_DECODE_BYTES);
    let mut r = reader()?;
    r.limits(decoder_limits);
    let img = r.decode().map_err(unreadable)?;
    let (w, h) = (img.width(), img.height());
    let img = if (h, w) != (spec.h, spec.w) {
        if !spec.resize {
            return Err(wrong_size(&place, (w, h), spec));
        }
        img.resize_exact(spec.w, spec.h, FilterType::Triangle)
    } else {
        img
    };
    match spec.c {
        1 => Ok(img.to_luma8().into_raw()),
        3 => Ok(img.to_rgb8().into_raw()),
        c => Err(Error::new(
            &place,
            format!("model input has {c} channels; images can feed 1 (grey) or 3 (RGB)"),
        )),
    }
}

fn wrong_size(place: &str, (w, h): (u32, u32), spec: &ImageSpec) -> Error {
    Error::new(
        place,
        format!(
            "image is {w}×{h} (width×height), the model input is {}×{}; resize it, or allow resizing (`resize = true` in the description, `--resize` for classify)",
            spec.w, spec.h
        ),
    )
}

/// The regular files among `entries` (sub-folders left out).
fn files_of(entries: Vec<files::Entry>) -> Vec<PathBuf> {
    entries
        .into_iter()
        .filter(|e| !e.is_dir)
        .map(|e| e.path)
        .collect()
}

fn no_images(dir: &Path) -> Error {
    Error::new(dir.display().to_string(), "folder holds no images")
}

/// The image files of a folder, sorted by name (deterministic). Hidden
/// entries and sub-folders are skipped, anything but a file or folder is
/// refused (`files::list_folder`); an empty folder is an error. Files are
/// checked when loaded: `load_folder` names any that are not images.
pub fn folder_images(dir: &Path) -> Result<Vec<PathBuf>> {
    let files = files_of(files::list_folder(dir)?);
    if files.is_empty() {
        return Err(no_images(dir));
    }
    Ok(files)
}

/// Load every image of a folder (see `folder_images`).
pub fn load_folder(dir: &Path, spec: &ImageSpec) -> Result<Vec<Vec<u8>>> {
    folder_images(dir)?
        .iter()
        .map(|p| load_image(p, spec))
        .collect()
}

/// Every image file in a folder and its immediate sub-folders (a flat or a
/// labelled folder), sorted by path; hidden entries skipped. Used for
/// calibration, where labels do not matter.
pub fn all_images(dir: &Path) -> Result<Vec<PathBuf>> {
    let place = dir.display().to_string();
    let mut out = Vec::new();
    for e in files::list_folder(dir)? {
        if e.is_dir {
            out.extend(files_of(files::list_folder(&e.path)?));
        } else {
            out.push(e.path);
        }
        limits::check(&place, "images", out.len() as u64, limits::MAX_IMAGES)?;
    }
    out.sort();
    if out.is_empty() {
        return Err(no_images(dir));
    }
    Ok(out)
}

/// A labelled folder: one sub-folder per class, named exactly as the labels.
/// Returns (file, label index) for every image, by label then by file name.
pub fn labelled_folder(dir: &Path, labels: &[String]) -> Result<Vec<(PathBuf, usize)>> {
    let subs: Vec<String> = files::list_folder(dir)?
        .into_iter()
        .filter(|e| e.is_dir)
        .filter_map(|e| e.path.file_name().map(|n| n.to_string_lossy().into_owned()))
        .collect();
    let missing: Vec<&str> = labels
        .iter()
        .filter(|l| !subs.contains(l))
        .map(|s| s.as_str())
        .collect();
    let extra: Vec<&str> = subs
        .iter()
        .filter(|s| !labels.contains(s))
        .map(|s| s.as_str())
        .collect();
    if !missing.is_empty() || !extra.is_empty() {
        let mut parts = Vec::new();
        if !missing.is_empty() {
            parts.push(format!("missing class folders: {}", missing.join(", ")));
        }
        if !extra.is_empty() {
            parts.push(format!("folders that are not labels: {}", extra.join(", ")));
        }
        return Err(Error::new(
            dir.display().to_string(),
            format!(
                "expected one sub-folder per label ({}); {}",
                labels.join(", "),
                parts.join("; ")
            ),
        ));
    }
    let mut out = Vec::new();
    for (k, l) in labels.iter().enumerate() {
        for f in folder_images(&dir.join(l))? {
            out.push((f, k));
        }
        limits::check(
            &dir.display().to_string(),
            "images",
            out.len() as u64,
            limits::MAX_IMAGES,
        )?;
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::fs;

    fn scratch(tag: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("midge-images-{tag}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&d);
        fs::create_dir_all(&d).unwrap();
        d
    }

    fn rgb(w: u32, h: u32, f: impl Fn(u32, u32) -> [u8; 3]) -> image::RgbImage {
        image::RgbImage::from_fn(w, h, |x, y| image::Rgb(f(x, y)))
    }

    #[test]
    fn loads_hwc_and_converts_channels() {
        let d = scratch("load");
        let p = d.join("a.png");
        rgb(3, 2, |x, y| [x as u8 * 10, y as u8 * 100, 7])
            .save(&p)
            .unwrap();
        let spec = ImageSpec {
            h: 2,
            w: 3,
            c: 3,
            resize: false,
        };
        let px = load_image(&p, &spec).unwrap();
        // HWC: pixel (y=1, x=2) starts at (1·3 + 2)·3.
        assert_eq!(&px[15..18], &[20, 100, 7]);
        // Grey source into an RGB model: repeated channels.
        let g = d.join("g.bmp");
        image::GrayImage::from_fn(3, 2, |x, _| image::Luma([x as u8 * 50]))
            .save(&g)
            .unwrap();
        let px = load_image(&g, &spec).unwrap();
        assert_eq!(&px[3..6], &[50, 50, 50]);
        let grey = load_image(&g, &ImageSpec { c: 1, ..spec }).unwrap();
        assert_eq!(grey, vec![0, 50, 100, 0, 50, 100]);
        fs::remove_dir_all(&d).unwrap();
    }

    #[test]
    fn loads_jpeg() {
        // JPEG is lossy, but a flat 8×8 block is one DC coefficient: it
        // decodes to its grey level within a step or two (common practice).
        let d = scratch("jpeg");
        let p = d.join("flat.jpg");
        image::GrayImage::from_pixel(8, 8, image::Luma([128]))
            .save(&p)
            .unwrap();
        let spec = ImageSpec {
            h: 8,
            w: 8,
            c: 1,
            resize: false,
        };
        let px = load_image(&p, &spec).unwrap();
        assert_eq!(px.len(), 64);
        assert!(px.iter().all(|&v| v.abs_diff(128) <= 2), "{px:?}");
        fs::remove_dir_all(&d).unwrap();
    }

    #[test]
    fn size_is_refused_or_resized() {
        let d = scratch("size");
        let p = d.join("big.png");
        rgb(8, 8, |_, _| [200, 100, 50]).save(&p).unwrap();
        let spec = ImageSpec {
            h: 4,
            w: 4,
            c: 3,
            resize: false,
        };
        let e = load_image(&p, &spec).unwrap_err();
        assert!(e.place().contains("big.png"));
        assert!(
            e.problem().contains("8×8") && e.problem().contains("4×4"),
            "{e}"
        );
        // A flat image stays flat under bilinear resizing.
        let px = load_image(
            &p,
            &ImageSpec {
                resize: true,
                ..spec
            },
        )
        .unwrap();
        assert_eq!(px.len(), 48);
        assert!(px.chunks(3).all(|c| c == [200, 100, 50]));
        fs::remove_dir_all(&d).unwrap();
    }

    #[test]
    fn folders_sorted_checked_and_labelled() {
        let d = scratch("folders");
        let spec = ImageSpec {
            h: 1,
            w: 1,
            c: 1,
            resize: false,
        };
        fs::create_dir_all(d.join("ok")).unwrap();
        fs::create_dir_all(d.join("bad")).unwrap();
        for n in ["b.png", "a.png", ".hidden"] {
            fs::write(d.join("ok").join(n), b"x").unwrap();
        }
        for n in ["b.png", "a.png"] {
            image::GrayImage::new(1, 1)
                .save(d.join("ok").join(n))
                .unwrap();
        }
        let files = folder_images(&d.join("ok")).unwrap();
        let names: Vec<_> = files
            .iter()
            .map(|p| p.file_name().unwrap().to_owned())
            .collect();
        assert_eq!(names, ["a.png", "b.png"]);
        assert_eq!(load_folder(&d.join("ok"), &spec).unwrap().len(), 2);
        fs::write(d.join("bad").join("notes.txt"), b"hello").unwrap();
        let e = load_folder(&d.join("bad"), &spec).unwrap_err();
        assert!(e.place().contains("notes.txt"), "{e}");
        fs::create_dir_all(d.join("empty")).unwrap();
        assert!(folder_images(&d.join("empty")).is_err());
        let labels: Vec<String> = ["ok", "bad", "gone"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        fs::create_dir_all(d.join("odd")).unwrap();
        let e = labelled_folder(&d, &labels).unwrap_err();
        assert!(
            e.problem().contains("gone")
                && e.problem().contains("odd")
                && e.problem().contains("empty"),
            "{e}"
        );
        fs::remove_dir_all(d.join("odd")).unwrap();
        fs::remove_dir_all(d.join("empty")).unwrap();
        let e = labelled_folder(&d, &labels[..2]).unwrap();
        assert_eq!(e.len(), 3);
        assert_eq!(e[0].1, 0);
        assert_eq!(e[2].1, 1);
        fs::remove_dir_all(&d).unwrap();
    }
}
