//! `run --systematic`: the convergence check a user gets where no exact answer exists.

mod common;
use common::*;
use signfold::io::results::ResultFile;
use signfold::study::systematic;
use std::path::Path;

#[test]
fn systematic_check_reruns_with_own_seeds_and_flags_a_moved_answer() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("run");
    let o = out.to_str().unwrap();
    let job = Path::new(env!("CARGO_MANIFEST_DIR")).join("jobs/validation/v08-fermions-trap.toml");
    let j = job.to_str().unwrap();
    // Stopping early and rerunning to the end do not mix: refused before anything runs.
    let refused = signfold(&["run", j, "--out", o, "--systematic", "--until", "5"]);
    assert!(!refused.status.success());
    assert!(String::from_utf8_lossy(&refused.stderr).contains("--until"));
    assert!(!out.exists(), "nothing written when refused");
    // Two fermions in a trap with no kernel potential: nothing to annihilate, so the
    // variants differ from the base run by their seeds only and nothing may move (the
    // difference tests are two-sided: error bars too large would fail too).
    let text = ok(&signfold(&[
        "run",
        j,
        "--out",
        o,
        "--samples",
        "40000",
        "--systematic",
    ]));
    assert!(text.contains("signfold: systematic check passed"), "{text}");
    let report = std::fs::read_to_string(out.join("systematic.md")).unwrap();
    let mut seeds = Vec::new();
    for (label, tag) in [
        ("2× budget", "budget-2x"),
        ("4× budget", "budget-4x"),
        ("1.5× L_c", "coherence-1.5x"),
    ] {
        let row = report
            .lines()
            .find(|l| l.starts_with(&format!("| {label} |")))
            .unwrap_or_else(|| panic!("{label} in\n{report}"));
        let seed = row
            .split("numerics.seed=")
            .nth(1)
            .unwrap()
            .split(' ')
            .next()
            .unwrap();
        seeds.push(seed.to_string());
        assert!(
            out.join("systematic")
                .join(tag)
                .join("observables.h5")
                .exists()
        );
    }
    seeds.dedup();
    assert_eq!(
        seeds.len(),
        3,
        "each variant has a seed of its own: {report}"
    );
    // The same comparison sees a 10 % change of the density in one run.
    let base = ResultFile::read(&out.join("observables.h5")).unwrap();
    let var = ResultFile::read(&out.join("systematic/budget-2x/observables.h5")).unwrap();
    let groups = 8;
    let same = systematic::compare_runs("v", groups, &base, &var);
    assert!(same.iter().all(|c| c.passed()));
    let mut shifted = var.clone();
    for v in &mut shifted.series.get_mut("density").unwrap().data {
        *v *= 1.1;
    }
    let moved = systematic::compare_runs("v", groups, &base, &shifted);
    assert!(
        moved
            .iter()
            .any(|c| !c.passed() && c.observable == "density"),
        "a 10 % density change must move"
    );
}
