//! One test of one observable at one output time, and the acceptance every comparison
//! uses (`validate` against the exact reference, the systematic check between runs).

use crate::analysis::stats::{BinnedTest, ScalarTest};

/// Largest |t| or |Z| accepted.
pub const ACCEPT: f64 = 3.5;

/// One test of one observable at one output time.
#[derive(Clone, Debug)]
pub struct Check {
    pub job: String,
    pub time: f64,
    pub observable: &'static str,
    pub kind: Kind,
}

/// What was tested.
#[derive(Clone, Debug)]
pub enum Kind {
    Scalar {
        estimate: f64,
        se: f64,
        exact: f64,
        test: ScalarTest,
    },
    Binned(BinnedTest),
}

impl Check {
    /// The statistic compared with [`ACCEPT`]: for scalars the normal score z of t's
    /// two-sided p-value under t(B − 1), for binned data Z; both standard normal when the
    /// estimate is unbiased and its error bar honest.
    pub fn statistic(&self) -> f64 {
        match &self.kind {
            Kind::Scalar { test, .. } => test.z,
            // The per-bin score, or the pooled sparse bins' when that is further out.
            Kind::Binned(b) if b.pooled_z.abs() > b.z.abs() => b.pooled_z,
            Kind::Binned(b) => b.z,
        }
    }

    pub fn passed(&self) -> bool {
        self.statistic().abs() <= ACCEPT
    }
}
