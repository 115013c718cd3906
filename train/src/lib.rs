//! midge-train: the maintainers' aid that makes the bundled models — the open
//! digits data and its split, the invented bottle-cap demo images, and a small
//! candle trainer that writes PyTorch-style safetensors from a model description.

pub mod caps;
pub mod digits;
pub mod fit;
pub mod images;
pub mod net;
pub mod rescale;
