//! signfold: signed-particle Wigner Monte Carlo for a few interacting particles.
pub mod grid;
pub mod job;
pub mod kernel;
pub mod orbitals;
pub mod potential;
pub mod results;
pub mod rng;
pub mod units;
