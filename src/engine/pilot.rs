//! The pilot behind `check`'s forecast (docs/method.md §3, "Memory forecast"): a few
//! synchronisation steps of the job on a small sample, through the run's own initial
//! sampling and step ([`crate::engine::start`], [`crate::engine::step`]), with the same
//! numerics and seed rule and nothing written. From it: the growth per step, the fraction
//! surviving an annihilation and how occupied cells grow with the particle count; then a
//! projection of the count over the whole job (scaled by the sample ratio, capped by the
//! budget) and the memory per rank at its peak ([`crate::engine::memory`]).

use crate::config::job::Resolution;
use crate::engine::budget::Annihilation;
use crate::engine::comm::Comm;
use crate::engine::memory::{Forecast, Load};
use crate::engine::start::initial_state;
use crate::engine::step::{StepBuffers, sync_step};
use crate::engine::timers::Timers;
use crate::physics::cells::CellMesh;
use crate::physics::cells::MAX_LEVEL;
use crate::physics::numerics::Setup;
use crate::physics::particles::Store;
use anyhow::Result;

/// Initial particles of the pilot (all ranks), at most.
pub const PILOT_SAMPLE: u64 = 20_000;
/// Synchronisation steps of the pilot, at most.
pub const PILOT_STEPS: u64 = 6;

/// What the pilot measured, in global numbers of the pilot's sample.
#[derive(Clone, Debug)]
pub struct Pilot {
    /// Initial particles of the pilot and of the job (all ranks).
    pub sample: u64,
    pub job_initial: f64,
    /// Job particles per pilot particle (`numerics.samples` / pilot target).
    pub ratio: f64,
    pub steps: u64,
    /// Count of the pilot at the start and at the end of its steps.
    pub initial: u64,
    pub last: u64,
    /// Mean factor by which an advance multiplied the count (geometric mean over the steps).
    pub growth: f64,
    /// Largest such factor of one step.
    pub growth_max: f64,
    /// Fraction surviving one annihilation at the job's cells, measured on the pilot's
    /// particles after its steps.
    pub survival: f64,
    /// The same for thinned copies (every 4th, every 2nd, all): (particles before, after),
    /// all ranks.
    pub cancellation: [(f64, f64); 3],
    /// Annihilations the trigger fired during the pilot.
    pub annihilations: u64,
    /// Occupied cells at the job's cells against particles, per rank, for thinned copies
    /// of the pilot's particles (every 4th, every 2nd, all): (particles, cells).
    pub occupancy: [(f64, f64); 3],
    /// Adaptive resolution: occupied cells of every level of the merge tree (the merge
    /// tree's nodes), for the same copies, per rank: [level][copy] = (particles, cells).
    pub tree: Vec<[(f64, f64); 3]>,
    /// Wall seconds of the pilot.
    pub seconds: f64,
}

impl Pilot {
    /// Exponent α of occupied cells ∝ particles^α between the thinnest and the full copy.
    pub fn occupancy_exponent(&self) -> f64 {
        // A straight line through the three points in log-log (least squares).
        let pts: Vec<(f64, f64)> = self
            .occupancy
            .iter()
            .filter(|(n, c)| *n > 0.0 && *c > 0.0)
            .map(|(n, c)| (n.ln(), c.ln()))
            .collect();
        slope(&pts).map_or(1.0, |a| a.clamp(0.0, 1.0))
    }

    /// Nodes of every level of the merge tree on one rank holding `particles` particles,
    /// each extrapolated by its own power law (as [`Pilot::cells_at`]).
    pub fn tree_at(&self, particles: f64) -> Vec<f64> {
        self.tree
            .iter()
            .map(|pts| {
                let logs: Vec<(f64, f64)> = pts
                    .iter()
                    .filter(|(n, c)| *n > 0.0 && *c > 0.0)
                    .map(|(n, c)| (n.ln(), c.ln()))
                    .collect();
                let a = slope(&logs).map_or(1.0, |a| a.clamp(0.0, 1.0));
                let (n, c) = pts[2];
                if n <= 0.0 || c <= 0.0 {
                    particles
                } else {
                    (c * (particles / n).powf(a)).min(particles)
                }
            })
            .collect()
    }

