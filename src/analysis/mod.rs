//! Layer 6 — analysis of result files: comparison of two files and the statistics used.

pub mod compare;
pub mod stats;
