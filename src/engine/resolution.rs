//! Adaptive annihilation resolution (docs/method.md §3.1): which level of the nested cell
//! hierarchy each finest cell is annihilated at.
//!
//! Annihilation in a cell keeps |P − Q| of its majority particles at their own coordinates.
//! On average that replaces the shape of the minority particles inside the cell by the
//! shape of the majority ones: no bias where the two signs are spread alike over the cell,
//! a bias where they are not (a sign pattern finer than the cell, such as the exchange
//! oscillation of identical particles or the interference of a split packet). So cells are
//! merged bottom-up, from the finest level towards level [`MAX_LEVEL`], while the merge is
//! harmless at the resolution of the children: a parent cell is merged only if all its
//! children are and the signs are spread over its children alike within the statistics —
//! Pearson's χ² test of homogeneity of the 2 × K table (sign × occupied child),
//!
//!   χ² = T²/(P·Q) · Σᵢ (mᵢ − Q·tᵢ/T)² / tᵢ,   K − 1 degrees of freedom,
//!
//! (tᵢ particles, mᵢ of them negative, in child i; P, Q, T the parent's positives,
//! negatives and total), turned into a normal score by the Wilson–Hilferty transform
//! z = [(χ²/df)^{1/3} − (1 − 2/(9 df))] / √(2/(9 df)). A parent is merged when z ≤ z*.
//! Where particles are dense the test resolves fine structure and the cells stay small;
//! in sparse regions the test sees little, so the level cap of the rung bounds the merging.
//!
//! The rung used is the first of [`LADDER`] whose annihilation leaves at most the target
//! count (half the run's sample budget): cells grow one level at a time where no sign
//! pattern shows (a merge displaces the cancelled samples' mass by up to the cell size, so
//! finer merges come first); rungs that merge detected patterns are forced by the budget
//! and reported. Every decision uses global counts per finest cell only (the χ² sums are exact
//! in fixed point), so the leaves are the same on any number of ranks and threads.

use crate::engine::cell_table::CellTable;
use crate::engine::comm::Comm;
use crate::engine::home;
use crate::engine::owners::Owners;
use crate::physics::cells::{CellMesh, MAX_LEVEL};
use crate::physics::particles::Store;

/// Merges at z ≤ Z_STRUCTURE keep the structure the samples resolve (a two-sided 5 %
/// test would be 1.96); thresholds above it are forced by the budget and reported.
pub const Z_STRUCTURE: f64 = 2.0;

/// The rungs, least merging first: (coarsest level a merge may reach, threshold z* on the
/// normal score of the χ² test). The first merges nothing that holds both signs
/// (annihilation at the finest cells); the next ones let cells grow one level at a time
/// where the samples show no sign pattern (z ≤ [`Z_STRUCTURE`]); the last ones, forced by
/// the budget and reported, merge patterns the samples do resolve, the very last every
/// occupied cell of the coarsest level.
pub const LADDER: [(u32, f64); 12] = [
    (0, Z_STRUCTURE),
    (1, Z_STRUCTURE),
    (2, Z_STRUCTURE),
    (3, Z_STRUCTURE),
    (4, Z_STRUCTURE),
    (5, Z_STRUCTURE),
    (MAX_LEVEL, Z_STRUCTURE),
    (MAX_LEVEL, 3.0),
    (MAX_LEVEL, 5.0),
    (MAX_LEVEL, 8.0),
    (MAX_LEVEL, 13.0),
    (MAX_LEVEL, f64::INFINITY),
];
pub const RUNGS: usize = LADDER.len();
const LEVELS: usize = MAX_LEVEL as usize + 1;
/// Bytes of one merge-tree node (the memory model counts it per node of every level).
pub const NODE_BYTES: usize = std::mem::size_of::<Node>();
/// Marks "not a leaf on this rung" in per-node leaf levels.
const NONE: u8 = u8::MAX;
/// Fixed-point scale of the χ² terms (2⁻²⁰): integer sums do not depend on their order.
const FIXED: f64 = (1u64 << 20) as f64;

/// What one resolution decided, global numbers.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Outcome {
    /// Index into [`LADDER`] of the rung used.
    pub rung: usize,
    /// Samples that annihilation at these leaves leaves.
    pub after: u64,
    /// Samples in leaves holding both signs, by the leaf's level 0..=MAX_LEVEL.
    pub mixed_by_level: [u64; LEVELS],
    /// Wall seconds of this rank.
    pub seconds: f64,
}

