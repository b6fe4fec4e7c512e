//! The Monte Carlo against the exact grid reference (`signfold reference`, split-operator
//! Fourier method, Feit, Fleck & Steiger, J. Comput. Phys. 47, 412 (1982); itself checked
//! against closed forms in tests/reference.rs) for three demo jobs at a few 10⁵ particles.
//!
//! Every tolerance has two parts, stated where it is used:
//! - noise: from the standard errors the engine writes in `*_error` (a few of them);
//! - the discretisation floor (coherence length, annihilation cells) of that job and
//!   setting, MEASURED by `signfold accuracy` (scaling-results/ACCURACY.md, fit
//!   L1² = floor² + c²/N over the particle ladder, scaling-results/accuracy-fit.csv).
//!
//! The relative L1 distances are on the jobs' own output bins (2 nm wide for all three).
//! The bound on L1 uses the triangle inequality: with MC − ref = noise + bias per bin,
//! Σ|MC − ref| ≤ Σ|noise| + Σ|bias|, so L1 ≤ L1_noise + floor. For the noise part,
//! E|noise_b| = sqrt(2/π) σ_b and Var|noise_b| = (1 − 2/π) σ_b² per bin; the bound allows
//! the expectation plus 5 standard deviations of that sum (neighbouring bins are
//! correlated, so the spread is wider than for independent bins).

mod common;
use common::*;
use signfold::io::results::ResultFile;
use signfold::study::accuracy::common_frames;
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

/// L1(t) and its noise-only bound at every common time; panics naming the worst time
/// when L1 exceeds bound + floor.
fn assert_l1_within(mc: &ResultFile, rf: &ResultFile, name: &str, floor: f64) -> f64 {
    let a = &mc.series[name];
    let e = &mc.series[&format!("{name}_error")];
    let b = &rf.series[name];
    let mut worst: f64 = 0.0;
    for (i, j, t) in common_frames(mc, rf) {
        let (fa, fe, fb) = (a.frame(i), e.frame(i), b.frame(j));
        let den: f64 = fb.iter().map(|v| v.abs()).sum();
        let l1: f64 = fa.iter().zip(fb).map(|(x, y)| (x - y).abs()).sum::<f64>() / den;
        let mean = (2.0 / std::f64::consts::PI).sqrt() * fe.iter().sum::<f64>();
        let sd =
            ((1.0 - 2.0 / std::f64::consts::PI) * fe.iter().map(|s| s * s).sum::<f64>()).sqrt();
        let noise = (mean + 5.0 * sd) / den;
        assert!(
            l1 <= noise + floor,
            "{name} at t = {t} fs: relative L1 {l1:.4} (2 nm bins) exceeds noise bound \
             {noise:.4} + measured floor {floor:.4}"
        );
        worst = worst.max(l1 / (noise + floor));
    }
    worst
}

/// Transmitted norm: `absorbed_right` + (1/N)∫_{x>0} n dx at the last output.
fn transmitted_ref(rf: &ResultFile) -> f64 {
    let last = rf.times().len() - 1;
    let dx = rf.x[1] - rf.x[0];
    let inside: f64 =
        rf.x.iter()
            .zip(rf.series["density"].frame(last))
            .filter(|(x, _)| **x > 0.0)
            .map(|(_, v)| v * dx)
            .sum();
    rf.series["absorbed_right"].frame(last)[0] + inside
}

// Floors measured by `signfold accuracy` (scaling-results/ACCURACY.md, accuracy-fit.csv);
// each is the fitted floor of the largest-over-time relative L1 at the job's setting.

