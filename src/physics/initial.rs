//! The initial N-body Wigner function and its sampling into signed particles (docs/method.md §1).
//!
//!   W(z) = |C|² Σ_σ ε(σ) F_τ[ W_{σ(i), j}(x_i, k_i) ]
//!
//! with F the determinant (fermions, ε = sign) or permanent (bosons, ε = 1), so one
//! evaluation costs N!·N³ for fermions (N!·N!·N for bosons, by a stable plain sum). Distinguishable particles: W = Π_i W_ii(x_i, k_i).
//! Sampling: D draws from the mixture g over permutation pairs (σ, τ) of the product
//! envelopes Π_i |W_σ(i)τ(i)|, weight w_d = W/(D g), and ⌊|w_d|/w₀ + U⌋ particles of sign
//! sign(w_d) at the draw, w₀ = Σ|w_d| / target.

use crate::config::job::Statistics;
use crate::physics::orbitals::{Envelope, Gaussian, cross_wigner, envelope, overlap};
use crate::physics::particles::Store;
use crate::physics::rng::{self, tag};
use anyhow::{Result, bail};
use nalgebra::DMatrix;
use num_complex::Complex64;
use rand::Rng;
use rand_distr::weighted::WeightedAliasIndex;
use rand_distr::{Distribution, StandardNormal};

/// All permutations of 0..n with their signs (lexicographic order).
pub fn permutations(n: usize) -> Vec<(Vec<usize>, f64)> {
    fn rec(cur: &mut Vec<usize>, used: &mut Vec<bool>, out: &mut Vec<Vec<usize>>) {
        if cur.len() == used.len() {
            out.push(cur.clone());
            return;
        }
        for i in 0..used.len() {
            if !used[i] {
                used[i] = true;
                cur.push(i);
                rec(cur, used, out);
                cur.pop();
                used[i] = false;
            }
        }
    }
    let mut out = Vec::new();
    rec(&mut Vec::new(), &mut vec![false; n], &mut out);
    out.into_iter()
        .map(|p| {
            let inversions = (0..n)
                .flat_map(|i| (i + 1..n).map(move |j| (i, j)))
                .filter(|&(i, j)| p[i] > p[j])
                .count();
            let s = if inversions % 2 == 0 { 1.0 } else { -1.0 };
            (p, s)
        })
        .collect()
}

/// Permanent of an n×n row-major complex matrix, Σ_τ Π_i m[i][τ(i)] over the given
/// permutations. A plain sum of products: Ryser's 2^n formula cancels large terms where
/// W is small and loses the exchange symmetry to round-off, so it is not used for small n.
pub fn permanent(m: &[Complex64], n: usize, perms: &[(Vec<usize>, f64)]) -> Complex64 {
    perms
        .iter()
        .map(|(tau, _)| (0..n).map(|i| m[i * n + tau[i]]).product::<Complex64>())
        .sum()
}

fn determinant(m: &[Complex64], n: usize) -> Complex64 {
    DMatrix::from_row_slice(n, n, m).determinant()
}

/// The (anti)symmetrised N-body Wigner function of Gaussian orbitals, with its proposal.
pub struct NBodyWigner {
    n: usize,
    stats: Statistics,
    orbitals: Vec<Gaussian>,
    /// |C|² of the normalised (anti)symmetrised state.
    c2: f64,
    perms: Vec<(Vec<usize>, f64)>,
    /// Envelopes of |W_ab|, row-major a·n + b.
    env: Vec<Envelope>,
    /// Mixture components (σ index, τ index) and their alias sampler.
    components: Vec<(usize, usize)>,
    picker: WeightedAliasIndex<f64>,
    /// Z = Σ_{σ,τ} Π_i ∫|W_σ(i)τ(i)|.
    z: f64,
}

