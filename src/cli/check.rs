//! `signfold check`: the derived numerics of a job and a forecast of its sign problem,
//! without running it.

use super::collective;
use anyhow::{Result, bail};
use signfold::engine::comm::Comm;
use signfold::engine::mpi::World;
use signfold::engine::start::sign_ratio;
use signfold::physics::initial;
use signfold::physics::numerics::{Setup, machine_memory};
use signfold::viz::chart::short;
use std::fmt::Write;
use std::path::Path;
use std::process::ExitCode;

/// `signfold check JOB`: validate on every rank, print the report once.
pub fn command(job: &Path, set: &[String], world: &World) -> Result<ExitCode> {
    let loaded = collective(signfold::physics::defaults::load(job, set))?;
    let setup = collective(Setup::new(&loaded))?;
    // ∫|W|/∫W from the run's own initial draws, summed over the ranks as `run` does.
    let draws = setup.target.min(RATIO_DRAWS);
    let ratio = collective(sign_ratio(&setup, draws, world))?;
    let text = collective(report(&setup, world.size(), ratio, draws))?;
    if world.is_root() {
        print!("{text}");
        // The numerics derived from the physics, with why (also stored in every result).
        if let Some(i) = loaded.text.find("# Numerics derived by signfold") {
            print!(
                "{}",
                loaded.text[i..].replace("# ", "").trim_end().to_string() + "\n"
            );
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// Draws used for the growth-rate forecast (the first of the run's own draws).
const FORECAST_DRAWS: u64 = 20_000;

/// At most this many of the run's initial draws give `check`'s ∫|W|/∫W (all of them, and so
/// exactly the value `run` prints, for numerics.particles up to this).
const RATIO_DRAWS: u64 = 2_000_000;

/// The job-file word of a job value (`"fermion"`, `"absorbing"`, `"full"`).
fn word<T: serde::Serialize>(v: &T) -> String {
    match toml::Value::try_from(v) {
        Ok(toml::Value::String(s)) => s,
        _ => "?".into(),
    }
}

/// Why the initial particle count differs from `numerics.particles` (printed by `check` and
/// `run`): D draws, each emitting ⌊|w_d|/w₀ + U⌋ particles, U uniform on [0, 1).
pub fn count_note(draws: u64) -> String {
    format!(
        "the initial count is random around numerics.particles = {draws}: each of the {draws} draws gives \
         ⌊|w|/w₀ + U⌋ particles (w its signed weight, w₀ = Σ|w|/{draws}, U uniform), so the count equals {draws} on \
         average and scatters by at most √{draws}/2 = {:.0} (one standard deviation); draws outside the domain or \
         momentum range are not kept",
        (draws as f64).sqrt() / 2.0
    )
}

/// The mean generation rate ⟨Γ⟩ (1/fs) of the initial particles, weighted by |w|.
fn forecast(setup: &Setup) -> Result<f64> {
    let w = setup.initial_state()?;
    let n = setup.n;
    let (mut abs, mut rate) = (0.0, 0.0);
    let (mut x, mut k) = (vec![0.0; n], vec![0.0; n]);
    for d in 0..FORECAST_DRAWS {
        let r = w.draw(&mut initial::draw_stream(setup.seed, d), &mut x, &mut k);
        abs += r.abs();
        let mut g = 0.0;
        if let Some(t) = &setup.table1 {
            g += x.iter().map(|&xi| t.gamma_at(xi)).sum::<f64>();
        }
        if let Some(t) = &setup.table2 {
            for i in 0..n {
                for j in i + 1..n {
                    g += t.gamma_at(setup.separation(x[i], x[j]));
                }
            }
        }
        rate += r.abs() * g;
    }
    Ok(rate / abs)
}

/// The report printed by `check`; fails when the job cannot run on this machine.
fn report(setup: &Setup, ranks: usize, ratio: f64, draws: u64) -> Result<String> {
    let mut s = String::new();
    let mean_rate = forecast(setup)?;
    let w = &mut s;
    writeln!(
        w,
        "job: {} particle(s), statistics \"{}\", mass {} m_e",
        setup.n,
        word(&setup.stats),
        setup.job.particles.mass
    )?;
    writeln!(
        w,
        "domain: [{}, {}] nm, boundary \"{}\"; space mesh of {} cells of {} nm (domain.cells: kernel tables{})",
        setup.lo,
        setup.hi,
        word(&setup.boundary),
        setup.job.domain.cells,
        short(setup.mesh_dx),
        if setup.job.annihilation.cell_x.is_none() {
            ", and the annihilation cell in x"
        } else {
            ""
        }
    )?;
    writeln!(
        w,
        "coherence length L_c = {} nm, window roll-off {} nm",
        setup.lc, setup.rolloff
    )?;
    writeln!(
        w,
        "transfer lattice (one-body): period P = {:.2} nm, Δk = π/P = {:.6} 1/nm; momentum cap K = {} (k_max = {} 1/nm)",
        setup.period, setup.dk, setup.cap, setup.k_max
    )?;
    for (name, t) in [("one-body", &setup.table1), ("pair", &setup.table2)] {
        if let Some(t) = t {
            writeln!(
                w,
                "{name} kernel table: {} points × {} transfers (P = {:.2} nm = {:.2} L_c, Δk = {:.6} 1/nm, K = {}), {:.1} MiB",
                t.points,
                2 * t.cap + 1,
                t.period,
                t.period / setup.lc,
                t.dk,
                t.cap,
                t.bytes() as f64 / (1u64 << 20) as f64
            )?;
        }
    }
    let g1 = setup.table1.as_ref().map_or(0.0, |t| t.gamma_max);
    let g2 = setup.table2.as_ref().map_or(0.0, |t| t.gamma_max);
    writeln!(
        w,
        "generation rate: max γ one-body {g1:.4e} 1/fs, max γ pair {g2:.4e} 1/fs, bound Γ_max = {:.4e} 1/fs",
        setup.gamma_max
    )?;
    writeln!(
        w,
        "steps: {} of {} fs to {} fs; {} outputs",
        setup.steps,
        setup.dt,
        setup.job.numerics.end_time,
        setup.output_steps.len()
    )?;
    writeln!(
        w,
        "output bins: {} in x ({:.4} nm), {} in k ({:.4} 1/nm)",
        setup.x_bins.n,
        setup.x_bins.width(),
        setup.k_bins.n,
        setup.k_bins.width()
    )?;
    let mesh = signfold::engine::annihilate::CellMesh::new(setup)?;
    writeln!(
        w,
        "annihilation cells: {} nm × {} 1/nm (cells \"{}\"{}), mesh volume {:.3e} cells (stored sparsely), trigger at {}× the initial count or the count after the latest annihilation, if larger",
        short(setup.cell_x),
        short(setup.cell_k),
        word(&setup.cells),
        if setup.merge_exchange {
            ", exchange-merged"
        } else {
            ""
        },
        mesh.volume(),
        setup.trigger
    )?;
    writeln!(
        w,
        "sign problem: ∫|W|/∫W = {ratio:.4} at t = 0 ({}); expected particle growth rate 2⟨Γ⟩ = {:.4e} 1/fs \
         (×{:.3e} per sync step without annihilation; from the first {} draws)",
        if draws == setup.target {
            format!("Σ|w|/Σw over the run's {draws} initial draws: the value `run` prints")
        } else {
            format!(
                "Σ|w|/Σw over the first {draws} of the run's {} initial draws; `run` prints it over all of them, \
                 which differs by sampling noise",
                setup.target
            )
        },
        2.0 * mean_rate,
        (2.0 * mean_rate * setup.dt).exp(),
        FORECAST_DRAWS
    )?;
    writeln!(w, "initial particles: {}", count_note(setup.target))?;
    let per_rank = setup.memory_per_rank(ranks);
    writeln!(
        w,
        "memory: {} bytes per particle; estimated peak {:.1} MiB per rank on {ranks} rank(s); cap {:.0} MiB per rank; checkpoint ≈ {:.1} MiB",
        setup.bytes_per_particle(),
        per_rank / (1u64 << 20) as f64,
        setup.memory_limit / (1u64 << 20) as f64,
        setup.checkpoint_bytes() / (1u64 << 20) as f64
    )?;
    for warning in warnings(setup) {
        writeln!(w, "warning: {warning}")?;
    }
    let mem = machine_memory();
    if per_rank * ranks as f64 > mem {
        bail!(
            "{s}the job needs an estimated {:.1} GiB in all ({:.1} GiB per rank × {ranks}) but this machine has {:.1} GiB: \
             lower numerics.particles or annihilation.trigger, or run on more nodes",
            per_rank * ranks as f64 / (1u64 << 30) as f64,
            per_rank / (1u64 << 30) as f64,
            mem / (1u64 << 30) as f64
        );
    }
    Ok(s)
}

/// Conditions under which results are likely wrong.
pub fn warnings(setup: &Setup) -> Vec<String> {
    let mut out = Vec::new();
    for (name, t) in [("one-body", &setup.table1), ("pair", &setup.table2)] {
        if let Some(t) = t
            && t.tail > 1e-3
        {
            out.push(format!(
                    "the {name} kernel has {:.2e} of its weight beyond the momentum cap K = {}: raise domain.k_max or smooth \
                     the potential's edges (potential smoothing)",
                    t.tail, t.cap
                ));
        }
    }
    let sep = setup
        .orbitals
        .iter()
        .flat_map(|a| setup.orbitals.iter().map(move |b| (a.x0 - b.x0).abs()))
        .fold(0.0, f64::max);
    if setup.stats.identical()
        && setup.n >= 2
        && (setup.table1.is_some() || setup.table2.is_some())
        && setup.lc < 2.0 * sep
    {
        out.push(format!(
            "coherence length {} nm is below twice the largest orbital separation ({sep} nm): exchange coherences longer than \
             L_c alias onto shorter ones (physics reference: pair density errors of 1–20 % at L_c = 1.2–1.8 × separation)",
            setup.lc
        ));
    }
    for (i, o) in setup.orbitals.iter().enumerate() {
        if o.x0 - 5.0 * o.sigma < setup.lo || o.x0 + 5.0 * o.sigma > setup.hi {
            out.push(format!("orbital.{i} reaches within 5 widths of the domain edge: part of its norm starts outside"));
        }
        if (o.k0.abs() + 5.0 / (2.0 * o.sigma)) > setup.k_max {
            out.push(format!(
                "orbital.{i} has momentum components within 5 widths of k_max: raise domain.k_max"
            ));
        }
    }
    out
}