impl Outcome {
    /// Mean level of the samples in mixed leaves (0 when there are none).
    pub fn mean_level(&self) -> f64 {
        let total: u64 = self.mixed_by_level.iter().sum();
        if total == 0 {
            return 0.0;
        }
        let s: f64 = (0..LEVELS)
            .map(|l| l as f64 * self.mixed_by_level[l] as f64)
            .sum();
        s / total as f64
    }

    /// Coarsest level holding samples of mixed leaves.
    pub fn coarsest_level(&self) -> u32 {
        (0..LEVELS)
            .rev()
            .find(|&l| self.mixed_by_level[l] > 0)
            .unwrap_or(0) as u32
    }
}

/// One node of the merge tree: a cell of some level with its global counts.
#[derive(Clone, Copy, Default)]
struct Node {
    plus: u64,
    minus: u64,
    /// Index of the parent node one level up (full width: an owner may hold more than
    /// 2^32 cells).
    parent: usize,
    /// Occupied children (for the degrees of freedom).
    kids: u64,
    /// Σ over children of (T·mᵢ − Q·tᵢ)²/tᵢ in units of 2⁻²⁰.
    chi_fixed: u128,
    /// Bit r: mergeable on rung r (all descendants merged and no structure at z ≤ Z[r]).
    mask: u16,
}

/// The bottom-up merge tree over a set of finest cells with global counts.
#[derive(Default)]
struct Tree {
    tables: Vec<CellTable>,
    nodes: Vec<Vec<Node>>,
    /// Per level, per node: leaf level on each rung (NONE where the node is not merged).
    leaf: Vec<Vec<[u8; RUNGS]>>,
}

const ALL: u16 = (1 << RUNGS) - 1;

/// Normal score of a χ² value with `df` degrees of freedom (Wilson–Hilferty, 1931).
pub fn wilson_hilferty(chi2: f64, df: f64) -> f64 {
    let a = 2.0 / (9.0 * df);
    ((chi2 / df).cbrt() - (1.0 - a)) / a.sqrt()
}

impl Tree {
    /// Build the tree over `keys` (finest cells, level 0) with counts `plus`, `minus`.
    /// Returns, per rung, the count annihilation leaves and the mixed-leaf samples by level.
    fn build(
        &mut self,
        mesh: &CellMesh,
        keys: &[u128],
        plus: &[u64],
        minus: &[u64],
    ) -> ([u64; RUNGS], [[u64; LEVELS]; RUNGS]) {
        self.tables.resize_with(LEVELS, CellTable::default);
        self.nodes.resize_with(LEVELS, Vec::new);
        self.leaf.resize_with(LEVELS, Vec::new);
        let level0 = &mut self.nodes[0];
        level0.clear();
        level0.extend((0..keys.len()).map(|i| Node {
            plus: plus[i],
            minus: minus[i],
            mask: ALL,
            ..Node::default()
        }));
        for l in 0..MAX_LEVEL as usize {
            let (lower, upper) = self.nodes.split_at_mut(l + 1);
            let (children, parents) = (&mut lower[l], &mut upper[0]);
            let (below, above) = self.tables.split_at_mut(l + 1);
            let child_keys: &[u128] = if l == 0 { keys } else { &below[l].keys };
            let table = &mut above[0];
            table.clear(2 * children.len());
            parents.clear();
            for (c, node) in children.iter_mut().enumerate() {
                let j = table.insert(mesh.lift(child_keys[c], l as u32 + 1));
                if j == parents.len() {
                    parents.push(Node {
                        mask: ALL,
                        ..Node::default()
                    });
                }
                let p = &mut parents[j];
                p.plus += node.plus;
                p.minus += node.minus;
                p.kids += 1;
                p.mask &= node.mask;
                node.parent = j;
            }
            for node in children.iter() {
                let p = &mut parents[node.parent];
                let (pp, qq) = (p.plus as f64, p.minus as f64);
                if p.plus == 0 || p.minus == 0 || p.kids < 2 {
                    continue;
                }
                let tt = pp + qq;
                let t = (node.plus + node.minus) as f64;
                let d = tt * node.minus as f64 - qq * t;
                p.chi_fixed += (d * d / t * FIXED).round() as u128;
            }
            for p in parents.iter_mut() {
                if p.plus == 0 || p.minus == 0 || p.kids < 2 {
                    continue;
                }
                let (pp, qq) = (p.plus as f64, p.minus as f64);
                let chi2 = p.chi_fixed as f64 / FIXED / (pp * qq);
                let z = wilson_hilferty(chi2, (p.kids - 1) as f64);
                let mut bits = 0u16;
                for (r, &(cap, zr)) in LADDER.iter().enumerate() {
                    if (l as u32) < cap && z <= zr {
                        bits |= 1 << r;
                    }
                }
                p.mask &= bits;
            }
        }
        // Top-down: the leaf level of every node on every rung, and the counts per rung.
        let mut after = [0u64; RUNGS];
        let mut by_level = [[0u64; LEVELS]; RUNGS];
        for l in (0..LEVELS).rev() {
            let (lower, upper) = self.leaf.split_at_mut(l + 1);
            let leaf = &mut lower[l];
            leaf.clear();
            for node in &self.nodes[l] {
                let mut out = [NONE; RUNGS];
                for (r, o) in out.iter_mut().enumerate() {
                    let from_parent = if l < MAX_LEVEL as usize {
                        upper[0][node.parent][r]
                    } else {
                        NONE
                    };
                    if from_parent != NONE {
                        *o = from_parent;
                    } else if node.mask & (1 << r) != 0 {
                        *o = l as u8;
                        after[r] += node.plus.abs_diff(node.minus);
                        if node.plus > 0 && node.minus > 0 {
                            by_level[r][l] += node.plus + node.minus;
                        }
                    }
                }
                leaf.push(out);
            }
        }
        (after, by_level)
    }
}

