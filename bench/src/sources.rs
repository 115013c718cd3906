//! The sources firmware builds need, carried inside the binary (packed by
//! bench/build.rs) and unpacked into a cache folder outside any checkout —
//! `$MIDGE_CACHE`, else `$XDG_CACHE_HOME/midge`, else `$HOME/.cache/midge` —
//! one folder per content hash, so stale sources are never reused.

use std::path::{Path, PathBuf};

use crate::{Error, Result};

mod packed {
    include!(concat!(env!("OUT_DIR"), "/packed.rs"));
}

/// Names the cache folder when set (an absolute path).
pub const CACHE_VAR: &str = "MIDGE_CACHE";

/// The content hash of the packed sources (16 hex digits).
pub fn key() -> &'static str {
    packed::KEY
}

/// The packed sources: (path from the tree's root, contents).
pub fn files() -> &'static [(&'static str, &'static [u8])] {
    packed::FILES
}

/// The text of the shipped target profile `name` (`models/targets/<name>.toml`).
pub fn profile(name: &str) -> Option<&'static str> {
    packed::PROFILES
        .iter()
        .find(|(n, _)| *n == name)
        .map(|(_, t)| *t)
}

/// Names of the shipped target profiles.
pub fn profile_names() -> impl Iterator<Item = &'static str> {
    packed::PROFILES.iter().map(|(n, _)| *n)
}

/// The cache folder: `$MIDGE_CACHE`, `$XDG_CACHE_HOME/midge` or
/// `$HOME/.cache/midge` (the first that is set and absolute).
pub fn cache_base() -> Result<PathBuf> {
    let var = |k: &str| {
        std::env::var_os(k)
            .map(PathBuf::from)
            .filter(|p| p.is_absolute())
    };
    if let Some(p) = var(CACHE_VAR) {
        return Ok(p);
    }
    if let Some(p) = var("XDG_CACHE_HOME") {
        return Ok(p.join("midge"));
    }
    if let Some(p) = var("HOME") {
        return Ok(p.join(".cache").join("midge"));
    }
    Err(Error::new(
        CACHE_VAR,
        "no cache folder for firmware builds: set MIDGE_CACHE (or XDG_CACHE_HOME or HOME) to an absolute path",
    ))
}

/// The unpacked source tree for this binary's sources, created on first
/// use: `<cache>/src-<key>/` holding `runtime/`, `bench/job/`,
/// `bench/firmware/`, `capi/` and a workspace manifest. Written to a
/// temporary folder and renamed into place, so a tree is always complete.
pub fn tree() -> Result<PathBuf> {
    unpack_into(&cache_base()?)
}

fn unpack_into(base: &Path) -> Result<PathBuf> {
    let dest = base.join(format!("src-{}", key()));
    if dest.join(".complete").is_file() {
        return Ok(dest);
    }
    let io = |p: &Path, e: std::io::Error| {
        Error::new(
            p.display().to_string(),
            format!("firmware source cache: {e}"),
        )
    };
    let tmp = base.join(format!(
        ".src-{}-{}-{:?}",
        key(),
        std::process::id(),
        std::thread::current().id()
    ));
    let tmp = PathBuf::from(tmp.to_string_lossy().replace(['(', ')', ' '], ""));
    let _ = std::fs::remove_dir_all(&tmp);
    for (rel, bytes) in files() {
        let p = tmp.join(rel);
        if let Some(dir) = p.parent() {
            std::fs::create_dir_all(dir).map_err(|e| io(dir, e))?;
        }
        std::fs::write(&p, bytes).map_err(|e| io(&p, e))?;
    }
    std::fs::write(tmp.join(".complete"), key()).map_err(|e| io(&tmp, e))?;
    match std::fs::rename(&tmp, &dest) {
        Ok(()) => Ok(dest),
        // Another process unpacked the same sources first.
        Err(_) if dest.join(".complete").is_file() => {
            let _ = std::fs::remove_dir_all(&tmp);
            Ok(dest)
        }
        Err(e) => {
            let _ = std::fs::remove_dir_all(&tmp);
            Err(io(&dest, e))
        }
    }
}

/// Where builds of these sources are kept: `<cache>/build-<key>/`.
pub fn builds() -> Result<PathBuf> {
    Ok(cache_base()?.join(format!("build-{}", key())))
}

/// The cargo target folder shared by every source version (`<cache>/target/`),
/// so dependencies are compiled once.
pub fn cargo_target() -> Result<PathBuf> {
    Ok(cache_base()?.join("target"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn packs_what_the_builds_read() {
        let names: Vec<&str> = files().iter().map(|(n, _)| *n).collect();
        for f in [
            "Cargo.toml",
            "Cargo.lock",
            "runtime/Cargo.toml",
            "runtime/src/lib.rs",
            "bench/job/src/lib.rs",
            "bench/firmware/Cargo.toml",
            "bench/firmware/src/bin/harness.rs",
            "bench/firmware/memory.x",
            "capi/build.rs",
            "capi/include/midge.h",
            "capi/examples/mps2/Makefile",
        ] {
            assert!(names.contains(&f), "{f} not packed");
        }
        let root = files().iter().find(|(n, _)| *n == "Cargo.toml").unwrap().1;
        let root = std::str::from_utf8(root).unwrap();
        assert!(root.contains("members = [\"runtime\", \"bench/job\", \"capi\"]"));
        assert!(!root.contains("midge-convert"));
        let capi = files()
            .iter()
            .find(|(n, _)| *n == "capi/Cargo.toml")
            .unwrap()
            .1;
        assert!(!std::str::from_utf8(capi)
            .unwrap()
            .contains("dev-dependencies"));
        assert_eq!(key().len(), 16);
        assert!(profile("m4-80").is_some_and(|t| t.contains("cortex-m4")));
    }

    #[test]
    fn unpacks_once_and_completely() {
        let base = std::env::temp_dir().join(format!("midge-sources-{}", std::process::id()));
        let t = unpack_into(&base).unwrap();
        for (rel, bytes) in files() {
            assert_eq!(&std::fs::read(t.join(rel)).unwrap(), bytes, "{rel}");
        }
        assert_eq!(unpack_into(&base).unwrap(), t);
        let _ = std::fs::remove_dir_all(&base);
    }
}
