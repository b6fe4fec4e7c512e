//! Annihilation on a sparse phase-space mesh, as one global reduction (docs/method.md §3).
//!
//! Each particle gets a cell key: its error group and the cell indices of its coordinates
//! (sorted per particle for identical particles, which merges a cell with its exchange
//! images). Per cell the net sign is what the Wigner function keeps; a mixed cell keeps
//! |net| of its majority-sign particles at their own coordinates, those of smallest
//! priority hash(seed, id, interval, state), and loses the rest. Cells of one sign are left
//! untouched. The choice depends only on the global cell histogram and the particles, not on
//! how they are spread over ranks: each rank sends (key, +count, −count) of its occupied cells
//! to the key's owner rank; the owner answers for mixed cells only; where several ranks hold
//! majority particles of one mixed cell, a second exchange of their priorities fixes a
//! threshold. Traffic is proportional to the occupied cells, never to the mesh volume.
//!
//! Nothing is sorted: occupied cells are counted in an open-addressing hash table of the
//! 128-bit keys, and only the majority particles of mixed cells that keep some of them get
//! a priority, gathered per cell by a counting pass. Among a cell's majority particles the
//! survivors are the `keep` smallest in the order (priority, rank, position in the rank's
//! store); on one rank that is a selection, not a sort. The buffers live in an
//! [`Annihilator`] that the run keeps from one call to the next.

use crate::engine::cell_table::{BATCH, CellTable, count_cells, prefetch};
use crate::engine::comm::Comm;
use crate::engine::home;
use crate::engine::owners::Owners;
pub use crate::physics::cells::CellMesh;
use crate::physics::numerics::Setup;
use crate::physics::particles::Store;
use crate::physics::rng::{self, tag};

use rayon::prelude::*;

fn priority(setup: &Setup, store: &Store, p: usize, interval: u64) -> u64 {
    rng::hash(&[
        setup.seed,
        tag::PRIORITY,
        store.id[p],
        interval,
        store.xs(p)[0].to_bits(),
        store.ks(p)[0].to_bits(),
    ])
}

/// Outcome of one annihilation, global numbers.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Report {
    pub before: u64,
    pub after: u64,
    /// Occupied cells on this rank; 64-bit words and messages this rank sent to others.
    pub local_cells: u64,
    pub words_sent: u64,
    pub messages_sent: u64,
    /// Wall seconds of this rank in: keys and cell counts; the exchanges with the owners;
    /// the selection of survivors.
    pub binning_s: f64,
    pub reduction_s: f64,
    pub selection_s: f64,
}

const SELECT_LOCAL: u64 = 1;
const NEED_THRESHOLD: u64 = 2;

/// What happens to the particles of one local cell.
#[derive(Clone, Copy, Default)]
struct Decision {
    /// Both signs in the cell (globally): its particles are decided; else untouched.
    mixed: bool,
    /// Majority sign; 0 when the cell cancels exactly (then nothing survives).
    major: i8,
    /// The cell's majority particles on several ranks: a threshold comes from the owner.
    threshold: bool,
    /// Majority particles kept in the whole cell.
    quota: u64,
}

/// Where each particle's cell key comes from.
#[derive(Clone, Copy)]
pub enum Cells<'a> {
    /// The particle's cell at one level of the nested mesh.
    Level(&'a CellMesh, u32),
    /// The leaves of the adaptive resolution: per finest cell of this rank its leaf's key,
    /// and per particle in store order its finest cell. Binning then hashes each finest cell
    /// once instead of each particle.
    Leaves {
        mesh: &'a CellMesh,
        leaf_key: &'a [u128],
        cell_of: &'a [usize],
    },
}

