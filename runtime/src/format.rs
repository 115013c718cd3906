//! The flat layout, version 1, byte by byte: the field tables, checked views
//! over byte buffers, and the record reprs with `parse`/`emit` that mirror
//! each other. `model` builds on these to validate a whole file; `write` to emit one.
//! FORMAT.md describes the same layout in prose; this module is the one definition.

use crate::error::{Error, Text};
use crate::repr::{Activation, ElemType, LayerHeader, Op, Quant, Shape, TensorRecord, Window};

/// First eight bytes of every model file.
pub const MAGIC: [u8; 8] = *b"MIDGE\0\r\n";
/// The format version this runtime reads and writes.
pub const VERSION: u16 = 1;
/// Every section and every blob starts at a multiple of this, counted from
/// file start; every tensor's workspace offset, the workspace length's
/// rounding and the workspace buffer's address are multiples of it too.
pub const ALIGN: usize = 8;

/// Most layers a model may have (FORMAT.md, "Limits"): 2^15, far beyond
/// any network a microcontroller runs, and it bounds the validation work.
pub const MAX_LAYERS: usize = 32768;
/// Largest finite binary16 value (IEEE 754; common practice): the bound of
/// fp16 clamps.
pub const F16_MAX: f32 = 65504.0;
/// Largest scale of an I8 or U8 tensor (2^32; FORMAT.md, "Limits").
pub const SCALE_MAX: f32 = (1u64 << 32) as f32;
/// Smallest scale of an I8 or U8 tensor (2^−64; FORMAT.md, "Limits").
pub const SCALE_MIN: f32 = 1.0 / SCALE_MAX / SCALE_MAX;

/// Whether `scale` is allowed for an I8 or U8 tensor: finite and in
/// `SCALE_MIN..=SCALE_MAX` (NaN fails both comparisons).
pub fn scale_in_range(scale: f32) -> bool {
    (SCALE_MIN..=SCALE_MAX).contains(&scale)
}

/// Named byte ranges of each structure (offsets inside the structure).
pub mod field {
    pub type Field = core::ops::Range<usize>;

    /// The fixed header at file offset 0. Not covered by the CRC.
    pub mod header {
        use super::Field;
        pub const MAGIC: Field = 0..8;
        pub const VERSION: Field = 8..10;
        pub const HEADER_LEN: Field = 10..12;
        pub const FILE_LEN: Field = 12..16;
        pub const CRC: Field = 16..20;
        pub const RESERVED: Field = 20..24;
        pub const LEN: usize = 24;
    }

    /// The model-info block right after the header (offsets relative to its
    /// start, which is file offset `header::LEN`). Covered by the CRC.
    pub mod info {
        use super::Field;
        pub const WORKSPACE_LEN: Field = 0..4;
        pub const OUTPUT: Field = 4..6;
        pub const TENSOR_COUNT: Field = 6..8;
        pub const LAYER_COUNT: Field = 8..10;
        pub const LABEL_COUNT: Field = 10..12;
        pub const RESERVED: Field = 12..16;
        /// Section table: (offset u32, length u32) each, offsets from file start.
        pub const TENSORS: Field = 16..24;
        pub const LAYERS: Field = 24..32;
        pub const BLOBS: Field = 32..40;
        pub const STRINGS: Field = 40..48;
        pub const LEN: usize = 48;
    }

    /// One tensor record in the tensor table.
    pub mod tensor {
        use super::Field;
        pub const H: Field = 0..2;
        pub const W: Field = 2..4;
        pub const C: Field = 4..6;
        pub const ELEM: usize = 6;
        pub const RESERVED: usize = 7;
        pub const SCALE: Field = 8..12;
        pub const ZERO_POINT: Field = 12..16;
        pub const OFFSET: Field = 16..20;
        pub const LEN: usize = 20;
    }

    /// One layer record in the layer table.
    pub mod layer {
        use super::Field;
        pub const OP: usize = 0;
        pub const ACT: usize = 1;
        pub const RESERVED_A: Field = 2..4;
        pub const INPUT_A: Field = 4..6;
        pub const INPUT_B: Field = 6..8;
        pub const OUTPUT: Field = 8..10;
        pub const RESERVED_B: Field = 10..12;
        pub const KH: Field = 12..14;
        pub const KW: Field = 14..16;
        pub const STRIDE_H: Field = 16..18;
        pub const STRIDE_W: Field = 18..20;
        pub const DIL_H: Field = 20..22;
        pub const DIL_W: Field = 22..24;
        pub const PAD_TOP: Field = 24..26;
        pub const PAD_LEFT: Field = 26..28;
        pub const PAD_BOTTOM: Field = 28..30;
        pub const PAD_RIGHT: Field = 30..32;
        pub const CLAMP_I8_MIN: Field = 32..36;
        pub const CLAMP_I8_MAX: Field = 36..40;
        pub const CLAMP_F32_MIN: Field = 40..44;
        pub const CLAMP_F32_MAX: Field = 44..48;
        /// Blob references: (offset u32 from file start, byte length u32).
        pub const WEIGHTS: Field = 48..56;
        pub const BIAS: Field = 56..64;
        pub const PARAMS: Field = 64..72;
        pub const LEN: usize = 72;
    }
}

