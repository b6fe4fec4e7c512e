//! Bad input gets a clear message naming the problem and a non-zero exit; never a panic,
//! and nothing already written is overwritten. (Contract of the command line.)

mod common;

use common::*;

/// The small free pair of `common`.
const GOOD: &str = FREE_PAIR;

/// Run `check` and `run` on `text`; both must fail with a message containing every
/// fragment in `expect`, exit code 2, and no panic.
fn refused(text: &str, expect: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "bad.toml", text);
    let out = dir.path().join("out");
    for args in [
        vec!["check", job.to_str().unwrap()],
        vec!["run", job.to_str().unwrap(), "--out", out.to_str().unwrap()],
    ] {
        let o = signfold(&args);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(
            o.status.code(),
            Some(2),
            "{args:?}: exit {:?}, stderr {err}",
            o.status.code()
        );
        assert!(
            !err.contains("panicked") && !err.contains("RUST_BACKTRACE"),
            "a panic: {err}"
        );
        for e in expect {
            assert!(
                err.contains(e),
                "{args:?}: message should mention `{e}`:\n{err}"
            );
        }
        assert!(
            err.contains("bad.toml"),
            "the message names the file: {err}"
        );
    }
    assert!(!out.join("observables.h5").exists());
}

#[test]
fn the_good_job_runs() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "good.toml", GOOD);
    ok(&signfold(&["check", job.to_str().unwrap()]));
}

#[test]
fn malformed_toml_line_is_located() {
    let text = GOOD.replace("mass = 0.067", "mass = = 0.067");
    refused(&text, &["line 5"]);
}

#[test]
fn unknown_key_is_named() {
    let text = GOOD.replace("seed = 1", "seed = 1\nsede = 2");
    refused(&text, &["unknown field `sede`"]);
}

#[test]
fn negative_width_is_named() {
    let text = GOOD.replacen("width = 5.0", "width = -5.0", 1);
    refused(&text, &["orbital.0.width", "greater than zero"]);
}

#[test]
fn particle_count_must_match_the_orbitals() {
    let text = GOOD.replace("count = 2", "count = 3");
    refused(&text, &["particles.count is 3", "2 [[orbital]]"]);
}

#[test]
fn identical_fermion_orbitals_are_a_pauli_error() {
    let text = GOOD.replace(
        "centre = 20.0\nwavevector = -0.4",
        "centre = -20.0\nwavevector = 0.4",
    );
    refused(&text, &["Slater determinant vanishes"]);
}

#[test]
fn coherence_length_must_be_positive() {
    for v in ["0.0", "-10.0"] {
        let text = GOOD.replace(
            "coherence_length = 100.0",
            &format!("coherence_length = {v}"),
        );
        refused(&text, &["numerics.coherence_length", "greater than zero"]);
    }
}

#[test]
fn bad_override_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "good.toml", GOOD);
    let o = signfold(&["check", job.to_str().unwrap(), "--set", "numerics.groups=0"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("numerics.groups"));
    let o = signfold(&["check", job.to_str().unwrap(), "--set", "numerics"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("KEY=VALUE"));
}

/// A directory that holds results is not overwritten without --force, and its file is
/// left byte for byte as it was.
#[test]
fn results_are_not_overwritten_without_force() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "good.toml", GOOD);
    let out = dir.path().join("out");
    ok(&signfold(&[
        "run",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]));
    let before = std::fs::read(out.join("observables.h5")).unwrap();
    let o = signfold(&[
        "run",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--set",
        "numerics.seed=2",
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("already holds results") && err.contains("--force"),
        "{err}"
    );
    assert_eq!(
        std::fs::read(out.join("observables.h5")).unwrap(),
        before,
        "results untouched"
    );
    // With --force it runs and the results change (another seed).
    ok(&signfold(&[
        "run",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--set",
        "numerics.seed=2",
        "--force",
    ]));
    assert_ne!(std::fs::read(out.join("observables.h5")).unwrap(), before);
}

/// Under mpirun the error is reported once and every rank exits non-zero.
#[test]
fn errors_under_mpirun_are_clean() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(
        dir.path(),
        "bad.toml",
        &GOOD.replace("coherence_length = 100.0", "coherence_length = 0.0"),
    );
    let o = mpirun(
        2,
        &[
            "run",
            job.to_str().unwrap(),
            "--out",
            dir.path().join("o").to_str().unwrap(),
        ],
    );
    assert!(!o.status.success());
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(err.matches("numerics.coherence_length").count(), 1, "{err}");
}

/// A run that would pass its memory cap stops with the numbers, before memory runs out.
#[test]
fn memory_cap_stops_the_run_with_the_numbers() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "good.toml", GOOD);
    let out = dir.path().join("out");
    let o = signfold(&[
        "run",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--set",
        "numerics.memory_limit_mib=0.05",
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("memory cap")
            && err.contains("numerics.memory_limit_mib")
            && err.contains("sample count"),
        "{err}"
    );
}
