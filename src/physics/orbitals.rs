//! One-particle orbitals and their cross-Wigner functions (closed form for Gaussians).
//!
//! Wavevector units throughout: W_ab(x, k) = ħ·W_ab(x, p) with p = ħk, so that
//! ∫ W_aa dx dk = 1 and W_aa ≤ 1/π.

use crate::config::job::Orbital;
use num_complex::Complex64;
use std::f64::consts::PI;

/// φ(x) = (2πσ²)^-1/4 exp(−(x − x0)²/(4σ²) + i k0 x): centre x0 (nm), wavevector k0 (1/nm),
/// width σ = standard deviation of |φ|² (nm).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Gaussian {
    pub x0: f64,
    pub k0: f64,
    pub sigma: f64,
}

impl From<&Orbital> for Gaussian {
    fn from(o: &Orbital) -> Self {
        match *o {
            Orbital::Gaussian {
                centre,
                wavevector,
                width,
            } => Gaussian {
                x0: centre,
                k0: wavevector,
                sigma: width,
            },
        }
    }
}

impl Gaussian {
    /// φ(x), in nm^-1/2.
    pub fn psi(&self, x: f64) -> Complex64 {
        let u = x - self.x0;
        let amp = (2.0 * PI * self.sigma * self.sigma).powf(-0.25);
        Complex64::new(-u * u / (4.0 * self.sigma * self.sigma), self.k0 * x).exp() * amp
    }
}

/// Overlap S_ab = ⟨φ_a|φ_b⟩ = ∫ φ_a*(x) φ_b(x) dx (Gaussian integral).
pub fn overlap(a: &Gaussian, b: &Gaussian) -> Complex64 {
    let (aa, ab) = (0.25 / (a.sigma * a.sigma), 0.25 / (b.sigma * b.sigma));
    let alpha = aa + ab;
    let beta = Complex64::new(2.0 * (aa * a.x0 + ab * b.x0), b.k0 - a.k0);
    let gamma = -aa * a.x0 * a.x0 - ab * b.x0 * b.x0;
    let norm =
        (2.0 * PI * a.sigma * a.sigma).powf(-0.25) * (2.0 * PI * b.sigma * b.sigma).powf(-0.25);
    (beta * beta / (4.0 * alpha) + gamma).exp() * (PI / alpha).sqrt() * norm
}

/// Cross-Wigner function W_ab(x, k) = (2π)^-1 ∫ dy e^{-iky} φ_a(x + y/2) φ_b*(x − y/2)
/// in 1/(nm·nm^-1); closed form of docs/method.md §1 with p = ħk:
/// A = (1/σ_a² + 1/σ_b²)/16, B = −u_a/(4σ_a²) + u_b/(4σ_b²) + i((k_a + k_b)/2 − k),
/// C = −u_a²/(4σ_a²) − u_b²/(4σ_b²) + i(k_a − k_b)x,
/// W_ab = (2πσ_a²)^-1/4 (2πσ_b²)^-1/4 (2π)^-1 sqrt(π/A) exp(B²/(4A) + C).
pub fn cross_wigner(a: &Gaussian, b: &Gaussian, x: f64, k: f64) -> Complex64 {
    let (va, vb) = (a.sigma * a.sigma, b.sigma * b.sigma);
    let (ua, ub) = (x - a.x0, x - b.x0);
    let big_a = (1.0 / va + 1.0 / vb) / 16.0;
    let big_b = Complex64::new(-ua / (4.0 * va) + ub / (4.0 * vb), 0.5 * (a.k0 + b.k0) - k);
    let big_c = Complex64::new(
        -ua * ua / (4.0 * va) - ub * ub / (4.0 * vb),
        (a.k0 - b.k0) * x,
    );
    let pre = (2.0 * PI * va).powf(-0.25) * (2.0 * PI * vb).powf(-0.25) / (2.0 * PI)
        * (PI / big_a).sqrt();
    (big_b * big_b / (4.0 * big_a) + big_c).exp() * pre
}

/// |W_ab| is an uncorrelated Gaussian in (x, k): peak·exp(−(x−x̄)²/(2σ_x²) − (k−k̄)²/(2σ_k²)).
#[derive(Clone, Copy, Debug)]
pub struct Envelope {
    pub x_centre: f64,
    pub sigma_x: f64,
    pub k_centre: f64,
    pub sigma_k: f64,
    pub peak: f64,
}

impl Envelope {
    /// ∫ |W_ab| dx dk.
    pub fn mass(&self) -> f64 {
        self.peak * 2.0 * PI * self.sigma_x * self.sigma_k
    }
}

