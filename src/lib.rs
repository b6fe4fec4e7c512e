//! signfold: signed-particle Wigner Monte Carlo for a few interacting particles.
pub mod colormap;
pub mod grid;
pub mod initial;
pub mod inspect;
pub mod job;
pub mod kernel;
pub mod orbitals;
pub mod particles;
pub mod plot;
pub mod potential;
pub mod results;
pub mod rng;
pub mod units;
