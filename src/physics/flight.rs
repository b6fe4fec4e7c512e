//! Event-by-event flight of every particle between two synchronisation times (docs/method.md §2).
//!
//! Between events a particle follows the exact classical flight under the drift forces
//! (dx_i/dt = ħk_i/m, dk_i/dt = −U_f'(x_i)/ħ). Generation events come at rate
//! Γ(z) = Σ_i γ₁(x_i) + Σ_{i<j} γ₂(x_i − x_j) (γ and the kernel linearly interpolated
//! between mesh points, see [`rates`]), sampled exactly by thinning: candidates at
//! rate Γ_max (a bound from the tables), each accepted with probability Γ(z)/Γ_max. At an
//! event the parent continues; a particle of sign s is added at k + q and one of sign −s at
//! k − q, where q = MΔk on one particle (one-body term) or (+MΔk, −MΔk) on a pair (Δk = π/P of
//! the term's table). Children
//! start at their birth time and fly to the end of the interval with their own stream.
//! Wavevectors are continuous and unbounded: a particle or child with |k| > k_max is kept
//! (removing it alone would change the net sign; docs/method.md §2.5). Only transfers are
//! capped, |M| ≤ K.
//! Everything a particle does depends only on its own state, identity and the interval.

use crate::config::job::Boundary;
use crate::physics::numerics::Setup;
use crate::physics::particles::Store;
use crate::physics::rng::{self, tag};
use rand::Rng;
use rayon::prelude::*;

/// Signed counts of particles that left during an interval, per error group.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Tally {
    pub absorbed_left: Vec<i64>,
    pub absorbed_right: Vec<i64>,
    /// Accepted generation events and thinning candidates.
    pub events: u64,
    pub candidates: u64,
}

impl Tally {
    /// Zero counts for `groups` groups, keeping the buffers.
    pub fn reset(&mut self, groups: usize) {
        self.absorbed_left.clear();
        self.absorbed_left.resize(groups, 0);
        self.absorbed_right.clear();
        self.absorbed_right.resize(groups, 0);
        self.events = 0;
        self.candidates = 0;
    }
    pub fn new(groups: usize) -> Self {
        let mut t = Tally::default();
        t.reset(groups);
        t
    }
    pub fn add(&mut self, o: &Tally) {
        for (a, b) in self.absorbed_left.iter_mut().zip(&o.absorbed_left) {
            *a += b;
        }
        for (a, b) in self.absorbed_right.iter_mut().zip(&o.absorbed_right) {
            *a += b;
        }
        self.events += o.events;
        self.candidates += o.candidates;
    }
}

pub use crate::config::limits::MAX_N;

/// A particle in flight: coordinates, identity, sign, and the time it has reached (fs from
/// the start of the interval).
#[derive(Clone, Copy)]
struct Flying {
    x: [f64; MAX_N],
    k: [f64; MAX_N],
    id: u64,
    sign: i8,
    tau: f64,
}

enum Fate {
    Inside,
    Left,
    Right,
}

/// Apply the boundary to coordinate (x, k). Reflecting folds the straight flight back
/// (exact for free flight); periodic wraps.
#[inline]
fn boundary(setup: &Setup, x: &mut f64, k: &mut f64) -> Fate {
    let (lo, hi) = (setup.lo, setup.hi);
    if *x >= lo && *x < hi {
        return Fate::Inside;
    }
    let w = hi - lo;
    match setup.boundary {
        Boundary::Absorbing => {
            if *x < lo {
                Fate::Left
            } else {
                Fate::Right
            }
        }
        Boundary::Periodic => {
            *x = lo + (*x - lo).rem_euclid(w);
            if *x >= hi {
                *x = lo;
            }
            Fate::Inside
        }
        Boundary::Reflecting => {
            crate::physics::images::fold(lo, hi, x, k);
            Fate::Inside
        }
    }
}

