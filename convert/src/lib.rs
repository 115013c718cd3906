//! midge-convert: reads a model description and its safetensors weights,
//! runs the float reference, calibrates, quantizes, plans memory, writes the
//! flat layout through midge-runtime, and measures the accuracy drop.

pub mod error;
pub mod description;
pub mod weights;
pub mod graph;
pub mod float_ref;
pub mod images;
pub mod plan;
pub mod output;
pub mod calibrate;
pub mod quantize;
pub mod compare;
pub mod firmware_module;
pub mod cli;
pub mod target;
pub mod firmware;
pub mod footprint;
pub mod synth;
pub mod budget;

pub use error::{Error, Result};
