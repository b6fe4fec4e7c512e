//! Stationary transmission of one particle across a one-dimensional potential, and its
//! average over the momentum distribution of a Gaussian packet: an exact answer that does
//! not come from the time-dependent solver, to check both it and the Monte Carlo.
//!
//! **Definition** (textbook; e.g. D. J. Griffiths, *Introduction to Quantum Mechanics*,
//! ch. 2, scattering states, and L. D. Landau & E. M. Lifshitz, *Quantum Mechanics*, §25;
//! cited from memory). For U(x) → U_L as x → −∞ and U(x) → U_R as x → +∞, the stationary
//! state of energy E > max(U_L, U_R) with a wave incident from the left is
//!
//! ```text
//!     ψ(x) = A e^{i k_L x} + B e^{−i k_L x}   (x → −∞),     ψ(x) = C e^{i k_R x}   (x → +∞)
//!     k_{L,R} = sqrt(2m(E − U_{L,R}))/ħ,     T(E) = (k_R |C|²) / (k_L |A|²)
//! ```
//!
//! the ratio of transmitted to incident probability current (T = 0 for E ≤ U_R).
//!
//! **Solver.** The potential between a and b (outside of which it equals U_L, U_R to the
//! precision asked) is replaced by its value at the midpoint of each of n equal cells. On
//! a cell of constant V the Schrödinger equation −ħ²ψ''/2m + Vψ = Eψ is solved exactly, so
//! (ψ, ψ') is carried across the cell by the real matrix of cos(κh), sin(κh)/κ, −κ sin(κh)
//! (cosh, sinh for E < V). Starting from the outgoing wave C = 1 at b and carrying (ψ, ψ')
//! to a gives A = [ψ(a) + ψ'(a)/(i k_L)]/2 e^{−i k_L a}. The result is exact for a
//! piecewise-constant potential whose steps sit on cell edges (a rectangular barrier) and
//! second order in h for a smooth one; two cell sizes give a Richardson extrapolation and
//! an error estimate.
//!
//! **Packet average.** A Gaussian orbital of centre x₀ (left of the potential), mean
//! wavevector k₀ and width σ has |φ̃(k)|² = exp(−(k − k₀)²/(2s²))/(sqrt(2π) s), s = 1/(2σ).
//! Long after the packet has left the potential, the transmitted probability is
//! ∫_{k>0} |φ̃(k)|² T(U_L + ħ²k²/2m) dk (the plane-wave components of a packet that starts
//! in the force-free region left of the potential; the standard wave-packet argument, e.g.
//! Griffiths ch. 2, from memory). Components with k < 0 move away from the potential and
//! never reach it: they transmit nothing, and their weight is reported so that a caller can
//! bound their effect (their exact share of the transmission lies between 0 and it).

use crate::physics::units;
use std::f64::consts::PI;

/// The region [a, b] a potential acts on and its asymptotic values.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Region {
    pub a: f64,
    pub b: f64,
    /// U for x ≤ a and x ≥ b, eV.
    pub u_left: f64,
    pub u_right: f64,
}

/// The smallest [a, b] within [lo, hi] outside of which |U − U(lo)| (left) and
/// |U − U(hi)| (right) stay at or below `threshold` eV, found on a scan of spacing `step`
/// and widened by one step. None when U never leaves its edge values by more than the
/// threshold (no potential).
pub fn region(
    u: &dyn Fn(f64) -> f64,
    lo: f64,
    hi: f64,
    step: f64,
    threshold: f64,
) -> Option<Region> {
    let n = ((hi - lo) / step).ceil().max(1.0) as usize;
    let x = |i: usize| (lo + i as f64 * step).min(hi);
    let (ul, ur) = (u(lo), u(hi));
    let first = (0..=n).find(|&i| (u(x(i)) - ul).abs() > threshold)?;
    let last = (0..=n).rev().find(|&i| (u(x(i)) - ur).abs() > threshold)?;
    Some(Region {
        a: x(first.saturating_sub(1)),
        b: x((last + 1).min(n)),
        u_left: ul,
        u_right: ur,
    })
}

