//! Reading the files the converter is given: regular files only (symbolic
//! links followed), never blocking on a FIFO or a device, each kind read up
//! to its size cap (`limits`); folder listings that name any odd entry.

use std::fs::{self, File, FileType, OpenOptions};
use std::io::Read;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};
use crate::limits::{self, FileCap};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;

/// What kind of file system object `t` is, for messages.
pub fn kind_name(t: &FileType) -> &'static str {
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if t.is_fifo() {
            return "a FIFO (named pipe)";
        }
        if t.is_char_device() {
            return "a character device";
        }
        if t.is_block_device() {
            return "a block device";
        }
        if t.is_socket() {
            return "a socket";
        }
    }
    if t.is_dir() {
        "a folder"
    } else if t.is_symlink() {
        "a symbolic link"
    } else if t.is_file() {
        "a regular file"
    } else {
        "not a regular file"
    }
}

fn open_nonblocking(path: &Path) -> std::io::Result<File> {
    let mut o = OpenOptions::new();
    o.read(true);
    #[cfg(unix)]
    {
        // A FIFO opened for reading would wait for a writer; O_NONBLOCK
        // returns at once, and fstat below refuses it. No effect on files.
        use std::os::unix::fs::OpenOptionsExt;
        o.custom_flags(libc::O_NONBLOCK);
    }
    o.open(path)
}

fn not_regular(place: &str, t: &FileType, what: &str) -> Error {
    Error::new(
        place,
        format!("is {}; expected a regular {what} file", kind_name(t)),
    )
}

/// The bytes of the regular file `path`, at most `cap.max_bytes` of them.
pub fn read(path: &Path, cap: &FileCap) -> Result<Vec<u8>> {
    let place = path.display().to_string();
    let what = cap.what;
    let cannot = |e: std::io::Error| Error::io(&place, format!("cannot read {what}"), &e);
    // Checked before opening (a socket cannot be opened at all) and again
    // on the open file (the path may have been replaced in between).
    let meta = fs::metadata(path).map_err(cannot)?;
    if !meta.is_file() {
        return Err(not_regular(&place, &meta.file_type(), what));
    }
    let f = open_nonblocking(path).map_err(cannot)?;
    let meta = f.metadata().map_err(cannot)?;
    if !meta.is_file() {
        return Err(not_regular(&place, &meta.file_type(), what));
    }
    let limit = cap.max_bytes;
    limits::check(&place, &format!("{what} file bytes"), meta.len(), limit)?;
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    // `take` keeps a file that grows while being read within the cap.
    f.take(limit + 1).read_to_end(&mut bytes).map_err(cannot)?;
    limits::check(
        &place,
        &format!("{what} file bytes"),
        bytes.len() as u64,
        limit,
    )?;
    Ok(bytes)
}

/// Like [`read`], as UTF-8 text.
pub fn read_text(path: &Path, cap: &FileCap) -> Result<String> {
    let bytes = read(path, cap)?;
    String::from_utf8(bytes).map_err(|e| {
        Error::new(
            path.display().to_string(),
            format!(
                "{} file is not UTF-8 text (invalid byte at offset {})",
                cap.what,
                e.utf8_error().valid_up_to()
            ),
        )
    })
}

/// One entry of a folder listing.
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub struct Entry {
    pub path: PathBuf,
    /// A folder (after symbolic links); otherwise a regular file.
    pub is_dir: bool,
}

/// The entries of `dir`, sorted by path; hidden names (starting with `.`)
/// skipped. Any other entry that is neither a regular file nor a folder
/// (after symbolic links) is an error naming it, as is a listing longer
/// than `limits::MAX_IMAGES`.
pub fn list_folder(dir: &Path) -> Result<Vec<Entry>> {
    let place = dir.display().to_string();
    let cannot = |e: std::io::Error| Error::io(&place, "cannot list folder", &e);
    let meta = fs::metadata(dir).map_err(cannot)?;
    if !meta.is_dir() {
        return Err(Error::new(
            &place,
            format!(
                "is {}; expected a folder of images",
                kind_name(&meta.file_type())
            ),
        ));
    }
    let mut out = Vec::new();
    for e in fs::read_dir(dir).map_err(cannot)? {
        let e = e.map_err(cannot)?;
        let path = e.path();
        if e.file_name().to_string_lossy().starts_with('.') {
            continue;
        }
        let ep = path.display().to_string();
        let meta = fs::metadata(&path)
            .map_err(|err| Error::new(&ep, format!("cannot read folder entry: {err}")))?;
        if !(meta.is_file() || meta.is_dir()) {
            return Err(Error::new(
                &ep,
                format!(
                    "is {} in an image folder; expected image files and folders only",
                    kind_name(&meta.file_type())
                ),
            ));
        }
        out.push(Entry {
            path,
            is_dir: meta.is_dir(),
        });
        limits::check(
            &place,
            "folder entries",
            out.len() as u64,
            limits::MAX_IMAGES,
        )?;
    }
    out.sort();
    Ok(out)
}

/// Read a model file into aligned bytes and check that it parses.
pub fn read_model(path: &Path) -> Result<AlignedBytes> {
    let place = path.display().to_string();
    let raw = read(path, &limits::MODEL_FILE)?;
    let bytes = AlignedBytes::from_slice(&raw);
    Model::parse(&bytes).map_err(|e| Error::runtime(&place, "not a valid midge model", e))?;
    Ok(bytes)
}

/// Parse model bytes; errors name `path`.
pub fn parse_model<'a>(bytes: &'a AlignedBytes, path: &Path) -> Result<Model<'a>> {
    Model::parse(bytes).map_err(|e| {
        Error::new(
            path.display().to_string(),
            format!("not a valid midge model: {e}"),
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(tag: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("midge-files-{tag}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&d);
        fs::create_dir_all(&d).unwrap();
        d
    }

    const CAP: FileCap = FileCap {
        what: "test",
        max_bytes: 8,
    };

    #[test]
    fn regular_files_within_the_cap_only() {
        let d = scratch("read");
        let p = d.join("a");
        fs::write(&p, b"12345678").unwrap();
        assert_eq!(read(&p, &CAP).unwrap(), b"12345678");
        fs::write(&p, b"123456789").unwrap();
        let e = read(&p, &CAP).unwrap_err();
        assert!(e.to_string().contains("limit of 8"), "{e}");
        let e = read(&d, &CAP).unwrap_err();
        assert!(e.problem().contains("a folder"), "{e}");
        #[cfg(unix)]
        {
            // /dev/zero never ends and /dev/null is empty: both refused.
            for dev in ["/dev/zero", "/dev/null"] {
                let e = read(Path::new(dev), &CAP).unwrap_err();
                assert!(e.problem().contains("character device"), "{e}");
            }
            let link = d.join("link");
            std::os::unix::fs::symlink(&p, &link).unwrap();
            assert!(read(
                &link,
                &FileCap {
                    max_bytes: 9,
                    ..CAP
                }
            )
            .is_ok());
        }
        fs::remove_dir_all(&d).unwrap();
    }
}
