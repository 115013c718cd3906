//! Target profiles: our own TOML description of a microcontroller board
//! (core, clock, RAM/flash and what the application keeps, the planning
//! CPI factor, the QEMU machine that emulates the core), parsed strictly.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::{Error, Result};

/// Cortex-M cores a profile can name.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Core {
    CortexM0plus,
    CortexM3,
    CortexM4,
    CortexM7,
}

impl Core {
    pub const fn name(self) -> &'static str {
        match self {
            Core::CortexM0plus => "cortex-m0plus",
            Core::CortexM3 => "cortex-m3",
            Core::CortexM4 => "cortex-m4",
            Core::CortexM7 => "cortex-m7",
        }
    }
    /// Rust target triples whose code runs on this core.
    pub const fn rust_targets(self) -> &'static [&'static str] {
        match self {
            Core::CortexM0plus => &["thumbv6m-none-eabi"],
            Core::CortexM3 => &["thumbv7m-none-eabi", "thumbv6m-none-eabi"],
            Core::CortexM4 | Core::CortexM7 => &[
                "thumbv7em-none-eabihf",
                "thumbv7em-none-eabi",
                "thumbv7m-none-eabi",
                "thumbv6m-none-eabi",
            ],
        }
    }
}

/// QEMU machines the firmware harness's memory map fits (checked on QEMU 7.2
/// with `info mtree`): SSRAM1 at 0, SSRAM2/3 at 0x2000_0000.
pub const EMULATOR_MACHINES: [&str; 3] = ["mps2-an385", "mps2-an386", "mps2-an500"];

/// Largest RAM or flash a profile may state, reserved parts included:
/// 4 GiB, the whole 32-bit address space of a Cortex-M core.
pub const MAX_MEMORY_BYTES: u64 = 1 << 32;
/// Fastest clock a profile may state: 4 GHz (Cortex-M parts run below 1.5 GHz).
pub const MAX_CLOCK_HZ: u64 = 4_000_000_000;
/// Largest planning CPI factor a profile may state.
pub const MAX_CYCLES_PER_INSTRUCTION: f64 = 1000.0;

/// The `[emulator]` table.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Emulator {
    /// `qemu-system-arm -M <machine>`.
    pub machine: String,
}

/// One target profile file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Target {
    pub name: String,
    #[serde(default)]
    pub summary: String,
    pub core: Core,
    pub rust_target: String,
    pub clock_hz: u64,
    /// Planning factor: estimated cycles = instructions × this.
    pub cycles_per_instruction: f64,
    pub ram_bytes: u64,
    pub flash_bytes: u64,
    #[serde(default)]
    pub reserved_ram_bytes: u64,
    #[serde(default)]
    pub reserved_flash_bytes: u64,
    pub emulator: Emulator,
}

impl Target {
    /// Read and check a profile file.
    pub fn load(path: &Path) -> Result<Target> {
        let place = path.display().to_string();
        let text = midge_convert::files::read_text(path, &midge_convert::limits::TARGET_FILE)?;
        Target::from_toml_str(&text, &place)
    }

    /// Parse and check profile text; `place` names it in errors.
    pub fn from_toml_str(text: &str, place: &str) -> Result<Target> {
        let t: Target = toml::from_str(text).map_err(|e| {
            Error::new(
                place,
                format!(
                    "target profile: {}",
                    e.to_string().trim().replace('\n', " ")
                ),
            )
        })?;
        t.check(place)?;
        Ok(t)
    }

    fn check(&self, place: &str) -> Result<()> {
        let bad = |key: &str, problem: String| Error::new(format!("{place}: key `{key}`"), problem);
        if self.name.trim().is_empty() {
            return Err(bad("name", "expected a non-empty name, found \"\"".into()));
        }
        if !self
            .core
            .rust_targets()
            .contains(&self.rust_target.as_str())
        {
            return Err(bad(
                "rust_target",
                format!(
                    "expected one of {:?} for core {}, found {:?}",
                    self.core.rust_targets(),
                    self.core.name(),
                    self.rust_target
                ),
            ));
        }
        if self.clock_hz == 0 || self.clock_hz > MAX_CLOCK_HZ {
            return Err(bad(
                "clock_hz",
                format!(
                    "expected a clock in 1..={MAX_CLOCK_HZ} Hz, found {}",
                    self.clock_hz
                ),
            ));
        }
        let cpi = self.cycles_per_instruction;
        if !(cpi.is_finite() && cpi > 0.0 && cpi <= MAX_CYCLES_PER_INSTRUCTION) {
            return Err(bad(
                "cycles_per_instruction",
                format!(
                    "expected a positive number at most {MAX_CYCLES_PER_INSTRUCTION}, found {cpi}"
                ),
            ));
        }
        for (key, v) in [
            ("ram_bytes", self.ram_bytes),
            ("flash_bytes", self.flash_bytes),
            ("reserved_ram_bytes", self.reserved_ram_bytes),
            ("reserved_flash_bytes", self.reserved_flash_bytes),
        ] {
            if v > MAX_MEMORY_BYTES {
                return Err(bad(
                    key,
                    format!("expected at most {MAX_MEMORY_BYTES} (4 GiB), found {v}"),
                ));
            }
        }
        if self.reserved_ram_bytes > self.ram_bytes {
            return Err(bad(
                "reserved_ram_bytes",
                format!(
                    "expected at most ram_bytes ({}), found {}",
                    self.ram_bytes, self.reserved_ram_bytes
                ),
            ));
        }
        if self.reserved_flash_bytes > self.flash_bytes {
            return Err(bad(
                "reserved_flash_bytes",
                format!(
                    "expected at most flash_bytes ({}), found {}",
                    self.flash_bytes, self.reserved_flash_bytes
                ),
            ));
        }
        if !EMULATOR_MACHINES.contains(&self.emulator.machine.as_str()) {
            return Err(bad(
                "emulator.machine",
                format!(
                    "expected one of {:?} (the harness's memory map), found {:?}",
                    EMULATOR_MACHINES, self.emulator.machine
                ),
            ));
        }
        Ok(())
    }

