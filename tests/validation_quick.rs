//! `signfold validate --quick`, the subset of the validation suite that takes one job per
//! code path (a one-body kernel with absorbing ends, a force with a kernel term in a closed
//! box, identical fermions with exchange and the pair interaction, a reflecting wall, a
//! periodic box), agrees with the exact reference at every output time and observable,
//! two-sided, by the tests of docs/method.md §4 (exact references from the cache in
//! jobs/validation/reference-cache, itself checked against a fresh solution in
//! `study::refcache`'s tests). Fixed seeds: the outcome is reproducible, and it fails when
//! a change biases any of these jobs beyond its error bars or mis-sizes the error bars.

mod common;
use common::*;
use std::path::Path;

#[test]
fn quick_validation_agrees_with_the_exact_reference() {
    let dir = tempfile::tempdir().unwrap();
    let jobs = Path::new(env!("CARGO_MANIFEST_DIR")).join("jobs/validation");
    let out = signfold(&[
        "validate",
        "--quick",
        "--jobs",
        jobs.to_str().unwrap(),
        "--out",
        dir.path().to_str().unwrap(),
    ]);
    let report =
        std::fs::read_to_string(dir.path().join("VALIDATION-quick.md")).unwrap_or_else(|e| {
            panic!(
                "no report ({e}); stderr:\n{}",
                String::from_utf8_lossy(&out.stderr)
            )
        });
    assert!(
        out.status.success(),
        "validate --quick failed:\n{report}\nstderr:\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for job in signfold::study::validate::QUICK {
        assert!(
            report.contains(&format!("| {job} |")),
            "{job} missing from\n{report}"
        );
    }
}
