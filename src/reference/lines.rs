//! Diagonal operators in wavevector space applied along one axis of an N-dimensional
//! array, with per-axis one-dimensional FFTs (`rustfft`), parallel over lines (rayon).
//!
//! A periodic line of n points is transformed with an FFT of length n. A hard-wall line of
//! m interior points is extended oddly, [0, a_1..a_m, 0, −a_m..−a_1], and transformed with
//! an FFT of length 2(m + 1): a multiplier even in k keeps the extension odd, so this is
//! the exact sine-series (Dirichlet) operator.

use super::mesh::{Axis, AxisKind};
use num_complex::Complex64 as C;
use rayon::prelude::*;
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;

pub struct LineOp {
    n: usize,
    dirichlet: bool,
    len: usize,
    fwd: Arc<dyn Fft<f64>>,
    inv: Arc<dyn Fft<f64>>,
    /// Wavevector of each FFT bin, 1/nm (Nyquist bin, if any, at +π/dx).
    pub k: Vec<f64>,
}

impl LineOp {
    pub fn new(axis: &Axis) -> Self {
        let dirichlet = axis.kind == AxisKind::Dirichlet;
        let len = if dirichlet { 2 * (axis.n + 1) } else { axis.n };
        let mut planner = FftPlanner::new();
        let fwd = planner.plan_fft_forward(len);
        let inv = planner.plan_fft_inverse(len);
        let dk = 2.0 * std::f64::consts::PI / (len as f64 * axis.dx);
        let k = (0..len)
            .map(|m| {
                let s = if m <= len / 2 {
                    m as f64
                } else {
                    m as f64 - len as f64
                };
                s * dk
            })
            .collect();
        LineOp {
            n: axis.n,
            dirichlet,
            len,
            fwd,
            inv,
            k,
        }
    }

    /// Scratch needed by [`LineOp::apply`] and [`LineOp::k2_sum`].
    pub fn scratch_len(&self) -> usize {
        self.len
            + self
                .fwd
                .get_inplace_scratch_len()
                .max(self.inv.get_inplace_scratch_len())
    }

    /// Multiplier exp(−iħk²Δt/(2m)) (normalisation of the inverse FFT included).
    pub fn kinetic_multiplier(&self, dt: f64, mass: f64) -> Vec<C> {
        let hbar = crate::physics::units::HBAR;
        let norm = 1.0 / self.len as f64;
        self.k
            .iter()
            .map(|&k| C::from_polar(norm, -hbar * k * k * dt / (2.0 * mass)))
            .collect()
    }

    /// Multiplier ik: d/dx (the Nyquist bin of an even length, whose sign is ambiguous,
    /// is set to zero).
    pub fn derivative_multiplier(&self) -> Vec<C> {
        let norm = 1.0 / self.len as f64;
        self.k
            .iter()
            .enumerate()
            .map(|(m, &k)| {
                if self.len.is_multiple_of(2) && m == self.len / 2 {
                    C::new(0.0, 0.0)
                } else {
                    C::new(0.0, k * norm)
                }
            })
            .collect()
    }

    fn load(&self, line: &[C], buf: &mut [C]) {
        let n = self.n;
        if self.dirichlet {
            buf[0] = C::new(0.0, 0.0);
            buf[1..=n].copy_from_slice(line);
            buf[n + 1] = C::new(0.0, 0.0);
            for j in 0..n {
                buf[n + 2 + j] = -line[n - 1 - j];
            }
        } else {
            buf[..n].copy_from_slice(line);
        }
    }

    /// line ← F⁻¹ mult F line.
    pub fn apply(&self, line: &mut [C], mult: &[C], scratch: &mut [C]) {
        let (buf, work) = scratch.split_at_mut(self.len);
        self.load(line, buf);
        self.fwd.process_with_scratch(buf, work);
        for (b, m) in buf.iter_mut().zip(mult) {
            *b *= m;
        }
        self.inv.process_with_scratch(buf, work);
        let off = usize::from(self.dirichlet);
        line.copy_from_slice(&buf[off..off + self.n]);
    }

