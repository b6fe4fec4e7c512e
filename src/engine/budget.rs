//! The sample budget (docs/method.md §3): annihilation at the job's cells first; when that
//! leaves more than half the budget, again at cells twice as coarse in x and k, and so on,
//! up to [`MAX_LEVEL`]. Every pass is the same partition-independent reduction, so the
//! survivors stay bit-identical on any number of ranks and threads.

use crate::engine::annihilate::{Annihilator, Report};
use crate::engine::comm::Comm;
use crate::physics::cells::CellMesh;
use crate::physics::numerics::Setup;
use crate::physics::particles::Store;
use anyhow::Result;

/// Coarsest level: cells 2^MAX_LEVEL times the job's in x and in k.
pub const MAX_LEVEL: u32 = 6;

/// The cell meshes of every level, built once per run.
pub struct Levels {
    meshes: Vec<CellMesh>,
}

impl Levels {
    pub fn new(setup: &Setup) -> Result<Self> {
        let meshes = (0..=MAX_LEVEL)
            .map(|l| CellMesh::at_level(setup, l))
            .collect::<Result<Vec<_>>>()?;
        Ok(Levels { meshes })
    }

    /// Cell sizes of `level`, nm and 1/nm.
    pub fn cell_sizes(&self, level: u32) -> (f64, f64) {
        self.meshes[level as usize].cell_sizes()
    }
}

/// One annihilation within the budget: the combined report (before = the count before the
/// first pass, after = after the last; times and words summed) and the coarsest level used.
pub fn annihilate_within_budget(
    setup: &Setup,
    levels: &Levels,
    annihilator: &mut Annihilator,
    store: &mut Store,
    interval: u64,
    comm: &dyn Comm,
) -> (Report, u32) {
    let target = setup.budget / 2;
    let mut total = annihilator.run(setup, &levels.meshes[0], store, interval, comm);
    let mut level = 0;
    while total.after > target && level < MAX_LEVEL {
        level += 1;
        let r = annihilator.run(setup, &levels.meshes[level as usize], store, interval, comm);
        total.after = r.after;
        total.local_cells = r.local_cells;
        total.words_sent += r.words_sent;
        total.binning_s += r.binning_s;
        total.reduction_s += r.reduction_s;
        total.selection_s += r.selection_s;
    }
    (total, level)
}
