//! The job block: what the host loads at `JOB_ADDR` for the harness firmware
//! (a 64-byte header, the model, the inputs back to back, then the workspace).
//! The one definition of that layout, `no_std`, used by both sides.
#![no_std]
#![deny(unsafe_code)]

/// Where the loader puts the job block (ZBT SSRAM2/3 + 1 MiB, the same
/// address on mps2-an385, -an386 and -an500; see bench/firmware/memory.x).
pub const JOB_ADDR: u32 = 0x2010_0000;
/// Bytes from `JOB_ADDR` to the end of SSRAM2/3: the block and the workspace.
pub const JOB_CAPACITY: usize = 3 * 1024 * 1024;
/// First eight bytes of a job block.
pub const JOB_MAGIC: [u8; 8] = *b"midgejob";
pub const JOB_VERSION: u32 = 1;
pub const JOB_HEADER_LEN: usize = 64;
/// NOPs by which the harness's two calibration loops differ.
pub const CALIBRATION_NOPS: u64 = 40_000;
/// SysTick ticks those NOPs take on an MPS2 board (25 MHz core clock, one
/// instruction per nanosecond of virtual time under `-icount shift=0`).
pub const CALIBRATION_EXPECTED_TICKS: u64 = 1_000;

/// Why a job cannot be laid out or read.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum JobError {
    /// Model, inputs and workspace need this many bytes, more than `JOB_CAPACITY`.
    TooLarge(usize),
    /// The header is shorter than `JOB_HEADER_LEN`.
    Short,
    BadMagic,
    BadVersion(u32),
    /// A field points outside the job area.
    OutOfBounds,
    /// The model or workspace offset is not 8-byte aligned.
    Misaligned,
}

impl core::fmt::Display for JobError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            JobError::TooLarge(n) => write!(
                f,
                "model, inputs and workspace need {n} bytes, the harness's job area holds {JOB_CAPACITY}"
            ),
            JobError::Short => f.write_str("job block too short"),
            JobError::BadMagic => f.write_str("no job block at 0x20100000 (bad magic)"),
            JobError::BadVersion(v) => write!(f, "job block version is {v}, expected 1"),
            JobError::OutOfBounds => f.write_str("job block fields reach outside the job area"),
            JobError::Misaligned => f.write_str("job block offsets are not 8-byte aligned"),
        }
    }
}

/// The job header's fields (little-endian u32 after the magic, in this order).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Job {
    pub model_offset: usize,
    pub model_len: usize,
    pub input_offset: usize,
    pub input_len: usize,
    pub input_count: usize,
    /// Where the workspace starts: also the block's length (8-byte aligned).
    pub workspace_offset: usize,
}

const fn align8(v: usize) -> usize {
    v.div_ceil(8) * 8
}

impl Job {
    /// The layout for a model of `model_len` bytes, `input_count` inputs of
    /// `input_len` bytes and a `workspace_len`-byte workspace: the model
    /// right after the header, inputs and workspace at the next multiples of 8.
    pub fn layout(
        model_len: usize,
        input_len: usize,
        input_count: usize,
        workspace_len: usize,
    ) -> Result<Job, JobError> {
        let too_large = JobError::TooLarge(usize::MAX);
        let model_offset = JOB_HEADER_LEN;
        let input_offset = align8(model_offset.checked_add(model_len).ok_or(too_large)?);
        let inputs = input_len.checked_mul(input_count).ok_or(too_large)?;
        let workspace_offset = align8(input_offset.checked_add(inputs).ok_or(too_large)?);
        let end = workspace_offset
            .checked_add(workspace_len)
            .ok_or(too_large)?;
        if end > JOB_CAPACITY {
            return Err(JobError::TooLarge(end));
        }
        Ok(Job {
            model_offset,
            model_len,
            input_offset,
            input_len,
            input_count,
            workspace_offset,
        })
    }

    fn words(&self) -> [u32; 7] {
        [
            JOB_VERSION,
            self.model_offset as u32,
            self.model_len as u32,
            self.input_offset as u32,
            self.input_len as u32,
            self.input_count as u32,
            self.workspace_offset as u32,
        ]
    }

    /// The 64-byte header: magic, then the fields as little-endian u32.
    pub fn header(&self) -> [u8; JOB_HEADER_LEN] {
        let mut h = [0u8; JOB_HEADER_LEN];
        h[..8].copy_from_slice(&JOB_MAGIC);
        for (i, w) in self.words().iter().enumerate() {
            h[8 + 4 * i..12 + 4 * i].copy_from_slice(&w.to_le_bytes());
        }
        h
    }

