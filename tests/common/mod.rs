//! Helpers shared by the integration tests: run the binary, write jobs, read results.
#![allow(dead_code)]

use signfold::io::results::ResultFile;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

pub fn bin() -> &'static str {
    env!("CARGO_BIN_EXE_signfold")
}

/// Run `signfold ARGS` (one rank, no mpirun); panics with the output when it fails and
/// `expect_ok` is set.
pub fn signfold(args: &[&str]) -> Output {
    Command::new(bin())
        .args(args)
        .output()
        .expect("the signfold binary runs")
}

pub fn ok(out: &Output) -> String {
    assert!(
        out.status.success(),
        "signfold failed ({}):\nstdout:\n{}\nstderr:\n{}",
        out.status,
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// `mpirun -np P signfold ARGS`, as root where needed, oversubscribed.
pub fn mpirun(p: usize, args: &[&str]) -> Output {
    Command::new("mpirun")
        .args(["-np", &p.to_string(), "--oversubscribe", bin()])
        .args(args)
        .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
        .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
        .env("OMPI_MCA_rmaps_base_oversubscribe", "1")
        .output()
        .expect("mpirun runs")
}

/// A small free fermion pair (no potential, no interaction): 2 fs sync steps to 8 fs, 2000
/// particles in 4 groups; well under a second on one core.
pub const FREE_PAIR: &str = r#"
[particles]
count = 2
statistics = "fermion"
mass = 0.067

[[orbital]]
kind = "gaussian"
centre = -20.0
wavevector = 0.4
width = 5.0

[[orbital]]
kind = "gaussian"
centre = 20.0
wavevector = -0.4
width = 5.0

[domain]
x_min = -80.0
x_max = 80.0
mesh_cells = 160
boundary = "absorbing"
k_max = 1.5

[numerics]
coherence_length = 100.0
sync_step = 2.0
end_time = 8.0
samples = 2000
groups = 4
seed = 1
"#;

/// Write `text` as `name` in `dir` and return its path.
pub fn write_job(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).expect("job file written");
    p
}

/// Run a job on one rank into `dir/out` and read the results.
pub fn run_job(dir: &Path, job: &Path, extra: &[&str]) -> ResultFile {
    let out = dir.join("out");
    let mut args = vec![
        "run",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--force",
    ];
    args.extend_from_slice(extra);
    ok(&signfold(&args));
    ResultFile::read(&out.join("observables.h5")).expect("results readable")
}

/// The repository's demo job `name` (jobs/NAME).
pub fn demo(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("jobs")
        .join(name)
}

/// A freely moving Gaussian orbital (textbook free Gaussian packet, e.g. Griffiths,
/// Introduction to Quantum Mechanics, problem on the free Gaussian packet):
/// φ(x, t) = (2πσ²)^-1/4 (1 + iτ)^-1/2 exp(−(x − x0 − vt)²/(4σ²(1 + iτ)) + i k0 x − i ħk0²t/2m),
/// τ = ħt/(2mσ²), v = ħk0/m. Units nm, fs, 1/nm; `m` in eV·fs²/nm².
pub fn free_gaussian(
    x0: f64,
    k0: f64,
    sigma: f64,
    m: f64,
    t: f64,
    x: f64,
) -> num_complex::Complex64 {
    use num_complex::Complex64 as C;
    let hbar = signfold::physics::units::HBAR;
    let tau = hbar * t / (2.0 * m * sigma * sigma);
    let v = hbar * k0 / m;
    let one_it = C::new(1.0, tau);
    let u = x - x0 - v * t;
    let e = C::new(-u * u, 0.0) / (one_it * 4.0 * sigma * sigma)
        + C::new(0.0, k0 * x - hbar * k0 * k0 * t / (2.0 * m));
    e.exp() * (2.0 * std::f64::consts::PI * sigma * sigma).powf(-0.25) / one_it.sqrt()
}

/// Chi-square per degree of freedom of `mc` against `exact` over bins whose standard
/// error is positive and whose exact value is at least `floor`; returns (χ²/dof, dof).
pub fn chi2(mc: &[f64], err: &[f64], exact: &[f64], floor: f64) -> (f64, usize) {
    let mut s = 0.0;
    let mut dof = 0;
    for i in 0..mc.len() {
        if err[i] > 0.0 && exact[i].abs() >= floor {
            s += ((mc[i] - exact[i]) / err[i]).powi(2);
            dof += 1;
        }
    }
    (s / dof.max(1) as f64, dof)
}

/// The bound a χ²/dof may reach when the errors are right: with B groups the estimated
/// variances scatter, so E[χ²/dof] = (B−1)/(B−3); the standard deviation of χ²/dof for
/// independent bins is about sqrt(2/dof) (neighbouring bins are positively correlated,
/// so allow 3 of those on top of 6 standard deviations).
pub fn chi2_bound(groups: usize, dof: usize) -> f64 {
    let b = groups as f64;
    (b - 1.0) / (b - 3.0) + 6.0 * 3.0 * (2.0 / dof as f64).sqrt()
}

/// Every dataset outside `/run` (series and records) of `a` and `b` is identical bit for
/// bit, with the same frame shapes.
pub fn assert_same_datasets(a: &ResultFile, b: &ResultFile, what: &str) {
    assert_eq!(a.x, b.x, "{what}: x");
    assert_eq!(a.k, b.k, "{what}: k");
    assert_eq!(
        a.series.keys().collect::<Vec<_>>(),
        b.series.keys().collect::<Vec<_>>(),
        "{what}: same datasets"
    );
    let same = |v: &[f64], w: &[f64]| {
        v.len() == w.len() && v.iter().zip(w).all(|(x, y)| x.to_bits() == y.to_bits())
    };
    for (name, s) in &a.series {
        let t = &b.series[name];
        assert_eq!(s.frame_shape, t.frame_shape, "{what}: {name} shape");
        assert!(same(&s.data, &t.data), "{what}: dataset {name} differs");
    }
    for (name, (_, v)) in &a.records {
        assert!(same(v, &b.records[name].1), "{what}: {name} differs");
    }
}