impl Cells<'_> {
    #[inline]
    fn key(&self, store: &Store, p: usize) -> u128 {
        match *self {
            Cells::Level(mesh, level) => mesh.key_at(store.xs(p), store.ks(p), store.id[p], level),
            Cells::Leaves {
                leaf_key, cell_of, ..
            } => leaf_key[cell_of[p]],
        }
    }

    /// The rank that decides the cell `key` ([`home::cell_owner`]).
    fn owner(&self, key: u128, ranks: usize) -> usize {
        match *self {
            Cells::Level(mesh, _) | Cells::Leaves { mesh, .. } => {
                home::cell_owner(mesh, key, ranks)
            }
        }
    }
}

/// The buffers of annihilation, kept from one call to the next so that a run allocates
/// only while its particle and cell counts still grow.
#[derive(Default)]
pub struct Annihilator {
    /// Occupied cells of this rank.
    table: CellTable,
    /// Per particle: its local cell index.
    cell_of: Vec<usize>,
    /// Per particle (only with several threads): its cell key.
    keys: Vec<u128>,
    /// With [`Cells::Leaves`]: per finest cell, its leaf's local cell index.
    leaf_of: Vec<usize>,
    /// Per local cell: + and − counts on this rank.
    plus: Vec<u64>,
    minus: Vec<u64>,
    decision: Vec<Decision>,
    /// Per local cell: end of its candidate range in `cand` after the counting pass.
    next: Vec<usize>,
    /// (priority, particle index) of the majority particles that take part in a selection,
    /// grouped by cell, each group in store order.
    cand: Vec<(u64, usize)>,
    keep: Vec<bool>,
    /// The count exchange with the owners of the keys (several ranks).
    owners: Owners,
}

impl Annihilator {
    /// Annihilate `store` in place (docs/method.md §3): in every globally mixed cell keep
    /// |P − Q| majority particles, those first in (priority, rank, store position), and drop
    /// the rest; `interval` keys the priorities. Returns the global counts before and after,
    /// this rank's occupied cells and words sent, and its phase times.
    pub fn run(
        &mut self,
        setup: &Setup,
        cells: Cells,
        store: &mut Store,
        interval: u64,
        comm: &dyn Comm,
    ) -> Report {
        let ranks = comm.size();
        let sent_before = comm.sent();
        let mut before = [store.len() as i64];
        comm.sum_i64(&mut before);
        let t_start = std::time::Instant::now();
        // 1. Occupied cells of this rank with their (+, −) counts.
        let cells_of = cells;
        self.bin(cells, store);
        let cells = self.table.len();
        let t_binned = std::time::Instant::now();
        // 2. Global decision per cell: on one rank straight from the local counts, else from
        //    the owners of the keys.
        self.decision.clear();
        self.decision.resize(cells, Decision::default());
        // Cells whose owner is this rank hold all their particles here (`engine::home`):
        // when that is so for every cell on every rank, the local counts are the global ones.
        let me = comm.rank();
        let all_local = ranks == 1
            || !comm.any(
                self.table
                    .keys
                    .iter()
                    .any(|&key| cells_of.owner(key, ranks) != me),
            );
        if all_local {
            for c in 0..cells {
                if let Some(d) = decide(self.plus[c], self.minus[c], 1, 1) {
                    self.decision[c] = d;
                }
            }
        } else {
            self.decide_with_owners(comm, cells_of);
        }
        let t_decided = std::time::Instant::now();
        // 3. Drop minority particles; gather the majority candidates per cell; select
        //    where this rank holds all of a cell's majority particles.
        self.gather(setup, store, interval);
        for c in 0..cells {
            let d = self.decision[c];
            if !d.mixed || d.threshold || d.quota == 0 {
                continue;
            }
            let range = self.candidates(c);
            let q = d.quota as usize;
            let list = &mut self.cand[range];
            if q < list.len() {
                // (priority, index) pairs are distinct: the q smallest are one set.
                list.select_nth_unstable(q);
                for e in &list[q..] {
                    self.keep[e.1] = false;
                }
            }
        }
        let t_selected = std::time::Instant::now();
        // 4. Threshold exchange for cells whose majority particles live on several ranks.
        if ranks > 1 {
            self.thresholds(comm, cells_of);
        }
        let t_thresholds = std::time::Instant::now();
        store.retain(&self.keep);
        let t_end = std::time::Instant::now();
        let mut after = [store.len() as i64];
        comm.sum_i64(&mut after);
        let s = |a: std::time::Instant, b: std::time::Instant| (b - a).as_secs_f64();
        let traffic = comm.sent() - sent_before;
        Report {
            before: before[0] as u64,
            after: after[0] as u64,
            local_cells: cells as u64,
            words_sent: traffic.words,
            messages_sent: traffic.messages,
            binning_s: s(t_start, t_binned),
            reduction_s: s(t_binned, t_decided) + s(t_selected, t_thresholds),
            selection_s: s(t_decided, t_selected) + s(t_thresholds, t_end),
        }
    }

