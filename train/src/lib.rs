//! midge-train: maintainers aid (float training, demo data).
