//! Atomic output: every file the converter writes goes to a temporary file in
//! the destination folder and is renamed into place only when all of it was
//! written, so a failed command leaves no output file behind.

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// Temporary sibling of `path`: hidden, tagged with the process id.
fn temp_path(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let tmp = format!(".{name}.tmp-{}", std::process::id());
    match path.parent() {
        Some(dir) if !dir.as_os_str().is_empty() => dir.join(tmp),
        _ => PathBuf::from(tmp),
    }
}

fn write_temp(path: &Path, bytes: &[u8]) -> Result<PathBuf> {
    let tmp = temp_path(path);
    let place = path.display().to_string();
    let result = (|| {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()
    })();
    match result {
        Ok(()) => Ok(tmp),
        Err(e) => {
            let _ = fs::remove_file(&tmp);
            Err(Error::new(place, format!("cannot write: {e}")))
        }
    }
}

/// Write `bytes` to `path` atomically (temporary file, then rename).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    write_all_atomic(&[(path, bytes)])
}

/// Write several files so that either all of them appear or none does: all
/// temporaries first, then the renames; if a rename fails, files already
/// renamed by this call are removed again.
pub fn write_all_atomic(files: &[(&Path, &[u8])]) -> Result<()> {
    let mut temps: Vec<PathBuf> = Vec::new();
    for (path, bytes) in files {
        match write_temp(path, bytes) {
            Ok(t) => temps.push(t),
            Err(e) => {
                for t in &temps {
                    let _ = fs::remove_file(t);
                }
                return Err(e);
            }
        }
    }
    for (k, ((path, _), tmp)) in files.iter().zip(&temps).enumerate() {
        if let Err(e) = fs::rename(tmp, path) {
            for t in &temps[k..] {
                let _ = fs::remove_file(t);
            }
            for (done, _) in &files[..k] {
                let _ = fs::remove_file(done);
            }
            return Err(Error::new(
                path.display().to_string(),
                format!("cannot move the written file into place: {e}"),
            ));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(tag: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("midge-output-{tag}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&d);
        fs::create_dir_all(&d).unwrap();
        d
    }

    #[test]
    fn writes_and_leaves_no_temporary() {
        let d = scratch("ok");
        let p = d.join("m.bin");
        write_atomic(&p, b"abc").unwrap();
        assert_eq!(fs::read(&p).unwrap(), b"abc");
        let names: Vec<_> = fs::read_dir(&d)
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names.len(), 1);
        fs::remove_dir_all(&d).unwrap();
    }

    #[test]
    fn failure_leaves_no_file() {
        let d = scratch("fail");
        let good = d.join("a.bin");
        // The second destination's folder does not exist: its temporary cannot
        // be created, so neither file may appear.
        let bad = d.join("missing-folder").join("b.bin");
        let err = write_all_atomic(&[(&good, b"1"), (&bad, b"2")]).unwrap_err();
        assert!(err.place.contains("b.bin"));
        assert!(!good.exists());
        assert_eq!(fs::read_dir(&d).unwrap().count(), 0);
        // A rename onto an existing folder fails after the temporaries exist.
        let dir_target = d.join("occupied");
        fs::create_dir(&dir_target).unwrap();
        fs::write(dir_target.join("x"), b"x").unwrap();
        let err = write_all_atomic(&[(&good, b"1"), (&dir_target, b"2")]).unwrap_err();
        assert!(err.place.contains("occupied"));
        assert!(!good.exists());
        assert_eq!(fs::read_dir(&d).unwrap().count(), 1);
        fs::remove_dir_all(&d).unwrap();
    }
}
