//! Annihilation cells in phase space (docs/method.md §3): the key of a configuration's
//! cell, which merges a cell with its exchange images for identical particles, on a nested
//! hierarchy of meshes (level ℓ: cells 2^ℓ times the finest in x and in k).

use crate::config::job::CellKind;
use crate::config::limits::MAX_N;
use crate::physics::numerics::Setup;
use crate::physics::rng;
use anyhow::{Result, bail};

/// Coarsest level of the hierarchy: cells 2^MAX_LEVEL times the finest in x and in k.
pub const MAX_LEVEL: u32 = 6;

/// Bits of the level tag in a key (levels 0..=15).
const LEVEL_BITS: u32 = 4;

/// The nested cell meshes of one run, and how their keys are packed into 128 bits.
///
/// Level 0 has `nx` × (`nk_in` + 2) cells per particle: x cells of `cell_x` nm from `x0`,
/// k cells of `cell_k` 1/nm from `k0` (numbered 1..=nk_in) and two overflow cells (0 below,
/// nk_in + 1 above). `nx` and `nk_in` are multiples of 2^MAX_LEVEL, so that the cell of
/// level ℓ + 1 holding a cell of level ℓ is a function of that cell alone: x index ⌊i/2⌋,
/// in-range k index ⌊(i − 1)/2⌋ + 1, overflow cells to overflow cells.
pub struct CellMesh {
    kind: CellKind,
    sort: bool,
    n: usize,
    x0: f64,
    k0: f64,
    cell_x: f64,
    cell_k: f64,
    nx: u64,
    nk_in: u64,
    bits_k: u32,
    bits_one: u32,
}

fn bits_for(count: u64) -> u32 {
    64 - (count.max(2) - 1).leading_zeros()
}

impl CellMesh {
    /// The hierarchy whose finest cells are the job's (`annihilation.cell_x`,
    /// `annihilation.cell_k` or their defaults).
    pub fn new(setup: &Setup) -> Result<Self> {
        let (cell_x, cell_k) = (setup.cell_x, setup.cell_k);
        let width = setup.hi - setup.lo;
        // Wavevectors are not bounded by k_max (children of particles near ±k_max land up
        // to one transfer K·Δk ≤ k_max beyond it, docs/method.md §2.5), so the k range of the mesh
        // is widened by the largest transfer of one event, K·Δk (1/nm), on each side:
        // |k| ≤ k_max + K·Δk ≈ 2 k_max. Beyond this generous bound a particle goes to one
        // of two overflow cells per x cell (below / above), never into an in-range cell.
        let largest = [&setup.table1, &setup.table2]
            .iter()
            .filter_map(|t| t.as_ref().map(|t| t.cap as f64 * t.dk))
            .fold(0.0, f64::max);
        let reach = setup.k_max + largest;
        let (x0, xr, k0, kr) = match setup.cells {
            CellKind::Full => (setup.lo, width, -reach, 2.0 * reach),
            // Deviations from the centre of mass lie within ±L and ±2·reach.
            CellKind::Relative => (-width, 2.0 * width, -2.0 * reach, 4.0 * reach),
        };
        let block = 1u64 << MAX_LEVEL;
        let round = |v: f64| ((v.ceil().max(1.0) as u64).div_ceil(block)) * block;
        let nx = round(xr / cell_x);
        let nk_in = round(kr / cell_k);
        let bits_k = bits_for(nk_in + 2);
        let bits_one = bits_for(nx) + bits_k;
        let needed = bits_one as usize * setup.n + 16 + LEVEL_BITS as usize;
        if needed > 128 {
            bail!(
                "annihilation mesh too fine for {} particles: a cell key needs {needed} bits (> 128) with {nx} × {} \
                 cells per particle; enlarge annihilation.cell_x or annihilation.cell_k",
                setup.n,
                nk_in + 2
            );
        }
        Ok(CellMesh {
            kind: setup.cells,
            sort: setup.merge_exchange,
            n: setup.n,
            x0,
            k0,
            cell_x,
            cell_k,
            nx,
            nk_in,
            bits_k,
            bits_one,
        })
    }

    /// Cell sizes of `level`: nm and 1/nm.
    pub fn cell_sizes(&self, level: u32) -> (f64, f64) {
        let s = f64::from(1u32 << level);
        (self.cell_x * s, self.cell_k * s)
    }

    /// Occupied-cell capacity of the finest mesh (its volume), for reports.
    pub fn volume(&self) -> f64 {
        ((self.nx * (self.nk_in + 2)) as f64).powi(self.n as i32)
    }

    /// Key of a particle's finest cell (level 0).
    #[inline]
    pub fn key(&self, x: &[f64], k: &[f64], id: u64) -> u128 {
        self.key_at(x, k, id, 0)
    }

