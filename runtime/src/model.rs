//! A parsed model: `Model::parse` validates a whole file once (layout, CRC, records, graph
//! order, lifetimes, each layer via `ops`); `run` walks the layers with the kernels of the
//! model's op set. Also the one place for MAC/parameter counts and section sizes.

use crate::error::{Error, Text};
use crate::exec;
use crate::format::{
    self, blob_types, canonical_sections, field, is_utf8, read_string, string_bytes, BlobType,
    FileHeader, HeaderView, InfoView, LayerRecord, LayerView, ModelInfo, Span, TensorView, ALIGN,
    MAX_LAYERS, SECTIONS_START,
};
use crate::ops;
use crate::opset::{OpSet, ALL_OPS};
use crate::repr::{Bias, LayerRef, Op, Params, TensorRecord, Weights};

/// Per-layer hooks called by `Model::run_observed` (tracing, timing, dumps);
/// both default to doing nothing. See `Model::run_observed` for an example.
pub trait Observer {
    /// Called before layer `index` runs.
    fn before_layer(&mut self, index: usize) {
        let _ = index;
    }
    /// Called after layer `index` wrote `bytes`, the whole output tensor `output`.
    fn after_layer(&mut self, index: usize, output: &TensorRecord, bytes: &[u8]) {
        let _ = (index, output, bytes);
    }
}

/// The observer that does nothing; `run` uses it.
impl Observer for () {}

/// Byte counts of a model file by kind, for footprint reporting. They add up
/// to `total`, the file length.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct SectionSizes {
    /// Fixed header plus model-info block (section table included).
    pub header: usize,
    pub tensor_table: usize,
    pub layer_table: usize,
    /// Weight blobs (int8 or fp16).
    pub weights: usize,
    /// Bias blobs (int32 or f32).
    pub biases: usize,
    /// Parameter blobs: requantization multipliers/shifts, pixel and add parameters.
    pub params: usize,
    /// Model name and class labels with their length prefixes.
    pub strings: usize,
    /// Alignment padding between blobs and sections.
    pub padding: usize,
    pub total: usize,
}

/// A validated model borrowed from its bytes. Cheap to copy: it stores the
/// validated file slice and its model-info block; records are re-read on demand.
///
/// `OPS` (an `OpSet` bitmask) is what `run` can execute and so what a
/// build links: `Model::parse` gives every op (`ALL_OPS`);
/// `Model::<OPS>::parse_with_ops` with a model's own set (`midge quantize
/// --rust-module` writes it) links only that model's kernels.
#[derive(Clone, Copy, Debug)]
pub struct Model<'a, const OPS: u32 = ALL_OPS> {
    bytes: &'a [u8],
    info: ModelInfo,
}

/// Tensors whose last readers `check_lifetimes` finds per pass over the
/// layer table when it cannot allocate (256 bytes of stack).
#[cfg_attr(feature = "std", allow(dead_code))]
const LIFETIME_BLOCK: usize = 128;

fn is_aligned(bytes: &[u8], align: usize) -> bool {
    (bytes.as_ptr() as usize).is_multiple_of(align)
}

/// Byte length of a tensor computed in u64, so that huge shapes cannot
/// overflow on 32-bit targets.
fn tensor_len_u64(t: &TensorRecord) -> u64 {
    t.shape.h as u64 * t.shape.w as u64 * t.shape.c as u64 * t.elem.size() as u64
}

/// The bytes `from..to` are zero. Out of line: one copy (parse time).
#[inline(never)]
fn all_zero(bytes: &[u8], from: usize, to: usize, what: Text) -> Result<(), Error> {
    match bytes.get(from..to) {
        Some(pad) => match pad.iter().position(|&b| b != 0) {
            None => Ok(()),
            Some(p) => Err(Error::Layout {
                what,
                expected: 0,
                found: pad.get(p).copied().unwrap_or(0) as usize,
            }),
        },
        None => Err(Error::OutOfBounds {
            what,
            offset: from,
            len: to.saturating_sub(from),
            limit: bytes.len(),
        }),
    }
}

