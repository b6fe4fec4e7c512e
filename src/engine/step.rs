//! One synchronisation step of a run (docs/method.md §2.4, §3): advance every particle,
//! sum the global counts, and, when the trigger says so, place the particles in their home
//! cells and annihilate within the budget. The run's driver and the `check` pilot both call
//! [`sync_step`], so the pilot forecasts exactly what a run does.

use crate::engine::budget::{Annihilation, Pass};
use crate::engine::comm::Comm;
use crate::engine::state::State;
use crate::engine::timers::{Phase, Timers};
use crate::physics::flight::Advancer;
use crate::physics::numerics::Setup;
use anyhow::Result;
use std::time::Instant;

/// The buffers of a run's steps (advance, annihilation, the global sums), kept from one
/// step to the next so that a step allocates only while the counts still grow.
pub struct StepBuffers {
    pub annihilation: Annihilation,
    pub advancer: Advancer,
    sums: Vec<i64>,
}

impl StepBuffers {
    pub fn new(setup: &Setup) -> Result<Self> {
        Ok(StepBuffers {
            annihilation: Annihilation::new(setup)?,
            advancer: Advancer::default(),
            sums: Vec::new(),
        })
    }
}

/// What one step did, in global numbers.
#[derive(Clone, Debug)]
pub struct StepOutcome {
    /// Kernel events of the step on all ranks.
    pub events: u64,
    /// Particles on all ranks right after the advance (before any annihilation).
    pub advanced: u64,
    /// This rank's particles at the start of the step and right after the advance.
    pub local_start: usize,
    pub local_advanced: usize,
    /// Particles on all ranks at the end of the step.
    pub count: u64,
    /// The annihilation of this step, if the trigger fired.
    pub annihilation: Option<Annihilated>,
}

/// An annihilation within the budget (with the placement of the particles before it).
#[derive(Clone, Debug)]
pub struct Annihilated {
    pub pass: Pass,
}

/// Whether a global count triggers annihilation: it has grown by `annihilation.trigger`
/// since t = 0 or since the latest annihilation (whichever count is larger), or it passes
/// the budget (docs/method.md §3). Decided from global integers only.
pub fn triggers(setup: &Setup, st: &State, count: u64) -> bool {
    let reference = st.initial_count.max(st.count_after_annihilation);
    let threshold = ((setup.trigger * reference as f64) as u64).min(setup.budget);
    count > threshold
}

/// Advance `st` by one synchronisation step and annihilate when triggered. The departed
/// tallies, the step number and the annihilation bookkeeping of `st` are updated; the
/// phase times go to `timers`.
pub fn sync_step(
    setup: &Setup,
    buffers: &mut StepBuffers,
    st: &mut State,
    comm: &dyn Comm,
    timers: &mut Timers,
) -> StepOutcome {
    let g = setup.groups as usize;
    let local_start = st.store.len();
    let t0 = Instant::now();
    let tally = buffers
        .advancer
        .advance_in_place(setup, &mut st.store, st.step);
    st.step += 1;
    timers.add(Phase::Advance, t0);
    let t0 = Instant::now();
    let t = &mut buffers.sums;
    t.clear();
    t.extend_from_slice(&tally.absorbed_left);
    t.extend_from_slice(&tally.absorbed_right);
    t.extend_from_slice(&[tally.events as i64, st.store.len() as i64]);
    comm.sum_i64(t);
    for i in 0..g {
        st.gone.left[i] += t[i];
        st.gone.right[i] += t[g + i];
    }
    let events = t[2 * g] as u64;
    let advanced = t[2 * g + 1] as u64;
    let local_advanced = st.store.len();
    timers.add(Phase::Bookkeeping, t0);
    if !triggers(setup, st, advanced) {
        return StepOutcome {
            events,
            advanced,
            local_start,
            local_advanced,
            count: advanced,
            annihilation: None,
        };
    }
    let t0 = Instant::now();
    let pass = buffers
        .annihilation
        .run(setup, &mut st.store, st.step, comm);
    let report = pass.report;
    timers.add_secs(Phase::Binning, report.binning_s);
    timers.add_secs(Phase::Reduction, report.reduction_s);
    // The rest of the call (the global before/after counts, which also absorb the ranks'
    // imbalance in selection) is bookkeeping.
    timers.add_secs(
        Phase::Bookkeeping,
        (t0.elapsed().as_secs_f64() - report.binning_s - report.reduction_s - report.selection_s)
            .max(0.0),
    );
    timers.add_secs(Phase::Selection, report.selection_s);
    st.annihilations += 1;
    st.count_after_annihilation = report.after;
    StepOutcome {
        events,
        advanced,
        local_start,
        local_advanced,
        count: report.after,
        annihilation: Some(Annihilated { pass }),
    }
}
