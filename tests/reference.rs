//! The exact reference solver against closed forms, and the `reference`/`compare` commands.
//! Each check names its source; every tolerance says where it comes from.

use signfold::config::job::{LoadedJob, from_text};
use signfold::io::results::{ResultFile, Series};
use signfold::physics::orbitals::{Gaussian, overlap};
use signfold::physics::units::{self, HBAR};
use signfold::reference::{ReferenceOptions, solve_with};
use std::f64::consts::PI;
use std::path::{Path, PathBuf};
use std::process::Command;

fn load(text: &str) -> LoadedJob {
    from_text(text, "test job", PathBuf::new(), &[]).expect("test job is valid")
}

fn solve(text: &str, points: Option<usize>, dt: Option<f64>) -> ResultFile {
    let opts = ReferenceOptions {
        points_per_axis: points,
        dt,
    };
    solve_with(&load(text), &opts, &mut |_| {}).expect("reference solves")
}

fn series<'a>(f: &'a ResultFile, name: &str) -> &'a Series {
    f.series
        .get(name)
        .unwrap_or_else(|| panic!("no series {name}"))
}

fn scalar(f: &ResultFile, name: &str) -> Vec<f64> {
    series(f, name).data.clone()
}

fn width(c: &[f64]) -> f64 {
    c[1] - c[0]
}

/// A one-particle job; `extra` holds further TOML tables (potentials, pair).
fn one_particle(
    boundary: &str,
    (x_min, x_max): (f64, f64),
    k_max: f64,
    (centre, k0, sigma): (f64, f64, f64),
    (end, interval): (f64, f64),
    (x_bins, k_bins): (usize, usize),
    extra: &str,
) -> String {
    format!(
        r#"
[particles]
count = 1
statistics = "distinguishable"
mass = 1.0
[[orbital]]
kind = "gaussian"
centre = {centre}
wavevector = {k0}
width = {sigma}
[domain]
x_min = {x_min}
x_max = {x_max}
boundary = "{boundary}"
k_max = {k_max}
[numerics]
coherence_length = 50.0
sync_step = 1.0
end_time = {end}
samples = 1000
[output]
interval = {interval}
x_bins = {x_bins}
k_bins = {k_bins}
{extra}
"#
    )
}

/// A two-particle job with orbitals (centre, wavevector, width) each.
#[allow(clippy::too_many_arguments)]
fn two_particles(
    statistics: &str,
    boundary: &str,
    (x_min, x_max): (f64, f64),
    k_max: f64,
    orbitals: [(f64, f64, f64); 2],
    (end, interval): (f64, f64),
    (x_bins, k_bins): (usize, usize),
    extra: &str,
) -> String {
    let orb: String = orbitals
        .iter()
        .map(|(c, k, w)| {
            format!(
                "[[orbital]]\nkind = \"gaussian\"\ncentre = {c}\nwavevector = {k}\nwidth = {w}\n"
            )
        })
        .collect();
    format!(
        r#"
[particles]
count = 2
statistics = "{statistics}"
mass = 0.5
{orb}
[domain]
x_min = {x_min}
x_max = {x_max}
boundary = "{boundary}"
k_max = {k_max}
[numerics]
coherence_length = 50.0
sync_step = 1.0
end_time = {end}
samples = 1000
[output]
interval = {interval}
x_bins = {x_bins}
k_bins = {k_bins}
{extra}
"#
    )
}

