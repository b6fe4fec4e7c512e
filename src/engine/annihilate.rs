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

use crate::engine::comm::Comm;
pub use crate::physics::cells::CellMesh;
use crate::physics::numerics::Setup;
use crate::physics::particles::Store;
use crate::physics::rng::{self, tag};

use rayon::prelude::*;

fn owner(key: u128, ranks: usize) -> usize {
    (rng::hash(&[key as u64, (key >> 64) as u64]) % ranks as u64) as usize
}

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
    /// Occupied cells on this rank and 64-bit words this rank sent.
    pub local_cells: u64,
    pub words_sent: u64,
    /// Wall seconds of this rank in: keys and sort; the exchanges with the owners; the
    /// selection of survivors.
    pub binning_s: f64,
    pub reduction_s: f64,
    pub selection_s: f64,
}

const SELECT_LOCAL: u64 = 1;
const NEED_THRESHOLD: u64 = 2;

/// Annihilate in place. `interval` keys the priorities.
pub fn annihilate(
    setup: &Setup,
    mesh: &CellMesh,
    store: &mut Store,
    interval: u64,
    comm: &dyn Comm,
) -> Report {
    let ranks = comm.size();
    let mut before = [store.len() as i64];
    comm.sum_i64(&mut before);
    let t_start = std::time::Instant::now();
    // 1. Keys, sorted; runs of equal keys are the occupied cells. Each entry carries the
    //    particle's priority and sign (they fill the padding of the 32-byte entry), so that
    //    the passes over the cells below never read the store at random.
    let mut order: Vec<(u128, u64, u32, i8)> = (0..store.len())
        .into_par_iter()
        .map(|p| {
            (
                mesh.key(store.xs(p), store.ks(p), store.id[p]),
                priority(setup, store, p, interval),
                p as u32,
                store.sign[p],
            )
        })
        .collect();
    order.par_sort_unstable();
    let mut runs: Vec<(u128, usize, usize, u32, u32)> = Vec::new(); // key, from, to, plus, minus
    let mut a = 0;
    while a < order.len() {
        let key = order[a].0;
        let mut b = a;
        let (mut plus, mut minus) = (0u32, 0u32);
        while b < order.len() && order[b].0 == key {
            if order[b].3 > 0 {
                plus += 1;
            } else {
                minus += 1;
            }
            b += 1;
        }
        runs.push((key, a, b, plus, minus));
        a = b;
    }
    let t_binned = std::time::Instant::now();
    // 2. (key, +, −) to owners.
    let mut send = vec![Vec::new(); ranks];
    for &(key, _, _, plus, minus) in &runs {
        let m = &mut send[owner(key, ranks)];
        m.extend_from_slice(&[key as u64, (key >> 64) as u64, plus as u64, minus as u64]);
    }
    let mut words = send.iter().map(|v| v.len() as u64).sum::<u64>();
    let recv = comm.exchange(&send);
    // 3. Owner: sum per key, decide mixed cells.
    let mut entries: Vec<(u128, usize, u64, u64)> = Vec::new();
    for (r, msg) in recv.iter().enumerate() {
        for w in msg.chunks_exact(4) {
            entries.push(((w[0] as u128) | ((w[1] as u128) << 64), r, w[2], w[3]));
        }
    }
    entries.sort_unstable();
    let mut reply = vec![Vec::new(); ranks];
    let mut i = 0;
    while i < entries.len() {
        let key = entries[i].0;
        let mut j = i;
        let (mut plus, mut minus) = (0u64, 0u64);
        while j < entries.len() && entries[j].0 == key {
            plus += entries[j].2;
            minus += entries[j].3;
            j += 1;
        }
        if plus > 0 && minus > 0 {
            let net = plus as i64 - minus as i64;
            let keep = net.unsigned_abs();
            let major: i64 = net.signum();
            let holders_of_major = entries[i..j]
                .iter()
                .filter(|e| if major > 0 { e.2 > 0 } else { e.3 > 0 })
                .count();
            for e in &entries[i..j] {
                let mode = if keep == 0 || holders_of_major == 1 {
                    SELECT_LOCAL
                } else {
                    NEED_THRESHOLD
                };
                reply[e.1].extend_from_slice(&[
                    key as u64,
                    (key >> 64) as u64,
                    major as u64,
                    keep,
                    mode,
                ]);
            }
        }
        i = j;
    }
    words += reply.iter().map(|v| v.len() as u64).sum::<u64>();
    let decisions = comm.exchange(&reply);
    let t_decided = std::time::Instant::now();
    // 4. Holders: drop minority particles; select majority ones locally or ask for a threshold.
    let run_of = |key: u128| {
        runs.binary_search_by(|r| r.0.cmp(&key))
            .expect("owner replies only for keys we sent")
    };
    let mut keep = vec![true; store.len()];
    let mut ask = vec![Vec::new(); ranks];
    let mut pending: Vec<(u128, usize, i8)> = Vec::new(); // key, run index, majority sign
    for msg in &decisions {
        for w in msg.chunks_exact(5) {
            let key = (w[0] as u128) | ((w[1] as u128) << 64);
            let (major, quota, mode) = (w[2] as i64 as i8, w[3], w[4]);
            let ri = run_of(key);
            let (_, from, to, _, _) = runs[ri];
            let mut mine: Vec<(u64, usize)> = Vec::new();
            for &(_, pr, p, sign) in &order[from..to] {
                let p = p as usize;
                if sign != major {
                    keep[p] = false;
                } else {
                    mine.push((pr, p));
                }
            }
            if mode == SELECT_LOCAL {
                mine.sort_unstable();
                for &(_, p) in mine.iter().skip(quota as usize) {
                    keep[p] = false;
                }
            } else if !mine.is_empty() {
                let m = &mut ask[owner(key, ranks)];
                m.extend_from_slice(&[key as u64, (key >> 64) as u64, mine.len() as u64]);
                m.extend(mine.iter().map(|e| e.0));
                pending.push((key, ri, major));
            }
        }
    }
    pending.sort_unstable();
    let t_selected = std::time::Instant::now();
    // 5. Threshold exchange for cells whose majority particles live on several ranks.
    if comm.any(!pending.is_empty()) {
        words += ask.iter().map(|v| v.len() as u64).sum::<u64>();
        let asked = comm.exchange(&ask);
        // key → (priority, rank) lists
        let mut lists: Vec<(u128, u64, usize)> = Vec::new();
        for (r, msg) in asked.iter().enumerate() {
            let mut w = &msg[..];
            while w.len() >= 3 {
                let key = (w[0] as u128) | ((w[1] as u128) << 64);
                let c = w[2] as usize;
                for &pr in &w[3..3 + c] {
                    lists.push((key, pr, r));
                }
                w = &w[3 + c..];
            }
        }
        lists.sort_unstable();
        // keep counts per key: recompute from the cell totals we own
        let mut totals: Vec<(u128, u64)> = Vec::new();
        let mut i = 0;
        while i < entries.len() {
            let key = entries[i].0;
            let (mut plus, mut minus) = (0u64, 0u64);
            while i < entries.len() && entries[i].0 == key {
                plus += entries[i].2;
                minus += entries[i].3;
                i += 1;
            }
            totals.push((key, (plus as i64 - minus as i64).unsigned_abs()));
        }
        let mut answer = vec![Vec::new(); ranks];
        let mut i = 0;
        while i < lists.len() {
            let key = lists[i].0;
            let mut j = i;
            while j < lists.len() && lists[j].0 == key {
                j += 1;
            }
            let quota = totals[totals
                .binary_search_by(|t| t.0.cmp(&key))
                .expect("asked keys are owned")]
            .1 as usize;
            let cell = &lists[i..j];
            let threshold = cell[quota - 1].1;
            let below = cell.iter().filter(|e| e.1 < threshold).count();
            let mut ties_left = quota - below;
            let mut ranks_here: Vec<usize> = cell.iter().map(|e| e.2).collect();
            ranks_here.sort_unstable();
            ranks_here.dedup();
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
        words += answer.iter().map(|v| v.len() as u64).sum::<u64>();
        let answers = comm.exchange(&answer);
        for msg in &answers {
            for w in msg.chunks_exact(4) {
                let key = (w[0] as u128) | ((w[1] as u128) << 64);
                let (threshold, mut ties) = (w[2], w[3]);
                let Ok(pi) = pending.binary_search_by(|e| e.0.cmp(&key)) else {
                    continue;
                };
                let (_, ri, major) = pending[pi];
                let (_, from, to, _, _) = runs[ri];
                let mut mine: Vec<(u64, usize)> = order[from..to]
                    .iter()
                    .filter(|e| e.3 == major && keep[e.2 as usize])
                    .map(|e| (e.1, e.2 as usize))
                    .collect();
                mine.sort_unstable();
                for (pr, p) in mine {
                    if pr < threshold {
                        continue;
                    }
                    if pr == threshold && ties > 0 {
                        ties -= 1;
                        continue;
                    }
                    keep[p] = false;
                }
            }
        }
    }
    let t_thresholds = std::time::Instant::now();
    store.retain(&keep);
    let t_end = std::time::Instant::now();
    let mut after = [store.len() as i64];
    comm.sum_i64(&mut after);
    let s = |a: std::time::Instant, b: std::time::Instant| (b - a).as_secs_f64();
    Report {
        before: before[0] as u64,
        after: after[0] as u64,
        local_cells: runs.len() as u64,
        words_sent: words,
        binning_s: s(t_start, t_binned),
        reduction_s: s(t_binned, t_decided) + s(t_selected, t_thresholds),
        selection_s: s(t_decided, t_selected) + s(t_thresholds, t_end),
    }
}

/// Even out particle counts over ranks (global order: rank, then position in the store).
/// Returns the 64-bit words this rank sent.
pub fn rebalance(store: &mut Store, comm: &dyn Comm) -> u64 {
    let ranks = comm.size();
    if ranks == 1 {
        return 0;
    }
    let counts: Vec<u64> = comm
        .gather_all(&[store.len() as u64])
        .into_iter()
        .map(|v| v[0])
        .collect();
    let total: u64 = counts.iter().sum();
    let me = comm.rank();
    let start: u64 = counts[..me].iter().sum();
    let bound = |r: usize| total * r as u64 / ranks as u64;
    let mut send = vec![Vec::new(); ranks];
    let len = store.len() as u64;
    let mut kept = Store::new(store.n);
    for r in 0..ranks {
        let (a, b) = (bound(r).max(start), bound(r + 1).min(start + len));
        if a >= b {
            continue;
        }
        let (fa, fb) = ((a - start) as usize, (b - start) as usize);
        if r == me {
            let mut w = Vec::new();
            store.pack(fa, fb, &mut w);
            kept.unpack(&w);
        } else {
            store.pack(fa, fb, &mut send[r]);
        }
    }
    let sent = send.iter().map(|v| v.len() as u64).sum();
    let recv = comm.exchange(&send);
    *store = kept;
    for msg in &recv {
        store.unpack(msg);
    }
    sent
}