    /// Fraction surviving one annihilation at the job's cells when `count` particles (all
    /// ranks) of the pilot's distribution are annihilated: s(n) = s∞ + b/√n fitted to the
    /// thinned copies. In a cell whose signs nearly balance, the survivors |P − Q| are a
    /// Poisson fluctuation ∝ √(P + Q), so their share falls as 1/√n; cells dominated by one
    /// sign keep a fixed share s∞. Within [0, 1]; the measured share of the full copy when
    /// the fit does not fall with n.
    pub fn survival_at(&self, count: f64) -> f64 {
        let pts: Vec<(f64, f64)> = self
            .cancellation
            .iter()
            .filter(|(n, _)| *n > 0.0)
            .map(|(n, a)| (1.0 / n.sqrt(), a / n))
            .collect();
        match (slope(&pts), pts.len()) {
            (Some(b), len) if b > 0.0 => {
                let (mx, my) = pts.iter().fold((0.0, 0.0), |(x, y), p| (x + p.0, y + p.1));
                let a = (my - b * mx) / len as f64;
                (a + b / count.max(1.0).sqrt()).clamp(0.0, 1.0)
            }
            _ => self.survival,
        }
    }

    /// Occupied cells of one rank holding `particles` particles, extrapolated by the power
    /// law of [`Pilot::occupancy_exponent`] (no more cells than particles).
    pub fn cells_at(&self, particles: f64) -> f64 {
        let (n, c) = self.occupancy[2];
        if n <= 0.0 || c <= 0.0 {
            return particles;
        }
        (c * (particles / n).powf(self.occupancy_exponent())).min(particles)
    }
}

/// Least-squares slope of points (x, y); None for fewer than two distinct x.
fn slope(pts: &[(f64, f64)]) -> Option<f64> {
    let n = pts.len() as f64;
    if pts.len() < 2 {
        return None;
    }
    let (mx, my) = pts
        .iter()
        .fold((0.0, 0.0), |(x, y), p| (x + p.0 / n, y + p.1 / n));
    let sxx: f64 = pts.iter().map(|p| (p.0 - mx).powi(2)).sum();
    let sxy: f64 = pts.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
    (sxx > 0.0).then(|| sxy / sxx)
}

/// The projected run: peak count, when, and what the annihilation at the peak leaves.
#[derive(Clone, Copy, Debug)]
pub struct Projection {
    /// Largest global count (right after an advance).
    pub peak: f64,
    /// Step at which it is first reached (budget-bound: the first step at which the bound
    /// rate 2Γ_max could reach the budget).
    pub peak_step: u64,
    /// Global count right after the annihilation at the peak (the peak itself when the
    /// count never triggers one).
    pub after: f64,
    /// Children born in the step that reaches the peak.
    pub births: f64,
    /// Whether the budget bounds the count (the count can reach it within the job).
    pub budget_bound: bool,
    /// Annihilations projected over the whole job (at least one when budget-bound).
    pub annihilations: u64,
}

/// Run the pilot: `setup`'s particles and budget (and, if its sample leaves an error group
/// with no positive net norm, the groups) are scaled down for its duration and restored
/// before returning.
pub fn pilot(setup: &mut Setup, comm: &dyn Comm) -> Result<Pilot> {
    let started = std::time::Instant::now();
    let saved = (setup.target, setup.budget);
    let sample = setup.target.min(PILOT_SAMPLE);
    let ratio = setup.target as f64 / sample as f64;
    setup.target = sample;
    setup.budget = ((setup.budget as f64 / ratio).round() as u64).max(1);
    // A small sample of a strongly signed state can leave an error group with no positive
    // net norm, which the run itself would refuse; the pilot needs counts, not error bars,
    // so it then measures with one group (cells then span the groups, so it cancels a
    // little more than the run will).
    let groups = setup.groups;
    let measured = measure(setup, comm).or_else(|_| {
        setup.groups = 1;
        let m = measure(setup, comm);
        setup.groups = groups;
        m
    });
    (setup.target, setup.budget) = saved;
    let mut p = measured?;
    p.ratio = ratio;
    p.job_initial = p.initial as f64 * ratio;
    p.seconds = started.elapsed().as_secs_f64();
    Ok(p)
}