/// File offset where the first section starts (header + model info).
pub const SECTIONS_START: usize = field::header::LEN + field::info::LEN;

// ---------------------------------------------------------------------------
// Little-endian accessors that cannot panic. Views check their length once in
// `new_checked`; these still go through `get` so that no byte can panic.

fn read<const N: usize>(b: &[u8], at: usize) -> [u8; N] {
    let mut out = [0u8; N];
    if let Some(s) = at.checked_add(N).and_then(|end| b.get(at..end)) {
        out.copy_from_slice(s);
    }
    out
}

fn write(b: &mut [u8], at: usize, v: &[u8]) {
    if let Some(s) = at.checked_add(v.len()).and_then(|end| b.get_mut(at..end)) {
        s.copy_from_slice(v);
    }
}

pub(crate) fn rd_u8(b: &[u8], at: usize) -> u8 {
    b.get(at).copied().unwrap_or(0)
}
pub(crate) fn rd_u16(b: &[u8], f: field::Field) -> u16 {
    u16::from_le_bytes(read(b, f.start))
}
pub(crate) fn rd_u32(b: &[u8], f: field::Field) -> u32 {
    u32::from_le_bytes(read(b, f.start))
}
pub(crate) fn rd_i32(b: &[u8], f: field::Field) -> i32 {
    i32::from_le_bytes(read(b, f.start))
}
fn wr_u8(b: &mut [u8], at: usize, v: u8) {
    write(b, at, &[v]);
}
fn wr_u16(b: &mut [u8], f: field::Field, v: u16) {
    write(b, f.start, &v.to_le_bytes());
}
fn wr_u32(b: &mut [u8], f: field::Field, v: u32) {
    write(b, f.start, &v.to_le_bytes());
}
fn wr_i32(b: &mut [u8], f: field::Field, v: i32) {
    write(b, f.start, &v.to_le_bytes());
}

fn need(buf: &[u8], len: usize) -> Result<(), Error> {
    if buf.len() < len {
        Err(Error::Truncated {
            needed: len,
            available: buf.len(),
        })
    } else {
        Ok(())
    }
}

// ---------------------------------------------------------------------------
// Sections and blob references.

/// A byte range of the file: offset from file start and length.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct Span {
    pub offset: u32,
    pub len: u32,
}

impl Span {
    pub const EMPTY: Span = Span { offset: 0, len: 0 };

    /// `offset..offset+len` as usize, or `None` on overflow.
    pub fn range(self) -> Option<core::ops::Range<usize>> {
        let start = self.offset as usize;
        let end = start.checked_add(self.len as usize)?;
        Some(start..end)
    }

    fn read(b: &[u8], f: field::Field) -> Span {
        Span {
            offset: rd_u32(b, f.start..f.start + 4),
            len: rd_u32(b, f.start + 4..f.end),
        }
    }

    fn write(self, b: &mut [u8], f: field::Field) {
        wr_u32(b, f.start..f.start + 4, self.offset);
        wr_u32(b, f.start + 4..f.end, self.len);
    }
}

/// `v` rounded up to the next multiple of `ALIGN`, or `None` on overflow.
pub fn align_up(v: usize) -> Option<usize> {
    v.checked_add(ALIGN - 1).map(|x| x / ALIGN * ALIGN)
}

// ---------------------------------------------------------------------------
// Header.

/// Checked view of the fixed header.
#[derive(Debug, Clone)]
pub struct HeaderView<T: AsRef<[u8]>> {
    buf: T,
}

impl<T: AsRef<[u8]>> HeaderView<T> {
    /// Wraps `buf` after checking it holds the whole header.
    pub fn new_checked(buf: T) -> Result<Self, Error> {
        need(buf.as_ref(), field::header::LEN)?;
        Ok(HeaderView { buf })
    }
    pub fn magic(&self) -> [u8; 8] {
        read(self.buf.as_ref(), field::header::MAGIC.start)
    }
    pub fn version(&self) -> u16 {
        rd_u16(self.buf.as_ref(), field::header::VERSION)
    }
    pub fn header_len(&self) -> u16 {
        rd_u16(self.buf.as_ref(), field::header::HEADER_LEN)
    }
    pub fn file_len(&self) -> u32 {
        rd_u32(self.buf.as_ref(), field::header::FILE_LEN)
    }
    pub fn crc(&self) -> u32 {
        rd_u32(self.buf.as_ref(), field::header::CRC)
    }
    pub fn reserved(&self) -> u32 {
        rd_u32(self.buf.as_ref(), field::header::RESERVED)
    }
}

