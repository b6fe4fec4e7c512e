//! The one seam to MPI. The physics sees only [`Comm`]: rank, size and the few
//! collectives the method needs, all on integers (exact in any order) or raw words.

use mpi::collective::SystemOperation;
use mpi::datatype::{Partition, PartitionMut};
use mpi::topology::{Communicator, SimpleCommunicator};
use mpi::traits::*;

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

    /// The MPI communicator for MPI-IO, None without MPI.
    fn mpi_comm(&self) -> Option<mpi::ffi::MPI_Comm> {
        None
    }

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

/// MPI_COMM_WORLD.
pub struct World {
    world: SimpleCommunicator,
}

impl World {
    pub fn new(world: SimpleCommunicator) -> Self {
        World { world }
    }
}

fn displacements(counts: &[i32]) -> Vec<i32> {
    counts
        .iter()
        .scan(0i32, |acc, &c| {
            let d = *acc;
            *acc += c;
            Some(d)
        })
        .collect()
}

impl Comm for World {
    fn mpi_comm(&self) -> Option<mpi::ffi::MPI_Comm> {
        Some(self.world.as_raw())
    }
    fn rank(&self) -> usize {
        self.world.rank() as usize
    }
    fn size(&self) -> usize {
        self.world.size() as usize
    }
    fn sum_i64(&self, v: &mut [i64]) {
        if v.is_empty() || self.size() == 1 {
            return;
        }
        let send = v.to_vec();
        self.world
            .all_reduce_into(&send[..], v, SystemOperation::sum());
    }
    fn max_f64(&self, v: f64) -> f64 {
        let mut out = v;
        self.world
            .all_reduce_into(&v, &mut out, SystemOperation::max());
        out
    }
    fn exchange(&self, send: &[Vec<u64>]) -> Vec<Vec<u64>> {
        let p = self.size();
        assert_eq!(send.len(), p);
        let send_counts: Vec<i32> = send
            .iter()
            .map(|v| {
                i32::try_from(v.len())
                    .expect("one message per rank pair must stay below 2^31 words")
            })
            .collect();
        let mut recv_counts = vec![0i32; p];
        self.world
            .all_to_all_into(&send_counts[..], &mut recv_counts[..]);
        let flat: Vec<u64> = send.concat();
        let sd = displacements(&send_counts);
        let rd = displacements(&recv_counts);
        let total: usize = recv_counts.iter().map(|&c| c as usize).sum();
        let mut recv = vec![0u64; total];
        {
            let sp = Partition::new(&flat[..], &send_counts[..], &sd[..]);
            let mut rp = PartitionMut::new(&mut recv[..], &recv_counts[..], &rd[..]);
            self.world.all_to_all_varcount_into(&sp, &mut rp);
        }
        (0..p)
            .map(|r| recv[rd[r] as usize..(rd[r] + recv_counts[r]) as usize].to_vec())
            .collect()
    }
    fn gather_all(&self, mine: &[u64]) -> Vec<Vec<u64>> {
        let p = self.size();
        let send = vec![mine.to_vec(); p];
        self.exchange(&send)
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
