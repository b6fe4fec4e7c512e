//! Layer 3 — what turns the physics into a distributed run: the state of a run, the one
//! seam to MPI ([`comm`]) and its collectives, the initial sampling over ranks, the global
//! annihilation reduction and the placement of particles in their home cells, the global reduction of the estimators, phase
//! timers and stop requests, the pilot run and the memory model behind `check`'s forecast.
//! Knows nothing about files or printing (it reads only the kernel's /proc memory figures).

pub mod annihilate;
pub mod budget;
pub mod cell_table;
pub mod comm;
pub mod home;
pub mod memory;
#[cfg(feature = "app")]
pub mod mpi;
pub mod observe;
pub mod owners;
pub mod pilot;
pub mod resolution;
pub mod start;
pub mod state;
pub mod step;
pub mod stop;
pub mod timers;
