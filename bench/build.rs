//! Packs the sources the firmware builds need into the library: the runtime,
//! the job block, the harness firmware, the C interface with its example, a
//! workspace manifest for them, and the target profiles. `sources.rs` unpacks
//! them into a cache folder keyed by the content hash written here.
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// Folders packed whole (every file under them), relative to the repository root.
const TREES: [&str; 6] = [
    "runtime/src",
    "bench/job/src",
    "bench/firmware/src",
    "capi/src",
    "capi/include",
    "capi/examples/mps2",
];
/// Single files packed as they are.
const FILES: [&str; 9] = [
    "Cargo.lock",
    "runtime/Cargo.toml",
    "runtime/build.rs",
    "bench/job/Cargo.toml",
    "bench/firmware/Cargo.toml",
    "bench/firmware/Cargo.lock",
    "bench/firmware/build.rs",
    "bench/firmware/memory.x",
    "bench/firmware/ops_env.rs",
];
/// Files packed after a rewrite (see `rewrite`).
const REWRITTEN: [&str; 2] = ["Cargo.toml", "capi/Cargo.toml"];
const CAPI_BUILD: &str = "capi/build.rs";
const PROFILES: &str = "models/targets";

fn main() {
    // A build script runs in its package's folder: bench/.
    let root = PathBuf::from("..").canonicalize().expect("repository root");
    let out = PathBuf::from(std::env::var_os("OUT_DIR").expect("OUT_DIR"));
    let mut files: Vec<(String, PathBuf)> = Vec::new();
    for t in TREES {
        let mut found = Vec::new();
        walk(&root.join(t), &mut found);
        for p in found {
            let rel = p.strip_prefix(&root).expect("under root");
            files.push((rel.to_string_lossy().replace('\\', "/"), p));
        }
        println!("cargo:rerun-if-changed={}", root.join(t).display());
    }
    for f in FILES.iter().chain([&CAPI_BUILD]) {
        files.push((f.to_string(), root.join(f)));
        println!("cargo:rerun-if-changed={}", root.join(f).display());
    }
    for f in REWRITTEN {
        let src = root.join(f);
        println!("cargo:rerun-if-changed={}", src.display());
        let text = std::fs::read_to_string(&src).expect("manifest");
        let dst = out.join(f.replace('/', "__"));
        std::fs::write(&dst, rewrite(f, &text)).expect("write rewritten manifest");
        files.push((f.to_string(), dst));
    }
    files.sort();
    // FNV-1a over paths and contents: the cache key.
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    let mut fnv = |bytes: &[u8]| {
        for b in bytes {
            h ^= u64::from(*b);
            h = h.wrapping_mul(0x0100_0000_01b3);
        }
    };
    let mut code = String::from("/// Packed sources: (path from the tree's root, contents).\npub const FILES: &[(&str, &[u8])] = &[\n");
    for (rel, path) in &files {
        let bytes = std::fs::read(path).expect("packed file");
        fnv(rel.as_bytes());
        fnv(&(bytes.len() as u64).to_le_bytes());
        fnv(&bytes);
        writeln!(
            code,
            "    ({rel:?}, include_bytes!({:?})),",
            path.display().to_string()
        )
        .unwrap();
    }
    code.push_str("];\n");
    writeln!(
        code,
        "/// Content hash of `FILES`.\npub const KEY: &str = \"{h:016x}\";"
    )
    .unwrap();
    code.push_str(
        "/// Target profiles: (name, TOML text).\npub const PROFILES: &[(&str, &str)] = &[\n",
    );
    let mut profiles = Vec::new();
    walk(&root.join(PROFILES), &mut profiles);
    println!("cargo:rerun-if-changed={}", root.join(PROFILES).display());
    for p in profiles
        .iter()
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
    {
        let name = p.file_stem().unwrap().to_string_lossy();
        writeln!(
            code,
            "    ({name:?}, include_str!({:?})),",
            p.display().to_string()
        )
        .unwrap();
    }
    code.push_str("];\n");
    std::fs::write(out.join("packed.rs"), code).expect("write packed.rs");
}

fn walk(dir: &Path, out: &mut Vec<PathBuf>) {
    let mut entries: Vec<PathBuf> = std::fs::read_dir(dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .map(|e| e.expect("folder entry").path())
        .collect();
    entries.sort();
    for p in entries {
        if p.is_dir() {
            walk(&p, out);
        } else {
            out.push(p);
        }
    }
}

/// The root manifest lists only the packed members and drops the
/// workspace dependencies on crates that are not packed; the C interface's
/// manifest loses its dev-dependencies (host test crates).
fn rewrite(name: &str, text: &str) -> String {
    let mut out = String::new();
    let mut skipping = false;
    for line in text.lines() {
        if line.starts_with('[') {
            skipping = name == "capi/Cargo.toml" && line.trim() == "[dev-dependencies]";
        }
        if skipping {
            continue;
        }
        if name == "Cargo.toml" {
            if line.trim_start().starts_with("members") {
                out.push_str("members = [\"runtime\", \"bench/job\", \"capi\"]\n");
                continue;
            }
            if ["midge-convert", "midge-bench"]
                .iter()
                .any(|c| line.starts_with(c))
            {
                continue;
            }
        }
        out.push_str(line);
        out.push('\n');
    }
    out
}
