//! signfold: signed-particle Wigner Monte Carlo for a few interacting particles.
#![allow(clippy::needless_range_loop)] // index loops mirror the equations (particle i, pair i<j)
pub mod accuracy;
pub mod advance;
pub mod annihilate;
pub mod check;
pub mod checkpoint;
pub mod colormap;
pub mod comm;
pub mod compare;
pub mod grid;
pub mod initial;
pub mod inspect;
pub mod job;
pub mod kernel;
pub mod observe;
pub mod orbitals;
pub mod particles;
pub mod plot;
pub mod potential;
pub mod reference;
pub mod results;
pub mod rng;
pub mod run;
pub mod scaling;
pub mod setup;
pub mod units;

/// An error already reported by another rank (rank 0): exit non-zero without a message.
#[derive(Debug)]
pub struct SilentError;

impl std::fmt::Display for SilentError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "failed on another rank")
    }
}

impl std::error::Error for SilentError {}
