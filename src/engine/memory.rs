//! The memory model of a run: the resident bytes one rank needs at the run's peak particle
//! count, term by term, each from the data structure that holds it (docs/method.md §3,
//! "Memory forecast"). `check` prints these terms and refuses a job whose total does not
//! fit in the memory available per rank; `run` applies the same check before it starts.
//!
//! Every count below is resident bytes (pages actually written), not reserved capacity: a
//! `Vec` that grows by reallocation of a large block is moved by the kernel (mremap) and
//! only its written part is resident, so a vector's resident size follows the largest
//! length it ever had, not its capacity.
//!
//! Stated approximations (each can move the measured peak resident size away from
//! [`Forecast::total`]; the test in `tests/memory.rs` derives its tolerance from them):
//! - the peak particle count comes from the pilot (`engine::pilot`): its growth per
//!   step and survival at the pilot's size and time, projected over the whole job;
//! - occupied annihilation cells at the peak count are extrapolated from cell counts of
//!   thinned copies of the pilot's particles (a power law, an over-estimate when the
//!   occupancy saturates);
//! - the annihilation candidates are bounded by (1 + s)/2 of the particles, s the surviving
//!   fraction of one pass (the exact count lies between (1 − s)/2 and (1 + s)/2);
//! - allocator overhead and fragmentation (glibc arenas per thread, freed blocks not
//!   returned) are not modelled;
//! - the run-time resident size of code, libraries and MPI is measured in the process that
//!   forecasts (`check` or `run` at its start), before the job's structures exist.

use crate::physics::kernel::KernelTable;
use crate::physics::numerics::{Setup, fixed_sizes};
use std::mem::size_of;

const MIB: f64 = (1u64 << 20) as f64;

/// Bytes per particle of the particle store (`physics::particles::Store`): N coordinates x
/// and N wavevectors k (`f64` each), the identity (`u64`) and the sign (`i8`). Bytes.
pub fn store_bytes_per_particle(n: usize) -> f64 {
    (2 * n * size_of::<f64>() + size_of::<u64>() + size_of::<i8>()) as f64
}

/// Bytes per particle of the serialised form used to move particles between ranks
/// (`Store::pack`: id, sign, x.., k.., one `u64` word each).
pub fn packed_bytes_per_particle(n: usize) -> f64 {
    ((2 + 2 * n) * size_of::<u64>()) as f64
}

