//! The Cortex-M side as the host sees it: building bench/firmware per target and op set
//! (cached), the job block QEMU's loader places in RAM, running the harness under
//! `qemu-system-arm -icount shift=0` and parsing what it prints.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::{Mutex, OnceLock};
use std::time::{Duration, Instant};

use midge_runtime::OpSet;

use crate::{Error, Result};

pub use midge_job::{
    CALIBRATION_EXPECTED_TICKS, CALIBRATION_NOPS, JOB_ADDR, JOB_CAPACITY, JOB_HEADER_LEN, JOB_MAGIC,
};

const INSTALL_QEMU: &str = "apt-get update && apt-get install -y qemu-system-arm";

/// Set to `1` (`.ci/run` does), it makes a missing QEMU or Rust thumb
/// target, or a firmware that does not build, an error everywhere an
/// emulated test or measurement would otherwise be skipped or "not measured".
pub const REQUIRE_EMULATOR: &str = "MIDGE_REQUIRE_EMULATOR";

/// Whether `MIDGE_REQUIRE_EMULATOR=1` is set.
pub fn emulator_required() -> bool {
    std::env::var(REQUIRE_EMULATOR).is_ok_and(|v| v.trim() == "1")
}

/// Whether an emulated test or measurement that cannot run here (`why`)
/// may be skipped: `Ok` unless `MIDGE_REQUIRE_EMULATOR=1`, then an error
/// saying what is missing.
pub fn may_skip(why: &str) -> Result<()> {
    if emulator_required() {
        Err(Error::new(
            REQUIRE_EMULATOR,
            format!("is 1, so this is an error, not a skip: {why}"),
        ))
    } else {
        Ok(())
    }
}

/// The bench/firmware Cargo project, unpacked from the sources this
/// binary carries into the cache folder (`sources::tree`).
pub fn firmware_dir() -> Result<PathBuf> {
    Ok(crate::sources::tree()?.join("bench").join("firmware"))
}

/// `qemu-system-arm --version`'s first line, or how to install it.
pub fn qemu_version() -> Result<String> {
    let out = Command::new("qemu-system-arm")
        .arg("--version")
        .stdin(Stdio::null())
        .output()
        .map_err(|_| Error::missing("qemu-system-arm", format!("install with `{INSTALL_QEMU}`")))?;
    Ok(String::from_utf8_lossy(&out.stdout)
        .lines()
        .next()
        .unwrap_or("")
        .to_string())
}

fn rustc_sysroot() -> Option<PathBuf> {
    let rustc = std::env::var_os("RUSTC").unwrap_or_else(|| "rustc".into());
    let out = Command::new(rustc)
        .args(["--print", "sysroot"])
        .output()
        .ok()?;
    Some(PathBuf::from(String::from_utf8_lossy(&out.stdout).trim()))
}

/// Whether the standard library for `triple` is installed, or how to add it.
pub fn rust_target_installed(triple: &str) -> Result<()> {
    let ok = rustc_sysroot()
        .map(|s| {
            s.join("lib")
                .join("rustlib")
                .join(triple)
                .join("lib")
                .is_dir()
        })
        .unwrap_or(false);
    if ok {
        Ok(())
    } else {
        Err(Error::missing(
            format!("Rust target {triple}"),
            format!("install with `rustup target add {triple}`"),
        ))
    }
}

/// The three ELF files of one firmware build.
#[derive(Clone, Debug)]
pub struct FirmwareBuild {
    pub triple: String,
    /// The op set the binaries link (`MIDGE_OPS` at build time).
    pub ops: OpSet,
    /// Runs jobs and reports over semihosting.
    pub harness: PathBuf,
    /// Minimal application that parses and runs a model.
    pub footprint: PathBuf,
    /// `footprint` without the runtime.
    pub baseline: PathBuf,
    /// Random layer cases through the target's tile kernels, the portable
    /// ones and the reference (meaningful for `OpSet::ALL`).
    pub kernel_match: PathBuf,
}

/// The firmware for `triple` linking the op set `ops` (a model's
/// `Model::op_set`, or `OpSet::ALL`), built in release mode. Builds are
/// cached per (triple, op set): once per process, and on disk under
/// `<cache>/build-<key>/ops/<triple>/<bits>/` (`sources`: the cache folder
/// and the packed sources' content hash).
pub fn build(triple: &str, ops: OpSet) -> Result<FirmwareBuild> {
    type Builds = HashMap<(String, u32), Result<FirmwareBuild>>;
    static BUILDS: OnceLock<Mutex<Builds>> = OnceLock::new();
    let map = BUILDS.get_or_init(|| Mutex::new(HashMap::new()));
    let mut map = map.lock().unwrap_or_else(|p| p.into_inner());
    map.entry((triple.to_string(), ops.bits()))
        .or_insert_with(|| build_cached(triple, ops))
        .clone()
}

