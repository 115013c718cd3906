//! midge-convert: reads a model description and its safetensors weights,
//! runs the float reference, calibrates, quantizes, plans memory, writes the
//! flat layout through midge-runtime, and measures the accuracy drop.

pub mod bias_correct;
pub mod c_source;
pub mod calibrate;
pub mod calibrate_choice;
pub mod classify;
pub mod compare;
pub mod description;
pub mod draft;
pub mod equalize;
pub mod error;
pub mod files;
pub mod firmware_module;
pub mod float_ref;
pub mod graph;
pub mod images;
pub mod limits;
pub mod mixed;
pub mod onnx;
pub mod output;
pub mod parallel;
pub mod patch_plan;
pub mod plan;
pub mod quantize;
pub mod sensitivity;
pub mod show;
pub mod synth;
pub mod weights;

pub use error::{Error, Result};