    /// ∫ |∂f/∂x|² dx over the line, by Parseval (exact for the grid's operator):
    /// periodic: dx/L_fft Σ k²|F̂|²; hard wall: half of that over the odd extension.
    pub fn k2_sum(&self, line: &[C], dx: f64, scratch: &mut [C]) -> f64 {
        let (buf, work) = scratch.split_at_mut(self.len);
        self.load(line, buf);
        self.fwd.process_with_scratch(buf, work);
        let s: f64 = buf
            .iter()
            .zip(&self.k)
            .map(|(b, k)| k * k * b.norm_sqr())
            .sum();
        let half = if self.dirichlet { 0.5 } else { 1.0 };
        half * s * dx / self.len as f64
    }
}

/// Shape of the N-dimensional state: n points on each of `dims` axes, axis 0 slowest.
#[derive(Clone, Copy, Debug)]
pub struct Shape {
    pub n: usize,
    pub dims: usize,
}

impl Shape {
    pub fn len(&self) -> usize {
        self.n.pow(self.dims as u32)
    }
    /// Stride of `axis`.
    pub fn stride(&self, axis: usize) -> usize {
        self.n.pow((self.dims - 1 - axis) as u32)
    }
    /// Coordinates (grid indices) of a linear index.
    #[inline]
    pub fn coords(&self, mut idx: usize) -> [usize; 3] {
        let mut c = [0; 3];
        for a in (0..self.dims).rev() {
            c[a] = idx % self.n;
            idx /= self.n;
        }
        c
    }
    /// Linear index of element `j` of line `l` along `axis` (lines numbered 0..len/n).
    #[inline]
    pub fn line_index(&self, axis: usize, l: usize, j: usize) -> usize {
        let s = self.stride(axis);
        let (outer, inner) = (l / s, l % s);
        outer * self.n * s + j * s + inner
    }
}

/// Apply `mult` (in wavevector space) along `axis` of `data`, in place.
pub fn apply_axis(
    data: &mut [C],
    shape: Shape,
    axis: usize,
    op: &LineOp,
    mult: &[C],
    tmp: &mut Vec<C>,
) {
    let n = shape.n;
    let s = shape.stride(axis);
    let sl = op.scratch_len();
    if s == 1 {
        data.par_chunks_mut(n).for_each_init(
            || vec![C::new(0.0, 0.0); sl],
            |scr, line| op.apply(line, mult, scr),
        );
        return;
    }
    // Strided axis: per block of n·s elements, gather the s lines into contiguous rows,
    // transform them, and scatter back.
    tmp.resize(n * s, C::new(0.0, 0.0));
    for block in data.chunks_mut(n * s) {
        {
            let block: &[C] = block;
            tmp.par_chunks_mut(n).enumerate().for_each_init(
                || vec![C::new(0.0, 0.0); sl],
                |scr, (r, line)| {
                    for (j, v) in line.iter_mut().enumerate() {
                        *v = block[j * s + r];
                    }
                    op.apply(line, mult, scr);
                },
            );
        }
        let t: &[C] = tmp;
        block.par_chunks_mut(s).enumerate().for_each(|(j, row)| {
            for (r, v) in row.iter_mut().enumerate() {
                *v = t[r * n + j];
            }
        });
    }
}

/// Σ over all lines along `axis` of f(line). The lines are evaluated in parallel and summed
/// in line order, so the result does not depend on the thread count.
pub fn lines_sum<F>(data: &[C], shape: Shape, axis: usize, scratch_len: usize, f: F) -> f64
where
    F: Fn(&[C], &mut [C]) -> f64 + Sync,
{
    let n = shape.n;
    let lines = shape.len() / n;
    (0..lines)
        .into_par_iter()
        .map_init(
            || {
                (
                    vec![C::new(0.0, 0.0); n],
                    vec![C::new(0.0, 0.0); scratch_len],
                )
            },
            |(line, scr), l| {
                for (j, v) in line.iter_mut().enumerate() {
                    *v = data[shape.line_index(axis, l, j)];
                }
                f(line, scr)
            },
        )
        .collect::<Vec<f64>>()
        .iter()
        .sum()
}
