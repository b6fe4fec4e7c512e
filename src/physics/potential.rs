//! The potential V(x_1..x_N) = Σ_i [U(x_i) + U_f(x_i)] + Σ_{i<j} U₂(x_i − x_j).
//!
//! U is the sum of the job's barrier, Gaussian and table terms: it goes through the Wigner
//! kernel. U_f = slope·x + m ω² (x − c)²/2 is at most quadratic and so acts exactly as a
//! classical force in the drift (docs/method.md §2). U₂ is the pair interaction. Units: nm, eV.

use crate::config::job::{Pair, PotentialTerm};
use crate::physics::units;
use anyhow::{Context, Result, bail};
use std::path::Path;

/// A resolved kernel term of the one-body potential.
#[derive(Clone, Debug, PartialEq)]
enum Term {
    /// h·[L((x − a)/λ) − L((x − b)/λ)], L the logistic function.
    Barrier {
        a: f64,
        b: f64,
        h: f64,
        lambda: f64,
    },
    Gaussian {
        c: f64,
        w: f64,
        h: f64,
    },
    /// Piecewise-linear through (x, U) points, constant beyond the ends.
    Table {
        x: Vec<f64>,
        u: Vec<f64>,
    },
}

impl Term {
    fn value(&self, x: f64) -> f64 {
        match self {
            Term::Barrier { a, b, h, lambda } => {
                h * (logistic((x - a) / lambda) - logistic((x - b) / lambda))
            }
            Term::Gaussian { c, w, h } => h * (-(x - c) * (x - c) / (2.0 * w * w)).exp(),
            Term::Table { x: xs, u } => {
                let n = xs.len();
                if x <= xs[0] {
                    return u[0];
                }
                if x >= xs[n - 1] {
                    return u[n - 1];
                }
                let j = xs.partition_point(|&v| v <= x) - 1;
                let t = (x - xs[j]) / (xs[j + 1] - xs[j]);
                u[j] + t * (u[j + 1] - u[j])
            }
        }
    }
}

fn logistic(t: f64) -> f64 {
    1.0 / (1.0 + (-t).exp())
}

/// The classical-force part U_f(x) = slope·x + κ (x − c)²/2 with κ = m ω².
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Force {
    /// eV/nm
    pub slope: f64,
    /// κ = m ω², eV/nm²
    pub stiffness: f64,
    /// nm
    pub centre: f64,
}

impl Force {
    pub fn is_zero(&self) -> bool {
        self.slope == 0.0 && self.stiffness == 0.0
    }
    /// U_f(x), eV.
    pub fn value(&self, x: f64) -> f64 {
        self.slope * x + 0.5 * self.stiffness * (x - self.centre) * (x - self.centre)
    }
    /// dU_f/dx, eV/nm.
    pub fn gradient(&self, x: f64) -> f64 {
        self.slope + self.stiffness * (x - self.centre)
    }

    /// Exact classical flight for time t (fs) under U_f: dx/dt = ħk/m, dk/dt = −U_f'(x)/ħ.
    /// Harmonic: rotation about x_eq = c − slope/κ at ω = sqrt(κ/m); otherwise uniform
    /// acceleration. Returns (x, k) after t.
    #[inline]
    pub fn fly(&self, x: f64, k: f64, t: f64, mass: f64) -> (f64, f64) {
        let hbar = units::HBAR;
        if self.stiffness > 0.0 {
            let omega = (self.stiffness / mass).sqrt();
            let x_eq = self.centre - self.slope / self.stiffness;
            let (s, c) = (omega * t).sin_cos();
            let u = x - x_eq;
            let v = hbar * k / mass;
            let u1 = u * c + v / omega * s;
            let v1 = v * c - u * omega * s;
            (x_eq + u1, v1 * mass / hbar)
        } else {
            let a = -self.slope / mass; // nm/fs²
            let v = hbar * k / mass;
            (x + v * t + 0.5 * a * t * t, k - self.slope * t / hbar)
        }
    }
}

/// The one-body potential: kernel terms (summed into one table later) plus a force.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct OneBody {
    terms: Vec<Term>,
    pub force: Force,
}

impl OneBody {
    /// Resolve the job's terms. `mesh_dx` sets the default edge smoothing (two mesh
    /// cells); table files are read relative to `base_dir`; `mass` in eV·fs²/nm².
    pub fn from_job(
        terms: &[PotentialTerm],
        mesh_dx: f64,
        mass: f64,
        base_dir: &Path,
    ) -> Result<Self> {
        let mut out = OneBody::default();
        for (i, t) in terms.iter().enumerate() {
            match t {
                PotentialTerm::Barrier {
                    from,
                    to,
                    height,
                    smoothing,
                } => {
                    // `smoothing` is the length over which an edge rises from 12 % to 88 %
                    // (four logistic scale lengths).
                    let s = smoothing.unwrap_or(2.0 * mesh_dx);
                    out.terms.push(Term::Barrier {
                        a: *from,
                        b: *to,
                        h: *height,
                        lambda: s / 4.0,
                    });
                }
                PotentialTerm::Gaussian {
                    centre,
                    width,
                    height,
                } => out.terms.push(Term::Gaussian {
                    c: *centre,
                    w: *width,
                    h: *height,
                }),
                PotentialTerm::Table { file } => {
                    let path = base_dir.join(file);
                    let (x, u) =
                        read_table(&path).with_context(|| format!("potential.{i}.file"))?;
                    out.terms.push(Term::Table { x, u });
                }
                PotentialTerm::Field { slope } => out.force.slope += slope,
                PotentialTerm::Harmonic { centre, hbar_omega } => {
                    let omega = hbar_omega / units::HBAR;
                    let kappa = mass * omega * omega;
                    if out.force.stiffness > 0.0 {
                        // Sum of two traps is one trap: combine centres by stiffness.
                        let k0 = out.force.stiffness;
                        out.force.centre = (k0 * out.force.centre + kappa * centre) / (k0 + kappa);
                    } else {
                        out.force.centre = *centre;
                    }
                    out.force.stiffness += kappa;
                }
            }
        }
        Ok(out)
    }

