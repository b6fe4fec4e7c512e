//! The one seam to MPI. The physics sees only [`Comm`]: rank, size and the few
//! collectives the method needs, all on integers (exact in any order) or raw words.
//! [`Solo`] is the single process; the MPI implementation lives in `engine::mpi`.

pub trait Comm {
    fn rank(&self) -> usize;
    fn size(&self) -> usize;
    /// Element-wise global sum, in place.
    fn sum_i64(&self, v: &mut [i64]);
    /// Global maximum.
    fn max_f64(&self, v: f64) -> f64;
    /// Personalised all-to-all: `send[r]` goes to rank r; returns what each rank sent here.
    fn exchange(&self, send: &[Vec<u64>]) -> Vec<Vec<u64>>;
    /// Words of every rank, in rank order (for small data only).
    fn gather_all(&self, mine: &[u64]) -> Vec<Vec<u64>>;

    /// The concrete communicator, for the one consumer that needs MPI itself (parallel
    /// HDF5 in `io::checkpoint` downcasts to `engine::mpi::World`).
    fn as_any(&self) -> &dyn std::any::Any;

    fn is_root(&self) -> bool {
        self.rank() == 0
    }

    /// Element-wise global sum of 128-bit integers, exact: each value is split into four
    /// 32-bit limbs summed as i64 (no overflow below 2^31 ranks) and recombined.
    fn sum_i128(&self, v: &mut [i128]) {
        let mut limbs: Vec<i64> = Vec::with_capacity(v.len() * 4);
        for &x in v.iter() {
            let u = x as u128;
            for l in 0..4 {
                limbs.push(((u >> (32 * l)) & 0xffff_ffff) as i64);
            }
        }
        self.sum_i64(&mut limbs);
        for (i, x) in v.iter_mut().enumerate() {
            let mut acc: u128 = 0;
            for l in 0..4 {
                acc = acc.wrapping_add((limbs[4 * i + l] as u128) << (32 * l));
            }
            *x = acc as i128;
        }
    }

    /// True on every rank when `flag` is true on any rank.
    fn any(&self, flag: bool) -> bool {
        let mut v = [flag as i64];
        self.sum_i64(&mut v);
        v[0] > 0
    }
}

/// A single process without MPI (unit tests, serial tools).
pub struct Solo;

impl Comm for Solo {
    fn as_any(&self) -> &dyn std::any::Any {
        self
    }
    fn rank(&self) -> usize {
        0
    }
    fn size(&self) -> usize {
        1
    }
    fn sum_i64(&self, _v: &mut [i64]) {}
    fn max_f64(&self, v: f64) -> f64 {
        v
    }
    fn exchange(&self, send: &[Vec<u64>]) -> Vec<Vec<u64>> {
        send.to_vec()
    }
    fn gather_all(&self, mine: &[u64]) -> Vec<Vec<u64>> {
        vec![mine.to_vec()]
    }
}

/// How a personalised all-to-all of 64-bit-length messages is split into rounds whose
/// counts and displacements all fit MPI's 32-bit `int` (the one place the seam narrows).
///
/// Round r carries words [r·c, min((r + 1)·c, total)) of every message, c = `per_pair`
/// words per rank pair. With P ranks and c ≤ i32::MAX / P every count of a round is ≤ c
/// and every displacement (a sum of at most P − 1 counts) and the round's total are
/// ≤ P·c ≤ i32::MAX, so no conversion to `int` can wrap.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Rounds {
    /// Largest number of words one rank sends one other rank in one round (≥ 1).
    per_pair: u64,
    ranks: usize,
}

/// The counts and displacements of one round, for one side (send or receive), in MPI's
/// `int`, and where each rank's part of the round sits in its whole message.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RoundLayout {
    pub counts: Vec<i32>,
    pub displs: Vec<i32>,
    /// Per rank: the first word of its message this round carries.
    pub from: Vec<u64>,
}