/// Why the firmware cannot be built here, if it cannot: cargo or the
/// target's standard library is missing (each named with how to get it).
pub fn build_unavailable(triple: &str) -> Option<Error> {
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let runs = Command::new(&cargo)
        .arg("--version")
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success());
    if !runs {
        return Some(Error::missing(
            cargo.to_string_lossy().into_owned(),
            "cargo builds the firmware; install a Rust toolchain with rustup (https://rustup.rs)",
        ));
    }
    rust_target_installed(triple).err()
}

/// The op set as `MIDGE_OPS` and the cache folder spell it.
pub fn ops_key(ops: OpSet) -> String {
    format!("{:#07x}", ops.bits())
}

const ELVES: [&str; 4] = ["harness", "footprint", "baseline", "kernel_match"];

fn build_cached(triple: &str, ops: OpSet) -> Result<FirmwareBuild> {
    if let Some(e) = build_unavailable(triple) {
        return Err(e);
    }
    let cache = crate::sources::builds()?
        .join("ops")
        .join(triple)
        .join(ops_key(ops));
    let build = FirmwareBuild {
        triple: triple.to_string(),
        ops,
        harness: cache.join(ELVES[0]),
        footprint: cache.join(ELVES[1]),
        baseline: cache.join(ELVES[2]),
        kernel_match: cache.join(ELVES[3]),
    };
    let place = cache.display().to_string();
    let io = |e: std::io::Error| Error::io(&place, "firmware cache", &e);
    std::fs::create_dir_all(&cache).map_err(io)?;
    let target_dir = crate::sources::cargo_target()?.join("firmware");
    std::fs::create_dir_all(&target_dir).map_err(io)?;
    // One build at a time across processes: the binaries are built at one
    // place in the shared target folder and copied from there. The folder is
    // keyed by the sources' content hash, so what is there is current.
    let lock = std::fs::File::create(target_dir.join(".midge-lock")).map_err(io)?;
    lock.lock().map_err(io)?;
    if !ELVES.iter().all(|e| cache.join(e).is_file()) {
        let bin = cargo_build(triple, ops, &target_dir)?;
        for e in ELVES {
            // Copy under a temporary name, then rename: a binary in the cache is whole.
            let tmp = cache.join(format!(".{e}.tmp"));
            std::fs::copy(bin.join(e), &tmp).map_err(io)?;
            std::fs::rename(&tmp, cache.join(e)).map_err(io)?;
        }
    }
    Ok(build)
}

/// `cargo build --release` of bench/firmware for `triple` with `MIDGE_OPS`
/// set to `ops`; returns the folder holding the binaries.
fn cargo_build(triple: &str, ops: OpSet, target_dir: &Path) -> Result<PathBuf> {
    let dir = firmware_dir()?;
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let out = Command::new(cargo)
        .current_dir(&dir)
        .args([
            "build",
            "--release",
            "--quiet",
            "--bins",
            "--target",
            triple,
        ])
        .env("CARGO_TARGET_DIR", target_dir)
        .env("MIDGE_OPS", ops_key(ops))
        .env_remove("RUSTFLAGS")
        .env_remove("CARGO_ENCODED_RUSTFLAGS")
        .env_remove("CARGO_BUILD_TARGET")
        .stdin(Stdio::null())
        .output()
        .map_err(|e| Error::new(dir.display().to_string(), format!("cannot run cargo: {e}")))?;
    if !out.status.success() {
        let err = String::from_utf8_lossy(&out.stderr);
        let first = err
            .lines()
            .find(|l| l.starts_with("error"))
            .unwrap_or("(no error line)");
        return Err(Error::new(
            dir.display().to_string(),
            format!("firmware build for {triple} failed: {first}"),
        ));
    }
    Ok(target_dir.join(triple).join("release"))
}

/// The job block (`midge_job` owns the layout): header, the model, the
/// inputs back to back. The workspace starts at the returned block's end.
pub fn job_block(model: &[u8], inputs: &[&[u8]], workspace_len: usize) -> Result<Vec<u8>> {
    let input_len = inputs.first().map_or(0, |i| i.len());
    if let Some(i) = inputs.iter().position(|i| i.len() != input_len) {
        return Err(Error::new(
            format!("input {i}"),
            format!(
                "expected {input_len} bytes like input 0, found {}",
                inputs[i].len()
            ),
        ));
    }
    let job = midge_job::Job::layout(model.len(), input_len, inputs.len(), workspace_len)
        .map_err(|e| Error::new("emulator job", e.to_string()))?;
    let mut b = vec![0u8; job.workspace_offset];
    b[..JOB_HEADER_LEN].copy_from_slice(&job.header());
    b[job.model_offset..job.model_offset + model.len()].copy_from_slice(model);
    for (k, inp) in inputs.iter().enumerate() {
        let o = job.input_offset + k * input_len;
        b[o..o + input_len].copy_from_slice(inp);
    }
    Ok(b)
}

