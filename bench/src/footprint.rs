//! Footprint of a model on a target: flash by model-file section plus the
//! runtime's own code measured from firmware ELFs, RAM by workspace, input,
//! stack and static data, and the per-layer table with the memory timeline.

use midge_runtime::{
    repr::{Bias, Params, Weights},
    Model, OpSet,
};
use serde::Serialize;

use crate::firmware;
use crate::{Error, Result};
use midge_convert::compare::{elem_name, op_name, op_set_names};
use midge_convert::plan;

/// Allocated bytes of an ELF image by kind, from its section table.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct ElfSizes {
    /// Executable sections (flash).
    pub text: u64,
    /// Read-only data, vector table included (flash).
    pub rodata: u64,
    /// Initialized writable data (flash for the image, RAM at run time).
    pub data: u64,
    /// Zero-initialized and uninitialized data (RAM only).
    pub bss: u64,
}

impl ElfSizes {
    pub fn flash(&self) -> u64 {
        self.text + self.rodata + self.data
    }
    pub fn ram(&self) -> u64 {
        self.data + self.bss
    }
    fn minus(&self, o: &ElfSizes) -> ElfSizes {
        ElfSizes {
            text: self.text.saturating_sub(o.text),
            rodata: self.rodata.saturating_sub(o.rodata),
            data: self.data.saturating_sub(o.data),
            bss: self.bss.saturating_sub(o.bss),
        }
    }
}

fn rd<const N: usize>(b: &[u8], at: usize, place: &str) -> Result<[u8; N]> {
    b.get(at..at + N)
        .and_then(|s| s.try_into().ok())
        .ok_or_else(|| Error::new(place, format!("ELF truncated: needs byte {}", at + N)))
}

/// Sums the allocated sections of a 32-bit little-endian ELF file by their
/// flags (System V ABI, ELF section header: SHF_WRITE 0x1, SHF_ALLOC 0x2,
/// SHF_EXECINSTR 0x4; SHT_NOBITS 8).
pub fn elf_sizes(bytes: &[u8], place: &str) -> Result<ElfSizes> {
    if bytes.get(..4) != Some(b"\x7fELF".as_slice()) {
        return Err(Error::new(place, "not an ELF file (bad magic)"));
    }
    let ident: [u8; 2] = rd(bytes, 4, place)?;
    if ident != [1, 1] {
        return Err(Error::new(
            place,
            format!("expected a 32-bit little-endian ELF (class 1, data 1), found {ident:?}"),
        ));
    }
    let u16_at = |at| rd::<2>(bytes, at, place).map(u16::from_le_bytes);
    let u32_at = |at| rd::<4>(bytes, at, place).map(u32::from_le_bytes);
    let shoff = u32_at(0x20)? as usize;
    let shentsize = u16_at(0x2e)? as usize;
    let shnum = u16_at(0x30)? as usize;
    if shentsize < 40 {
        return Err(Error::new(
            place,
            format!("section header size: expected at least 40, found {shentsize}"),
        ));
    }
    let mut s = ElfSizes::default();
    for i in 0..shnum {
        let h = shoff + i * shentsize;
        let kind = u32_at(h + 4)?;
        let flags = u32_at(h + 8)?;
        let size = u32_at(h + 20)? as u64;
        if flags & 0x2 == 0 {
            continue;
        }
        if kind == 8 {
            s.bss += size;
        } else if flags & 0x4 != 0 {
            s.text += size;
        } else if flags & 0x1 != 0 {
            s.data += size;
        } else {
            s.rodata += size;
        }
    }
    Ok(s)
}

/// The runtime's own code and data on one target for one op set: the
/// firmware `footprint` binary built with that op set minus `baseline`
/// (same skeleton without the runtime).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RuntimeCost {
    pub triple: String,
    /// The (op, precision) pairs the measured firmware links, as `op_set_names` spells them.
    pub op_set: Vec<String>,
    pub sizes: ElfSizes,
    pub with_runtime: ElfSizes,
    pub baseline: ElfSizes,
}

