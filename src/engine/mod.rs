//! Layer 3 — what turns the physics into a distributed run: the state of a run, the one
//! seam to MPI ([`comm`]) and its collectives, the initial sampling over ranks, the global
//! annihilation reduction and rebalancing, the global reduction of the estimators, phase
//! timers and stop requests. Knows nothing about files or printing.

pub mod annihilate;
pub mod budget;
pub mod cell_table;
pub mod comm;
#[cfg(feature = "app")]
pub mod mpi;
pub mod observe;
pub mod resolution;
pub mod start;
pub mod state;
pub mod stop;
pub mod timers;
