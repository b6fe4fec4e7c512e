//! `signfold merge`: runs of one job with different seeds combine into one result that
//! agrees, within its error bars, with one run of the summed sample count; what cannot be
//! merged is refused with a message naming what differs.

mod common;

use common::{demo, ok, signfold};
use signfold::io::results::ResultFile;
use std::path::{Path, PathBuf};
use std::process::Output;

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// Run the free fermion pair (no potential: no generation, no annihilation, so the result
/// has no bias that depends on the sample count) for 20 fs into `dir/name`.
fn run(dir: &Path, name: &str, particles: u32, seed: u32, extra: &[&str]) -> PathBuf {
    let out = dir.join(name);
    let job = demo("fermion-pair.toml");
    let (p, sd) = (particles.to_string(), format!("numerics.seed={seed}"));
    let mut args = vec![
        "run",
        s(&job),
        "--out",
        s(&out),
        "--samples",
        &p,
        "--set",
        &sd,
        "--set",
        "numerics.end_time=20",
    ];
    args.extend_from_slice(extra);
    ok(&signfold(&args));
    out
}

fn refused(out: &Output, words: &[&str]) {
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "not refused:\n{err}");
    assert!(!err.contains("panicked"), "{err}");
    for w in words {
        assert!(err.contains(w), "{w:?} missing from:\n{err}");
    }
}

#[test]
fn merged_runs_agree_with_one_run_of_the_summed_sample_count() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = run(d, "a", 20000, 1, &[]);
    let b = run(d, "b", 20000, 2, &[]);
    let one = run(d, "one", 40000, 3, &[]);
    let merged = d.join("merged");
    let text = ok(&signfold(&["merge", s(&a), s(&b), "--out", s(&merged)]));
    assert!(text.contains("16 error groups"), "{text}");
    let m = ResultFile::read(&merged.join("observables.h5")).unwrap();
    let o = ResultFile::read(&one.join("observables.h5")).unwrap();
    let ra = ResultFile::read(&a.join("observables.h5")).unwrap();
    let rb = ResultFile::read(&b.join("observables.h5")).unwrap();
    assert_eq!(m.times(), o.times());
    assert!(m.job_text.contains("groups = 16") && m.job_text.contains("samples = 40000"));
    // Sample counts add up.
    for (i, &c) in m.series["samples"].data.iter().enumerate() {
        assert_eq!(
            c,
            ra.series["samples"].data[i] + rb.series["samples"].data[i]
        );
    }
    // Scalars at the last output: z = (merged − one)/sqrt(se² + se²) is close to Student t
    // with 7 degrees of freedom (the 8-group error of the single run dominates);
    // P(|t₇| > 5) ≈ 0.002 per value (two-sided), so |z| ≤ 5 for all four values fails a
    // correct merge with probability below 1 %.
    let last = m.times().len() - 1;
    for name in ["energy", "mean_x", "mean_k", "norm_right"] {
        let (vm, em) = (
            m.series[name].data[last],
            m.series[&format!("{name}_error")].data[last],
        );
        let (vo, eo) = (
            o.series[name].data[last],
            o.series[&format!("{name}_error")].data[last],
        );
        assert!(em > 0.0 && eo > 0.0, "{name}: errors {em}, {eo}");
        let z = (vm - vo) / (em * em + eo * eo).sqrt();
        assert!(
            z.abs() <= 5.0,
            "{name}: merged {vm} ± {em}, one run {vo} ± {eo}, z = {z}"
        );
    }
    // Densities: the mean over bins of z² estimates E[t²] ≈ 7/5 (t₇) to 15/13 (t₁₅); with
    // Var(t₇²) ≈ 7.8 per bin and at least 25 independent bins among the ~200 used (bins
    // are correlated through the shared groups), the mean stays below 1.4 + 4·sqrt(7.8/25)
    // ≈ 3.6 for a correct merge.
    // The merged error bars have the size of the single run's (same samples in all): the
    // ratio of the summed variances over bins is 1 up to the spread of the two variance
    // estimates (relative sd sqrt(2/15) and sqrt(2/7) per bin, ≈ 0.12 for 25 independent
    // bins); 0.5..2 is four of those sd and excludes the factors a wrong pooling gives
    // (≥ 2 when the between-run spread or the group counts are mishandled).
    for name in ["density", "pair_density"] {
        let (mut z2, mut n, mut var_m, mut var_o) = (0.0, 0.0, 0.0, 0.0);
        for t in 1..m.times().len() {
            let (vm, em) = (
                m.series[name].frame(t),
                m.series[&format!("{name}_error")].frame(t),
            );
            let (vo, eo) = (
                o.series[name].frame(t),
                o.series[&format!("{name}_error")].frame(t),
            );
            for i in 0..vm.len() {
                if em[i] > 0.0 && eo[i] > 0.0 {
                    z2 += (vm[i] - vo[i]).powi(2) / (em[i] * em[i] + eo[i] * eo[i]);
                    n += 1.0;
                    var_m += em[i] * em[i];
                    var_o += eo[i] * eo[i];
                }
            }
        }
        assert!(n > 100.0, "{name}: only {n} bins with errors");
        let mean = z2 / n;
        eprintln!(
            "{name}: mean z² {mean:.3} over {n} bins, merged/one-run error variance {:.3}",
            var_m / var_o
        );
        assert!(mean < 3.6, "{name}: mean z² = {mean} over {n} bins");
        let ratio = var_m / var_o;
        assert!(
            (0.5..2.0).contains(&ratio),
            "{name}: merged/one-run error variance {ratio}"
        );
    }
}

