//! The one-dimensional grid every particle coordinate lives on, chosen from the job.
//!
//! - `periodic`: a periodic FFT grid on exactly the domain, points at cell centres.
//! - `reflecting`: hard walls at the domain edges, ψ = 0 there. The interior points
//!   x_j = x_min + (j + 1)·dx, j = 0..m, with dx = L/(m + 1), carry a sine series; the
//!   kinetic step uses the odd extension of each line (a sine transform done with an FFT
//!   of length 2(m + 1)), so the wall is exact, not a high potential.
//! - `absorbing`: a periodic FFT grid over the domain plus a padding on each side that holds
//!   a complex absorbing potential −iW(x), W = W₀ s² (s the fractional depth into the
//!   padding). Cell edges fall on the domain edges, so "inside" is a whole number of cells.

use crate::config::job::{Boundary, Job, PotentialTerm};
use crate::physics::orbitals::Gaussian;
use crate::physics::units;
use anyhow::{Result, bail};
use std::ops::Range;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum AxisKind {
    Periodic,
    Dirichlet,
    Padded,
}

/// The grid of one coordinate (the same for every particle).
#[derive(Clone, Debug)]
pub struct Axis {
    pub kind: AxisKind,
    /// Number of grid points.
    pub n: usize,
    /// Spacing, nm.
    pub dx: f64,
    /// Position of point 0, nm.
    pub x0: f64,
    /// Indices of the points inside the job's domain.
    pub inside: Range<usize>,
    /// Padding points on each side (absorbing only).
    pub pad: usize,
    /// Peak of the absorbing potential W₀, eV (absorbing only).
    pub cap_height: f64,
    /// Domain edges, nm.
    pub x_min: f64,
    pub x_max: f64,
}

impl Axis {
    #[inline]
    pub fn x(&self, j: usize) -> f64 {
        self.x0 + j as f64 * self.dx
    }

    /// The absorbing potential W(x_j) ≥ 0 at point j, eV (0 inside the domain).
    pub fn cap(&self, j: usize) -> f64 {
        if self.kind != AxisKind::Padded {
            return 0.0;
        }
        let width = self.pad as f64 * self.dx;
        let x = self.x(j);
        let depth = if x < self.x_min {
            self.x_min - x
        } else if x > self.x_max {
            x - self.x_max
        } else {
            return 0.0;
        };
        let s = (depth / width).min(1.0);
        self.cap_height * s * s
    }

    /// Largest wavevector the grid represents, 1/nm.
    pub fn nyquist(&self) -> f64 {
        std::f64::consts::PI / self.dx
    }
}

/// The smallest 2^a 3^b 5^c that is ≥ n (FFT-friendly lengths).
pub fn smooth_at_least(n: usize) -> usize {
    let mut m = n.max(1);
    loop {
        let mut r = m;
        for p in [2, 3, 5] {
            while r.is_multiple_of(p) {
                r /= p;
            }
        }
        if r == 1 {
            return m;
        }
        m += 1;
    }
}

/// Wavevector (1/nm) up to which the state has content, from the job: the job's k_max or
/// the orbitals' mean wavevector plus six momentum widths (|φ̃|² has standard deviation
/// 1/(2σ)), whichever is larger.
pub fn content_wavevector(job: &Job) -> f64 {
    job.orbitals
        .iter()
        .map(|o| {
            let g = Gaussian::from(o);
            g.k0.abs() + 6.0 / (2.0 * g.sigma)
        })
        .fold(job.domain.k_max, f64::max)
}

/// Default points-per-axis ceiling from the bin resolution, per particle count (the
/// k-resolution requirement is never capped).
fn cap_for(n_particles: usize) -> usize {
    match n_particles {
        1 => 1 << 16,
        2 => 1024,
        _ => 128,
    }
}