/// Builds the firmware for `triple` linking `ops` and measures the
/// runtime's cost.
pub fn runtime_cost(triple: &str, ops: OpSet) -> Result<RuntimeCost> {
    let build = firmware::build(triple, ops)?;
    let read = |p: &std::path::Path| -> Result<ElfSizes> {
        let place = p.display().to_string();
        let b = midge_convert::files::read(p, &midge_convert::limits::ELF_FILE)?;
        elf_sizes(&b, &place)
    };
    let with_runtime = read(&build.footprint)?;
    let baseline = read(&build.baseline)?;
    Ok(RuntimeCost {
        triple: triple.to_string(),
        op_set: op_set_names(ops),
        sizes: with_runtime.minus(&baseline),
        with_runtime,
        baseline,
    })
}

/// Whole-ELF sizes of the C example firmware (capi/examples/mps2 with the
/// midge-c library linking one op set) beside the Rust harness's, which
/// does the same job (job block, per-layer timing, semihosting output).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CFirmwareCost {
    pub triple: String,
    pub c_example: ElfSizes,
    pub rust_harness: ElfSizes,
}

/// Builds both firmwares for `triple` linking `ops` and reads their sizes.
pub fn c_firmware_cost(triple: &str, ops: OpSet) -> Result<CFirmwareCost> {
    let read = |p: &std::path::Path| -> Result<ElfSizes> {
        let b = midge_convert::files::read(p, &midge_convert::limits::ELF_FILE)?;
        elf_sizes(&b, &p.display().to_string())
    };
    Ok(CFirmwareCost {
        triple: triple.to_string(),
        c_example: read(&crate::c_firmware::build(triple, ops)?)?,
        rust_harness: read(&firmware::build(triple, ops)?.harness)?,
    })
}

/// Model-file bytes by kind (one serializable form for every report).
pub use midge_convert::show::Sections as FileSections;

/// One row of the per-layer table.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LayerRow {
    pub index: usize,
    pub op: &'static str,
    /// "int8", "fp16" or "u8": the output element type.
    pub elem: &'static str,
    /// Output height, width, channels.
    pub output_shape: [u16; 3],
    pub params: u64,
    /// Weight blob bytes.
    pub weight_bytes: usize,
    /// Weight, bias and parameter blob bytes.
    pub const_bytes: usize,
    pub macs: u64,
    /// Workspace bytes of the tensors live during this step (inputs read,
    /// output written, anything kept for later).
    pub live_bytes: usize,
}

/// Footprint of a model independent of any target.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ModelFootprint {
    pub name: String,
    pub sections: FileSections,
    pub workspace_len: usize,
    /// Max of `live_bytes`: what any placement needs at least.
    pub lower_bound: usize,
    /// The caller-held input tensor (not in the workspace).
    pub input_bytes: usize,
    pub output_bytes: usize,
    pub params: u64,
    pub macs: u64,
    pub layers: Vec<LayerRow>,
    /// The layer at whose step `live_bytes` peaks (first one on ties).
    pub peak_layer: Option<usize>,
}