impl<T: AsRef<[u8]> + AsMut<[u8]>> HeaderView<T> {
    pub fn set_magic(&mut self, m: [u8; 8]) {
        write(self.buf.as_mut(), field::header::MAGIC.start, &m);
    }
    pub fn set_version(&mut self, v: u16) {
        wr_u16(self.buf.as_mut(), field::header::VERSION, v)
    }
    pub fn set_header_len(&mut self, v: u16) {
        wr_u16(self.buf.as_mut(), field::header::HEADER_LEN, v)
    }
    pub fn set_file_len(&mut self, v: u32) {
        wr_u32(self.buf.as_mut(), field::header::FILE_LEN, v)
    }
    pub fn set_crc(&mut self, v: u32) {
        wr_u32(self.buf.as_mut(), field::header::CRC, v)
    }
    pub fn set_reserved(&mut self, v: u32) {
        wr_u32(self.buf.as_mut(), field::header::RESERVED, v)
    }
}

/// The header as values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct FileHeader {
    pub file_len: u32,
    pub crc: u32,
}

impl FileHeader {
    /// Reads and checks magic, version, header length and the reserved word.
    /// File length and CRC are returned unchecked (they need the whole buffer).
    pub fn parse<T: AsRef<[u8]>>(view: &HeaderView<T>) -> Result<FileHeader, Error> {
        if view.magic() != MAGIC {
            return Err(Error::BadMagic);
        }
        let version = view.version();
        if version != VERSION {
            return Err(Error::UnsupportedVersion {
                found: version,
                supported: VERSION,
            });
        }
        if view.header_len() as usize != field::header::LEN {
            return Err(Error::Layout {
                what: text!("header length"),
                expected: field::header::LEN,
                found: view.header_len() as usize,
            });
        }
        if view.reserved() != 0 {
            return Err(Error::BadField {
                what: text!("header reserved word"),
                value: view.reserved(),
            });
        }
        Ok(FileHeader {
            file_len: view.file_len(),
            crc: view.crc(),
        })
    }

    pub fn emit<T: AsRef<[u8]> + AsMut<[u8]>>(&self, view: &mut HeaderView<T>) {
        view.set_magic(MAGIC);
        view.set_version(VERSION);
        view.set_header_len(field::header::LEN as u16);
        view.set_file_len(self.file_len);
        view.set_crc(self.crc);
        view.set_reserved(0);
    }
}

// ---------------------------------------------------------------------------
// Model info and section table.

/// Checked view of the model-info block (starts at file offset `header::LEN`).
#[derive(Debug, Clone)]
pub struct InfoView<T: AsRef<[u8]>> {
    buf: T,
}

impl<T: AsRef<[u8]>> InfoView<T> {
    pub fn new_checked(buf: T) -> Result<Self, Error> {
        need(buf.as_ref(), field::info::LEN)?;
        Ok(InfoView { buf })
    }
    pub fn workspace_len(&self) -> u32 {
        rd_u32(self.buf.as_ref(), field::info::WORKSPACE_LEN)
    }
    pub fn output(&self) -> u16 {
        rd_u16(self.buf.as_ref(), field::info::OUTPUT)
    }
    pub fn tensor_count(&self) -> u16 {
        rd_u16(self.buf.as_ref(), field::info::TENSOR_COUNT)
    }
    pub fn layer_count(&self) -> u16 {
        rd_u16(self.buf.as_ref(), field::info::LAYER_COUNT)
    }
    pub fn label_count(&self) -> u16 {
        rd_u16(self.buf.as_ref(), field::info::LABEL_COUNT)
    }
    pub fn reserved(&self) -> u32 {
        rd_u32(self.buf.as_ref(), field::info::RESERVED)
    }
    pub fn tensors(&self) -> Span {
        Span::read(self.buf.as_ref(), field::info::TENSORS)
    }
    pub fn layers(&self) -> Span {
        Span::read(self.buf.as_ref(), field::info::LAYERS)
    }
    pub fn blobs(&self) -> Span {
        Span::read(self.buf.as_ref(), field::info::BLOBS)
    }
    pub fn strings(&self) -> Span {
        Span::read(self.buf.as_ref(), field::info::STRINGS)
    }
}

/// The model-info block as values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ModelInfo {
    pub workspace_len: u32,
    pub output: u16,
    pub tensor_count: u16,
    pub layer_count: u16,
    pub label_count: u16,
    pub tensors: Span,
    pub layers: Span,
    pub blobs: Span,
    pub strings: Span,
}

impl ModelInfo {
    /// Reads the block and checks the reserved word; section placement is
    /// checked against `canonical_sections` by the model loader.
    pub fn parse<T: AsRef<[u8]>>(view: &InfoView<T>) -> Result<ModelInfo, Error> {
        if view.reserved() != 0 {
            return Err(Error::BadField {
                what: text!("model-info reserved word"),
                value: view.reserved(),
            });
        }
        Ok(ModelInfo {
            workspace_len: view.workspace_len(),
            output: view.output(),
            tensor_count: view.tensor_count(),
            layer_count: view.layer_count(),
            label_count: view.label_count(),
            tensors: view.tensors(),
            layers: view.layers(),
            blobs: view.blobs(),
            strings: view.strings(),
        })
    }