#[test]
fn free_packet_spreads_and_moves_as_the_closed_form() {
    // Textbook result, e.g. Griffiths, Introduction to Quantum Mechanics, problem on the
    // free Gaussian packet: σ(t) = σ0 sqrt(1 + (ħt/(2mσ0²))²); the centre moves at ħk0/m
    // (Ehrenfest 1927, free motion) and |φ̃(k)|² = sqrt(2/π) σ0 exp(−2σ0²(k − k0)²) does not
    // change.
    let (x0, k0, s0) = (-5.0, 1.0, 2.0);
    let job = one_particle(
        "reflecting",
        (-40.0, 40.0),
        3.0,
        (x0, k0, s0),
        (50.0, 10.0),
        (400, 100),
        "",
    );
    let f = solve(&job, None, None);
    let m = units::mass_from_electron_masses(1.0);
    let w = width(&f.x);
    let dk = width(&f.k);
    let times = f.times().to_vec();
    assert_eq!(times.len(), 6);
    let dens = series(&f, "density");
    let mom = series(&f, "momentum_density");
    let cur = series(&f, "current_density");
    // Bin-averaged closed form of |φ̃|² (64-point midpoint rule per bin).
    let phi2 = |k: f64| (2.0 / PI).sqrt() * s0 * (-2.0 * s0 * s0 * (k - k0) * (k - k0)).exp();
    let mom_exact: Vec<f64> =
        f.k.iter()
            .map(|&c| {
                (0..64)
                    .map(|i| phi2(c - 0.5 * dk + (i as f64 + 0.5) * dk / 64.0))
                    .sum::<f64>()
                    / 64.0
            })
            .collect();
    let peak = phi2(k0);
    for (t_i, &t) in times.iter().enumerate() {
        let n = dens.frame(t_i);
        let total: f64 = n.iter().sum::<f64>() * w;
        let mean: f64 = n.iter().zip(&f.x).map(|(v, x)| v * x).sum::<f64>() * w / total;
        // Sheppard's correction: bin averages add w²/12 to the variance of a smooth density.
        let var: f64 = n
            .iter()
            .zip(&f.x)
            .map(|(v, x)| v * (x - mean).powi(2))
            .sum::<f64>()
            * w
            / total
            - w * w / 12.0;
        let sigma_t = s0 * (1.0 + (HBAR * t / (2.0 * m * s0 * s0)).powi(2)).sqrt();
        // Free motion is exact in the split-operator method; what remains is the binning:
        // the Sheppard residual O((w/σ)⁴)·σ² ≈ 1e-5 σ² and the grid cells, dx²/(12σ²) ≈ 1e-5.
        // 1e-4 on σ covers both with margin.
        assert!(
            (var.sqrt() / sigma_t - 1.0).abs() < 1e-4,
            "t = {t}: σ = {} vs {sigma_t}",
            var.sqrt()
        );
        let mean_exact = x0 + HBAR * k0 * t / m;
        assert!(
            (mean - mean_exact).abs() < 1e-6,
            "t = {t}: ⟨x⟩ = {mean} vs {mean_exact}"
        );
        assert!((total - 1.0).abs() < 1e-10, "t = {t}: ∫n = {total}");
        // Momentum density: fine k samples h ≤ 1/32 of a bin apart; piecewise-constant
        // averaging error ~ (h/σ_k)²/24 ≈ 2e-6 of the peak (σ_k = 1/(2σ0)), measured 5e-6.
        let nk = mom.frame(t_i);
        let dev = nk
            .iter()
            .zip(&mom_exact)
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        assert!(dev < 1e-4 * peak, "t = {t}: momentum density off by {dev}");
        // ∫ j dx = ⟨p⟩/m = ħk0/m (definition of the probability current).
        let jt: f64 = cur.frame(t_i).iter().sum::<f64>() * w;
        let v = HBAR * k0 / m;
        assert!((jt / v - 1.0).abs() < 1e-6, "t = {t}: ∫j = {jt} vs {v}");
    }
}