    /// Fill `table` with the occupied cells of `store`, `cell_of` with each particle's cell
    /// and `plus`/`minus` with the signs counted per cell.
    fn bin(&mut self, cells: Cells, store: &Store) {
        let n = store.len();
        let threads = rayon::current_num_threads();
        if threads > 1 && matches!(cells, Cells::Level(..)) {
            // Keys in parallel, then the (cache-resident) counting pass.
            const CHUNK: usize = 1 << 14;
            self.keys.clear();
            self.keys.resize(n, 0);
            self.keys
                .par_chunks_mut(CHUNK)
                .enumerate()
                .for_each(|(j, chunk)| {
                    for (i, key) in chunk.iter_mut().enumerate() {
                        let p = j * CHUNK + i;
                        *key = cells.key(store, p);
                    }
                });
        }
        if let Cells::Leaves {
            leaf_key, cell_of, ..
        } = cells
        {
            // One hash per finest cell: its leaf's local index; particles then look it up.
            self.table.clear(2 * self.table.len());
            self.plus.clear();
            self.minus.clear();
            self.cell_of.clear();
            self.cell_of.reserve(n);
            self.leaf_of.clear();
            for &key in leaf_key {
                let c = self.table.insert(key);
                if c == self.plus.len() {
                    self.plus.push(0);
                    self.minus.push(0);
                }
                self.leaf_of.push(c);
            }
            // Batches: the random reads of a batch (its leaves, then their counts) are
            // issued together so that their cache misses overlap.
            for start in (0..n).step_by(BATCH) {
                let end = (start + BATCH).min(n);
                for &fine in &cell_of[start..end] {
                    prefetch(&self.leaf_of, fine);
                }
                for p in start..end {
                    let c = self.leaf_of[cell_of[p]];
                    prefetch(
                        if store.sign[p] > 0 {
                            &self.plus
                        } else {
                            &self.minus
                        },
                        c,
                    );
                    self.cell_of.push(c);
                }
                for p in start..end {
                    let c = self.cell_of[p];
                    if store.sign[p] > 0 {
                        self.plus[c] += 1;
                    } else {
                        self.minus[c] += 1;
                    }
                }
            }
            return;
        }
        let keys = &self.keys;
        count_cells(
            &mut self.table,
            &mut self.plus,
            &mut self.minus,
            &mut self.cell_of,
            &store.sign[..n],
            |p| match cells {
                Cells::Level(..) if threads > 1 => keys[p],
                _ => cells.key(store, p),
            },
        );
    }

    /// Local majority particles of cell c: their range in `cand` (after `gather`).
    fn candidates(&self, c: usize) -> std::ops::Range<usize> {
        let d = self.decision[c];
        if !takes_part(d) {
            return 0..0;
        }
        let count = if d.major > 0 {
            self.plus[c]
        } else {
            self.minus[c]
        } as usize;
        self.next[c] - count..self.next[c]
    }