    pub fn emit<T: AsRef<[u8]> + AsMut<[u8]>>(&self, view: &mut InfoView<T>) {
        let b = view.buf.as_mut();
        wr_u32(b, field::info::WORKSPACE_LEN, self.workspace_len);
        wr_u16(b, field::info::OUTPUT, self.output);
        wr_u16(b, field::info::TENSOR_COUNT, self.tensor_count);
        wr_u16(b, field::info::LAYER_COUNT, self.layer_count);
        wr_u16(b, field::info::LABEL_COUNT, self.label_count);
        wr_u32(b, field::info::RESERVED, 0);
        self.tensors.write(b, field::info::TENSORS);
        self.layers.write(b, field::info::LAYERS);
        self.blobs.write(b, field::info::BLOBS);
        self.strings.write(b, field::info::STRINGS);
    }
}

/// Where the canonical layout puts each section, given the counts and the
/// byte lengths of the blob area and the strings: tensor table at
/// `SECTIONS_START`, then the layer table, the blob area and the strings,
/// each starting at the previous end rounded up to `ALIGN`. Returns
/// `[tensors, layers, blobs, strings]` and the file length (strings end
/// rounded up to `ALIGN`), or `None` if a value does not fit in u32.
pub fn canonical_sections(
    tensor_count: u16,
    layer_count: u16,
    blobs_len: u32,
    strings_len: u32,
) -> Option<([Span; 4], u32)> {
    let lens = [
        (tensor_count as usize).checked_mul(field::tensor::LEN)?,
        (layer_count as usize).checked_mul(field::layer::LEN)?,
        blobs_len as usize,
        strings_len as usize,
    ];
    let mut spans = [Span::EMPTY; 4];
    let mut cursor = SECTIONS_START;
    for (span, len) in spans.iter_mut().zip(lens) {
        let start = align_up(cursor)?;
        *span = Span {
            offset: u32::try_from(start).ok()?,
            len: u32::try_from(len).ok()?,
        };
        cursor = start.checked_add(len)?;
    }
    let file_len = u32::try_from(align_up(cursor)?).ok()?;
    Some((spans, file_len))
}

// ---------------------------------------------------------------------------
// Tensor records.

/// Checked view of one tensor record.
#[derive(Debug, Clone)]
pub struct TensorView<T: AsRef<[u8]>> {
    buf: T,
}

impl<T: AsRef<[u8]>> TensorView<T> {
    pub fn new_checked(buf: T) -> Result<Self, Error> {
        need(buf.as_ref(), field::tensor::LEN)?;
        Ok(TensorView { buf })
    }
    pub fn shape(&self) -> Shape {
        let b = self.buf.as_ref();
        Shape::new(
            rd_u16(b, field::tensor::H),
            rd_u16(b, field::tensor::W),
            rd_u16(b, field::tensor::C),
        )
    }
    pub fn elem(&self) -> u8 {
        rd_u8(self.buf.as_ref(), field::tensor::ELEM)
    }
    pub fn reserved(&self) -> u8 {
        rd_u8(self.buf.as_ref(), field::tensor::RESERVED)
    }
    pub fn scale_bits(&self) -> u32 {
        rd_u32(self.buf.as_ref(), field::tensor::SCALE)
    }
    pub fn zero_point(&self) -> i32 {
        rd_i32(self.buf.as_ref(), field::tensor::ZERO_POINT)
    }
    pub fn offset(&self) -> u32 {
        rd_u32(self.buf.as_ref(), field::tensor::OFFSET)
    }
}

impl TensorRecord {
    /// Reads one record and checks each field on its own: element type,
    /// non-empty shape, quantization allowed for the element type
    /// (I8: scale in `SCALE_MIN..=SCALE_MAX`, zero point in −128..=127; U8:
    /// scale in that range, zero point 0; F16: scale 1.0, zero point 0), and the reserved byte.
    /// `index` is for error context only.
    pub fn parse<T: AsRef<[u8]>>(
        view: &TensorView<T>,
        index: usize,
    ) -> Result<TensorRecord, Error> {
        let bad = |what, value| Error::TensorField { index, what, value };
        let elem =
            ElemType::from_u8(view.elem()).ok_or(bad(text!("element type"), view.elem() as u32))?;
        if view.reserved() != 0 {
            return Err(bad(text!("reserved byte"), view.reserved() as u32));
        }
        let shape = view.shape();
        if shape.h == 0 || shape.w == 0 || shape.c == 0 {
            return Err(Error::Tensor {
                index,
                problem: text!("shape has a zero dimension"),
            });
        }
        let scale = f32::from_bits(view.scale_bits());
        let zero_point = view.zero_point();
        let scale_ok = match elem {
            ElemType::F16 => view.scale_bits() == 1.0f32.to_bits(),
            ElemType::I8 | ElemType::U8 => scale_in_range(scale),
        };
        if !scale_ok {
            return Err(Error::TensorScale {
                index,
                bits: view.scale_bits(),
            });
        }
        let zp_ok = match elem {
            ElemType::I8 => (-128..=127).contains(&zero_point),
            ElemType::U8 | ElemType::F16 => zero_point == 0,
        };
        if !zp_ok {
            return Err(bad(text!("zero point"), zero_point as u32));
        }
        Ok(TensorRecord {
            shape,
            elem,
            quant: Quant { scale, zero_point },
            offset: view.offset(),
        })
    }