#[test]
fn harmonic_ground_state_is_stationary_with_the_gaussian_wigner_function() {
    // Textbook: the harmonic ground state has σ² = ħ/(2mω), energy ħω/2, and
    // W = (πħ)⁻¹ exp(−x²/(2σ²) − 2σ²p²/ħ²), i.e. (1/π) exp(−x²/(2σ²) − 2σ²k²) per unit k.
    let hw = 0.01;
    let m = units::mass_from_electron_masses(1.0);
    let omega = hw / HBAR;
    let sigma = (HBAR / (2.0 * m * omega)).sqrt();
    let extra = format!("[[potential]]\nkind = \"harmonic\"\ncentre = 0.0\nhbar_omega = {hw}\n");
    let job = one_particle(
        "reflecting",
        (-20.0, 20.0),
        1.5,
        (0.0, 0.0, sigma),
        (200.0, 50.0),
        (100, 60),
        &extra,
    );
    // Δt = 0.1 fs: the Gaussian is not exactly stationary under the Strang propagator; the
    // defect is O((ωΔt)²) ≈ 2e-6 relative.
    let f = solve(&job, None, Some(0.1));
    let (dx, dk) = (width(&f.x), width(&f.k));
    let dens = series(&f, "density");
    let wig = series(&f, "wigner");
    let n0 = dens.frame(0).to_vec();
    let peak = n0.iter().cloned().fold(0.0, f64::max);
    let energy = scalar(&f, "energy");
    // Bin-averaged closed-form W (16×16 midpoint points per bin).
    let w_exact = |x: f64, k: f64| {
        (-(x * x) / (2.0 * sigma * sigma) - 2.0 * sigma * sigma * k * k).exp() / PI
    };
    let mut w_bins = Vec::new();
    for &xc in &f.x {
        for &kc in &f.k {
            let mut s = 0.0;
            for i in 0..16 {
                for j in 0..16 {
                    let x = xc - 0.5 * dx + (i as f64 + 0.5) * dx / 16.0;
                    let k = kc - 0.5 * dk + (j as f64 + 0.5) * dk / 16.0;
                    s += w_exact(x, k);
                }
            }
            w_bins.push(s / 256.0);
        }
    }
    for (t_i, &t) in f.times().iter().enumerate() {
        let dev = dens
            .frame(t_i)
            .iter()
            .zip(&n0)
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        assert!(
            dev < 1e-4 * peak,
            "t = {t}: density changed by {dev} (peak {peak})"
        );
        // The reference's W comes from cells dx/2 × (k bin)/8 wide: piecewise-constant
        // averaging error ~ (h/σ)²/24 ≲ 3e-5 of the peak 1/π; 1e-3 leaves margin.
        let wdev = wig
            .frame(t_i)
            .iter()
            .zip(&w_bins)
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        assert!(wdev < 1e-3 / PI, "t = {t}: Wigner function off by {wdev}");
        // ⟨H⟩ = ħω/2; the grid represents the Gaussian to round-off, the time step adds
        // O((ωΔt)²)·ħω.
        assert!(
            (energy[t_i] / (0.5 * hw) - 1.0).abs() < 1e-5,
            "t = {t}: E = {}",
            energy[t_i]
        );
    }
}

/// Transmission of a rectangular barrier of height v0 and width a at wavevector k
/// (textbook, e.g. Griffiths; Landau & Lifshitz, Quantum Mechanics §25).
fn barrier_transmission(k: f64, v0: f64, a: f64, m: f64) -> f64 {
    let e = units::kinetic_energy(k, m);
    if e < v0 {
        let kappa = (2.0 * m * (v0 - e)).sqrt() / HBAR;
        1.0 / (1.0 + v0 * v0 * (kappa * a).sinh().powi(2) / (4.0 * e * (v0 - e)))
    } else {
        let kp = (2.0 * m * (e - v0)).sqrt() / HBAR;
        1.0 / (1.0 + v0 * v0 * (kp * a).sin().powi(2) / (4.0 * e * (e - v0)))
    }
}