impl<'a> Model<'a> {
    /// Validates `bytes` (which must start 8-byte aligned) as a model file of
    /// this format version. Bytes past the header's file length are ignored.
    /// After `parse` succeeds, `run` fails only for wrong buffer lengths or
    /// alignment. Links every op; see `parse_with_ops` for firmware.
    ///
    /// ```
    /// # static MODEL: &[u8] = midge_runtime::embed_model!(concat!(
    /// #     env!("CARGO_MANIFEST_DIR"),
    /// #     "/fixtures/digits.midge"
    /// # ));
    /// use midge_runtime::{Error, Model};
    ///
    /// let model = Model::parse(MODEL)?;
    /// assert_eq!((model.name(), model.label_count()), ("digits", 10));
    /// // A damaged copy is refused with an error, never a panic.
    /// let mut copy = midge_runtime::embed::Aligned { bytes: [0u8; 16384] };
    /// let copy = &mut copy.bytes[..MODEL.len()];
    /// copy.copy_from_slice(MODEL);
    /// copy[100] ^= 1;
    /// assert!(matches!(Model::parse(copy), Err(Error::CrcMismatch { .. })));
    /// # Ok::<(), Error>(())
    /// ```
    pub fn parse(bytes: &'a [u8]) -> Result<Model<'a>, Error> {
        Model::parse_with_ops(bytes)
    }
}

impl<'a, const OPS: u32> Model<'a, OPS> {
    /// `parse` for a build that links only the op set `OPS`: a layer whose
    /// (op, output type) is outside it is refused with `Error::NotLinked`.
    /// `midge quantize --rust-module` writes a model's own set as a `const`.
    ///
    /// ```
    /// # static MODEL: &[u8] = midge_runtime::embed_model!(concat!(
    /// #     env!("CARGO_MANIFEST_DIR"),
    /// #     "/fixtures/digits.midge"
    /// # ));
    /// use midge_runtime::{ElemType, Error, Model, Op, OpSet};
    ///
    /// // The digits model's ops: camera bytes to int8, conv2d, max pool, dense.
    /// const OPS: u32 = OpSet::EMPTY
    ///     .with(Op::Pixels, ElemType::I8)
    ///     .with(Op::Conv2d, ElemType::I8)
    ///     .with(Op::MaxPool, ElemType::I8)
    ///     .with(Op::Dense, ElemType::I8)
    ///     .bits();
    /// let model = Model::<OPS>::parse_with_ops(MODEL)?;
    /// assert_eq!(model.op_set().bits(), OPS);
    /// // Without max pool the file cannot run, and says which layer needs it.
    /// const NO_POOL: u32 = OpSet::EMPTY
    ///     .with(Op::Pixels, ElemType::I8)
    ///     .with(Op::Conv2d, ElemType::I8)
    ///     .with(Op::Dense, ElemType::I8)
    ///     .bits();
    /// assert!(matches!(
    ///     Model::<NO_POOL>::parse_with_ops(MODEL),
    ///     Err(Error::NotLinked { layer: 3, .. })
    /// ));
    /// # Ok::<(), Error>(())
    /// ```
    pub fn parse_with_ops(bytes: &'a [u8]) -> Result<Model<'a, OPS>, Error> {
        if !is_aligned(bytes, ALIGN) {
            return Err(Error::Misaligned {
                offset: 0,
                align: ALIGN,
            });
        }
        let header = FileHeader::parse(&HeaderView::new_checked(bytes)?)?;
        let file_len = header.file_len as usize;
        if file_len < SECTIONS_START || !file_len.is_multiple_of(ALIGN) {
            return Err(Error::BadField {
                what: text!("file length"),
                value: header.file_len,
            });
        }
        let bytes = bytes.get(..file_len).ok_or(Error::Truncated {
            needed: file_len,
            available: bytes.len(),
        })?;
        let body = bytes.get(field::header::LEN..).unwrap_or(&[]);
        let computed = crate::crc::crc32(body);
        if computed != header.crc {
            return Err(Error::CrcMismatch {
                stored: header.crc,
                computed,
            });
        }
        let info = ModelInfo::parse(&InfoView::new_checked(body)?)?;
        let model = Model { bytes, info };
        model.check_layout()?;
        model.check_strings()?;
        model.check_tensors()?;
        model.check_layers()?;
        model.check_lifetimes()?;
        Ok(model)
    }

    /// Sections in canonical places, zero padding between them.
    fn check_layout(&self) -> Result<(), Error> {
        let info = &self.info;
        if info.layer_count as usize > MAX_LAYERS {
            return Err(Error::BadField {
                what: text!("layer count (at most 32768)"),
                value: info.layer_count as u32,
            });
        }
        let (spans, file_len) = canonical_sections(
            info.tensor_count,
            info.layer_count,
            info.blobs.len,
            info.strings.len,
        )
        .ok_or(Error::BadField {
            what: text!("section lengths"),
            value: info.blobs.len,
        })?;
        let found = [info.tensors, info.layers, info.blobs, info.strings];
        let names = [
            text!("tensor table"),
            text!("layer table"),
            text!("blob area"),
            text!("strings section"),
        ];
        for ((want, got), name) in spans.iter().zip(found).zip(names) {
            if want.offset != got.offset {
                return Err(Error::Layout {
                    what: name,
                    expected: want.offset as usize,
                    found: got.offset as usize,
                });
            }
            if want.len != got.len {
                return Err(Error::Layout {
                    what: name,
                    expected: want.len as usize,
                    found: got.len as usize,
                });
            }
        }
        if file_len as usize != self.bytes.len() {
            return Err(Error::Layout {
                what: text!("file length"),
                expected: file_len as usize,
                found: self.bytes.len(),
            });
        }
        // Padding after each section up to the next one (or the file end).
        let mut ends = [0usize; 4];
        for (e, s) in ends.iter_mut().zip(spans) {
            *e = s.range().map(|r| r.end).unwrap_or(0);
        }
        let starts = [
            spans[1].offset as usize,
            spans[2].offset as usize,
            spans[3].offset as usize,
            self.bytes.len(),
        ];
        for (end, next) in ends.iter().zip(starts) {
            all_zero(self.bytes, *end, next, text!("padding between sections"))?;
        }
        Ok(())
    }

    fn section(&self, span: Span) -> &'a [u8] {
        span.range().and_then(|r| self.bytes.get(r)).unwrap_or(&[])
    }

