//! Estimators over signed particles (docs/method.md §4), accumulated as integer counts per bin
//! and per error group, so that the global sum is exact in any order.
//!
//! ⟨A⟩ = Σ_k s_k A(z_k) / S₀ with S₀ the net sign at t = 0. Group g gives its own estimate
//! A_g = Σ_{k∈g} s_k A(z_k) / S₀_g; the reported value is the full-ensemble estimate and its
//! standard error is the spread of the A_g over sqrt(B).

use crate::physics::numerics::Setup;
use crate::physics::particles::Store;
use crate::physics::rng;
use crate::physics::units;
use rayon::prelude::*;

/// Fixed-point scale of k sums (1/nm) and energy sums (eV).
const K_SCALE: f64 = (1u64 << 40) as f64;
const E_SCALE: f64 = (1u64 << 40) as f64;

/// Integer histograms of one rank (then of all ranks after the global reduction,
/// `engine::observe::reduce`).
#[derive(Clone, Debug, PartialEq)]
pub struct Counts {
    groups: usize,
    nx: usize,
    nk: usize,
    pair: bool,
    /// Σ s per group.
    pub net: Vec<i64>,
    pub positive: i64,
    pub negative: i64,
    density: Vec<i64>,
    pair_density: Vec<i64>,
    wigner: Vec<i64>,
    momentum: Vec<i64>,
    /// Σ s·k per x bin, fixed point.
    current: Vec<i128>,
    /// Σ s·H, fixed point.
    energy: Vec<i128>,
    /// Σ s·Σ_i x_i, Σ s·Σ_i k_i, Σ s·Σ_i (−∂V/∂x_i), fixed point.
    moments: Vec<i128>,
}

impl Counts {
    fn zero(setup: &Setup) -> Self {
        let g = setup.groups as usize;
        let (nx, nk) = (setup.x_bins.n, setup.k_bins.n);
        let pair = setup.n >= 2;
        Counts {
            groups: g,
            nx,
            nk,
            pair,
            net: vec![0; g],
            positive: 0,
            negative: 0,
            density: vec![0; g * nx],
            pair_density: vec![0; if pair { g * nx * nx } else { 0 }],
            wigner: vec![0; g * nx * nk],
            momentum: vec![0; g * nk],
            current: vec![0; g * nx],
            energy: vec![0; g],
            moments: vec![0; 3 * g],
        }
    }

    fn add(mut self, o: Counts) -> Counts {
        fn add_into<T: std::ops::AddAssign + Copy>(a: &mut [T], b: &[T]) {
            for (x, y) in a.iter_mut().zip(b) {
                *x += *y;
            }
        }
        add_into(&mut self.net, &o.net);
        self.positive += o.positive;
        self.negative += o.negative;
        add_into(&mut self.density, &o.density);
        add_into(&mut self.pair_density, &o.pair_density);
        add_into(&mut self.wigner, &o.wigner);
        add_into(&mut self.momentum, &o.momentum);
        add_into(&mut self.current, &o.current);
        add_into(&mut self.energy, &o.energy);
        add_into(&mut self.moments, &o.moments);
        self
    }

    /// Histogram the particles of this rank.
    pub fn collect(setup: &Setup, store: &Store) -> Counts {
        const CHUNK: usize = 8192;
        (0..store.len().div_ceil(CHUNK))
            .into_par_iter()
            .map(|c| {
                let mut h = Counts::zero(setup);
                for p in c * CHUNK..((c + 1) * CHUNK).min(store.len()) {
                    h.count(
                        setup,
                        store.xs(p),
                        store.ks(p),
                        store.sign[p] as i64,
                        rng::group_of(store.id[p]) as usize,
                    );
                }
                h
            })
            .reduce(|| Counts::zero(setup), Counts::add)
    }

