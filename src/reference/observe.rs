//! Observables from the grid state ψ: reduced density matrices, densities, the reduced
//! one-body Wigner function, momentum density, current, energy and edge fluxes.
//!
//! "Inside" means all coordinates inside the job's domain (docs/method.md §5): every
//! observable here is computed from ψ_in, ψ with configurations that have any particle
//! outside set to zero. For periodic and hard-wall grids ψ_in = ψ.

use super::lines::Shape;
use super::mesh::{Axis, AxisKind};
use num_complex::Complex64 as C;
use rayon::prelude::*;
use rustfft::FftPlanner;

/// Which axes to evaluate one-body quantities on, and with which factor: identical
/// particles give the same marginal on every axis (ψ is exactly (anti)symmetric on the
/// grid), so axis 0 times N; distinguishable particles sum over all axes.
pub fn axes_and_factor(dims: usize, identical: bool) -> (Vec<usize>, f64) {
    if identical {
        (vec![0], dims as f64)
    } else {
        ((0..dims).collect(), 1.0)
    }
}

/// Is every coordinate of linear index `idx`, except `skip`, inside the domain?
#[inline]
pub fn inside_except(shape: Shape, axis: &Axis, idx: usize, skip: Option<usize>) -> bool {
    let c = shape.coords(idx);
    (0..shape.dims).all(|a| Some(a) == skip || axis.inside.contains(&c[a]))
}

/// ψ_in: zero outside (absorbing grids); a copy of ψ otherwise.
pub fn restrict_inside(psi: &[C], shape: Shape, axis: &Axis) -> Vec<C> {
    let mut out = psi.to_vec();
    if axis.kind == AxisKind::Padded {
        out.par_chunks_mut(4096).enumerate().for_each(|(c, ch)| {
            for (o, v) in ch.iter_mut().enumerate() {
                if !inside_except(shape, axis, c * 4096 + o, None) {
                    *v = C::new(0.0, 0.0);
                }
            }
        });
    }
    out
}

/// Σ over linear indices of f(idx), in fixed chunks summed in order (deterministic).
pub fn ordered_sum<F: Fn(usize) -> f64 + Sync>(len: usize, f: F) -> f64 {
    const CH: usize = 8192;
    (0..len.div_ceil(CH))
        .into_par_iter()
        .map(|c| (c * CH..((c + 1) * CH).min(len)).map(&f).sum::<f64>())
        .collect::<Vec<f64>>()
        .iter()
        .sum()
}

/// Marginal along `axis`: out[a] = Σ_{idx with coordinate a on axis} f(idx).
pub fn marginal1<F: Fn(usize) -> f64 + Sync>(shape: Shape, axis: usize, f: F) -> Vec<f64> {
    let n = shape.n;
    let chunk = shape.len() / n;
    let parts: Vec<Vec<f64>> = (0..n)
        .into_par_iter()
        .map(|c| {
            let mut acc = vec![0.0; n];
            for idx in c * chunk..(c + 1) * chunk {
                acc[shape.coords(idx)[axis]] += f(idx);
            }
            acc
        })
        .collect();
    let mut out = vec![0.0; n];
    for p in parts {
        for (o, v) in out.iter_mut().zip(p) {
            *o += v;
        }
    }
    out
}

/// Two-coordinate marginal of |ψ_in|²·dx^(N−2) over axes (i, j), row-major n×n.
fn marginal2(prob: &[f64], shape: Shape, i: usize, j: usize, w: f64) -> Vec<f64> {
    let n = shape.n;
    if shape.dims == 2 {
        let mut out = vec![0.0; n * n];
        for a in 0..n {
            for b in 0..n {
                let v = prob[a * n + b] * w;
                if i == 0 {
                    out[a * n + b] = v;
                } else {
                    out[b * n + a] = v;
                }
            }
        }
        return out;
    }
    let chunk = shape.len() / n;
    let parts: Vec<Vec<f64>> = (0..n)
        .into_par_iter()
        .map(|c| {
            let mut acc = vec![0.0; n * n];
            for (o, p) in prob[c * chunk..(c + 1) * chunk].iter().enumerate() {
                let x = shape.coords(c * chunk + o);
                acc[x[i] * n + x[j]] += p;
            }
            acc
        })
        .collect();
    let mut out = vec![0.0; n * n];
    for p in parts {
        for (o, v) in out.iter_mut().zip(p) {
            *o += v * w;
        }
    }
    out
}

