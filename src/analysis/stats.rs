//! Statistics of Monte Carlo estimates against exact values (docs/method.md §4).
//!
//! Every Monte Carlo observable comes with a standard error from B independent groups:
//! se = s_B / sqrt(B) with s_B the sample spread of the group estimates. For one bin (or one
//! scalar) the studentised difference t = (x̂ − x_exact)/se then follows Student's t with
//! ν = B − 1 degrees of freedom when the estimate is unbiased and the group estimates are
//! close to normal — not a standard normal: with B = 8 a |t| of 3.5 is a 1 % event, not a
//! 0.05 % one. Hence:
//!
//! - scalars: the two-sided p-value of t under t(ν) is reported beside t;
//! - binned data: each bin's two-sided p-value p_i = P(|T_ν| > |t_i|) is uniform on (0, 1)
//!   under the hypothesis "unbiased, honest error bars". Their mean p̄ over m bins has mean
//!   1/2 and variance 1/(12 m); Z = (p̄ − 1/2)/sqrt(1/(12 m)) is close to a standard normal
//!   already for m ≈ 10 (the p_i are bounded). A bias or too-small error bars push p̄ down
//!   (Z < 0); too-large error bars push it up (Z > 0): the test is two-sided.
//!
//! Bins whose standard error is zero (no particle of any group fell in them) carry no
//! statistic; they are counted and excluded, a rule fixed before any comparison is made.
//!
//! Against an exact answer ([`binned_test_against_exact`]) a bin whose exact value is worth
//! fewer than [`SPARSE_SAMPLES`] samples is not tested alone: its group estimates are a
//! handful of ±1 samples, far from normal, and its p-value is not uniform (a single
//! sample where the exact value is ≈ 0 gives |t| ≈ 1 in every such bin, p ≈ 0.35).
//! Simulated with B = 8 Poisson groups per bin, exact values log-uniform over 0.05–2000
//! samples, 1300 bins, 400 repetitions: testing every bin with a non-zero error gives a
//! mean Z of +1.39 (one sign), −1.57 (±noise, exact 0), −0.38 (3:1 signs); leaving out the
//! bins below 16 samples of exact value gives −0.01, (none left), +0.00, and +0.01 for
//! 1.2:1 signs, each with a spread of Z of 0.96–1.02. The rule selects on the exact
//! value, not on the estimate's own error (selecting on the error keeps the bins whose
//! error fluctuated up: mean Z +0.8 to +0.95 in the same simulation). The left-out bins
//! are pooled (sums of values and of exact values, errors added in quadrature) and the
//! pool is tested as a scalar (its own score, `pooled_z`), so that mass the estimate puts
//! where the exact value is negligible cannot escape the test.
//! The bins of one frame share each group's normalisation and are not strictly
//! independent; the group spread of the normalisation is small next to a bin's own
//! counting noise at the sample sizes used.