    fn count(&mut self, setup: &Setup, x: &[f64], k: &[f64], s: i64, g: usize) {
        let (nx, nk) = (self.nx, self.nk);
        self.net[g] += s;
        if s > 0 {
            self.positive += 1;
        } else {
            self.negative += 1;
        }
        let bins: [Option<usize>; 8] = std::array::from_fn(|i| {
            if i < x.len() {
                setup.x_bins.index(x[i])
            } else {
                None
            }
        });
        let bins_of = |i: usize| {
            if i < 8 {
                bins[i]
            } else {
                setup.x_bins.index(x[i])
            }
        };
        for i in 0..x.len() {
            let bx = bins_of(i);
            let bk = setup.k_bins.index(k[i]);
            if let Some(bx) = bx {
                self.density[g * nx + bx] += s;
                self.current[g * nx + bx] += s as i128 * (k[i] * K_SCALE).round() as i128;
                if let Some(bk) = bk {
                    self.wigner[(g * nx + bx) * nk + bk] += s;
                }
                if self.pair {
                    for j in 0..x.len() {
                        if j != i
                            && let Some(by) = bins_of(j)
                        {
                            self.pair_density[(g * nx + bx) * nx + by] += s;
                        }
                    }
                }
            }
            if let Some(bk) = bk {
                self.momentum[g * nk + bk] += s;
            }
        }
        self.energy[g] += s as i128 * (setup.energy(x, k) * E_SCALE).round() as i128;
        let (sx, sk, sf) = (
            x.iter().sum::<f64>(),
            k.iter().sum::<f64>(),
            x.iter().map(|&v| -setup.force_at(v)).sum::<f64>(),
        );
        self.moments[3 * g] += s as i128 * (sx * E_SCALE).round() as i128;
        self.moments[3 * g + 1] += s as i128 * (sk * E_SCALE).round() as i128;
        self.moments[3 * g + 2] += s as i128 * (sf * E_SCALE).round() as i128;
    }

    /// Every integer sum, packed for an exact global reduction: the i64 counts and the
    /// i128 fixed-point sums. [`Counts::unpack`] takes them back in the same layout.
    pub fn pack(&self) -> (Vec<i64>, Vec<i128>) {
        let mut ints: Vec<i64> = Vec::new();
        for v in [
            &self.net,
            &self.density,
            &self.pair_density,
            &self.wigner,
            &self.momentum,
        ] {
            ints.extend_from_slice(v);
        }
        ints.push(self.positive);
        ints.push(self.negative);
        let wide: Vec<i128> = self
            .current
            .iter()
            .chain(&self.energy)
            .chain(&self.moments)
            .copied()
            .collect();
        (ints, wide)
    }

    /// Inverse of [`Counts::pack`].
    pub fn unpack(&mut self, ints: Vec<i64>, wide: Vec<i128>) {
        let mut it = ints.into_iter();
        for v in [
            &mut self.net,
            &mut self.density,
            &mut self.pair_density,
            &mut self.wigner,
            &mut self.momentum,
        ] {
            for x in v.iter_mut() {
                *x = it.next().expect("same layout");
            }
        }
        self.positive = it.next().expect("same layout");
        self.negative = it.next().expect("same layout");
        let (c, rest) = wide.split_at(self.current.len());
        let (e, m) = rest.split_at(self.energy.len());
        self.current.copy_from_slice(c);
        self.energy.copy_from_slice(e);
        self.moments.copy_from_slice(m);
    }

    pub fn particles(&self) -> u64 {
        (self.positive + self.negative) as u64
    }
}

/// Estimate and standard error from per-group sums `per_group(g)` (length len each),
/// normalised by `s0` (per group) and multiplied by `scale`. With one group there is no
/// spread to measure: the error is NaN.
fn estimate(
    len: usize,
    groups: usize,
    s0: &[i64],
    scale: f64,
    per_group: impl Fn(usize, usize) -> f64,
) -> (Vec<f64>, Vec<f64>) {
    let total0: i64 = s0.iter().sum();
    let mut value = vec![0.0; len];
    let mut error = vec![0.0; len];
    let b = groups as f64;
    for i in 0..len {
        let sum: f64 = (0..groups).map(|g| per_group(g, i)).sum();
        value[i] = sum / total0 as f64 * scale;
        if groups < 2 {
            error[i] = f64::NAN;
            continue;
        }
        let est: Vec<f64> = (0..groups)
            .map(|g| per_group(g, i) / s0[g] as f64 * scale)
            .collect();
        let mean = est.iter().sum::<f64>() / b;
        let var = est.iter().map(|e| (e - mean) * (e - mean)).sum::<f64>() / (b - 1.0);
        error[i] = (var / b).sqrt();
    }
    (value, error)
}

/// Cumulative signed counts of particles that left, per group.
#[derive(Clone, Debug, PartialEq)]
pub struct Departed {
    pub left: Vec<i64>,
    pub right: Vec<i64>,
}

