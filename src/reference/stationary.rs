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

use crate::physics::transfer::carry_coefficients;
pub use crate::physics::transfer::{Region, region, transmission, transmission_on};
use crate::physics::units;
use num_complex::Complex64;
use std::f64::consts::PI;

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

/// A Gaussian orbital (centre, mean wavevector, width of |φ|², nm and 1/nm).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Packet {
    pub x0: f64,
    pub k0: f64,
    pub sigma: f64,
}

impl Packet {
    /// φ(x) = (2πσ²)^{−1/4} exp(−(x − x₀)²/(4σ²) + i k₀ x).
    fn at(&self, x: f64) -> Complex64 {
        let n = (2.0 * PI * self.sigma * self.sigma).powf(-0.25);
        let d = x - self.x0;
        Complex64::from_polar(
            n * (-d * d / (4.0 * self.sigma * self.sigma)).exp(),
            self.k0 * x,
        )
    }
    /// ∫ e^{−iκx} φ(x) dx over the whole line (closed form).
    fn full(&self, kappa: f64) -> Complex64 {
        let s2 = self.sigma * self.sigma;
        let n = (2.0 * PI * s2).powf(-0.25) * (4.0 * PI * s2).sqrt();
        Complex64::from_polar(
            n * (-s2 * (self.k0 - kappa).powi(2)).exp(),
            (self.k0 - kappa) * self.x0,
        )
    }
    /// ∫_from^∞ e^{−iκx} φ(x) dx by the trapezoid rule (step 0.005 nm) up to where |φ| has
    /// fallen below 1e-12 of its peak.
    fn tail(&self, kappa: f64, from: f64) -> Complex64 {
        let end = self.x0 + 10.5 * self.sigma;
        if end <= from {
            return Complex64::new(0.0, 0.0);
        }
        let n = ((end - from) / 0.005).ceil() as usize;
        let h = (end - from) / n as f64;
        let mut sum = Complex64::new(0.0, 0.0);
        for i in 0..=n {
            let x = from + i as f64 * h;
            let w = if i == 0 || i == n { 0.5 } else { 1.0 };
            sum += self.at(x) * Complex64::from_polar(w, -kappa * x);
        }
        sum * h
    }
}

