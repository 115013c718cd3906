//! midge-runtime: runs int8 and fp16 CNN classifiers from the midge flat layout in place
//! from flash, in one caller-provided workspace; `no_std`, no allocation, no panics from
//! model bytes or inputs. A `Model`'s compile-time op set (`opset`) decides what links.
//!
//! # The API firmware uses
//!
//! | item | what it is for |
//! |---|---|
//! | [`embed_model!`] | put a `.midge` file into flash at the 8-byte alignment `parse` needs |
//! | [`Model::parse`] / [`Model::parse_with_ops`] | validate the file once (layout, CRC-32, every layer) |
//! | [`Model::run`] | one inference in a caller-owned workspace of [`Model::workspace_len`] bytes |
//! | [`Model::run_observed`] + [`Observer`] | the same with a hook around each layer (timing, dumps) |
//! | [`top1`] / [`Logit`] | the predicted class and its raw output value, integer compares only |
//! | [`Error`] | every way a file, an input or a workspace can be refused |
//! | [`Text`] | the description inside an error: its words with the `text` feature (host tools; `std` implies it), else their CRC-32 code, so firmware links no sentences |
//! | [`TensorRecord`], [`Shape`], [`ElemType`], [`Quant`] | what the input and output tensors are |
//! | [`OpSet`], [`Op`], [`ALL_OPS`] | which kernels a build links |
//!
//! Everything else (`kernels`, `ops`, `format`, `write`, …) is public only for midge's own
//! host tools and tests, hidden from these docs and not a stable interface.
//!
//! # Example
//!
//! A handwritten-digit classifier (8×8 grey levels, 10 classes) converted by
//! `midge quantize models/digits/model.toml`, run on the first image of the
//! UCI optical digits set as scikit-learn ships it (`digits.csv.gz`, label 0),
//! its grey levels 0..16 scaled to bytes as round(v·255/16):
//!
//! ```
//! use midge_runtime::{embed::Aligned, top1, Model};
//!
//! static MODEL: &[u8] = midge_runtime::embed_model!(concat!(
//!     env!("CARGO_MANIFEST_DIR"),
//!     "/fixtures/digits.midge"
//! ));
//! // In firmware this is a `static mut` or a linker-placed buffer.
//! let mut workspace = Aligned { bytes: [0u8; 2560] };
//!
//! let model = Model::parse(MODEL)?;
//! assert!(model.workspace_len() <= workspace.bytes.len());
//! let image: [u8; 64] = [
//!     0, 0, 80, 207, 143, 16, 0, 0, 0, 0, 207, 239, 159, 239, 80, 0,
//!     0, 48, 239, 32, 0, 175, 128, 0, 0, 64, 191, 0, 0, 128, 128, 0,
//!     0, 80, 128, 0, 0, 143, 128, 0, 0, 64, 175, 0, 16, 191, 112, 0,
//!     0, 32, 223, 80, 159, 191, 0, 0, 0, 0, 96, 207, 159, 0, 0, 0,
//! ];
//! let output = model.run(&image, &mut workspace.bytes)?;
//! let (class, _logit) = top1(&model.output(), output).expect("an int8 output");
//! assert_eq!(model.label(class), Some("0"));
//! # Ok::<(), midge_runtime::Error>(())
//! ```
#![no_std]
// `unsafe` only in the fenced Cortex-M DSP kernel (`kernels::dsp`).
#![deny(unsafe_code)]

#[cfg(feature = "std")]
extern crate std;

#[cfg(target_endian = "big")]
compile_error!(
    "midge-runtime views little-endian model bytes in place; big-endian targets are not supported"
);

// First, so its `text!` macro is in scope in every module below.
#[macro_use]
mod error;
pub mod embed;
mod model;
mod opset;

// Internals for midge's host tools and tests: not a stable interface.
#[doc(hidden)]
pub mod crc;
#[doc(hidden)]
pub mod exec;
#[doc(hidden)]
pub mod format;
#[doc(hidden)]
pub mod geometry;
#[doc(hidden)]
pub mod kernels;
#[doc(hidden)]
pub mod ops;
#[doc(hidden)]
pub mod patch;
#[doc(hidden)]
pub mod repr;
#[doc(hidden)]
pub mod requant;
#[doc(hidden)]
#[cfg(feature = "write")]
pub mod write;

pub use error::{Error, Text};
pub use exec::{top1, Logit};
pub use model::{Model, Observer, SectionSizes};
pub use opset::{OpSet, ALL_OPS};
pub use repr::{ElemType, Op, Quant, Shape, TensorRecord};