/// An estimate per bin (or one value) and its standard error over the B groups.
#[derive(Clone, Debug, PartialEq)]
pub struct Estimate {
    pub value: Vec<f64>,
    pub error: Vec<f64>,
}

/// Every estimator at one output time (docs/method.md §4). Densities are bin averages:
/// n in 1/nm, n₂ in 1/nm², f₁ dimensionless (per nm·nm⁻¹), momentum density in nm, current
/// in 1/fs, energy in eV, mean x in nm, mean k in 1/nm, mean force in eV/nm.
#[derive(Clone, Debug, PartialEq)]
pub struct Frame {
    pub time: f64,
    pub density: Estimate,
    /// Present when N ≥ 2.
    pub pair_density: Option<Estimate>,
    pub wigner: Estimate,
    pub momentum_density: Estimate,
    pub current_density: Estimate,
    pub norm: Estimate,
    pub absorbed_left: Estimate,
    pub absorbed_right: Estimate,
    /// `absorbed_right` plus the one-body norm at x > 0 (the transmitted norm for N = 1).
    pub norm_right: Estimate,
    pub energy: Estimate,
    pub mean_x: Estimate,
    pub mean_k: Estimate,
    pub mean_force: Estimate,
    /// Live Monte Carlo samples: all, positive, negative.
    pub samples: u64,
    pub samples_positive: u64,
    pub samples_negative: u64,
}

impl Counts {
    /// The estimators of one output frame from the global counts:
    /// ⟨A⟩ = Σ s A / S₀ per bin, with its group error.
    pub fn frame(&self, setup: &Setup, time: f64, s0: &[i64], gone: &Departed) -> Frame {
        let c = self;
        let (g, nx, nk) = (c.groups, c.nx, c.nk);
        let (dx, dk) = (setup.x_bins.width(), setup.k_bins.width());
        let put = |len: usize, scale: f64, f: &dyn Fn(usize, usize) -> f64| {
            let (value, error) = estimate(len, g, s0, scale, f);
            Estimate { value, error }
        };
        // Norm that has gone or is going to the right: `absorbed_right` plus the one-body
        // fraction (1/N)∫n dx over the bins centred at x > 0; for one particle the
        // transmitted norm of a packet sent from the left, with its own group error.
        let right_bins: Vec<usize> = setup
            .x_bins
            .centres()
            .iter()
            .enumerate()
            .filter(|(_, x)| **x > 0.0)
            .map(|(i, _)| i)
            .collect();
        let n_body = setup.n as f64;
        let v = units::HBAR / setup.mass / K_SCALE / dx;
        let per = 1.0 / (E_SCALE * setup.n as f64);
        Frame {
            time,
            density: put(nx, 1.0 / dx, &|gr, i| c.density[gr * nx + i] as f64),
            pair_density: c.pair.then(|| {
                put(nx * nx, 1.0 / (dx * dx), &|gr, i| {
                    c.pair_density[gr * nx * nx + i] as f64
                })
            }),
            wigner: put(nx * nk, 1.0 / (dx * dk), &|gr, i| {
                c.wigner[gr * nx * nk + i] as f64
            }),
            momentum_density: put(nk, 1.0 / dk, &|gr, i| c.momentum[gr * nk + i] as f64),
            current_density: put(nx, v, &|gr, i| c.current[gr * nx + i] as f64),
            norm: put(1, 1.0, &|gr, _| c.net[gr] as f64),
            absorbed_left: put(1, 1.0, &|gr, _| gone.left[gr] as f64),
            absorbed_right: put(1, 1.0, &|gr, _| gone.right[gr] as f64),
            norm_right: put(1, 1.0, &|gr, _| {
                gone.right[gr] as f64
                    + right_bins
                        .iter()
                        .map(|&i| c.density[gr * nx + i] as f64)
                        .sum::<f64>()
                        / n_body
            }),
            energy: put(1, 1.0 / E_SCALE, &|gr, _| c.energy[gr] as f64),
            mean_x: put(1, per, &|gr, _| c.moments[3 * gr] as f64),
            mean_k: put(1, per, &|gr, _| c.moments[3 * gr + 1] as f64),
            mean_force: put(1, per, &|gr, _| c.moments[3 * gr + 2] as f64),
            samples: c.particles(),
            samples_positive: c.positive as u64,
            samples_negative: c.negative as u64,
        }
    }
}
