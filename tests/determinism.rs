//! The same job and seed give bit-identical datasets (outside `/run`) on 1, 2 and 3 ranks
//! and on 1 or 2 threads: random numbers follow particle identities, sums are integer.
//! (A contract of the engine, no outside source.)

mod common;

use common::*;
use signfold::io::results::ResultFile;
use std::path::Path;

fn run_with(dir: &Path, ranks: usize, threads: usize, job: &Path, extra: &[&str]) -> ResultFile {
    let out = dir.join(format!("np{ranks}-t{threads}"));
    let t = threads.to_string();
    let mut args = vec![
        "run",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--threads",
        &t,
    ];
    args.extend_from_slice(extra);
    let o = if ranks == 1 {
        signfold(&args)
    } else {
        mpirun(ranks, &args)
    };
    ok(&o);
    ResultFile::read(&out.join("observables.h5")).unwrap()
}

fn assert_identical(a: &ResultFile, b: &ResultFile, what: &str) {
    assert_eq!(a.job_text, b.job_text);
    assert_same_datasets(a, b, what);
}

/// A job with kernel events, annihilation (several passes, mixed cells spread over ranks)
/// and absorption: the barrier demo, made small.
#[test]
fn barrier_run_is_identical_on_any_partition() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("barrier-packet.toml");
    let extra = [
        "--samples",
        "20000",
        "--set",
        "numerics.end_time=60",
        "--set",
        "annihilation.trigger=1.5",
    ];
    let base = run_with(dir.path(), 1, 1, &job, &extra);
    assert!(
        base.records["annihilation_time"].1.len() >= 3,
        "the test must exercise annihilation"
    );
    for (ranks, threads) in [(1, 2), (2, 1), (3, 1)] {
        let other = run_with(dir.path(), ranks, threads, &job, &extra);
        assert_identical(
            &base,
            &other,
            &format!("{ranks} rank(s) × {threads} thread(s)"),
        );
    }
}

/// Two interacting fermions with exchange-merged relative cells.
#[test]
fn interacting_pair_is_identical_on_any_partition() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("fermion-pair-coulomb.toml");
    let extra = [
        "--samples",
        "20000",
        "--set",
        "numerics.end_time=40",
        "--set",
        "annihilation.trigger=1.5",
    ];
    let base = run_with(dir.path(), 1, 2, &job, &extra);
    assert!(!base.records["annihilation_time"].1.is_empty());
    for ranks in [2, 3] {
        let other = run_with(dir.path(), ranks, 1, &job, &extra);
        assert_identical(&base, &other, &format!("{ranks} ranks"));
    }
}

/// A budget so tight that annihilation must merge cells (adaptive resolution: the merge
/// tree decides from counts gathered at the owners of the coarsest cells; fixed: whole
/// coarser levels) stays bit-identical on any partition, and the merging is recorded.
#[test]
fn merged_cells_are_identical_on_any_partition() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("barrier-packet.toml");
    for resolution in ["adaptive", "fixed"] {
        let sub = dir.path().join(resolution);
        let r = format!("annihilation.resolution=\"{resolution}\"");
        let extra = [
            "--samples",
            "20000",
            "--set",
            "numerics.end_time=60",
            "--set",
            "annihilation.budget=40000",
            "--set",
            &r,
        ];
        let base = run_with(&sub, 1, 1, &job, &extra);
        let coarsest = &base.records["annihilation_coarsest_level"].1;
        assert!(
            coarsest.iter().any(|&l| l > 0.0),
            "{resolution}: the budget must force merged cells, got levels {coarsest:?}"
        );
        for (ranks, threads) in [(1, 2), (2, 1), (3, 1)] {
            let other = run_with(&sub, ranks, threads, &job, &extra);
            assert_identical(
                &base,
                &other,
                &format!("{resolution}: {ranks} rank(s) × {threads} thread(s)"),
            );
        }
    }
}