impl RoundLayout {
    /// Words of the whole round on this side: Σ counts.
    pub fn total(&self) -> usize {
        self.counts.iter().map(|&c| c as usize).sum()
    }
}

impl Rounds {
    /// Rounds for `ranks` ranks of at most `chunk_words` words per rank pair, lowered to
    /// i32::MAX / ranks so that a whole round fits 32-bit displacements.
    pub fn new(chunk_words: u64, ranks: usize) -> Self {
        let cap = i32::MAX as u64 / ranks.max(1) as u64;
        Rounds {
            per_pair: chunk_words.min(cap).max(1),
            ranks: ranks.max(1),
        }
    }

    /// Largest number of words one rank sends one other rank in one round.
    pub fn per_pair(&self) -> u64 {
        self.per_pair
    }

    /// Rounds needed for messages of these lengths (the maximum over all of them; every
    /// rank must take part in the global maximum of this).
    pub fn needed(&self, lengths: &[u64]) -> u64 {
        lengths
            .iter()
            .map(|&c| c.div_ceil(self.per_pair))
            .max()
            .unwrap_or(0)
    }

    /// The part (first word, length) of a message of `total` words carried by `round`.
    pub fn part(&self, total: u64, round: u64) -> (u64, u64) {
        let from = round.saturating_mul(self.per_pair).min(total);
        (from, (total - from).min(self.per_pair))
    }

    /// Counts and displacements of `round` for messages of `lengths` words, one per rank
    /// (as many as the ranks these rounds were made for).
    pub fn layout(&self, lengths: &[u64], round: u64) -> RoundLayout {
        debug_assert_eq!(lengths.len(), self.ranks);
        let mut out = RoundLayout {
            counts: Vec::with_capacity(lengths.len()),
            displs: Vec::with_capacity(lengths.len()),
            from: Vec::with_capacity(lengths.len()),
        };
        // Kept in u64 and narrowed per entry: each value is ≤ ranks · per_pair ≤ i32::MAX.
        let mut at = 0u64;
        for &len in lengths {
            let (from, n) = self.part(len, round);
            out.counts.push(narrow(n));
            out.displs.push(narrow(at));
            out.from.push(from);
            at += n;
        }
        out
    }
}

/// A count or displacement of one round as MPI's `int`; within range by construction
/// ([`Rounds::new`] with one message per rank).
fn narrow(v: u64) -> i32 {
    i32::try_from(v).expect("a round's counts and displacements fit MPI's int")
}

