//! `signfold check`: the derived numerics of a job and a forecast of its sign problem,
//! without running it.

use super::collective;
use anyhow::Result;
use signfold::engine::comm::Comm;
use signfold::engine::memory::{self, Forecast};
use signfold::engine::mpi::World;
use signfold::engine::pilot::{self, Pilot, Projection};
use signfold::engine::start::sign_ratio;
use signfold::physics::initial;
use signfold::physics::numerics::Setup;
use signfold::viz::chart::short;
use std::fmt::Write;
use std::path::Path;
use std::process::ExitCode;

/// `signfold check JOB`: validate on every rank, print the report once.
pub fn command(job: &Path, set: &[String], world: &World) -> Result<ExitCode> {
    let runtime = memory::process_status_bytes("VmRSS").unwrap_or(0.0);
    let loaded = collective(signfold::physics::defaults::load(job, set))?;
    if world.is_root() {
        super::warn_job(&loaded);
    }
    let mut setup = collective(Setup::new(&loaded))?;
    // ∫|W|/∫W from the run's own initial draws, summed over the ranks as `run` does.
    let draws = setup.target.min(RATIO_DRAWS);
    let ratio = collective(sign_ratio(&setup, draws, world))?;
    let mut text = collective(report(&setup, ratio, draws))?;
    let plan = collective(plan(&mut setup, world, runtime))?;
    text += &plan.text;
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
    collective(plan.verdict)?;
    Ok(ExitCode::SUCCESS)
}

/// The pilot forecast of a job on this launch: the printed text and whether it fits.
pub struct Plan {
    pub text: String,
    pub verdict: Result<()>,
    /// Memory one rank may use, bytes (the same on every rank).
    pub available: f64,
}

/// Run the pilot on every rank and forecast the memory per rank at the job's peak count
/// (docs/method.md §3, "Memory forecast"); the verdict fails, with the numbers, when the
/// forecast does not fit in the memory available per rank. `runtime`: this process's
/// resident bytes before the job's structures were built.
pub fn plan(setup: &mut Setup, world: &World, runtime: f64) -> Result<Plan> {
    let ranks = world.size();
    let on_node = world.ranks_on_node();
    let threads = rayon::current_num_threads();
    // The same numbers on every rank, so every rank reaches the same verdict.
    let runtime = world.max_f64(runtime);
    let p = pilot::pilot(setup, world)?;
    let proj = pilot::project(setup, &p);
    let f = pilot::forecast(setup, &p, &proj, ranks, threads, runtime);
    let (available, source) = memory::available_per_rank(setup, on_node);
    let available = -world.max_f64(-available);
    let mut text = forecast_text(setup, &p, &proj, &f, ranks, threads, available, &source)?;
    if let Some(limit) = pilot::budget_limit(setup, &p, &proj) {
        let hi = pilot::forecast(setup, &p, &limit, ranks, threads, runtime);
        writeln!(
            text,
            "upper estimate: {:.1} MiB per rank if the step that passes the budget grows at the bound rate \
             (×{:.4} = exp(2Γ_max·Δt), peak {:.3e} live samples)",
            hi.total_mib(),
            (2.0 * setup.gamma_max * setup.dt).exp(),
            limit.peak
        )?;
        if hi.total() > available && f.total() <= available {
            writeln!(
                text,
                "warning: the upper estimate does not fit in the {:.1} MiB available per rank ({source}); the run \
                 stops with the numbers if its memory would pass that",
                available / MIB
            )?;
        }
    }
    writeln!(
        text,
        "checkpoint ≈ {:.1} MiB at the trigger count",
        setup.checkpoint_bytes() / MIB
    )?;
    let verdict = if f.total() > available {
        let parts: Vec<String> = f
            .terms
            .iter()
            .map(|t| format!("{} {:.1} MiB", t.name, t.bytes / MIB))
            .collect();
        Err(anyhow::anyhow!(
            "the job does not fit: the forecast peak of {:.3e} live samples on all ranks needs {:.1} MiB per rank \
             ({}) but {:.1} MiB are available per rank ({source}): lower annihilation.budget (the peak sample count \
             follows it) or numerics.samples, raise the memory cap, or spread the job over more ranks (on more nodes \
             when the node's memory is the limit)",
            proj.peak,
            f.total_mib(),
            parts.join(", "),
            available / MIB,
        ))
    } else {
        Ok(())
    };
    Ok(Plan {
        text,
        verdict,
        available,
    })
}

const MIB: f64 = (1u64 << 20) as f64;