    /// Name and labels: UTF-8 with length prefixes, exactly filling the section.
    fn check_strings(&self) -> Result<(), Error> {
        let s = self.section(self.info.strings);
        let mut pos = 0;
        let mut utf8 = || string_bytes(s, &mut pos).filter(|b| is_utf8(b));
        utf8().ok_or(Error::BadField {
            what: text!("model name (length or UTF-8)"),
            value: 0,
        })?;
        for i in 0..self.info.label_count {
            utf8().ok_or(Error::BadField {
                what: text!("class label (length or UTF-8), label index"),
                value: i as u32,
            })?;
        }
        if pos != s.len() {
            return Err(Error::Layout {
                what: text!("strings section length"),
                expected: pos,
                found: s.len(),
            });
        }
        Ok(())
    }

    fn tensor_checked(&self, i: usize) -> Result<TensorRecord, Error> {
        let start = (i.checked_mul(field::tensor::LEN)).ok_or(Error::BadField {
            what: text!("tensor id"),
            value: i as u32,
        })?;
        let table = self.section(self.info.tensors);
        let rec = table.get(start..).unwrap_or(&[]);
        if i >= self.tensor_count() {
            return Err(Error::BadField {
                what: text!("tensor id"),
                value: i as u32,
            });
        }
        TensorRecord::parse(&TensorView::new_checked(rec)?, i)
    }

    /// Every record valid; every tensor but the input inside the workspace at
    /// an 8-aligned offset; the workspace no longer than those tensors need;
    /// the input's byte length fits in u32.
    fn check_tensors(&self) -> Result<(), Error> {
        if self.info.tensor_count == 0 {
            return Err(Error::BadField {
                what: text!("tensor count"),
                value: 0,
            });
        }
        let ws = self.info.workspace_len as u64;
        let mut needed = 0u64;
        for i in 0..self.tensor_count() {
            let t = self.tensor_checked(i)?;
            let len = tensor_len_u64(&t);
            if i == 0 {
                if len > u32::MAX as u64 {
                    return Err(Error::Tensor {
                        index: 0,
                        problem: text!("input tensor larger than 4 GiB"),
                    });
                }
                continue;
            }
            if !(t.offset as usize).is_multiple_of(ALIGN) {
                return Err(Error::TensorField {
                    index: i,
                    what: text!("workspace offset (must be a multiple of 8)"),
                    value: t.offset,
                });
            }
            let end = t.offset as u64 + len;
            if end > ws {
                return Err(Error::Tensor {
                    index: i,
                    problem: text!("does not fit inside the workspace"),
                });
            }
            needed = needed.max(end);
        }
        // The claim must be what the placement needs (rounded up to 8 at
        // most), so no host allocates more than the tensors use.
        let most = needed.div_ceil(ALIGN as u64) * ALIGN as u64;
        if ws > most {
            return Err(Error::Layout {
                what: text!(
                    "workspace length (the end of the last tensor, rounded up to 8 at most)"
                ),
                expected: usize::try_from(most).unwrap_or(usize::MAX),
                found: usize::try_from(ws).unwrap_or(usize::MAX),
            });
        }
        Ok(())
    }

    fn record(&self, i: usize) -> Result<LayerRecord, Error> {
        if i >= self.layer_count() {
            return Err(Error::Layer {
                index: i,
                problem: text!("no such layer"),
            });
        }
        let start = i.checked_mul(field::layer::LEN).ok_or(Error::Layer {
            index: i,
            problem: text!("no such layer"),
        })?;
        let table = self.section(self.info.layers);
        LayerRecord::parse(
            &LayerView::new_checked(table.get(start..).unwrap_or(&[]))?,
            i,
        )
    }

    /// Reads layer `i` with its tensors and typed blob views.
    fn load_layer(&self, i: usize) -> Result<Loaded<'a>, Error> {
        let rec = self.record(i)?;
        let h = &rec.header;
        let id = |what, v: u16| -> Result<TensorRecord, Error> {
            if (v as usize) < self.tensor_count() {
                self.tensor_checked(v as usize)
            } else {
                Err(Error::LayerField {
                    index: i,
                    what,
                    value: v as u32,
                })
            }
        };
        let a = id(text!("first input tensor id"), h.inputs[0])?;
        let b = if h.op.arity() == 2 {
            Some(id(text!("second input tensor id"), h.inputs[1])?)
        } else {
            None
        };
        let out = id(text!("output tensor id"), h.output)?;
        let types = blob_types(h.op, a.elem, b.map(|t| t.elem), out.elem)
            .map_err(|problem| Error::Layer { index: i, problem })?;
        let weights = match self.blob(
            i,
            text!("weights blob offset (outside the blob area or not a multiple of 8)"),
            rec.weights,
            types.weights,
        )? {
            Blob::None => Weights::None,
            Blob::I8(s) => Weights::I8(s),
            Blob::F16(s) => Weights::F16(s),
            _ => return Err(internal(i)),
        };
        let bias = match self.blob(
            i,
            text!("bias blob offset (outside the blob area or not a multiple of 8)"),
            rec.bias,
            types.bias,
        )? {
            Blob::None => Bias::None,
            Blob::I32(s) => Bias::I32(s),
            Blob::F32(s) => Bias::F32(s),
            _ => return Err(internal(i)),
        };
        let params = match self.blob(
            i,
            text!("params blob offset (outside the blob area or not a multiple of 8)"),
            rec.params,
            types.params,
        )? {
            Blob::None => Params::None,
            Blob::I32(s) if types.requant => Params::Requant(s),
            Blob::I32(s) => Params::I32(s),
            Blob::F32(s) => Params::F32(s),
            _ => return Err(internal(i)),
        };
        let layer = LayerRef {
            header: rec.header,
            weights,
            bias,
            params,
        };
        Ok(Loaded {
            layer,
            a,
            b,
            out,
            spans: [rec.weights, rec.bias, rec.params],
        })
    }