    /// Key of a particle's cell at `level`: group, level tag, then the (sorted, for
    /// identical particles) per-particle cells.
    #[inline]
    pub fn key_at(&self, x: &[f64], k: &[f64], id: u64, level: u32) -> u128 {
        let n = self.n;
        // n ≤ MAX_N is checked when the job is read.
        let mut buf = [0u64; MAX_N];
        let cells = &mut buf[..n];
        let (xm, km) = match self.kind {
            CellKind::Full => (0.0, 0.0),
            CellKind::Relative => (
                x.iter().sum::<f64>() / n as f64,
                k.iter().sum::<f64>() / n as f64,
            ),
        };
        let top = self.nk_in + 1;
        // Cell index ⌊v⌋ clamped to [0, count): for v ≥ 0 the truncating cast is the floor,
        // and negative v (or NaN) goes to 0, without a call to `floor`.
        for i in 0..n {
            let ix = (((x[i] - xm - self.x0) / self.cell_x).max(0.0) as u64).min(self.nx - 1);
            // k cell 1 + ⌊(k − k0)/cell_k⌋ in range, 0 below and nk_in + 1 above the range.
            let t = (k[i] - km - self.k0) / self.cell_k;
            let ik = if t < 0.0 { 0 } else { (t as u64 + 1).min(top) };
            cells[i] = self.lift_between((ix << self.bits_k) | ik, 0, level);
        }
        self.pack(cells, rng::group_of(id), level)
    }

    /// Sort (identical particles) and pack cells with the group and level tag.
    #[inline]
    fn pack(&self, cells: &mut [u64], group: u32, level: u32) -> u128 {
        if self.sort {
            if cells.len() == 2 {
                if cells[0] > cells[1] {
                    cells.swap(0, 1);
                }
            } else {
                cells.sort_unstable();
            }
        }
        let mut key: u128 = ((group as u128) << LEVEL_BITS) | level as u128;
        for &c in cells.iter() {
            key = (key << self.bits_one) | c as u128;
        }
        key
    }

    /// Level recorded in a key.
    #[inline]
    pub fn level_of(&self, key: u128) -> u32 {
        ((key >> (self.bits_one as usize * self.n)) as u32) & ((1 << LEVEL_BITS) - 1)
    }

    /// The key of the cell at `level` that holds the cell `key` (of a finer level): the
    /// nested hierarchy makes this a function of the key alone.
    pub fn lift(&self, key: u128, level: u32) -> u128 {
        let from = self.level_of(key);
        debug_assert!(from <= level);
        if from == level {
            return key;
        }
        let n = self.n;
        let mask = (1u128 << self.bits_one) - 1;
        // n ≤ MAX_N is checked when the job is read.
        let mut buf = [0u64; MAX_N];
        let cells = &mut buf[..n];
        let mut rest = key;
        for i in (0..n).rev() {
            let c = (rest & mask) as u64;
            rest >>= self.bits_one;
            cells[i] = self.lift_between(c, from, level);
        }
        let group = (rest >> LEVEL_BITS) as u32;
        self.pack(cells, group, level)
    }

    /// A packed cell of level `from` carried to level `to` (≥ from).
    #[inline]
    fn lift_between(&self, cell: u64, from: u32, to: u32) -> u64 {
        if from == to {
            return cell;
        }
        let kmask = (1u64 << self.bits_k) - 1;
        let (ix, ik) = (cell >> self.bits_k, cell & kmask);
        let top_from = (self.nk_in >> from) + 1;
        let d = to - from;
        let ik = if ik == 0 {
            0
        } else if ik == top_from {
            (self.nk_in >> to) + 1
        } else {
            ((ik - 1) >> d) + 1
        };
        ((ix >> d) << self.bits_k) | ik
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn mesh(n: usize, sort: bool, kind: CellKind) -> CellMesh {
        let (nx, nk_in) = (128u64, 192u64);
        let bits_k = bits_for(nk_in + 2);
        CellMesh {
            kind,
            sort,
            n,
            x0: -50.0,
            k0: -3.0,
            cell_x: 100.0 / nx as f64,
            cell_k: 6.0 / nk_in as f64,
            nx,
            nk_in,
            bits_k,
            bits_one: bits_for(nx) + bits_k,
        }
    }

    /// Lifting a particle's level-0 key to level ℓ gives its level-ℓ key, for every level,
    /// including coordinates outside the x and k ranges (edge and overflow cells), and
    /// lifting composes (0 → ℓ → ℓ′ equals 0 → ℓ′). A property of the nested meshes.
    #[test]
    fn lifting_a_key_equals_binning_at_the_coarser_level() {
        for (n, sort, kind) in [
            (1, false, CellKind::Full),
            (2, true, CellKind::Full),
            (3, true, CellKind::Relative),
            (2, false, CellKind::Full),
        ] {
            let m = mesh(n, sort, kind);
            let mut s = 0x1234_5678_u64;
            let mut next = || {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                (s >> 11) as f64 / (1u64 << 53) as f64
            };
            for trial in 0..20000 {
                let x: Vec<f64> = (0..n).map(|_| -70.0 + 140.0 * next()).collect();
                let k: Vec<f64> = (0..n).map(|_| -4.0 + 8.0 * next()).collect();
                let id = rng::make_id((trial % 3) as u32, trial as u64);
                let k0 = m.key(&x, &k, id);
                assert_eq!(m.level_of(k0), 0);
                for l in 1..=MAX_LEVEL {
                    let direct = m.key_at(&x, &k, id, l);
                    assert_eq!(m.lift(k0, l), direct, "n {n} level {l}");
                    assert_eq!(m.level_of(direct), l);
                    if l >= 2 {
                        assert_eq!(m.lift(m.key_at(&x, &k, id, l - 2), l), direct);
                    }
                }
            }
        }
    }
}