    /// Reads a header (the first `JOB_HEADER_LEN` bytes of a block).
    pub fn parse_header(head: &[u8]) -> Result<Job, JobError> {
        let head = head.get(..JOB_HEADER_LEN).ok_or(JobError::Short)?;
        if head[..8] != JOB_MAGIC {
            return Err(JobError::BadMagic);
        }
        let word = |i: usize| {
            let o = 8 + 4 * i;
            u32::from_le_bytes([head[o], head[o + 1], head[o + 2], head[o + 3]])
        };
        if word(0) != JOB_VERSION {
            return Err(JobError::BadVersion(word(0)));
        }
        let job = Job {
            model_offset: word(1) as usize,
            model_len: word(2) as usize,
            input_offset: word(3) as usize,
            input_len: word(4) as usize,
            input_count: word(5) as usize,
            workspace_offset: word(6) as usize,
        };
        if job.workspace_offset > JOB_CAPACITY {
            return Err(JobError::OutOfBounds);
        }
        Ok(job)
    }

    /// Checks that model and inputs lie inside `block` (the job area up to
    /// the workspace) and that the model and workspace offsets are aligned.
    pub fn check(&self, block: &[u8]) -> Result<(), JobError> {
        let inputs_end = self
            .input_len
            .checked_mul(self.input_count)
            .and_then(|n| n.checked_add(self.input_offset));
        let model_end = self.model_offset.checked_add(self.model_len);
        match (model_end, inputs_end) {
            (Some(m), Some(i)) if m <= block.len() && i <= block.len() => {}
            _ => return Err(JobError::OutOfBounds),
        }
        if !self.workspace_offset.is_multiple_of(8) || !self.model_offset.is_multiple_of(8) {
            return Err(JobError::Misaligned);
        }
        Ok(())
    }

    /// Whether a `len`-byte workspace at `workspace_offset` fits in the job area.
    pub fn workspace_fits(&self, len: usize) -> bool {
        self.workspace_offset
            .checked_add(len)
            .is_some_and(|end| end <= JOB_CAPACITY)
    }

    /// The model bytes inside `block` (`None` unless `check` passes).
    pub fn model<'a>(&self, block: &'a [u8]) -> Option<&'a [u8]> {
        block.get(self.model_offset..self.model_offset.checked_add(self.model_len)?)
    }

    /// Input `k` inside `block` (`None` when outside it or `k >= input_count`).
    pub fn input<'a>(&self, block: &'a [u8], k: usize) -> Option<&'a [u8]> {
        if k >= self.input_count {
            return None;
        }
        let start = self
            .input_offset
            .checked_add(k.checked_mul(self.input_len)?)?;
        block.get(start..start.checked_add(self.input_len)?)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn layout_header_round_trip() {
        // 13 model bytes after the 64-byte header end at 77: inputs at 80;
        // two 3-byte inputs end at 86: workspace at 88.
        let j = Job::layout(13, 3, 2, 100).unwrap();
        assert_eq!(
            (j.model_offset, j.input_offset, j.workspace_offset),
            (64, 80, 88)
        );
        let h = j.header();
        assert_eq!(&h[..8], b"midgejob");
        assert_eq!(Job::parse_header(&h), Ok(j));
        let mut block = [0u8; 88];
        block[..64].copy_from_slice(&h);
        assert_eq!(j.check(&block), Ok(()));
        assert_eq!(j.input(&block, 1).map(|i| i.len()), Some(3));
        assert_eq!(j.input(&block, 2), None);
        assert_eq!(j.check(&block[..85]), Err(JobError::OutOfBounds));
        assert!(matches!(
            Job::layout(13, 3, 2, JOB_CAPACITY),
            Err(JobError::TooLarge(_))
        ));
        assert_eq!(
            Job::layout(usize::MAX, 1, 1, 0).unwrap_err(),
            JobError::TooLarge(usize::MAX)
        );
        let mut bad = h;
        bad[0] = b'x';
        assert_eq!(Job::parse_header(&bad), Err(JobError::BadMagic));
        bad = h;
        bad[8] = 2;
        assert_eq!(Job::parse_header(&bad), Err(JobError::BadVersion(2)));
        assert_eq!(Job::parse_header(&h[..63]), Err(JobError::Short));
    }
}
