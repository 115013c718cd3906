//! Mutation operators over model files for the hostile-input campaign: bit
//! flips, byte sets, truncations, swapped records and sections, huge counts
//! and offsets, splices; `fix_crc` re-seals a mutant so deeper checks run.

use midge_runtime::crc::crc32;
use midge_runtime::format::field;
use rand::Rng;

/// The kinds of damage `mutate` applies.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Kind {
    BitFlips,
    ByteSet,
    Truncate,
    SwapTensorRecords,
    SwapLayerRecords,
    SwapSectionEntries,
    SwapBlocks,
    HugeField,
    FieldNudge,
    Splice,
}

impl Kind {
    pub const ALL: [Kind; 10] = [
        Kind::BitFlips,
        Kind::ByteSet,
        Kind::Truncate,
        Kind::SwapTensorRecords,
        Kind::SwapLayerRecords,
        Kind::SwapSectionEntries,
        Kind::SwapBlocks,
        Kind::HugeField,
        Kind::FieldNudge,
        Kind::Splice,
    ];
}

/// Where the tables of a (valid) model file are, read from its model-info block.
#[derive(Clone, Copy, Debug)]
pub struct Map {
    pub tensors: (usize, usize),
    pub layers: (usize, usize),
    pub blobs: (usize, usize),
    pub strings: (usize, usize),
}

fn u32_at(b: &[u8], at: usize) -> usize {
    b.get(at..at + 4)
        .map(|s| u32::from_le_bytes([s[0], s[1], s[2], s[3]]) as usize)
        .unwrap_or(0)
}

impl Map {
    /// Reads the section table of `b` (no validation: garbage in, garbage out).
    pub fn of(b: &[u8]) -> Map {
        let info = field::header::LEN;
        let sec = |f: core::ops::Range<usize>| {
            let n = u32_at(b, info + f.start + 4);
            let t = u32_at(b, info + f.start);
            (t, n)
        };
        Map {
            tensors: sec(field::info::TENSORS),
            layers: sec(field::info::LAYERS),
            blobs: sec(field::info::BLOBS),
            strings: sec(field::info::STRINGS),
        }
    }

    /// Byte offsets of every structural little-endian field with its width:
    /// model-info fields, every tensor record field and every layer record
    /// field (op/activation bytes included).
    pub fn fields(&self) -> Vec<(usize, usize)> {
        let mut v = Vec::new();
        let info = field::header::LEN;
        // Workspace length, output id, the three counts, reserved word,
        // then the four (offset, length) pairs of the section table.
        let mut info_fields = vec![(0, 4), (4, 2), (6, 2), (8, 2), (10, 2), (12, 4)];
        info_fields.extend((16..field::info::LEN).step_by(4).map(|at| (at, 4)));
        v.extend(info_fields.into_iter().map(|(at, w)| (info + at, w)));
        v.push((field::header::FILE_LEN.start, 4));
        v.push((field::header::VERSION.start, 2));
        let (t0, tl) = self.tensors;
        for r in 0..tl / field::tensor::LEN {
            let base = t0 + r * field::tensor::LEN;
            for (at, w) in [(0, 2), (2, 2), (4, 2), (6, 1), (8, 4), (12, 4), (16, 4)] {
                v.push((base + at, w));
            }
        }
        let (l0, ll) = self.layers;
        for r in 0..ll / field::layer::LEN {
            let base = l0 + r * field::layer::LEN;
            v.push((base, 1));
            v.push((base + 1, 1));
            for at in (4..32).step_by(2) {
                v.push((base + at, 2));
            }
            for at in (32..72).step_by(4) {
                v.push((base + at, 4));
            }
        }
        v
    }
}

/// Values that break bounds arithmetic: zero, one, powers of two around the
/// type's range, all ones, and a few file-relative numbers.
fn huge(rng: &mut impl Rng, width: usize, file_len: usize) -> u64 {
    let max = if width >= 8 {
        u64::MAX
    } else {
        (1u64 << (8 * width)) - 1
    };
    let pick = [
        0,
        1,
        max,
        max - 7,
        max / 2,
        max / 2 + 1,
        file_len as u64,
        file_len as u64 + 8,
        (file_len as u64).saturating_sub(8),
        0x8000,
        0x7FFF,
        0x1_0000,
        0x7FFF_FFF8,
        0x8000_0000,
        255,
        256,
    ];
    pick[rng.gen_range(0..pick.len())] & max
}

fn write_le(b: &mut [u8], at: usize, width: usize, v: u64) {
    for k in 0..width {
        if let Some(x) = b.get_mut(at + k) {
            *x = (v >> (8 * k)) as u8;
        }
    }
}

fn read_le(b: &[u8], at: usize, width: usize) -> u64 {
    (0..width).fold(0u64, |acc, k| {
        acc | (b.get(at + k).copied().unwrap_or(0) as u64) << (8 * k)
    })
}