    pub fn emit<T: AsRef<[u8]> + AsMut<[u8]>>(&self, view: &mut TensorView<T>) {
        let b = view.buf.as_mut();
        wr_u16(b, field::tensor::H, self.shape.h);
        wr_u16(b, field::tensor::W, self.shape.w);
        wr_u16(b, field::tensor::C, self.shape.c);
        wr_u8(b, field::tensor::ELEM, self.elem as u8);
        wr_u8(b, field::tensor::RESERVED, 0);
        wr_u32(b, field::tensor::SCALE, self.quant.scale.to_bits());
        wr_i32(b, field::tensor::ZERO_POINT, self.quant.zero_point);
        wr_u32(b, field::tensor::OFFSET, self.offset);
    }
}

// ---------------------------------------------------------------------------
// Layer records.

/// Checked view of one layer record.
#[derive(Debug, Clone)]
pub struct LayerView<T: AsRef<[u8]>> {
    buf: T,
}

impl<T: AsRef<[u8]>> LayerView<T> {
    pub fn new_checked(buf: T) -> Result<Self, Error> {
        need(buf.as_ref(), field::layer::LEN)?;
        Ok(LayerView { buf })
    }
    pub fn op(&self) -> u8 {
        rd_u8(self.buf.as_ref(), field::layer::OP)
    }
    pub fn act(&self) -> u8 {
        rd_u8(self.buf.as_ref(), field::layer::ACT)
    }
    pub fn reserved(&self) -> (u16, u16) {
        let b = self.buf.as_ref();
        (
            rd_u16(b, field::layer::RESERVED_A),
            rd_u16(b, field::layer::RESERVED_B),
        )
    }
    pub fn inputs(&self) -> [u16; 2] {
        let b = self.buf.as_ref();
        [
            rd_u16(b, field::layer::INPUT_A),
            rd_u16(b, field::layer::INPUT_B),
        ]
    }
    pub fn output(&self) -> u16 {
        rd_u16(self.buf.as_ref(), field::layer::OUTPUT)
    }
    pub fn window(&self) -> Window {
        use field::layer as f;
        let b = self.buf.as_ref();
        Window {
            kh: rd_u16(b, f::KH),
            kw: rd_u16(b, f::KW),
            stride_h: rd_u16(b, f::STRIDE_H),
            stride_w: rd_u16(b, f::STRIDE_W),
            dil_h: rd_u16(b, f::DIL_H),
            dil_w: rd_u16(b, f::DIL_W),
            pad_top: rd_u16(b, f::PAD_TOP),
            pad_left: rd_u16(b, f::PAD_LEFT),
            pad_bottom: rd_u16(b, f::PAD_BOTTOM),
            pad_right: rd_u16(b, f::PAD_RIGHT),
        }
    }
    pub fn clamp_i8(&self) -> [i32; 2] {
        let b = self.buf.as_ref();
        [
            rd_i32(b, field::layer::CLAMP_I8_MIN),
            rd_i32(b, field::layer::CLAMP_I8_MAX),
        ]
    }
    pub fn clamp_f32_bits(&self) -> [u32; 2] {
        let b = self.buf.as_ref();
        [
            rd_u32(b, field::layer::CLAMP_F32_MIN),
            rd_u32(b, field::layer::CLAMP_F32_MAX),
        ]
    }
    pub fn weights(&self) -> Span {
        Span::read(self.buf.as_ref(), field::layer::WEIGHTS)
    }
    pub fn bias(&self) -> Span {
        Span::read(self.buf.as_ref(), field::layer::BIAS)
    }
    pub fn params(&self) -> Span {
        Span::read(self.buf.as_ref(), field::layer::PARAMS)
    }
}

/// One layer record as values: the fixed header and its three blob references.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LayerRecord {
    pub header: LayerHeader,
    pub weights: Span,
    pub bias: Span,
    pub params: Span,
}

