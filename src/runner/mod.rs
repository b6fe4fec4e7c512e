//! Layer 5 — one run of a job: the driver loop (advance → annihilate → observe → write →
//! checkpoint)*, the output-directory policy, and progress events for the command line.

pub mod driver;
pub mod outdir;
pub mod progress;
pub mod records;
