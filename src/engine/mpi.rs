//! The MPI implementation of [`Comm`] (rsmpi), and the node-local view used to share a
//! node's cores among its ranks.

use crate::engine::comm::Comm;
use mpi::collective::SystemOperation;
use mpi::datatype::{Partition, PartitionMut};
use mpi::topology::{Communicator, SimpleCommunicator};
use mpi::traits::*;

/// MPI_COMM_WORLD.
pub struct World {
    world: SimpleCommunicator,
}

impl World {
    pub fn new(world: SimpleCommunicator) -> Self {
        World { world }
    }

    /// The raw communicator, for MPI-IO (parallel HDF5).
    pub fn raw(&self) -> mpi::ffi::MPI_Comm {
        self.world.as_raw()
    }

    /// Ranks sharing this rank's node (MPI_Comm_split_type with MPI_COMM_TYPE_SHARED), so
    /// that threads per rank = cores / local ranks on any MPI implementation.
    pub fn ranks_on_node(&self) -> usize {
        self.world.split_shared(self.world.rank()).size() as usize
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
    fn as_any(&self) -> &dyn std::any::Any {
        self
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
