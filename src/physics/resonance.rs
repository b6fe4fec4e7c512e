//! Transmission resonances of one-body scattering and the coherence length they need
//! (docs/method.md §2.6).
//!
//! **Why a resonance needs a long window.** The kernel window passes coherences of
//! separation |y| ≤ L_c − 2ℓ in full and none beyond L_c (ℓ the roll-off; y = x − x′, the
//! variable conjugate to the particle's k). For a packet φ that starts in the force-free
//! region, the transmitted probability is P = ∫ |φ̃(k)|² T(k) dk, and by Parseval
//!
//! ```text
//!     P = ∫ dy C(y) T̂(y),   C(y) = ∫ |φ̃(k)|² e^{iky} dk = e^{i k₀ y − s² y²/2},
//!                            T̂(y) = (1/2π) ∫ T(k) e^{−iky} dk,
//! ```
//!
//! with s = 1/(2σ) the packet's spread in k (σ the width of |φ|², nm). The windowed model
//! transmits ∫ dy w(y) C(y) T̂(y): T smeared in k by the window's transform (width ~2π/L_c).
//! A resonance T(k) ≈ T_p (Γ/2)² / ((k − k_r)² + (Γ/2)²) of full width at half maximum Γ
//! (1/nm) has T̂(y) = (T_p Γ/4) e^{−Γ|y|/2} e^{−i k_r y}: a coherence that decays only over
//! 2/Γ. With Y = L_c − 2ℓ the bias of P is then at most
//!
//! ```text
//!     |δP| ≤ (T_p Γ/2) ∫_Y^∞ e^{−Γy/2 − s²y²/2} dy ≤ (T_p Γ/2) e^{−ΓY/2 − s²Y²/2} / (Γ/2 + s²Y)
//! ```
//!
//! (the exponent is convex, so the integral is at most its integrand at Y over its slope
//! there). The rule: Y is the smallest reach at which this bound is [`TOLERANCE`], and
//! L_c = Y + 2ℓ (4Y/3 with the default ℓ = L_c/8). For a plane wave (s → 0) it reads
//! Y = (2/Γ) ln(T_p/τ), i.e. L_c = c/Γ with c = (8/3) ln(T_p/τ) ≈ 18 at τ = 10⁻³; a
//! packet's own finite coherence (the Gaussian factor) shortens it.
//!
//! **Which resonances.** T(k) is scanned over the packet's range k₀ ± 5s (k > 0 in the
//! direction of incidence) on a grid fine enough to see every peak that could matter; a
//! peak is a local maximum of T with T below half its height on both sides (not merely
//! above-barrier ripples), its width the distance between the two half-height points. A
//! peak counts when the packet sends at least [`TOLERANCE`] of probability through its
//! half-height interval, ∫ |φ̃|² T dk over it (its whole Lorentzian carries twice that):
//! a peak that carries less cannot move the transmitted norm by more than the tolerance
//! once the window holds the packet's own coherence, which the orbital rule of
//! `physics::defaults` (L_c ≥ 8σ, Y ≥ 3/s) ensures.
//!
//! Units: k and Γ in 1/nm, lengths in nm, energies in eV, mass in eV·fs²/nm².

use crate::config::job::{Boundary, Job, Pair};
use crate::physics::orbitals::Gaussian;
use crate::physics::potential::OneBody;
use crate::physics::transfer::{self, Region};
use crate::physics::units;
use std::f64::consts::PI;

/// Bias of the transmitted norm (a probability) the rule allows, and the least probability a
/// peak must carry to count: 10⁻³, the level at which the other derived numerics stop
/// (`defaults::KERNEL_TAIL`).
pub const TOLERANCE: f64 = 1e-3;

/// Cell size of the transfer solution, nm (second order in it; a resonance's width moves
/// by far less than the tolerance of the rule at this size).
const CELL: f64 = 0.05;

/// Scan step for the potential's range, nm.
const RANGE_STEP: f64 = 0.01;

/// A peak of a function of k.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Peak {
    /// Position of the maximum, 1/nm.
    pub k: f64,
    /// Height of the maximum.
    pub height: f64,
    /// Half-height points on either side, 1/nm.
    pub left: f64,
    pub right: f64,
}

