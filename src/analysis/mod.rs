//! Layer 6 — analysis of result files: comparison of two files, the statistics used, and
//! the merging of runs that differ only in the seed.

pub mod compare;
pub mod merge;
pub mod stats;
