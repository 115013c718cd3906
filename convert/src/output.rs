//! Output files: every file a command writes goes to a new temporary file
//! in its destination folder, and all are renamed into place only when all
//! were written, so a failed or interrupted command changes no file. Owns
//! the checks on destinations and the clean-up on SIGINT/SIGTERM/SIGHUP.

use std::fs::{self, OpenOptions};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::{Mutex, MutexGuard, Once};

use crate::error::{escape_path, Error, Result};
use crate::files::kind_name;

/// Temporary and backup files of this process that a signal must remove.
static PENDING: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());
/// Set by the signal thread: no rename may start any more.
static INTERRUPTED: AtomicBool = AtomicBool::new(false);

fn pending() -> MutexGuard<'static, Vec<PathBuf>> {
    PENDING.lock().unwrap_or_else(|p| p.into_inner())
}

/// On the first write: a thread that, on SIGINT, SIGTERM or SIGHUP, removes
/// the pending temporaries and then ends the process as the signal would
/// have. It waits for a rename sequence in progress (which holds the list),
/// so a command ends with all of its files in place or none.
fn clean_up_on_signals() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        #[cfg(unix)]
        {
            use signal_hook::consts::{SIGHUP, SIGINT, SIGTERM};
            let Ok(mut signals) = signal_hook::iterator::Signals::new([SIGINT, SIGTERM, SIGHUP])
            else {
                return;
            };
            std::thread::spawn(move || {
                if let Some(sig) = signals.forever().next() {
                    INTERRUPTED.store(true, Ordering::SeqCst);
                    let mut list = pending();
                    for p in list.drain(..) {
                        let _ = fs::remove_file(p);
                    }
                    let _ = signal_hook::low_level::emulate_default_handler(sig);
                    std::process::exit(128 + sig);
                }
            });
        }
    });
}

/// A new sibling of `path` named `.<name>.<tag>-<pid>-<n>`, `<name>` cut to
/// 64 bytes so that the sibling's name is no longer than the file
/// system allows wherever `path`'s is.
fn sibling(path: &Path, tag: &str) -> PathBuf {
    static COUNTER: AtomicUsize = AtomicUsize::new(0);
    let name: String = path
        .file_name()
        .map(|n| {
            let n = n.to_string_lossy();
            let mut end = n.len().min(64);
            while !n.is_char_boundary(end) {
                end -= 1;
            }
            n[..end].to_string()
        })
        .unwrap_or_else(|| "output".into());
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let tmp = format!(".{name}.{tag}-{}-{n}", std::process::id());
    match path.parent() {
        Some(dir) if !dir.as_os_str().is_empty() => dir.join(tmp),
        _ => PathBuf::from(tmp),
    }
}

/// Write `bytes` to a new temporary sibling of `path` (never an existing
/// file), registered for clean-up.
fn write_temp(path: &Path, bytes: &[u8]) -> Result<PathBuf> {
    let place = escape_path(path);
    loop {
        let tmp = sibling(path, "tmp");
        pending().push(tmp.clone());
        let file = OpenOptions::new().write(true).create_new(true).open(&tmp);
        let mut f = match file {
            Ok(f) => f,
            Err(e) => {
                forget(&tmp);
                if e.kind() == std::io::ErrorKind::AlreadyExists {
                    continue;
                }
                return Err(Error::io(place, "cannot write", &e));
            }
        };
        let result = f.write_all(bytes).and_then(|()| f.sync_all());
        return match result {
            Ok(()) => Ok(tmp),
            Err(e) => {
                remove_ours(&tmp);
                Err(Error::io(place, "cannot write", &e))
            }
        };
    }
}

fn forget(p: &Path) {
    pending().retain(|q| q != p);
}

/// Remove a file this process created and stop tracking it.
fn remove_ours(p: &Path) {
    let _ = fs::remove_file(p);
    forget(p);
}

/// `p` as the file system names it: symbolic links and `..` resolved, for
/// a file that does not exist yet through its folder.
fn identity(p: &Path) -> PathBuf {
    if let Ok(c) = fs::canonicalize(p) {
        return c;
    }
    let dir = match p.parent() {
        Some(d) if !d.as_os_str().is_empty() => d,
        _ => Path::new("."),
    };
    match (fs::canonicalize(dir), p.file_name()) {
        (Ok(d), Some(n)) => d.join(n),
        _ => p.to_path_buf(),
    }
}

/// Every destination must be new or a regular file (a symbolic link, a
/// folder or a device node is refused), no two may be the same file, and
/// none may be one of `inputs` (the files the command read).
pub fn check_destinations(outputs: &[&Path], inputs: &[&Path]) -> Result<()> {
    let ids: Vec<PathBuf> = outputs.iter().map(|p| identity(p)).collect();
    for (k, path) in outputs.iter().enumerate() {
        let place = escape_path(path);
        if path.file_name().is_none() {
            return Err(Error::new(
                place,
                "names no file (a path ending in a file name is needed)",
            ));
        }
        if let Ok(meta) = fs::symlink_metadata(path) {
            if !meta.file_type().is_file() {
                return Err(Error::new(
                    place,
                    format!(
                        "is {}; midge writes only new files or replaces regular files",
                        kind_name(&meta.file_type())
                    ),
                ));
            }
        }
        if let Some(j) = ids[..k].iter().position(|id| *id == ids[k]) {
            return Err(Error::new(
                place,
                format!(
                    "names the same file as the output {}; give each output its own path",
                    escape_path(outputs[j])
                ),
            ));
        }
        if let Some(input) = inputs.iter().find(|i| identity(i) == ids[k]) {
            return Err(Error::new(
                place,
                format!(
                    "is the input {} of this command; choose another output path",
                    escape_path(input)
                ),
            ));
        }
    }
    Ok(())
}