/// Carry (ψ, ψ') over a length `h` (negative: leftwards) of constant κ² = 2m(E − V)/ħ²
/// (1/nm²): the exact solution of ψ'' = −κ²ψ.
fn carry(psi: (C64, C64), kappa2: f64, h: f64) -> (C64, C64) {
    let z = kappa2 * h * h;
    let (c, s_over, d) = if z.abs() < 1e-8 {
        // Series to second order in κ²h²: c = 1 − z/2, s/κ = h(1 − z/6), −κ s = −κ²h(1 − z/6).
        (
            1.0 - 0.5 * z,
            h * (1.0 - z / 6.0),
            -kappa2 * h * (1.0 - z / 6.0),
        )
    } else if kappa2 > 0.0 {
        let k = kappa2.sqrt();
        ((k * h).cos(), (k * h).sin() / k, -k * (k * h).sin())
    } else {
        let q = (-kappa2).sqrt();
        ((q * h).cosh(), (q * h).sinh() / q, q * (q * h).sinh())
    };
    let (p, dp) = psi;
    (p * c + dp * s_over, p * d + dp * c)
}

/// Complex numbers as pairs, enough for this solver.
#[derive(Clone, Copy, Debug, PartialEq)]
struct C64 {
    re: f64,
    im: f64,
}

impl std::ops::Mul<f64> for C64 {
    type Output = C64;
    fn mul(self, r: f64) -> C64 {
        C64 {
            re: self.re * r,
            im: self.im * r,
        }
    }
}

impl std::ops::Add for C64 {
    type Output = C64;
    fn add(self, o: C64) -> C64 {
        C64 {
            re: self.re + o.re,
            im: self.im + o.im,
        }
    }
}

/// T(E) on `cells` equal cells of [a, b] (midpoint values of U). `mass` in eV·fs²/nm²,
/// `e` in eV.
pub fn transmission_on(u: &dyn Fn(f64) -> f64, r: &Region, mass: f64, e: f64, cells: usize) -> f64 {
    if e <= r.u_left || e <= r.u_right {
        return 0.0;
    }
    let f = 2.0 * mass / (units::HBAR * units::HBAR); // 1/(eV nm²)
    let k_l = (f * (e - r.u_left)).sqrt();
    let k_r = (f * (e - r.u_right)).sqrt();
    let h = (r.b - r.a) / cells as f64;
    // Outgoing wave at b with C = 1 (the phase e^{i k_R b} drops out of |C|²).
    let mut psi = (C64 { re: 1.0, im: 0.0 }, C64 { re: 0.0, im: k_r });
    for j in (0..cells).rev() {
        let mid = r.a + (j as f64 + 0.5) * h;
        psi = carry(psi, f * (e - u(mid)), -h);
    }
    // A e^{i k_L a} = [ψ + ψ'/(i k_L)]/2; ψ'/(i k) = −i ψ'/k.
    let (p, dp) = psi;
    let a_re = 0.5 * (p.re + dp.im / k_l);
    let a_im = 0.5 * (p.im - dp.re / k_l);
    k_r / (k_l * (a_re * a_re + a_im * a_im))
}

/// T(E) from `cells` and 2·`cells` cells, Richardson-extrapolated (second order), with the
/// estimated error of the extrapolated value (the size of the correction, an overestimate
/// for a smooth potential).
pub fn transmission(
    u: &dyn Fn(f64) -> f64,
    r: &Region,
    mass: f64,
    e: f64,
    cells: usize,
) -> (f64, f64) {
    let t1 = transmission_on(u, r, mass, e, cells);
    let t2 = transmission_on(u, r, mass, e, 2 * cells);
    let corr = (t2 - t1) / 3.0;
    (t2 + corr, corr.abs())
}

/// The packet average of T and what bounds it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PacketTransmission {
    /// ∫_{k>0} |φ̃(k)|² T(E(k)) dk.
    pub mean: f64,
    /// Estimated numerical error of `mean` (cell size and k quadrature).
    pub error: f64,
    /// ∫_{k<0} |φ̃(k)|² dk: the weight that moves away from the potential.
    pub backward_weight: f64,
    /// Number of energies evaluated.
    pub energies: usize,
}