    /// One blob: empty reference for `None`; otherwise inside the blob area,
    /// 8-aligned, a whole number of elements, viewed in place.
    fn blob(&self, layer: usize, what: Text, span: Span, ty: BlobType) -> Result<Blob<'a>, Error> {
        if ty == BlobType::None {
            return if span == Span::EMPTY {
                Ok(Blob::None)
            } else {
                Err(Error::LayerField {
                    index: layer,
                    what: text!("blob reference length (op takes no such blob)"),
                    value: span.len,
                })
            };
        }
        if span.len == 0 {
            if span.offset != 0 {
                return Err(Error::LayerField {
                    index: layer,
                    what: text!("offset of an empty blob (must be 0)"),
                    value: span.offset,
                });
            }
        } else {
            let area = self.info.blobs.range().unwrap_or(0..0);
            let r = span.range().unwrap_or(0..usize::MAX);
            if r.start < area.start || r.end > area.end || !r.start.is_multiple_of(ALIGN) {
                return Err(Error::LayerField {
                    index: layer,
                    what,
                    value: span.offset,
                });
            }
        }
        let bytes: &'a [u8] = if span.len == 0 {
            &[]
        } else {
            span.range().and_then(|r| self.bytes.get(r)).unwrap_or(&[])
        };
        let bad_len = Error::LayerField {
            index: layer,
            what: text!("blob length (not a whole number of elements)"),
            value: span.len,
        };
        Ok(match ty {
            BlobType::None => Blob::None,
            BlobType::I8 => Blob::I8(bytemuck::try_cast_slice(bytes).map_err(|_| bad_len)?),
            BlobType::F16 => Blob::F16(bytemuck::try_cast_slice(bytes).map_err(|_| bad_len)?),
            BlobType::I32 => Blob::I32(bytemuck::try_cast_slice(bytes).map_err(|_| bad_len)?),
            BlobType::F32 => Blob::F32(bytemuck::try_cast_slice(bytes).map_err(|_| bad_len)?),
        })
    }

    /// Records valid, ids in range, one producer per tensor (the input none),
    /// inputs produced earlier, output id valid, blobs packed canonically,
    /// and each layer's op checks (`ops::check_layer_ops`): one read of each
    /// record.
    fn check_layers(&self) -> Result<(), Error> {
        let tc = self.tensor_count();
        let lc = self.layer_count();
        let out_id = self.info.output as usize;
        if out_id == 0 || out_id >= tc {
            return Err(Error::BadField {
                what: text!("output tensor id"),
                value: out_id as u32,
            });
        }
        if lc + 1 != tc {
            return Err(Error::Layout {
                what: text!("layer count (one layer per tensor besides the input)"),
                expected: tc.saturating_sub(1),
                found: lc,
            });
        }
        let area = self.info.blobs.range().unwrap_or(0..0);
        let mut cursor = area.start;
        for i in 0..lc {
            let l = self.load_layer(i)?;
            let h = l.layer.header;
            // Layer i writes tensor i + 1 and reads only tensors written
            // before it (tensor 0 is the input): one linear check gives
            // "written once, read after written".
            if h.output as usize != i + 1 {
                return Err(Error::LayerField {
                    index: i,
                    what: text!("output tensor id (layer i writes tensor i + 1)"),
                    value: h.output as u32,
                });
            }
            for k in 0..h.op.arity() {
                let t = h.inputs.get(k).copied().unwrap_or(0) as usize;
                if t > i {
                    return Err(Error::Layer {
                        index: i,
                        problem: text!("reads a tensor no earlier layer writes"),
                    });
                }
            }
            for span in l.spans {
                if span.len == 0 {
                    continue;
                }
                let want = format::align_up(cursor).unwrap_or(usize::MAX);
                if span.offset as usize != want {
                    return Err(Error::Layout {
                        what: text!("blob offset (blobs are packed in layer order)"),
                        expected: want,
                        found: span.offset as usize,
                    });
                }
                all_zero(self.bytes, cursor, want, text!("padding between blobs"))?;
                cursor = span.range().map(|r| r.end).unwrap_or(usize::MAX);
            }
            ops::check_layer_ops::<OPS>(i, &l.layer, &l.a, l.b.as_ref(), &l.out)?;
        }
        if cursor != area.end {
            return Err(Error::Layout {
                what: text!("blob area length"),
                expected: cursor.saturating_sub(area.start),
                found: area.len(),
            });
        }
        Ok(())
    }

    /// Input tensor ids of layer `k` read straight from the layer table (the
    /// record was validated by `check_layers`) and how many the op reads.
    fn inputs_of(&self, k: usize) -> ([u16; 2], usize) {
        use field::layer as f;
        let table = self.section(self.info.layers);
        let rec = k
            .checked_mul(f::LEN)
            .and_then(|s| table.get(s..s.checked_add(f::LEN)?))
            .unwrap_or(&[]);
        let arity = Op::from_u8(format::rd_u8(rec, f::OP)).map_or(0, Op::arity);
        (
            [
                format::rd_u16(rec, f::INPUT_A),
                format::rd_u16(rec, f::INPUT_B),
            ],
            arity,
        )
    }

    /// A tensor is live from the layer that writes it to the last layer that
    /// reads it (the model output: to the end). Each layer's output must not
    /// share a workspace byte with any tensor live during that layer, its
    /// inputs included. The error names the earliest such layer (and, for
    /// it, the earliest-written live tensor).
    ///
    /// Without allocation the last readers are found for blocks of
    /// `LIFETIME_BLOCK` tensors at a time, one pass over the layer table per
    /// block; with the `std` feature (host tools) one block holds every
    /// tensor, so the pass runs once. Then each tensor's output checks cover
    /// exactly the layers it is live for. Cost: layers · ⌈layers / block⌉
    /// table reads plus the summed lifetimes (FORMAT.md, "Limits").
    fn check_lifetimes(&self) -> Result<(), Error> {
        #[cfg(feature = "std")]
        let mut last = std::vec![0u16; self.layer_count().max(1)];
        #[cfg(not(feature = "std"))]
        let mut last = [0u16; LIFETIME_BLOCK];
        self.check_lifetimes_in(&mut last)
    }

    /// `check_lifetimes` with `last.len()` tensors per block (any length ≥ 1
    /// gives the same result). Needs `layer_count() ≤ MAX_LAYERS`.
    fn check_lifetimes_in(&self, last: &mut [u16]) -> Result<(), Error> {
        let range = |t: &TensorRecord| {
            let s = t.offset as u64;
            s..s + tensor_len_u64(t)
        };
        let lc = self.layer_count();
        let out = self.info.output as usize;
        let block = last.len().max(1);
        let mut first: Option<Error> = None;
        let mut first_layer = usize::MAX;
        // Tensor t (1..=lc) is written by layer t − 1.
        let mut t0 = 1;
        while t0 <= lc && t0 < first_layer {
            let t1 = t0.saturating_add(block).min(lc + 1);
            for (t, l) in (t0..t1).zip(last.iter_mut()) {
                let own = if t == out { lc - 1 } else { t - 1 };
                *l = u16::try_from(own).unwrap_or(u16::MAX);
            }
            // Layer k reads only tensors ≤ k, so the block is first read at t0.
            for k in t0..lc {
                let (ins, n) = self.inputs_of(k);
                for &x in ins.get(..n).unwrap_or(&[]) {
                    let x = x as usize;
                    if (t0..t1).contains(&x) {
                        if let Some(l) = last.get_mut(x - t0) {
                            *l = (*l).max(u16::try_from(k).unwrap_or(u16::MAX));
                        }
                    }
                }
            }
            for t in t0..t1 {
                let live_to = last.get(t - t0).copied().unwrap_or(0) as usize;
                let rt = range(&self.tensor_checked(t)?);
                // Only layers before the earliest clash found so far matter.
                for i in t..=live_to.min(first_layer.saturating_sub(1)) {
                    let ro = range(&self.tensor_checked(i + 1)?);
                    if ro.start < rt.end && rt.start < ro.end {
                        first_layer = i;
                        first = Some(Error::Overlap {
                            layer: i,
                            output: i + 1,
                            live: t,
                        });
                        break;
                    }
                }
            }
            t0 = t1;
        }
        first.map_or(Ok(()), Err)
    }

    // ----------------------------------------------------------------- API

    /// The validated file bytes (exactly the header's file length).
    #[doc(hidden)]
    pub fn bytes(&self) -> &'a [u8] {
        self.bytes
    }

    pub fn name(&self) -> &'a str {
        let mut pos = 0;
        read_string(self.section(self.info.strings), &mut pos).unwrap_or("")
    }

    pub fn label_count(&self) -> usize {
        self.info.label_count as usize
    }

    /// The class labels in order, read in one walk of the strings section.
    pub fn labels(&self) -> impl Iterator<Item = &'a str> + 'a {
        let s = self.section(self.info.strings);
        let mut pos = 0;
        let named = read_string(s, &mut pos).is_some();
        let mut left = if named { self.label_count() } else { 0 };
        core::iter::from_fn(move || {
            left = left.checked_sub(1)?;
            read_string(s, &mut pos)
        })
    }

    /// Class label `i` (this walks the strings section; `labels` walks it once for all).
    pub fn label(&self, i: usize) -> Option<&'a str> {
        if i >= self.label_count() {
            return None;
        }
        let s = self.section(self.info.strings);
        let mut pos = 0;
        read_string(s, &mut pos)?;
        for _ in 0..i {
            read_string(s, &mut pos)?;
        }
        read_string(s, &mut pos)
    }

    /// Bytes of workspace `run` needs.
    pub fn workspace_len(&self) -> usize {
        self.info.workspace_len as usize
    }

    /// Tensor 0, the model input.
    pub fn input(&self) -> TensorRecord {
        self.tensor(0).unwrap_or(PLACEHOLDER)
    }

    /// The tensor `run` returns.
    pub fn output(&self) -> TensorRecord {
        self.tensor(self.info.output as usize)
            .unwrap_or(PLACEHOLDER)
    }

    /// Id of the output tensor.
    #[doc(hidden)]
    pub fn output_id(&self) -> usize {
        self.info.output as usize
    }

    #[doc(hidden)]
    pub fn tensor_count(&self) -> usize {
        self.info.tensor_count as usize
    }

    #[doc(hidden)]
    pub fn tensor(&self, i: usize) -> Option<TensorRecord> {
        self.tensor_checked(i).ok()
    }

    pub fn layer_count(&self) -> usize {
        self.info.layer_count as usize
    }

    /// Layer `i` with its weights, bias and params viewed in place.
    #[doc(hidden)]
    pub fn layer(&self, i: usize) -> Option<LayerRef<'a>> {
        self.load_layer(i).ok().map(|l| l.layer)
    }

    /// Multiply-accumulates of layer `i` for one inference. Counting rule:
    /// conv2d `out_h·out_w·out_c·kh·kw·in_c`; depthwise `out_h·out_w·c·kh·kw`;
    /// dense `in_elems·out_elems`; every other op (pixels, pools, add,
    /// quantize, dequantize) 0, as they multiply by no weights. Saturates at
    /// u64::MAX; 0 for an unknown layer.
    pub fn layer_macs(&self, i: usize) -> u64 {
        self.load_layer(i)
            .map_or(0, |l| ops::layer_macs(&l.layer, &l.a, &l.out))
    }

    /// The (op, output type) pairs of this model's layers: the op set a
    /// firmware for it needs (`parse_with_ops`).
    pub fn op_set(&self) -> OpSet {
        (0..self.layer_count())
            .filter_map(|i| self.load_layer(i).ok())
            .fold(OpSet::EMPTY, |s, l| s.with(l.layer.header.op, l.out.elem))
    }

    /// Learned parameters of layer `i`: weight elements plus bias elements.
    /// Requantization and pixel/add parameters are derived, not learned, and
    /// are not counted (their bytes show in `sections().params`).
    #[doc(hidden)]
    pub fn layer_params(&self, i: usize) -> u64 {
        let Some(layer) = self.layer(i) else {
            return 0;
        };
        let w = match layer.weights {
            Weights::None => 0,
            Weights::I8(s) => s.len(),
            Weights::F16(s) => s.len(),
        };
        let b = match layer.bias {
            Bias::None => 0,
            Bias::I32(s) => s.len(),
            Bias::F32(s) => s.len(),
        };
        w as u64 + b as u64
    }

    /// Byte counts of the file by kind.
    pub fn sections(&self) -> SectionSizes {
        let info = &self.info;
        let mut s = SectionSizes {
            header: SECTIONS_START,
            tensor_table: info.tensors.len as usize,
            layer_table: info.layers.len as usize,
            strings: info.strings.len as usize,
            total: self.bytes.len(),
            ..SectionSizes::default()
        };
        for i in 0..self.layer_count() {
            if let Ok(r) = self.record(i) {
                s.weights = s.weights.saturating_add(r.weights.len as usize);
                s.biases = s.biases.saturating_add(r.bias.len as usize);
                s.params = s.params.saturating_add(r.params.len as usize);
            }
        }
        let used = [
            s.tensor_table,
            s.layer_table,
            s.weights,
            s.biases,
            s.params,
            s.strings,
        ]
        .iter()
        .fold(s.header, |acc, &v| acc.saturating_add(v));
        s.padding = s.total.saturating_sub(used);
        s
    }

    /// Runs the model on `input` (exactly the input tensor's bytes) using
    /// `workspace` (8-byte aligned, at least `workspace_len()` bytes; bytes
    /// past that are not touched). Returns the output tensor's bytes inside
    /// the workspace.
    ///
    /// ```
    /// # static MODEL: &[u8] = midge_runtime::embed_model!(concat!(
    /// #     env!("CARGO_MANIFEST_DIR"),
    /// #     "/fixtures/digits.midge"
    /// # ));
    /// use midge_runtime::{embed::Aligned, Error, Model};
    ///
    /// let model = Model::parse(MODEL)?;
    /// let mut workspace = Aligned { bytes: [0u8; 2560] };
    /// let image = [0u8; 64]; // 8×8 grey bytes: `model.input().byte_len()`
    /// let output = model.run(&image, &mut workspace.bytes)?;
    /// assert_eq!(output.len(), 10); // ten int8 logits
    /// // A wrongly sized input is an error.
    /// assert!(matches!(
    ///     model.run(&image[..63], &mut workspace.bytes),
    ///     Err(Error::InputLength { expected: 64, found: 63 })
    /// ));
    /// # Ok::<(), Error>(())
    /// ```
    pub fn run<'w>(&self, input: &[u8], workspace: &'w mut [u8]) -> Result<&'w [u8], Error> {
        self.run_observed(input, workspace, &mut ())
    }

    /// `run`, calling `observer` around every layer.
    ///
    /// ```
    /// # static MODEL: &[u8] = midge_runtime::embed_model!(concat!(
    /// #     env!("CARGO_MANIFEST_DIR"),
    /// #     "/fixtures/digits.midge"
    /// # ));
    /// use midge_runtime::{embed::Aligned, Model, Observer, TensorRecord};
    ///
    /// /// Remembers the largest int8 value each layer wrote.
    /// struct Peaks([i8; 8]);
    /// impl Observer for Peaks {
    ///     fn after_layer(&mut self, index: usize, _out: &TensorRecord, bytes: &[u8]) {
    ///         let peak = bytes.iter().map(|&b| b as i8).max().unwrap_or(i8::MIN);
    ///         if let Some(p) = self.0.get_mut(index) {
    ///             *p = peak;
    ///         }
    ///     }
    /// }
    ///
    /// let model = Model::parse(MODEL)?;
    /// let mut workspace = Aligned { bytes: [0u8; 2560] };
    /// let mut peaks = Peaks([i8::MIN; 8]);
    /// let out = model.run_observed(&[128u8; 64], &mut workspace.bytes, &mut peaks)?;
    /// // The last layer's peak is the largest logit.
    /// let last = model.layer_count() - 1;
    /// assert_eq!(peaks.0[last], out.iter().map(|&b| b as i8).max().unwrap());
    /// # Ok::<(), midge_runtime::Error>(())
    /// ```
    pub fn run_observed<'w, O: Observer>(
        &self,
        input: &[u8],
        workspace: &'w mut [u8],
        observer: &mut O,
    ) -> Result<&'w [u8], Error> {
        self.check_call(input, workspace, self.workspace_len())?;
        self.run_layers(0..self.layer_count(), input, workspace, observer)?;
        self.output_bytes(workspace)
    }

    /// Checks `input` and `workspace` (length at least `need`, alignment) as `run` does.
    pub(crate) fn check_call(
        &self,
        input: &[u8],
        workspace: &[u8],
        need: usize,
    ) -> Result<(), Error> {
        let expected = self.input().byte_len();
        if input.len() != expected {
            return Err(Error::InputLength {
                expected,
                found: input.len(),
            });
        }
        if workspace.len() < need {
            return Err(Error::WorkspaceLength {
                expected: need,
                found: workspace.len(),
            });
        }
        if !is_aligned(workspace, ALIGN) {
            return Err(Error::WorkspaceMisaligned);
        }
        Ok(())
    }

    /// Runs the layers `layers` in order over a checked input and workspace (the
    /// layer-by-layer walk of `run`; `patch` runs the layers after its stage with it).
    pub(crate) fn run_layers<O: Observer>(
        &self,
        layers: core::ops::Range<usize>,
        input: &[u8],
        workspace: &mut [u8],
        observer: &mut O,
    ) -> Result<(), Error> {
        for i in layers {
            let Loaded {
                layer, a, b, out, ..
            } = self.load_layer(i)?;
            observer.before_layer(i);
            let outside = |index| Error::Tensor {
                index,
                problem: text!("not inside the workspace"),
            };
            let out_id = layer.header.output as usize;
            let start = out.offset as usize;
            let end = start.checked_add(out.byte_len()).ok_or(outside(out_id))?;
            let (lo, rest) = workspace
                .split_at_mut_checked(start)
                .ok_or(outside(out_id))?;
            let (out_bytes, hi) = rest
                .split_at_mut_checked(end - start)
                .ok_or(outside(out_id))?;
            let (lo, hi): (&[u8], &[u8]) = (lo, hi);
            let fetch = |id: u16, t: &TensorRecord| -> Result<&[u8], Error> {
                if id == 0 {
                    return Ok(input);
                }
                let s = t.offset as usize;
                let e = s.checked_add(t.byte_len()).ok_or(outside(id as usize))?;
                let got = if e <= start {
                    lo.get(s..e)
                } else if s >= end {
                    hi.get(s - end..e - end)
                } else {
                    None
                };
                got.ok_or(outside(id as usize))
            };
            let a_bytes = fetch(layer.header.inputs[0], &a)?;
            let b_pair = match &b {
                Some(bt) => Some((bt, fetch(layer.header.inputs[1], bt)?)),
                None => None,
            };
            ops::run_layer_ops::<OPS>(&layer, (&a, a_bytes), b_pair, (&out, &mut *out_bytes))
                .map_err(|e| exec::at_layer(e, i))?;
            observer.after_layer(i, &out, out_bytes);
        }
        Ok(())
    }

    /// The output tensor's bytes inside `workspace`.
    pub(crate) fn output_bytes<'w>(&self, workspace: &'w [u8]) -> Result<&'w [u8], Error> {
        let out = self.output();
        let s = out.offset as usize;
        s.checked_add(out.byte_len())
            .and_then(|e| workspace.get(s..e))
            .ok_or(Error::Tensor {
                index: self.output_id(),
                problem: text!("not inside the workspace"),
            })
    }
}