/// The sizes of today's annihilation buffers (`engine::annihilate::Annihilator`), which
/// live from one pass to the next, so they stay resident at their largest size. The fields,
/// and what each costs:
///
/// | field | per | bytes |
/// |---|---|---|
/// | `cell_of: Vec<usize>` | particle | 8 |
/// | `keep: Vec<bool>` | particle | 1 |
/// | `keys: Vec<u128>` (only with more than one thread and fixed resolution) | particle | 16 |
/// | `cand: Vec<(u64, usize)>` | candidate (majority particle of a mixed cell) | 16 |
/// | `table.keys: Vec<u128>` | occupied cell | 16 |
/// | `plus`, `minus: Vec<u64>` | occupied cell | 16 |
/// | `decision: Vec<Decision>` (u64, bool, i8, bool: 16 with padding) | occupied cell | 16 |
/// | `next: Vec<usize>` | occupied cell | 8 |
/// | `table.slots: Vec<Slot>` (3 × u64) | hash slot | 24 |
/// | owner side, several ranks: `owned` keys and slots, `owned_plus`, `owned_minus`, `owned_holders` (2 × u64), `sent_cells`, and `entry_cell` while deciding | occupied cell sent | 16 + 16 + 16 + 8 + 8 (+ owned slots) |
///
/// The hash table has a power-of-two number of slots, at least 1024 and at least twice
/// the keys (it doubles when half full): see [`hash_slots`].
///
/// With adaptive resolution (`engine::resolution::Resolution`, the default) the pass first
/// chooses the cells:
///
/// | field | per | bytes |
/// |---|---|---|
/// | `cell_of: Vec<usize>` | particle | 8 |
/// | `fine` keys and slots, `plus`, `minus`, `leaf_key` | finest occupied cell | 16 + 16 + 16 (+ slots) |
/// | annihilator `leaf_of: Vec<usize>` (leaf index of each finest cell) | finest occupied cell | 8 |
/// | `owned` keys and slots, `owned_plus`, `owned_minus` | finest cell owned | 16 + 16 (+ slots) |
/// | `tree.nodes: Vec<Node>` (u64, u64, usize, u64, u128, u16: 64 with alignment) | node of any level | 64 |
/// | `tree.leaf: Vec<[u8; RUNGS]>` | node of any level | `RUNGS` |
/// | `tree.tables` keys and slots | node above the finest level | 16 (+ slots) |
///
/// The tree has one node per occupied cell of every level of the merge tree; the pilot
/// counts them on its own particles (see [`TREE_NODE_BYTES`]).
///
/// When annihilation changes, update this table and [`AnnihilatorBytes`]; the pilot itself
/// calls the run's own step, so the counts it measures follow the code without edits.
#[derive(Clone, Copy, Debug)]
pub struct AnnihilatorBytes {
    /// Bytes per particle binned (cell index and keep flag).
    pub per_particle: f64,
    /// Extra bytes per particle when keys are computed by several threads.
    pub per_particle_threaded: f64,
    /// Bytes per candidate (priority and index).
    pub per_candidate: f64,
    /// Bytes per occupied cell of this rank, beside the hash slots.
    pub per_cell: f64,
    /// Bytes per hash slot.
    pub per_slot: f64,
    /// Bytes per occupied cell sent to its owner (several ranks only), beside the owner's
    /// hash slots.
    pub per_cell_owner: f64,
    /// Adaptive resolution: bytes per particle, and per finest occupied cell (local and
    /// owned, beside their hash slots; the merge tree is not counted).
    pub per_particle_adaptive: f64,
    pub per_cell_adaptive: f64,
}

/// Bytes of one merge-tree node and its leaf marks (`engine::resolution`: `Node` of three
/// u64, a usize, a u128 and a u16, padded to 64; one u8 per rung).
pub const TREE_NODE_BYTES: f64 =
    crate::engine::resolution::NODE_BYTES as f64 + crate::engine::resolution::RUNGS as f64;

/// The per-particle and per-cell byte counts of today's annihilation buffers (see the
/// table of [`AnnihilatorBytes`]).
pub fn annihilator_bytes() -> AnnihilatorBytes {
    let usize_b = size_of::<usize>() as f64;
    let u64_b = size_of::<u64>() as f64;
    let u128_b = size_of::<u128>() as f64;
    // Decision { mixed: bool, major: i8, threshold: bool, quota: u64 }, padded to u64.
    let decision = (size_of::<u64>() + size_of::<u64>()) as f64;
    AnnihilatorBytes {
        per_particle: usize_b + size_of::<bool>() as f64,
        per_particle_threaded: u128_b,
        per_candidate: u64_b + usize_b,
        per_cell: u128_b + 2.0 * u64_b + decision + usize_b,
        per_slot: 3.0 * u64_b,
        // engine::owners: the owned key, plus + minus, holders, the entry and sent indices.
        per_cell_owner: u128_b + 2.0 * u64_b + 2.0 * u64_b + usize_b + usize_b,
        // cell_of (the particles' finest cells; leaf keys are per cell, not per particle).
        per_particle_adaptive: usize_b,
        // fine key, plus + minus, leaf key; at the owners (engine::owners) the owned key,
        // plus + minus, holders, the entry and sent indices; the annihilator's leaf index
        // per finest cell.
        per_cell_adaptive: (u128_b + 2.0 * u64_b + u128_b)
            + (u128_b + 4.0 * u64_b + 2.0 * usize_b)
            + usize_b,
    }
}

