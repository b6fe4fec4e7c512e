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
use crate::physics::images::Component;
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

/// One orbital pair (a, b) of the proposal: the component pairs (p, q) of W_ab =
/// Σ_pq c_p c_q* W[g_ap, g_bq], their envelopes, and an alias sampler over them with weights
/// |c_p c_q|·∫|W[g_ap, g_bq]| (None for a single pair).
struct PairMix {
    /// (p, q, c_p c_q*, |c_p c_q|).
    terms: Vec<(usize, usize, Complex64, f64)>,
    env: Vec<Envelope>,
    picker: Option<WeightedAliasIndex<f64>>,
    /// Σ_pq |c_p c_q| ∫|W[g_ap, g_bq]|.
    mass: f64,
    /// One plain component on each side (coefficient exactly 1): W_ab is the closed form
    /// itself, evaluated without the coefficient products.
    plain: bool,
}

/// The (anti)symmetrised N-body Wigner function of orbitals that are signed sums of
/// Gaussians (a Gaussian and its wall images, docs/method.md §2.5), with its proposal.
pub struct NBodyWigner {
    n: usize,
    stats: Statistics,
    orbitals: Vec<Vec<Component>>,
    /// |C|² of the normalised (anti)symmetrised state.
    c2: f64,
    perms: Vec<(Vec<usize>, f64)>,
    /// Orbital pairs, row-major a·n + b.
    pairs: Vec<PairMix>,
    /// Mixture components (σ index, τ index) and their alias sampler.
    components: Vec<(usize, usize)>,
    picker: WeightedAliasIndex<f64>,
    /// Z = Σ_{σ,τ} Π_i M_σ(i)τ(i), M_ab the mass of pair (a, b).
    z: f64,
}

/// `same`: a and b are the same orbital; its coherences with its own translates by 2nL
/// (n ≠ 0) are left out (they lie beyond one period of the odd extension, docs/method.md
/// §2.5).
fn pair_mix(a: &[Component], b: &[Component], same: bool) -> Result<PairMix> {
    let plain = a.len() == 1
        && b.len() == 1
        && a[0] == Component::plain(a[0].g)
        && b[0] == Component::plain(b[0].g);
    let mut terms = Vec::new();
    let mut env = Vec::new();
    let mut weights = Vec::new();
    for (p, ca) in a.iter().enumerate() {
        for (q, cb) in b.iter().enumerate() {
            if (same && ca.is_translate_of(cb)) || ca.too_far_round(cb) {
                continue;
            }
            let e = envelope(&ca.g, &cb.g);
            let c = ca.coef * cb.coef.conj();
            let abs = ca.coef.norm() * cb.coef.norm();
            terms.push((p, q, c, abs));
            weights.push(if plain { e.mass() } else { abs * e.mass() });
            env.push(e);
        }
    }
    let mass = weights.iter().sum();
    let picker = if weights.len() > 1 {
        Some(
            WeightedAliasIndex::new(weights)
                .map_err(|e| anyhow::anyhow!("initial state proposal over images: {e}"))?,
        )
    } else {
        None
    };
    Ok(PairMix {
        terms,
        env,
        picker,
        mass,
        plain,
    })
}

impl NBodyWigner {
    /// Plain Gaussian orbitals (no walls).
    pub fn new(orbitals: &[Gaussian], stats: Statistics) -> Result<Self> {
        let o: Vec<Vec<Component>> = orbitals
            .iter()
            .map(|g| vec![Component::plain(*g)])
            .collect();
        Self::with_components(o, stats)
    }

