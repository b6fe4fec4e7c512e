//! Windowed Wigner kernel tables on a mesh (docs/method.md §2).
//!
//! For a one-dimensional potential U the transfer rate to k + MΔk (Δk = π/P) is
//!
//!   V_w(x, M) = −(1/(ħ P)) ∫_{−P/2}^{P/2} ds w(s) sin(2πMs/P) [U(x + s) − U(x − s)]
//!
//! in 1/fs, with w the C^∞ flat-top window of width L_c (zero for |s| ≥ L_c/2) and P ≥ L_c
//! the period of the transfer lattice: the sine series reproduces the windowed bracket for
//! |s| < P/2 and repeats it with period P in s, so a coherence of half-length |s| sees no
//! phantom ("image") potential while |s| < P − L_c/2 (docs/method.md §2.3). The integrand is
//! periodic and smooth, so the trapezoid rule on n points (one FFT per mesh point) is
//! spectrally accurate. The table
//! holds V_w for |M| ≤ K, γ(x) = Σ_M max(V_w, 0), and an alias sampler of M per point.
//! Between mesh points (cell centres) the kernel is interpolated linearly; flight samples
//! the interpolated kernel exactly by choosing one of the two neighbouring rows at random
//! with the interpolation weights ([`KernelTable::interpolation`]).

use crate::physics::units::HBAR;
use rand::Rng;
use rand_distr::Distribution;
use rand_distr::weighted::WeightedAliasIndex;
use rayon::prelude::*;
use rustfft::{FftPlanner, num_complex::Complex64};

/// S(t) = 1/(1 + exp(1/(1 − t) − 1/t)): C^∞ step from 1 (t → 0) to 0 (t → 1).
pub fn smooth_step(t: f64) -> f64 {
    if t <= 0.0 {
        return 1.0;
    }
    if t >= 1.0 {
        return 0.0;
    }
    let e = 1.0 / (1.0 - t) - 1.0 / t;
    if e > 700.0 {
        0.0
    } else if e < -700.0 {
        1.0
    } else {
        1.0 / (1.0 + e.exp())
    }
}

/// Flat-top window: 1 for |s| ≤ L_c/2 − ℓ, S((|s| − L_c/2 + ℓ)/ℓ) on the outer ℓ.
pub fn window(s: f64, lc: f64, rolloff: f64) -> f64 {
    let a = s.abs();
    let inner = 0.5 * lc - rolloff;
    if a <= inner {
        1.0
    } else {
        smooth_step((a - inner) / rolloff)
    }
}

/// A kernel table on mesh cells [lo + j·dx, lo + (j+1)·dx), evaluated at cell centres.
pub struct KernelTable {
    pub lo: f64,
    pub dx: f64,
    pub points: usize,
    /// Transfer cap K: |M| ≤ K.
    pub cap: usize,
    /// Period of the transfer lattice in s, P ≥ L_c, nm.
    pub period: f64,
    /// Transfer quantum Δk = π/P, 1/nm.
    pub dk: f64,
    /// V_w(x_j, M) for M = −K..K, row-major by point, 1/fs.
    pub values: Vec<f64>,
    /// γ(x_j) = Σ_M max(V_w(x_j, M), 0), 1/fs.
    pub gamma: Vec<f64>,
    pub gamma_max: f64,
    /// Largest (over points) kernel weight Σ_{|M|>K} |V_w| relative to the largest Σ_M |V_w|.
    pub tail: f64,
    samplers: Vec<Option<WeightedAliasIndex<f64>>>,
}