impl Peak {
    /// Full width at half maximum Γ, 1/nm.
    pub fn width(&self) -> f64 {
        self.right - self.left
    }
}

/// The peaks of f with a maximum inside [lo, hi], found on a grid of spacing ≤ `step`: a
/// grid point at least as high as its left neighbour and higher than its right one,
/// refined by golden-section search between its neighbours; its half-height points are
/// sought outwards on the same grid down to `floor` and up to `ceiling` (beyond [lo, hi]
/// when the peak's flanks are) and refined by bisection. A maximum that does not fall
/// below half its height on both sides before f exceeds it is no peak and is left out.
pub fn peaks(
    f: &dyn Fn(f64) -> f64,
    lo: f64,
    hi: f64,
    step: f64,
    floor: f64,
    ceiling: f64,
) -> Vec<Peak> {
    if hi <= lo {
        return Vec::new();
    }
    let n = ((hi - lo) / step).ceil().max(2.0) as usize;
    let h = (hi - lo) / n as f64;
    let grid: Vec<f64> = (0..=n).map(|i| f(lo + i as f64 * h)).collect();
    let mut out = Vec::new();
    for i in 1..n {
        if !(grid[i] >= grid[i - 1] && grid[i] > grid[i + 1]) {
            continue;
        }
        let (k, height) = golden_max(f, lo + (i - 1) as f64 * h, lo + (i + 1) as f64 * h);
        let half = 0.5 * height;
        let side = |dir: f64| -> Option<f64> {
            // Walk out from the maximum until f < half; stop if f rises above the peak.
            let mut inner = k;
            loop {
                let outer = inner + dir * h;
                if outer < floor || outer > ceiling {
                    return None;
                }
                let v = f(outer);
                if v > height {
                    return None;
                }
                if v < half {
                    return Some(bisect(f, half, inner, outer));
                }
                inner = outer;
            }
        };
        if let (Some(left), Some(right)) = (side(-1.0), side(1.0)) {
            out.push(Peak {
                k,
                height,
                left,
                right,
            });
        }
    }
    out
}