    /// True when there is a kernel part (anything not at most quadratic).
    pub fn has_kernel(&self) -> bool {
        !self.terms.is_empty()
    }

    /// U(x): the kernel part only, eV.
    pub fn kernel_part(&self, x: f64) -> f64 {
        self.terms.iter().map(|t| t.value(x)).sum()
    }

    /// U(x) + U_f(x): the whole one-body potential, eV.
    pub fn total(&self, x: f64) -> f64 {
        self.kernel_part(x) + self.force.value(x)
    }
}

fn read_table(path: &Path) -> Result<(Vec<f64>, Vec<f64>)> {
    let text =
        std::fs::read_to_string(path).with_context(|| format!("cannot read {}", path.display()))?;
    let (mut xs, mut us) = (Vec::new(), Vec::new());
    for (ln, line) in text.lines().enumerate() {
        let line = line.split('#').next().unwrap_or("").trim();
        if line.is_empty() {
            continue;
        }
        let cols: Vec<&str> = line
            .split(|c: char| c.is_whitespace() || c == ',')
            .filter(|s| !s.is_empty())
            .collect();
        if cols.len() != 2 {
            bail!(
                "{}:{}: expected two columns (x in nm, U in eV), found {}",
                path.display(),
                ln + 1,
                cols.len()
            );
        }
        let parse = |s: &str| -> Result<f64> {
            let v: f64 = s.parse().map_err(|_| {
                anyhow::anyhow!("{}:{}: `{s}` is not a number", path.display(), ln + 1)
            })?;
            if !v.is_finite() {
                bail!("{}:{}: `{s}` is not finite", path.display(), ln + 1);
            }
            Ok(v)
        };
        let (x, u) = (parse(cols[0])?, parse(cols[1])?);
        if let Some(&last) = xs.last()
            && x <= last
        {
            bail!(
                "{}:{}: x must increase ({x} after {last})",
                path.display(),
                ln + 1
            );
        }
        xs.push(x);
        us.push(u);
    }
    if xs.len() < 2 {
        bail!(
            "{}: a potential table needs at least two points",
            path.display()
        );
    }
    Ok((xs, us))
}

/// Pair interaction U₂(r).
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum PairPotential {
    /// e²/(4πε₀ ε_r sqrt(r² + a²)), eV.
    SoftCoulomb { strength: f64, softening: f64 },
}

impl PairPotential {
    pub fn from_job(p: &Pair) -> Option<Self> {
        match *p {
            Pair::None => None,
            Pair::SoftCoulomb {
                permittivity,
                softening,
            } => Some(PairPotential::SoftCoulomb {
                strength: units::COULOMB / permittivity,
                softening,
            }),
        }
    }
    /// U₂(r), eV.
    pub fn value(&self, r: f64) -> f64 {
        match *self {
            PairPotential::SoftCoulomb {
                strength,
                softening,
            } => strength / (r * r + softening * softening).sqrt(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn harmonic_flight_is_a_rotation() {
        // Classical harmonic oscillator (textbook): x(t) = x0 cos ωt + v0/ω sin ωt.
        let m = units::mass_from_electron_masses(0.067);
        let f = Force {
            slope: 0.0,
            stiffness: m * 0.02f64.powi(2),
            centre: 0.0,
        };
        let (x, k) = f.fly(3.0, 0.5, 40.0, m);
        let w = 0.02f64;
        let v0 = units::HBAR * 0.5 / m;
        let xe = 3.0 * (w * 40.0).cos() + v0 / w * (w * 40.0).sin();
        assert!((x - xe).abs() < 1e-12);
        // energy is conserved by the exact flight
        let e = |x: f64, k: f64| units::kinetic_energy(k, m) + f.value(x);
        assert!((e(x, k) - e(3.0, 0.5)).abs() < 1e-12);
    }

    #[test]
    fn uniform_field_accelerates() {
        let m = units::ELECTRON_MASS;
        let f = Force {
            slope: 0.01,
            stiffness: 0.0,
            centre: 0.0,
        };
        let (_, k) = f.fly(0.0, 0.0, 10.0, m);
        assert!((k + 0.01 * 10.0 / units::HBAR).abs() < 1e-14);
    }

    #[test]
    fn barrier_reaches_its_height() {
        let p = OneBody::from_job(
            &[PotentialTerm::Barrier {
                from: -1.0,
                to: 1.0,
                height: 0.3,
                smoothing: Some(0.2),
            }],
            0.5,
            1.0,
            Path::new("."),
        )
        .unwrap();
        assert!((p.total(0.0) - 0.3).abs() < 1e-6);
        assert!(p.total(5.0).abs() < 1e-6);
    }
}
