//! Open-addressing hash table from 128-bit cell keys to dense cell indices, used by
//! annihilation and by its adaptive resolution instead of sorting (docs/method.md §3).

const EMPTY: u64 = u64::MAX;

/// One slot of [`CellTable`]: a key and its dense cell index (`EMPTY` when free).
#[derive(Clone, Copy)]
struct Slot {
    lo: u64,
    hi: u64,
    cell: u64,
}

const FREE: Slot = Slot {
    lo: 0,
    hi: 0,
    cell: EMPTY,
};

/// Open-addressing hash table (linear probing, load ≤ 1/2) from 128-bit cell keys to dense
/// cell indices 0, 1, 2, … in order of first insertion. Keeps its capacity when cleared.
#[derive(Default)]
pub struct CellTable {
    slots: Vec<Slot>,
    /// 64 − log2(slots.len()): the hash's top bits index the slots.
    shift: u32,
    /// Keys by dense cell index.
    pub keys: Vec<u128>,
}

/// Slot hash of a key: both halves multiplied into 64 well-mixed bits (the top bits are used).
#[inline]
fn slot_hash(lo: u64, hi: u64) -> u64 {
    let h = (lo ^ hi.rotate_left(29).wrapping_mul(0x9e37_79b9_7f4a_7c15))
        .wrapping_mul(0xd6e8_feb8_6659_fd93);
    h ^ (h >> 32)
}

/// Ask the CPU to start loading `slice[i]` into cache (a hint: no effect on any result, and
/// nothing on other architectures). Used to overlap the cache misses of random accesses in
/// batches instead of waiting for each.
#[inline(always)]
pub fn prefetch<T>(slice: &[T], i: usize) {
    #[cfg(target_arch = "x86_64")]
    if i < slice.len() {
        // SAFETY: a prefetch never faults and never reads into the program; the address is
        // inside the slice.
        unsafe {
            use std::arch::x86_64::{_MM_HINT_T0, _mm_prefetch};
            _mm_prefetch::<_MM_HINT_T0>(slice.as_ptr().add(i).cast::<i8>());
        }
    }
}

impl CellTable {
    /// Hint the CPU to load the slot where `key`'s probe starts (see [`prefetch`]).
    #[inline(always)]
    pub fn prefetch(&self, key: u128) {
        let i = (slot_hash(key as u64, (key >> 64) as u64) >> self.shift) as usize;
        prefetch(&self.slots, i);
    }

    /// Forget all keys; keep the storage (at least `min_slots` slots, a power of two).
    pub fn clear(&mut self, min_slots: usize) {
        let want = min_slots.max(1024).next_power_of_two();
        if self.slots.len() < want {
            self.slots = vec![FREE; want];
        } else {
            self.slots.fill(FREE);
        }
        self.shift = 64 - self.slots.len().trailing_zeros();
        self.keys.clear();
    }

    /// Number of distinct keys inserted.
    pub fn len(&self) -> usize {
        self.keys.len()
    }

    /// True when no key is stored.
    pub fn is_empty(&self) -> bool {
        self.keys.is_empty()
    }

    /// Dense index of `key`, inserting it when new.
    #[inline]
    pub fn insert(&mut self, key: u128) -> usize {
        let (lo, hi) = (key as u64, (key >> 64) as u64);
        let mask = self.slots.len() - 1;
        let mut i = (slot_hash(lo, hi) >> self.shift) as usize;
        loop {
            let s = self.slots[i];
            if s.cell == EMPTY {
                let c = self.keys.len();
                self.slots[i] = Slot {
                    lo,
                    hi,
                    cell: c as u64,
                };
                self.keys.push(key);
                if 2 * self.keys.len() > self.slots.len() {
                    self.grow();
                }
                return c;
            }
            if s.lo == lo && s.hi == hi {
                return s.cell as usize;
            }
            i = (i + 1) & mask;
        }
    }

    /// Dense index of `key` if present.
    #[inline]
    pub fn get(&self, key: u128) -> Option<usize> {
        let (lo, hi) = (key as u64, (key >> 64) as u64);
        let mask = self.slots.len() - 1;
        let mut i = (slot_hash(lo, hi) >> self.shift) as usize;
        loop {
            let s = self.slots[i];
            if s.cell == EMPTY {
                return None;
            }
            if s.lo == lo && s.hi == hi {
                return Some(s.cell as usize);
            }
            i = (i + 1) & mask;
        }
    }

    /// Double the slots and re-insert every key.
    fn grow(&mut self) {
        let n = self.slots.len() * 2;
        self.slots.clear();
        self.slots.resize(n, FREE);
        self.shift = 64 - n.trailing_zeros();
        let mask = n - 1;
        for (c, &key) in self.keys.iter().enumerate() {
            let (lo, hi) = (key as u64, (key >> 64) as u64);
            let mut i = (slot_hash(lo, hi) >> self.shift) as usize;
            while self.slots[i].cell != EMPTY {
                i = (i + 1) & mask;
            }
            self.slots[i] = Slot {
                lo,
                hi,
                cell: c as u64,
            };
        }
    }
}

/// Particles per batch of [`count_cells`] (their random reads overlap).
pub const BATCH: usize = 32;

/// Bin particles 0 … n − 1 (`signs.len()` = n) by their cell keys `key(p)`: `table` gets the
/// occupied cells (dense indices in order of first appearance), `plus`/`minus` the signs
/// counted per cell, `cell_of` each particle's cell. All four are cleared first. In batches:
/// the keys of a batch first (their slots asked for), then the inserts, then the counts, so
/// that the cache misses of a batch overlap; the result is that of the plain loop.
pub fn count_cells(
    table: &mut CellTable,
    plus: &mut Vec<u64>,
    minus: &mut Vec<u64>,
    cell_of: &mut Vec<usize>,
    signs: &[i8],
    key: impl Fn(usize) -> u128,
) {
    let n = signs.len();
    table.clear(2 * table.len());
    plus.clear();
    minus.clear();
    cell_of.clear();
    cell_of.reserve(n);
    let mut batch = [0u128; BATCH];
    for start in (0..n).step_by(BATCH) {
        let end = (start + BATCH).min(n);
        for (b, p) in (start..end).enumerate() {
            batch[b] = key(p);
            table.prefetch(batch[b]);
        }
        for (b, p) in (start..end).enumerate() {
            let c = table.insert(batch[b]);
            if c == plus.len() {
                plus.push(0);
                minus.push(0);
            }
            prefetch(if signs[p] > 0 { &*plus } else { &*minus }, c);
            cell_of.push(c);
        }
        for p in start..end {
            let c = cell_of[p];
            if signs[p] > 0 {
                plus[c] += 1;
            } else {
                minus[c] += 1;
            }
        }
    }
}