    /// Orbitals given as signed sums of Gaussians φ_a = Σ_p c_ap G_ap. Overlaps and the
    /// normalisation are those of these sums on the whole line.
    pub fn with_components(orbitals: Vec<Vec<Component>>, stats: Statistics) -> Result<Self> {
        let n = orbitals.len();
        let ov = |a: &[Component], b: &[Component]| -> Complex64 {
            if a.len() == 1
                && b.len() == 1
                && a[0] == Component::plain(a[0].g)
                && b[0] == Component::plain(b[0].g)
            {
                return overlap(&a[0].g, &b[0].g);
            }
            let mut s = Complex64::new(0.0, 0.0);
            for ca in a {
                for cb in b {
                    s += ca.coef.conj() * cb.coef * overlap(&ca.g, &cb.g);
                }
            }
            s
        };
        let s: Vec<Complex64> = (0..n * n)
            .map(|ab| ov(&orbitals[ab / n], &orbitals[ab % n]))
            .collect();
        let fact: f64 = (1..=n).map(|i| i as f64).product();
        let pairs_plain = orbitals
            .iter()
            .all(|o| o.len() == 1 && o[0] == Component::plain(o[0].g));
        let c2 = match stats {
            // Plain Gaussians are normalised in closed form (C = 1 exactly); orbitals with
            // images are normalised on the whole line.
            Statistics::Distinguishable if pairs_plain => 1.0,
            Statistics::Distinguishable => (0..n).map(|a| 1.0 / s[a * n + a].re).product(),
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
        let pairs: Vec<PairMix> = (0..n * n)
            .map(|ab| pair_mix(&orbitals[ab / n], &orbitals[ab % n], ab / n == ab % n))
            .collect::<Result<_>>()?;
        let mut components = Vec::new();
        let mut weights = Vec::new();
        for (si, (sigma, _)) in perms.iter().enumerate() {
            for (ti, (tau, _)) in perms.iter().enumerate() {
                components.push((si, ti));
                weights.push(
                    (0..n)
                        .map(|i| pairs[sigma[i] * n + tau[i]].mass)
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
            orbitals,
            c2,
            perms,
            pairs,
            components,
            picker,
            z,
        })
    }

    /// Cross-Wigner values W_ab(x_i, k_i) and their proposal envelopes
    /// E_ab = Σ_pq |c_p c_q| |W[g_ap, g_bq]|, index (i·n + a)·n + b.
    fn cross_values(&self, x: &[f64], k: &[f64]) -> (Vec<Complex64>, Vec<f64>) {
        let n = self.n;
        let mut out = Vec::with_capacity(n * n * n);
        let mut env = Vec::with_capacity(n * n * n);
        for i in 0..n {
            for a in 0..n {
                for b in 0..n {
                    let (oa, ob) = (&self.orbitals[a], &self.orbitals[b]);
                    let pm = &self.pairs[a * n + b];
                    if pm.plain {
                        let w = cross_wigner(&oa[0].g, &ob[0].g, x[i], k[i]);
                        out.push(w);
                        env.push(w.norm());
                        continue;
                    }
                    let (mut w, mut e) = (Complex64::new(0.0, 0.0), 0.0);
                    for &(p, q, c, abs) in &pm.terms {
                        let v = cross_wigner(&oa[p].g, &ob[q].g, x[i], k[i]);
                        w += c * v;
                        e += abs * v.norm();
                    }
                    out.push(w);
                    env.push(e);
                }
            }
        }
        (out, env)
    }

    fn value_from(&self, w: &[Complex64]) -> f64 {
        let n = self.n;
        if self.stats == Statistics::Distinguishable {
            return self.c2 * (0..n).map(|i| w[(i * n + i) * n + i].re).product::<f64>();
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

    /// W(x, k) in (1/nm · nm)^N, i.e. normalised so that ∫ W d^N x d^N k = 1 (over the
    /// whole line for orbitals with images).
    pub fn value(&self, x: &[f64], k: &[f64]) -> f64 {
        self.value_from(&self.cross_values(x, k).0)
    }

    /// The proposal density g(z) = Σ_{σ,τ} Π_i E_σ(i)τ(i)(z_i) / Z.
    fn proposal_from(&self, e: &[f64]) -> f64 {
        let n = self.n;
        let mut g = 0.0;
        for &(si, ti) in &self.components {
            let (sigma, tau) = (&self.perms[si].0, &self.perms[ti].0);
            g += (0..n)
                .map(|i| e[(i * n + sigma[i]) * n + tau[i]])
                .product::<f64>();
        }
        g / self.z
    }

    /// One draw z ~ g into `x`, `k`; returns the ratio r = W(z)/g(z) (so w_d = r/D).
    pub fn draw<R: Rng>(&self, rng: &mut R, x: &mut [f64], k: &mut [f64]) -> f64 {
        let (si, ti) = self.components[self.picker.sample(rng)];
        let (sigma, tau) = (&self.perms[si].0, &self.perms[ti].0);
        for i in 0..self.n {
            let pm = &self.pairs[sigma[i] * self.n + tau[i]];
            let e = match &pm.picker {
                Some(p) => &pm.env[p.sample(rng)],
                None => &pm.env[0],
            };
            let (a, b): (f64, f64) = (StandardNormal.sample(rng), StandardNormal.sample(rng));
            x[i] = e.x_centre + e.sigma_x * a;
            k[i] = e.k_centre + e.sigma_k * b;
        }
        let (w, e) = self.cross_values(x, k);
        self.value_from(&w) / self.proposal_from(&e)
    }

    /// Gaussian components per orbital (1 + the number of wall images).
    pub fn components_per_orbital(&self) -> Vec<usize> {
        self.orbitals.iter().map(|o| o.len()).collect()
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

    /// An orbital 2.5 widths from a hard wall at x = 10 with its mirror image (the odd
    /// extension, docs/method.md §2.5), normalised on the whole line.
    fn walled() -> (Vec<Component>, f64) {
        let g = Gaussian {
            x0: 5.0,
            k0: 1.3,
            sigma: 2.0,
        };
        let c = crate::physics::images::image_components(
            &g,
            -30.0,
            10.0,
            12.0,
            crate::physics::images::Touches {
                lo: false,
                hi: true,
            },
        );
        assert_eq!(c.len(), 2);
        // ∫|ψ_ext|² over the line by the midpoint rule (the integrand is smooth and decays
        // as a Gaussian: spectrally accurate).
        let dx = 0.005;
        let norm: f64 = (0..12000)
            .map(|j| crate::physics::images::psi(&c, -20.0 + (j as f64 + 0.5) * dx).norm_sqr() * dx)
            .sum();
        (c, norm)
    }

    /// The Wigner function of the image-extended orbital equals the Wigner transform of
    /// ψ_ext = φ − φ_mirror by quadrature (definition, docs/method.md §1.1), including the
    /// cross term at the wall; its k-marginal is |ψ_ext|², which vanishes at the wall and
    /// has fringes of period π/k₀ before it.
    #[test]
    fn image_extended_wigner_is_the_wigner_transform_of_the_odd_extension() {
        let (c, norm) = walled();
        let w = NBodyWigner::with_components(vec![c.clone()], Statistics::Distinguishable).unwrap();
        let psi = |x: f64| crate::physics::images::psi(&c, x);
        for &(x, k) in &[
            (9.0, 0.0),
            (9.0, 1.3),
            (7.5, -0.7),
            (10.0, 0.4),
            (11.2, -1.3),
        ] {
            let (n, ymax) = (16000, 40.0);
            let dy = 2.0 * ymax / n as f64;
            let mut q = Complex64::new(0.0, 0.0);
            for j in 0..n {
                let y = -ymax + (j as f64 + 0.5) * dy;
                q += Complex64::new(0.0, -k * y).exp() * psi(x + y / 2.0) * psi(x - y / 2.0).conj();
            }
            let exact = (q * dy / (2.0 * std::f64::consts::PI)).re / norm;
            let v = w.value(&[x], &[k]);
            assert!((v - exact).abs() < 1e-9, "({x}, {k}): {v} vs {exact}");
        }
        // x-marginal by quadrature in k: |ψ_ext(x)|²/norm, zero at the wall.
        for &x in &[6.0, 8.2, 9.4, 10.0] {
            let (n, kmax) = (4000, 12.0);
            let dk = 2.0 * kmax / n as f64;
            let m: f64 = (0..n)
                .map(|j| w.value(&[x], &[-kmax + (j as f64 + 0.5) * dk]))
                .sum::<f64>()
                * dk;
            let exact = psi(x).norm_sqr() / norm;
            assert!((m - exact).abs() < 1e-9, "x = {x}: {m} vs {exact}");
        }
        assert!(psi(10.0).norm() < 1e-12);
    }

    /// In a periodic box of width L the ring's state is ψ_p(x) = Σ_n φ(x − nL). The Wigner
    /// function of the orbital with its copies ±L (terms |d| ≤ 1, docs/method.md §2.5) has,
    /// inside the box, the k-marginal |ψ_p(x)|² up to normalisation, including the
    /// interference of the packet with its own copy at the edges. Quadrature in k against
    /// |ψ₋₁ + ψ₀ + ψ₁|² less the left-out term 2 Re ψ₁ψ₋₁* (copies 2L apart, |d| = 2);
    /// beside it, the distance to ψ_p summed over 11 copies stays within the left-out terms.
    #[test]
    fn ring_copies_give_the_periodic_density_with_its_edge_interference() {
        let (lo, hi) = (-10.0, 10.0);
        let g = Gaussian {
            x0: -4.0,
            k0: 1.1,
            sigma: 4.0,
        };
        let c = crate::physics::images::periodic_copies(&g, lo, hi, 100.0);
        assert_eq!(c.len(), 3, "the orbital and its copies ±L");
        let w = NBodyWigner::with_components(vec![c], Statistics::Distinguishable).unwrap();
        let copy = |x: f64, n: i32| g.psi(x - n as f64 * (hi - lo));
        let full = |x: f64| -> f64 { (-5..=5).map(|n| copy(x, n)).sum::<Complex64>().norm_sqr() };
        let ring = |x: f64| -> f64 {
            (-1..=1).map(|n| copy(x, n)).sum::<Complex64>().norm_sqr()
                - 2.0 * (copy(x, 1) * copy(x, -1).conj()).re
        };
        // Left out: the |d| = 2 term and every copy |n| ≥ 2 (bounded by 2|ψ_p||ψ_n| + |ψ_n|²).
        let left_out = |x: f64| -> f64 {
            let far: f64 = [-5, -4, -3, -2, 2, 3, 4, 5]
                .iter()
                .map(|&n| copy(x, n).norm())
                .sum();
            2.0 * (copy(x, 1) * copy(x, -1).conj()).norm() + 2.0 * full(x).sqrt() * far + far * far
        };
        let marginal = |x: f64| {
            let (n, kmax) = (6000, 12.0);
            let dk = 2.0 * kmax / n as f64;
            (0..n)
                .map(|j| w.value(&[x], &[-kmax + (j as f64 + 0.5) * dk]))
                .sum::<f64>()
                * dk
        };
        let (m0, r0) = (marginal(g.x0), ring(g.x0));
        let mut edge = 0.0f64;
        for &x in &[-9.9, -7.0, 0.0, 4.5, 8.0, 9.9] {
            let (m, r) = (marginal(x) / m0, ring(x) / r0);
            assert!((m - r).abs() < 1e-8, "x = {x}: {m} vs {r}");
            assert!((full(x) - ring(x)).abs() <= left_out(x) + 1e-15, "x = {x}");
            // Interference with the copy: |ψ₀ + ψ₁|² against |ψ₀|² + |ψ₁|².
            let apart = (g.psi(x).norm_sqr()
                + g.psi(x - (hi - lo)).norm_sqr()
                + g.psi(x + (hi - lo)).norm_sqr())
                / r0;
            edge = edge.max((r - apart).abs());
        }
        assert!(
            edge > 1e-3,
            "the test must see the edge interference ({edge})"
        );
    }

    /// Draws of the image-extended state kept inside the box reproduce the image-corrected
    /// density: E[r·1_bin] = ∫_bin |ψ_ext|² dx / ∫|ψ_ext|² (importance sampling, r = W/g).
    /// Each bin's mean is tested with its own standard error from the draws (independent
    /// draws, so the mean is close to normal); max |z| ≤ 4.5 over 16 bins fails by chance
    /// with probability about 16 × 7·10⁻⁶.
    #[test]
    fn box_samples_reproduce_the_image_corrected_density() {
        let (c, norm) = walled();
        let w = NBodyWigner::with_components(vec![c.clone()], Statistics::Distinguishable).unwrap();
        let (lo, hi, bins) = (-2.0, 10.0, 16usize);
        let width = (hi - lo) / bins as f64;
        let d = 400_000u64;
        let (mut s1, mut s2) = (vec![0.0; bins], vec![0.0; bins]);
        let (mut x, mut k) = ([0.0], [0.0]);
        for i in 0..d {
            let r = w.draw(&mut draw_stream(77, i), &mut x, &mut k);
            if x[0] >= lo && x[0] < hi {
                let b = ((x[0] - lo) / width) as usize;
                s1[b] += r;
                s2[b] += r * r;
            }
        }
        let mut worst: f64 = 0.0;
        for b in 0..bins {
            let mean = s1[b] / d as f64;
            let se = ((s2[b] / d as f64 - mean * mean) / (d as f64 - 1.0)).sqrt();
            let (a, n) = (lo + b as f64 * width, 200);
            let h = width / n as f64;
            let exact: f64 = (0..n)
                .map(|j| crate::physics::images::psi(&c, a + (j as f64 + 0.5) * h).norm_sqr() * h)
                .sum::<f64>()
                / norm;
            let z = (mean - exact) / se;
            worst = worst.max(z.abs());
            assert!(
                z.abs() <= 4.5,
                "bin {b}: {mean} ± {se} vs {exact} (z = {z:.2})"
            );
        }
        assert!(worst > 0.0);
    }
}