/// Write `bytes` to `path` atomically (temporary file, then rename).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    write_outputs(&[(path, bytes)], &[])
}

/// [`write_outputs`] with no inputs to protect.
pub fn write_all_atomic(files: &[(&Path, &[u8])]) -> Result<()> {
    write_outputs(files, &[])
}

/// Write several files so that either all of them appear or none does:
/// destinations checked (`check_destinations`), all temporaries written,
/// then the renames. A file a rename replaced is kept as a hard link until
/// the last rename succeeded and put back if one fails; a file this call
/// did not create is never removed.
pub fn write_outputs(files: &[(&Path, &[u8])], inputs: &[&Path]) -> Result<()> {
    let outputs: Vec<&Path> = files.iter().map(|(p, _)| *p).collect();
    check_destinations(&outputs, inputs)?;
    write_checked(files)
}

/// [`write_outputs`] after the destination checks.
fn write_checked(files: &[(&Path, &[u8])]) -> Result<()> {
    let outputs: Vec<&Path> = files.iter().map(|(p, _)| *p).collect();
    clean_up_on_signals();
    let mut temps: Vec<PathBuf> = Vec::new();
    for (path, bytes) in files {
        match write_temp(path, bytes) {
            Ok(t) => temps.push(t),
            Err(e) => {
                temps.iter().for_each(|t| remove_ours(t));
                return Err(e);
            }
        }
    }
    // The list stays locked through the renames: a signal waits for them.
    let mut list = pending();
    if INTERRUPTED.load(Ordering::SeqCst) {
        for t in &temps {
            let _ = fs::remove_file(t);
        }
        return Err(Error::new("midge", "interrupted; no file was written"));
    }
    let mut done: Vec<(&Path, Prior)> = Vec::new();
    let mut keeps: Vec<PathBuf> = Vec::new();
    let mut failure = None;
    for (path, tmp) in outputs.iter().zip(&temps) {
        let prior = if fs::symlink_metadata(path).is_err() {
            Prior::New
        } else {
            let b = sibling(path, "keep");
            list.push(b.clone());
            keeps.push(b.clone());
            if fs::hard_link(path, &b).is_ok() {
                Prior::Kept(b)
            } else {
                // No hard links here: a replaced file cannot be restored;
                // if a later rename fails it stays as written, not removed.
                Prior::Lost
            }
        };
        if let Err(e) = fs::rename(tmp, path) {
            failure = Some(Error::new(
                escape_path(path),
                format!("cannot move the written file into place: {e}"),
            ));
            if let Prior::Kept(b) = &prior {
                let _ = fs::remove_file(b);
            }
            break;
        }
        done.push((path, prior));
    }
    if failure.is_some() {
        for (path, prior) in done.iter().rev() {
            match prior {
                Prior::New => {
                    let _ = fs::remove_file(path);
                }
                Prior::Kept(b) => {
                    let _ = fs::rename(b, path);
                }
                Prior::Lost => {}
            }
        }
    }
    for t in &temps[done.len()..] {
        let _ = fs::remove_file(t);
    }
    for (_, prior) in &done {
        if let Prior::Kept(b) = prior {
            let _ = fs::remove_file(b);
        }
    }
    list.retain(|p| !temps.contains(p) && !keeps.contains(p));
    drop(list);
    failure.map_or(Ok(()), Err)
}

/// What a destination held before its rename.
enum Prior {
    /// Nothing: the file is this call's own.
    New,
    /// A file, kept as this hard link until every rename succeeded.
    Kept(PathBuf),
    /// A file that could not be kept (no hard links on this file system).
    Lost,
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
    fn a_failure_keeps_every_previous_file() {
        let d = scratch("keep");
        let a = d.join("a.bin");
        let b = d.join("b.bin");
        fs::write(&a, b"old a").unwrap();
        fs::write(&b, b"old b").unwrap();
        // The second temporary cannot be created: nothing changes.
        let bad = d.join("missing-folder").join("c.bin");
        write_all_atomic(&[(&a, b"new"), (&b, b"new"), (&bad, b"new")]).unwrap_err();
        assert_eq!(fs::read(&a).unwrap(), b"old a");
        assert_eq!(fs::read(&b).unwrap(), b"old b");
        assert_eq!(fs::read_dir(&d).unwrap().count(), 2);
        // Refused before any temporary: the same file twice, an input, a folder.
        let same = d.join(".").join("a.bin");
        let e = write_all_atomic(&[(&a, b"1"), (&same, b"2")]).unwrap_err();
        assert!(e.problem().contains("same file"), "{e}");
        let e = write_outputs(&[(&b, b"1")], &[&d.join(".").join("b.bin")]).unwrap_err();
        assert!(e.problem().contains("is the input"), "{e}");
        let e = write_all_atomic(&[(&a, b"1"), (&d, b"2")]).unwrap_err();
        assert!(e.problem().contains("a folder"), "{e}");
        assert_eq!(fs::read(&a).unwrap(), b"old a");
        // Success replaces both and leaves no backup or temporary.
        write_all_atomic(&[(&a, b"new a"), (&b, b"new b")]).unwrap();
        assert_eq!(fs::read(&a).unwrap(), b"new a");
        assert_eq!(fs::read(&b).unwrap(), b"new b");
        assert_eq!(fs::read_dir(&d).unwrap().count(), 2);
        assert!(!pending().iter().any(|p| p.starts_with(&d)));
        fs::remove_dir_all(&d).unwrap();
    }

