//! The initial particles of a run, sampled over ranks (docs/method.md §1): D draws split
//! into contiguous ranges, one per rank, so the sample does not depend on the rank count.

use crate::engine::comm::Comm;
use crate::engine::state::State;
use crate::physics::estimators::Departed;
use crate::physics::initial;
use crate::physics::numerics::Setup;
use anyhow::{Result, bail};

/// Sample the initial particles: D = target draws split over ranks by contiguous ranges.
pub fn initial_state(setup: &Setup, comm: &dyn Comm) -> Result<(State, InitialReport)> {
    let w = setup.initial_state()?;
    let d = setup.target;
    let (r, p) = (comm.rank() as u64, comm.size() as u64);
    let (from, to) = (d * r / p, d * (r + 1) / p);
    let s = draw_sums(&w, setup.seed, d, comm);
    let admit = Inside(setup);
    let plan = initial::EmitPlan {
        seed: setup.seed,
        abs_sum: s[0],
        target: setup.target,
        groups: setup.groups,
    };
    let (store, dropped) = initial::emit(&w, &plan, from, to, &admit);
    let g = setup.groups as usize;
    let mut s0 = vec![0i64; g];
    for (id, &sign) in store.id.iter().zip(&store.sign) {
        s0[crate::physics::rng::group_of(*id) as usize] += sign as i64;
    }
    let mut counts: Vec<i64> = s0.clone();
    counts.push(store.len() as i64);
    counts.push(dropped as i64);
    comm.sum_i64(&mut counts);
    let (dropped, total) = (counts.pop().unwrap_or(0), counts.pop().unwrap_or(0));
    let s0 = counts;
    if let Some(gr) = s0.iter().position(|&v| v <= 0) {
        bail!(
            "error group {gr} has no positive net norm at t = 0 ({} net samples): raise numerics.samples or lower numerics.groups",
            s0[gr]
        );
    }
    let report = InitialReport {
        abs_over_net: s[0] as f64 / s[1] as f64,
        draws: d,
        particles: total as u64,
        dropped: dropped as u64,
    };
    let state = State {
        step: 0,
        store,
        s0,
        gone: Departed {
            left: vec![0; g],
            right: vec![0; g],
        },
        initial_count: total as u64,
        count_after_annihilation: 0,
        annihilations: 0,
    };
    Ok((state, report))
}

/// Σ|r_d| and Σr_d (fixed point) over the initial draws d ∈ [0, draws), each rank summing
/// its contiguous share: the same integers on any rank count. With `draws` = the target
/// (`numerics.samples`) their ratio is the ∫|W|/∫W a run reports at t = 0.
pub fn draw_sums(w: &initial::NBodyWigner, seed: u64, draws: u64, comm: &dyn Comm) -> [i128; 2] {
    let (r, p) = (comm.rank() as u64, comm.size() as u64);
    let sums = initial::sum_draws(w, seed, draws * r / p, draws * (r + 1) / p);
    let mut s = [sums.abs, sums.net];
    comm.sum_i128(&mut s);
    s
}

/// ∫|W|/∫W estimated from the first `draws` initial draws of the run (all ranks).
pub fn sign_ratio(setup: &Setup, draws: u64, comm: &dyn Comm) -> Result<f64> {
    let s = draw_sums(&setup.initial_state()?, setup.seed, draws, comm);
    Ok(s[0] as f64 / s[1] as f64)
}

/// Facts about the initial sampling.
pub struct InitialReport {
    /// ∫|W| / ∫W estimated from the draws (particles per unit of net norm).
    pub abs_over_net: f64,
    /// Initial draws (the target `numerics.samples`); each emits ⌊|w_d|/w₀ + U⌋ copies.
    pub draws: u64,
    pub particles: u64,
    /// Emitted particles that fell outside the domain or momentum range (not kept).
    pub dropped: u64,
}

struct Inside<'a>(&'a Setup);

impl initial::Admit for Inside<'_> {
    fn admits(&self, x: &[f64], k: &[f64]) -> bool {
        let s = self.0;
        x.iter().all(|&v| v >= s.lo && v < s.hi) && k.iter().all(|&v| v.abs() <= s.k_max)
    }
}