/// ln Γ(x) for x > 0 (Lanczos approximation, g = 7, nine coefficients; relative error
/// below 1e-13 for the half-integer and integer arguments used here).
pub fn ln_gamma(x: f64) -> f64 {
    const G: f64 = 7.0;
    const C: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        // Reflection: Γ(x)Γ(1 − x) = π / sin(πx).
        let pi = std::f64::consts::PI;
        return (pi / (pi * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut a = C[0];
    let t = x + G + 0.5;
    for (i, &c) in C.iter().enumerate().skip(1) {
        a += c / (x + i as f64);
    }
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + a.ln()
}

/// Regularised incomplete beta function I_x(a, b), by the continued fraction of
/// I_x(a, b) = x^a (1 − x)^b / (a B(a, b)) · 1/(1 + d₁/(1 + d₂/(1 + …))) evaluated with the
/// modified Lentz method, using the symmetry I_x(a, b) = 1 − I_{1−x}(b, a) where the
/// fraction converges slowly.
pub fn incomplete_beta(x: f64, a: f64, b: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    if x >= 1.0 {
        return 1.0;
    }
    let ln_front = ln_gamma(a + b) - ln_gamma(a) - ln_gamma(b) + a * x.ln() + b * (1.0 - x).ln();
    if x > (a + 1.0) / (a + b + 2.0) {
        return 1.0 - incomplete_beta(1.0 - x, b, a);
    }
    const TINY: f64 = 1e-300;
    let mut c = 1.0;
    let mut d = 1.0 - (a + b) * x / (a + 1.0);
    if d.abs() < TINY {
        d = TINY;
    }
    d = 1.0 / d;
    let mut h = d;
    for m in 1..500 {
        let m = m as f64;
        // Even step: d_{2m} = m(b − m)x / ((a + 2m − 1)(a + 2m)).
        let num = m * (b - m) * x / ((a + 2.0 * m - 1.0) * (a + 2.0 * m));
        d = 1.0 + num * d;
        d = if d.abs() < TINY { 1.0 / TINY } else { 1.0 / d };
        c = 1.0 + num / c;
        if c.abs() < TINY {
            c = TINY;
        }
        h *= d * c;
        // Odd step: d_{2m+1} = −(a + m)(a + b + m)x / ((a + 2m)(a + 2m + 1)).
        let num = -(a + m) * (a + b + m) * x / ((a + 2.0 * m) * (a + 2.0 * m + 1.0));
        d = 1.0 + num * d;
        d = if d.abs() < TINY { 1.0 / TINY } else { 1.0 / d };
        c = 1.0 + num / c;
        if c.abs() < TINY {
            c = TINY;
        }
        let delta = d * c;
        h *= delta;
        if (delta - 1.0).abs() < 1e-15 {
            break;
        }
    }
    ln_front.exp() * h / a
}

/// Two-sided p-value of a Student-t statistic with ν degrees of freedom:
/// P(|T| > |t|) = I_{ν/(ν + t²)}(ν/2, 1/2).
pub fn student_two_sided_p(t: f64, nu: f64) -> f64 {
    if !t.is_finite() {
        return 0.0;
    }
    incomplete_beta(nu / (nu + t * t), 0.5 * nu, 0.5)
}

/// Upper tail of the standard normal, Q(z) = P(Z > z) = erfc(z/√2)/2 (the reference's
/// erfc, absolute error below 1e-13).
pub fn normal_upper_tail(z: f64) -> f64 {
    0.5 * crate::reference::stationary::erfc(z / std::f64::consts::SQRT_2)
}

/// The normal score of a two-sided p-value: the |z| with P(|Z| > |z|) = p (∞ for p = 0),
/// found by bisection on [`normal_upper_tail`] (monotone), to 10⁻⁹.
pub fn normal_score_two_sided(p: f64) -> f64 {
    if p <= 0.0 {
        return f64::INFINITY;
    }
    if p >= 1.0 {
        return 0.0;
    }
    let (mut lo, mut hi) = (0.0_f64, 40.0_f64);
    while hi - lo > 1e-9 {
        let mid = 0.5 * (lo + hi);
        if 2.0 * normal_upper_tail(mid) > p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// The studentised difference of one scalar estimate from its exact value.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScalarTest {
    /// (estimate − exact) / se; ±∞ when se = 0 and they differ, 0 when se = 0 and they agree.
    pub t: f64,
    /// The normal score of `p` with the sign of t: the statistic an acceptance |z| ≤ c uses,
    /// so that c means the same tail probability whatever the number of groups (with
    /// B = 8, |t| = 3.5 is p ≈ 0.01, while |z| = 3.5 is p ≈ 4.7·10⁻⁴).
    pub z: f64,
    /// Two-sided p-value under t(B − 1).
    pub p: f64,
}

/// Test one scalar: `estimate ± se` (se from `groups` groups) against `exact`. With se = 0
/// the estimate is exact by construction (e.g. an integer norm in a closed box) and passes
/// when it equals `exact` within `exact_tolerance` (the exact solver's own precision).
pub fn scalar_test(
    estimate: f64,
    se: f64,
    exact: f64,
    groups: usize,
    exact_tolerance: f64,
) -> ScalarTest {
    scalar_test_nu(estimate, se, exact, groups as f64 - 1.0, exact_tolerance)
}

/// [`scalar_test`] with ν degrees of freedom given directly.
fn scalar_test_nu(estimate: f64, se: f64, exact: f64, nu: f64, exact_tolerance: f64) -> ScalarTest {
    let diff = estimate - exact;
    if se > 0.0 {
        let t = diff / se;
        let p = student_two_sided_p(t, nu);
        ScalarTest {
            t,
            z: t.signum() * normal_score_two_sided(p),
            p,
        }
    } else if diff.abs() <= exact_tolerance {
        ScalarTest {
            t: 0.0,
            z: 0.0,
            p: 1.0,
        }
    } else {
        ScalarTest {
            t: diff.signum() * f64::INFINITY,
            z: diff.signum() * f64::INFINITY,
            p: 0.0,
        }
    }
}

/// Test of binned estimates against exact bin values (see the module documentation).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BinnedTest {
    /// Bins with a non-zero standard error (the ones tested).
    pub bins: usize,
    /// Bins skipped because their standard error is zero.
    pub empty_bins: usize,
    /// Bins worth fewer than [`SPARSE_SAMPLES`] samples, pooled and tested as one scalar
    /// (0 when not testing against exact values), and that scalar's normal score (0
    /// without such bins).
    pub sparse_bins: usize,
    pub pooled_z: f64,
    /// Mean of t² over the tested bins, and its expectation (B − 1)/(B − 3) under t(B − 1).
    pub mean_t2: f64,
    pub expected_t2: f64,
    /// Mean two-sided p-value and its normal score Z (0 expected; |Z| large: bias or
    /// mis-sized error bars; Z > 0 means error bars too large).
    pub mean_p: f64,
    pub z: f64,
}

/// Test estimates `value ± error` against `exact`, bin by bin, over the bins `use_bin`
/// selects (e.g. x ≤ x′ for a symmetric pair density).
pub fn binned_test(
    value: &[f64],
    error: &[f64],
    exact: &[f64],
    groups: usize,
    use_bin: impl Fn(usize) -> bool,
) -> BinnedTest {
    let nu = groups as f64 - 1.0;
    binned_from(
        (0..value.len())
            .filter(|&i| use_bin(i))
            .map(|i| (error[i] > 0.0).then(|| ((value[i] - exact[i]) / error[i], nu))),
    )
}

/// Exact value, in samples, below which a bin is pooled with the other sparse bins instead
/// of tested alone (see the module documentation).
pub const SPARSE_SAMPLES: f64 = 16.0;

/// [`binned_test`] against exact values, with bins whose exact value is below
/// [`SPARSE_SAMPLES`] × `quantum` pooled into one bin; `quantum` is what one sample adds to
/// a bin's estimate (1/(S₀·bin volume)).
pub fn binned_test_against_exact(
    value: &[f64],
    error: &[f64],
    exact: &[f64],
    groups: usize,
    quantum: f64,
    use_bin: impl Fn(usize) -> bool,
) -> BinnedTest {
    let sparse = |i: usize| exact[i].abs() < SPARSE_SAMPLES * quantum;
    let (mut pv, mut pe2, mut px, mut pooled) = (0.0, 0.0, 0.0, 0usize);
    for i in (0..value.len()).filter(|&i| use_bin(i) && sparse(i)) {
        pv += value[i];
        px += exact[i];
        pe2 += error[i] * error[i];
        pooled += 1;
    }
    let mut test = binned_test(value, error, exact, groups, |i| use_bin(i) && !sparse(i));
    test.sparse_bins = pooled;
    if pooled > 0 {
        test.pooled_z = scalar_test(pv, pe2.sqrt(), px, groups, 3.0 * quantum).z;
    }
    test
}

/// The mean-p score of per-bin studentised differences: `None` for a bin without error
/// (counted, not tested), else (t, ν).
fn binned_from(bins_t: impl Iterator<Item = Option<(f64, f64)>>) -> BinnedTest {
    let (mut bins, mut empty) = (0usize, 0usize);
    let (mut sum_p, mut sum_t2, mut sum_e) = (0.0, 0.0, 0.0);
    for b in bins_t {
        match b {
            Some((t, nu)) => {
                bins += 1;
                sum_t2 += t * t;
                sum_p += student_two_sided_p(t, nu);
                sum_e += if nu > 2.0 {
                    nu / (nu - 2.0)
                } else {
                    f64::INFINITY
                };
            }
            None => empty += 1,
        }
    }
    let m = bins.max(1) as f64;
    let mean_p = sum_p / m;
    BinnedTest {
        bins,
        empty_bins: empty,
        sparse_bins: 0,
        pooled_z: 0.0,
        mean_t2: sum_t2 / m,
        expected_t2: if bins > 0 { sum_e / m } else { f64::INFINITY },
        mean_p,
        z: if bins > 0 {
            (mean_p - 0.5) / (1.0 / (12.0 * m)).sqrt()
        } else {
            0.0
        },
    }
}

/// Welch–Satterthwaite degrees of freedom of the difference of two independent estimates
/// whose standard errors `se_a`, `se_b` each come from `groups` groups:
/// ν = (a² + b²)² / ((a⁴ + b⁴)/(B − 1)), between B − 1 (one error dominates) and
/// 2(B − 1) (equal errors). Using B − 1 for equal errors would make honest differences
/// look too small (a two-sided score drifting above 0 over many bins).
pub fn welch_dof(se_a: f64, se_b: f64, groups: usize) -> f64 {
    let (a, b) = (se_a * se_a, se_b * se_b);
    let nu = groups as f64 - 1.0;
    if a + b > 0.0 {
        ((a + b) * (a + b) / ((a * a + b * b) / nu)).clamp(nu, 2.0 * nu)
    } else {
        nu
    }
}

/// Test of two independent runs' scalar estimates a ± se_a and b ± se_b (different seeds):
/// t = (a − b)/√(se_a² + se_b²) under Student's t with the Welch degrees of freedom.
/// With both errors zero the two must be equal (within `tolerance`).
pub fn difference_test(
    a: f64,
    se_a: f64,
    b: f64,
    se_b: f64,
    groups: usize,
    tolerance: f64,
) -> ScalarTest {
    let se = (se_a * se_a + se_b * se_b).sqrt();
    let nu = welch_dof(se_a, se_b, groups);
    scalar_test_nu(a, se, b, nu, tolerance)
}

/// Bin by bin test of two independent runs (different seeds), over the bins `use_bin`
/// selects: t_i = (a_i − b_i)/√(ea_i² + eb_i²) with the Welch degrees of freedom of each bin.
pub fn binned_difference_test(
    a: &[f64],
    ea: &[f64],
    b: &[f64],
    eb: &[f64],
    groups: usize,
    use_bin: impl Fn(usize) -> bool,
) -> BinnedTest {
    binned_from((0..a.len()).filter(|&i| use_bin(i)).map(|i| {
        let se = (ea[i] * ea[i] + eb[i] * eb[i]).sqrt();
        (se > 0.0).then(|| ((a[i] - b[i]) / se, welch_dof(ea[i], eb[i], groups)))
    }))
}

// Comparison of two estimates with errors (used by `compare`): batch-means terms.
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
mod comparison_tests {
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
        let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(20261203);
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

#[cfg(test)]
mod tests {
    use super::*;

    /// Two independent runs of B = 8 groups each (group values standard normal, so the
    /// truth is 0 in every bin): the difference test must score them as honest, |Z| ≤ 3.5
    /// over 20000 bins (a 5·10⁻⁴ event if calibrated). Scored with B − 1 degrees of freedom
    /// instead of Welch's, the same differences look too small (Z ≈ 5 over 20000 bins).
    #[test]
    fn difference_of_independent_runs_is_scored_as_honest() {
        use rand::SeedableRng;
        use rand_distr::{Distribution, StandardNormal};
        let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(20261203);
        let (groups, bins) = (8usize, 20000usize);
        let mut run = || -> (Vec<f64>, Vec<f64>) {
            (0..bins)
                .map(|_| {
                    let g: Vec<f64> = (0..groups)
                        .map(|_| StandardNormal.sample(&mut rng))
                        .collect();
                    let mean = g.iter().sum::<f64>() / groups as f64;
                    let var =
                        g.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (groups as f64 - 1.0);
                    (mean, (var / groups as f64).sqrt())
                })
                .unzip()
        };
        let (a, ea) = run();
        let (b, eb) = run();
        let welch = binned_difference_test(&a, &ea, &b, &eb, groups, |_| true);
        assert_eq!(welch.bins, bins);
        assert!(welch.z.abs() <= 3.5, "Welch: Z = {}", welch.z);
        let se: Vec<f64> = ea.iter().zip(&eb).map(|(x, y)| x.hypot(*y)).collect();
        let naive = binned_test(&a, &se, &b, groups, |_| true);
        assert!(naive.z > 3.5, "B − 1 degrees of freedom: Z = {}", naive.z);
        // Scalars: a difference of 0 is p = 1; Welch's ν lies between B − 1 and 2(B − 1).
        assert_eq!(difference_test(1.0, 0.1, 1.0, 0.1, groups, 0.0).p, 1.0);
        assert!((welch_dof(0.1, 0.1, groups) - 14.0).abs() < 1e-12);
        assert!((welch_dof(0.1, 0.0, groups) - 7.0).abs() < 1e-12);
    }

    #[test]
    fn gamma_and_beta_match_closed_forms() {
        // Γ(5) = 24, Γ(1/2) = sqrt(π) (textbook values).
        assert!((ln_gamma(5.0) - 24f64.ln()).abs() < 1e-12);
        assert!((ln_gamma(0.5) - std::f64::consts::PI.sqrt().ln()).abs() < 1e-12);
        // I_x(1, 1) = x; I_x(a, 1) = x^a; I_x(1, b) = 1 − (1 − x)^b.
        for &x in &[0.05, 0.3, 0.7, 0.95] {
            assert!((incomplete_beta(x, 1.0, 1.0) - x).abs() < 1e-12);
            assert!((incomplete_beta(x, 3.5, 1.0) - x.powf(3.5)).abs() < 1e-12);
            assert!((incomplete_beta(x, 1.0, 2.5) - (1.0 - (1.0 - x).powf(2.5))).abs() < 1e-12);
        }
    }

    #[test]
    fn normal_scores_match_tables() {
        // Two-sided normal points (standard tables, values from memory): p = 0.05 ↔ 1.959964,
        // 0.01 ↔ 2.575829, 4.6525·10⁻⁴ ↔ 3.5; and Q(0) = 1/2 exactly by symmetry.
        for (p, z) in [(0.05, 1.959964), (0.01, 2.575829), (4.6525e-4, 3.5)] {
            let got = normal_score_two_sided(p);
            assert!((got - z).abs() < 2e-4, "p = {p}: z = {got}, table {z}");
        }
        assert!((normal_upper_tail(0.0) - 0.5).abs() < 1e-7);
        assert!((normal_upper_tail(-1.0) + normal_upper_tail(1.0) - 1.0).abs() < 1e-12);
        // The scalar test's z carries t's sign and, for B = 8, is smaller than |t| in the tail.
        let s = scalar_test(1.0 + 3.5e-3, 1e-3, 1.0, 8, 0.0);
        assert!(s.z > 0.0 && s.z < s.t && (s.z - normal_score_two_sided(s.p)).abs() < 1e-12);
    }

    #[test]
    fn student_p_values_match_tables() {
        // Two-sided 5 % points of Student's t (standard tables, e.g. Abramowitz & Stegun
        // table 26.10; values from memory): ν = 7: 2.365, ν = 1: 12.706, ν = 30: 2.042.
        for (t, nu) in [(2.365, 7.0), (12.706, 1.0), (2.042, 30.0)] {
            let p = student_two_sided_p(t, nu);
            assert!((p - 0.05).abs() < 2e-4, "t = {t}, ν = {nu}: p = {p}");
        }
        // ν = 1 is the Cauchy law: P(|T| > 1) = 1/2 exactly.
        assert!((student_two_sided_p(1.0, 1.0) - 0.5).abs() < 1e-12);
        assert_eq!(student_two_sided_p(0.0, 7.0), 1.0);
    }

    /// Simulated group estimates: unbiased honest error bars pass; a bias, halved error
    /// bars and doubled error bars each fail. Deterministic pseudo-random normals.
    #[test]
    fn binned_test_is_two_sided() {
        let mut state = 0x1234_5678_9abc_def0u64;
        let mut uniform = move || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        let mut normal = move || {
            let (u, v) = (uniform().max(1e-300), uniform());
            (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
        };
        let (b, m) = (8usize, 400usize);
        let exact: Vec<f64> = (0..m).map(|i| 1.0 + (i as f64 * 0.1).sin()).collect();
        let mut value = vec![0.0; m];
        let mut error = vec![0.0; m];
        for i in 0..m {
            let g: Vec<f64> = (0..b).map(|_| exact[i] + 0.1 * normal()).collect();
            let mean = g.iter().sum::<f64>() / b as f64;
            let var = g.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (b as f64 - 1.0);
            value[i] = mean;
            error[i] = (var / b as f64).sqrt();
        }
        let honest = binned_test(&value, &error, &exact, b, |_| true);
        assert!(honest.z.abs() < 3.5, "{honest:?}");
        let biased: Vec<f64> = value.iter().map(|v| v + 0.05).collect();
        assert!(binned_test(&biased, &error, &exact, b, |_| true).z < -3.5);
        let small: Vec<f64> = error.iter().map(|e| e * 0.5).collect();
        assert!(binned_test(&value, &small, &exact, b, |_| true).z < -3.5);
        let large: Vec<f64> = error.iter().map(|e| e * 2.0).collect();
        assert!(binned_test(&value, &large, &exact, b, |_| true).z > 3.5);
    }

    /// Bins worth a handful of samples (signed noise where the exact value is ≈ 0) break
    /// the per-bin Student reference: over 1500 such bins beside 1500 dense ones (20 to
    /// 2000 samples of exact value, B = 8 Poisson groups, all honest) the plain test reads
    /// a bias (Z < −3.5); pooling the sparse bins passes, and still sees a 5 % bias in the
    /// dense bins and a surplus of 300 samples spread over the sparse ones (it would be
    /// noise of about 49 samples there).
    #[test]
    fn sparse_bins_are_pooled_not_tested_alone() {
        use rand::SeedableRng;
        use rand_distr::{Distribution, Poisson};
        let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(20261204);
        let (b, half) = (8usize, 1500usize);
        let mut counts = |mean: f64| -> f64 {
            if mean <= 0.0 {
                return 0.0;
            }
            Poisson::new(mean).unwrap().sample(&mut rng)
        };
        // One sample adds 1 to a bin's estimate (quantum 1): group value B·(count),
        // estimate the mean over groups, error its standard error.
        let (mut value, mut error, mut exact) = (vec![], vec![], vec![]);
        for i in 0..2 * half {
            let (plus, minus) = if i < half {
                (20.0 * 100f64.powf(i as f64 / half as f64), 0.0)
            } else {
                (0.8, 0.8)
            };
            let g: Vec<f64> = (0..b)
                .map(|_| b as f64 * (counts(plus / b as f64) - counts(minus / b as f64)))
                .collect();
            let mean = g.iter().sum::<f64>() / b as f64;
            let var = g.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (b as f64 - 1.0);
            value.push(mean);
            error.push((var / b as f64).sqrt());
            exact.push(plus - minus);
        }
        let plain = binned_test(&value, &error, &exact, b, |_| true);
        assert!(plain.z < -3.5, "plain test over sparse bins: {plain:?}");
        let pooled = binned_test_against_exact(&value, &error, &exact, b, 1.0, |_| true);
        assert_eq!(pooled.sparse_bins, half);
        assert!(
            pooled.z.abs() <= 3.5 && pooled.pooled_z.abs() <= 3.5,
            "{pooled:?}"
        );
        let biased: Vec<f64> = (0..2 * half)
            .map(|i| if i < half { value[i] * 1.05 } else { value[i] })
            .collect();
        let t = binned_test_against_exact(&biased, &error, &exact, b, 1.0, |_| true);
        assert!(t.z < -3.5, "dense bias: {t:?}");
        let surplus: Vec<f64> = (0..2 * half)
            .map(|i| value[i] + if i >= half && i % 5 == 0 { 1.0 } else { 0.0 })
            .collect();
        let t = binned_test_against_exact(&surplus, &error, &exact, b, 1.0, |_| true);
        assert!(t.pooled_z > 3.5, "sparse surplus: {t:?}");
    }

    #[test]
    fn zero_error_scalars_pass_only_when_exact() {
        assert_eq!(scalar_test(1.0, 0.0, 1.0 - 1e-13, 8, 1e-9).t, 0.0);
        assert!(scalar_test(1.001, 0.0, 1.0, 8, 1e-9).t.is_infinite());
    }
}