impl LayerRecord {
    /// Reads one record and checks each field on its own: op and activation
    /// values, reserved words zero, second input 0 unless the op is `Add`,
    /// window all zero unless the op has one. Ids, shapes and blobs are
    /// checked by the model loader, which sees the whole file.
    pub fn parse<T: AsRef<[u8]>>(view: &LayerView<T>, index: usize) -> Result<LayerRecord, Error> {
        let bad = |what, value| Error::LayerField { index, what, value };
        let op = Op::from_u8(view.op()).ok_or(bad(text!("op"), view.op() as u32))?;
        let act =
            Activation::from_u8(view.act()).ok_or(bad(text!("activation"), view.act() as u32))?;
        let (ra, rb) = view.reserved();
        if ra != 0 || rb != 0 {
            return Err(bad(text!("reserved word"), (ra as u32) << 16 | rb as u32));
        }
        let inputs = view.inputs();
        if op.arity() < 2 && inputs[1] != 0 {
            return Err(bad(
                text!("second input (must be 0 for a one-input op)"),
                inputs[1] as u32,
            ));
        }
        let window = view.window();
        if !op.has_window() && window != Window::default() {
            return Err(Error::Layer {
                index,
                problem: text!("window fields must be zero for an op without a window"),
            });
        }
        let [lo, hi] = view.clamp_f32_bits();
        Ok(LayerRecord {
            header: LayerHeader {
                op,
                act,
                inputs,
                output: view.output(),
                window,
                clamp_i8: view.clamp_i8(),
                clamp_f32: [f32::from_bits(lo), f32::from_bits(hi)],
            },
            weights: view.weights(),
            bias: view.bias(),
            params: view.params(),
        })
    }

    pub fn emit<T: AsRef<[u8]> + AsMut<[u8]>>(&self, view: &mut LayerView<T>) {
        use field::layer as f;
        let h = &self.header;
        let b = view.buf.as_mut();
        wr_u8(b, f::OP, h.op as u8);
        wr_u8(b, f::ACT, h.act as u8);
        wr_u16(b, f::RESERVED_A, 0);
        wr_u16(b, f::INPUT_A, h.inputs[0]);
        wr_u16(b, f::INPUT_B, h.inputs[1]);
        wr_u16(b, f::OUTPUT, h.output);
        wr_u16(b, f::RESERVED_B, 0);
        let w = &h.window;
        wr_u16(b, f::KH, w.kh);
        wr_u16(b, f::KW, w.kw);
        wr_u16(b, f::STRIDE_H, w.stride_h);
        wr_u16(b, f::STRIDE_W, w.stride_w);
        wr_u16(b, f::DIL_H, w.dil_h);
        wr_u16(b, f::DIL_W, w.dil_w);
        wr_u16(b, f::PAD_TOP, w.pad_top);
        wr_u16(b, f::PAD_LEFT, w.pad_left);
        wr_u16(b, f::PAD_BOTTOM, w.pad_bottom);
        wr_u16(b, f::PAD_RIGHT, w.pad_right);
        wr_i32(b, f::CLAMP_I8_MIN, h.clamp_i8[0]);
        wr_i32(b, f::CLAMP_I8_MAX, h.clamp_i8[1]);
        wr_u32(b, f::CLAMP_F32_MIN, h.clamp_f32[0].to_bits());
        wr_u32(b, f::CLAMP_F32_MAX, h.clamp_f32[1].to_bits());
        self.weights.write(b, f::WEIGHTS);
        self.bias.write(b, f::BIAS);
        self.params.write(b, f::PARAMS);
    }
}

// ---------------------------------------------------------------------------
// Blob typing.

/// Element type of one blob.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum BlobType {
    /// The layer has no such blob: its reference must be (0, 0).
    None,
    I8,
    F16,
    I32,
    F32,
}

impl BlobType {
    /// Bytes per element (0 for `None`).
    pub const fn elem_size(self) -> usize {
        match self {
            BlobType::None => 0,
            BlobType::I8 => 1,
            BlobType::F16 => 2,
            BlobType::I32 | BlobType::F32 => 4,
        }
    }
}

/// The blob types a layer must carry, decided by its op and the element
/// types of its tensors (see FORMAT.md, "Blob types").
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct BlobTypes {
    pub weights: BlobType,
    pub bias: BlobType,
    pub params: BlobType,
    /// Params are per-output-channel `[multiplier, rshift]` pairs (`Params::Requant`).
    pub requant: bool,
}

