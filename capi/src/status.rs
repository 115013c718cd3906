//! The status codes of the C interface: one per way a call can fail, the
//! mapping from the runtime's `Error`, and a static NUL-terminated text per
//! code (`midge_status_text`).

use core::ffi::c_char;

use midge_runtime::Error;

/// What a call did: `MIDGE_STATUS_OK` (0) or why it failed. Values are
/// stable; new codes are only ever appended.
#[repr(i32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum MidgeStatus {
    /// The call succeeded.
    Ok = 0,
    /// A pointer argument that must not be NULL was NULL.
    NullArgument = 1,
    /// The handle or the model bytes are not 8-byte aligned.
    Misaligned = 2,
    /// The handle was not filled by a successful `midge_open`.
    NotOpen = 3,
    /// The model bytes end before the file does.
    Truncated = 4,
    /// The bytes are not a midge model file.
    BadMagic = 5,
    /// The model file's format version is not the one this library reads.
    UnsupportedVersion = 6,
    /// The model body does not match its CRC-32: the bytes were damaged.
    CrcMismatch = 7,
    /// The model file is inconsistent (a record, shape, offset or parameter).
    InvalidModel = 8,
    /// The model needs an op this library build does not link (`midge_op_set`).
    NotLinked = 9,
    /// The input is not exactly the input tensor's byte length.
    InputLength = 10,
    /// The workspace is shorter than `midge_workspace_size`.
    WorkspaceLength = 11,
    /// The workspace does not start at an 8-byte aligned address.
    WorkspaceMisaligned = 12,
    /// The workspace overlaps the model bytes or the input.
    Overlap = 13,
    /// A label index at or past `midge_label_count`.
    IndexOutOfRange = 14,
    /// The output given to `midge_argmax` is not the output tensor's length,
    /// or has no comparable value.
    OutputLength = 15,
    /// A length so large no buffer can have it (over `PTRDIFF_MAX`).
    LengthTooLarge = 16,
}

/// Every code, in value order.
const ALL: [MidgeStatus; 17] = [
    MidgeStatus::Ok,
    MidgeStatus::NullArgument,
    MidgeStatus::Misaligned,
    MidgeStatus::NotOpen,
    MidgeStatus::Truncated,
    MidgeStatus::BadMagic,
    MidgeStatus::UnsupportedVersion,
    MidgeStatus::CrcMismatch,
    MidgeStatus::InvalidModel,
    MidgeStatus::NotLinked,
    MidgeStatus::InputLength,
    MidgeStatus::WorkspaceLength,
    MidgeStatus::WorkspaceMisaligned,
    MidgeStatus::Overlap,
    MidgeStatus::IndexOutOfRange,
    MidgeStatus::OutputLength,
    MidgeStatus::LengthTooLarge,
];

impl MidgeStatus {
    /// The text of this code, NUL-terminated.
    pub const fn text(self) -> &'static [u8] {
        match self {
            MidgeStatus::Ok => b"ok\0",
            MidgeStatus::NullArgument => b"a required pointer argument is NULL\0",
            MidgeStatus::Misaligned => b"handle or model bytes not 8-byte aligned\0",
            MidgeStatus::NotOpen => b"handle not opened by a successful midge_open\0",
            MidgeStatus::Truncated => b"model bytes end before the model file does\0",
            MidgeStatus::BadMagic => b"not a midge model file (bad magic)\0",
            MidgeStatus::UnsupportedVersion => b"model format version not supported\0",
            MidgeStatus::CrcMismatch => b"model CRC-32 mismatch: the bytes are damaged\0",
            MidgeStatus::InvalidModel => b"model file is inconsistent\0",
            MidgeStatus::NotLinked => b"model needs an op this library build does not link\0",
            MidgeStatus::InputLength => b"input length is not the model's input size\0",
            MidgeStatus::WorkspaceLength => b"workspace shorter than midge_workspace_size\0",
            MidgeStatus::WorkspaceMisaligned => b"workspace not 8-byte aligned\0",
            MidgeStatus::Overlap => b"workspace overlaps the model bytes or the input\0",
            MidgeStatus::IndexOutOfRange => b"index out of range\0",
            MidgeStatus::OutputLength => b"output is not the model's output tensor\0",
            MidgeStatus::LengthTooLarge => b"length larger than any buffer can be\0",
        }
    }

    /// The code for a runtime error.
    pub const fn from_error(e: &Error) -> MidgeStatus {
        match e {
            Error::Truncated { .. } => MidgeStatus::Truncated,
            Error::BadMagic => MidgeStatus::BadMagic,
            Error::UnsupportedVersion { .. } => MidgeStatus::UnsupportedVersion,
            Error::CrcMismatch { .. } => MidgeStatus::CrcMismatch,
            Error::Misaligned { .. } => MidgeStatus::Misaligned,
            Error::InputLength { .. } => MidgeStatus::InputLength,
            Error::WorkspaceLength { .. } => MidgeStatus::WorkspaceLength,
            Error::WorkspaceMisaligned => MidgeStatus::WorkspaceMisaligned,
            Error::NotLinked { .. } => MidgeStatus::NotLinked,
            Error::OutOfBounds { .. }
            | Error::BadField { .. }
            | Error::TensorField { .. }
            | Error::TensorScale { .. }
            | Error::LayerField { .. }
            | Error::Layout { .. }
            | Error::Layer { .. }
            | Error::Tensor { .. }
            | Error::Overlap { .. }
            | Error::AccumulatorOverflow { .. }
            | Error::Patch { .. } => MidgeStatus::InvalidModel,
        }
    }
}

/// Text for an unknown code.
const UNKNOWN: &[u8] = b"unknown status code\0";

/// The text of `status` as a static NUL-terminated string (never NULL; an
/// unknown code gives "unknown status code").
#[no_mangle]
pub extern "C" fn midge_status_text(status: i32) -> *const c_char {
    let text = ALL
        .iter()
        .find(|s| **s as i32 == status)
        .map_or(UNKNOWN, |s| s.text());
    text.as_ptr().cast()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_are_their_index_and_texts_are_one_nul_terminated_line() {
        for (i, s) in ALL.iter().enumerate() {
            assert_eq!(*s as i32, i as i32);
            let t = s.text();
            assert_eq!(t.iter().position(|&b| b == 0), Some(t.len() - 1), "{s:?}");
            assert!(t[..t.len() - 1].iter().all(|b| (0x20..0x7f).contains(b)));
        }
        let unknown = midge_status_text(ALL.len() as i32);
        assert_eq!(unknown, UNKNOWN.as_ptr().cast());
        assert_eq!(midge_status_text(-1), UNKNOWN.as_ptr().cast());
        assert_eq!(
            midge_status_text(7),
            MidgeStatus::CrcMismatch.text().as_ptr().cast()
        );
    }
}
