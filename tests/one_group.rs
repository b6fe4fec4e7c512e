//! `numerics.groups = 1` runs without error bars: every `<name>_error` dataset holds NaN
//! (docs/formats.md), the values are the same pooled estimates (norm exactly 1 at t = 0,
//! ∫n dx = N × norm at every output), and the pictures are still drawn.
//! (A contract of the engine, no outside source.)

mod common;

use common::*;
use signfold::io::results::ResultFile;

#[test]
fn one_group_writes_nan_errors_and_finite_values() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("run");
    let s = |p: &std::path::Path| p.to_str().unwrap().to_string();
    let job = demo("fermion-pair-coulomb.toml");
    ok(&signfold(&[
        "run",
        &s(&job),
        "--out",
        &s(&out),
        "--samples",
        "4000",
        "--set",
        "numerics.end_time=10",
        "--set",
        "numerics.groups=1",
    ]));
    let rf = ResultFile::read(&out.join("observables.h5")).unwrap();
    let mut errors = 0;
    for (name, series) in &rf.series {
        if name.ends_with("_error") {
            errors += 1;
            assert!(
                series.data.iter().all(|v| v.is_nan()),
                "{name}: one group has no spread, so no standard error"
            );
        } else if name != "time" {
            assert!(
                series.data.iter().all(|v| v.is_finite()),
                "{name}: values are finite"
            );
        }
    }
    assert!(errors > 5, "the error datasets are still written");
    let norm = &rf.series["norm"].data;
    assert!((norm[0] - 1.0).abs() < 1e-12, "norm(0) = {}", norm[0]);
    // ∫ n dx = N × norm (N = 2), exactly up to round-off: the same particles fill both.
    let density = &rf.series["density"];
    let dx = rf.x[1] - rf.x[0];
    for (t, &nm) in norm.iter().enumerate() {
        let integral: f64 = density.frame(t).iter().sum::<f64>() * dx;
        assert!(
            (integral - 2.0 * nm).abs() < 1e-9,
            "frame {t}: ∫n dx = {integral}, 2 × norm = {}",
            2.0 * nm
        );
    }
    let pictures = dir.path().join("pictures");
    ok(&signfold(&[
        "plot",
        &s(&out.join("observables.h5")),
        "--out",
        &s(&pictures),
    ]));
    assert!(std::fs::read_dir(&pictures).unwrap().count() > 0);
}