impl NBodyWigner {
    pub fn new(orbitals: &[Gaussian], stats: Statistics) -> Result<Self> {
        let n = orbitals.len();
        let s: Vec<Complex64> = (0..n * n)
            .map(|ab| overlap(&orbitals[ab / n], &orbitals[ab % n]))
            .collect();
        let fact: f64 = (1..=n).map(|i| i as f64).product();
        let c2 = match stats {
            Statistics::Distinguishable => 1.0,
            Statistics::Fermion => {
                let d = determinant(&s, n).re;
                if d < 1e-10 {
                    let (mut worst, mut pair) = (0.0, (0, 0));
                    for a in 0..n {
                        for b in a + 1..n {
                            if s[a * n + b].norm() >= worst {
                                worst = s[a * n + b].norm();
                                pair = (a, b);
                            }
                        }
                    }
                    bail!(
                        "the Slater determinant vanishes (det S = {d:.3e}): fermion orbitals must be linearly \
                         independent, but orbital.{} and orbital.{} overlap with |S| = {worst:.6} (identical \
                         fermions cannot occupy the same state)",
                        pair.0,
                        pair.1
                    );
                }
                1.0 / (fact * d)
            }
            Statistics::Boson => 1.0 / (fact * permanent(&s, n, &permutations(n)).re),
        };
        let perms = match stats {
            Statistics::Distinguishable => vec![((0..n).collect(), 1.0)],
            _ => permutations(n),
        };
        let env: Vec<Envelope> = (0..n * n)
            .map(|ab| envelope(&orbitals[ab / n], &orbitals[ab % n]))
            .collect();
        let mut components = Vec::new();
        let mut weights = Vec::new();
        for (si, (sigma, _)) in perms.iter().enumerate() {
            for (ti, (tau, _)) in perms.iter().enumerate() {
                components.push((si, ti));
                weights.push(
                    (0..n)
                        .map(|i| env[sigma[i] * n + tau[i]].mass())
                        .product::<f64>(),
                );
            }
        }
        let z = weights.iter().sum();
        let picker = WeightedAliasIndex::new(weights)
            .map_err(|e| anyhow::anyhow!("initial state proposal: {e}"))?;
        Ok(NBodyWigner {
            n,
            stats,
            orbitals: orbitals.to_vec(),
            c2,
            perms,
            env,
            components,
            picker,
            z,
        })
    }

    /// Cross-Wigner values W_ab(x_i, k_i), index (i·n + a)·n + b.
    fn cross_values(&self, x: &[f64], k: &[f64]) -> Vec<Complex64> {
        let n = self.n;
        let mut out = Vec::with_capacity(n * n * n);
        for i in 0..n {
            for a in 0..n {
                for b in 0..n {
                    out.push(cross_wigner(
                        &self.orbitals[a],
                        &self.orbitals[b],
                        x[i],
                        k[i],
                    ));
                }
            }
        }
        out
    }

    fn value_from(&self, w: &[Complex64]) -> f64 {
        let n = self.n;
        if self.stats == Statistics::Distinguishable {
            return (0..n).map(|i| w[(i * n + i) * n + i].re).product();
        }
        let mut total = Complex64::new(0.0, 0.0);
        let mut m = vec![Complex64::new(0.0, 0.0); n * n];
        for (sigma, eps) in &self.perms {
            for i in 0..n {
                for j in 0..n {
                    m[i * n + j] = w[(i * n + sigma[i]) * n + j];
                }
            }
            total += if self.stats == Statistics::Fermion {
                determinant(&m, n) * *eps
            } else {
                permanent(&m, n, &self.perms)
            };
        }
        self.c2 * total.re
    }

    /// W(x, k) in (1/nm · nm)^N, i.e. normalised so that ∫ W d^N x d^N k = 1.
    pub fn value(&self, x: &[f64], k: &[f64]) -> f64 {
        self.value_from(&self.cross_values(x, k))
    }

    /// The proposal density g(z) = Σ_{σ,τ} Π_i |W_σ(i)τ(i)(z_i)| / Z.
    fn proposal_from(&self, w: &[Complex64]) -> f64 {
        let n = self.n;
        let mut g = 0.0;
        for &(si, ti) in &self.components {
            let (sigma, tau) = (&self.perms[si].0, &self.perms[ti].0);
            g += (0..n)
                .map(|i| w[(i * n + sigma[i]) * n + tau[i]].norm())
                .product::<f64>();
        }
        g / self.z
    }

