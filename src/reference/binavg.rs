//! Bin averages of sampled functions over the output bins (docs/method.md §4: every dataset is
//! a bin average). Public so that anything holding a function on a fine grid (a closed
//! form, a grid solution) can produce numbers comparable with the Monte Carlo histograms.
//!
//! Each sample stands for the cell between the midpoints to its neighbours (the end cells
//! extend by half the adjacent spacing). The average over a bin is Σ overlap·value / Σ
//! overlap: for samples whose cells cover the bin this is the integral of the piecewise-
//! constant interpolant divided by the bin width.

use crate::physics::grid::Bins;

#[derive(Clone, Debug)]
pub struct BinAverage {
    samples: usize,
    /// Per bin: (sample index, weight), weights summing to 1 (or empty).
    entries: Vec<Vec<(usize, f64)>>,
}

impl BinAverage {
    /// Samples at ascending `positions`.
    pub fn new(positions: &[f64], bins: &Bins) -> Self {
        let n = positions.len();
        let mut entries = vec![Vec::new(); bins.n];
        if n == 0 {
            return BinAverage {
                samples: 0,
                entries,
            };
        }
        let edge = |i: usize| -> f64 {
            // Left edge of cell i (i = n gives the right edge of the last cell).
            if n == 1 {
                let w = bins.width();
                return positions[0] + if i == 0 { -0.5 * w } else { 0.5 * w };
            }
            if i == 0 {
                positions[0] - 0.5 * (positions[1] - positions[0])
            } else if i == n {
                positions[n - 1] + 0.5 * (positions[n - 1] - positions[n - 2])
            } else {
                0.5 * (positions[i - 1] + positions[i])
            }
        };
        let w = bins.width();
        for i in 0..n {
            let (a, b) = (edge(i), edge(i + 1));
            if b <= bins.lo || a >= bins.hi {
                continue;
            }
            let first = (((a - bins.lo) / w).floor().max(0.0)) as usize;
            let last = ((((b - bins.lo) / w).floor()) as usize).min(bins.n - 1);
            for (bin, entry) in entries.iter_mut().enumerate().take(last + 1).skip(first) {
                let lo = bins.lo + bin as f64 * w;
                let hi = if bin + 1 == bins.n { bins.hi } else { lo + w };
                let overlap = b.min(hi) - a.max(lo);
                if overlap > 0.0 {
                    entry.push((i, overlap));
                }
            }
        }
        for e in &mut entries {
            let total: f64 = e.iter().map(|(_, o)| o).sum();
            for (_, o) in e.iter_mut() {
                *o /= total;
            }
        }
        BinAverage {
            samples: n,
            entries,
        }
    }

    /// Samples at first + i·spacing, i = 0..count.
    pub fn uniform(first: f64, spacing: f64, count: usize, bins: &Bins) -> Self {
        let pos: Vec<f64> = (0..count).map(|i| first + i as f64 * spacing).collect();
        Self::new(&pos, bins)
    }

    pub fn bins(&self) -> usize {
        self.entries.len()
    }

    pub fn samples(&self) -> usize {
        self.samples
    }

    /// Bin averages of `values` (one per sample).
    pub fn apply(&self, values: &[f64]) -> Vec<f64> {
        assert_eq!(values.len(), self.samples, "one value per sample");
        self.entries
            .iter()
            .map(|e| e.iter().map(|&(i, w)| w * values[i]).sum())
            .collect()
    }

    /// Bin averages of whole rows (one row per sample, all of length `width`), flattened
    /// row-major (bins × width).
    pub fn apply_rows(&self, rows: &[Vec<f64>], width: usize) -> Vec<f64> {
        assert_eq!(rows.len(), self.samples, "one row per sample");
        let mut out = vec![0.0; self.bins() * width];
        for (b, e) in self.entries.iter().enumerate() {
            let o = &mut out[b * width..(b + 1) * width];
            for &(i, w) in e {
                for (v, p) in o.iter_mut().zip(&rows[i]) {
                    *v += w * p;
                }
            }
        }
        out
    }

    /// Two-dimensional bin average: `values` is row-major (rows.samples × cols.samples);
    /// the result is (rows.bins × cols.bins).
    pub fn apply_2d(rows: &BinAverage, cols: &BinAverage, values: &[f64]) -> Vec<f64> {
        assert_eq!(values.len(), rows.samples * cols.samples);
        let partial: Vec<Vec<f64>> = values
            .chunks(cols.samples.max(1))
            .map(|r| cols.apply(r))
            .collect();
        rows.apply_rows(&partial, cols.bins())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cells_that_match_bins_give_the_values_back() {
        let bins = Bins {
            lo: 0.0,
            hi: 4.0,
            n: 4,
        };
        let b = BinAverage::uniform(0.5, 1.0, 4, &bins);
        assert_eq!(b.apply(&[1.0, 2.0, 3.0, 4.0]), vec![1.0, 2.0, 3.0, 4.0]);
    }

    #[test]
    fn average_of_a_linear_function_is_its_value_at_the_bin_centre() {
        // Midpoint rule is exact for linear functions (common practice, no published source).
        let bins = Bins {
            lo: -1.0,
            hi: 1.0,
            n: 5,
        };
        let h = 0.01;
        let pos: Vec<f64> = (0..200).map(|i| -1.0 + (i as f64 + 0.5) * h).collect();
        let vals: Vec<f64> = pos.iter().map(|x| 3.0 * x + 1.0).collect();
        let b = BinAverage::new(&pos, &bins);
        for (v, c) in b.apply(&vals).iter().zip(bins.centres()) {
            assert!((v - (3.0 * c + 1.0)).abs() < 1e-12, "{v} vs {c}");
        }
    }
}