fn measure(setup: &mut Setup, comm: &dyn Comm) -> Result<Pilot> {
    let (mut st, _) = initial_state(setup, comm)?;
    let mut buffers = StepBuffers::new(setup)?;
    let mut timers = Timers::default();
    let initial = st.initial_count;
    let steps = setup.steps.min(PILOT_STEPS);
    let (mut log_growth, mut growth_max) = (0.0, 1.0f64);
    let mut count = initial;
    for _ in 0..steps {
        let out = sync_step(setup, &mut buffers, &mut st, comm, &mut timers);
        let g = out.advanced as f64 / count.max(1) as f64;
        log_growth += g.max(1e-300).ln();
        growth_max = growth_max.max(g);
        count = out.count;
    }
    let growth = if steps > 0 {
        (log_growth / steps as f64).exp()
    } else {
        1.0
    };
    // Occupied cells and survival at the job's cells (level 0: no budget for these
    // measuring passes), on thinned copies of this rank's particles.
    let budget = setup.budget;
    setup.budget = u64::MAX;
    let mut occupancy = [(0.0, 0.0); 3];
    let mut cancellation = [(0.0, 0.0); 3];
    // The levels of the merge tree (as `budget::Annihilation::run` builds it).
    let adaptive = setup.resolution == Resolution::Adaptive;
    let mesh = CellMesh::new(setup)?;
    let path: Vec<u32> = (0..=MAX_LEVEL).collect();
    let mut tree = if adaptive {
        vec![[(0.0, 0.0); 3]; path.len()]
    } else {
        Vec::new()
    };
    let mut survival = 1.0;
    for (slot, every) in [4usize, 2, 1].into_iter().enumerate() {
        let mut copy = Store::new(st.store.n);
        for p in (0..st.store.len()).step_by(every) {
            copy.push(
                st.store.xs(p),
                st.store.ks(p),
                st.store.id[p],
                st.store.sign[p],
            );
        }
        let ranks = comm.size() as f64;
        for (l, level) in path.iter().enumerate().filter(|_| adaptive) {
            let mut seen = std::collections::HashSet::with_capacity(copy.len());
            for p in 0..copy.len() {
                seen.insert(mesh.key_at(copy.xs(p), copy.ks(p), copy.id[p], *level));
            }
            let mut v = [copy.len() as i64, seen.len() as i64];
            comm.sum_i64(&mut v);
            tree[l][slot] = (v[0] as f64 / ranks, v[1] as f64 / ranks);
        }
        let mut local = [copy.len() as i64, 0];
        let rep = Annihilation::new(setup)?
            .run(setup, &mut copy, st.step, comm)
            .report;
        local[1] = rep.local_cells as i64;
        comm.sum_i64(&mut local);
        occupancy[slot] = (local[0] as f64 / ranks, local[1] as f64 / ranks);
        cancellation[slot] = (rep.before as f64, rep.after as f64);
        if every == 1 && rep.before > 0 {
            survival = rep.after as f64 / rep.before as f64;
        }
    }
    setup.budget = budget;
    Ok(Pilot {
        sample: setup.target,
        job_initial: 0.0,
        ratio: 1.0,
        steps,
        initial,
        last: count,
        growth,
        growth_max,
        survival,
        cancellation,
        annihilations: st.annihilations,
        occupancy,
        tree,
        seconds: 0.0,
    })
}