impl KernelTable {
    /// Build the table of `u` (eV, function of nm) on `points` cells starting at `lo`, with
    /// window width `lc` and roll-off `rolloff` (nm), lattice period `period` ≥ `lc` (nm,
    /// Δk = π/period) and cap `cap` (|M| ≤ K).
    #[allow(clippy::too_many_arguments)]
    pub fn build(
        u: &(dyn Fn(f64) -> f64 + Sync),
        lo: f64,
        dx: f64,
        points: usize,
        lc: f64,
        rolloff: f64,
        period: f64,
        cap: usize,
    ) -> Self {
        assert!(
            period >= lc,
            "lattice period {period} nm below L_c = {lc} nm"
        );
        let n = (8 * cap + 8)
            .max((4.0 * period / dx).ceil() as usize)
            .max(64)
            .next_power_of_two();
        let fft = FftPlanner::<f64>::new().plan_fft_forward(n);
        let ds = period / n as f64;
        let win: Vec<f64> = (0..n)
            .map(|j| window(-0.5 * period + j as f64 * ds, lc, rolloff))
            .collect();
        let m_ext = (n / 2 - 1).min(4 * cap.max(1));
        let width = 2 * cap + 1;
        let rows: Vec<(Vec<f64>, f64, f64)> = (0..points)
            .into_par_iter()
            .map(|j| {
                let x = lo + (j as f64 + 0.5) * dx;
                let mut buf: Vec<Complex64> = (0..n)
                    .map(|i| {
                        let s = -0.5 * period + i as f64 * ds;
                        Complex64::new(win[i] * (u(x + s) - u(x - s)), 0.0)
                    })
                    .collect();
                fft.process(&mut buf);
                // V(M) = (−1)^M Im F[M] / (ħ n), F the forward DFT (see module docs).
                let v = |m: usize| -> f64 {
                    let sgn = if m.is_multiple_of(2) { 1.0 } else { -1.0 };
                    sgn * buf[m].im / (HBAR * n as f64)
                };
                let mut row = vec![0.0; width];
                for m in 1..=cap {
                    let val = v(m);
                    row[cap + m] = val;
                    row[cap - m] = -val; // V_w is odd in M
                }
                let inside: f64 = (1..=cap).map(|m| 2.0 * v(m).abs()).sum();
                let beyond: f64 = (cap + 1..=m_ext).map(|m| 2.0 * v(m).abs()).sum();
                (row, inside + beyond, beyond)
            })
            .collect();
        let mut values = Vec::with_capacity(points * width);
        let mut gamma = Vec::with_capacity(points);
        let mut samplers = Vec::with_capacity(points);
        let (mut total_max, mut tail_max) = (0.0f64, 0.0f64);
        for (row, total, beyond) in rows {
            let pos: Vec<f64> = row.iter().map(|&v| v.max(0.0)).collect();
            let g: f64 = pos.iter().sum();
            gamma.push(g);
            samplers.push(if g > 0.0 {
                WeightedAliasIndex::new(pos).ok()
            } else {
                None
            });
            values.extend_from_slice(&row);
            total_max = total_max.max(total);
            tail_max = tail_max.max(beyond);
        }
        let gamma_max = gamma.iter().cloned().fold(0.0, f64::max);
        KernelTable {
            lo,
            dx,
            points,
            cap,
            period,
            dk: std::f64::consts::PI / period,
            values,
            gamma,
            gamma_max,
            tail: if total_max > 0.0 {
                tail_max / total_max
            } else {
                0.0
            },
            samplers,
        }
    }

    /// Mesh cell holding `x`, or None outside the table.
    #[inline]
    pub fn cell(&self, x: f64) -> Option<usize> {
        let t = (x - self.lo) / self.dx;
        if t >= 0.0 && t < self.points as f64 {
            Some(t as usize)
        } else {
            None
        }
    }

    /// Linear interpolation between the rows at the mesh points (cell centres)
    /// x_j = lo + (j + ½)·dx: for x_j ≤ x < x_{j+1}, with t = (x − x_j)/dx, the rows j and
    /// j + 1 with weights 1 − t and t, so that V_w(x, M) ≈ (1 − t)V_w(x_j, M) + t V_w(x_{j+1}, M)
    /// (error O(dx²) instead of the O(dx) of the piecewise-constant row). In the outer half
    /// cells (before the first or after the last centre) the edge row with weight 1 (and
    /// weight 0 on its neighbour). None outside the table.
    #[inline]
    pub fn interpolation(&self, x: f64) -> Option<[(usize, f64); 2]> {
        let c = (x - self.lo) / self.dx;
        if !(c >= 0.0 && c < self.points as f64) {
            return None;
        }
        let u = c - 0.5;
        if u <= 0.0 {
            return Some([(0, 1.0), (0, 0.0)]);
        }
        let j = u as usize;
        if j + 1 >= self.points {
            let last = self.points - 1;
            return Some([(last, 1.0), (last, 0.0)]);
        }
        let t = u - j as f64;
        Some([(j, 1.0 - t), (j + 1, t)])
    }

    /// γ at `x` (0 outside the table), linearly interpolated between mesh points, 1/fs.
    #[inline]
    pub fn gamma_at(&self, x: f64) -> f64 {
        self.interpolation(x).map_or(0.0, |r| {
            r[0].1 * self.gamma[r[0].0] + r[1].1 * self.gamma[r[1].0]
        })
    }

    /// V_w(x_j, M) row of cell j (index M + K).
    pub fn row(&self, j: usize) -> &[f64] {
        let w = 2 * self.cap + 1;
        &self.values[j * w..(j + 1) * w]
    }

    /// Draw M with probability max(V_w(x_j, M), 0)/γ(x_j).
    #[inline]
    pub fn sample<R: Rng>(&self, j: usize, rng: &mut R) -> i64 {
        let s = self.samplers[j].as_ref().expect("sampled only where γ > 0");
        s.sample(rng) as i64 - self.cap as i64
    }

