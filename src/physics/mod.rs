//! Layer 2 — the physics the equations describe (docs/method.md): orbitals and the initial
//! N-body Wigner function, potentials and the windowed kernel, the signed particles and
//! their random streams, flight between synchronisation times, annihilation cells, the
//! estimators, and the numerics derived from a job. No MPI, no files, no printing.

pub mod cells;
pub mod defaults;
pub mod estimators;
pub mod flight;
pub mod grid;
pub mod images;
pub mod initial;
pub mod kernel;
pub mod numerics;
pub mod orbitals;
pub mod particles;
pub mod potential;
pub mod resonance;
pub mod rng;
pub mod transfer;
pub mod units;
