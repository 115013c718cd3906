//! Shared helpers of the midge integration tests and the fuzz target: small
//! valid seed models built with the runtime's writer (`seeds`), the mutation
//! operators of the hostile-input campaign (`mutate`) and `parse_and_run`.

pub mod mutate;
pub mod seeds;

use midge_runtime::embed::AlignedBytes;
use midge_runtime::write::ModelSpec;
use midge_runtime::{Error, Model};

/// What happened to one candidate file.
#[derive(Debug)]
pub enum Outcome {
    /// `Model::parse` rejected it.
    Rejected(Error),
    /// It parsed and `run` returned the output tensor (this many bytes).
    Ran(usize),
}

/// The input bytes fed to every model that parses: a fixed pattern of the
/// input tensor's length.
pub fn fixed_input(len: usize) -> Vec<u8> {
    (0..len)
        .map(|i| (i.wrapping_mul(37) ^ (i >> 3)) as u8)
        .collect()
}

/// Parses `bytes` (which the caller has placed at whatever alignment it
/// wants to test) and, when it parses, runs it once on `fixed_input` with a
/// workspace of exactly the stated length, and checks the round trip
/// `parse → ModelSpec::from_model → emit` gives the same bytes (the layout
/// is canonical, FORMAT.md). `Err` describes a runtime bug: a parsed model
/// that does not run, or does not round-trip. A panic is a bug too.
pub fn parse_and_run(bytes: &[u8]) -> Result<Outcome, String> {
    let model = match Model::parse(bytes) {
        Ok(m) => m,
        Err(e) => return Ok(Outcome::Rejected(e)),
    };
    let back = ModelSpec::from_model(&model)
        .emit()
        .map_err(|e| format!("the writer refuses a model the reader accepted: {e}"))?;
    if back[..] != *model.bytes() {
        return Err("parse → from_model → emit does not reproduce the file".into());
    }
    // Caps keep a fuzzer from asking for gigabytes; a model that parsed with
    // such sizes is still counted as parsed, just not run.
    const CAP: usize = 64 << 20;
    let in_len = model.input().byte_len();
    if in_len > CAP || model.workspace_len() > CAP {
        return Ok(Outcome::Ran(0));
    }
    let input = fixed_input(in_len);
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    let out = model
        .run(&input, &mut ws)
        .map_err(|e| format!("a model that parsed does not run: {e}"))?;
    let want = model.output().byte_len();
    if out.len() != want {
        return Err(format!(
            "run returned {} bytes, output tensor has {want}",
            out.len()
        ));
    }
    Ok(Outcome::Ran(out.len()))
}

/// `bytes` copied to an aligned buffer first (`parse_and_run` of a file as
/// a host reads it).
pub fn parse_and_run_aligned(bytes: &[u8]) -> Result<Outcome, String> {
    parse_and_run(&AlignedBytes::from_slice(bytes))
}

/// A short name of an error's kind, for counting rejections by kind.
pub fn error_kind(e: &Error) -> &'static str {
    match e {
        Error::Truncated { .. } => "truncated",
        Error::BadMagic => "bad magic",
        Error::UnsupportedVersion { .. } => "version",
        Error::CrcMismatch { .. } => "crc",
        Error::Misaligned { .. } => "misaligned",
        Error::OutOfBounds { .. } => "out of bounds",
        Error::BadField { .. } => "header/info field",
        Error::TensorField { .. } => "tensor field",
        Error::TensorScale { .. } => "tensor scale",
        Error::LayerField { .. } => "layer field",
        Error::Layout { .. } => "layout",
        Error::Layer { .. } => "layer check",
        Error::Tensor { .. } => "tensor check",
        Error::Overlap { .. } => "workspace overlap",
        Error::AccumulatorOverflow { .. } => "accumulator overflow",
        Error::InputLength { .. } => "input length",
        Error::WorkspaceLength { .. } => "workspace length",
        Error::WorkspaceMisaligned => "workspace misaligned",
        Error::NotLinked { .. } => "op not linked",
        Error::Patch { .. } => "patch plan",
    }
}