/// The envelope of |W_ab|, from the closed form: with α = 1/(4σ²), log|W_ab| in x is
/// (α_b u_b − α_a u_a)²/(α_a + α_b) − α_a u_a² − α_b u_b², whose curvature gives
/// σ_x² = (σ_a² + σ_b²)/2 and whose maximum is the centre (not the midpoint for unequal
/// widths); in k it is −((k_a + k_b)/2 − k)²/(4A), so σ_k² = 2A.
pub fn envelope(a: &Gaussian, b: &Gaussian) -> Envelope {
    let (aa, ab) = (0.25 / (a.sigma * a.sigma), 0.25 / (b.sigma * b.sigma));
    // f'(x) at x = 0 and the (constant) f''.
    let (ua, ub) = (-a.x0, -b.x0);
    let d1 = 2.0 * (ab - aa) * (ab * ub - aa * ua) / (aa + ab) - 2.0 * aa * ua - 2.0 * ab * ub;
    let d2 = -8.0 * aa * ab / (aa + ab);
    let x_centre = -d1 / d2;
    let k_centre = 0.5 * (a.k0 + b.k0);
    let big_a = (4.0 * aa + 4.0 * ab) / 16.0;
    Envelope {
        x_centre,
        sigma_x: (0.5 * (a.sigma * a.sigma + b.sigma * b.sigma)).sqrt(),
        k_centre,
        sigma_k: (2.0 * big_a).sqrt(),
        peak: cross_wigner(a, b, x_centre, k_centre).norm(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn g(x0: f64, k0: f64, sigma: f64) -> Gaussian {
        Gaussian { x0, k0, sigma }
    }

    /// Direct quadrature of the defining integral (common practice, no published source).
    fn quadrature(a: &Gaussian, b: &Gaussian, x: f64, k: f64) -> Complex64 {
        let n = 20000;
        let ymax = 20.0 * (a.sigma + b.sigma);
        let dy = 2.0 * ymax / n as f64;
        let mut s = Complex64::new(0.0, 0.0);
        for j in 0..n {
            let y = -ymax + (j as f64 + 0.5) * dy;
            s += Complex64::new(0.0, -k * y).exp() * a.psi(x + y / 2.0) * b.psi(x - y / 2.0).conj();
        }
        s * dy / (2.0 * PI)
    }

    #[test]
    fn closed_form_matches_quadrature() {
        let (a, b) = (g(-3.0, 0.7, 1.5), g(2.0, -0.4, 2.5));
        for &(x, k) in &[(0.0, 0.0), (-1.3, 0.5), (2.2, -0.8), (0.4, 0.15)] {
            let exact = quadrature(&a, &b, x, k);
            let closed = cross_wigner(&a, &b, x, k);
            assert!(
                (exact - closed).norm() < 1e-9,
                "{x} {k}: {exact} vs {closed}"
            );
        }
    }

    // Textbook: W_aa = (1/π) exp(−(x−x_a)²/(2σ²) − 2σ²(k−k_a)²) (docs/method.md §1).
    #[test]
    fn diagonal_is_the_gaussian_wigner_function() {
        let a = g(1.0, 0.3, 2.0);
        let (x, k) = (2.5, 0.1);
        let expect = (-(x - 1.0f64).powi(2) / 8.0 - 8.0 * (k - 0.3f64).powi(2)).exp() / PI;
        let w = cross_wigner(&a, &a, x, k);
        assert!((w.re - expect).abs() < 1e-14 && w.im.abs() < 1e-14);
    }

    #[test]
    fn marginal_of_cross_wigner_is_overlap_and_envelope_covers() {
        // ∫ W_ab dx dk = ⟨φ_b|φ_a⟩ (definition), and |W_ab| equals its envelope.
        let (a, b) = (g(-2.0, 0.5, 1.0), g(1.5, -0.2, 1.7));
        let env = envelope(&a, &b);
        let (nx, nk) = (400, 400);
        let (x0, x1, k0, k1) = (-12.0, 12.0, -4.0, 4.0);
        let (dx, dk) = ((x1 - x0) / nx as f64, (k1 - k0) / nk as f64);
        let mut s = Complex64::new(0.0, 0.0);
        let mut mass = 0.0;
        for i in 0..nx {
            for j in 0..nk {
                let (x, k) = (x0 + (i as f64 + 0.5) * dx, k0 + (j as f64 + 0.5) * dk);
                let w = cross_wigner(&a, &b, x, k);
                s += w * dx * dk;
                mass += w.norm() * dx * dk;
                let e = env.peak
                    * (-(x - env.x_centre).powi(2) / (2.0 * env.sigma_x.powi(2))
                        - (k - env.k_centre).powi(2) / (2.0 * env.sigma_k.powi(2)))
                    .exp();
                assert!((e - w.norm()).abs() < 1e-12 * (1.0 + env.peak));
            }
        }
        let sba = overlap(&b, &a);
        assert!((s - sba).norm() < 1e-8, "{s} vs {sba}");
        assert!((mass - env.mass()).abs() < 1e-8);
    }

    #[test]
    fn overlap_of_normalised_orbital_is_one() {
        let a = g(3.0, 1.2, 0.7);
        assert!((overlap(&a, &a) - 1.0).norm() < 1e-14);
    }
}