/// Maximum of a unimodal f on [a, b] by golden-section search (80 steps: the interval
/// shrinks by 0.618⁸⁰ ≈ 2e-17, to the rounding of k).
fn golden_max(f: &dyn Fn(f64) -> f64, mut a: f64, mut b: f64) -> (f64, f64) {
    let r = 0.5 * (5f64.sqrt() - 1.0);
    let (mut c, mut d) = (b - r * (b - a), a + r * (b - a));
    let (mut fc, mut fd) = (f(c), f(d));
    for _ in 0..80 {
        if fc > fd {
            b = d;
            d = c;
            fd = fc;
            c = b - r * (b - a);
            fc = f(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + r * (b - a);
            fd = f(d);
        }
    }
    let k = 0.5 * (a + b);
    (k, f(k))
}

/// The point between `inner` (f ≥ level) and `outer` (f < level) where f = level, by
/// bisection (60 halvings).
fn bisect(f: &dyn Fn(f64) -> f64, level: f64, mut inner: f64, mut outer: f64) -> f64 {
    for _ in 0..60 {
        let mid = 0.5 * (inner + outer);
        if f(mid) >= level {
            inner = mid;
        } else {
            outer = mid;
        }
    }
    0.5 * (inner + outer)
}

/// Bound on the bias of the transmitted norm from a resonance of height `peak`, width
/// `width` (Γ, 1/nm) when the window passes coherences up to `reach` (Y, nm) in full, for a
/// packet of spread `s` (1/nm): (T_p Γ/2) e^{−ΓY/2 − s²Y²/2}/(Γ/2 + s²Y), a probability.
pub fn bias_bound(peak: f64, width: f64, s: f64, reach: f64) -> f64 {
    let g = 0.5 * width;
    let slope = g + s * s * reach;
    if slope <= 0.0 {
        return peak;
    }
    (peak * g * (-(g * reach) - 0.5 * s * s * reach * reach).exp() / slope).min(peak)
}

/// The smallest reach Y (nm) with [`bias_bound`] ≤ `tolerance` (0 if it holds at Y = 0), by
/// bisection to 0.01 nm; the bound decreases with Y.
pub fn reach_needed(peak: f64, width: f64, s: f64, tolerance: f64) -> f64 {
    if bias_bound(peak, width, s, 0.0) <= tolerance {
        return 0.0;
    }
    let mut hi = 1.0;
    while bias_bound(peak, width, s, hi) > tolerance {
        hi *= 2.0;
        if hi > 1e9 {
            return f64::INFINITY;
        }
    }
    let mut lo = 0.0;
    while hi - lo > 0.01 {
        let mid = 0.5 * (lo + hi);
        if bias_bound(peak, width, s, mid) > tolerance {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    hi
}

/// The coherence length whose window passes coherences up to `reach` in full:
/// L_c − 2ℓ = Y, i.e. Y + 2ℓ for a set roll-off ℓ and 4Y/3 for the default ℓ = L_c/8, nm.
pub fn coherence_for_reach(reach: f64, rolloff: Option<f64>) -> f64 {
    match rolloff {
        Some(l) => reach + 2.0 * l,
        None => reach * 4.0 / 3.0,
    }
}

/// The resonance that sets a job's coherence length, and what it needs.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Resonance {
    /// The orbital whose packet meets it.
    pub orbital: usize,
    /// Position (|k| in the direction of incidence), height and width of the peak of T.
    pub peak: Peak,
    /// Probability the packet sends through its half-height interval.
    pub weight: f64,
    /// The packet's spread in k, s = 1/(2σ), 1/nm.
    pub spread: f64,
    /// Reach Y the window must pass in full, nm, and the coherence length that does.
    pub reach: f64,
    pub coherence_length: f64,
}

/// The resonances of a one-body scattering job that carry weight, the one needing the
/// longest coherence first. Several particles without a pair term count as one-body
/// scattering whatever their statistics: each orbital evolves under the one-body
/// Hamiltonian alone (the antisymmetrised or symmetrised state is built from the evolved
/// orbitals), so each meets the resonances of T(k) as a single particle would. Empty when
/// the job is not one-body scattering (a pair term, a boundary that is not absorbing,
/// a field or trap, a potential that is not constant near both edges), for orbitals that
/// start inside the potential's range, and when nothing resonates.
pub fn resonances(job: &Job, one_body: &OneBody) -> Vec<Resonance> {
    let one_body_only = job.particles.count == 1 || matches!(job.pair, Pair::None);
    if !one_body_only
        || job.domain.boundary != Boundary::Absorbing
        || !one_body.force.is_zero()
        || !one_body.has_kernel()
    {
        return Vec::new();
    }
    let (lo, hi) = (job.domain.x_min, job.domain.x_max);
    let u = |x: f64| one_body.kernel_part(x);
    let Some(coarse) = transfer::region(&u, lo, hi, RANGE_STEP, 0.0) else {
        return Vec::new();
    };
    let height = {
        let m = ((hi - lo) / RANGE_STEP).ceil() as usize;
        (0..=m)
            .map(|i| {
                let v = u(lo + i as f64 * RANGE_STEP);
                (v - coarse.u_left).abs().max((v - coarse.u_right).abs())
            })
            .fold(0.0, f64::max)
    };
    // Beyond 10⁻¹² of the height the potential is taken as its edge value.
    let Some(region) = transfer::region(&u, lo, hi, RANGE_STEP, 1e-12 * height) else {
        return Vec::new();
    };
    if region.a <= lo + 2.0 * RANGE_STEP || region.b >= hi - 2.0 * RANGE_STEP {
        return Vec::new();
    }
    let mass = units::mass_from_electron_masses(job.particles.mass);
    let cells = ((region.b - region.a) / CELL).ceil().max(1.0) as usize;
    let mut out = Vec::new();
    for (i, o) in job.orbitals.iter().enumerate() {
        let g = Gaussian::from(o);
        // Incidence from the left (k > 0, energies above U_L) or from the right (k < 0,
        // above U_R); T(E) is the same from both sides.
        let (k0, base) = if g.x0 <= region.a && g.k0 > 0.0 {
            (g.k0, region.u_left)
        } else if g.x0 >= region.b && g.k0 < 0.0 {
            (-g.k0, region.u_right)
        } else {
            continue;
        };
        out.extend(packet_resonances(
            &u, &region, mass, base, k0, g.sigma, cells, i,
        ));
    }
    out.iter_mut().for_each(|r| {
        r.coherence_length = coherence_for_reach(r.reach, job.numerics.rolloff);
    });
    out.sort_by(|a, b| b.coherence_length.total_cmp(&a.coherence_length));
    out
}

/// The resonances one packet (mean wavevector `k0` > 0 towards the potential, width `sigma`
/// of |φ|²) meets, with energies E = `base` + ħ²k²/2m.
#[allow(clippy::too_many_arguments)]
fn packet_resonances(
    u: &dyn Fn(f64) -> f64,
    region: &Region,
    mass: f64,
    base: f64,
    k0: f64,
    sigma: f64,
    cells: usize,
    orbital: usize,
) -> Vec<Resonance> {
    let s = 1.0 / (2.0 * sigma);
    let density = |k: f64| (-(k - k0) * (k - k0) / (2.0 * s * s)).exp() / ((2.0 * PI).sqrt() * s);
    let t = |k: f64| {
        if k <= 0.0 {
            0.0
        } else {
            transfer::transmission_on(
                u,
                region,
                mass,
                base + units::kinetic_energy(k, mass),
                cells,
            )
        }
    };
    // A peak carries at most max|φ̃|² · T_p · Γ π/4 ≤ Γ π/(4 sqrt(2π) s) through its
    // half-height interval, so one that can carry TOLERANCE is at least Γ_min wide; a grid
    // of Γ_min/2 puts a point within Γ_min/4 of its maximum (≥ 0.8 of its height).
    let gamma_min = 4.0 * TOLERANCE * (2.0 * PI).sqrt() * s / PI;
    let (lo, hi) = ((k0 - 5.0 * s).max(0.0), k0 + 5.0 * s);
    let step = (0.5 * gamma_min).min((hi - lo) / 64.0);
    let reach_out = hi - lo;
    peaks(&t, lo, hi, step, 0.0, hi + reach_out)
        .into_iter()
        .filter_map(|p| {
            let weight = simpson(&|k| density(k) * t(k), p.left, p.right, 64);
            (weight >= TOLERANCE).then(|| {
                let reach = reach_needed(p.height, p.width(), s, TOLERANCE);
                Resonance {
                    orbital,
                    peak: p,
                    weight,
                    spread: s,
                    reach,
                    coherence_length: reach,
                }
            })
        })
        .collect()
}

/// ∫_a^b f by Simpson's rule on `m` (even) intervals.
fn simpson(f: &dyn Fn(f64) -> f64, a: f64, b: f64, m: usize) -> f64 {
    let h = (b - a) / m as f64;
    let mut sum = f(a) + f(b);
    for i in 1..m {
        sum += if i % 2 == 1 { 4.0 } else { 2.0 } * f(a + i as f64 * h);
    }
    sum * h / 3.0
}

/// The warning for a job whose coherence length `lc` (roll-off `rolloff`, nm) is below what
/// resonance `r` needs, with the numbers and the bound on the bias at the job's L_c; None
/// when it suffices. `width` is the domain width (nm): when the need exceeds it, no L_c
/// the domain allows is enough, and the warning says so.
pub fn warning(r: &Resonance, lc: f64, rolloff: f64, width: f64) -> Option<String> {
    if lc + 1e-9 >= r.coherence_length {
        return None;
    }
    Some(format!(
        "orbital.{} meets a transmission resonance at k = {:.4}/nm (T = {:.3}, width Γ = {:.4}/nm FWHM, \
         {:.4} of its probability passes through it): the window must pass coherences up to {:.1} nm, so \
         L_c ≥ {:.1} nm, but the job has L_c = {lc} nm; the transmitted norm may be biased by up to {:.1e} \
         (docs/method.md §2.6): {}",
        r.orbital,
        r.peak.k,
        r.peak.height,
        r.peak.width(),
        r.weight,
        r.reach,
        r.coherence_length,
        bias_bound(
            r.peak.height,
            r.peak.width(),
            r.spread,
            (lc - 2.0 * rolloff).max(0.0)
        ),
        if r.coherence_length > width {
            format!(
                "the domain ({width} nm wide) cannot hold it; widen the domain and raise numerics.coherence_length"
            )
        } else {
            "raise numerics.coherence_length (or leave it unset: the default follows this rule)"
                .to_string()
        }
    ))
}

/// The warnings of a job whose coherence length `lc` (roll-off `rolloff`, domain `width`,
/// nm) is too short for one of its resonances ([`warning`]), the most demanding first.
pub fn coherence_warnings(
    job: &Job,
    one_body: &OneBody,
    lc: f64,
    rolloff: f64,
    width: f64,
) -> Vec<String> {
    resonances(job, one_body)
        .iter()
        .filter_map(|r| warning(r, lc, rolloff, width))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// T_p (Γ/2)²/((k − k_r)² + (Γ/2)²): its full width at half maximum is Γ exactly.
    fn lorentzian(k: f64, kr: f64, gamma: f64, tp: f64) -> f64 {
        let g = 0.5 * gamma;
        tp * g * g / ((k - kr) * (k - kr) + g * g)
    }

    #[test]
    fn the_width_of_a_lorentzian_is_its_fwhm() {
        for (kr, gamma, tp) in [(0.5, 0.01, 1.0), (0.3137, 2.5e-4, 0.4), (1.2, 0.08, 0.9)] {
            let f = |k: f64| lorentzian(k, kr, gamma, tp);
            // Grid spacing Γ/2, as in the scan, over a range that holds the whole peak.
            let p = peaks(
                &f,
                kr - 5.0 * gamma,
                kr + 5.0 * gamma,
                0.5 * gamma,
                0.0,
                10.0,
            );
            assert_eq!(p.len(), 1, "one peak for Γ = {gamma}");
            // Golden-section search finds the maximum to ~1e-8 Γ (flat top: the error in k
            // is the square root of the rounding), bisection the half-height points to the
            // last bits: the width is exact to far below 1e-6 Γ.
            assert!((p[0].width() - gamma).abs() < 1e-6 * gamma, "{p:?}");
            assert!((p[0].k - kr).abs() < 1e-6 * gamma, "{p:?}");
            assert!((p[0].height - tp).abs() < 1e-9, "{p:?}");
        }
    }

    #[test]
    fn a_peak_is_found_even_when_its_flanks_lie_beyond_the_scan() {
        // The scan covers only the top; the half-height points are sought further out.
        let f = |k: f64| lorentzian(k, 0.5, 0.02, 1.0);
        let p = peaks(&f, 0.495, 0.505, 0.001, 0.0, 1.0);
        assert_eq!(p.len(), 1);
        assert!((p[0].width() - 0.02).abs() < 1e-8);
    }

    #[test]
    fn ripples_and_slopes_are_no_peaks() {
        // A bump that never falls to half its height (above-barrier ripple) and a rising
        // edge: no resonance.
        let ripple = |k: f64| 0.7 + lorentzian(k, 0.5, 0.02, 0.25);
        assert!(peaks(&ripple, 0.3, 0.7, 0.005, 0.0, 1.0).is_empty());
        let edge = |k: f64| 1.0 / (1.0 + (-(k - 0.5) / 0.01).exp());
        assert!(peaks(&edge, 0.3, 0.7, 0.005, 0.0, 1.0).is_empty());
    }

    /// Rectangular single barrier of height V0 and width b below the top (textbook closed
    /// form; Landau & Lifshitz §25, from memory): T = 1/(1 + V0² sinh²(qb)/(4E(V0 − E))).
    fn single_barrier(v0: f64, b: f64, e: f64, mass: f64) -> f64 {
        let f = 2.0 * mass / (units::HBAR * units::HBAR);
        let q = (f * (v0 - e)).sqrt();
        1.0 / (1.0 + v0 * v0 * (q * b).sinh().powi(2) / (4.0 * e * (v0 - e)))
    }

    #[test]
    fn double_barrier_width_matches_the_fabry_perot_estimate() {
        // Two rectangular barriers (0.3 eV, 5 nm) around an 8 nm well, GaAs-like mass. An
        // independent estimate (Fabry–Pérot between two identical mirrors of reflectance R;
        // textbook optics, from memory): T = 1/(1 + F sin²θ), F = 4R/(1 − R)², with θ the
        // half round-trip phase k w + φ_r, φ_r the phase of reflection off a barrier. Near a
        // resonance the FWHM in θ is (1 − R)/sqrt(R), and for a thick barrier (qb ≫ 1) the
        // reflection off its face is that off a step, φ_r = −2 atan(q/k) with dφ_r/dk = 2/q,
        // so Γ_k = (1 − R)/(sqrt(R) (w + 2/q)), 1 − R = T₁ the single barrier's transmission.
        // Neglected: terms of relative order e^{−2qb} (the far face, ≈ 1.3e-3 here) and the
        // change of T₁ and q across the peak (≈ 2b(k/q)Γ ≈ 1e-3): 1 % is a few times both.
        let mass = units::mass_from_electron_masses(0.067);
        let (v0, b, w) = (0.3, 5.0, 8.0);
        let u = move |x: f64| {
            if (x.abs() > 0.5 * w) && (x.abs() < 0.5 * w + b) {
                v0
            } else {
                0.0
            }
        };
        let region = Region {
            a: -0.5 * w - b - 1.0,
            b: 0.5 * w + b + 1.0,
            u_left: 0.0,
            u_right: 0.0,
        };
        // Cells of 0.1 nm: the steps sit on cell edges, so the transfer solution is exact.
        let cells = ((region.b - region.a) / 0.1).round() as usize;
        let t = |k: f64| {
            transfer::transmission_on(&u, &region, mass, units::kinetic_energy(k, mass), cells)
        };
        let p = peaks(&t, 0.2, 0.4, 2e-5, 0.0, 0.6);
        assert_eq!(p.len(), 1, "one resonance below the barrier tops: {p:?}");
        let p = p[0];
        let f = 2.0 * mass / (units::HBAR * units::HBAR);
        let e = units::kinetic_energy(p.k, mass);
        let q = (f * (v0 - e)).sqrt();
        let t1 = single_barrier(v0, b, e, mass);
        let estimate = t1 / ((1.0 - t1).sqrt() * (w + 2.0 / q));
        assert!(
            (p.width() / estimate - 1.0).abs() < 0.01,
            "width {} against the Fabry–Pérot estimate {estimate} (k_r = {}, T₁ = {t1})",
            p.width(),
            p.k
        );
        assert!(
            p.height > 0.99,
            "a symmetric double barrier transmits fully: {p:?}"
        );
    }

    #[test]
    fn the_bound_holds_and_the_reach_meets_it() {
        for (tp, gamma, s) in [(1.0, 0.0261, 0.025), (0.5, 0.002, 0.05), (1.0, 0.05, 0.0)] {
            for y in [0.0, 20.0, 60.0, 150.0] {
                // (T_p Γ/2) ∫_Y^∞ e^{−Γy/2 − s²y²/2} dy by Simpson's rule up to Y + 4000 nm.
                let g = |x: f64| (-(0.5 * gamma * x) - 0.5 * s * s * x * x).exp();
                let exact = 0.5 * tp * gamma * simpson(&g, y, y + 4000.0, 400_000);
                let bound = bias_bound(tp, gamma, s, y);
                assert!(
                    exact <= bound * (1.0 + 1e-9),
                    "{exact} > {bound} at Y = {y}"
                );
            }
            let reach = reach_needed(tp, gamma, s, TOLERANCE);
            assert!(bias_bound(tp, gamma, s, reach) <= TOLERANCE);
            assert!(bias_bound(tp, gamma, s, reach - 0.02) > TOLERANCE);
        }
        // Plane-wave limit: Y = (2/Γ) ln(T_p/τ).
        let reach = reach_needed(1.0, 0.05, 0.0, TOLERANCE);
        assert!((reach - 2.0 / 0.05 * (1.0 / TOLERANCE).ln()).abs() < 0.02);
    }
}