    /// RAM the model may use: total minus what the application keeps.
    pub fn ram_available(&self) -> u64 {
        self.ram_bytes - self.reserved_ram_bytes
    }

    /// Flash the model may use: total minus what the application keeps.
    pub fn flash_available(&self) -> u64 {
        self.flash_bytes - self.reserved_flash_bytes
    }

    /// Estimated core cycles for `instructions` executed (an estimate: the
    /// profile's CPI factor, not a cycle-accurate model).
    pub fn estimate_cycles(&self, instructions: u64) -> f64 {
        instructions as f64 * self.cycles_per_instruction
    }

    /// Estimated milliseconds for `instructions` executed at the profile's clock.
    pub fn estimate_ms(&self, instructions: u64) -> f64 {
        self.estimate_cycles(instructions) / self.clock_hz as f64 * 1e3
    }

    /// A profile given as a file path, or as a name looked up as
    /// `models/targets/<name>.toml` under the current folder and its
    /// ancestors, then among the profiles this binary carries
    /// (`sources::profile`, the repository's `models/targets/`).
    pub fn resolve(name_or_path: &str) -> Result<Target> {
        let p = Path::new(name_or_path);
        // Anything that exists is the file meant (a FIFO or folder is refused by `load`).
        if p.exists() {
            return Target::load(p);
        }
        let file = format!("{name_or_path}.toml");
        let mut tried = Vec::new();
        for dir in target_dirs() {
            let candidate = dir.join(&file);
            if candidate.is_file() {
                return Target::load(&candidate);
            }
            tried.push(candidate.display().to_string());
        }
        if let Some(text) = crate::sources::profile(name_or_path) {
            return Target::from_toml_str(text, &format!("built-in profile {name_or_path}"));
        }
        let shipped: Vec<&str> = crate::sources::profile_names().collect();
        Err(Error::new(
            name_or_path,
            format!(
                "no target profile file of that path or name (looked for {}; built-in profiles: {})",
                tried.join(", "),
                shipped.join(", ")
            ),
        ))
    }
}

/// Folders searched for named profiles: `models/targets` under the current
/// folder and each of its ancestors.
pub fn target_dirs() -> Vec<PathBuf> {
    std::env::current_dir()
        .map(|cwd| {
            cwd.ancestors()
                .map(|a| a.join("models").join("targets"))
                .collect()
        })
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    const GOOD: &str = r#"
name = "t"
core = "cortex-m4"
rust_target = "thumbv7em-none-eabihf"
clock_hz = 1000
cycles_per_instruction = 2.0
ram_bytes = 100
flash_bytes = 200
reserved_ram_bytes = 10
[emulator]
machine = "mps2-an386"
"#;

    #[test]
    fn parses_and_estimates() {
        let t = Target::from_toml_str(GOOD, "t.toml").unwrap();
        assert_eq!(t.ram_available(), 90);
        assert_eq!(t.flash_available(), 200);
        // 500 instructions × 2 cycles at 1 kHz = 1000 ms.
        assert!((t.estimate_ms(500) - 1000.0).abs() < 1e-9);
    }

    #[test]
    fn unknown_key_and_bad_values_are_named() {
        let e = Target::from_toml_str(&format!("{GOOD}\nspeed = 3"), "t.toml").unwrap_err();
        assert!(e.to_string().contains("t.toml"), "{e}");
        let e = Target::from_toml_str(
            &GOOD.replace("reserved_ram_bytes = 10", "reserved_ram_bytes = 101"),
            "t.toml",
        )
        .unwrap_err();
        assert!(e.to_string().contains("reserved_ram_bytes"), "{e}");
        let e =
            Target::from_toml_str(&GOOD.replace("mps2-an386", "mps2-an505"), "t.toml").unwrap_err();
        assert!(e.to_string().contains("emulator.machine"), "{e}");
        let e = Target::from_toml_str(&GOOD.replace("thumbv7em-none-eabihf", "x86"), "t.toml")
            .unwrap_err();
        assert!(e.to_string().contains("rust_target"), "{e}");
        // Sane maxima: 4 GiB of memory, 4 GHz, CPI 1000.
        for (from, to, key) in [
            (
                "ram_bytes = 100",
                "ram_bytes = 18446744073709551615",
                "ram_bytes",
            ),
            (
                "flash_bytes = 200",
                "flash_bytes = 4294967297",
                "flash_bytes",
            ),
            ("clock_hz = 1000", "clock_hz = 4000000001", "clock_hz"),
            (
                "cycles_per_instruction = 2.0",
                "cycles_per_instruction = 1e300",
                "cycles_per_instruction",
            ),
        ] {
            let e = Target::from_toml_str(&GOOD.replace(from, to), "t.toml").unwrap_err();
            assert!(e.to_string().contains(&format!("key `{key}`")), "{e}");
        }
        let at_limit = GOOD
            .replace("ram_bytes = 100", "ram_bytes = 4294967296")
            .replace("clock_hz = 1000", "clock_hz = 4000000000");
        assert!(Target::from_toml_str(&at_limit, "t.toml").is_ok());
    }

    #[test]
    fn shipped_profiles_load() {
        for name in ["m4-80", "m0plus-48", "m7-400"] {
            let t = Target::resolve(name).unwrap();
            assert_eq!(t.name, name);
        }
    }
}
