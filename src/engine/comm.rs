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

    #[test]
    fn i128_limbs_roundtrip() {
        let mut v = [-(1i128 << 100) + 12345, 7, -1];
        let before = v;
        Solo.sum_i128(&mut v);
        assert_eq!(v, before);
    }
}