    /// One pass over the store: `keep` false for particles of mixed cells that cannot
    /// survive (minority sign, or a cell that keeps none), and the (priority, index) of the
    /// others into `cand`, grouped per cell by a counting pass.
    fn gather(&mut self, setup: &Setup, store: &Store, interval: u64) {
        let cells = self.table.len();
        self.next.clear();
        let mut total = 0usize;
        for c in 0..cells {
            self.next.push(total);
            let d = self.decision[c];
            if takes_part(d) {
                total += if d.major > 0 {
                    self.plus[c]
                } else {
                    self.minus[c]
                } as usize;
            }
        }
        self.cand.clear();
        self.cand.resize(total, (0, 0));
        self.keep.clear();
        self.keep.resize(store.len(), true);
        for p in 0..store.len() {
            // The decision of a particle further on, asked for now (its cell is random).
            if let Some(&ahead) = self.cell_of.get(p + BATCH) {
                prefetch(&self.decision, ahead);
                prefetch(&self.next, ahead);
            }
            let c = self.cell_of[p];
            let d = self.decision[c];
            if !d.mixed {
                continue;
            }
            if store.sign[p] != d.major || !takes_part(d) {
                self.keep[p] = false;
                continue;
            }
            self.cand[self.next[c]] = (priority(setup, store, p, interval), p);
            self.next[c] += 1;
        }
    }

    /// Send (key, +, −) of every local cell to its owner; the owners sum them and answer
    /// mixed cells with (majority sign, number kept, whether a threshold is needed).
    /// Fills `decision`.
    fn decide_with_owners(&mut self, comm: &dyn Comm, cells: Cells) {
        let ranks = comm.size();
        self.owners
            .exchange(comm, &self.table.keys, &self.plus, &self.minus, |key| {
                cells.owner(key, ranks)
            });
        // Owner: each entry's cell decided from the global counts and holders.
        let own = &self.owners;
        let mut reply = vec![Vec::new(); ranks];
        for (r, entries) in own.entries.iter().enumerate() {
            for (j, &g) in entries.iter().enumerate() {
                let (hp, hm) = own.holders[g];
                if let Some(d) = decide(own.plus[g], own.minus[g], hp, hm) {
                    let mode = if d.threshold {
                        NEED_THRESHOLD
                    } else {
                        SELECT_LOCAL
                    };
                    reply[r].extend_from_slice(&[j as u64, d.major as i64 as u64, d.quota, mode]);
                }
            }
        }
        let decisions = comm.exchange(&reply);
        for (o, msg) in decisions.iter().enumerate() {
            for w in msg.chunks_exact(4) {
                let c = self.owners.sent[o][w[0] as usize];
                self.decision[c] = Decision {
                    mixed: true,
                    major: w[1] as i64 as i8,
                    threshold: w[3] == NEED_THRESHOLD,
                    quota: w[2],
                };
            }
        }
    }