/// Γ(z) and, when `pick` is given (a uniform in [0, Γ_max)), the chosen term and kernel row:
/// one-body term of particle i → (i, None, row); pair (i, j) → (i, Some(j), row).
///
/// Each term's rate is the linear interpolation γ(x) = (1 − t)γ_j + t γ_{j+1} between the
/// two mesh points around its coordinate (`KernelTable::interpolation`), and its interval
/// [S, S + γ(x)) of the running sum is split into [S, S + (1 − t)γ_j) for row j and the rest
/// for row j + 1. A uniform `pick` therefore selects (term, row r) with probability
/// w_r γ_r / Γ_max, and M is then drawn from V_w⁺(x_r, ·)/γ_r: the event generates transfer M
/// at rate (1 − t)V_w⁺(x_j, M) + t V_w⁺(x_{j+1}, M), which is the same as choosing row j with
/// probability 1 − t and row j + 1 with probability t at each candidate (docs/method.md §2.4).
/// The random number is the particle's own `pick`; no other draw is made.
#[inline]
fn rates(
    setup: &Setup,
    x: &[f64],
    pick: Option<f64>,
) -> (f64, Option<(usize, Option<usize>, usize)>) {
    let n = x.len();
    let mut total = 0.0;
    if let Some(t) = &setup.table1 {
        for (i, &xi) in x.iter().enumerate() {
            if let Some(rows) = t.interpolation(xi) {
                for (row, w) in rows {
                    total += w * t.gamma[row];
                    if pick.is_some_and(|u| u < total) {
                        return (total, Some((i, None, row)));
                    }
                }
            }
        }
    }
    if let Some(t) = &setup.table2 {
        for i in 0..n {
            for j in i + 1..n {
                if let Some(rows) = t.interpolation(setup.separation(x[i], x[j])) {
                    for (row, w) in rows {
                        total += w * t.gamma[row];
                        if pick.is_some_and(|u| u < total) {
                            return (total, Some((i, Some(j), row)));
                        }
                    }
                }
            }
        }
    }
    (total, None)
}

/// Fly one particle in place (and, through `stack`, its descendants) to the end of
/// interval `interval`. Returns whether the start particle survives (its record then holds
/// its new state); surviving descendants are pushed into `children`. `FREE`: no drift force
/// (a separate instance, so that the free flight computes nothing of the force).
fn fly<const FREE: bool>(
    setup: &Setup,
    interval: u64,
    start: &mut Flying,
    children: &mut Store,
    tally: &mut Tally,
    stack: &mut Vec<Flying>,
) -> bool {
    let n = setup.n;
    let alive = flight::<FREE>(setup, interval, start, tally, stack);
    while let Some(mut p) = stack.pop() {
        if flight::<FREE>(setup, interval, &mut p, tally, stack) {
            children.push(&p.x[..n], &p.k[..n], p.id, p.sign);
        }
    }
    alive
}

/// Fly particle `p` in place to the end of the interval (or until it leaves), pushing its
/// children onto `stack`. Returns whether it is still there at the end of the interval.
#[inline]
fn flight<const FREE: bool>(
    setup: &Setup,
    interval: u64,
    p: &mut Flying,
    tally: &mut Tally,
    stack: &mut Vec<Flying>,
) -> bool {
    let n = setup.n;
    let dt = setup.dt;
    let gmax = setup.gamma_max;
    let force = setup.one_body.force;
    let group = rng::group_of(p.id) as usize;
    // Without kernel events no random number is drawn: seed the stream only when needed.
    let mut rs = (gmax > 0.0).then(|| rng::stream(&[setup.seed, tag::FLIGHT, p.id, interval]));
    let mut births = 0u64;
    loop {
        let next = if let Some(rs) = rs.as_mut() {
            let u: f64 = rs.random();
            (p.tau - (1.0 - u).ln() / gmax).min(dt)
        } else {
            dt
        };
        let h = next - p.tau;
        for i in 0..n {
            let (xi, ki) = if FREE {
                (
                    p.x[i] + crate::physics::units::velocity(p.k[i], setup.mass) * h,
                    p.k[i],
                )
            } else {
                force.fly(p.x[i], p.k[i], h, setup.mass)
            };
            p.x[i] = xi;
            p.k[i] = ki;
        }
        p.tau = next;
        for i in 0..n {
            match boundary(setup, &mut p.x[i], &mut p.k[i]) {
                Fate::Inside => {}
                Fate::Left => {
                    tally.absorbed_left[group] += p.sign as i64;
                    return false;
                }
                Fate::Right => {
                    tally.absorbed_right[group] += p.sign as i64;
                    return false;
                }
            }
        }
        if next >= dt {
            return true;
        }
        // Only candidate times (gmax > 0) end a flight before dt.
        let rs = rs.as_mut().expect("a candidate time has a stream");
        tally.candidates += 1;
        let u: f64 = rs.random::<f64>() * gmax;
        let (_, chosen) = rates(setup, &p.x[..n], Some(u));
        let Some((i, j, cell)) = chosen else { continue };
        tally.events += 1;
        let table = if j.is_none() {
            setup.table1.as_ref()
        } else {
            setup.table2.as_ref()
        }
        .expect("a chosen term has a table");
        // Each table has its own lattice, Δk = π/P (docs/method.md §2.3).
        let q = table.sample(cell, rs) as f64 * table.dk;
        for (child_sign, dir) in [(p.sign, 1.0), (-p.sign, -1.0)] {
            let mut k = p.k;
            k[i] += dir * q;
            if let Some(j) = j {
                k[j] -= dir * q;
            }
            let id = rng::make_id(
                group as u32,
                rng::hash(&[setup.seed, tag::CHILD_ID, p.id, interval, births]),
            );
            births += 1;
            stack.push(Flying {
                x: p.x,
                k,
                id,
                sign: child_sign,
                tau: p.tau,
            });
        }
    }
}

