//! Annihilation cells in phase space (docs/method.md §3): the key of a configuration's
//! cell, which merges a cell with its exchange images for identical particles.

use crate::config::job::CellKind;
use crate::physics::numerics::Setup;
use crate::physics::rng;
use anyhow::{Result, bail};

/// How cell keys are packed into 128 bits.
pub struct CellMesh {
    kind: CellKind,
    sort: bool,
    n: usize,
    x0: f64,
    k0: f64,
    cell_x: f64,
    cell_k: f64,
    nx: u64,
    nk: u64,
    bits_k: u32,
    bits_one: u32,
}

fn bits_for(count: u64) -> u32 {
    64 - (count.max(2) - 1).leading_zeros()
}

impl CellMesh {
    /// The job's cells (`annihilation.cell_x`, `annihilation.cell_k` or their defaults).
    pub fn new(setup: &Setup) -> Result<Self> {
        Self::at_level(setup, 0)
    }

    /// Cells 2^level times the job's in both x and k (level 0: the job's own). Coarser
    /// levels cancel more and bias more; the driver uses them only to stay within the
    /// sample budget (docs/method.md §3).
    pub fn at_level(setup: &Setup, level: u32) -> Result<Self> {
        let scale = f64::from(1u32 << level.min(20));
        let (cell_x, cell_k) = (setup.cell_x * scale, setup.cell_k * scale);
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
        let nx = (xr / cell_x).ceil().max(1.0) as u64;
        // In-range k cells 1..=nk_in, overflow cells 0 and nk_in + 1.
        let nk = (kr / cell_k).ceil().max(1.0) as u64 + 2;
        let bits_k = bits_for(nk);
        let bits_one = bits_for(nx) + bits_k;
        let needed = bits_one as usize * setup.n + 16;
        if needed > 128 {
            bail!(
                "annihilation mesh too fine for {} particles: a cell key needs {needed} bits (> 128) with {nx} × {nk} \
                 cells per particle; enlarge annihilation.cell_x or annihilation.cell_k",
                setup.n
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
            nk,
            bits_k,
            bits_one,
        })
    }

    /// Cell sizes: nm and 1/nm.
    pub fn cell_sizes(&self) -> (f64, f64) {
        (self.cell_x, self.cell_k)
    }

    /// Occupied-cell capacity of the mesh (its volume), for reports.
    pub fn volume(&self) -> f64 {
        ((self.nx * self.nk) as f64).powi(self.n as i32)
    }

    /// Key of a particle: group in the top bits, then the (sorted) per-particle cells.
    #[inline]
    pub fn key(&self, x: &[f64], k: &[f64], id: u64) -> u128 {
        let n = self.n;
        let mut cells = [0u64; 8];
        let mut cells_vec;
        let cells: &mut [u64] = if n <= 8 {
            &mut cells[..n]
        } else {
            cells_vec = vec![0u64; n];
            &mut cells_vec
        };
        let (xm, km) = match self.kind {
            CellKind::Full => (0.0, 0.0),
            CellKind::Relative => (
                x.iter().sum::<f64>() / n as f64,
                k.iter().sum::<f64>() / n as f64,
            ),
        };
        // Cell index ⌊v⌋ clamped to [0, count): for v ≥ 0 the truncating cast is the floor,
        // and negative v (or NaN) goes to 0 as it did through `floor().max(0.0)`, without a
        // call to `floor`.
        for i in 0..n {
            let ix = (((x[i] - xm - self.x0) / self.cell_x).max(0.0) as u64).min(self.nx - 1);
            // k cell 1 + ⌊(k − k0)/cell_k⌋ in range, 0 below and nk − 1 above the range (for
            // t ≥ 0 the truncating cast is the floor).
            let t = (k[i] - km - self.k0) / self.cell_k;
            let ik = if t < 0.0 {
                0
            } else {
                (t as u64 + 1).min(self.nk - 1)
            };
            cells[i] = (ix << self.bits_k) | ik;
        }
        if self.sort {
            if n == 2 {
                // Two cells (the common pair): one comparison.
                if cells[0] > cells[1] {
                    cells.swap(0, 1);
                }
            } else {
                cells.sort_unstable();
            }
        }
        let mut key: u128 = rng::group_of(id) as u128;
        for &c in cells.iter() {
            key = (key << self.bits_one) | c as u128;
        }
        key
    }
}