    /// For cells whose majority particles sit on several ranks: holders send their
    /// candidates' priorities to the owner, which returns the priority of the last survivor
    /// and how many particles at exactly that priority this rank keeps (ties go to lower
    /// ranks first, and on a rank in store order).
    fn thresholds(&mut self, comm: &dyn Comm, cells_of: Cells) {
        let ranks = comm.size();
        let cells = self.table.len();
        let mut ask = vec![Vec::new(); ranks];
        let mut pending = false;
        for c in 0..cells {
            let d = self.decision[c];
            if !(d.mixed && d.threshold) {
                continue;
            }
            let range = self.candidates(c);
            if range.is_empty() {
                continue;
            }
            let key = self.table.keys[c];
            let m = &mut ask[cells_of.owner(key, ranks)];
            m.extend_from_slice(&[key as u64, (key >> 64) as u64, range.len() as u64]);
            m.extend(self.cand[range].iter().map(|e| e.0));
            pending = true;
        }
        if !comm.any(pending) {
            return;
        }
        let asked = comm.exchange(&ask);
        // Owner: (cell, priority, rank) of every candidate it was sent.
        let mut lists: Vec<(usize, u64, usize)> = Vec::new();
        for (r, msg) in asked.iter().enumerate() {
            let mut w = &msg[..];
            while w.len() >= 3 {
                let key = (w[0] as u128) | ((w[1] as u128) << 64);
                let g = self.owners.table.get(key).expect("asked keys are owned");
                let count = w[2] as usize;
                lists.extend(w[3..3 + count].iter().map(|&pr| (g, pr, r)));
                w = &w[3 + count..];
            }
        }
        lists.sort_unstable();
        let mut answer = vec![Vec::new(); ranks];
        let mut i = 0;
        while i < lists.len() {
            let g = lists[i].0;
            let mut j = i;
            while j < lists.len() && lists[j].0 == g {
                j += 1;
            }
            let quota = self.owners.plus[g].abs_diff(self.owners.minus[g]) as usize;
            let cell = &lists[i..j];
            let threshold = cell[quota - 1].1;
            let below = cell.iter().filter(|e| e.1 < threshold).count();
            let mut ties_left = quota - below;
            let mut ranks_here: Vec<usize> = cell.iter().map(|e| e.2).collect();
            ranks_here.sort_unstable();
            ranks_here.dedup();
            let key = self.owners.table.keys[g];
            for r in ranks_here {
                let ties_on_r = cell.iter().filter(|e| e.2 == r && e.1 == threshold).count();
                let give = ties_on_r.min(ties_left);
                ties_left -= give;
                answer[r].extend_from_slice(&[
                    key as u64,
                    (key >> 64) as u64,
                    threshold,
                    give as u64,
                ]);
            }
            i = j;
        }
        let answers = comm.exchange(&answer);
        for msg in &answers {
            for w in msg.chunks_exact(4) {
                let key = (w[0] as u128) | ((w[1] as u128) << 64);
                let (threshold, mut ties) = (w[2], w[3]);
                let c = self.table.get(key).expect("answers come for keys we asked");
                // Candidates are in store order: ties are kept first come.
                for &(pr, p) in &self.cand[self.candidates(c)] {
                    if pr < threshold {
                        continue;
                    }
                    if pr == threshold && ties > 0 {
                        ties -= 1;
                        continue;
                    }
                    self.keep[p] = false;
                }
            }
        }
    }
}

/// True when the local majority particles of a decided cell need a priority: a selection
/// here or a threshold from the owner (not when the cell keeps none of them).
fn takes_part(d: Decision) -> bool {
    d.mixed && d.major != 0 && (d.threshold || d.quota > 0)
}

/// The decision for a cell with global counts (plus, minus) whose + and − particles sit on
/// `holders_plus` and `holders_minus` ranks: `None` unless both signs are present; else the
/// majority sign (0 when they cancel), the number of majority particles kept, and whether
/// the majority particles are spread over several ranks (a threshold is needed).
fn decide(plus: u64, minus: u64, holders_plus: u64, holders_minus: u64) -> Option<Decision> {
    if plus == 0 || minus == 0 {
        return None;
    }
    let net = plus as i64 - minus as i64;
    let quota = net.unsigned_abs();
    let major = net.signum() as i8;
    let holders_of_major = if major > 0 {
        holders_plus
    } else {
        holders_minus
    };
    Some(Decision {
        mixed: true,
        major,
        threshold: !(quota == 0 || holders_of_major == 1),
        quota,
    })
}

/// Annihilate in place with fresh buffers (see [`Annihilator::run`]; a run keeps one
/// [`Annihilator`] instead).
pub fn annihilate(
    setup: &Setup,
    mesh: &CellMesh,
    store: &mut Store,
    interval: u64,
    comm: &dyn Comm,
) -> Report {
    Annihilator::default().run(setup, Cells::Level(mesh, 0), store, interval, comm)
}