/// Average T over the momentum distribution of a Gaussian orbital (mean wavevector `k0`,
/// width `sigma` of |φ|² in nm) that starts left of the potential. `cells` sets the cell
/// size of the transfer solution (doubled once for the extrapolation).
pub fn packet_transmission(
    u: &dyn Fn(f64) -> f64,
    r: &Region,
    mass: f64,
    k0: f64,
    sigma: f64,
    cells: usize,
) -> PacketTransmission {
    let s = 1.0 / (2.0 * sigma);
    let density = |k: f64| (-(k - k0) * (k - k0) / (2.0 * s * s)).exp() / ((2.0 * PI).sqrt() * s);
    let backward_weight = 0.5 * erfc(k0 / (std::f64::consts::SQRT_2 * s));
    // k from max(0, k0 − 9s) to k0 + 9s (beyond: weight below 1e-18); Simpson's rule on a
    // grid refined until two successive results agree to 1e-7 (and at most 2^14 intervals),
    // so that a resonance narrower than s is resolved.
    let (lo, hi) = ((k0 - 9.0 * s).max(0.0), k0 + 9.0 * s);
    let mut energies = 0;
    if hi <= lo {
        return PacketTransmission {
            mean: 0.0,
            error: 0.0,
            backward_weight,
            energies,
        };
    }
    let mut values: Vec<(f64, f64)> = Vec::new(); // (T, error) at the nodes
    let eval = |k: f64| {
        let e = r.u_left + units::kinetic_energy(k, mass);
        let (t, err) = transmission(u, r, mass, e, cells);
        (density(k) * t, density(k) * err)
    };
    let mut m = 64usize;
    for i in 0..=m {
        values.push(eval(lo + (hi - lo) * i as f64 / m as f64));
        energies += 1;
    }
    let simpson = |v: &[(f64, f64)], m: usize| -> (f64, f64) {
        let h = (hi - lo) / m as f64;
        let (mut a, mut b) = (0.0, 0.0);
        for (i, (t, e)) in v.iter().enumerate() {
            let w = if i == 0 || i == m {
                1.0
            } else if i % 2 == 1 {
                4.0
            } else {
                2.0
            };
            a += w * t;
            b += w * e;
        }
        (a * h / 3.0, b * h / 3.0)
    };
    let mut prev = simpson(&values, m);
    loop {
        // Halve the spacing: keep the old nodes, add the midpoints.
        let mut next = Vec::with_capacity(2 * m + 1);
        for i in 0..m {
            next.push(values[i]);
            next.push(eval(lo + (hi - lo) * (2 * i + 1) as f64 / (2 * m) as f64));
            energies += 1;
        }
        next.push(values[m]);
        values = next;
        m *= 2;
        let cur = simpson(&values, m);
        let diff = (cur.0 - prev.0).abs();
        if diff <= 1e-7 || m >= 1 << 14 {
            return PacketTransmission {
                mean: cur.0,
                error: cur.1 + diff,
                backward_weight,
                energies,
            };
        }
        prev = cur;
    }
}

/// Complementary error function: the power series of erf for |x| < 3 and the continued
/// fraction of erfc beyond (Abramowitz & Stegun 7.1.5 and 7.1.14, from memory); absolute
/// error below 1e-13.
pub fn erfc(x: f64) -> f64 {
    if x < 0.0 {
        return 2.0 - erfc(-x);
    }
    if x < 3.0 {
        // erf x = 2/√π Σ_n (−1)^n x^{2n+1} / (n! (2n + 1)).
        let (mut term, mut sum) = (x, x);
        let x2 = x * x;
        for n in 1..200 {
            term *= -x2 / n as f64;
            let add = term / (2 * n + 1) as f64;
            sum += add;
            if add.abs() < 1e-17 * sum.abs() {
                break;
            }
        }
        return 1.0 - 2.0 / PI.sqrt() * sum;
    }
    // erfc x = e^{−x²}/√π · 1/(x + (1/2)/(x + 1/(x + (3/2)/(x + 2/(x + …))))), evaluated
    // from the tail.
    let mut f = x;
    for n in (1..80).rev() {
        f = x + (n as f64 / 2.0) / f;
    }
    (-x * x).exp() / (PI.sqrt() * f)
}

/// Standard normal distribution function Φ(z).
pub fn normal_cdf(z: f64) -> f64 {
    0.5 * erfc(-z / std::f64::consts::SQRT_2)
}

/// Weight of a Gaussian orbital's (positive) Wigner function that moves right (k > 0) and
/// has not reached `a` by time `t` in free flight: ∫∫_{k>0, x + ħkt/m < a} W₀ dx dk, with
/// W₀ the product of N(x₀, σ²) in x and N(k₀, 1/(4σ²)) in k. Free flight is exact for the
/// Wigner function where U is constant, so this is the part of the packet that is still on
/// its way to the potential.
pub fn not_arrived(x0: f64, k0: f64, sigma: f64, mass: f64, a: f64, t: f64) -> f64 {
    let s = 1.0 / (2.0 * sigma);
    let (lo, hi) = ((k0 - 9.0 * s).max(0.0), k0 + 9.0 * s);
    if hi <= lo {
        return 0.0;
    }
    let m = 4096;
    let h = (hi - lo) / m as f64;
    let mut sum = 0.0;
    for i in 0..=m {
        let k = lo + i as f64 * h;
        let w = if i == 0 || i == m {
            1.0
        } else if i % 2 == 1 {
            4.0
        } else {
            2.0
        };
        let pk = (-(k - k0) * (k - k0) / (2.0 * s * s)).exp() / ((2.0 * PI).sqrt() * s);
        let reach = a - units::velocity(k, mass) * t;
        sum += w * pk * normal_cdf((reach - x0) / sigma);
    }
    sum * h / 3.0
}