fn swap_ranges(b: &mut [u8], a: usize, c: usize, len: usize) {
    if a == c || a + len > b.len() || c + len > b.len() {
        return;
    }
    for k in 0..len {
        b.swap(a + k, c + k);
    }
}

/// One mutant of `seed` by `kind`. The CRC is left as the mutation leaves it;
/// see `fix_crc`.
pub fn mutate(rng: &mut impl Rng, seed: &[u8], kind: Kind) -> Vec<u8> {
    let mut b = seed.to_vec();
    let map = Map::of(seed);
    let n = b.len().max(1);
    match kind {
        Kind::BitFlips => {
            for _ in 0..rng.gen_range(1..=4) {
                let at = rng.gen_range(0..n);
                if let Some(x) = b.get_mut(at) {
                    *x ^= 1 << rng.gen_range(0..8);
                }
            }
        }
        Kind::ByteSet => {
            let vals = [0u8, 0xFF, 0x7F, 0x80, 1, 2, 8, 0xFE];
            for _ in 0..rng.gen_range(1..=3) {
                let at = rng.gen_range(0..n);
                if let Some(x) = b.get_mut(at) {
                    *x = vals[rng.gen_range(0..vals.len())];
                }
            }
        }
        Kind::Truncate => {
            let len = rng.gen_range(0..b.len());
            b.truncate(len);
        }
        Kind::SwapTensorRecords | Kind::SwapLayerRecords => {
            let ((start, len), rec) = if kind == Kind::SwapTensorRecords {
                (map.tensors, field::tensor::LEN)
            } else {
                (map.layers, field::layer::LEN)
            };
            let count = len / rec;
            if count >= 2 {
                let i = rng.gen_range(0..count);
                let j = rng.gen_range(0..count);
                swap_ranges(&mut b, start + i * rec, start + j * rec, rec);
            }
        }
        Kind::SwapSectionEntries => {
            let base = field::header::LEN + field::info::TENSORS.start;
            let i = rng.gen_range(0..4);
            let j = rng.gen_range(0..4);
            // Whole (offset, length) pairs, or offsets only, or lengths only.
            match rng.gen_range(0..3) {
                0 => swap_ranges(&mut b, base + 8 * i, base + 8 * j, 8),
                1 => swap_ranges(&mut b, base + 8 * i, base + 8 * j, 4),
                _ => swap_ranges(&mut b, base + 8 * i + 4, base + 8 * j + 4, 4),
            }
        }
        Kind::SwapBlocks => {
            // Two 8-aligned blocks of 8..=64 bytes anywhere after the header
            // (moves blobs, records and strings around).
            let len = 8 * rng.gen_range(1..=8);
            let slots = b.len().saturating_sub(24 + len) / 8;
            if slots > 1 {
                let first = 24 + 8 * rng.gen_range(0..slots);
                let second = 24 + 8 * rng.gen_range(0..slots);
                if first + len <= second || second + len <= first {
                    swap_ranges(&mut b, first, second, len);
                }
            }
        }
        Kind::HugeField => {
            let fields = map.fields();
            for _ in 0..rng.gen_range(1..=2) {
                let (at, w) = fields[rng.gen_range(0..fields.len())];
                let v = huge(rng, w, seed.len());
                write_le(&mut b, at, w, v);
            }
        }
        Kind::FieldNudge => {
            // Off-by-a-little: ±1, ±8 on a structural field.
            let fields = map.fields();
            let (at, w) = fields[rng.gen_range(0..fields.len())];
            let d: i64 = [-8, -1, 1, 8][rng.gen_range(0..4)];
            let v = read_le(&b, at, w) as i64 + d;
            write_le(&mut b, at, w, v as u64);
        }
        Kind::Splice => {
            // Copy a run of bytes from one place to another (duplicated
            // records, shifted tables).
            let len = rng.gen_range(1..=40).min(n);
            let from = rng.gen_range(0..=n - len);
            let to = rng.gen_range(0..=n - len);
            let chunk: Vec<u8> = seed.get(from..from + len).unwrap_or(&[]).to_vec();
            if let Some(dst) = b.get_mut(to..to + chunk.len()) {
                dst.copy_from_slice(&chunk);
            }
        }
    }
    b
}

/// Recomputes the header CRC over `b[24..file length]` (clamped to the
/// buffer), so a mutant gets past the CRC check to the deeper ones.
pub fn fix_crc(b: &mut [u8]) {
    let len = read_le(b, field::header::FILE_LEN.start, 4) as usize;
    let end = len.min(b.len());
    if end < field::header::LEN {
        return;
    }
    let crc = crc32(&b[field::header::LEN..end]);
    write_le(b, field::header::CRC.start, 4, crc as u64);
}