#[test]
fn barrier_transmission_matches_the_textbook_average() {
    // A packet narrow in momentum (σ_k = 0.05/nm) on a 0.2 eV, 1 nm barrier: once it has
    // left, the transmitted norm is ∫ T(E(k)) |φ̃(k)|² dk (follows from the plane-wave T).
    let (x0, k0, s) = (-40.0, 2.0, 10.0);
    let (v0, a) = (0.2, 1.0);
    let extra = format!(
        "[[potential]]\nkind = \"barrier\"\nfrom = 0.0\nto = {a}\nheight = {v0}\nsmoothing = 0.04\n"
    );
    let job = one_particle(
        "absorbing",
        (-80.0, 60.0),
        4.0,
        (x0, k0, s),
        (800.0, 400.0),
        (140, 60),
        &extra,
    );
    let f = solve(&job, None, None);
    let m = units::mass_from_electron_masses(1.0);
    // Simpson's rule over k0 ± 8σ_k.
    let sk = 1.0 / (2.0 * s);
    let (lo, hi, n) = (k0 - 8.0 * sk, k0 + 8.0 * sk, 4000);
    let h = (hi - lo) / n as f64;
    let g = |k: f64| {
        barrier_transmission(k, v0, a, m)
            * (2.0 / PI).sqrt()
            * s
            * (-2.0 * s * s * (k - k0).powi(2)).exp()
    };
    let t_avg = (0..=n)
        .map(|i| {
            let c = if i == 0 || i == n {
                1.0
            } else if i % 2 == 1 {
                4.0
            } else {
                2.0
            };
            c * g(lo + i as f64 * h)
        })
        .sum::<f64>()
        * h
        / 3.0;
    let (norm, left, right) = (
        scalar(&f, "norm"),
        scalar(&f, "absorbed_left"),
        scalar(&f, "absorbed_right"),
    );
    let last = norm.len() - 1;
    assert!(
        norm[last] < 1e-5,
        "the packet has not left: norm {}",
        norm[last]
    );
    // Norm inside plus what left through each side is 1 (bookkeeping is exact).
    for i in 0..=last {
        assert!((norm[i] + left[i] + right[i] - 1.0).abs() < 1e-9);
    }
    // Measured for this job: the logistic edges (smoothing 0.04 nm) raise T by 3.8e-4 (a
    // transfer-matrix calculation of the smoothed profile); around that the time step
    // scatters T by up to ±4e-4 (scan of Δt = 0.05…0.2 fs: largest deviation from the
    // textbook 7.3e-4); the absorber reflects ~5e-5. Tolerance 1.5e-3, twice the worst.
    assert!(
        (right[last] - t_avg).abs() < 1.5e-3,
        "transmitted {} vs textbook {t_avg}",
        right[last]
    );
    assert!(
        (left[last] - (1.0 - t_avg)).abs() < 1.5e-3,
        "reflected {} vs {}",
        left[last],
        1.0 - t_avg
    );
}

#[test]
fn norm_is_conserved_to_round_off_without_absorber() {
    // Unitarity of the split-operator propagator (Feit, Fleck & Steiger 1982): each factor
    // is a phase in its own basis.
    let pair = "[pair]\nkind = \"soft-coulomb\"\npermittivity = 4.0\nsoftening = 1.0\n\
                [[potential]]\nkind = \"gaussian\"\ncentre = 0.0\nwidth = 2.0\nheight = 0.3\n";
    let walls = two_particles(
        "fermion",
        "reflecting",
        (-30.0, 30.0),
        1.5,
        [(-8.0, 0.6, 3.0), (8.0, -0.6, 3.0)],
        (60.0, 10.0),
        (60, 40),
        pair,
    );
    let ring = one_particle(
        "periodic",
        (-30.0, 30.0),
        2.0,
        (0.0, 1.0, 3.0),
        (120.0, 20.0),
        (60, 40),
        "[[potential]]\nkind = \"barrier\"\nfrom = 10.0\nto = 12.0\nheight = 0.1\n",
    );
    for (name, f) in [
        ("walls", solve(&walls, Some(96), None)),
        ("ring", solve(&ring, None, None)),
    ] {
        for (i, v) in scalar(&f, "norm").iter().enumerate() {
            assert!((v - 1.0).abs() < 1e-10, "{name}: norm {v} at output {i}");
        }
        assert!(scalar(&f, "absorbed_left").iter().all(|&v| v == 0.0));
        assert!(scalar(&f, "absorbed_right").iter().all(|&v| v == 0.0));
        // ∫ n = N·norm and ∫ n₂ = N(N − 1)·norm (the datasets' contract).
        let w = width(&f.x);
        let np = if f.series.contains_key("pair_density") {
            2.0
        } else {
            1.0
        };
        let d = series(&f, "density");
        for t in 0..d.frames() {
            let s: f64 = d.frame(t).iter().sum::<f64>() * w;
            assert!((s - np).abs() < 1e-9, "{name}: ∫n = {s}");
            if np == 2.0 {
                let s2: f64 = series(&f, "pair_density").frame(t).iter().sum::<f64>() * w * w;
                assert!((s2 - 2.0).abs() < 1e-9, "{name}: ∫n₂ = {s2}");
            }
        }
    }
}

