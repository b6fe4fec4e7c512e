//! Wall time per phase of a run, per rank (seconds). Machine-dependent: reported under
//! `/run`, never part of the reproducible datasets.

use std::time::Instant;

/// Phases of a run whose wall time is reported.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Phase {
    Initial,
    Advance,
    Binning,
    Reduction,
    /// Selecting the surviving samples of each mixed cell.
    Selection,
    Observe,
    Output,
    Checkpoint,
    Bookkeeping,
}

impl Phase {
    /// Every phase, in the order of the report and of `/run/seconds_<name>`.
    pub const ALL: [Phase; 9] = [
        Phase::Initial,
        Phase::Advance,
        Phase::Binning,
        Phase::Reduction,
        Phase::Selection,
        Phase::Observe,
        Phase::Output,
        Phase::Checkpoint,
        Phase::Bookkeeping,
    ];

    /// The name used in reports, CSV columns and `/run/seconds_<name>`.
    pub const fn name(self) -> &'static str {
        PHASES[self as usize]
    }
}

/// Phase names, in [`Phase::ALL`] order.
pub const PHASES: [&str; 9] = [
    "initial",
    "advance",
    "binning",
    "reduction",
    "selection",
    "observe",
    "output",
    "checkpoint",
    "bookkeeping",
];

/// Seconds spent per phase on this rank.
#[derive(Clone, Copy, Debug, Default)]
pub struct Timers {
    pub secs: [f64; PHASES.len()],
}

impl Timers {
    /// Add the time elapsed since `since` to `phase`.
    pub fn add(&mut self, phase: Phase, since: Instant) {
        self.secs[phase as usize] += since.elapsed().as_secs_f64();
    }

    /// Add `seconds` to `phase`.
    pub fn add_secs(&mut self, phase: Phase, seconds: f64) {
        self.secs[phase as usize] += seconds;
    }
}