/// Buffers of the adaptive resolution, kept from one annihilation to the next.
#[derive(Default)]
pub struct Resolution {
    /// Finest cells occupied on this rank, their local counts and each particle's cell.
    fine: CellTable,
    plus: Vec<u64>,
    minus: Vec<u64>,
    cell_of: Vec<usize>,
    /// Owner side: global counts of the finest cells this rank owns.
    /// The count exchange with the owners of the roots (several ranks).
    owners: Owners,
    tree: Tree,
    /// Per local finest cell: its leaf's level and key.
    levels: Vec<u8>,
    leaf_key: Vec<u128>,
}

impl Resolution {
    /// Choose the leaves for `store` so that annihilation leaves at most `target` samples
    /// if any rung allows it (else the last rung), and fill [`Resolution::leaves`]. On
    /// several ranks the particles must sit in their home cells ([`home::migrate`]), so that
    /// each finest cell is whole on one rank.
    pub fn resolve(
        &mut self,
        mesh: &CellMesh,
        store: &Store,
        target: u64,
        comm: &dyn Comm,
    ) -> Outcome {
        let t0 = std::time::Instant::now();
        let ranks = comm.size();
        // 1. Finest cells of this rank.
        let n = store.len();
        crate::engine::cell_table::count_cells(
            &mut self.fine,
            &mut self.plus,
            &mut self.minus,
            &mut self.cell_of,
            &store.sign[..n],
            |p| mesh.key(store.xs(p), store.ks(p), store.id[p]),
        );
        let cells = self.fine.len();
        // 2. The first rung (no merging) needs no tree: when annihilation at the finest cells
        //    already leaves at most the target (a global sum of |P − Q| over the cells),
        //    every leaf is a finest cell — the tree's own answer. The particles sit in their
        //    home cells (`engine::home`), which contain their finest cells, so each finest
        //    cell is whole on one rank and its local counts are its global counts.
        let levels = &mut self.levels;
        levels.clear();
        let mut counts = [0i64; RUNGS * (1 + LEVELS)];
        let mut finest = [0i64; 2];
        for (&p, &m) in self.plus.iter().zip(&self.minus) {
            finest[0] += p.abs_diff(m) as i64;
            if p > 0 && m > 0 {
                finest[1] += (p + m) as i64;
            }
        }
        comm.sum_i64(&mut finest);
        if finest[0] as u64 <= target {
            counts[0] = finest[0];
            counts[RUNGS] = finest[1];
            levels.resize(cells, 0);
        } else if ranks == 1 {
            let (after, by_level) = self
                .tree
                .build(mesh, &self.fine.keys, &self.plus, &self.minus);
            fill(&mut counts, &after, &by_level);
            comm.sum_i64(&mut counts);
            let rung = choose(&counts, target);
            levels.extend(self.tree.leaf[0].iter().map(|l| l[rung]));
        } else {
            // 3. Global counts at the owners of the roots (the coarsest cells), the tree there.
            self.owners
                .exchange(comm, &self.fine.keys, &self.plus, &self.minus, |key| {
                    home::cell_owner(mesh, mesh.lift(key, MAX_LEVEL), ranks)
                });
            let own = &self.owners;
            let (after, by_level) = self
                .tree
                .build(mesh, &own.table.keys, &own.plus, &own.minus);
            fill(&mut counts, &after, &by_level);
            comm.sum_i64(&mut counts);
            let rung = choose(&counts, target);
            // Each entry's leaf level goes back to its sender, one word per entry.
            let reply: Vec<Vec<u64>> = own
                .entries
                .iter()
                .map(|e| {
                    e.iter()
                        .map(|&g| u64::from(self.tree.leaf[0][g][rung]))
                        .collect()
                })
                .collect();
            let answers = comm.exchange(&reply);
            levels.resize(cells, 0);
            for (o, sent) in own.sent.iter().enumerate() {
                for (j, &c) in sent.iter().enumerate() {
                    levels[c] = answers[o][j] as u8;
                }
            }
        }
        let rung = choose(&counts, target);
        // 4. Each local finest cell's leaf key (the particles keep their finest cell).
        self.leaf_key.clear();
        self.leaf_key
            .extend((0..cells).map(|c| mesh.lift(self.fine.keys[c], u32::from(levels[c]))));
        let mut mixed_by_level = [0u64; LEVELS];
        for (l, m) in mixed_by_level.iter_mut().enumerate() {
            *m = counts[RUNGS + rung * LEVELS + l] as u64;
        }
        Outcome {
            rung,
            after: counts[rung] as u64,
            mixed_by_level,
            seconds: t0.elapsed().as_secs_f64(),
        }
    }