    /// One draw z ~ g into `x`, `k`; returns the ratio r = W(z)/g(z) (so w_d = r/D).
    pub fn draw<R: Rng>(&self, rng: &mut R, x: &mut [f64], k: &mut [f64]) -> f64 {
        let (si, ti) = self.components[self.picker.sample(rng)];
        let (sigma, tau) = (&self.perms[si].0, &self.perms[ti].0);
        for i in 0..self.n {
            let e = &self.env[sigma[i] * self.n + tau[i]];
            let (a, b): (f64, f64) = (StandardNormal.sample(rng), StandardNormal.sample(rng));
            x[i] = e.x_centre + e.sigma_x * a;
            k[i] = e.k_centre + e.sigma_k * b;
        }
        let w = self.cross_values(x, k);
        self.value_from(&w) / self.proposal_from(&w)
    }

    /// Bound on |W/g| (= |C|² Z), useful for fixed-point sums.
    pub fn ratio_bound(&self) -> f64 {
        self.c2 * self.z
    }

    pub fn n(&self) -> usize {
        self.n
    }
}

/// Fixed-point scale for order-independent sums of draw weights.
pub const WEIGHT_SCALE: f64 = (1u64 << 52) as f64;

/// Sums over a range of draws, in fixed point (exact in any order): Σ|r_d| and Σ r_d.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct DrawSums {
    pub abs: i128,
    pub net: i128,
}

/// The stream of draw `d`.
pub fn draw_stream(seed: u64, d: u64) -> rng::Stream {
    rng::stream(&[seed, tag::INITIAL_DRAW, d])
}

/// Pass 1 over draws [from, to): fixed-point sums of |r_d| and r_d.
pub fn sum_draws(w: &NBodyWigner, seed: u64, from: u64, to: u64) -> DrawSums {
    use rayon::prelude::*;
    let n = w.n();
    (from..to)
        .into_par_iter()
        .map(|d| {
            let (mut x, mut k) = (vec![0.0; n], vec![0.0; n]);
            let r = w.draw(&mut draw_stream(seed, d), &mut x, &mut k);
            let q = (r * WEIGHT_SCALE).round() as i128;
            DrawSums {
                abs: q.abs(),
                net: q,
            }
        })
        .reduce(DrawSums::default, |a, b| DrawSums {
            abs: a.abs + b.abs,
            net: a.net + b.net,
        })
}

/// What pass 2 needs from pass 1 and the job.
#[derive(Clone, Copy, Debug)]
pub struct EmitPlan {
    pub seed: u64,
    /// Global Σ|r_d| in fixed point.
    pub abs_sum: i128,
    /// Target particle count.
    pub target: u64,
    pub groups: u32,
}

/// Where an emitted particle may live: the domain and the momentum range.
pub trait Admit: Sync {
    fn admits(&self, x: &[f64], k: &[f64]) -> bool;
}

