//! One-body stationary transmission T(E) across a one-dimensional potential by transfer
//! matrices: the solver behind `reference::stationary` (its module documentation gives the
//! definition and the method) and behind the resonance scan of `physics::resonance`. Kept
//! in the physics layer so that the numerics derived from a job can use it.
//!
//! Units: x in nm, U and E in eV, mass in eV·fs²/nm², κ in 1/nm.

use crate::physics::units;

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

/// The transfer matrix entries (cos κh, sin(κh)/κ, −κ sin κh) of a cell of constant
/// κ² = 2m(E − V)/ħ² and length `h` (cosh and sinh for κ² < 0).
pub fn carry_coefficients(kappa2: f64, h: f64) -> (f64, f64, f64) {
    let z = kappa2 * h * h;
    if z.abs() < 1e-8 {
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
    }
}

/// Carry (ψ, ψ') over a length `h` (negative: leftwards) of constant κ² = 2m(E − V)/ħ²
/// (1/nm²): the exact solution of ψ'' = −κ²ψ.
fn carry(psi: (C64, C64), kappa2: f64, h: f64) -> (C64, C64) {
    let (c, s_over, d) = carry_coefficients(kappa2, h);
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