/// Pair density n₂(x_a, x_b) = Σ_{i≠j} P_ij on the grid (1/nm²), row-major n×n.
pub fn pair_density(psi_in: &[C], shape: Shape, dx: f64, identical: bool) -> Vec<f64> {
    let n = shape.n;
    let prob: Vec<f64> = psi_in.par_iter().map(|v| v.norm_sqr()).collect();
    let w = dx.powi(shape.dims as i32 - 2);
    let np = shape.dims as f64;
    if identical {
        let mut p = marginal2(&prob, shape, 0, 1, w);
        p.iter_mut().for_each(|v| *v *= np * (np - 1.0));
        return p;
    }
    let mut out = vec![0.0; n * n];
    for i in 0..shape.dims {
        for j in i + 1..shape.dims {
            let p = marginal2(&prob, shape, i, j, w);
            for a in 0..n {
                for b in 0..n {
                    out[a * n + b] += p[a * n + b] + p[b * n + a];
                }
            }
        }
    }
    out
}

/// The one-body reduced density matrix ρ(x_a, x_b) = Σ_i ∫ ψ_in(..x_a..) ψ_in*(..x_b..)
/// over the other coordinates (1/nm): rank one for N = 1, a matrix otherwise.
pub enum Rdm {
    Rank1(Vec<C>),
    Matrix { n: usize, m: Vec<C> },
}

impl Rdm {
    #[inline]
    pub fn get(&self, a: usize, b: usize) -> C {
        match self {
            Rdm::Rank1(p) => p[a] * p[b].conj(),
            Rdm::Matrix { n, m } => m[a * n + b],
        }
    }
    pub fn diag(&self, n: usize) -> Vec<f64> {
        (0..n).map(|a| self.get(a, a).re).collect()
    }
}

pub fn rdm(psi_in: &[C], shape: Shape, axis: &Axis, identical: bool) -> Rdm {
    let n = shape.n;
    if shape.dims == 1 {
        return Rdm::Rank1(psi_in.to_vec());
    }
    let (axes, factor) = axes_and_factor(shape.dims, identical);
    let rest = shape.len() / n;
    let w = factor * axis.dx.powi(shape.dims as i32 - 1);
    let mut m = vec![C::new(0.0, 0.0); n * n];
    let range = axis.inside.clone();
    for &ax in &axes {
        // Rows A[a][r] = ψ with coordinate `ax` equal to a.
        let front: Vec<C> = if ax == 0 {
            psi_in.to_vec()
        } else {
            let mut f = vec![C::new(0.0, 0.0); shape.len()];
            f.par_chunks_mut(rest).enumerate().for_each(|(a, row)| {
                for (r, v) in row.iter_mut().enumerate() {
                    *v = psi_in[shape.line_index(ax, r, a)];
                }
            });
            f
        };
        let rows: Vec<Vec<C>> = range
            .clone()
            .into_par_iter()
            .map(|a| {
                let ra = &front[a * rest..(a + 1) * rest];
                (a..range.end)
                    .map(|b| {
                        let rb = &front[b * rest..(b + 1) * rest];
                        ra.iter().zip(rb).map(|(x, y)| x * y.conj()).sum::<C>() * w
                    })
                    .collect()
            })
            .collect();
        for (a, row) in range.clone().zip(rows) {
            for (b, v) in (a..range.end).zip(row) {
                m[a * n + b] += v;
                if b != a {
                    m[b * n + a] += v.conj();
                }
            }
        }
    }
    Rdm::Matrix { n, m }
}