/// Slots of the annihilation hash table for `cells` keys: a power of two, at least 1024,
/// doubled whenever more than half full.
pub fn hash_slots(cells: f64) -> f64 {
    let mut slots = 1024.0f64;
    while 2.0 * cells > slots {
        slots *= 2.0;
    }
    slots
}

/// Bytes of the messages of one annihilation exchange per occupied cell sent, several
/// ranks only: (key, +, −) as 4 words in the per-rank send vectors, again in the flat send
/// buffer, in the flat receive buffer and in its per-rank copies (`Comm::exchange`); the
/// replies are at most as large again (mixed cells only).
pub fn exchange_bytes_per_cell() -> f64 {
    let entry = 4.0 * size_of::<u64>() as f64;
    4.0 * entry + 2.0 * entry
}

/// Bytes of the kernel tables as built (values, γ, alias samplers), with the sampler
/// structures themselves.
pub fn table_bytes(t: &KernelTable) -> f64 {
    let sampler = size_of::<Option<rand_distr::weighted::WeightedAliasIndex<f64>>>();
    (t.bytes() + t.points * sampler) as f64
}

/// Bytes one more live particle adds to a rank at the peak: its place in the store and in
/// the annihilation buffers (a candidate at most), its share of the occupied cells
/// (`cells_per_particle`, with two hash slots each), and on several ranks its cells'
/// exchange and its packed copies while it is placed in its home cell.
pub fn bytes_per_live_particle(
    setup: &Setup,
    cells_per_particle: f64,
    threads: usize,
    ranks: usize,
) -> f64 {
    let a = annihilator_bytes();
    let sp = store_bytes_per_particle(setup.n);
    let mut b = sp
        + a.per_particle
        + a.per_candidate
        + cells_per_particle * (a.per_cell + 2.0 * a.per_slot);
    let adaptive = setup.resolution == crate::config::job::Resolution::Adaptive;
    if threads > 1 && !adaptive {
        b += a.per_particle_threaded;
    }
    if adaptive {
        b +=
            a.per_particle_adaptive + cells_per_particle * (a.per_cell_adaptive + 4.0 * a.per_slot);
    }
    if ranks > 1 {
        b += cells_per_particle * (a.per_cell_owner + exchange_bytes_per_cell() + 2.0 * a.per_slot)
            + 2.0 * packed_bytes_per_particle(setup.n)
            + 1.0;
    }
    b
}

/// One term of the forecast.
#[derive(Clone, Debug)]
pub struct Term {
    pub name: &'static str,
    /// What it counts, with the numbers it was computed from.
    pub what: String,
    /// Bytes per rank.
    pub bytes: f64,
}

/// What the memory model needs to know about the run's particles, per rank.
#[derive(Clone, Debug)]
pub struct Load {
    /// Peak particles of one rank (right after the advance that precedes an annihilation).
    pub particles: f64,
    /// Particles of one rank right after that annihilation.
    pub after: f64,
    /// Children born on one rank in the step that reaches the peak.
    pub births: f64,
    /// Occupied annihilation cells of one rank at the peak, at the job's cells.
    pub cells: f64,
    /// Surviving fraction of one annihilation at the job's cells (bounds the candidates).
    pub survival: f64,
    /// Whether the run annihilates at all (no buffers otherwise).
    pub annihilates: bool,
    /// Adaptive resolution: occupied cells of one rank on every level of the merge tree
    /// (level 0 the finest), at the peak; empty with fixed resolution.
    pub tree: Vec<f64>,
    pub ranks: usize,
    pub threads: usize,
    /// Resident bytes of the process before the job's structures exist (code, libraries,
    /// MPI), measured.
    pub runtime: f64,
}

/// The forecast of one rank's peak resident memory, term by term.
#[derive(Clone, Debug)]
pub struct Forecast {
    pub terms: Vec<Term>,
}