/// Returned only if a validated model could not re-read a record, which
/// `parse` rules out.
const PLACEHOLDER: TensorRecord = TensorRecord {
    shape: crate::repr::Shape::new(0, 0, 0),
    elem: crate::repr::ElemType::U8,
    quant: crate::repr::Quant::IDENTITY,
    offset: 0,
};

fn internal(index: usize) -> Error {
    Error::Layer {
        index,
        problem: text!("blob type mismatch"),
    }
}

/// One layer as `load_layer` reads it: the typed views, its tensors' records
/// and the record's blob spans (weights, bias, params).
struct Loaded<'a> {
    layer: LayerRef<'a>,
    a: TensorRecord,
    b: Option<TensorRecord>,
    out: TensorRecord,
    spans: [Span; 3],
}

enum Blob<'a> {
    None,
    I8(&'a [i8]),
    F16(&'a [half::f16]),
    I32(&'a [i32]),
    F32(&'a [f32]),
}

#[cfg(all(test, feature = "write"))]
mod tests {
    use super::*;
    use crate::embed::AlignedBytes;
    use crate::repr::{Activation, ElemType, LayerHeader, Padding, Quant, Shape, Window};
    use crate::write::{BiasBuf, LayerSpec, ModelSpec, ParamsBuf, WeightsBuf};
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A random graph of int8 1×1×4 tensors: pixels, then max pools (k = 1)
    /// and adds reading random earlier tensors, packed without reuse.
    fn random_spec(rng: &mut ChaCha8Rng, layers: usize) -> ModelSpec {
        let q = Quant {
            scale: 0.1,
            zero_point: 0,
        };
        let rec = |elem, offset| TensorRecord {
            shape: Shape::new(1, 1, 4),
            elem,
            quant: q,
            offset,
        };
        let head = |op, inputs, output, window| LayerHeader {
            op,
            act: Activation::None,
            inputs,
            output,
            window,
            clamp_i8: [-128, 127],
            clamp_f32: [-65504.0, 65504.0],
        };
        let k1 = Padding::Valid.resolve((1, 1), (1, 1), (1, 1), (1, 1));
        let mut tensors = std::vec![rec(ElemType::U8, 0)];
        let mut specs = std::vec![LayerSpec {
            header: head(Op::Pixels, [0, 0], 1, Window::default()),
            weights: WeightsBuf::None,
            bias: BiasBuf::None,
            params: ParamsBuf::I32((0..4).flat_map(|_| [0, 1 << 30, 38]).collect()),
        }];
        tensors.push(rec(ElemType::I8, 0));
        for i in 1..layers {
            let pick = |rng: &mut ChaCha8Rng| {
                if rng.gen_bool(0.7) {
                    i as u16
                } else {
                    rng.gen_range(1..=i) as u16
                }
            };
            let a = pick(rng);
            let (header, params) = if rng.gen_bool(0.3) {
                let b = pick(rng);
                (
                    head(Op::Add, [a, b], i as u16 + 1, Window::default()),
                    ParamsBuf::I32(std::vec![1 << 30, 1 << 30, 31]),
                )
            } else {
                (head(Op::MaxPool, [a, 0], i as u16 + 1, k1), ParamsBuf::None)
            };
            specs.push(LayerSpec {
                header,
                weights: WeightsBuf::None,
                bias: BiasBuf::None,
                params,
            });
            tensors.push(rec(ElemType::I8, 8 * i as u32));
        }
        ModelSpec {
            name: "random".into(),
            labels: std::vec!["a".into()],
            tensors,
            layers: specs,
            output: layers as u16,
            workspace_len: 8 * layers as u32,
        }
    }

    /// The rule as FORMAT.md states it, checked pair by pair.
    fn oracle(m: &Model<'_>) -> Result<(), Error> {
        let lc = m.layer_count();
        let last = |t: usize| -> usize {
            if t == m.output_id() {
                return lc - 1;
            }
            (t..lc)
                .filter(|&k| m.inputs_of(k).0[..m.inputs_of(k).1].contains(&(t as u16)))
                .max()
                .unwrap_or(t - 1)
        };
        let span = |t: usize| {
            let r = m.tensor(t).unwrap();
            (r.offset as usize, r.offset as usize + r.byte_len())
        };
        for i in 0..lc {
            let (os, oe) = span(i + 1);
            for t in 1..=i {
                let (ts, te) = span(t);
                if last(t) >= i && os < te && ts < oe {
                    return Err(Error::Overlap {
                        layer: i,
                        output: i + 1,
                        live: t,
                    });
                }
            }
        }
        Ok(())
    }

    #[test]
    fn lifetime_check_matches_the_rule_for_every_block_size() {
        let mut rng = ChaCha8Rng::seed_from_u64(10);
        let mut clashes = 0;
        for round in 0..300 {
            let layers = rng.gen_range(2..40);
            let spec = random_spec(&mut rng, layers);
            let mut bytes = spec.emit().unwrap();
            // Move some tensors onto random 8-aligned offsets (clashes likely).
            let tensors = field::info::LEN + field::header::LEN;
            for t in 1..=layers {
                if rng.gen_bool(0.4) {
                    let at = tensors + t * field::tensor::LEN + field::tensor::OFFSET.start;
                    let off = 8 * rng.gen_range(0..layers as u32);
                    bytes[at..at + 4].copy_from_slice(&off.to_le_bytes());
                }
            }
            let buf = AlignedBytes::from_slice(&bytes);
            let body = &buf[field::header::LEN..];
            let info = ModelInfo::parse(&InfoView::new_checked(body).unwrap()).unwrap();
            let m = Model { bytes: &buf, info };
            let want = oracle(&m);
            clashes += want.is_err() as usize;
            for block in [1, 2, 3, 7, LIFETIME_BLOCK, layers + 1] {
                let mut last = std::vec![0u16; block];
                assert_eq!(
                    m.check_lifetimes_in(&mut last),
                    want,
                    "round {round}, block {block}"
                );
            }
            assert_eq!(m.check_lifetimes(), want, "round {round}");
        }
        // Both outcomes were exercised.
        assert!(clashes > 30 && clashes < 270, "{clashes} clashes");
    }
}
