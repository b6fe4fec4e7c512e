//! Statistics of Monte Carlo estimates against exact values (or against other estimates).
//!
//! A Monte Carlo standard error here is the spread of b independent group estimates over
//! √b (batch means). With Gaussian group estimates, (x − μ)/se then follows Student's t
//! with b − 1 degrees of freedom (textbook: the one-sample t statistic), so each squared
//! term (x − μ)²/se² follows F(1, b − 1), not χ²(1): its mean is (b − 1)/(b − 3) for b > 3
//! and its variance 2ν²(ν − 1)/((ν − 2)²(ν − 4)) with ν = b − 1 > 4 (textbook moments of
//! the F distribution).

/// z = (a − b)/√(se_a² + se_b²) of two scalar estimates; `None` without an error.
pub fn z_score(a: f64, b: f64, se_a: f64, se_b: f64) -> Option<f64> {
    let s = (se_a * se_a + se_b * se_b).sqrt();
    (s > 0.0 && s.is_finite()).then(|| (a - b) / s)
}

/// Sum of the terms (a − b)²/(se_a² + se_b²) over the bins of one frame, and how many bins
/// entered (bins with a zero or non-finite error are left out).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct BinnedTerms {
    pub sum: f64,
    pub bins: usize,
}

impl BinnedTerms {
    /// Add the bins of one frame; `se_a`/`se_b` may be empty (no errors in that file).
    pub fn add(&mut self, a: &[f64], b: &[f64], se_a: &[f64], se_b: &[f64]) {
        for i in 0..a.len().min(b.len()) {
            let ea = se_a.get(i).copied().unwrap_or(0.0);
            let eb = se_b.get(i).copied().unwrap_or(0.0);
            let v = ea * ea + eb * eb;
            if v > 0.0 && v.is_finite() {
                self.sum += (a[i] - b[i]).powi(2) / v;
                self.bins += 1;
            }
        }
    }

    /// The mean term, `None` with no bins.
    pub fn mean(&self) -> Option<f64> {
        (self.bins > 0).then(|| self.sum / self.bins as f64)
    }
}

/// Expected mean of the terms when the estimates agree and the errors come from `groups`
/// groups: (b − 1)/(b − 3), defined for b > 3.
pub fn expected_mean(groups: u32) -> Option<f64> {
    let b = groups as f64;
    (groups > 3).then(|| (b - 1.0) / (b - 3.0))
}

/// Standard deviation of the mean of `bins` independent terms from `groups` groups
/// (ν = b − 1 > 4); neighbouring bins are correlated in practice, so this is a floor.
pub fn mean_sd(groups: u32, bins: usize) -> Option<f64> {
    let nu = groups as f64 - 1.0;
    (nu > 4.0 && bins > 0).then(|| {
        let var = 2.0 * nu * nu * (nu - 1.0) / ((nu - 2.0).powi(2) * (nu - 4.0));
        (var / bins as f64).sqrt()
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_distr::{Distribution, StandardNormal};

    #[test]
    fn z_score_of_scalars() {
        assert_eq!(z_score(1.0, 0.0, 0.6, 0.8), Some(1.0));
        assert_eq!(z_score(1.0, 0.0, 0.0, 0.0), None);
    }

    /// Batch-means errors from b = 8 groups of Gaussian draws: the mean term is near
    /// (b − 1)/(b − 3) = 1.4, well away from the χ²(1) mean 1 (5 standard deviations of
    /// the mean over 20 000 independent replicas allowed).
    #[test]
    fn terms_follow_f_not_chi_square() {
        let b = 8u32;
        let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(3);
        let mut t = BinnedTerms::default();
        let reps = 20_000;
        for _ in 0..reps {
            let g: Vec<f64> = (0..b).map(|_| StandardNormal.sample(&mut rng)).collect();
            let m = g.iter().sum::<f64>() / b as f64;
            let var = g.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (b as f64 - 1.0);
            let se = (var / b as f64).sqrt();
            t.add(&[m], &[0.0], &[se], &[]);
        }
        let mean = t.mean().unwrap();
        let want = expected_mean(b).unwrap();
        let sd = mean_sd(b, reps).unwrap();
        assert!((mean - want).abs() < 5.0 * sd, "{mean} vs {want} ± {sd}");
        assert!((mean - 1.0).abs() > 10.0 * sd, "distinguishable from χ²(1)");
        assert_eq!(expected_mean(3), None);
    }
}
