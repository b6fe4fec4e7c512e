//! The MPI implementation of [`Comm`] (rsmpi), and the node-local view used to share a
//! node's cores among its ranks.

use crate::engine::comm::{Comm, Rounds};
use mpi::collective::SystemOperation;
use mpi::datatype::{Partition, PartitionMut};
use mpi::topology::{Communicator, SimpleCommunicator};
use mpi::traits::*;

/// Environment variable that lowers the words one rank sends another in one round of
/// [`Comm::exchange`] (default: as many as MPI's 32-bit counts allow). For tests of the
/// chunked path; read once, when the communicator is made.
pub const CHUNK_ENV: &str = "SIGNFOLD_EXCHANGE_CHUNK_WORDS";

/// MPI_COMM_WORLD.
pub struct World {
    world: SimpleCommunicator,
    /// Largest number of words one rank sends one other rank in one all-to-all round.
    chunk_words: usize,
}

impl World {
    /// The world communicator; the exchange chunk from [`CHUNK_ENV`] when set (a positive
    /// integer), else the 32-bit limit.
    pub fn new(world: SimpleCommunicator) -> Self {
        let chunk = std::env::var(CHUNK_ENV)
            .ok()
            .and_then(|v| v.trim().parse::<usize>().ok())
            .filter(|&c| c > 0)
            .unwrap_or(i32::MAX as usize);
        World::with_chunk(world, chunk)
    }

    /// The world communicator with at most `chunk_words` words per rank pair and round.
    pub fn with_chunk(world: SimpleCommunicator, chunk_words: usize) -> Self {
        World {
            world,
            chunk_words: chunk_words.max(1),
        }
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
    /// Messages of any length (64-bit counts): sent in the rounds of [`Rounds`] (at most
    /// `chunk_words` words per rank pair and i32::MAX / P), so that every count and
    /// displacement of a round fits MPI's 32-bit `int`. Every rank takes part in the same
    /// number of rounds.
    fn exchange(&self, send: &[Vec<u64>]) -> Vec<Vec<u64>> {
        let p = self.size();
        assert_eq!(send.len(), p);
        let send_counts: Vec<u64> = send.iter().map(|v| v.len() as u64).collect();
        let mut recv_counts = vec![0u64; p];
        self.world
            .all_to_all_into(&send_counts[..], &mut recv_counts[..]);
        let plan = Rounds::new(self.chunk_words as u64, p);
        let mine = plan.needed(&send_counts).max(plan.needed(&recv_counts));
        let mut rounds = mine;
        self.world
            .all_reduce_into(&mine, &mut rounds, SystemOperation::max());
        let mut out: Vec<Vec<u64>> = recv_counts
            .iter()
            .map(|&c| Vec::with_capacity(c as usize))
            .collect();
        for round in 0..rounds {
            let sl = plan.layout(&send_counts, round);
            let rl = plan.layout(&recv_counts, round);
            let mut flat: Vec<u64> = Vec::with_capacity(sl.total());
            for (r, v) in send.iter().enumerate() {
                let from = sl.from[r] as usize;
                flat.extend_from_slice(&v[from..from + sl.counts[r] as usize]);
            }
            let mut recv = vec![0u64; rl.total()];
            {
                let sp = Partition::new(&flat[..], &sl.counts[..], &sl.displs[..]);
                let mut rp = PartitionMut::new(&mut recv[..], &rl.counts[..], &rl.displs[..]);
                self.world.all_to_all_varcount_into(&sp, &mut rp);
            }
            for (r, o) in out.iter_mut().enumerate() {
                let from = rl.displs[r] as usize;
                o.extend_from_slice(&recv[from..from + rl.counts[r] as usize]);
            }
        }
        out
    }
    fn gather_all(&self, mine: &[u64]) -> Vec<Vec<u64>> {
        let p = self.size();
        let send = vec![mine.to_vec(); p];
        self.exchange(&send)
    }
}
