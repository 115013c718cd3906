//! midge-runtime: runs int8 and fp16 CNN classifiers from the midge flat layout in place
//! from flash, in one caller-provided workspace; `no_std`, no allocation, no panics from
//! model bytes or inputs. A `Model`'s compile-time op set (`opset`) decides what links.
#![no_std]
// `unsafe` only in the fenced Cortex-M DSP kernel (`kernels::dsp`).
#![deny(unsafe_code)]

#[cfg(feature = "std")]
extern crate std;

#[cfg(target_endian = "big")]
compile_error!(
    "midge-runtime views little-endian model bytes in place; big-endian targets are not supported"
);

pub mod crc;
pub mod embed;
pub mod error;
pub mod exec;
pub mod format;
pub mod geometry;
pub mod kernels;
pub mod model;
pub mod ops;
pub mod opset;
pub mod repr;
pub mod requant;
#[cfg(feature = "write")]
pub mod write;

pub use error::Error;
pub use model::{Model, Observer, SectionSizes};
pub use opset::{OpSet, ALL_OPS};
pub use repr::*;
