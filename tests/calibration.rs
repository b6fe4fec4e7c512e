//! Error bars against the spread over independent seeds (docs/method.md §4), two-sided, in
//! both annihilation modes, on a barrier job and on the boson job of the validation suite.
//!
//! Each run of B groups reports a value x_s and a standard error se_s. Over K runs with
//! seeds of their own, the spread S² = Σ(x_s − x̄)²/(K − 1) estimates the true variance σ²
//! of one run's value with K − 1 degrees of freedom, and the mean of se_s² estimates it with
//! K(B − 1). If the error bars are honest (and the group estimates close to normal) the
//! ratio r = S²/mean(se_s²) follows Fisher's F(K − 1, K(B − 1)) (the ratio of two
//! independent χ² over their degrees of freedom; any statistics text, e.g. Mood, Graybill
//! & Boes, ch. VI; from memory). Error bars too small push r up, too large push it down: each
//! scalar is tested two-sided, at a family level of 1 % over all checks of the test
//! (Bonferroni). The runs use the budget the job would get by default (10× the samples), so
//! annihilation binds as in a real run.

mod common;
use common::*;
use signfold::analysis::stats::incomplete_beta;
use signfold::io::results::ResultFile;
use std::path::Path;

const SEEDS: u64 = 14;
const FAMILY_LEVEL: f64 = 0.01;

/// P(F ≤ f) for Fisher's F(d1, d2): I_{d1 f/(d1 f + d2)}(d1/2, d2/2).
fn f_cdf(f: f64, d1: f64, d2: f64) -> f64 {
    incomplete_beta(d1 * f / (d1 * f + d2), d1 / 2.0, d2 / 2.0)
}

/// Runs of `job` (jobs/validation/) with `overrides`, one per seed.
fn runs(job: &str, overrides: &[String]) -> Vec<ResultFile> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("jobs/validation")
        .join(job);
    let dir = tempfile::tempdir().unwrap();
    (0..SEEDS)
        .map(|s| {
            let seed = format!("numerics.seed={}", 7100 + s);
            let mut extra = vec!["--set", &seed];
            for o in overrides {
                extra.extend(["--set", o]);
            }
            run_job(dir.path(), &path, &extra)
        })
        .collect()
}

/// Two-sided p-value of r under F(d1, d2).
fn two_sided(r: f64, d1: f64, d2: f64) -> f64 {
    let c = f_cdf(r, d1, d2);
    2.0 * c.min(1.0 - c)
}

/// The checks of one job in both modes: (label, r, p) per scalar and output time.
fn calibrate(job: &str, overrides: &[&str], scalars: &[&str]) -> Vec<(String, f64, f64)> {
    let mut out = Vec::new();
    for mode in ["adaptive", "fixed"] {
        let mut o: Vec<String> = overrides.iter().map(|s| s.to_string()).collect();
        o.push(format!("annihilation.resolution=\"{mode}\""));
        let files = runs(job, &o);
        let groups = 8.0;
        let k = files.len() as f64;
        let frames = files[0].series["time"].frames();
        for &t in &[frames / 2, frames - 1] {
            for &name in scalars {
                let x: Vec<f64> = files.iter().map(|f| f.series[name].frame(t)[0]).collect();
                let se2: Vec<f64> = files
                    .iter()
                    .map(|f| f.series[&format!("{name}_error")].frame(t)[0].powi(2))
                    .collect();
                let mean = x.iter().sum::<f64>() / k;
                let spread = x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (k - 1.0);
                let r = spread / (se2.iter().sum::<f64>() / k);
                let p = two_sided(r, k - 1.0, k * (groups - 1.0));
                let time = files[0].series["time"].frame(t)[0];
                out.push((format!("{job} {mode} {name} at {time} fs"), r, p));
            }
        }
    }
    out
}

fn assert_calibrated(checks: &[(String, f64, f64)]) {
    let alpha = FAMILY_LEVEL / checks.len() as f64;
    let report: Vec<String> = checks
        .iter()
        .map(|(l, r, p)| format!("{l}: spread²/se² = {r:.3} (p = {p:.2e})"))
        .collect();
    for (label, r, p) in checks {
        assert!(
            p.is_finite() && *p >= alpha,
            "{label}: the spread over seeds is {:.2}× the error bars (ratio of variances {r:.3}, \
             two-sided p = {p:.2e} < {alpha:.1e}):\n{}",
            r.sqrt(),
            report.join("\n")
        );
    }
}

/// The F quantiles the test relies on (standard tables, e.g. Abramowitz & Stegun table
/// 26.9, from memory): F(10, 60) upper 5 % point 1.99, F(5, 20) upper 1 % point 4.10; and
/// F(d, d) has median 1 by symmetry.
#[test]
fn f_distribution_matches_tables() {
    assert!((f_cdf(1.99, 10.0, 60.0) - 0.95).abs() < 2e-3);
    assert!((f_cdf(4.10, 5.0, 20.0) - 0.99).abs() < 1e-3);
    assert!((f_cdf(1.0, 12.0, 12.0) - 0.5).abs() < 1e-12);
}

/// One electron on a barrier (v01): transmitted norm, energy, mean position and wavevector.
#[test]
fn barrier_error_bars_match_the_spread_over_seeds() {
    let checks = calibrate(
        "v01-barrier.toml",
        &["numerics.samples=20000", "numerics.end_time=60"],
        &["norm_right", "energy", "mean_x", "mean_k"],
    );
    assert_calibrated(&checks);
}

/// Two bosons over a dip (v06): energy, mean position, wavevector and force (nothing reaches
/// the absorbing ends by 40 fs, so the norm is exactly 1 in every run, with no spread).
#[test]
fn boson_error_bars_match_the_spread_over_seeds() {
    let checks = calibrate(
        "v06-bosons-dip.toml",
        &["numerics.samples=20000", "numerics.end_time=40"],
        &["energy", "mean_x", "mean_k", "mean_force"],
    );
    assert_calibrated(&checks);
}