/// Particles per parallel task of [`advance_in_place`].
const CHUNK: usize = 2048;

/// Store position of particle `p` of task `chunk`: chunk·[`CHUNK`] + p, a full-width
/// index (a store may hold more than 2^32 samples).
#[inline]
fn slot(chunk: usize, p: usize) -> usize {
    chunk * CHUNK + p
}

/// The buffers of one parallel task of the advance, kept from one step to the next.
struct Task {
    children: Store,
    gone: Vec<usize>,
    tally: Tally,
    stack: Vec<Flying>,
}

/// The buffers of the advance, kept for a whole run so that a step allocates only while
/// its particle count still grows (tests/allocations.rs).
#[derive(Default)]
pub struct Advancer {
    tasks: Vec<Task>,
    keep: Vec<bool>,
    tally: Tally,
}

impl Advancer {
    /// Advance every particle of `store` through synchronisation interval `interval`
    /// (from t = interval·dt to (interval + 1)·dt), in place: survivors keep their slot
    /// (the store is compacted only when some left), children are appended. Returns the
    /// tallies of the interval.
    pub fn advance_in_place(&mut self, setup: &Setup, store: &mut Store, interval: u64) -> &Tally {
        let n = setup.n;
        let groups = setup.groups as usize;
        let free = setup.one_body.force.is_zero();
        let chunks = store.len().div_ceil(CHUNK);
        if self.tasks.len() < chunks {
            self.tasks.resize_with(chunks, || Task {
                children: Store::new(n),
                gone: Vec::new(),
                tally: Tally::new(groups),
                stack: Vec::new(),
            });
        }
        // Tasks are alike: each gets the room the roomiest one has, so that a task's buffers
        // reallocate only when some task passes the largest count yet (then all grow once).
        let room = self
            .tasks
            .iter()
            .map(|t| (t.children.capacity(), t.gone.capacity(), t.stack.capacity()))
            .fold((0, 0, 0), |a, b| (a.0.max(b.0), a.1.max(b.1), a.2.max(b.2)));
        for t in &mut self.tasks {
            t.children.truncate(0);
            t.children.reserve(room.0);
            t.gone.clear();
            t.gone.reserve(room.1);
            t.stack.reserve(room.2);
        }
        store
            .x
            .par_chunks_mut(CHUNK * n)
            .zip(store.k.par_chunks_mut(CHUNK * n))
            .zip(store.id.par_chunks(CHUNK))
            .zip(store.sign.par_chunks(CHUNK))
            .zip(self.tasks[..chunks].par_iter_mut())
            .enumerate()
            .for_each(|(c, ((((xs, ks), ids), signs), task))| {
                task.tally.reset(groups);
                // One start record, overwritten per particle (entries beyond n stay 0).
                let mut start = Flying {
                    x: [0.0; MAX_N],
                    k: [0.0; MAX_N],
                    id: 0,
                    sign: 0,
                    tau: 0.0,
                };
                for p in 0..ids.len() {
                    start.x[..n].copy_from_slice(&xs[p * n..(p + 1) * n]);
                    start.k[..n].copy_from_slice(&ks[p * n..(p + 1) * n]);
                    start.id = ids[p];
                    start.sign = signs[p];
                    start.tau = 0.0;
                    let Task {
                        children,
                        tally,
                        stack,
                        ..
                    } = task;
                    let alive = if free {
                        fly::<true>(setup, interval, &mut start, children, tally, stack)
                    } else {
                        fly::<false>(setup, interval, &mut start, children, tally, stack)
                    };
                    if alive {
                        xs[p * n..(p + 1) * n].copy_from_slice(&start.x[..n]);
                        ks[p * n..(p + 1) * n].copy_from_slice(&start.k[..n]);
                    } else {
                        task.gone.push(slot(c, p));
                    }
                }
            });
        let tasks = &mut self.tasks[..chunks];
        self.tally.reset(groups);
        if tasks.iter().any(|t| !t.gone.is_empty()) {
            self.keep.clear();
            self.keep.resize(store.len(), true);
            for t in tasks.iter() {
                for &p in &t.gone {
                    self.keep[p] = false;
                }
            }
            store.retain(&self.keep);
        }
        let extra: usize = tasks.iter().map(|t| t.children.len()).sum();
        store.reserve(extra);
        for t in tasks.iter_mut() {
            store.append(&mut t.children);
            self.tally.add(&t.tally);
        }
        &self.tally
    }
}