/// Sample positions (nm) for binning grid-point values, each with its grid index (None: a
/// hard wall, value 0). Hard-wall grids get the two walls as extra samples; absorbing grids
/// keep only the points inside.
pub fn point_samples(axis: &Axis) -> (Vec<f64>, Vec<Option<usize>>) {
    let idx: Vec<Option<usize>> = match axis.kind {
        AxisKind::Periodic => (0..axis.n).map(Some).collect(),
        AxisKind::Padded => axis.inside.clone().map(Some).collect(),
        AxisKind::Dirichlet => std::iter::once(None)
            .chain((0..axis.n).map(Some))
            .chain(std::iter::once(None))
            .collect(),
    };
    let pos = idx
        .iter()
        .enumerate()
        .map(|(s, i)| match i {
            Some(j) => axis.x(*j),
            None if s == 0 => axis.x_min,
            None => axis.x_max,
        })
        .collect();
    (pos, idx)
}

/// Positions of the Wigner samples, in half-grid units h: x(h) = x0 + h·dx/2, covering the
/// domain from edge to edge, every `stride` half-steps (the last edge always included).
pub fn wigner_half_points(axis: &Axis, stride: usize) -> Vec<i64> {
    let n = axis.n as i64;
    let (lo, hi) = match axis.kind {
        AxisKind::Periodic => (-1, 2 * n - 1),
        AxisKind::Dirichlet => (-2, 2 * n),
        AxisKind::Padded => {
            let (p, e) = (axis.inside.start as i64, axis.inside.end as i64);
            (2 * p - 1, 2 * e - 1)
        }
    };
    let mut h: Vec<i64> = (lo..=hi).step_by(stride.max(1)).collect();
    if *h.last().expect("non-empty range") != hi {
        h.push(hi);
    }
    h
}

/// The reduced one-body Wigner function f₁(x(h), k) = (1/2π) ∫ dy e^{−iky} ρ(x + y/2, x − y/2)
/// at the half-grid points `hs`. y runs over (2r·j + par)·dx with par ≡ h (mod 2), so
/// x ± y/2 stay on grid points and dy = 2r·dx: the k range is ±π/(2r·dx), and r > 1 only
/// decimates a grid finer than the state's content needs. The result is sampled on the fine
/// grid k_m = m·π/(r·dx·M), m = −M/2..M/2 (ascending; folding j modulo M samples the
/// continuous-k transform exactly), and each row is passed to `reduce` (e.g. a bin average
/// over k) before it is kept.
pub fn wigner_rows<R>(
    rho: &Rdm,
    axis: &Axis,
    hs: &[i64],
    r: usize,
    m_fft: usize,
    reduce: R,
) -> Vec<Vec<f64>>
where
    R: Fn(&[f64]) -> Vec<f64> + Sync,
{
    let n = axis.n as i64;
    let r = r.max(1) as i64;
    let periodic = axis.kind == AxisKind::Periodic;
    let fft = FftPlanner::new().plan_fft_forward(m_fft);
    let dx = axis.dx;
    hs.par_iter()
        .map_init(
            || {
                (
                    vec![C::new(0.0, 0.0); m_fft],
                    vec![C::new(0.0, 0.0); fft.get_inplace_scratch_len()],
                    vec![0.0; m_fft],
                )
            },
            |(buf, scr, row), &h| {
                buf.iter_mut().for_each(|v| *v = C::new(0.0, 0.0));
                let par = h.rem_euclid(2);
                let (c1, c2) = ((h + par) / 2, (h - par) / 2);
                // i1 = c1 + r·t, i2 = c2 − r·t, both on the grid (or wrapped on a ring).
                let (jlo, jhi) = if periodic {
                    (-(n / 2), n - n / 2 - 1)
                } else {
                    ((-c1).max(c2 - n + 1), (n - 1 - c1).min(c2))
                };
                let (tlo, thi) = ((jlo + r - 1).div_euclid(r), jhi.div_euclid(r));
                let mm = m_fft as i64;
                for t in tlo..=thi {
                    let j = r * t;
                    let (i1, i2) = ((c1 + j).rem_euclid(n), (c2 - j).rem_euclid(n));
                    buf[t.rem_euclid(mm) as usize] += rho.get(i1 as usize, i2 as usize);
                }
                fft.process_with_scratch(buf, scr);
                let rdx = r as f64 * dx;
                for (out_i, v) in row.iter_mut().enumerate() {
                    let m = out_i as i64 - mm / 2;
                    let k = m as f64 * std::f64::consts::PI / (rdx * m_fft as f64);
                    let phase = C::from_polar(1.0, -k * par as f64 * dx);
                    *v = (phase * buf[m.rem_euclid(mm) as usize]).re * rdx / std::f64::consts::PI;
                }
                reduce(row)
            },
        )
        .collect()
}