    /// Bytes held by the table (values, γ and samplers).
    pub fn bytes(&self) -> usize {
        self.values.len() * (8 + 12) + self.gamma.len() * 8
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn window_is_flat_then_falls_to_zero() {
        assert_eq!(window(0.0, 10.0, 1.25), 1.0);
        assert_eq!(window(3.75, 10.0, 1.25), 1.0);
        assert!(window(4.99, 10.0, 1.25) < 1e-10);
        assert_eq!(window(5.0, 10.0, 1.25), 0.0);
        let mid = window(4.375, 10.0, 1.25);
        assert!((mid - 0.5).abs() < 1e-12);
    }

    /// Moment identities (Ehrenfest 1927; Moyal 1949, docs/method.md §2), in wavevector units:
    /// Σ_M MΔk V_w = −U'/ħ and Σ_M (MΔk)³ V_w = U'''/(4ħ).
    #[test]
    fn moment_identities_on_a_gaussian_bump() {
        // Lattice period P = L_c (Δk = π/L_c, K = 400) and P = 2.5 L_c (Δk 2.5× finer,
        // K = 1000: the same k range).
        moment_identities(1.0, 400);
        moment_identities(2.5, 1000);
    }

    fn moment_identities(period_factor: f64, cap: usize) {
        // Gaussian bump of width b, L_c = 10 b, ℓ = L_c/8 (the setting of docs/method.md §2).
        let (b, h) = (2.0, 0.2);
        let u = move |x: f64| h * (-x * x / (2.0 * b * b)).exp();
        let du = move |x: f64| -x / (b * b) * u(x);
        let d3u =
            move |x: f64| u(x) * (3.0 * x / (b * b * b * b) - x * x * x / (b * b * b * b * b * b));
        let lc = 10.0 * b;
        let period = period_factor * lc;
        let dk = std::f64::consts::PI / period;
        let t = KernelTable::build(&u, -8.125, 0.25, 65, lc, lc / 8.0, period, cap);
        let peak = |f: &dyn Fn(f64) -> f64| {
            (0..4000)
                .map(|i| f(-8.0 + i as f64 * 0.004).abs())
                .fold(0.0, f64::max)
        };
        let (s1, s3) = (peak(&du) / HBAR, peak(&d3u) / (4.0 * HBAR));
        let moments = |x: f64| {
            let row = t.row(t.cell(x).unwrap());
            let mk = |p: i32| -> f64 {
                row.iter()
                    .enumerate()
                    .map(|(i, v)| ((i as f64 - cap as f64) * dk).powi(p) * v)
                    .sum()
            };
            (mk(1), mk(3))
        };
        // At three points inside and at the edge of the bump (0.5b, 2b, 3.75b; cell centres lie
        // on them), K = 400: 1e-5 (docs/method.md §2.3).
        for x in [0.5 * b, 2.0 * b, 3.75 * b] {
            let xc = t.lo + (t.cell(x).unwrap() as f64 + 0.5) * t.dx;
            assert!((xc - x).abs() < 1e-12);
            let (m1, m3) = moments(x);
            assert!(
                (m1 + du(x) / HBAR).abs() < 1e-5 * s1,
                "x={x}: {m1} vs {}",
                -du(x) / HBAR
            );
            assert!(
                (m3 - d3u(x) / (4.0 * HBAR)).abs() < 1e-5 * s3,
                "x={x}: {m3}"
            );
        }
        // Every mesh point. The cap K truncates the window's spectrum, which falls faster
        // than any power but not exponentially, and the third moment weights it by M³:
        // measured here, K = 200 leaves 6e-5 of the peak in the third moment at 3.75b and
        // K = 400 leaves 1.5e-6, hence K = 400 and a 1e-5 bound everywhere.
        for j in 0..t.points {
            let x = t.lo + (j as f64 + 0.5) * t.dx;
            let (m1, m3) = moments(x);
            assert!(
                (m1 + du(x) / HBAR).abs() < 1e-5 * s1,
                "x={x}: {m1} vs {}",
                -du(x) / HBAR
            );
            assert!(
                (m3 - d3u(x) / (4.0 * HBAR)).abs() < 1e-5 * s3,
                "x={x}: {m3}"
            );
        }
        assert!(t.tail < 1e-8, "tail {}", t.tail);

        // Between mesh points flight uses the linear interpolation of the two neighbouring
        // rows (docs/method.md §2.3): its first moment is the linear interpolation of −U'/ħ,
        // within dx²/8 · max|U'''|/ħ of −U'(x)/ħ (error bound of linear interpolation), plus
        // the 1e-5 table error above. The row of the cell centre alone would be off by up to
        // dx/2 · max|U''|/ħ, several times more here.
        let d2_peak = h / (b * b); // max |U''| of the Gaussian, at x = 0
        let bound = t.dx * t.dx / 8.0 * peak(&d3u) / HBAR + 1e-5 * s1;
        assert!(bound < 0.5 * (0.5 * t.dx * d2_peak / HBAR));
        for j in 0..t.points - 1 {
            for frac in [0.1, 0.37, 0.5, 0.83] {
                let x = t.lo + (j as f64 + 0.5 + frac) * t.dx;
                let rows = t.interpolation(x).unwrap();
                assert_eq!((rows[0].0, rows[1].0), (j, j + 1));
                let xi = rows[0].1 * (t.lo + (j as f64 + 0.5) * t.dx)
                    + rows[1].1 * (t.lo + (j as f64 + 1.5) * t.dx);
                assert!((xi - x).abs() < 1e-9 && (rows[0].1 + rows[1].1 - 1.0).abs() < 1e-12);
                let m1: f64 = rows
                    .iter()
                    .map(|&(r, w)| {
                        w * t
                            .row(r)
                            .iter()
                            .enumerate()
                            .map(|(i, v)| (i as f64 - cap as f64) * dk * v)
                            .sum::<f64>()
                    })
                    .sum();
                assert!(
                    (m1 + du(x) / HBAR).abs() < bound,
                    "x={x}: {m1} vs {}",
                    -du(x) / HBAR
                );
            }
        }
    }

    /// Outer half cells use the edge row alone; outside the table there is no row.
    #[test]
    fn interpolation_at_the_edges() {
        let u = |x: f64| 0.1 * (-x * x).exp();
        let t = KernelTable::build(&u, 0.0, 1.0, 4, 8.0, 1.0, 8.0, 10);
        assert_eq!(t.interpolation(0.2), Some([(0, 1.0), (0, 0.0)]));
        assert_eq!(t.interpolation(3.7), Some([(3, 1.0), (3, 0.0)]));
        assert_eq!(t.interpolation(-0.1), None);
        assert_eq!(t.interpolation(4.0), None);
        let r = t.interpolation(1.75).unwrap();
        assert_eq!((r[0].0, r[1].0), (1, 2));
        assert!((r[1].1 - 0.25).abs() < 1e-12);
    }

    /// The sine series of a row, G(s) = −2ħ Σ_{M≥1} V_w(x, M) sin(2πMs/P), is the windowed
    /// bracket w(s)[U(x + s) − U(x − s)] for |s| < P/2 and repeats with period P. With
    /// P = L_c a coherence of half-length L_c − x sees the bracket at −x (a phantom potential
    /// L_c away); with P = 2 L_c it sees zero, as the windowed continuum kernel does.
    #[test]
    fn a_longer_lattice_period_removes_the_images() {
        let (b, h, x) = (1.0, 0.2, 1.5);
        let u = move |y: f64| h * (-y * y / (2.0 * b * b)).exp();
        let lc = 20.0;
        let series = |t: &KernelTable, s: f64| -> f64 {
            let row = t.row(0);
            -2.0 * HBAR
                * (1..=t.cap)
                    .map(|m| {
                        row[t.cap + m]
                            * (2.0 * std::f64::consts::PI * m as f64 * s / t.period).sin()
                    })
                    .sum::<f64>()
        };
        let bracket = |s: f64| window(s, lc, lc / 8.0) * (u(x + s) - u(x - s));
        // The series converges faster than any power (smooth periodic bracket): 1e-6 of the
        // bracket's peak (about 0.2 eV) at K = 40 per L_c/2 of period, i.e. k range 2π/b.
        let tol = 1e-6;
        for (factor, phantom) in [(1.0, true), (2.0, false)] {
            let period = factor * lc;
            let cap = (4.0 * period) as usize;
            let t = KernelTable::build(&u, x - 0.5, 1.0, 1, lc, lc / 8.0, period, cap);
            for s in [-1.7, 0.6, 2.0, 4.0] {
                assert!(
                    (series(&t, s) - bracket(s)).abs() < tol,
                    "P = {period}, s = {s}"
                );
            }
            // Half-length L_c − x = 18.5 nm: beyond the window (L_c/2 = 10 nm), inside
            // P/2 only for P = 2 L_c; its image at −x is where the bracket peaks.
            let far = lc - x;
            let image = bracket(far - lc);
            assert!(image.abs() > 0.1, "the test needs a visible image: {image}");
            let g = series(&t, far);
            if phantom {
                assert!((g - image).abs() < tol, "P = L_c: {g} vs image {image}");
            } else {
                assert!(g.abs() < tol, "P = 2 L_c: phantom {g}");
            }
        }
    }
}