/// Project the job's global count (docs/method.md §3, "Memory forecast").
///
/// The pilot sees only the first steps; later growth (a packet reaching a barrier) and the
/// cancellation at the full count (more particles per cell, more negative particles) are
/// beyond it. So the budget decides: when the count can reach `annihilation.budget` within
/// the job at the bound rate 2Γ_max (C₀·exp(2Γ_max·T) > budget), the run is taken to
/// reach it, and the peak is the budget plus one step of the pilot's largest growth per
/// step (the trigger fires at the first count past the budget). Otherwise the count grows
/// at the pilot's mean rate, is annihilated by the run's trigger rule to the pilot's
/// surviving fraction, and never passes C₀·exp(2Γ_max·t).
pub fn project(setup: &Setup, p: &Pilot) -> Projection {
    let c0 = p.job_initial;
    let budget = setup.budget as f64;
    let g = p.growth.max(1.0);
    let end = setup.steps as f64 * setup.dt;
    let bound_rate = 2.0 * setup.gamma_max;
    let reach = c0 * (bound_rate * end).exp();
    if setup.gamma_max > 0.0 && reach > budget {
        let g_max = p.growth_max.max(1.0);
        let peak = budget * g_max;
        // The first step at which the bound rate reaches the budget.
        let step = ((budget / c0.max(1.0)).ln() / bound_rate / setup.dt)
            .ceil()
            .max(1.0) as u64;
        return Projection {
            peak,
            peak_step: step.min(setup.steps),
            after: (peak * p.survival_at(peak)).min(0.5 * budget),
            births: peak - peak / g_max,
            budget_bound: true,
            annihilations: 1,
        };
    }
    let (mut count, mut after_latest) = (c0, 0.0f64);
    let mut proj = Projection {
        peak: c0,
        peak_step: 0,
        after: c0,
        births: 0.0,
        budget_bound: false,
        annihilations: 0,
    };
    for step in 1..=setup.steps {
        let start = count;
        let bound = c0 * (bound_rate * step as f64 * setup.dt).exp();
        count = (count * g).min(bound);
        let threshold = (setup.trigger * c0.max(after_latest)).min(budget);
        let fires = count > threshold;
        let after = if fires {
            (count * p.survival_at(count)).min(0.5 * budget)
        } else {
            count
        };
        if count > proj.peak {
            proj.peak = count;
            proj.peak_step = step;
            proj.after = after;
            proj.births = count - start;
        }
        if fires {
            proj.annihilations += 1;
            after_latest = after;
        }
        count = after;
    }
    proj
}

/// The largest count the budget allows when the count reaches it: one step at the bound
/// rate past the budget, budget × exp(2Γ_max·Δt) (the expected growth of one step cannot
/// exceed it). None when the projection is not bounded by the budget.
pub fn budget_limit(setup: &Setup, p: &Pilot, proj: &Projection) -> Option<Projection> {
    if !proj.budget_bound {
        return None;
    }
    let budget = setup.budget as f64;
    let g = (2.0 * setup.gamma_max * setup.dt).exp();
    let peak = budget * g;
    Some(Projection {
        peak,
        after: (peak * p.survival_at(peak)).min(0.5 * budget),
        births: peak - peak / g,
        ..*proj
    })
}

/// The memory forecast of one rank at the projected peak.
pub fn forecast(
    setup: &Setup,
    p: &Pilot,
    proj: &Projection,
    ranks: usize,
    threads: usize,
    runtime: f64,
) -> Forecast {
    let r = ranks.max(1) as f64;
    let per_rank = proj.peak / r;
    let load = Load {
        particles: per_rank,
        after: proj.after / r,
        births: proj.births / r,
        cells: p.cells_at(per_rank),
        survival: p.survival_at(proj.peak),
        annihilates: proj.annihilations > 0,
        tree: p.tree_at(per_rank),
        ranks,
        threads,
        runtime,
    };
    Forecast::new(setup, &load)
}