/// Transmitted probability of a packet by its exact projection on the scattering states, at
/// one cell size: the integrand at left wavevector k (E = U_L + ħ²k²/2m) of
/// P = ∫ dk (k/q) |c_L t_L (q/k) + c_R r_R|² and of the completeness sum
/// ∫ dk [|c_L|² + (k/q)|c_R|²], where c_L(k) = ⟨ψ_{L,k}|φ⟩ and c_R(q) = ⟨ψ_{R,q}|φ⟩ are the
/// overlaps with the states incident from the left (wavevector k) and from the right
/// (wavevector q on the right), each normalised to a plane wave (2π)^{−1/2} e^{±ikx} of unit
/// amplitude in its incoming channel, and t, r their transmission and reflection amplitudes.
/// At t → ∞ only outgoing waves remain on the right, with amplitude c_L t_L (q/k) + c_R r_R
/// per unit q (Parseval).
fn projected_integrand(
    u: &dyn Fn(f64) -> f64,
    r: &Region,
    mass: f64,
    p: &Packet,
    k: f64,
    cells: usize,
) -> (f64, f64) {
    let f = 2.0 * mass / (units::HBAR * units::HBAR);
    let e = r.u_left + units::kinetic_energy(k, mass);
    if e <= r.u_right || e <= r.u_left {
        return (0.0, 0.0);
    }
    let q = (f * (e - r.u_right)).sqrt();
    let h = (r.b - r.a) / cells as f64;
    let i = Complex64::new(0.0, 1.0);
    let kappa2: Vec<f64> = (0..cells)
        .map(|j| f * (e - u(r.a + (j as f64 + 0.5) * h)))
        .collect();
    let step = |psi: (Complex64, Complex64), k2: f64, h: f64| {
        let (c, s, d) = carry_coefficients(k2, h);
        (psi.0 * c + psi.1 * s, psi.0 * d + psi.1 * c)
    };
    // Incident from the left: from ψ(b) = 1 outgoing, carried to a.
    let mut vl = vec![Complex64::new(0.0, 0.0); cells + 1];
    let mut psi = (Complex64::new(1.0, 0.0), i * q);
    vl[cells] = psi.0;
    for j in (0..cells).rev() {
        psi = step(psi, kappa2[j], -h);
        vl[j] = psi.0;
    }
    let ea = Complex64::from_polar(1.0, k * r.a);
    let amp_a = (psi.0 + psi.1 / (i * k)) * 0.5 / ea; // A
    let amp_b = (psi.0 - psi.1 / (i * k)) * 0.5 * ea; // B
    let t_l = Complex64::from_polar(1.0, -q * r.b) / amp_a;
    let r_l = amp_b / amp_a;
    // Incident from the right: from ψ(a) = 1 outgoing to the left, carried to b.
    let mut vr = vec![Complex64::new(0.0, 0.0); cells + 1];
    let mut psi = (Complex64::new(1.0, 0.0), -i * k);
    vr[0] = psi.0;
    for j in 0..cells {
        psi = step(psi, kappa2[j], h);
        vr[j + 1] = psi.0;
    }
    let eb = Complex64::from_polar(1.0, q * r.b);
    let amp_in = (psi.0 - psi.1 / (i * q)) * 0.5 * eb; // coefficient of e^{−iqx}
    let amp_out = (psi.0 + psi.1 / (i * q)) * 0.5 / eb; // coefficient of e^{iqx}
    let t_r = Complex64::from_polar(1.0, k * r.a) / amp_in;
    let r_r = amp_out / amp_in;
    // Overlaps ∫ conj(ψ) φ dx: closed-form whole-line integrals minus numerical tails in the
    // free regions, the trapezoid rule on the nodes in between.
    let middle = |v: &[Complex64], norm: Complex64| {
        let mut sum = Complex64::new(0.0, 0.0);
        for (j, val) in v.iter().enumerate() {
            let w = if j == 0 || j == cells { 0.5 } else { 1.0 };
            sum += (val / norm).conj() * p.at(r.a + j as f64 * h) * w;
        }
        sum * h
    };
    let left_plus = p.full(k) - p.tail(k, r.a); // ∫_{−∞}^a e^{−ikx} φ
    let left_minus = p.full(-k) - p.tail(-k, r.a); // ∫_{−∞}^a e^{ikx} φ
    let right_minus = p.tail(q, r.b); // ∫_b^∞ e^{−iqx} φ
    let right_plus = p.tail(-q, r.b); // ∫_b^∞ e^{iqx} φ
    let norm = (2.0 * PI).sqrt();
    let c_l = (left_plus + r_l.conj() * left_minus + middle(&vl, amp_a) + t_l.conj() * right_minus)
        / norm;
    let c_r =
        (t_r.conj() * left_minus + middle(&vr, amp_in) + right_plus + r_r.conj() * right_minus)
            / norm;
    let out = c_l * t_l * (q / k) + c_r * r_r;
    (
        (k / q) * out.norm_sqr(),
        c_l.norm_sqr() + (k / q) * c_r.norm_sqr(),
    )
}

/// The exact transmitted probability of a packet and the completeness of its projection.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ProjectedTransmission {
    /// Transmitted probability long after the packet has left the potential.
    pub mean: f64,
    /// Estimated numerical error (cell size, x and k quadrature).
    pub error: f64,
    /// ∫ |c_L|² + |c_R|²: 1 up to the numerical error when the packet has no weight below
    /// max(U_L, U_R) and no overlap with bound states.
    pub completeness: f64,
}