/// fermion-pair, L_c = 120 nm: density floor (fit; no kernel and no annihilation act on
/// this free pair, so this is the reference grid plus the upward bias of taking the
/// largest L1 over 15 output times).
const FERMION_PAIR_DENSITY_FLOOR: f64 = 0.0039;
/// fermion-pair, L_c = 120 nm: pair-density floor (fit).
const FERMION_PAIR_PAIR_FLOOR: f64 = 0.016;
/// barrier-packet, L_c = 60 nm, annihilation.cell_x = 0.5 nm: density floor. The fit
/// does not resolve it (floor² < 0, noise-dominated); this is the upper estimate
/// sqrt(L1² − expected_noise²) = sqrt(0.1139² − 0.0914²) from the 3·10⁵ point.
const BARRIER_DENSITY_FLOOR: f64 = 0.068;
/// barrier-packet, same setting: |mean bias| of the transmitted norm plus two of its
/// standard errors (weighted mean of T_mc − T_ref over the ladder).
/// Measured: −0.0115 ± 0.0051, so 0.0115 + 2 × 0.0051.
const BARRIER_TRANSMITTED_FLOOR: f64 = 0.0217;
/// fermion-pair-coulomb, L_c = 120 nm: density floor. The fit does not resolve it; upper
/// estimate sqrt(L1² − expected_noise²) = sqrt(0.0116² − 0.0103²) from the 10⁶ point.
const COULOMB_DENSITY_FLOOR: f64 = 0.0053;
/// fermion-pair-coulomb, L_c = 120 nm: pair-density floor (fit; the same within 10 % at
/// L_c = 90 and 150 nm, so it is the annihilation cells, not the coherence length).
const COULOMB_PAIR_FLOOR: f64 = 0.137;

#[test]
fn fermion_pair_density_and_pair_density_agree_with_the_exact_reference() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("fermion-pair.toml");
    let rf = reference(dir.path(), &job, &[]);
    let mc = run_job(dir.path(), &job, &["--samples", "300000"]);
    let d = assert_l1_within(&mc, &rf, "density", FERMION_PAIR_DENSITY_FLOOR);
    let p = assert_l1_within(&mc, &rf, "pair_density", FERMION_PAIR_PAIR_FLOOR);
    eprintln!("fermion-pair: worst L1/bound density {d:.2}, pair {p:.2}");
}

#[test]
fn barrier_packet_density_and_transmitted_norm_agree_with_the_exact_reference() {
    // The job as shipped annihilates on 2 nm x cells, whose diffusion across the 3 nm
    // barrier biases the transmitted norm by about −0.08 (ACCURACY.md); this test runs the
    // setting with 0.5 nm cells whose floor was measured to be small, so that it tests
    // the kernel and the dynamics rather than one known, measured cell-size bias.
    let dir = tempfile::tempdir().unwrap();
    let job = demo("barrier-packet.toml");
    let rf = reference(dir.path(), &job, &[]);
    let mc = run_job(
        dir.path(),
        &job,
        &["--samples", "200000", "--set", "annihilation.cell_x=0.5"],
    );
    let d = assert_l1_within(&mc, &rf, "density", BARRIER_DENSITY_FLOOR);
    let last = mc.times().len() - 1;
    let t_mc = mc.series["norm_right"].frame(last)[0];
    let err = mc.series["norm_right_error"].frame(last)[0];
    let t_ref = transmitted_ref(&rf);
    // Tolerance: 4 standard errors of the Monte Carlo (the engine's group error of
    // `norm_right`) plus the measured transmitted-norm floor.
    let tol = 4.0 * err + BARRIER_TRANSMITTED_FLOOR;
    assert!(
        (t_mc - t_ref).abs() <= tol,
        "transmitted norm {t_mc:.4} ± {err:.4} vs reference {t_ref:.4} (tolerance {tol:.4} = 4σ + floor {BARRIER_TRANSMITTED_FLOOR})"
    );
    eprintln!(
        "barrier-packet: worst L1/bound density {d:.2}; T {t_mc:.4} ± {err:.4} vs {t_ref:.4}"
    );
}

#[test]
fn interacting_fermion_pair_agrees_with_the_exact_reference() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("fermion-pair-coulomb.toml");
    let rf = reference(dir.path(), &job, &[]);
    let mc = run_job(dir.path(), &job, &["--samples", "200000"]);
    let d = assert_l1_within(&mc, &rf, "density", COULOMB_DENSITY_FLOOR);
    let p = assert_l1_within(&mc, &rf, "pair_density", COULOMB_PAIR_FLOOR);
    eprintln!("fermion-pair-coulomb: worst L1/bound density {d:.2}, pair {p:.2}");
}
