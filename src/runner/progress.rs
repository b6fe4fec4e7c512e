//! What a run reports while it goes, as events; the command line decides how to show them
//! (the library never prints). Events are emitted on rank 0 only.

use crate::runner::records::PhaseRow;
use std::path::PathBuf;

/// Why a run stopped early with a checkpoint.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum StopReason {
    Signal,
    Walltime,
    Until,
}

/// One progress event.
#[derive(Clone, Debug, PartialEq)]
pub enum Progress {
    /// The initial samples are drawn.
    Started {
        samples: u64,
        /// Initial draws = the target count `numerics.samples`.
        draws: u64,
        ranks: usize,
        threads: usize,
        /// ∫|W|/∫W estimated from the draws.
        abs_over_net: f64,
        /// Emitted samples outside the domain or momentum range (not kept).
        dropped: u64,
    },
    /// A checkpoint was read back.
    Resumed {
        dir: PathBuf,
        time_fs: f64,
        step: u64,
        ranks: usize,
    },
    /// A progress line: at each output and at most every two seconds.
    Step {
        time_fs: f64,
        end_fs: f64,
        /// Live samples on all ranks (after this step's annihilation, if any).
        samples: u64,
        /// ∫|W|/∫W: samples per unit of net sign, at the last output.
        sign_ratio: f64,
        norm: f64,
        events_per_s: f64,
        elapsed_s: f64,
        left_s: f64,
    },
    /// Stopped early with a checkpoint.
    Stopped {
        time_fs: f64,
        why: StopReason,
        dir: PathBuf,
    },
    /// The run reached its end time.
    Finished {
        /// The end time reached (fs).
        time_fs: f64,
        path: PathBuf,
        outputs: usize,
        elapsed_s: f64,
    },
    /// Something the user should know that does not stop the run.
    Warning(String),
    /// Wall time per phase over all ranks, at the end of a run or stop.
    Phases(Vec<PhaseRow>),
}

/// Receiver of progress events.
pub type Sink<'a> = &'a mut dyn FnMut(Progress);