#[cfg(test)]
mod tests {
    use super::*;

    fn mass() -> f64 {
        units::mass_from_electron_masses(0.067)
    }

    /// Rectangular barrier of height V0 and width w (textbook closed form; Griffiths,
    /// problem 2.33, and Landau & Lifshitz §25, from memory):
    /// E < V0: T = 1 / (1 + V0² sinh²(q w) / (4E(V0 − E))), q = sqrt(2m(V0 − E))/ħ;
    /// E > V0: T = 1 / (1 + V0² sin²(k' w) / (4E(E − V0))), k' = sqrt(2m(E − V0))/ħ.
    fn rectangular(v0: f64, w: f64, e: f64, m: f64) -> f64 {
        let f = 2.0 * m / (units::HBAR * units::HBAR);
        if e < v0 {
            let q = (f * (v0 - e)).sqrt();
            1.0 / (1.0 + v0 * v0 * (q * w).sinh().powi(2) / (4.0 * e * (v0 - e)))
        } else {
            let k = (f * (e - v0)).sqrt();
            1.0 / (1.0 + v0 * v0 * (k * w).sin().powi(2) / (4.0 * e * (e - v0)))
        }
    }

    #[test]
    fn rectangular_barrier_matches_the_closed_form() {
        let (v0, w) = (0.25, 4.0);
        let u = |x: f64| if (0.0..w).contains(&x) { v0 } else { 0.0 };
        let r = Region {
            a: 0.0,
            b: w,
            u_left: 0.0,
            u_right: 0.0,
        };
        // Steps on cell edges: the piecewise-constant solution is exact, so only round-off
        // remains (a few hundred 2×2 products: 1e-12 is far above it and far below any
        // discretisation error, which would be of order (κh)² ≈ 1e-3 at 40 cells).
        for e in [0.02, 0.1, 0.2, 0.249, 0.251, 0.3, 0.5, 1.3] {
            let t = transmission_on(&u, &r, mass(), e, 40);
            let exact = rectangular(v0, w, e, mass());
            assert!(
                (t - exact).abs() < 1e-12 * exact.max(1e-3),
                "E = {e}: {t} vs {exact}"
            );
        }
    }

    #[test]
    fn free_motion_transmits_everything() {
        let u = |_: f64| 0.0;
        let r = Region {
            a: -10.0,
            b: 10.0,
            u_left: 0.0,
            u_right: 0.0,
        };
        for e in [1e-4, 0.05, 2.0] {
            let t = transmission_on(&u, &r, mass(), e, 500);
            assert!((t - 1.0).abs() < 1e-12, "E = {e}: T = {t}");
        }
        let p = packet_transmission(&u, &r, mass(), 0.6, 10.0, 200);
        // T = 1 for k > 0, so the average is 1 minus the backward weight (12σ_k away).
        assert!((p.mean - (1.0 - p.backward_weight)).abs() < 1e-9, "{p:?}");
    }

    #[test]
    fn smooth_step_matches_the_closed_form() {
        // U = V0/(1 + e^{−x/α}) (a logistic step, the edge of the jobs' barriers). Closed
        // form (Landau & Lifshitz, Quantum Mechanics §25, problem 2; from memory):
        // R = [sinh(πα(k1 − k2)) / sinh(πα(k1 + k2))]², T = 1 − R.
        let (v0, alpha) = (0.1, 0.5);
        let u = move |x: f64| v0 / (1.0 + (-x / alpha).exp());
        let r = region(&u, -60.0, 60.0, 0.01, 1e-13).expect("a step");
        assert_eq!((r.u_left, r.u_right), (u(-60.0), u(60.0)));
        let f = 2.0 * mass() / (units::HBAR * units::HBAR);
        for e in [0.12, 0.15, 0.3] {
            let (k1, k2) = ((f * e).sqrt(), (f * (e - v0)).sqrt());
            let refl = ((PI * alpha * (k1 - k2)).sinh() / (PI * alpha * (k1 + k2)).sinh()).powi(2);
            let (t, err) = transmission(&u, &r, mass(), e, 4000);
            // Tolerance: the solver's own error estimate (three times it) plus the
            // truncation of the tails, below 1e-13 eV against energies of 0.02 eV and more.
            assert!(
                (t - (1.0 - refl)).abs() <= 3.0 * err + 1e-9,
                "E = {e}: {t} vs {} (est. error {err:.1e})",
                1.0 - refl
            );
            assert!(err < 1e-6, "cells too coarse: {err:.1e}");
        }
    }