#[allow(clippy::too_many_arguments)]
fn forecast_text(
    setup: &Setup,
    p: &Pilot,
    proj: &Projection,
    f: &Forecast,
    ranks: usize,
    threads: usize,
    available: f64,
    source: &str,
) -> Result<String> {
    let mut s = String::new();
    let w = &mut s;
    writeln!(
        w,
        "pilot: {} samples (1/{:.1} of the job) for {} sync step(s) in {:.2} s, nothing written: count ×{:.4} per step \
         (largest ×{:.4}), {} annihilation(s); one annihilation at the job's cells keeps {:.1} % of its {} samples \
         (extrapolated: {:.1} % at the peak count); occupied cells per rank ∝ samples^{:.2} ({:.0} cells for {:.0} samples)",
        p.initial,
        p.ratio,
        p.steps,
        p.seconds,
        p.growth,
        p.growth_max,
        p.annihilations,
        100.0 * p.survival,
        p.last,
        100.0 * p.survival_at(proj.peak),
        p.occupancy_exponent(),
        p.occupancy[2].1,
        p.occupancy[2].0,
    )?;
    if proj.budget_bound {
        writeln!(
            w,
            "forecast: peak {:.3e} live samples on all ranks: the count can reach annihilation.budget = {} within the job \
             (at the bound rate 2Γ_max from t ≈ {} fs), and one step of the pilot's largest growth (×{:.4}) passes it \
             before the trigger fires; {:.3e} left after that annihilation",
            proj.peak,
            setup.budget,
            proj.peak_step as f64 * setup.dt,
            p.growth_max.max(1.0),
            proj.after
        )?;
    } else {
        writeln!(
            w,
            "forecast: peak {:.3e} live samples on all ranks at t ≈ {} fs, {} annihilation(s) over the job at the pilot's \
             rates; the count cannot reach annihilation.budget = {} within the job even at the bound rate 2Γ_max",
            proj.peak,
            proj.peak_step as f64 * setup.dt,
            proj.annihilations,
            setup.budget
        )?;
    }
    writeln!(
        w,
        "memory per rank at the peak ({ranks} rank(s), {threads} thread(s) each):"
    )?;
    for t in &f.terms {
        writeln!(
            w,
            "  {:<16} {:>10.1} MiB  {}",
            t.name,
            t.bytes / MIB,
            t.what
        )?;
    }
    writeln!(
        w,
        "  {:<16} {:>10.1} MiB  of {:.1} MiB available per rank ({source})",
        "total",
        f.total_mib(),
        available / MIB
    )?;
    Ok(s)
}

/// Draws used for the growth-rate forecast (the first of the run's own draws).
const FORECAST_DRAWS: u64 = 20_000;

/// At most this many of the run's initial draws give `check`'s ∫|W|/∫W (all of them, and so
/// exactly the value `run` prints, for numerics.samples up to this).
const RATIO_DRAWS: u64 = 2_000_000;

/// The job-file word of a job value (`"fermion"`, `"absorbing"`, `"full"`).
fn word<T: serde::Serialize>(v: &T) -> String {
    match toml::Value::try_from(v) {
        Ok(toml::Value::String(s)) => s,
        _ => "?".into(),
    }
}

/// Why the initial sample count differs from `numerics.samples` (printed by `check` and
/// `run`): D draws, each emitting ⌊|w_d|/w₀ + U⌋ samples, U uniform on [0, 1).
pub fn count_note(draws: u64) -> String {
    format!(
        "the initial count is random around numerics.samples = {draws}: each of the {draws} draws gives \
         ⌊|w|/w₀ + U⌋ samples (w its signed weight, w₀ = Σ|w|/{draws}, U uniform), so the count equals {draws} on \
         average and scatters by at most √{draws}/2 = {:.0} (one standard deviation); draws outside the domain or \
         momentum range are not kept",
        (draws as f64).sqrt() / 2.0
    )
}

/// The mean generation rate ⟨Γ⟩ (1/fs) of the initial samples, weighted by |w|.
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

/// The part of `check`'s report that needs no pilot.
fn report(setup: &Setup, ratio: f64, draws: u64) -> Result<String> {
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
        "domain: [{}, {}] nm, boundary \"{}\"; space mesh of {} cells of {} nm (domain.mesh_cells: kernel tables{})",
        setup.lo,
        setup.hi,
        word(&setup.boundary),
        setup.job.domain.mesh_cells,
        short(setup.mesh_dx),
        if setup.job.annihilation.cell_x.is_none() {
            ", and the annihilation cell in x"
        } else {
            ""
        }
    )?;
    if let Some(note) = setup.images_note() {
        writeln!(w, "{note}")?;
    }
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
        "annihilation cells: {} nm × {} 1/nm, resolution \"{}\" ({}) (coordinates \"{}\"{}), mesh volume {:.3e} cells (stored sparsely), trigger at {}× the initial count or the count after the latest annihilation, if larger",
        short(setup.cell_x),
        short(setup.cell_k),
        word(&setup.resolution),
        match setup.resolution {
            signfold::config::job::Resolution::Adaptive => {
                "the finest cells; merged up to 64× where the signs show no pattern and the budget needs it"
            }
            signfold::config::job::Resolution::Fixed =>
                "everywhere; 2×…64× coarser only to keep within the budget",
        },
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
        "sign problem: ∫|W|/∫W = {ratio:.4} at t = 0 ({}); expected sample growth rate 2⟨Γ⟩ = {:.4e} 1/fs \
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
    writeln!(w, "initial samples: {}", count_note(setup.target))?;
    for warning in warnings(setup) {
        writeln!(w, "warning: {warning}")?;
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
    out.extend(setup.coherence_warnings());
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
