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
    /// Send `data` (any length) to rank `to` and receive, in the same call, what rank
    /// `from` sends here; every rank calls it in the same round.
    fn shift(&self, to: usize, from: usize, data: &[u64]) -> Vec<u64>;
    /// What this rank has sent to other ranks by [`Comm::shift`] so far (collectives of a
    /// few words, such as the global sums, are not counted).
    fn sent(&self) -> Traffic;
    /// Mean words per message below which [`Comm::exchange`] routes.
    fn route_below_words(&self) -> i64 {
        ROUTE_BELOW_WORDS
    }
    /// Personalised all-to-all: `send[r]` goes to rank r; returns what each rank sent here.
    /// Small messages are routed in ⌈log₂ P⌉ rounds of one message per rank ([`Router`]:
    /// fewer messages, each word forwarded ≈ ½ log₂ P times); large ones go directly in
    /// P − 1 rounds of the pairwise exchange (each word sent once). The choice is made from
    /// the mean message, a global sum, so that every rank takes the same path
    /// ([`Comm::route_below_words`]).
    fn exchange(&self, send: &[Vec<u64>]) -> Vec<Vec<u64>> {
        let (me, ranks) = (self.rank(), self.size());
        if ranks == 1 {
            return send.to_vec();
        }
        let mut total = [send
            .iter()
            .enumerate()
            .filter(|&(r, _)| r != me)
            .map(|(_, m)| m.len() as i64)
            .sum::<i64>()];
        self.sum_i64(&mut total);
        let pairs = (ranks * (ranks - 1)) as i64;
        if total[0] >= self.route_below_words().saturating_mul(pairs) {
            let mut out = vec![Vec::new(); ranks];
            out[me] = send[me].clone();
            for step in 1..ranks {
                let (to, from) = ((me + step) % ranks, (me + ranks - step) % ranks);
                out[from] = self.shift(to, from, &send[to]);
            }
            return out;
        }
        let mut router = Router::new(me, ranks, send);
        for round in 0..Router::rounds(self.size()) {
            let (to, from) = router.partners(round);
            let out = router.outgoing(round);
            let got = self.shift(to, from, &out);
            router.incoming(&got);
        }
        router.finish()
    }
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

/// What one rank sent to the other ranks: 64-bit words and point-to-point messages (a
/// message to itself is not traffic).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Traffic {
    pub words: u64,
    pub messages: u64,
}

impl std::ops::Sub for Traffic {
    type Output = Traffic;
    fn sub(self, o: Traffic) -> Traffic {
        Traffic {
            words: self.words - o.words,
            messages: self.messages - o.messages,
        }
    }
}

impl std::ops::AddAssign for Traffic {
    fn add_assign(&mut self, o: Traffic) {
        self.words += o.words;
        self.messages += o.messages;
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
    fn shift(&self, _to: usize, _from: usize, data: &[u64]) -> Vec<u64> {
        data.to_vec()
    }
    fn sent(&self) -> Traffic {
        Traffic::default()
    }
    fn gather_all(&self, mine: &[u64]) -> Vec<Vec<u64>> {
        vec![mine.to_vec()]
    }
}

/// Mean words per message (per ordered pair of ranks) below which [`Comm::exchange`]
/// routes: 4096 words = 32 KiB, about where sending a message costs as much in latency
/// (a few µs) as in bandwidth (≈ 10 GB/s) on common cluster networks (an order of
/// magnitude, not a measurement of this machine). Below it, fewer messages save more than
/// the forwarded words cost; above it, every word is sent once.
pub const ROUTE_BELOW_WORDS: i64 = 4096;

/// A personalised all-to-all in ⌈log₂ P⌉ rounds of one message per rank (the index
/// algorithm of Bruck, Ho, Kipnis, Upfal & Weathersby, IEEE TPDS 8, 1997). Every message
/// travels as a packet (destination, source, length, words). In round i each rank sends to
/// rank r + 2^i and receives from r − 2^i (mod P) the packets whose remaining distance
/// (destination − r mod P) has bit i set; after the round that bit is clear, so after
/// ⌈log₂ P⌉ rounds every packet is home. Messages per rank grow as log₂ P instead of P − 1;
/// a packet is forwarded once per set bit of its distance (on average ≈ ½ log₂ P hops for
/// destinations spread over all ranks).
pub struct Router {
    me: usize,
    ranks: usize,
    /// Packets held for forwarding, back to back.
    held: Vec<u64>,
    /// Per source rank: its message to this rank.
    arrived: Vec<Vec<u64>>,
}

const HEADER: usize = 3;

impl Router {
    /// Rounds for `ranks` ranks: ⌈log₂ ranks⌉.
    pub fn rounds(ranks: usize) -> u32 {
        ranks.max(1).next_power_of_two().trailing_zeros()
    }