/// Make a local outcome collective: every rank fails when any rank failed (a failing rank
/// keeps its own message), so no rank is left waiting in a collective call.
pub fn agree(comm: &dyn Comm, r: anyhow::Result<()>) -> anyhow::Result<()> {
    let failed = comm.any(r.is_err());
    match r {
        Err(e) => Err(e),
        Ok(()) if failed => Err(crate::SilentError.into()),
        Ok(()) => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Messages past 2^31 words (no data allocated, only their lengths): every round's
    /// counts and displacements fit a 32-bit `int`, the round's total too, and the parts of
    /// each message over all rounds tile it exactly, in order. Lengths are those of a
    /// rebalance of ~3.6·10⁸ N = 2 samples to one peer (6 words each) and beyond.
    #[test]
    fn rounds_split_messages_past_i32() {
        let big = 6 * 360_000_000u64; // 2.16·10⁹ > 2^31 − 1
        for (ranks, lengths) in [
            (2, vec![0, big]),
            (3, vec![big, 5, (1u64 << 33) + 7]),
            (
                4,
                vec![i32::MAX as u64, i32::MAX as u64 + 1, 1, u32::MAX as u64 + 3],
            ),
        ] {
            let plan = Rounds::new(i32::MAX as u64, ranks);
            assert!(plan.per_pair() * ranks as u64 <= i32::MAX as u64);
            let rounds = plan.needed(&lengths);
            let longest = *lengths.iter().max().unwrap();
            assert_eq!(rounds, longest.div_ceil(plan.per_pair()));
            assert!(rounds > 1, "{lengths:?} must need several rounds");
            let mut covered = vec![0u64; ranks];
            for round in 0..rounds {
                let l = plan.layout(&lengths, round);
                let mut at = 0u64;
                for r in 0..ranks {
                    assert!(l.counts[r] >= 0 && l.displs[r] >= 0);
                    assert_eq!(l.displs[r] as u64, at, "displacements are running sums");
                    assert_eq!(l.from[r], covered[r], "parts follow each other");
                    covered[r] += l.counts[r] as u64;
                    at += l.counts[r] as u64;
                }
                assert!(at <= i32::MAX as u64);
                assert_eq!(l.total() as u64, at);
            }
            assert_eq!(covered, lengths, "every word of every message is sent once");
            // One round past the last carries nothing.
            assert_eq!(plan.layout(&lengths, rounds).total(), 0);
        }
    }

    /// A mock of the MPI all-to-all over P in-process ranks, driven through the rounds of
    /// [`Rounds`] with a small chunk: the reassembled messages equal the ones sent.
    #[test]
    fn rounds_reassemble_messages() {
        let ranks = 3;
        // send[s][d]: message from rank s to rank d, of assorted lengths (0 to 40).
        let send: Vec<Vec<Vec<u64>>> = (0..ranks)
            .map(|s| {
                (0..ranks)
                    .map(|d| {
                        (0..(13 * s + 7 * d) as u64 % 41)
                            .map(|w| (s * 1000 + d * 100) as u64 + w)
                            .collect()
                    })
                    .collect()
            })
            .collect();
        let plan = Rounds::new(4, ranks);
        let lengths = |s: usize| -> Vec<u64> { send[s].iter().map(|m| m.len() as u64).collect() };
        let recv_lengths =
            |d: usize| -> Vec<u64> { (0..ranks).map(|s| send[s][d].len() as u64).collect() };
        let rounds = (0..ranks)
            .map(|r| plan.needed(&lengths(r)).max(plan.needed(&recv_lengths(r))))
            .max()
            .unwrap();
        let mut out = vec![vec![Vec::new(); ranks]; ranks];
        for round in 0..rounds {
            // Each rank's flat send buffer of this round.
            let flats: Vec<(Vec<u64>, RoundLayout)> = (0..ranks)
                .map(|s| {
                    let l = plan.layout(&lengths(s), round);
                    let mut flat = Vec::new();
                    for d in 0..ranks {
                        let from = l.from[d] as usize;
                        flat.extend_from_slice(&send[s][d][from..from + l.counts[d] as usize]);
                    }
                    (flat, l)
                })
                .collect();
            for d in 0..ranks {
                let rl = plan.layout(&recv_lengths(d), round);
                let mut recv = vec![0u64; rl.total()];
                for s in 0..ranks {
                    let (flat, sl) = &flats[s];
                    assert_eq!(sl.counts[d], rl.counts[s], "both sides agree on the count");
                    let src = &flat[sl.displs[d] as usize..][..sl.counts[d] as usize];
                    recv[rl.displs[s] as usize..][..rl.counts[s] as usize].copy_from_slice(src);
                }
                for s in 0..ranks {
                    let from = rl.displs[s] as usize;
                    out[d][s].extend_from_slice(&recv[from..from + rl.counts[s] as usize]);
                }
            }
        }
        for s in 0..ranks {
            for d in 0..ranks {
                assert_eq!(out[d][s], send[s][d]);
            }
        }
    }

    #[test]
    fn i128_limbs_roundtrip() {
        let mut v = [-(1i128 << 100) + 12345, 7, -1];
        let before = v;
        Solo.sum_i128(&mut v);
        assert_eq!(v, before);
    }
}