impl Forecast {
    /// The model: peak resident bytes of one rank at the given load.
    pub fn new(setup: &Setup, load: &Load) -> Forecast {
        let n = setup.n;
        let sp = store_bytes_per_particle(n);
        let a = annihilator_bytes();
        let p = load.particles;
        let mut terms = vec![Term {
            name: "runtime",
            what: "code, libraries and MPI, measured before the job's structures exist".into(),
            bytes: load.runtime,
        }];
        terms.push(Term {
            name: "sample store",
            what: format!("{p:.3e} samples × {sp} B (x, k: 2N f64; id u64; sign i8)"),
            bytes: p * sp,
        });
        // Children of one step, gathered per chunk before they are appended, and the keep
        // flags of the compaction (one bool per particle).
        terms.push(Term {
            name: "advance",
            what: format!(
                "{:.3e} children of one step × {sp} B + {p:.3e} keep flags × 1 B",
                load.births
            ),
            bytes: load.births * sp + p,
        });
        let cells = if load.annihilates { load.cells } else { 0.0 };
        let adaptive = setup.resolution == crate::config::job::Resolution::Adaptive;
        // The keys of several threads are computed only for whole-level (fixed) cells; the
        // adaptive pass hands the annihilator its leaves per finest cell.
        let per_particle = a.per_particle
            + if load.threads > 1 && !adaptive {
                a.per_particle_threaded
            } else {
                0.0
            };
        let cand = p * (1.0 + load.survival.clamp(0.0, 1.0)) / 2.0;
        let slots = hash_slots(cells);
        if load.annihilates && adaptive {
            let finest = load.tree.first().copied().unwrap_or(cells);
            let slots = 2.0 * hash_slots(finest);
            let nodes: f64 = load.tree.iter().sum();
            let upper: f64 = load.tree.iter().skip(1).sum();
            let tree_slots: f64 = load.tree.iter().skip(1).map(|&c| hash_slots(c)).sum();
            terms.push(Term {
                name: "resolution",
                what: format!(
                    "{p:.3e} particles × {} B + {finest:.3e} finest cells × {} B + {slots:.3e} hash slots × {} B; \
                     merge tree: {nodes:.3e} nodes on {} levels × {TREE_NODE_BYTES} B + {upper:.3e} keys × 16 B + \
                     {tree_slots:.3e} slots × {} B",
                    a.per_particle_adaptive,
                    a.per_cell_adaptive,
                    a.per_slot,
                    load.tree.len(),
                    a.per_slot
                ),
                bytes: p * a.per_particle_adaptive
                    + finest * a.per_cell_adaptive
                    + slots * a.per_slot
                    + nodes * TREE_NODE_BYTES
                    + upper * 16.0
                    + tree_slots * a.per_slot,
            });
        }
        if load.annihilates {
            terms.push(Term {
            name: "annihilation",
            what: format!(
                "{p:.3e} samples × {per_particle} B + {cand:.3e} candidates × {} B + {cells:.3e} cells × {} B + {slots:.3e} hash slots × {} B",
                a.per_candidate, a.per_cell, a.per_slot
            ),
                bytes: p * per_particle
                    + cand * a.per_candidate
                    + cells * a.per_cell
                    + slots * a.per_slot,
            });
        }
        if load.ranks > 1 && load.annihilates {
            let owner_slots = hash_slots(cells);
            let pk = packed_bytes_per_particle(n);
            let exchange =
                cells * (a.per_cell_owner + exchange_bytes_per_cell()) + owner_slots * a.per_slot;
            // Placing the particles in their home cells before the pass (engine::home):
            // at most every particle packed to be sent and as many received, with a keep
            // flag each.
            let placing = p * (2.0 * pk + 1.0);
            terms.push(Term {
                name: "MPI exchange",
                what: format!(
                    "{:.3e} cells × {} B + {owner_slots:.3e} owner slots × {} B; placing {p:.3e} samples × {} B",
                    cells,
                    a.per_cell_owner + exchange_bytes_per_cell(),
                    a.per_slot,
                    2.0 * pk + 1.0
                ),
                bytes: exchange + placing,
            });
        }
        let tables: Vec<&KernelTable> = [&setup.table1, &setup.table2]
            .into_iter()
            .flatten()
            .collect();
        if !tables.is_empty() {
            terms.push(Term {
                name: "kernel tables",
                what: tables
                    .iter()
                    .map(|t| format!("{} points × {} transfers", t.points, 2 * t.cap + 1))
                    .collect::<Vec<_>>()
                    .join(", "),
                bytes: tables.iter().map(|t| table_bytes(t)).sum(),
            });
        }
        for (name, keys, bytes) in fixed_sizes(&setup.job, false, false, load.threads) {
            terms.push(Term {
                name: if name == "estimators" {
                    "histograms"
                } else {
                    "result frames"
                },
                what: keys,
                bytes,
            });
        }
        Forecast { terms }
    }