/// What the harness printed for one job.
#[derive(Clone, Debug, PartialEq)]
pub struct EmulatedRun {
    pub machine: String,
    pub qemu: String,
    /// SysTick ticks of the 40-NOP and 80-NOP calibration loops.
    pub calibration: (u64, u64),
    /// Instructions per SysTick tick derived from the calibration.
    pub instructions_per_tick: f64,
    pub workspace_len: usize,
    /// Per input, per layer: SysTick ticks.
    pub layer_ticks: Vec<Vec<u64>>,
    /// Per input: the output tensor's bytes.
    pub outputs: Vec<Vec<u8>>,
    /// Bytes of stack used from the initial stack pointer (harness included).
    pub stack_total: usize,
    /// Bytes of stack used below the harness's frame: the runtime's share.
    pub stack_runtime: usize,
}

impl EmulatedRun {
    /// Whether the calibration read 40 000 NOPs as 1 000 ticks.
    pub fn calibration_ok(&self) -> bool {
        self.calibration.1.checked_sub(self.calibration.0) == Some(CALIBRATION_EXPECTED_TICKS)
    }
    /// Instructions executed by each layer for input `k`.
    pub fn layer_instructions(&self, k: usize) -> Vec<u64> {
        self.layer_ticks
            .get(k)
            .map(|t| {
                t.iter()
                    .map(|&t| (t as f64 * self.instructions_per_tick).round() as u64)
                    .collect()
            })
            .unwrap_or_default()
    }
}

/// Runs `harness` on `machine` with `job` loaded at `JOB_ADDR`.
pub fn run(machine: &str, harness: &Path, job: &[u8], timeout: Duration) -> Result<EmulatedRun> {
    let qemu = qemu_version()?;
    let job_file = std::env::temp_dir()
        .join(format!(
            "midge-job-{}-{:?}.bin",
            std::process::id(),
            std::thread::current().id()
        ))
        .to_string_lossy()
        .replace(['(', ')', ' '], "");
    std::fs::write(&job_file, job)
        .map_err(|e| Error::io(&job_file, "cannot write job block", &e))?;
    let result = run_qemu(machine, harness, &job_file, timeout);
    let _ = std::fs::remove_file(&job_file);
    let stdout = result?;
    parse_report(&stdout, machine, &qemu)
}

fn run_qemu(machine: &str, harness: &Path, job_file: &str, timeout: Duration) -> Result<String> {
    let place = format!("qemu-system-arm -M {machine}");
    let mut child = Command::new("qemu-system-arm")
        .args([
            "-M",
            machine,
            "-nographic",
            "-monitor",
            "none",
            "-serial",
            "none",
        ])
        .args(["-semihosting-config", "enable=on,target=native"])
        .args(["-icount", "shift=0"])
        .arg("-kernel")
        .arg(harness)
        .arg("-device")
        .arg(format!(
            "loader,file={job_file},addr={JOB_ADDR:#x},force-raw=on"
        ))
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .map_err(|e| {
            Error::missing(
                format!("{place} (qemu-system-arm: {e})"),
                format!("install with `{INSTALL_QEMU}`"),
            )
        })?;
    // Drain stdout on a thread so a chatty harness cannot block on a full pipe.
    let mut stdout = child.stdout.take().expect("piped stdout");
    let reader = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = std::io::Read::read_to_string(&mut stdout, &mut s);
        s
    });
    let start = Instant::now();
    let status = loop {
        match child.try_wait() {
            Ok(Some(st)) => break st,
            Ok(None) if start.elapsed() > timeout => {
                let _ = child.kill();
                let _ = child.wait();
                return Err(Error::new(
                    &place,
                    format!("no result within {} s", timeout.as_secs()),
                ));
            }
            Ok(None) => std::thread::sleep(Duration::from_millis(20)),
            Err(e) => return Err(Error::new(&place, format!("wait failed: {e}"))),
        }
    };
    let out = reader.join().unwrap_or_default();
    if let Some(line) = out.lines().find(|l| l.starts_with("error ")) {
        return Err(Error::new(&place, format!("harness: {}", &line[6..])));
    }
    if !status.success() {
        let mut err = String::new();
        if let Some(mut e) = child.stderr.take() {
            let _ = std::io::Read::read_to_string(&mut e, &mut err);
        }
        return Err(Error::new(
            &place,
            format!("exited with {status}: {}", err.lines().next().unwrap_or("")),
        ));
    }
    Ok(out)
}

