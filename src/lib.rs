//! signfold: signed-particle Wigner Monte Carlo for a few interacting particles.
pub mod compare;
pub mod grid;
pub mod job;
pub mod orbitals;
pub mod potential;
pub mod reference;
pub mod results;
pub mod units;
