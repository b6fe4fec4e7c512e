//! The kernel tables the engine builds for real jobs satisfy both moment identities at every
//! mesh point (Ehrenfest, Z. Phys. 45, 455 (1927); Moyal, Proc. Camb. Phil. Soc. 45, 99
//! (1949): the first two terms of the ħ expansion of the Wigner equation), in wavevector
//! units: Σ_M MΔk V_w = −U'/ħ and Σ_M (MΔk)³ V_w = U'''/(4ħ).

mod common;

use signfold::config::job;
use signfold::physics::kernel::KernelTable;
use signfold::physics::numerics::Setup;
use signfold::physics::units::HBAR;

/// Derivatives of f by central differences of step h (truncation O(h²), below 1e-7 here).
fn d1(f: &dyn Fn(f64) -> f64, x: f64, h: f64) -> f64 {
    (f(x + h) - f(x - h)) / (2.0 * h)
}
fn d3(f: &dyn Fn(f64) -> f64, x: f64, h: f64) -> f64 {
    (f(x + 2.0 * h) - 2.0 * f(x + h) + 2.0 * f(x - h) - f(x - 2.0 * h)) / (2.0 * h * h * h)
}

/// Check both identities at every cell centre of `t`, relative to the peak of each side.
fn check(t: &KernelTable, u: &dyn Fn(f64) -> f64, what: &str, tol1: f64, tol3: f64) {
    let dk = t.dk;
    let k = t.cap as f64;
    let centres: Vec<f64> = (0..t.points)
        .map(|j| t.lo + (j as f64 + 0.5) * t.dx)
        .collect();
    let e1: Vec<f64> = centres.iter().map(|&x| -d1(u, x, 1e-3) / HBAR).collect();
    let e3: Vec<f64> = centres
        .iter()
        .map(|&x| d3(u, x, 4e-3) / (4.0 * HBAR))
        .collect();
    let p1 = e1.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let p3 = e3.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    assert!(p1 > 0.0);
    for j in 0..t.points {
        let row = t.row(j);
        let mom = |p: i32| -> f64 {
            row.iter()
                .enumerate()
                .map(|(i, v)| ((i as f64 - k) * dk).powi(p) * v)
                .sum()
        };
        let (m1, m3) = (mom(1), mom(3));
        assert!(
            (m1 - e1[j]).abs() < tol1 * p1,
            "{what}: first moment at x = {}: {m1} vs {}",
            centres[j],
            e1[j]
        );
        assert!(
            (m3 - e3[j]).abs() < tol3 * p3,
            "{what}: third moment at x = {}: {m3} vs {}",
            centres[j],
            e3[j]
        );
    }
}

fn setup_of(path: &std::path::Path, overrides: &[&str]) -> Setup {
    let o: Vec<String> = overrides.iter().map(|s| s.to_string()).collect();
    let loaded = job::load(path, &o).expect("demo job loads");
    Setup::new(&loaded).expect("setup")
}

/// One-body table of the smoothed rectangular barrier of the barrier demo. The momentum
/// range is raised so that the cap cuts no weight (the barrier's smoothed edges have a
/// kernel tail that the demo's cap cuts at the 1e-4 level, which `check` reports).
#[test]
fn barrier_table_moments() {
    let s = setup_of(&common::demo("barrier-packet.toml"), &["domain.k_max=10.0"]);
    let t = s.table1.as_ref().expect("barrier has a kernel table");
    assert!(t.tail < 1e-6, "tail {}", t.tail);
    let ob = s.one_body.clone();
    check(t, &|x| ob.kernel_part(x), "barrier", 1e-5, 1e-4);
}

/// Pair table of the soft-Coulomb demo on the relative-coordinate mesh [−L, L].
#[test]
fn soft_coulomb_pair_table_moments() {
    let s = setup_of(
        &common::demo("fermion-pair-coulomb.toml"),
        &["domain.k_max=6.0"],
    );
    let t = s.table2.as_ref().expect("pair table");
    assert_eq!(t.points, 2 * s.job.domain.mesh_cells);
    assert!(
        (t.lo + (s.hi - s.lo)).abs() < 1e-12,
        "relative mesh starts at −L"
    );
    let p = s.pair.expect("pair potential");
    check(t, &|r| p.value(r), "soft Coulomb", 1e-5, 1e-4);
}

/// Gaussian bump + harmonic trap: the harmonic part is a force, not in the table.
#[test]
fn trap_table_holds_only_the_kernel_part() {
    let s = setup_of(
        &common::demo("three-fermions-trap.toml"),
        &["domain.k_max=6.0"],
    );
    let t = s.table1.as_ref().expect("bump has a table");
    let ob = s.one_body.clone();
    check(t, &|x| ob.kernel_part(x), "bump", 1e-5, 1e-4);
    assert!(s.one_body.force.stiffness > 0.0);
}