    /// The leaves as the annihilator bins them: per local finest cell its leaf's key, per
    /// particle in store order its finest cell (after [`Resolution::resolve`]).
    pub fn leaves<'a>(&'a self, mesh: &'a CellMesh) -> crate::engine::annihilate::Cells<'a> {
        crate::engine::annihilate::Cells::Leaves {
            mesh,
            leaf_key: &self.leaf_key,
            cell_of: &self.cell_of,
        }
    }
}

/// Pack per-rung counts and mixed samples by level into one vector for a global sum.
fn fill(out: &mut [i64], after: &[u64; RUNGS], by_level: &[[u64; LEVELS]; RUNGS]) {
    for r in 0..RUNGS {
        out[r] = after[r] as i64;
        for l in 0..LEVELS {
            out[RUNGS + r * LEVELS + l] = by_level[r][l] as i64;
        }
    }
}

/// The first rung whose global count after annihilation is within `target` (else the last).
fn choose(counts: &[i64], target: u64) -> usize {
    (0..RUNGS)
        .find(|&r| counts[r] as u64 <= target)
        .unwrap_or(RUNGS - 1)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Wilson–Hilferty: χ² at its median-ish mean df gives z ≈ 0; the 0.975 quantile of
    /// χ²(1) = 5.0239 and of χ²(10) = 20.483 give z ≈ 1.96 (tabulated quantiles, from
    /// memory of standard tables; the transform is accurate to ~0.1 at df = 1).
    /// Tree nodes index their parents and count their children at full width (an owner
    /// may hold more than 2^32 cells of one level) without growing past the 64 bytes the
    /// memory model counts per node.
    #[test]
    fn node_indices_are_full_width() {
        let far = (1usize << 32) + 9;
        let n = Node {
            parent: far,
            kids: u64::from(u32::MAX) + 2,
            ..Node::default()
        };
        assert_eq!(n.parent, far);
        assert_eq!(n.kids - 1, 1u64 << 32);
        assert_eq!(NODE_BYTES, 64);
    }

    #[test]
    fn wilson_hilferty_matches_tabulated_quantiles() {
        assert!((wilson_hilferty(20.483, 10.0) - 1.96).abs() < 0.02);
        assert!((wilson_hilferty(5.0239, 1.0) - 1.96).abs() < 0.15);
        assert!(wilson_hilferty(9.342, 10.0).abs() < 0.05);
    }
}