/// Pass 2 over draws [from, to): emit ⌊|r_d|·target/Σ|r| + U⌋ particles of sign sign(r_d)
/// at each draw (equivalently ⌊|w_d|/w₀ + U⌋ with w_d = r_d/D, w₀ = Σ|w_d|/target).
/// Draw d belongs to error group d mod `groups`. Returns the store and the number of
/// particles dropped because they fell outside the domain or the momentum range.
pub fn emit(
    w: &NBodyWigner,
    plan: &EmitPlan,
    from: u64,
    to: u64,
    admit: &dyn Admit,
) -> (Store, u64) {
    let EmitPlan {
        seed,
        abs_sum,
        target,
        groups,
    } = *plan;
    use rayon::prelude::*;
    let n = w.n();
    let per_unit = target as f64 / (abs_sum as f64 / WEIGHT_SCALE);
    let chunks: Vec<(Store, u64)> = (from..to)
        .into_par_iter()
        .fold(
            || (Store::new(n), 0u64),
            |(mut store, mut dropped), d| {
                let (mut x, mut k) = (vec![0.0; n], vec![0.0; n]);
                let mut rs = draw_stream(seed, d);
                let r = w.draw(&mut rs, &mut x, &mut k);
                let u: f64 = rs.random();
                let copies = ((r.abs() * per_unit) + u).floor() as u64;
                if copies > 0 {
                    if admit.admits(&x, &k) {
                        let sign = if r > 0.0 { 1 } else { -1 };
                        let group = (d % groups as u64) as u32;
                        for j in 0..copies {
                            let id = rng::make_id(group, rng::hash(&[seed, tag::INITIAL_ID, d, j]));
                            store.push(&x, &k, id, sign);
                        }
                    } else {
                        dropped += copies;
                    }
                }
                (store, dropped)
            },
        )
        .collect();
    let mut out = Store::new(n);
    let mut dropped = 0;
    for (mut s, d) in chunks {
        out.append(&mut s);
        dropped += d;
    }
    (out, dropped)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pair() -> Vec<Gaussian> {
        vec![
            Gaussian {
                x0: -3.0,
                k0: 0.8,
                sigma: 1.2,
            },
            Gaussian {
                x0: 2.0,
                k0: -0.5,
                sigma: 1.7,
            },
        ]
    }

    #[test]
    fn permanent_and_permutations() {
        let m: Vec<Complex64> = [1.0, 2.0, 3.0, 4.0]
            .iter()
            .map(|&v| Complex64::new(v, 0.0))
            .collect();
        assert!((permanent(&m, 2, &permutations(2)) - Complex64::new(10.0, 0.0)).norm() < 1e-12);
        let p = permutations(3);
        assert_eq!(p.len(), 6);
        assert_eq!(p.iter().map(|(_, s)| s).sum::<f64>(), 0.0);
    }

    /// ∫W = 1 (normalisation of ψ) and exchange symmetry W(z) = W(Pz) for identical
    /// particles (antisymmetry/symmetry of ψ), by quadrature over the 4-d phase space.
    #[test]
    fn two_body_wigner_is_normalised_and_exchange_symmetric() {
        for stats in [
            Statistics::Fermion,
            Statistics::Boson,
            Statistics::Distinguishable,
        ] {
            let w = NBodyWigner::new(&pair(), stats).unwrap();
            let (nx, nk) = (56, 44);
            let (x0, x1, k0, k1) = (-10.5, 11.0, -3.0, 3.0);
            let (dx, dk) = ((x1 - x0) / nx as f64, (k1 - k0) / nk as f64);
            let mut total = 0.0;
            for a in 0..nx {
                for b in 0..nx {
                    for c in 0..nk {
                        for d in 0..nk {
                            let x = [x0 + (a as f64 + 0.5) * dx, x0 + (b as f64 + 0.5) * dx];
                            let k = [k0 + (c as f64 + 0.5) * dk, k0 + (d as f64 + 0.5) * dk];
                            let v = w.value(&x, &k);
                            total += v;
                            if stats != Statistics::Distinguishable && (a * 7 + c) % 97 == 0 {
                                let v2 = w.value(&[x[1], x[0]], &[k[1], k[0]]);
                                assert!(
                                    (v - v2).abs() < 1e-12 * (1.0 + v.abs()),
                                    "{stats:?} {x:?} {k:?}: {v} vs {v2}"
                                );
                            }
                        }
                    }
                }
            }
            total *= dx * dx * dk * dk;
            assert!((total - 1.0).abs() < 1e-6, "{stats:?}: ∫W = {total}");
        }
    }

    #[test]
    fn identical_fermion_orbitals_are_refused() {
        let o = Gaussian {
            x0: 1.0,
            k0: 0.2,
            sigma: 2.0,
        };
        let e = NBodyWigner::new(&[o, o], Statistics::Fermion)
            .err()
            .unwrap()
            .to_string();
        assert!(e.contains("Slater determinant vanishes"), "{e}");
    }
}