/// Per-layer table, memory timeline and file sections of a parsed model.
/// The timeline uses the converter's planner lifetimes (`plan::lifetimes`),
/// so it is the same rule the workspace was planned with.
pub fn model_footprint(model: &Model) -> ModelFootprint {
    let s = model.sections();
    let sizes: Vec<usize> = (0..model.tensor_count())
        .map(|t| model.tensor(t).map_or(0, |r| r.byte_len()))
        .collect();
    let headers: Vec<_> = (0..model.layer_count())
        .filter_map(|i| model.layer(i))
        .map(|l| l.header)
        .collect();
    let steps = plan::steps(&headers);
    let lifetimes = plan::lifetimes(&sizes, &steps, model.output_id(), &[0]);
    let live_at = plan::live_bytes(&lifetimes);
    let live = |step: usize| -> usize { live_at.get(step).copied().unwrap_or(0) };
    let mut layers = Vec::new();
    for i in 0..model.layer_count() {
        let Some(l) = model.layer(i) else { continue };
        let out = model.tensor(l.header.output as usize);
        let weight_bytes = match l.weights {
            Weights::None => 0,
            Weights::I8(w) => w.len(),
            Weights::F16(w) => 2 * w.len(),
        };
        let bias_bytes = match l.bias {
            Bias::None => 0,
            Bias::I32(b) => 4 * b.len(),
            Bias::F32(b) => 4 * b.len(),
        };
        let param_bytes = match l.params {
            Params::None => 0,
            Params::Requant(p) | Params::I32(p) => 4 * p.len(),
            Params::F32(p) => 4 * p.len(),
        };
        layers.push(LayerRow {
            index: i,
            op: op_name(l.header.op),
            elem: out.map_or("?", |t| elem_name(t.elem)),
            output_shape: out.map_or([0; 3], |t| [t.shape.h, t.shape.w, t.shape.c]),
            params: model.layer_params(i),
            weight_bytes,
            const_bytes: weight_bytes + bias_bytes + param_bytes,
            macs: model.layer_macs(i),
            live_bytes: live(i),
        });
    }
    let lower_bound = layers.iter().map(|r| r.live_bytes).max().unwrap_or(0);
    let peak_layer = layers
        .iter()
        .find(|r| r.live_bytes == lower_bound && !layers.is_empty())
        .map(|r| r.index);
    ModelFootprint {
        name: model.name().to_string(),
        sections: s.into(),
        workspace_len: model.workspace_len(),
        lower_bound,
        input_bytes: model.input().byte_len(),
        output_bytes: model.output().byte_len(),
        params: layers.iter().map(|r| r.params).sum(),
        macs: layers.iter().map(|r| r.macs).sum(),
        layers,
        peak_layer,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A hand-made ELF32 with a section table of four allocated sections
    /// and one non-allocated one (System V ABI layout, 40-byte headers).
    #[test]
    fn elf_sections_by_flags() {
        let mut b = vec![0u8; 52];
        b[..4].copy_from_slice(b"\x7fELF");
        b[4] = 1;
        b[5] = 1;
        let shoff = 52u32;
        b[0x20..0x24].copy_from_slice(&shoff.to_le_bytes());
        b[0x2e..0x30].copy_from_slice(&40u16.to_le_bytes());
        // (type, flags, size)
        let secs = [
            (1u32, 0x6u32, 1000u32), // .text: alloc + exec
            (1, 0x2, 300),           // .rodata: alloc
            (1, 0x3, 20),            // .data: alloc + write
            (8, 0x3, 64),            // .bss: nobits
            (1, 0x0, 5000),          // .debug_info: not allocated
        ];
        b[0x30..0x32].copy_from_slice(&(secs.len() as u16).to_le_bytes());
        for (t, f, s) in secs {
            let mut h = [0u8; 40];
            h[4..8].copy_from_slice(&t.to_le_bytes());
            h[8..12].copy_from_slice(&f.to_le_bytes());
            h[20..24].copy_from_slice(&s.to_le_bytes());
            b.extend_from_slice(&h);
        }
        let s = elf_sizes(&b, "x.elf").unwrap();
        assert_eq!(
            s,
            ElfSizes {
                text: 1000,
                rodata: 300,
                data: 20,
                bss: 64
            }
        );
        assert_eq!((s.flash(), s.ram()), (1320, 84));
        b[4] = 2;
        assert!(elf_sizes(&b, "x.elf")
            .unwrap_err()
            .to_string()
            .contains("32-bit"));
        assert!(elf_sizes(&b[..40], "x.elf").is_err());
    }
}