#[test]
fn merge_refuses_what_cannot_be_merged() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = run(d, "a", 4000, 1, &[]);
    let b = run(d, "b", 4000, 2, &[]);
    let out = d.join("out");

    // A different job: the key and both values are named.
    let other = run(d, "other", 4000, 5, &["--set", "domain.k_max=1.4"]);
    refused(
        &signfold(&["merge", s(&a), s(&other), "--out", s(&out)]),
        &["different jobs", "`domain.k_max`", "1.5", "1.4"],
    );
    // The same seed twice.
    let same = run(d, "same", 8000, 1, &[]);
    refused(
        &signfold(&["merge", s(&a), s(&same), "--out", s(&out)]),
        &["same seed 1"],
    );
    // An incomplete run (stopped early) has fewer output times.
    let short = run(d, "short", 4000, 6, &["--until", "10"]);
    refused(
        &signfold(&["merge", s(&a), s(&short), "--out", s(&out)]),
        &["different output times", "merge complete runs only"],
    );
    // A format version this program does not read (a future one).
    let future = signfold::io::names::FORMAT_VERSION + 1;
    let v2 = d.join("v2.h5");
    std::fs::copy(a.join("observables.h5"), &v2).unwrap();
    {
        let f = hdf5::File::open_rw(&v2).unwrap();
        f.delete_attr("format_version").unwrap();
        f.new_attr::<u32>()
            .create("format_version")
            .unwrap()
            .write_scalar(&future)
            .unwrap();
    }
    refused(
        &signfold(&["merge", s(&v2), s(&b), "--out", s(&out)]),
        &["v2.h5", &format!("format version {future}")],
    );
    assert!(!out.exists(), "a refused merge wrote {}", out.display());

    // A non-empty --out needs --force.
    std::fs::create_dir_all(&out).unwrap();
    std::fs::write(out.join("notes.txt"), "mine").unwrap();
    refused(
        &signfold(&["merge", s(&a), s(&b), "--out", s(&out)]),
        &["not empty", "--force"],
    );
    assert!(!out.join("observables.h5").exists());
    ok(&signfold(&[
        "merge",
        s(&a),
        s(&b),
        "--out",
        s(&out),
        "--force",
    ]));
    assert!(out.join("observables.h5").exists());
    assert_eq!(
        std::fs::read_to_string(out.join("notes.txt")).unwrap(),
        "mine"
    );
}