/// Choose the axis. `points` overrides the number of grid points (total, padding included).
pub fn choose_axis(job: &Job, points: Option<usize>) -> Result<Axis> {
    let d = &job.domain;
    let len = d.x_max - d.x_min;
    let k_need = content_wavevector(job);
    // dx ≤ π/(2 k): the Wigner transform samples y at 2dx, so its k range is ±π/(2dx).
    let dx_k = std::f64::consts::PI / (2.0 * k_need);
    let bin_w = len / job.output.x_bins as f64;
    let per_bin = match job.particles.count {
        1 => 8.0,
        2 => 4.0,
        _ => 2.0,
    };
    // Resolve the potential's features: two points per barrier edge (its 12–88 % rise
    // length, default two mesh cells) and four per Gaussian width.
    let mesh_dx = len / d.mesh_cells as f64;
    let feature = job
        .potentials
        .iter()
        .filter_map(|p| match p {
            PotentialTerm::Barrier { smoothing, .. } => {
                Some(smoothing.unwrap_or(2.0 * mesh_dx) / 2.0)
            }
            PotentialTerm::Gaussian { width, .. } => Some(width / 4.0),
            _ => None,
        })
        .fold(f64::INFINITY, f64::min);
    let dx_bin = (bin_w / per_bin).min(feature);
    let q_k = (len / dx_k).ceil() as usize;
    let q_bin = (len / dx_bin).ceil() as usize;
    let q_default = q_k.max(q_bin.min(cap_for(job.particles.count)));

    let mass = units::mass_from_electron_masses(job.particles.mass);
    let axis = match d.boundary {
        Boundary::Periodic => {
            let n = points.unwrap_or_else(|| smooth_at_least(q_default));
            let dx = len / n as f64;
            Axis {
                kind: AxisKind::Periodic,
                n,
                dx,
                x0: d.x_min + 0.5 * dx,
                inside: 0..n,
                pad: 0,
                cap_height: 0.0,
                x_min: d.x_min,
                x_max: d.x_max,
            }
        }
        Boundary::Reflecting => {
            let m = points.unwrap_or_else(|| smooth_at_least(q_default + 1) - 1);
            let dx = len / (m + 1) as f64;
            Axis {
                kind: AxisKind::Dirichlet,
                n: m,
                dx,
                x0: d.x_min + dx,
                inside: 0..m,
                pad: 0,
                cap_height: 0.0,
                x_min: d.x_min,
                x_max: d.x_max,
            }
        }
        Boundary::Absorbing => {
            // The absorber must be several wavelengths deep for the slowest relevant motion:
            // take the fastest orbital (or k_max/4) as the reference wavevector.
            let k_ref = job
                .orbitals
                .iter()
                .map(|o| Gaussian::from(o).k0.abs())
                .fold(d.k_max / 4.0, f64::max);
            let pad_len = (3.0 * 2.0 * std::f64::consts::PI / k_ref).clamp(0.2 * len, 0.5 * len);
            let (q, pad) = match points {
                None => {
                    let q = q_default;
                    let p = ((pad_len / (len / q as f64)).ceil() as usize).max(8);
                    let mut n = smooth_at_least(q + 2 * p);
                    while !(n - q).is_multiple_of(2) {
                        n = smooth_at_least(n + 1);
                    }
                    (q, (n - q) / 2)
                }
                Some(n) => {
                    let mut q = ((n as f64) * len / (len + 2.0 * pad_len)).round() as usize;
                    if !(n - q.min(n)).is_multiple_of(2) {
                        q -= 1;
                    }
                    if q < 4 || n < q + 16 {
                        bail!(
                            "{n} grid points are too few for an absorbing grid (the padding \
                             needs at least 8 points on each side)"
                        );
                    }
                    (q, (n - q) / 2)
                }
            };
            let dx = len / q as f64;
            let width = pad as f64 * dx;
            // Round-trip attenuation of the amplitude at the reference speed v:
            // exp(−2∫W dx/(ħv)) = exp(−2 W₀ width/(3ħv)); W₀ = 15 ħv/width gives e^{-10}.
            let v = units::velocity(k_ref, mass);
            let cap_height = 15.0 * units::HBAR * v / width;
            Axis {
                kind: AxisKind::Padded,
                n: q + 2 * pad,
                dx,
                x0: d.x_min - pad as f64 * dx + 0.5 * dx,
                inside: pad..pad + q,
                pad,
                cap_height,
                x_min: d.x_min,
                x_max: d.x_max,
            }
        }
    };
    if axis.n < 4 {
        bail!(
            "the reference grid needs at least 4 points per axis (got {})",
            axis.n
        );
    }
    // The output k bins must lie inside the Wigner transform's range ±π/(2dx).
    let k_range = std::f64::consts::PI / (2.0 * axis.dx);
    if k_range < d.k_max * (1.0 - 1e-12) {
        bail!(
            "a grid of {} points per axis (dx = {:.4} nm) resolves wavevectors up to π/(2dx) = \
             {:.4}/nm only, below domain.k_max = {}/nm: use more points",
            axis.n,
            axis.dx,
            k_range,
            d.k_max
        );
    }
    Ok(axis)
}