/// Checks the element types of a layer's tensors against its op and returns
/// the blob types it must carry. `b` is the second input of `Add`.
pub fn blob_types(
    op: Op,
    a: ElemType,
    b: Option<ElemType>,
    out: ElemType,
) -> Result<BlobTypes, Text> {
    use BlobType as T;
    use ElemType as E;
    const NONE: BlobTypes = BlobTypes {
        weights: T::None,
        bias: T::None,
        params: T::None,
        requant: false,
    };
    let same = |what| {
        if a == out && a != E::U8 && (b.is_none() || b == Some(a)) {
            Ok(a)
        } else {
            Err(what)
        }
    };
    match op {
        Op::Pixels => match (a, out) {
            (E::U8, E::I8) => Ok(BlobTypes {
                params: T::I32,
                ..NONE
            }),
            (E::U8, E::F16) => Ok(BlobTypes {
                params: T::F32,
                ..NONE
            }),
            _ => Err(text!("pixels reads U8 and writes I8 or F16")),
        },
        Op::Quantize => match (a, out) {
            (E::F16, E::I8) => Ok(NONE),
            _ => Err(text!("quantize reads F16 and writes I8")),
        },
        Op::Dequantize => match (a, out) {
            (E::I8, E::F16) => Ok(NONE),
            _ => Err(text!("dequantize reads I8 and writes F16")),
        },
        Op::Conv2d | Op::Depthwise | Op::Dense => {
            match same(text!(
                "conv2d, depthwise and dense read and write the same type, I8 or F16"
            ))? {
                E::I8 => Ok(BlobTypes {
                    weights: T::I8,
                    bias: T::I32,
                    params: T::I32,
                    requant: true,
                }),
                _ => Ok(BlobTypes {
                    weights: T::F16,
                    bias: T::F32,
                    ..NONE
                }),
            }
        }
        Op::Add => match same(text!("add reads two tensors of its output type, I8 or F16"))? {
            E::I8 => Ok(BlobTypes {
                params: T::I32,
                ..NONE
            }),
            _ => Ok(NONE),
        },
        Op::MaxPool | Op::AvgPool | Op::GlobalAvgPool => {
            same(text!("pooling reads and writes the same type, I8 or F16")).map(|_| NONE)
        }
    }
}

// ---------------------------------------------------------------------------
// Strings section: the model name, then `label_count` labels, each as a
// u16 little-endian byte length followed by that many UTF-8 bytes.

/// Reads the string at `*pos` and advances `pos`; `None` when it does not fit
/// or is not UTF-8.
pub fn read_string<'a>(strings: &'a [u8], pos: &mut usize) -> Option<&'a str> {
    let mut at = *pos;
    let s = core::str::from_utf8(string_bytes(strings, &mut at)?).ok()?;
    *pos = at;
    Some(s)
}

/// The bytes of the string at `*pos` (length prefix read, UTF-8 not checked)
/// and advances `pos`; `None` when it does not fit.
pub fn string_bytes<'a>(strings: &'a [u8], pos: &mut usize) -> Option<&'a [u8]> {
    let len_end = pos.checked_add(2)?;
    let len = u16::from_le_bytes(strings.get(*pos..len_end)?.try_into().ok()?) as usize;
    let end = len_end.checked_add(len)?;
    let s = strings.get(len_end..end)?;
    *pos = end;
    Some(s)
}

/// Whether `b` is well-formed UTF-8: the same answer as
/// `core::str::from_utf8(b).is_ok()`, in a loop that links no 256-byte
/// width table (parse checks the strings with it; `read_string` still
/// returns `&str` through `core`). The byte ranges are the Unicode
/// Standard's well-formed sequences (chapter 3, table 3-7): no overlong
/// forms, no surrogates, nothing above U+10FFFF.
pub fn is_utf8(b: &[u8]) -> bool {
    let mut i = 0;
    while let Some(&lead) = b.get(i) {
        // Continuation bytes after the lead, and the range of the first.
        let (more, lo, hi) = match lead {
            0x00..=0x7F => (0, 0, 0),
            0xC2..=0xDF => (1, 0x80, 0xBF),
            0xE0 => (2, 0xA0, 0xBF),
            0xE1..=0xEC | 0xEE..=0xEF => (2, 0x80, 0xBF),
            0xED => (2, 0x80, 0x9F),
            0xF0 => (3, 0x90, 0xBF),
            0xF1..=0xF3 => (3, 0x80, 0xBF),
            0xF4 => (3, 0x80, 0x8F),
            _ => return false,
        };
        for k in 1..=more {
            let (lo, hi) = if k == 1 { (lo, hi) } else { (0x80, 0xBF) };
            match b.get(i + k) {
                Some(&c) if lo <= c && c <= hi => {}
                _ => return false,
            }
        }
        i += 1 + more;
    }
    true
}