    #[test]
    fn sech_squared_barrier_matches_the_closed_form() {
        // U = V0 / cosh²(x/α). Closed form (Landau & Lifshitz §25, problem 4; from memory):
        // T = sinh²(πkα) / (sinh²(πkα) + cosh²(π/2 sqrt(8mV0α²/ħ² − 1))) when
        // 8mV0α²/ħ² > 1.
        let (v0, alpha) = (0.2, 2.0);
        let u = move |x: f64| v0 / (x / alpha).cosh().powi(2);
        let r = region(&u, -100.0, 100.0, 0.01, 1e-14).expect("a barrier");
        let f = 2.0 * mass() / (units::HBAR * units::HBAR);
        let g = 4.0 * f * v0 * alpha * alpha; // 8mV0α²/ħ²
        assert!(g > 1.0);
        for e in [0.05, 0.15, 0.2, 0.25] {
            let k = (f * e).sqrt();
            let sh = (PI * k * alpha).sinh().powi(2);
            let exact = sh / (sh + (0.5 * PI * (g - 1.0).sqrt()).cosh().powi(2));
            let (t, err) = transmission(&u, &r, mass(), e, 4000);
            assert!(
                (t - exact).abs() <= 3.0 * err + 1e-9,
                "E = {e}: {t} vs {exact} (est. error {err:.1e})"
            );
        }
    }

    #[test]
    fn packet_average_of_a_step_function_transmission() {
        // Over a rectangular barrier the average is a plain integral of the closed form.
        let (v0, w) = (0.25, 4.0);
        let u = |x: f64| if (0.0..w).contains(&x) { v0 } else { 0.0 };
        let r = Region {
            a: 0.0,
            b: w,
            u_left: 0.0,
            u_right: 0.0,
        };
        let (k0, sigma) = (0.6, 10.0);
        let p = packet_transmission(&u, &r, mass(), k0, sigma, 40);
        let s = 1.0 / (2.0 * sigma);
        let n = 200_000;
        let (lo, hi) = (1e-9, k0 + 12.0 * s);
        let h = (hi - lo) / n as f64;
        let mut direct = 0.0;
        for i in 0..n {
            let k = lo + (i as f64 + 0.5) * h;
            let pk = (-(k - k0) * (k - k0) / (2.0 * s * s)).exp() / ((2.0 * PI).sqrt() * s);
            direct += pk * rectangular(v0, w, units::kinetic_energy(k, mass()), mass()) * h;
        }
        // Midpoint rule with 2e5 cells over a smooth integrand: error ~ 1e-12; the
        // adaptive Simpson rule stops at 1e-7 between refinements.
        assert!((p.mean - direct).abs() < 1e-6, "{} vs {direct}", p.mean);
        assert!(p.backward_weight < 1e-30);
    }

    #[test]
    fn erfc_values() {
        // Values from memory (Abramowitz & Stegun table 7.1): erf 0.5 = 0.5204998778130465,
        // erf 1 = 0.8427007929497149, erfc 3 = 2.209049699858544e-5.
        assert!((1.0 - erfc(0.5) - 0.520_499_877_813_046_5).abs() < 1e-13);
        assert!((1.0 - erfc(1.0) - 0.842_700_792_949_714_9).abs() < 1e-13);
        assert!((erfc(3.0) / 2.209_049_699_858_544e-5 - 1.0).abs() < 1e-10);
        // Both branches meet at x = 3 and erfc(−x) = 2 − erfc(x).
        assert!((erfc(3.0 - 1e-12) - erfc(3.0)).abs() < 1e-13);
        assert!((erfc(-0.7) + erfc(0.7) - 2.0).abs() < 1e-15);
        assert!((normal_cdf(0.0) - 0.5).abs() < 1e-15);
    }

    #[test]
    fn not_arrived_is_the_slow_tail() {
        // At t = 0 everything right-moving left of a is "not arrived"; long after, nothing.
        let m = mass();
        let at0 = not_arrived(-50.0, 0.6, 10.0, m, 0.0, 0.0);
        assert!((at0 - normal_cdf(5.0)).abs() < 1e-9, "{at0}");
        let late = not_arrived(-50.0, 0.6, 10.0, m, 0.0, 1000.0);
        assert!(late < 1e-12, "{late}");
    }
}
