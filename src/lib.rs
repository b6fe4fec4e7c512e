//! signfold: signed-particle Wigner Monte Carlo for a few interacting particles.
//!
//! Layers, each depending only on the ones above it (docs: DEVELOPERS.md, "Layout"):
//!
//! 1. [`config`] — the job file, overrides, validation, limits;
//! 2. [`physics`] — orbitals, the initial Wigner function, potentials, the windowed kernel,
//!    flight, annihilation cells, estimators; no MPI, no files, no printing;
//! 3. [`engine`] — the particle state of a run, the `Comm` seam to MPI and its collectives,
//!    the global annihilation reduction, observation, phase timers, stop requests;
//! 4. [`io`] — every dataset name and format version, result files, checkpoints;
//! 5. [`runner`] — the driver loop of `run` and `resume`, output-directory policy, progress
//!    events; [`reference`] — the exact grid solver;
//! 6. [`analysis`] (compare, statistics), [`viz`] (one chart toolkit, one palette),
//!    [`study`] (scaling and accuracy drivers).
//!
//! The command line (`src/cli/`, in the binary) is the only code that prints. Layers 4–6
//! need the `app` feature (MPI, HDF5, plotters); `cargo test --no-default-features --lib`
//! builds and tests layers 1–3 alone.
#![allow(clippy::needless_range_loop)] // index loops mirror the equations (particle i, pair i<j)

pub mod config;
pub mod engine;
pub mod physics;

#[cfg(feature = "app")]
pub mod analysis;
#[cfg(feature = "app")]
pub mod io;
#[cfg(feature = "app")]
pub mod reference;
#[cfg(feature = "app")]
pub mod runner;
#[cfg(feature = "app")]
pub mod study;
#[cfg(feature = "app")]
pub mod viz;

/// An error already reported by another rank (rank 0): exit non-zero without a message.
#[derive(Debug)]
pub struct SilentError;

impl std::fmt::Display for SilentError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "failed on another rank")
    }
}

impl std::error::Error for SilentError {}
