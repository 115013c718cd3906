//! The one error type of the runtime: every way a model file can be rejected
//! by `parse`, and the few ways `run` can refuse its buffers; and `Text`, the
//! description inside an error (words on the host, a numeric code on firmware).

use core::fmt;

use crate::repr::{ElemType, Op};

/// What an error says about the part it names ("tensor id", "no such
/// layer"). With the `text` feature (host tools; `std` implies it) it holds
/// the words; without it, only their CRC-32 (`crc::crc32` of the UTF-8
/// bytes, computed at compile time by `text!`), so firmware links a 4-byte
/// code per site instead of the sentence. `code()` is the same number in
/// both builds, so a code a device logs names the host's text.
///
/// ```
/// use midge_runtime::Text;
///
/// let t = Text::new("tensor id");
/// // CRC-32/ISO-HDLC of b"tensor id": 0x998bdbbb from Python 3's
/// // zlib.crc32 (an outside implementation), run on this machine.
/// assert_eq!(t.code(), 0x998b_dbbb);
/// assert_eq!(t, Text::new("tensor id"));
/// assert_ne!(t, Text::new("tensor count"));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Text(
    #[cfg(feature = "text")] &'static str,
    #[cfg(not(feature = "text"))] u32,
);

impl Text {
    /// The text `words` (or, without the `text` feature, its code).
    pub const fn new(words: &'static str) -> Text {
        #[cfg(feature = "text")]
        return Text(words);
        #[cfg(not(feature = "text"))]
        return Text(crate::crc::crc32(words.as_bytes()));
    }

    /// CRC-32 of the words: the same in every build.
    pub const fn code(self) -> u32 {
        #[cfg(feature = "text")]
        return crate::crc::crc32(self.0.as_bytes());
        #[cfg(not(feature = "text"))]
        return self.0;
    }

    /// The words (only built with the `text` feature).
    #[cfg(feature = "text")]
    pub const fn as_str(self) -> &'static str {
        self.0
    }
}

impl fmt::Display for Text {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        #[cfg(feature = "text")]
        return f.write_str(self.0);
        #[cfg(not(feature = "text"))]
        return write!(f, "check {:#010x}", self.0);
    }
}

/// `text!("words")`: a `Text` made at compile time, so without the `text`
/// feature the words never reach the binary.
macro_rules! text {
    ($words:literal) => {{
        const T: $crate::Text = $crate::Text::new($words);
        T
    }};
}

