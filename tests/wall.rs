//! A packet reflected by a hard wall: the Monte Carlo (orbitals with their wall images,
//! docs/method.md §2.5) against the exact reference (ψ = 0 at the walls, split-operator
//! sine series; tests/reference.rs checks it against closed forms) while the packet is at
//! the wall, where the incident and reflected waves interfere.
//!
//! Statistic: with B error groups each bin's t = (MC − exact)/se follows Student's t with
//! B − 1 degrees of freedom; `analysis::stats::binned_test` turns the bins' two-sided
//! p-values into a normal score Z (two-sided: too-large error bars fail as well). |Z| ≤ 3.5
//! at each of the six frames: a false failure has probability about 6 × 5·10⁻⁴.

mod common;
use common::*;
use signfold::analysis::stats::binned_test;
use signfold::study::accuracy::common_frames;

// Invented scenario: an electron (effective mass 0.067) in a 70 nm box, sent at the right
// wall (30 nm away, group velocity 1.7 nm/fs) and caught from 5 fs before it arrives until
// it has turned back.
const JOB: &str = r#"
[particles]
count = 1
statistics = "distinguishable"
mass = 0.067

[[orbital]]
kind = "gaussian"
centre = 0.0
wavevector = 1.0
width = 3.0

[domain]
x_min = -40.0
x_max = 30.0
cells = 140
boundary = "reflecting"
k_max = 3.0

[numerics]
coherence_length = 30.0
sync_step = 1.0
end_time = 25.0
particles = 100000
groups = 8
seed = 2029

[output]
interval = 5.0
x_bins = 35
k_bins = 60
"#;

#[test]
fn density_at_a_hard_wall_agrees_with_the_exact_reference() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "wall.toml", JOB);
    let mc = run_job(dir.path(), &job, &[]);
    let out = dir.path().join("ref");
    ok(&signfold(&[
        "reference",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--force",
    ]));
    let rf = signfold::io::results::ResultFile::read(&out.join("reference.h5")).unwrap();
    let frames = common_frames(&mc, &rf);
    assert_eq!(frames.len(), 6);
    let (v, e, x) = (
        &mc.series["density"],
        &mc.series["density_error"],
        &rf.series["density"],
    );
    let mut at_wall = 0.0f64;
    for (i, j, t) in frames {
        let r = binned_test(v.frame(i), e.frame(i), x.frame(j), 8, |_| true);
        assert!(
            r.z.abs() <= 3.5,
            "t = {t} fs: Z = {:.2}, mean t² {:.2} (expected {:.2}) over {} bins",
            r.z,
            r.mean_t2,
            r.expected_t2,
            r.bins
        );
        let last = x.frame(j).len() - 1;
        at_wall = at_wall.max(x.frame(j)[last] / x.frame(j).iter().cloned().fold(0.0, f64::max));
    }
    // The test is about the wall: some frame must have the packet there.
    assert!(
        at_wall > 0.05,
        "the packet never reached the last bin ({at_wall})"
    );
}