#[test]
fn energy_is_conserved_to_second_order_in_the_time_step() {
    // A closed system conserves ⟨H⟩ (conservation law); the Strang splitting conserves it
    // up to an O(Δt²) oscillation (Feit, Fleck & Steiger 1982: second order): halving Δt
    // must cut the largest deviation by 4 (within [3, 5] allowing higher-order terms).
    let extra = "[pair]\nkind = \"soft-coulomb\"\npermittivity = 2.0\nsoftening = 1.0\n\
                 [[potential]]\nkind = \"harmonic\"\ncentre = 0.0\nhbar_omega = 0.02\n";
    let job = two_particles(
        "distinguishable",
        "reflecting",
        (-25.0, 25.0),
        2.0,
        [(-5.0, 0.5, 2.0), (6.0, 0.0, 2.5)],
        (40.0, 5.0),
        (50, 40),
        extra,
    );
    let dev = |dt: f64| {
        let e = scalar(&solve(&job, Some(80), Some(dt)), "energy");
        e.iter().map(|v| (v - e[0]).abs()).fold(0.0, f64::max) / e[0].abs()
    };
    let (d1, d2) = (dev(0.2), dev(0.1));
    assert!(d1 < 1e-3, "energy drifts by {d1} (relative) at Δt = 0.2 fs");
    let ratio = d1 / d2;
    assert!(
        (3.0..5.0).contains(&ratio),
        "deviation {d1} → {d2}: ratio {ratio}, not second order"
    );
}

#[test]
fn fermions_have_an_exchange_hole_and_bosons_bunch() {
    // Pauli principle: n₂(x, x) = 0 for identical fermions at all times; exchange symmetry
    // makes n₂ symmetric. With one grid point per output bin (periodic grid, cells = bins)
    // the bin values are the grid values, so the diagonal vanishes to round-off.
    let extra = "[pair]\nkind = \"soft-coulomb\"\npermittivity = 4.0\nsoftening = 1.0\n\
                 [[potential]]\nkind = \"gaussian\"\ncentre = 3.0\nwidth = 3.0\nheight = 0.2\n";
    let orbitals = [(-4.0, 0.5, 3.0), (5.0, -0.4, 2.5)];
    let fermi = two_particles(
        "fermion",
        "periodic",
        (-32.0, 32.0),
        1.5,
        orbitals,
        (40.0, 10.0),
        (64, 32),
        extra,
    );
    let f = solve(&fermi, Some(64), None);
    let p = series(&f, "pair_density");
    let nx = f.x.len();
    for t in 0..p.frames() {
        let fr = p.frame(t);
        let max = fr.iter().cloned().fold(0.0, f64::max);
        for a in 0..nx {
            assert!(
                fr[a * nx + a].abs() < 1e-12 * max,
                "t {t}: n₂({a},{a}) = {}",
                fr[a * nx + a]
            );
            for b in 0..nx {
                assert!((fr[a * nx + b] - fr[b * nx + a]).abs() < 1e-12 * max);
            }
        }
    }
    // Bosons against distinguishable particles in the same orbitals, at t = 0: on the
    // diagonal n₂ᴮ(x,x) = 4|φ_aφ_b|²/(1 + |S|²) and n₂ᴰ(x,x) = 2|φ_aφ_b|², so the ratio is
    // 2/(1 + |S|²) everywhere (symmetry of ψ; normalisation 2(1 + |S|²) from docs/method.md §1).
    let close = [(-1.5, 0.0, 2.0), (1.5, 0.0, 2.0)];
    let boson = two_particles(
        "boson",
        "periodic",
        (-32.0, 32.0),
        1.5,
        close,
        (1.0, 1.0),
        (128, 32),
        "",
    );
    let dist = two_particles(
        "distinguishable",
        "periodic",
        (-32.0, 32.0),
        1.5,
        close,
        (1.0, 1.0),
        (128, 32),
        "",
    );
    let (fb, fd) = (
        solve(&boson, Some(128), None),
        solve(&dist, Some(128), None),
    );
    let (pb, pd) = (
        series(&fb, "pair_density").frame(0),
        series(&fd, "pair_density").frame(0),
    );
    let ga = Gaussian {
        x0: -1.5,
        k0: 0.0,
        sigma: 2.0,
    };
    let gb = Gaussian {
        x0: 1.5,
        k0: 0.0,
        sigma: 2.0,
    };
    let s2 = overlap(&ga, &gb).norm_sqr();
    let expect = 2.0 / (1.0 + s2);
    assert!(expect > 1.2, "test orbitals must overlap");
    let n = fb.x.len();
    for a in (n / 2 - 10)..(n / 2 + 10) {
        let r = pb[a * n + a] / pd[a * n + a];
        // The grid represents these Gaussians to round-off: 1e-9.
        assert!(
            (r / expect - 1.0).abs() < 1e-9,
            "bin {a}: ratio {r} vs {expect}"
        );
    }
}