    #[test]
    fn long_names_get_short_temporaries() {
        let d = scratch("long");
        let p = d.join("é".repeat(127));
        write_atomic(&p, b"x").unwrap();
        assert_eq!(fs::read(&p).unwrap(), b"x");
        fs::remove_dir_all(&d).unwrap();
    }

    #[test]
    fn a_failed_rename_puts_replaced_files_back() {
        let d = scratch("rollback");
        let a = d.join("a.bin");
        let fresh = d.join("fresh.bin");
        fs::write(&a, b"old a").unwrap();
        // Past the checks, a rename onto a folder fails after `a` and
        // `fresh` were renamed: `a` gets its old bytes back, `fresh` (this
        // call's own) goes, the folder and its file stay.
        let occupied = d.join("occupied");
        fs::create_dir(&occupied).unwrap();
        fs::write(occupied.join("x"), b"x").unwrap();
        let e = write_checked(&[(&a, b"new"), (&fresh, b"new"), (&occupied, b"new")]).unwrap_err();
        assert!(e.problem().contains("cannot move"), "{e}");
        assert_eq!(fs::read(&a).unwrap(), b"old a");
        assert!(!fresh.exists());
        assert_eq!(fs::read(occupied.join("x")).unwrap(), b"x");
        let mut names: Vec<_> = fs::read_dir(&d)
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        names.sort();
        assert_eq!(names, ["a.bin", "occupied"]);
        fs::remove_dir_all(&d).unwrap();
    }

    /// A child process (this test binary, re-run) holds a registered
    /// temporary and is sent SIGTERM: the temporary must be gone and the
    /// child must end by that signal.
    #[cfg(unix)]
    #[test]
    fn signals_remove_temporaries() {
        use std::os::unix::process::ExitStatusExt;
        const CHILD: &str = "MIDGE_OUTPUT_SIGNAL_CHILD";
        if let Some(dir) = std::env::var_os(CHILD) {
            let dir = PathBuf::from(dir);
            clean_up_on_signals();
            let tmp = write_temp(&dir.join("out.bin"), &[7u8; 4096]).unwrap();
            fs::write(dir.join("ready"), tmp.to_string_lossy().as_bytes()).unwrap();
            loop {
                std::thread::sleep(std::time::Duration::from_millis(50));
            }
        }
        let d = scratch("signal");
        let mut child = std::process::Command::new(std::env::current_exe().unwrap())
            .args([
                "output::tests::signals_remove_temporaries",
                "--exact",
                "--nocapture",
            ])
            .env(CHILD, &d)
            .stdout(std::process::Stdio::null())
            .spawn()
            .unwrap();
        let ready = d.join("ready");
        // Bounded wait for the child to be ready (not a timing assertion).
        for _ in 0..600 {
            if ready.exists() {
                break;
            }
            std::thread::sleep(std::time::Duration::from_millis(50));
        }
        let tmp = PathBuf::from(fs::read_to_string(&ready).expect("child never got ready"));
        assert!(tmp.exists());
        let sent = std::process::Command::new("kill")
            .args(["-TERM", &child.id().to_string()])
            .status()
            .unwrap();
        assert!(sent.success());
        let status = child.wait().unwrap();
        assert_eq!(status.signal(), Some(signal_hook::consts::SIGTERM));
        assert!(!tmp.exists(), "{} left behind", tmp.display());
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
        assert!(err.place().contains("b.bin"));
        assert!(!good.exists());
        assert_eq!(fs::read_dir(&d).unwrap().count(), 0);
        // A rename onto an existing folder fails after the temporaries exist.
        let dir_target = d.join("occupied");
        fs::create_dir(&dir_target).unwrap();
        fs::write(dir_target.join("x"), b"x").unwrap();
        let err = write_all_atomic(&[(&good, b"1"), (&dir_target, b"2")]).unwrap_err();
        assert!(err.place().contains("occupied"));
        assert!(!good.exists());
        assert_eq!(fs::read_dir(&d).unwrap().count(), 1);
        fs::remove_dir_all(&d).unwrap();
    }
}