/// Advance every particle of `store` through synchronisation interval `interval` with
/// fresh buffers (see [`Advancer::advance_in_place`]; a run keeps one [`Advancer`]).
pub fn advance_in_place(setup: &Setup, store: &mut Store, interval: u64) -> Tally {
    Advancer::default()
        .advance_in_place(setup, store, interval)
        .clone()
}

/// [`advance_in_place`] on a copy: the survivors and the tallies.
pub fn advance(setup: &Setup, store: &Store, interval: u64) -> (Store, Tally) {
    let mut out = store.clone();
    let tally = advance_in_place(setup, &mut out, interval);
    (out, tally)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Thinning is exact only if Γ(z) ≤ Γ_max at every configuration (docs/method.md §2.4):
    /// checked at 20000 random configurations over the domain and a little beyond it, for
    /// validation jobs with a kernel one-body term and a pair term (v14, two particles),
    /// a pair term only (v10, three) and a kernel term only (v02). A rate above the bound
    /// would cut the event rate there without a trace.
    #[test]
    fn generation_rate_never_exceeds_the_thinning_bound() {
        use rand::{Rng, SeedableRng};
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("jobs/validation");
        for name in [
            "v14-double-well.toml",
            "v10-three-fermions-coulomb.toml",
            "v02-double-barrier.toml",
        ] {
            let text = std::fs::read_to_string(dir.join(name)).expect("a validation job");
            let mut loaded =
                crate::config::job::from_text(&text, name, dir.clone(), &[]).expect("valid");
            crate::physics::defaults::resolve(&mut loaded).expect("numerics derive");
            let setup = Setup::new(&loaded).expect("a setup");
            let (lo, hi) = (loaded.job.domain.x_min, loaded.job.domain.x_max);
            let reach = 0.05 * (hi - lo);
            let mut rng = rand::rngs::StdRng::seed_from_u64(7);
            let mut largest: f64 = 0.0;
            for _ in 0..20000 {
                let x: Vec<f64> = (0..setup.n)
                    .map(|_| rng.random_range(lo - reach..hi + reach))
                    .collect();
                largest = largest.max(rates(&setup, &x, None).0);
            }
            assert!(setup.gamma_max > 0.0, "{name}: a kernel acts");
            assert!(
                largest <= setup.gamma_max * (1.0 + 1e-12),
                "{name}: Γ(z) = {largest} above Γ_max = {}",
                setup.gamma_max
            );
            // The bound is not loose by orders of magnitude either (it sets the cost).
            assert!(largest > 0.05 * setup.gamma_max, "{name}: {largest}");
        }
    }

    /// Removed particles are recorded at full width: past 2^32 (the old u32 list wrapped
    /// there, removing particle p − 2^32 instead) positions stay exact and consecutive
    /// across task boundaries. No store of that size is allocated.
    #[test]
    fn removed_slots_past_u32() {
        let c = (1usize << 32) / CHUNK; // the first task past 2^32
        assert_eq!(slot(c, 0), 1usize << 32);
        assert_eq!(slot(c, 17) as u64, (1u64 << 32) + 17);
        assert_eq!(slot(c - 1, CHUNK - 1) + 1, slot(c, 0));
        let far = 3 * c + 5; // ~1.3·10¹⁰
        assert_eq!(
            slot(far, CHUNK - 1) as u64,
            far as u64 * CHUNK as u64 + CHUNK as u64 - 1
        );
        assert_ne!(slot(c, 17), slot(0, 17));
    }
}