#[test]
fn one_particle_wigner_function_integrates_over_k_to_the_density() {
    // ∫ W dk = |ψ(x)|² (definition of the Wigner function, docs/method.md §1).
    let extra = "[[potential]]\nkind = \"gaussian\"\ncentre = 4.0\nwidth = 1.5\nheight = 0.15\n";
    let job = one_particle(
        "reflecting",
        (-20.0, 20.0),
        3.0,
        (-6.0, 1.0, 2.0),
        (60.0, 20.0),
        (200, 120),
        extra,
    );
    let f = solve(&job, None, None);
    let dk = width(&f.k);
    let (d, w) = (series(&f, "density"), series(&f, "wigner"));
    let nk = f.k.len();
    for t in 0..d.frames() {
        let n = d.frame(t);
        let peak = n.iter().cloned().fold(0.0, f64::max);
        let dev = (0..n.len())
            .map(|i| (w.frame(t)[i * nk..(i + 1) * nk].iter().sum::<f64>() * dk - n[i]).abs())
            .fold(0.0, f64::max);
        // The two are bin averages of the same function from different samples (grid points
        // for n, half-grid points for W): piecewise-constant error ~ (dx/σ)²/24 ≈ 1e-5 of
        // the peak at dx = 0.025 nm, σ ≥ 2 nm; the W content beyond k_max is ~ e⁻³².
        assert!(
            dev < 1e-4 * peak,
            "t {t}: |∫W dk − n| = {dev} (peak {peak})"
        );
    }
}

#[test]
fn absorbing_reference_keeps_only_configurations_with_all_particles_inside() {
    // docs/method.md §5: a configuration is gone once any particle has left. Particle 1 runs out
    // to the right while particle 2 stays in the middle: the norm inside must fall to zero
    // although particle 2 never leaves, and ∫n = N·norm throughout.
    let job = two_particles(
        "distinguishable",
        "absorbing",
        (-30.0, 30.0),
        4.0,
        [(0.0, 2.5, 2.0), (0.0, 0.0, 3.0)],
        (120.0, 20.0),
        (60, 40),
        "",
    );
    let f = solve(&job, None, None);
    let (norm, left, right) = (
        scalar(&f, "norm"),
        scalar(&f, "absorbed_left"),
        scalar(&f, "absorbed_right"),
    );
    let w = width(&f.x);
    let d = series(&f, "density");
    for t in 0..norm.len() {
        assert!(
            (norm[t] + left[t] + right[t] - 1.0).abs() < 1e-9,
            "bookkeeping at output {t}"
        );
        let s: f64 = d.frame(t).iter().sum::<f64>() * w;
        assert!(
            (s - 2.0 * norm[t]).abs() < 1e-9,
            "∫n = {s} vs 2·norm = {}",
            2.0 * norm[t]
        );
    }
    let last = norm.len() - 1;
    // Particle 1 (v = ħk/m ≈ 0.58 nm/fs) is 70 nm out by 120 fs; particle 2 spreads to
    // σ ≈ 10 nm and loses ~0.3 % through the edges. What is left inside is the product.
    assert!(norm[last] < 1e-4, "norm inside {}", norm[last]);
    assert!(right[last] > 0.98, "absorbed right {}", right[last]);
}

