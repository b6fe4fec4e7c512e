//! Cell counts spread over ranks, summed at each key's owner (docs/method.md §3): every rank
//! sends (key, +, −) of its occupied cells to the rank its key maps to, and the owner sums
//! them per key. Annihilation sends a cell to the owner of its own key, the adaptive
//! resolution to the owner of its coarsest ancestor (so a whole subtree is decided on one
//! rank); both then answer each entry they received from its sender.

use crate::engine::cell_table::CellTable;
use crate::engine::comm::Comm;

/// Both sides of one count exchange, kept from one call to the next.
#[derive(Default)]
pub struct Owners {
    /// Sender side: per destination rank, the local cells sent there, in message order.
    pub sent: Vec<Vec<usize>>,
    /// Owner side: the keys this rank owns, with their global (+, −) counts and how many
    /// ranks hold samples of each sign.
    pub table: CellTable,
    pub plus: Vec<u64>,
    pub minus: Vec<u64>,
    pub holders: Vec<(u64, u64)>,
    /// Owner side: per sending rank, its entries' owned cells in message order.
    pub entries: Vec<Vec<usize>>,
}

impl Owners {
    /// Send (key, +, −) of local cell c (`keys[c]`, `plus[c]`, `minus[c]`) to rank
    /// `owner(keys[c])` and sum what this rank receives.
    pub fn exchange(
        &mut self,
        comm: &dyn Comm,
        keys: &[u128],
        plus: &[u64],
        minus: &[u64],
        owner: impl Fn(u128) -> usize,
    ) {
        let ranks = comm.size();
        let mut send = vec![Vec::new(); ranks];
        self.sent.resize(ranks, Vec::new());
        for s in &mut self.sent {
            s.clear();
        }
        for (c, &key) in keys.iter().enumerate() {
            let o = owner(key);
            send[o].extend_from_slice(&[key as u64, (key >> 64) as u64, plus[c], minus[c]]);
            self.sent[o].push(c);
        }
        let recv = comm.exchange(&send);
        let total: usize = recv.iter().map(|m| m.len() / 4).sum();
        self.table.clear(2 * total);
        self.plus.clear();
        self.minus.clear();
        self.holders.clear();
        self.entries.resize(ranks, Vec::new());
        for (r, msg) in recv.iter().enumerate() {
            self.entries[r].clear();
            for w in msg.chunks_exact(4) {
                let g = self.table.insert((w[0] as u128) | ((w[1] as u128) << 64));
                if g == self.plus.len() {
                    self.plus.push(0);
                    self.minus.push(0);
                    self.holders.push((0, 0));
                }
                self.plus[g] += w[2];
                self.minus[g] += w[3];
                self.holders[g].0 += u64::from(w[2] > 0);
                self.holders[g].1 += u64::from(w[3] > 0);
                self.entries[r].push(g);
            }
        }
    }
}
