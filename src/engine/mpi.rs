//! The MPI implementation of [`Comm`] (rsmpi), and the node-local view used to share a
//! node's cores among its ranks.

use crate::engine::comm::{Comm, Traffic, pieces};
use mpi::collective::SystemOperation;
use mpi::topology::{Communicator, SimpleCommunicator};
use mpi::traits::*;
use std::cell::Cell;

/// Environment variable that lowers the words of one MPI message (a message of
/// [`Comm::shift`] longer than that goes in several; default: as many as MPI's 32-bit
/// counts allow). For tests of the chunked path; read once, when the communicator is made.
pub const CHUNK_ENV: &str = "SIGNFOLD_EXCHANGE_CHUNK_WORDS";

/// Environment variable that sets the mean message (words) below which exchanges are
/// routed (default [`crate::engine::comm::ROUTE_BELOW_WORDS`]; 0: never, a huge value:
/// always). For scaling studies of both paths; read once, when the communicator is made.
pub const ROUTE_ENV: &str = "SIGNFOLD_ROUTE_BELOW_WORDS";

/// MPI_COMM_WORLD.
pub struct World {
    world: SimpleCommunicator,
    /// Largest number of words of one MPI message.
    chunk_words: usize,
    /// What this rank sent to others so far.
    sent: Cell<Traffic>,
    /// Mean message (words) below which exchanges are routed.
    route_below: i64,
}

/// A non-negative integer from the environment variable `name`, when it holds one.
fn env_count(name: &str) -> Option<u64> {
    std::env::var(name).ok()?.trim().parse().ok()
}

impl World {
    /// The world communicator; the exchange chunk from [`CHUNK_ENV`] when set (a positive
    /// integer), else the 32-bit limit.
    pub fn new(world: SimpleCommunicator) -> Self {
        let chunk = env_count(CHUNK_ENV)
            .filter(|&c| c > 0)
            .map_or(i32::MAX as usize, |c| c as usize);
        World::with_chunk(world, chunk)
    }

    /// The world communicator with at most `chunk_words` words per MPI message.
    pub fn with_chunk(world: SimpleCommunicator, chunk_words: usize) -> Self {
        World {
            world,
            chunk_words: chunk_words.clamp(1, i32::MAX as usize),
            sent: Cell::new(Traffic::default()),
            route_below: env_count(ROUTE_ENV).map_or(crate::engine::comm::ROUTE_BELOW_WORDS, |w| {
                i64::try_from(w).unwrap_or(i64::MAX)
            }),
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
    /// A message of any length (64-bit counts): its length first, then the words in
    /// pieces of at most `chunk_words` (non-blocking sends, blocking receives; messages
    /// between two ranks do not overtake each other, so the pieces arrive in order).
    fn shift(&self, to: usize, from: usize, data: &[u64]) -> Vec<u64> {
        let dest = self.world.process_at_rank(to as i32);
        let src = self.world.process_at_rank(from as i32);
        let (len, _) =
            mpi::point_to_point::send_receive::<u64, _, _, _>(&(data.len() as u64), &dest, &src);
        let mut out = vec![0u64; len as usize];
        mpi::request::scope(|scope| {
            let sends: Vec<_> = pieces(data.len(), self.chunk_words)
                .map(|r| dest.immediate_send(scope, &data[r]))
                .collect();
            for r in pieces(out.len(), self.chunk_words) {
                src.receive_into(&mut out[r]);
            }
            for s in sends {
                s.wait();
            }
        });
        if to != self.rank() {
            let mut t = self.sent.get();
            t += Traffic {
                words: data.len() as u64 + 1,
                messages: 1,
            };
            self.sent.set(t);
        }
        out
    }
    fn sent(&self) -> Traffic {
        self.sent.get()
    }
    fn route_below_words(&self) -> i64 {
        self.route_below
    }
    fn gather_all(&self, mine: &[u64]) -> Vec<Vec<u64>> {
        let p = self.size();
        let send = vec![mine.to_vec(); p];
        self.exchange(&send)
    }
}