#[test]
fn refuses_more_than_three_particles_and_dependent_fermion_orbitals() {
    let four: String = (0..4)
        .map(|i| {
            format!(
                "[[orbital]]\nkind = \"gaussian\"\ncentre = {}.0\nwavevector = 0.0\nwidth = 1.0\n",
                3 * i
            )
        })
        .collect();
    let job = format!(
        "[particles]\ncount = 4\nstatistics = \"fermion\"\n{four}\
         [domain]\nx_min = -20.0\nx_max = 30.0\nboundary = \"reflecting\"\nk_max = 2.0\n\
         [numerics]\ncoherence_length = 20.0\nsync_step = 1.0\nend_time = 2.0\nsamples = 100\n"
    );
    let e = solve_with(&load(&job), &ReferenceOptions::default(), &mut |_| {}).unwrap_err();
    assert!(format!("{e:#}").contains("at most 3 particles"), "{e:#}");

    let same = two_particles(
        "fermion",
        "reflecting",
        (-20.0, 20.0),
        2.0,
        [(0.0, 0.3, 2.0), (0.0, 0.3, 2.0)],
        (2.0, 1.0),
        (40, 20),
        "",
    );
    let e = solve_with(&load(&same), &ReferenceOptions::default(), &mut |_| {}).unwrap_err();
    assert!(
        format!("{e:#}").contains("the Slater determinant vanishes"),
        "{e:#}"
    );
}

fn signfold(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_signfold"))
        .args(args)
        .output()
        .expect("the binary runs")
}

fn path(p: &Path) -> &str {
    p.to_str().expect("utf-8 temp path")
}

#[test]
fn reference_and_compare_commands() {
    let dir = tempfile::tempdir().unwrap();
    let job = dir.path().join("packet.toml");
    std::fs::write(
        &job,
        one_particle(
            "reflecting",
            (-30.0, 30.0),
            2.0,
            (-5.0, 1.0, 2.0),
            (20.0, 5.0),
            (100, 40),
            "",
        ),
    )
    .unwrap();
    let (a, b, c) = (
        dir.path().join("a"),
        dir.path().join("b"),
        dir.path().join("c"),
    );
    let out = signfold(&["reference", path(&job), "--out", path(&a)]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let fa = a.join("reference.h5");
    assert!(fa.exists());
    // A second run must not overwrite without --force.
    let again = signfold(&["reference", path(&job), "--out", path(&a)]);
    assert_eq!(again.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&again.stderr).contains("--force"));
    assert!(
        signfold(&["reference", path(&job), "--out", path(&a), "--force"])
            .status
            .success()
    );

    // A file against itself: every distance is zero, and a zero tolerance passes.
    let same = signfold(&["compare", path(&fa), path(&fa), "--tolerance", "0"]);
    assert_eq!(
        same.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&same.stderr)
    );
    let text = String::from_utf8_lossy(&same.stdout);
    for name in ["density", "wigner", "momentum_density", "current_density"] {
        let row = text
            .lines()
            .find(|l| l.split_whitespace().next() == Some(name))
            .unwrap_or_else(|| panic!("no row for {name} in\n{text}"));
        let cols: Vec<&str> = row.split_whitespace().collect();
        assert_eq!(cols[1].parse::<f64>().unwrap(), 0.0, "{row}");
        assert_eq!(cols[3].parse::<f64>().unwrap(), 0.0, "{row}");
    }

    // Different x bins: a clear refusal naming both grids.
    let out = signfold(&[
        "reference",
        path(&job),
        "--out",
        path(&b),
        "--set",
        "output.x_bins=80",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let fb = b.join("reference.h5");
    let diff = signfold(&["compare", path(&fa), path(&fb)]);
    assert_eq!(diff.status.code(), Some(2));
    let err = String::from_utf8_lossy(&diff.stderr);
    assert!(
        err.contains("x grids differ: 100 bins on [-30, 30] nm")
            && err.contains("80 bins on [-30, 30] nm"),
        "{err}"
    );

    // A different state on the same grids: distances above a small tolerance give exit 1.
    let out = signfold(&[
        "reference",
        path(&job),
        "--out",
        path(&c),
        "--set",
        "orbital.0.wavevector=1.1",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let fc = c.join("reference.h5");
    let far = signfold(&["compare", path(&fc), path(&fa), "--tolerance", "0.01"]);
    assert_eq!(
        far.status.code(),
        Some(1),
        "{}",
        String::from_utf8_lossy(&far.stdout)
    );
    assert!(String::from_utf8_lossy(&far.stdout).contains("tolerance 0.01 exceeded by"));
}
