//! The global reduction of the estimators' integer counts (exact in any order).

use crate::engine::comm::Comm;
use crate::physics::estimators::Counts;

/// Sum the counts of every rank, exactly: i64 counts directly, i128 fixed-point sums as
/// 32-bit limbs.
pub fn reduce(mut counts: Counts, comm: &dyn Comm) -> Counts {
    let (mut ints, mut wide) = counts.pack();
    comm.sum_i64(&mut ints);
    comm.sum_i128(&mut wide);
    counts.unpack(ints, wide);
    counts
}
