//! One annihilation within the sample budget (docs/method.md §3): the cells it uses and
//! what it reports.
//!
//! Adaptive resolution (the default): the merge tree of [`crate::engine::resolution`]
//! chooses each region's cells, with the least merging that leaves at most half the budget.
//! Fixed resolution: the job's cells first; when that leaves more than half the budget, the
//! pass is repeated with cells 2×, 4×, … coarser everywhere, up to [`MAX_LEVEL`]. Both are
//! partition-independent reductions, so the survivors are bit-identical on any number of
//! ranks and threads.

use crate::config::job::Resolution;
use crate::engine::annihilate::{Annihilator, Cells, Report};
use crate::engine::comm::Comm;
use crate::engine::home;
use crate::engine::resolution::{self, LADDER, Z_STRUCTURE};
use crate::physics::cells::{CellMesh, MAX_LEVEL};
use crate::physics::numerics::Setup;
use crate::physics::particles::Store;
use anyhow::Result;

/// What one annihilation did, beyond the counts.
#[derive(Clone, Debug, Default)]
pub struct Pass {
    pub report: Report,
    /// Mean level of the samples in cells that held both signs (fixed: the level used).
    pub mean_level: f64,
    /// Coarsest level of such cells.
    pub coarsest_level: u32,
    /// Adaptive: the χ² normal-score threshold used (2: the sign patterns the samples
    /// resolve are kept; larger: cells whose signs were spread unalike were merged).
    /// Fixed: NaN.
    pub threshold: f64,
    /// True when the budget forced cells beyond the least merging (a coarser fixed level,
    /// or an adaptive threshold above the first rung).
    pub forced: bool,
    /// Share of the samples in cells holding both signs that were annihilated in cells
    /// coarser than the structure scales (`Setup::scale_level`).
    pub beyond_scales: f64,
}

/// The cell hierarchy and the buffers of annihilation, kept for the whole run.
pub struct Annihilation {
    mesh: CellMesh,
    resolution: resolution::Resolution,
    annihilator: Annihilator,
}

impl Annihilation {
    pub fn new(setup: &Setup) -> Result<Self> {
        Ok(Annihilation {
            mesh: CellMesh::new(setup)?,
            resolution: resolution::Resolution::default(),
            annihilator: Annihilator::default(),
        })
    }

    /// Cell sizes of `level`, nm and 1/nm.
    pub fn cell_sizes(&self, level: u32) -> (f64, f64) {
        self.mesh.cell_sizes(level)
    }

    /// Place the particles in their home cells ([`home::migrate`]), then annihilate
    /// `store` in place (`interval` keys the survivor priorities). The report's words and
    /// messages are all this rank sent in the call, placement included; the placement's
    /// wall seconds are in its reduction time.
    pub fn run(
        &mut self,
        setup: &Setup,
        store: &mut Store,
        interval: u64,
        comm: &dyn Comm,
    ) -> Pass {
        let sent_before = comm.sent();
        let t0 = std::time::Instant::now();
        home::migrate(&self.mesh, store, comm);
        let placing_s = t0.elapsed().as_secs_f64();
        let mut pass = self.annihilate(setup, store, interval, comm);
        let sent = comm.sent() - sent_before;
        pass.report.words_sent = sent.words;
        pass.report.messages_sent = sent.messages;
        pass.report.reduction_s += placing_s;
        pass
    }

    fn annihilate(
        &mut self,
        setup: &Setup,
        store: &mut Store,
        interval: u64,
        comm: &dyn Comm,
    ) -> Pass {
        let target = setup.budget / 2;
        match setup.resolution {
            Resolution::Adaptive => {
                let out = self.resolution.resolve(&self.mesh, store, target, comm);
                let cells = self.resolution.leaves(&self.mesh);
                let mut report = self.annihilator.run(setup, cells, store, interval, comm);
                debug_assert_eq!(report.after, out.after, "the tree's count is exact");
                report.binning_s += out.seconds;
                let mixed: u64 = out.mixed_by_level.iter().sum();
                let beyond: u64 = out.mixed_by_level
                    [(setup.scale_level(crate::physics::cells::MAX_LEVEL) as usize + 1)..]
                    .iter()
                    .sum();
                Pass {
                    report,
                    beyond_scales: if mixed == 0 {
                        0.0
                    } else {
                        beyond as f64 / mixed as f64
                    },
                    mean_level: out.mean_level(),
                    coarsest_level: out.coarsest_level(),
                    threshold: LADDER[out.rung].1,
                    forced: LADDER[out.rung].1 > Z_STRUCTURE,
                }
            }
            Resolution::Fixed => {
                let a = &mut self.annihilator;
                let mesh = &self.mesh;
                let mut total = a.run(setup, Cells::Level(mesh, 0), store, interval, comm);
                let mut level = 0;
                while total.after > target && level < MAX_LEVEL {
                    level += 1;
                    let r = a.run(setup, Cells::Level(mesh, level), store, interval, comm);
                    total.after = r.after;
                    total.local_cells = r.local_cells;
                    total.binning_s += r.binning_s;
                    total.reduction_s += r.reduction_s;
                    total.selection_s += r.selection_s;
                }
                Pass {
                    report: total,
                    beyond_scales: if level > setup.scale_level(crate::physics::cells::MAX_LEVEL) {
                        1.0
                    } else {
                        0.0
                    },
                    mean_level: f64::from(level),
                    coarsest_level: level,
                    threshold: f64::NAN,
                    forced: level > 0,
                }
            }
        }
    }
}
