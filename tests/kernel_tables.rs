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

/// On a ring the kernel sees the potential continued one turn on (docs/method.md §2.5): a
/// bump 20 nm (ten widths, so its tail at the seam is below 1e-20 of its height) from the
/// right edge of a periodic 160 nm box gives the same table as the open box with the bump
/// and its two copies one turn away (−100 nm and 220 nm), at every mesh point — in
/// particular near the left edge, where only the copy at −100 nm is within L_c/2 = 50 nm.
/// Without the continuation those rows would be those of a bump-free region. Tolerance:
/// rounding of the FFT sums, 1e-9 of the table's largest entry.
#[test]
fn ring_kernel_sees_the_potential_one_turn_on() {
    let dir = tempfile::tempdir().unwrap();
    let job = |boundary: &str, centres: &[f64]| {
        let mut text = format!(
            "[particles]\ncount = 1\nstatistics = \"distinguishable\"\nmass = 0.067\n\n\
             [[orbital]]\nkind = \"gaussian\"\ncentre = -40.0\nwavevector = 0.5\nwidth = 8.0\n\n\
             [domain]\nx_min = -80.0\nx_max = 80.0\nmesh_cells = 320\nboundary = \"{boundary}\"\nk_max = 2.5\n\n\
             [numerics]\nsync_step = 1.0\nend_time = 10.0\nsamples = 1000\ncoherence_length = 100.0\n"
        );
        for c in centres {
            text += &format!(
                "\n[[potential]]\nkind = \"gaussian\"\ncentre = {c}\nwidth = 2.0\nheight = 0.04\n"
            );
        }
        let path = common::write_job(dir.path(), &format!("{boundary}.toml"), &text);
        setup_of(&path, &[])
    };
    let ring = job("periodic", &[60.0]);
    let open = job("absorbing", &[-100.0, 60.0, 220.0]);
    let (a, b) = (ring.table1.as_ref().unwrap(), open.table1.as_ref().unwrap());
    assert_eq!((a.points, a.cap), (b.points, b.cap));
    let peak = (0..b.points)
        .flat_map(|j| b.row(j).iter())
        .fold(0.0f64, |m, v| m.max(v.abs()));
    let near_left = b.cell(-75.0).unwrap();
    let edge_peak = b.row(near_left).iter().fold(0.0f64, |m, v| m.max(v.abs()));
    assert!(
        edge_peak > 1e-3 * peak,
        "the copy at −100 nm reaches the left edge's rows ({edge_peak} of {peak})"
    );
    for j in 0..a.points {
        for (x, y) in a.row(j).iter().zip(b.row(j)) {
            assert!(
                (x - y).abs() <= 1e-9 * peak,
                "row {j}: ring {x} against open box with copies {y}"
            );
        }
    }
}