    /// The router of rank `me` with its messages `send[d]` to each rank d.
    pub fn new(me: usize, ranks: usize, send: &[Vec<u64>]) -> Router {
        assert_eq!(send.len(), ranks, "one message per rank");
        let mut arrived = vec![Vec::new(); ranks];
        arrived[me] = send[me].clone();
        let mut held = Vec::with_capacity(
            send.iter()
                .enumerate()
                .filter(|&(d, m)| d != me && !m.is_empty())
                .map(|(_, m)| m.len() + HEADER)
                .sum(),
        );
        for (d, m) in send.iter().enumerate() {
            if d != me && !m.is_empty() {
                held.extend_from_slice(&[d as u64, me as u64, m.len() as u64]);
                held.extend_from_slice(m);
            }
        }
        Router {
            me,
            ranks,
            held,
            arrived,
        }
    }

    /// (rank sent to, rank received from) in `round`.
    pub fn partners(&self, round: u32) -> (usize, usize) {
        let step = (1usize << round) % self.ranks;
        (
            (self.me + step) % self.ranks,
            (self.me + self.ranks - step) % self.ranks,
        )
    }

    /// The packets that leave in `round` (removed from those held).
    pub fn outgoing(&mut self, round: u32) -> Vec<u64> {
        let mut stay = Vec::with_capacity(self.held.len());
        let mut go = Vec::new();
        let mut at = 0;
        while at < self.held.len() {
            let end = at + HEADER + self.held[at + 2] as usize;
            let dest = self.held[at] as usize;
            let distance = (dest + self.ranks - self.me) % self.ranks;
            if distance >> round & 1 == 1 {
                go.extend_from_slice(&self.held[at..end]);
            } else {
                stay.extend_from_slice(&self.held[at..end]);
            }
            at = end;
        }
        self.held = stay;
        go
    }

    /// Take the packets received in a round: this rank's are delivered, the others held.
    pub fn incoming(&mut self, msg: &[u64]) {
        let mut at = 0;
        while at < msg.len() {
            let (dest, src, len) = (msg[at] as usize, msg[at + 1] as usize, msg[at + 2] as usize);
            let end = at + HEADER + len;
            if dest == self.me {
                self.arrived[src] = msg[at + HEADER..end].to_vec();
            } else {
                self.held.extend_from_slice(&msg[at..end]);
            }
            at = end;
        }
    }

    /// What each rank sent here (after the last round).
    pub fn finish(self) -> Vec<Vec<u64>> {
        debug_assert!(self.held.is_empty(), "every packet is delivered");
        self.arrived
    }
}

/// Pieces of at most `chunk` words that a message of `len` words is sent in, so that every
/// count handed to MPI fits its 32-bit `int` (`chunk` ≤ i32::MAX).
pub fn pieces(len: usize, chunk: usize) -> impl Iterator<Item = std::ops::Range<usize>> {
    let chunk = chunk.clamp(1, i32::MAX as usize);
    (0..len.div_ceil(chunk)).map(move |i| i * chunk..((i + 1) * chunk).min(len))
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

    /// The routed all-to-all over P in-process ranks (round by round, each rank's outgoing
    /// packets handed to its partner): every message arrives whole at its destination,
    /// from the right source, in ⌈log₂ P⌉ rounds, for P = 1…9 (powers of two and not).
    #[test]
    fn router_delivers_every_message() {
        for ranks in 1..=9usize {
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
            let mut routers: Vec<Router> = (0..ranks)
                .map(|r| Router::new(r, ranks, &send[r]))
                .collect();
            let rounds = Router::rounds(ranks);
            assert_eq!(rounds, (ranks as f64).log2().ceil() as u32);
            for round in 0..rounds {
                let out: Vec<(usize, Vec<u64>)> = routers
                    .iter_mut()
                    .map(|r| (r.partners(round).0, r.outgoing(round)))
                    .collect();
                for (from, (to, msg)) in out.into_iter().enumerate() {
                    assert_eq!(routers[to].partners(round).1, from, "partners agree");
                    routers[to].incoming(&msg);
                }
            }
            for (d, r) in routers.into_iter().enumerate() {
                let got = r.finish();
                for s in 0..ranks {
                    assert_eq!(got[s], send[s][d], "P = {ranks}: {s} → {d}");
                }
            }
        }
    }

    /// Pieces tile a message in order, none longer than the chunk or MPI's `int`.
    #[test]
    fn pieces_tile_messages() {
        for (len, chunk) in [(0, 5), (1, 5), (10, 5), (11, 5), (7, 1), (3, 0)] {
            let p: Vec<_> = pieces(len, chunk).collect();
            let mut at = 0;
            for r in &p {
                assert_eq!(r.start, at);
                assert!(r.end > r.start && r.len() <= chunk.max(1));
                at = r.end;
            }
            assert_eq!(at, len);
        }
        let big = 6 * 360_000_000usize; // past 2^31 − 1 words
        assert!(pieces(big, usize::MAX).all(|r| r.len() <= i32::MAX as usize));
        assert_eq!(pieces(big, usize::MAX).count(), 2);
    }

    #[test]
    fn i128_limbs_roundtrip() {
        let mut v = [-(1i128 << 100) + 12345, 7, -1];
        let before = v;
        Solo.sum_i128(&mut v);
        assert_eq!(v, before);
    }
}
