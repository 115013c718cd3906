//! midge-convert: reads a model description and its safetensors weights,
//! runs the float reference, calibrates, quantizes, plans memory, writes the
//! flat layout through midge-runtime, and measures the accuracy drop.

pub mod error;

pub use error::{Error, Result};