/// Parses the harness's line protocol (see bench/firmware/src/bin/harness.rs).
pub fn parse_report(text: &str, machine: &str, qemu: &str) -> Result<EmulatedRun> {
    let place = format!("harness report ({machine})");
    let bad = |line: &str, what: &str| Error::new(&place, format!("{what}: {line:?}"));
    let num = |s: Option<&str>, line: &str| -> Result<u64> {
        s.and_then(|v| v.rsplit('=').next())
            .and_then(|v| v.parse().ok())
            .ok_or_else(|| bad(line, "expected a number"))
    };
    let mut run = EmulatedRun {
        machine: machine.to_string(),
        qemu: qemu.to_string(),
        calibration: (0, 0),
        instructions_per_tick: 0.0,
        workspace_len: 0,
        layer_ticks: Vec::new(),
        outputs: Vec::new(),
        stack_total: 0,
        stack_runtime: 0,
    };
    let mut layers = 0usize;
    let mut ended = false;
    for line in text.lines() {
        let mut w = line.split_whitespace();
        match w.next() {
            Some("calibration") => {
                run.calibration = (num(w.next(), line)?, num(w.next(), line)?);
            }
            Some("model") => {
                layers = num(w.next(), line)? as usize;
                run.workspace_len = num(w.next(), line)? as usize;
            }
            Some("run") => run.layer_ticks.push(vec![0; layers]),
            Some("layer") => {
                let i = num(w.next(), line)? as usize;
                let t = num(w.next(), line)?;
                let slot = run
                    .layer_ticks
                    .last_mut()
                    .and_then(|v| v.get_mut(i))
                    .ok_or_else(|| bad(line, "layer line outside a run"))?;
                *slot = t;
            }
            Some("output") => {
                let _k = w.next();
                let hex = w.next().unwrap_or("");
                let bytes = (0..hex.len() / 2)
                    .map(|i| u8::from_str_radix(&hex[2 * i..2 * i + 2], 16))
                    .collect::<std::result::Result<Vec<u8>, _>>()
                    .map_err(|_| bad(line, "expected hex output bytes"))?;
                run.outputs.push(bytes);
            }
            Some("stack") => {
                run.stack_total = num(w.next(), line)? as usize;
                run.stack_runtime = num(w.next(), line)? as usize;
            }
            Some("end") => ended = true,
            _ => {}
        }
    }
    if !ended {
        return Err(Error::new(
            &place,
            "the harness stopped before its `end` line",
        ));
    }
    let diff = run.calibration.1.saturating_sub(run.calibration.0);
    if diff == 0 {
        return Err(Error::new(&place, "calibration loops read 0 ticks"));
    }
    run.instructions_per_tick = CALIBRATION_NOPS as f64 / diff as f64;
    Ok(run)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn job_block_layout() {
        let model = [7u8; 13];
        let a = [1u8, 2, 3];
        let b = [4u8, 5, 6];
        let j = job_block(&model, &[&a, &b], 100).unwrap();
        assert_eq!(&j[..8], b"midgejob");
        let w = |i: usize| u32::from_le_bytes(j[8 + 4 * i..12 + 4 * i].try_into().unwrap());
        assert_eq!((w(0), w(1), w(2)), (1, 64, 13));
        // Inputs start at the next multiple of 8 after 64 + 13 = 77 → 80.
        assert_eq!((w(3), w(4), w(5)), (80, 3, 2));
        assert_eq!(&j[80..86], &[1, 2, 3, 4, 5, 6]);
        // Workspace at align8(86) = 88, the block's length.
        assert_eq!(w(6), 88);
        assert_eq!(j.len(), 88);
        assert!(job_block(&model, &[&a, &model], 0).is_err());
        assert!(job_block(&model, &[&a], JOB_CAPACITY).is_err());
    }

    #[test]
    fn report_parsing() {
        let text = "harness 1\ncalibration a=1050 b=2050\nmodel layers=2 workspace=64\nrun 0\nlayer 0 10\nlayer 1 20\noutput 0 00ff7f\nstack total=900 runtime=400\nend\n";
        let r = parse_report(text, "m", "q").unwrap();
        assert!(r.calibration_ok());
        assert_eq!(r.instructions_per_tick, 40.0);
        assert_eq!(r.layer_instructions(0), vec![400, 800]);
        assert_eq!(r.outputs, vec![vec![0, 255, 127]]);
        assert_eq!((r.stack_total, r.stack_runtime), (900, 400));
        assert!(parse_report("calibration a=1 b=2\n", "m", "q").is_err());
    }
}
