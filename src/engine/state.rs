//! The particles of one rank and the global bookkeeping of a run: what a checkpoint holds.

use crate::physics::estimators::Departed;
use crate::physics::particles::Store;

/// The particles of this rank and the global bookkeeping of the run.
pub struct State {
    pub step: u64,
    pub store: Store,
    /// Initial net sign per group (the estimator's normalisation).
    pub s0: Vec<i64>,
    pub gone: Departed,
    pub initial_count: u64,
    /// Global particle count right after the latest annihilation (0 before the first).
    pub count_after_annihilation: u64,
    pub annihilations: u64,
}