/// Momentum density n(k_m) = (dx²/2π) Σ_{a,b} ρ_ab e^{−ik(x_a − x_b)} on k_m = 2πm/(M·dx),
/// m = −M/2..M/2 (ascending), 1/(1/nm) = nm.
pub fn momentum_density(rho: &Rdm, n: usize, dx: f64, m_fft: usize) -> Vec<f64> {
    let mut buf = vec![C::new(0.0, 0.0); m_fft];
    let mm = m_fft as i64;
    let pre = dx * dx / (2.0 * std::f64::consts::PI);
    let fft = FftPlanner::new().plan_fft_forward(m_fft);
    let spectrum: Vec<f64> = match rho {
        Rdm::Rank1(p) => {
            for (j, v) in p.iter().enumerate() {
                buf[(j as i64).rem_euclid(mm) as usize] += v;
            }
            fft.process(&mut buf);
            buf.iter().map(|v| v.norm_sqr() * pre).collect()
        }
        Rdm::Matrix { .. } => {
            // Autocorrelation along diagonals: c_d = Σ_a ρ(a + d, a).
            let diags: Vec<C> = (-(n as i64 - 1)..n as i64)
                .into_par_iter()
                .map(|d| {
                    let a0 = (-d).max(0);
                    let a1 = (n as i64 - d).min(n as i64);
                    (a0..a1)
                        .map(|a| rho.get((a + d) as usize, a as usize))
                        .sum()
                })
                .collect();
            for (i, c) in diags.iter().enumerate() {
                let d = i as i64 - (n as i64 - 1);
                buf[d.rem_euclid(mm) as usize] += c;
            }
            fft.process(&mut buf);
            buf.iter().map(|v| v.re * pre).collect()
        }
    };
    (0..m_fft)
        .map(|o| spectrum[(o as i64 - mm / 2).rem_euclid(mm) as usize])
        .collect()
}

/// Norm of the configurations outside the domain (some coordinate outside), attributed to
/// the sides by the share of outside coordinates on each: (left, right). Absorbing grids.
pub fn outside_norm(psi: &[C], shape: Shape, axis: &Axis) -> (f64, f64) {
    let (p, e) = (axis.inside.start, axis.inside.end);
    let share = |i: usize| -> (f64, f64) {
        let c = shape.coords(i);
        let l = (0..shape.dims).filter(|&a| c[a] < p).count();
        let r = (0..shape.dims).filter(|&a| c[a] >= e).count();
        if l + r == 0 {
            (0.0, 0.0)
        } else {
            let w = psi[i].norm_sqr() / (l + r) as f64;
            (w * l as f64, w * r as f64)
        }
    };
    let vol = axis.dx.powi(shape.dims as i32);
    let left = ordered_sum(shape.len(), |i| share(i).0) * vol;
    let right = ordered_sum(shape.len(), |i| share(i).1) * vol;
    (left, right)
}
