//! Where particles live between annihilations (docs/method.md §3, "Ranks own regions of
//! phase space"). Every cell of the nested mesh at [`HOME_LEVEL`] (2^HOME_LEVEL finest
//! cells per coordinate) belongs to one rank, a hash of its key; before each annihilation
//! every particle moves to the owner of its home cell. A cell of annihilation no coarser
//! than the home cells then lies on one rank: its counts and its survivors are decided
//! there without sending anything, and each finest cell is held by one rank only, so the
//! words a rank sends fall as 1/P at a fixed problem size instead of every rank sending
//! nearly every occupied cell. Only coarser merged cells still gather counts across ranks.
//!
//! Placement changes which rank holds a particle, never which particles survive: the
//! decisions are functions of global counts and of priorities keyed by the particle, so
//! results stay bit-identical on any number of ranks.

use crate::engine::comm::Comm;
use crate::physics::cells::CellMesh;
use crate::physics::particles::Store;
use crate::physics::rng;

/// Level of the home cells: 8 finest cells per coordinate. Coarser homes move fewer
/// particles (a child moves only when its transfer leaves the home cell) but balance the
/// ranks over fewer cells.
pub const HOME_LEVEL: u32 = 3;

fn rank_of(key: u128, ranks: usize) -> usize {
    (rng::hash(&[key as u64, (key >> 64) as u64, 0x686f_6d65]) % ranks as u64) as usize
}

/// The rank that decides a cell of annihilation: the owner of its home cell when the cell
/// is no coarser than a home cell (then it holds only particles of that home), else a hash
/// of the cell itself.
pub fn cell_owner(mesh: &CellMesh, key: u128, ranks: usize) -> usize {
    if ranks == 1 {
        return 0;
    }
    let level = mesh.level_of(key);
    rank_of(mesh.lift(key, level.max(HOME_LEVEL)), ranks)
}

/// The owner of particle p's home cell.
#[inline]
pub fn home_of(mesh: &CellMesh, store: &Store, p: usize, ranks: usize) -> usize {
    rank_of(
        mesh.key_at(store.xs(p), store.ks(p), store.id[p], HOME_LEVEL),
        ranks,
    )
}

/// Move every particle to the owner of its home cell (one personalised exchange). The
/// particles that stay keep their order; arrivals are appended in the order of their
/// sending rank.
pub fn migrate(mesh: &CellMesh, store: &mut Store, comm: &dyn Comm) {
    let ranks = comm.size();
    if ranks == 1 {
        return;
    }
    let me = comm.rank();
    let mut send = vec![Vec::new(); ranks];
    let mut keep = vec![true; store.len()];
    for (p, stay) in keep.iter_mut().enumerate() {
        let r = home_of(mesh, store, p, ranks);
        if r != me {
            store.pack(p, p + 1, &mut send[r]);
            *stay = false;
        }
    }
    store.retain(&keep);
    for msg in &comm.exchange(&send) {
        store.unpack(msg);
    }
}