/// Printed (`Display`) as one line naming the part of the file and what was
/// expected; `Copy`, no allocation, so firmware can return or log it.
///
/// ```
/// use midge_runtime::{embed::Aligned, Error, Model};
///
/// let bytes = Aligned { bytes: *b"not a model file, just some text" };
/// let err = Model::parse(&bytes.bytes).unwrap_err();
/// assert_eq!(err, Error::BadMagic);
/// assert!(!err.to_string().contains('\n'));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Error {
    /// The buffer ends before a structure does.
    Truncated { needed: usize, available: usize },
    /// Not a midge model file.
    BadMagic,
    /// A format version this runtime does not read.
    UnsupportedVersion { found: u16, supported: u16 },
    /// CRC-32 over the body does not match the header.
    CrcMismatch { stored: u32, computed: u32 },
    /// The model buffer or a blob is not aligned for an in-place view.
    Misaligned { offset: usize, align: usize },
    /// A section or blob reaches outside the file.
    OutOfBounds {
        what: Text,
        offset: usize,
        len: usize,
        limit: usize,
    },
    /// A header or table field holds a value outside its allowed set.
    BadField { what: Text, value: u32 },
    /// A field of tensor record `index` holds a value outside its allowed set.
    TensorField {
        index: usize,
        what: Text,
        value: u32,
    },
    /// The scale of tensor record `index` (f32 bits) is outside its range:
    /// `format::SCALE_MIN..=SCALE_MAX` for I8 and U8, exactly 1.0 for F16.
    TensorScale { index: usize, bits: u32 },
    /// A field of layer record `index` holds a value outside its allowed set.
    LayerField {
        index: usize,
        what: Text,
        value: u32,
    },
    /// A structure is not where (or not as long as) the canonical layout puts it.
    Layout {
        what: Text,
        expected: usize,
        found: usize,
    },
    /// Layer `index` is inconsistent (shape, parameter, blob length, ...).
    Layer { index: usize, problem: Text },
    /// Tensor `index` is inconsistent (size, offset, overlap, ...).
    Tensor { index: usize, problem: Text },
    /// Layer `layer` writes tensor `output` over the workspace bytes of
    /// tensor `live`, which is still needed during or after that layer.
    Overlap {
        layer: usize,
        output: usize,
        live: usize,
    },
    /// Worst-case int32 accumulator of layer `index`, output channel `channel`, could overflow.
    AccumulatorOverflow { layer: usize, channel: usize },
    /// `run` got an input of the wrong byte length.
    InputLength { expected: usize, found: usize },
    /// `run` got a workspace of the wrong byte length.
    WorkspaceLength { expected: usize, found: usize },
    /// `run` got a workspace not aligned to 8 bytes.
    WorkspaceMisaligned,
    /// Layer `layer` computes `op` into `elem`, which the op set this build
    /// links (`Model<'_, OPS>`, `opset::OpSet`) leaves out.
    NotLinked {
        layer: usize,
        op: Op,
        elem: ElemType,
    },
    /// A patch plan (`patch::PatchPlan`) that this model cannot run: what is wrong.
    Patch { problem: &'static str },
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Error::Truncated { needed, available } => {
                write!(f, "truncated: needs {needed} bytes, has {available}")
            }
            Error::BadMagic => write!(f, "not a midge model (bad magic)"),
            Error::UnsupportedVersion { found, supported } => {
                write!(f, "format version {found} is not supported (this runtime reads version {supported})")
            }
            Error::CrcMismatch { stored, computed } => {
                write!(f, "CRC-32 mismatch: header says {stored:#010x}, body has {computed:#010x}")
            }
            Error::Misaligned { offset, align } => {
                write!(f, "data at offset {offset} is not aligned to {align} bytes")
            }
            Error::OutOfBounds { what, offset, len, limit } => {
                write!(f, "{what} at offset {offset} with length {len} exceeds {limit} bytes")
            }
            Error::BadField { what, value } => write!(f, "invalid {what}: {value}"),
            Error::TensorField { index, what, value } => {
                write!(f, "tensor {index}: invalid {what}: {value}")
            }
            Error::TensorScale { index, bits } => write!(
                f,
                "tensor {index}: scale {:e} is outside 2^-64..=2^32 (int8 and u8 tensors; fp16 tensors have exactly 1)",
                f32::from_bits(bits)
            ),
            Error::LayerField { index, what, value } => {
                write!(f, "layer {index}: invalid {what}: {value}")
            }
            Error::Layout { what, expected, found } => {
                write!(f, "{what}: expected {expected}, found {found}")
            }
            Error::Layer { index, problem } => write!(f, "layer {index}: {problem}"),
            Error::Tensor { index, problem } => write!(f, "tensor {index}: {problem}"),
            Error::Overlap { layer, output, live } => write!(
                f,
                "layer {layer}: output tensor {output} overlaps live tensor {live} in the workspace"
            ),
            Error::AccumulatorOverflow { layer, channel } => write!(
                f,
                "layer {layer}: worst-case int32 accumulator of output channel {channel} could overflow"
            ),
            Error::InputLength { expected, found } => {
                write!(f, "input is {found} bytes, model expects {expected}")
            }
            Error::WorkspaceLength { expected, found } => {
                write!(f, "workspace is {found} bytes, model needs {expected}")
            }
            Error::WorkspaceMisaligned => write!(f, "workspace is not aligned to 8 bytes"),
            Error::NotLinked { layer, op, elem } => write!(
                f,
                "layer {layer}: {op:?} with {elem:?} output is not in the op set this firmware links (regenerate it with `midge quantize --rust-module`)"
            ),
            Error::Patch { problem } => write!(f, "patch plan: {problem}"),
        }
    }
}

#[cfg(feature = "std")]
impl std::error::Error for Error {}