/// The transmitted probability of a Gaussian packet, by projecting it on the scattering
/// states of the potential (docs/method.md §5). Unlike [`packet_transmission`], this holds
/// also when the packet's tail reaches into the potential at t = 0, which matters near a
/// resonance, where the states inside are strongly amplified; the two agree for a packet
/// wholly in the force-free region left of the potential.
pub fn projected_transmission(
    u: &dyn Fn(f64) -> f64,
    r: &Region,
    mass: f64,
    p: &Packet,
    cells: usize,
) -> ProjectedTransmission {
    let s = 1.0 / (2.0 * p.sigma);
    let f = 2.0 * mass / (units::HBAR * units::HBAR);
    let k_threshold = (f * (r.u_right - r.u_left).max(0.0)).sqrt();
    let (lo, hi) = ((p.k0 - 9.0 * s).max(k_threshold), p.k0 + 9.0 * s);
    if hi <= lo {
        return ProjectedTransmission {
            mean: 0.0,
            error: 0.0,
            completeness: 0.0,
        };
    }
    // Per node: (P at cells, P at 2 cells, completeness at 2 cells).
    let eval = |k: f64| {
        let (p1, _) = projected_integrand(u, r, mass, p, k, cells);
        let (p2, c2) = projected_integrand(u, r, mass, p, k, 2 * cells);
        [p1, p2, c2]
    };
    let simpson = |v: &[[f64; 3]], m: usize| -> [f64; 3] {
        let h = (hi - lo) / m as f64;
        let mut a = [0.0; 3];
        for (i, x) in v.iter().enumerate() {
            let w = if i == 0 || i == m {
                1.0
            } else if i % 2 == 1 {
                4.0
            } else {
                2.0
            };
            for c in 0..3 {
                a[c] += w * x[c];
            }
        }
        a.map(|x| x * h / 3.0)
    };
    let mut m = 64usize;
    let mut values: Vec<[f64; 3]> = (0..=m)
        .map(|i| eval(lo + (hi - lo) * i as f64 / m as f64))
        .collect();
    let mut prev = simpson(&values, m);
    loop {
        let mut next = Vec::with_capacity(2 * m + 1);
        for i in 0..m {
            next.push(values[i]);
            next.push(eval(lo + (hi - lo) * (2 * i + 1) as f64 / (2 * m) as f64));
        }
        next.push(values[m]);
        values = next;
        m *= 2;
        let cur = simpson(&values, m);
        let diff = (cur[1] - prev[1]).abs();
        if diff <= 1e-7 || m >= 1 << 12 {
            let correction = (cur[1] - cur[0]) / 3.0;
            return ProjectedTransmission {
                mean: cur[1] + correction,
                error: correction.abs() + diff,
                completeness: cur[2],
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

    fn double_barrier(x: f64) -> f64 {
        0.3 * (-(x + 6.0) * (x + 6.0) / 2.0).exp() + 0.3 * (-(x - 6.0) * (x - 6.0) / 2.0).exp()
    }

    #[test]
    fn projection_equals_the_plane_wave_average_for_a_distant_packet() {
        // A packet 15 widths from a single barrier: its plane-wave components are the
        // incoming waves of the scattering states, so both averages must agree to their
        // numerical errors.
        let (v0, w) = (0.25, 4.0);
        let u = |x: f64| if (0.0..w).contains(&x) { v0 } else { 0.0 };
        let r = Region {
            a: 0.0,
            b: w,
            u_left: 0.0,
            u_right: 0.0,
        };
        let p = Packet {
            x0: -150.0,
            k0: 0.6,
            sigma: 10.0,
        };
        let free = packet_transmission(&u, &r, mass(), p.k0, p.sigma, 400);
        let proj = projected_transmission(&u, &r, mass(), &p, 400);
        assert!(
            (free.mean - proj.mean).abs() <= 3.0 * (free.error + proj.error) + 1e-7,
            "{free:?} {proj:?}"
        );
        assert!((proj.completeness - 1.0).abs() < 1e-6, "{proj:?}");
    }

    #[test]
    fn projection_is_complete_when_the_packet_reaches_into_a_resonance() {
        // The resonant double barrier with a packet whose tail reaches between the barriers
        // (centre 4.2 widths away): the scattering states are complete (no bound states), so
        // Σ|c|² = 1 to the quadrature error, and the transmission differs from the
        // plane-wave average by the amplified tail (more than the numerical errors).
        let u = double_barrier;
        let r = region(&u, -60.0, 60.0, 0.01, 1e-13).unwrap();
        let p = Packet {
            x0: -90.0,
            k0: 0.45,
            sigma: 20.0,
        };
        let cells = ((r.b - r.a) / 0.01).ceil() as usize;
        let proj = projected_transmission(&u, &r, mass(), &p, cells);
        let free = packet_transmission(&u, &r, mass(), p.k0, p.sigma, cells);
        assert!((proj.completeness - 1.0).abs() < 1e-5, "{proj:?}");
        assert!(
            (proj.mean - free.mean).abs() > 10.0 * (proj.error + free.error),
            "{proj:?} {free:?}"
        );
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
