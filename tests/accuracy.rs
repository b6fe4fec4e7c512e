//! The Monte Carlo against the exact grid reference (`signfold reference`, split-operator
//! Fourier method, Feit, Fleck & Steiger, J. Comput. Phys. 47, 412 (1982); itself checked
//! against closed forms in tests/reference.rs) for three demo jobs at a few 10⁵ samples, as
//! shipped (their own numerics).
//!
//! Judged by the validation suite's tests (docs/method.md §4, `study::validate::compare`),
//! with no measured floor in any tolerance: every scalar (norm, absorbed per side, energy,
//! transmitted norm) by the normal score of its two-sided Student-t p-value, the density and
//! pair density by the score of the mean per-bin p-value (bins worth fewer than 16 samples
//! of exact value pooled and tested as a scalar), all within ±3.5 (two-sided: error bars
//! too large fail as well). A bias beyond the error bars, or error bars of the wrong size,
//! fails the test.

mod common;
use common::*;
use signfold::io::results::ResultFile;
use signfold::study::checks::ACCEPT;
use signfold::study::validate::{compare, sample_resolution};
use std::path::Path;

fn reference(dir: &Path, job: &Path, extra: &[&str]) -> ResultFile {
    let out = dir.join("ref");
    let mut args = vec![
        "reference",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--force",
    ];
    args.extend_from_slice(extra);
    ok(&signfold(&args));
    ResultFile::read(&out.join("reference.h5")).expect("reference readable")
}

/// Every check of `mc` against `rf` passes; returns the worst statistic for the log.
fn assert_agrees(name: &str, job: &Path, extra: &[&str], mc: &ResultFile, rf: &ResultFile) -> f64 {
    let overrides: Vec<String> = extra
        .chunks(2)
        .filter(|c| c[0] == "--set")
        .map(|c| c[1].to_string())
        .collect();
    let loaded = signfold::physics::defaults::load(job, &overrides).expect("the demo loads");
    let checks = compare(
        name,
        loaded.job.particles.count,
        loaded.job.numerics.groups as usize,
        sample_resolution(mc),
        mc,
        rf,
    );
    assert!(!checks.is_empty(), "{name}: no common output times");
    let failed: Vec<String> = checks
        .iter()
        .filter(|c| !c.passed())
        .map(|c| format!("{} at {} fs: {:+.2}", c.observable, c.time, c.statistic()))
        .collect();
    assert!(
        failed.is_empty(),
        "{name}: {} of {} checks outside ±{ACCEPT}: {}",
        failed.len(),
        checks.len(),
        failed.join("; ")
    );
    checks
        .iter()
        .map(|c| c.statistic().abs())
        .fold(0.0, f64::max)
}

#[test]
fn fermion_pair_density_and_pair_density_agree_with_the_exact_reference() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("fermion-pair.toml");
    let rf = reference(dir.path(), &job, &[]);
    let extra = ["--samples", "300000"];
    let mc = run_job(dir.path(), &job, &extra);
    let worst = assert_agrees("fermion-pair", &job, &extra, &mc, &rf);
    eprintln!("fermion-pair: worst |statistic| {worst:.2}");
}

#[test]
fn barrier_packet_density_and_transmitted_norm_agree_with_the_exact_reference() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("barrier-packet.toml");
    let rf = reference(dir.path(), &job, &[]);
    let extra = ["--samples", "200000"];
    let mc = run_job(dir.path(), &job, &extra);
    let worst = assert_agrees("barrier-packet", &job, &extra, &mc, &rf);
    eprintln!("barrier-packet: worst |statistic| {worst:.2}");
}

#[test]
fn interacting_fermion_pair_agrees_with_the_exact_reference() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("fermion-pair-coulomb.toml");
    let rf = reference(dir.path(), &job, &[]);
    let extra = ["--samples", "200000"];
    let mc = run_job(dir.path(), &job, &extra);
    let worst = assert_agrees("fermion-pair-coulomb", &job, &extra, &mc, &rf);
    eprintln!("fermion-pair-coulomb: worst |statistic| {worst:.2}");
}
