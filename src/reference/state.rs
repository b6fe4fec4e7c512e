//! The initial state on the grid: the (anti)symmetrised product of the job's orbitals,
//! normalised numerically (docs/method.md §1).

use super::lines::Shape;
use super::mesh::Axis;
use crate::config::job::{Job, Statistics};
use crate::physics::images::{self, Component};
use anyhow::{Result, bail};
use num_complex::Complex64 as C;
use rayon::prelude::*;

/// Determinant (ε = sign) or permanent (ε = +1) of an N×N matrix, N ≤ 3, or the plain
/// product of the diagonal (distinguishable particles).
fn combine(m: &[[C; 3]; 3], n: usize, stat: Statistics) -> C {
    let s = match stat {
        Statistics::Fermion => -1.0,
        Statistics::Boson => 1.0,
        Statistics::Distinguishable => {
            return (0..n).map(|i| m[i][i]).product();
        }
    };
    match n {
        1 => m[0][0],
        2 => m[0][0] * m[1][1] + m[0][1] * m[1][0] * s,
        _ => {
            // Leibniz sum over the 6 permutations; odd ones get the factor s.
            let even = m[0][0] * m[1][1] * m[2][2]
                + m[0][1] * m[1][2] * m[2][0]
                + m[0][2] * m[1][0] * m[2][1];
            let odd = m[0][0] * m[1][2] * m[2][1]
                + m[0][1] * m[1][0] * m[2][2]
                + m[0][2] * m[1][1] * m[2][0];
            even + odd * s
        }
    }
}

/// ψ(x_1..x_N) = C Σ_σ ε(σ) Π_i φ_σ(i)(x_i) on the grid, with Σ|ψ|² dx^N = 1. Also returns the
/// warnings (orbitals not contained in the grid).
/// `components`: each orbital as a signed sum of Gaussians (itself and, in a reflecting
/// box, its wall images; `physics::numerics::orbital_components`).
pub fn initial_state(
    job: &Job,
    components: &[Vec<Component>],
    axis: &Axis,
    shape: Shape,
) -> Result<(Vec<C>, Vec<String>)> {
    let n_p = job.particles.count;
    // φ_a(x_j) tabulated on the grid.
    let table: Vec<Vec<C>> = components
        .iter()
        .map(|c| (0..axis.n).map(|j| images::psi(c, axis.x(j))).collect())
        .collect();
    let mut warnings = Vec::new();
    for (a, t) in table.iter().enumerate() {
        let inside: f64 = t[axis.inside.clone()]
            .iter()
            .map(|v| v.norm_sqr())
            .sum::<f64>()
            * axis.dx;
        if inside < 0.999 {
            warnings.push(format!(
                "orbital.{a} has only {:.4} of its norm inside the domain",
                inside
            ));
        }
    }
    let stat = job.particles.statistics;
    let mut psi = vec![C::new(0.0, 0.0); shape.len()];
    psi.par_chunks_mut(4096).enumerate().for_each(|(c, chunk)| {
        for (o, v) in chunk.iter_mut().enumerate() {
            let x = shape.coords(c * 4096 + o);
            let mut m = [[C::new(0.0, 0.0); 3]; 3];
            for i in 0..n_p {
                for a in 0..n_p {
                    m[i][a] = table[a][x[i]];
                }
            }
            *v = combine(&m, n_p, stat);
        }
    });
    let norm2 = sum_norm_sqr(&psi) * axis.dx.powi(n_p as i32);
    // For normalised orbitals Σ_σ ε(σ) Π φ has norm² N!·det S (fermions), which lies in
    // [0, N!]; a value this small means linearly dependent orbitals.
    let factorial: f64 = (1..=n_p).map(|i| i as f64).product();
    if stat == Statistics::Fermion && n_p > 1 && norm2 < 1e-10 * factorial {
        bail!(
            "the Slater determinant vanishes: the orbitals are linearly dependent (norm² of the \
             antisymmetrised product = {norm2:.3e}), so no fermion state exists (Pauli principle)"
        );
    }
    if norm2 <= 0.0 || !norm2.is_finite() {
        bail!("the initial state has no norm on the reference grid (norm² = {norm2})");
    }
    let scale = 1.0 / norm2.sqrt();
    psi.par_iter_mut().for_each(|v| *v *= scale);
    Ok((psi, warnings))
}

/// Σ|ψ|² in a fixed order of fixed chunks (independent of the thread count).
pub fn sum_norm_sqr(psi: &[C]) -> f64 {
    psi.par_chunks(4096)
        .map(|c| c.iter().map(|v| v.norm_sqr()).sum::<f64>())
        .collect::<Vec<f64>>()
        .iter()
        .sum()
}