/// Bytes one string takes in the strings section, or `None` if longer than u16::MAX.
pub fn string_len(s: &str) -> Option<usize> {
    u16::try_from(s.len()).ok().map(|l| 2 + l as usize)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn utf8_check_agrees_with_core() {
        // Reference: core::str::from_utf8 (the standard library's validator),
        // on every sequence of one and two bytes, every three-byte sequence
        // with a three-byte lead, and four-byte leads over all second bytes.
        let same = |b: &[u8]| {
            assert_eq!(is_utf8(b), core::str::from_utf8(b).is_ok(), "{b:02x?}");
        };
        same(&[]);
        for a in 0..=255u8 {
            same(&[a]);
            for b in 0..=255u8 {
                same(&[a, b]);
                if (0xE0..=0xEF).contains(&a) {
                    for c in 0..=255u8 {
                        same(&[a, b, c]);
                    }
                }
                if a >= 0xF0 {
                    for c in [0x7F, 0x80, 0xBF, 0xC0] {
                        for d in [0x7F, 0x80, 0xBF, 0xC0] {
                            same(&[a, b, c, d]);
                            same(&[b'x', a, b, c, d, b'y']);
                        }
                    }
                }
            }
        }
        // Unicode Standard table 3-7 edges (from memory): C0 80 is an
        // overlong NUL, ED A0 80 the surrogate U+D800, F4 90 80 80 is above
        // U+10FFFF; F4 8F BF BF is U+10FFFF and well formed.
        assert!(!is_utf8(&[0xC0, 0x80]));
        assert!(!is_utf8(&[0xED, 0xA0, 0x80]));
        assert!(!is_utf8(&[0xF4, 0x90, 0x80, 0x80]));
        assert!(is_utf8(&[0xF4, 0x8F, 0xBF, 0xBF]));
        assert!(is_utf8("größe × 2".as_bytes()));
    }

    #[test]
    fn field_tables_are_contiguous() {
        // Each table's ranges tile its record without gaps or overlaps.
        use field::*;
        let h = [
            header::MAGIC,
            header::VERSION,
            header::HEADER_LEN,
            header::FILE_LEN,
            header::CRC,
            header::RESERVED,
        ];
        let i = [
            info::WORKSPACE_LEN,
            info::OUTPUT,
            info::TENSOR_COUNT,
            info::LAYER_COUNT,
            info::LABEL_COUNT,
            info::RESERVED,
            info::TENSORS,
            info::LAYERS,
            info::BLOBS,
            info::STRINGS,
        ];
        let t = [
            tensor::H,
            tensor::W,
            tensor::C,
            tensor::ELEM..tensor::ELEM + 1,
            tensor::RESERVED..tensor::RESERVED + 1,
            tensor::SCALE,
            tensor::ZERO_POINT,
            tensor::OFFSET,
        ];
        let l = [
            layer::OP..layer::OP + 1,
            layer::ACT..layer::ACT + 1,
            layer::RESERVED_A,
            layer::INPUT_A,
            layer::INPUT_B,
            layer::OUTPUT,
            layer::RESERVED_B,
            layer::KH,
            layer::KW,
            layer::STRIDE_H,
            layer::STRIDE_W,
            layer::DIL_H,
            layer::DIL_W,
            layer::PAD_TOP,
            layer::PAD_LEFT,
            layer::PAD_BOTTOM,
            layer::PAD_RIGHT,
            layer::CLAMP_I8_MIN,
            layer::CLAMP_I8_MAX,
            layer::CLAMP_F32_MIN,
            layer::CLAMP_F32_MAX,
            layer::WEIGHTS,
            layer::BIAS,
            layer::PARAMS,
        ];
        for (ranges, len) in [
            (&h[..], header::LEN),
            (&i[..], info::LEN),
            (&t[..], tensor::LEN),
            (&l[..], layer::LEN),
        ] {
            let mut at = 0;
            for r in ranges {
                assert_eq!(r.start, at);
                assert!(r.end > r.start);
                at = r.end;
            }
            assert_eq!(at, len);
        }
    }

    #[test]
    fn canonical_sections_align() {
        // 3 tensors (60 bytes) from 72 -> 132, layers start at 136.
        let (s, file_len) = canonical_sections(3, 1, 12, 5).unwrap();
        assert_eq!(
            s[0],
            Span {
                offset: 72,
                len: 60
            }
        );
        assert_eq!(
            s[1],
            Span {
                offset: 136,
                len: 72
            }
        );
        assert_eq!(
            s[2],
            Span {
                offset: 208,
                len: 12
            }
        );
        assert_eq!(
            s[3],
            Span {
                offset: 224,
                len: 5
            }
        );
        assert_eq!(file_len, 232);
    }

    #[test]
    fn tensor_record_rejects_bad_fields() {
        let rec = TensorRecord {
            shape: Shape::new(2, 3, 4),
            elem: ElemType::I8,
            quant: Quant {
                scale: 0.5,
                zero_point: -3,
            },
            offset: 16,
        };
        let mut buf = [0u8; field::tensor::LEN];
        rec.emit(&mut TensorView::new_checked(&mut buf[..]).unwrap());
        let v = TensorView::new_checked(&buf[..]).unwrap();
        assert_eq!(TensorRecord::parse(&v, 0).unwrap(), rec);
        for (at, byte) in [(6usize, 7u8), (7, 1), (0, 0), (15, 0), (11, 0xFF)] {
            let mut b = buf;
            b[at] = byte;
            if at == 0 {
                b[1] = 0;
            }
            let v = TensorView::new_checked(&b[..]).unwrap();
            assert!(TensorRecord::parse(&v, 0).is_err(), "byte {at} = {byte}");
        }
        assert!(TensorView::new_checked(&buf[..19]).is_err());
    }
}