    /// Peak resident bytes of one rank.
    pub fn total(&self) -> f64 {
        self.terms.iter().map(|t| t.bytes).sum()
    }

    /// Total in MiB.
    pub fn total_mib(&self) -> f64 {
        self.total() / MIB
    }
}

/// A field of /proc/self/status in bytes (e.g. "VmRSS", "VmHWM"); None where unavailable.
pub fn process_status_bytes(field: &str) -> Option<f64> {
    let text = std::fs::read_to_string("/proc/self/status").ok()?;
    text.lines()
        .find(|l| l.starts_with(field) && l[field.len()..].starts_with(':'))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|v| v.parse::<f64>().ok())
        .map(|kib| kib * 1024.0)
}

/// Memory this node can still give, bytes (MemAvailable of /proc/meminfo; MemTotal on
/// kernels without it; 8 GiB when neither is known).
pub fn node_available_memory() -> f64 {
    let text = std::fs::read_to_string("/proc/meminfo").unwrap_or_default();
    let field = |name: &str| {
        text.lines()
            .find(|l| l.starts_with(name))
            .and_then(|l| l.split_whitespace().nth(1))
            .and_then(|v| v.parse::<f64>().ok())
            .map(|kib| kib * 1024.0)
    };
    field("MemAvailable:")
        .or_else(|| field("MemTotal:"))
        .unwrap_or(8.0 * (1u64 << 30) as f64)
}

/// Memory one rank may use, bytes, and where the number comes from: the job's cap
/// (`numerics.memory_limit_mib`) if it has one, else the node's available memory shared
/// by the ranks on the node.
pub fn available_per_rank(setup: &Setup, ranks_on_node: usize) -> (f64, String) {
    match setup.job.numerics.memory_limit_mib {
        Some(m) => (m * MIB, format!("numerics.memory_limit_mib = {m}")),
        None => {
            let avail = node_available_memory();
            let r = ranks_on_node.max(1);
            (
                avail / r as f64,
                format!(
                    "{:.0} MiB available on this node / {r} rank(s) on the node",
                    avail / MIB
                ),
            )
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hash_slots_follow_the_tables_growth_rule() {
        // At least 1024, a power of two, never more than half full.
        assert_eq!(hash_slots(0.0), 1024.0);
        assert_eq!(hash_slots(512.0), 1024.0);
        assert_eq!(hash_slots(513.0), 2048.0);
        assert_eq!(hash_slots(1e6), 2097152.0);
    }

    #[test]
    fn store_bytes_match_the_documented_layout() {
        // 16 N + 9 bytes: physics::particles module docs.
        assert_eq!(store_bytes_per_particle(2), 41.0);
        assert_eq!(
            store_bytes_per_particle(3),
            crate::physics::particles::Store::bytes_per_particle(3) as f64
        );
    }
}
