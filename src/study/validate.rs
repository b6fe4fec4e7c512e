//! `signfold validate`: every job of a validation directory run by the Monte Carlo with the
//! engine's own numerics and fixed seeds, and compared with the exact reference, observable
//! by observable and time by time, with the statistics of [`crate::analysis::stats`].
//!
//! Acceptance (fixed before any comparison): scalars |z| ≤ 3.5, z the normal score of the
//! two-sided p-value of t under t(B − 1) (norm, absorbed per side, the transmitted norm for
//! one particle, energy); binned data (density; pair density over
//! x ≤ x′) |Z| ≤ 3.5 for the mean p-value score. Precision floors are reported beside:
//! transmitted-norm s.e., s.e. of ∫n₂(x, x) dx, and the expected density noise as a
//! relative L1 distance.
//!
//! One-body scattering jobs are also compared with the packet average of the stationary
//! transmission coefficient ([`crate::study::transmission`]): the Monte Carlo's transmitted
//! norm at the end (a scalar check like the others) and the reference's (agreement within
//! the bounds that check derives; a test of the reference itself). Exact references come
//! from the cache in `<jobs>/reference-cache` when its key matches
//! ([`crate::study::refcache`]).

use crate::analysis::stats;
use crate::config::job::LoadedJob;
use crate::engine::comm::Solo;
use crate::io::names::{self, Dataset};
use crate::io::results::ResultFile;
use crate::physics::numerics::Setup;
use crate::runner::driver::{self, RunOptions};
use crate::runner::progress::Progress;
use crate::study::accuracy::{common_frames, expected_noise_l1};
pub use crate::study::checks::{ACCEPT, Check, Kind};
use crate::study::refcache::{self, Source};
use crate::study::systematic;
use crate::study::transmission::{self, Assessment, Outcome};
use crate::viz::chart::{Area, FONT_NAME, LABEL_PX, TICK_PX, TITLE_PX, ensure_font, render};
use crate::viz::colormap;
use anyhow::{Context, Result, bail};
use plotters::prelude::*;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Name of the check of the Monte Carlo transmitted norm against the stationary T.
pub const STATIONARY: &str = "stationary_transmission";

/// The subset `--quick` runs: one job per code path (one-body kernel with absorbing walls,
/// a force with a kernel term in a closed box, identical fermions with exchange, the pair
/// interaction, a reflecting wall, a periodic box).
pub const QUICK: [&str; 5] = [
    "v01-barrier",
    "v05-trap-bump",
    "v09-fermions-trap-coulomb",
    "v11-wall",
    "v12-periodic",
];

/// Options of `signfold validate`.
#[derive(clap::Args, Clone, Debug)]
pub struct Options {
    /// Only the quick subset (one job per code path).
    #[arg(long)]
    pub quick: bool,
    /// Where VALIDATION.md, validation.csv and validation.png are written.
    #[arg(long, default_value = "scaling-results")]
    pub out: PathBuf,
    /// Directory of the validation jobs.
    #[arg(long, default_value = "jobs/validation")]
    pub jobs: PathBuf,
    /// Only the jobs whose file name contains this text.
    #[arg(long)]
    pub only: Option<String>,
    /// Also rerun each job at 2× and 4× the sample budget and at 1.5× the coherence
    /// length, and test whether the answer moved beyond the noise (no exact answer needed).
    #[arg(long)]
    pub systematic: bool,
    /// Solve every exact reference afresh (and rewrite its cache entry) instead of using a
    /// cached one whose physics key matches.
    #[arg(long)]
    pub recompute_references: bool,
}

/// Precision reached by one job (last output time).
#[derive(Clone, Debug, Default)]
pub struct Floors {
    pub transmitted_se: Option<f64>,
    pub diagonal_pair_se: Option<f64>,
    pub density_noise_l1: f64,
    pub peak_particles: f64,
    pub wall_s: f64,
}

/// Compare a Monte Carlo result with the exact one at every common output time.
///
/// `resolution` is the norm one sample carries (1/S₀): a scalar
/// with zero standard error (no group saw a sample) passes when it is within three samples'
/// norm of the exact value — the chance of seeing no sample where about three are expected
/// is e⁻³ ≈ 5 %, so smaller exact values are invisible to the sample, not wrong.
pub fn compare(
    job: &str,
    n: usize,
    groups: usize,
    resolution: f64,
    mc: &ResultFile,
    exact: &ResultFile,
) -> Vec<Check> {
    let mut out = Vec::new();
    let nx = mc.x.len();
    let scalars: Vec<Dataset> = [
        names::NORM,
        names::ABSORBED_LEFT,
        names::ABSORBED_RIGHT,
        names::ENERGY,
    ]
    .into_iter()
    .collect();
    for (i, j, time) in common_frames(mc, exact) {
        for d in &scalars {
            let (Some(v), Some(e), Some(r)) = (
                mc.series.get(d.name),
                mc.series.get(&names::error_of(d.name)),
                exact.series.get(d.name),
            ) else {
                continue;
            };
            let (estimate, se, ex) = (v.frame(i)[0], e.frame(i)[0], r.frame(j)[0]);
            // Energies have no sample resolution of their own: scale by the exact value.
            let tol = 3.0 * resolution * ex.abs().max(1.0);
            out.push(Check {
                job: job.into(),
                time,
                observable: d.name,
                kind: Kind::Scalar {
                    estimate,
                    se,
                    exact: ex,
                    test: stats::scalar_test(estimate, se, ex, groups, tol),
                },
            });
        }
        if n == 1
            && let (Some((t, se)), Some(tr)) = (transmitted_at(mc, i), transmitted_at(exact, j))
        {
            out.push(Check {
                job: job.into(),
                time,
                observable: names::NORM_RIGHT.name,
                kind: Kind::Scalar {
                    estimate: t,
                    se,
                    exact: tr.0,
                    test: stats::scalar_test(t, se, tr.0, groups, 3.0 * resolution),
                },
            });
        }
        let binned = |name: &'static str, upper: bool| -> Option<Check> {
            let v = mc.series.get(name)?;
            let e = mc.series.get(&names::error_of(name))?;
            let r = exact.series.get(name)?;
            // One sample adds 1/(S₀·dx) to a density bin, 1/(S₀·dx²) to a pair-density bin.
            let dx = bin_width(mc)?;
            let quantum = resolution / if upper { dx * dx } else { dx };
            let test = stats::binned_test_against_exact(
                v.frame(i),
                e.frame(i),
                r.frame(j),
                groups,
                quantum,
                |b| !upper || b / nx <= b % nx,
            );
            Some(Check {
                job: job.into(),
                time,
                observable: name,
                kind: Kind::Binned(test),
            })
        };
        out.extend(binned(names::DENSITY.name, false));
        out.extend(binned(names::PAIR_DENSITY.name, true));
    }
    out
}

/// Width of the x bins of a result file, nm (uniform bins, from their centres).
fn bin_width(f: &ResultFile) -> Option<f64> {
    Some((f.x.last()? - f.x.first()?) / (f.x.len().max(2) - 1) as f64)
}

/// Transmitted norm at frame `t`: `norm_right` with its error (Monte Carlo), or absorbed
/// right plus the one-body norm at x > 0 (reference, which has no `norm_right`).
fn transmitted_at(f: &ResultFile, t: usize) -> Option<(f64, f64)> {
    if let (Some(v), Some(e)) = (
        f.series.get(names::NORM_RIGHT.name),
        f.series.get(&names::error_of(names::NORM_RIGHT.name)),
    ) {
        return Some((v.frame(t)[0], e.frame(t)[0]));
    }
    let d = f.series.get(names::DENSITY.name)?;
    let dx = bin_width(f)?;
    let inside: f64 =
        f.x.iter()
            .zip(d.frame(t))
            .filter(|(x, _)| **x > 0.0)
            .map(|(_, v)| v * dx)
            .sum();
    let right = f.series.get(names::ABSORBED_RIGHT.name)?.frame(t)[0];
    Some((right + inside, 0.0))
}

/// Precision floors at the last common time.
fn floors(n: usize, mc: &ResultFile, exact: &ResultFile) -> Floors {
    let mut fl = Floors::default();
    let Some(&(i, j, _)) = common_frames(mc, exact).last() else {
        return fl;
    };
    if n == 1 {
        fl.transmitted_se = transmitted_at(mc, i).map(|t| t.1);
    }
    let nx = mc.x.len();
    let dx = (mc.x[nx - 1] - mc.x[0]) / (nx.max(2) - 1) as f64;
    if let Some(e) = mc.series.get(&names::error_of(names::PAIR_DENSITY.name)) {
        let f = e.frame(i);
        let var: f64 = (0..nx).map(|b| f[b * nx + b].powi(2)).sum();
        fl.diagonal_pair_se = Some(var.sqrt() * dx);
    }
    if let (Some(e), Some(r)) = (
        mc.series.get(&names::error_of(names::DENSITY.name)),
        exact.series.get(names::DENSITY.name),
    ) {
        fl.density_noise_l1 = expected_noise_l1(e.frame(i), r.frame(j));
    }
    fl.peak_particles = mc
        .series
        .get(names::SAMPLES.name)
        .map_or(0.0, |s| s.data.iter().cloned().fold(0.0, f64::max));
    fl
}

/// Job files of the validation directory, sorted by name.
fn job_files(opts: &Options) -> Result<Vec<PathBuf>> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(&opts.jobs)
        .with_context(|| format!("--jobs {}", opts.jobs.display()))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        .filter(|p| {
            let stem = p
                .file_stem()
                .unwrap_or_default()
                .to_string_lossy()
                .to_string();
            (!opts.quick || QUICK.contains(&stem.as_str()))
                && opts.only.as_ref().is_none_or(|o| stem.contains(o.as_str()))
        })
        .collect();
    v.sort();
    if v.is_empty() {
        bail!(
            "--jobs {}: no validation job (*.toml) selected",
            opts.jobs.display()
        );
    }
    Ok(v)
}

/// Outcome of one job.
pub struct JobOutcome {
    pub name: String,
    pub n: usize,
    pub particles: u64,
    pub checks: Vec<Check>,
    pub floors: Floors,
    /// What the run warned about (e.g. cells coarsened to stay within the budget).
    pub warnings: Vec<String>,
    /// Variants against the base run: (label, checks).
    pub systematic: Vec<(String, Vec<Check>)>,
    /// The stationary transmission check (one-body jobs only).
    pub stationary: Option<Assessment>,
}

/// The systematic variants of a job ([`crate::study::systematic`]), each run and compared
/// with the base run.
fn variants(
    file: &Path,
    loaded: &LoadedJob,
    base: &ResultFile,
    dir: &Path,
    groups: usize,
    say: &mut dyn FnMut(String),
) -> Result<Vec<(String, Vec<Check>)>> {
    let budget = Setup::new(loaded)?.budget;
    let mut out = Vec::new();
    for v in systematic::variants(loaded, budget) {
        let loaded_v = crate::physics::defaults::load(file, &v.set)?;
        let (mc, _) = run_monte_carlo(&loaded_v, &dir.with_extension(v.tag))?;
        let checks =
            systematic::compare_runs(&format!("{} {}", dir.display(), v.label), groups, base, &mc);
        let failed = checks.iter().filter(|c| !c.passed()).count();
        say(format!(
            "{}: {}: {} checks against the base run, {failed} moved beyond |stat| ≤ {ACCEPT}",
            dir.file_name().unwrap_or_default().to_string_lossy(),
            v.label,
            checks.len()
        ));
        out.push((v.label.to_string(), checks));
    }
    Ok(out)
}

/// Run the suite; write VALIDATION.md (or VALIDATION-quick.md), a CSV and a figure into
/// `opts.out`; return the paths and whether every check passed.
pub fn command(opts: &Options, say: &mut dyn FnMut(String)) -> Result<(Vec<PathBuf>, bool)> {
    std::fs::create_dir_all(&opts.out)
        .with_context(|| format!("cannot create {}", opts.out.display()))?;
    let runs = opts.out.join("validation-runs");
    let mut outcomes = Vec::new();
    for file in job_files(opts)? {
        let name = file
            .file_stem()
            .unwrap_or_default()
            .to_string_lossy()
            .to_string();
        let loaded = crate::physics::defaults::load(&file, &[])?;
        let started = Instant::now();
        let cache = opts.jobs.join(names::REFERENCE_CACHE_DIR);
        let (exact, source) = refcache::reference(&loaded, Some(&cache), opts.recompute_references)
            .with_context(|| format!("{name}: reference"))?;
        let ref_s = started.elapsed().as_secs_f64();
        let ref_how = match source {
            Source::Cache => "cached",
            Source::Computed => "computed",
        };
        let started = Instant::now();
        let (mc, warnings) = run_monte_carlo(&loaded, &runs.join(&name))?;
        for w in &warnings {
            say(format!("{name}: warning: {w}"));
        }
        let wall = started.elapsed().as_secs_f64();
        let n = loaded.job.particles.count;
        let groups = loaded.job.numerics.groups as usize;
        let resolution = sample_resolution(&mc);
        let mut checks = compare(&name, n, groups, resolution, &mc, &exact);
        let last_ref = exact.times().len().checked_sub(1);
        let mc_final = common_frames(&mc, &exact)
            .into_iter()
            .find(|&(_, j, _)| Some(j) == last_ref)
            .and_then(|(i, _, _)| transmitted_at(&mc, i));
        let stationary = transmission::assess(&name, &loaded, &exact, mc_final)
            .with_context(|| format!("{name}: stationary transmission"))?;
        if let Some(Assessment {
            outcome: Outcome::Compared(c),
            ..
        }) = &stationary
        {
            checks.push(Check {
                job: name.clone(),
                time: c.time,
                observable: STATIONARY,
                kind: Kind::Scalar {
                    estimate: c.mc,
                    se: c.mc_se,
                    exact: c.stationary,
                    test: stats::scalar_test(c.mc, c.mc_se, c.stationary, groups, 3.0 * resolution),
                },
            });
            say(format!(
                "{name}: stationary T = {:.5} ± {:.1e}; reference {:.5} (difference {:+.2e}, \
                 bound {:.2e}); Monte Carlo {:.5} ± {:.5}",
                c.stationary,
                c.stationary_error,
                c.reference,
                c.reference_difference(),
                c.tolerance,
                c.mc,
                c.mc_se
            ));
        } else if let Some(Assessment {
            outcome: Outcome::Skipped(why),
            ..
        }) = &stationary
        {
            say(format!(
                "{name}: stationary transmission not compared: {why}"
            ));
        }
        let mut fl = floors(n, &mc, &exact);
        fl.wall_s = wall;
        let failed = checks.iter().filter(|c| !c.passed()).count();
        say(format!(
            "{name}: {} checks, {failed} outside |stat| ≤ {ACCEPT}; reference {ref_how} ({ref_s:.0} s), Monte Carlo {wall:.0} s",
            checks.len()
        ));
        let systematic = if opts.systematic {
            variants(&file, &loaded, &mc, &runs.join(&name), groups, say)?
        } else {
            Vec::new()
        };
        outcomes.push(JobOutcome {
            name,
            n,
            particles: loaded.job.numerics.samples,
            checks,
            floors: fl,
            warnings,
            systematic,
            stationary,
        });
    }
    let suffix = if opts.quick { "-quick" } else { "" };
    let md = opts.out.join(format!("VALIDATION{suffix}.md"));
    let csv = opts.out.join(format!("validation{suffix}.csv"));
    let png = opts.out.join(format!("validation{suffix}.png"));
    let csv_st = opts.out.join(format!("validation-stationary{suffix}.csv"));
    std::fs::write(&md, markdown(&outcomes, opts.quick))
        .with_context(|| format!("cannot write {}", md.display()))?;
    std::fs::write(&csv, csv_text(&outcomes))
        .with_context(|| format!("cannot write {}", csv.display()))?;
    std::fs::write(&csv_st, stationary_csv(&outcomes))
        .with_context(|| format!("cannot write {}", csv_st.display()))?;
    figure(&png, &outcomes)?;
    let ok = outcomes.iter().all(|o| {
        o.checks.iter().all(Check::passed)
            && o.stationary.as_ref().is_none_or(|a| match &a.outcome {
                Outcome::Compared(c) => c.reference_agrees(),
                Outcome::Skipped(_) => true,
            })
            && o.systematic
                .iter()
                .all(|(_, c)| c.iter().all(Check::passed))
    });
    Ok((vec![md, csv, csv_st, png], ok))
}

/// Norm carried by one sample: 1/S₀, S₀ the net sign count at t = 0.
pub fn sample_resolution(mc: &ResultFile) -> f64 {
    let first = |d: Dataset| mc.series.get(d.name).map_or(f64::NAN, |s| s.data[0]);
    let (pos, neg) = (
        first(names::SAMPLES_POSITIVE),
        first(names::SAMPLES_NEGATIVE),
    );
    1.0 / (pos - neg).abs().max(1.0)
}

/// The Monte Carlo of one job in-process on one rank, into `dir` (replaced), and the
/// warnings it emitted.
fn run_monte_carlo(loaded: &LoadedJob, dir: &Path) -> Result<(ResultFile, Vec<String>)> {
    let setup = Setup::new(loaded)?;
    let opts = RunOptions {
        out: dir.to_path_buf(),
        force: true,
        until: None,
        walltime: None,
    };
    let mut warnings = Vec::new();
    driver::run(loaded, &setup, &opts, &Solo, &mut |p| {
        if let Progress::Warning(w) = p {
            warnings.push(w);
        }
    })?;
    Ok((
        ResultFile::read(&dir.join(names::OBSERVABLES_FILE))?,
        warnings,
    ))
}

fn csv_text(outcomes: &[JobOutcome]) -> String {
    let mut s = String::from(
        "job,time_fs,observable,kind,statistic,passed,estimate,standard_error,exact,bins,empty_bins,mean_t2,expected_t2,sparse_bins,pooled_z\n",
    );
    for o in outcomes {
        for c in &o.checks {
            let _ = match &c.kind {
                Kind::Scalar {
                    estimate,
                    se,
                    exact,
                    ..
                } => writeln!(
                    s,
                    "{},{},{},scalar,{:.4},{},{estimate:.6e},{se:.3e},{exact:.6e},,,,,,",
                    c.job,
                    c.time,
                    c.observable,
                    c.statistic(),
                    c.passed()
                ),
                Kind::Binned(b) => writeln!(
                    s,
                    "{},{},{},binned,{:.4},{},,,,{},{},{:.4},{:.4},{},{:.4}",
                    c.job,
                    c.time,
                    c.observable,
                    b.z,
                    c.passed(),
                    b.bins,
                    b.empty_bins,
                    b.mean_t2,
                    b.expected_t2,
                    b.sparse_bins,
                    b.pooled_z
                ),
            };
        }
    }
    s
}

fn markdown(outcomes: &[JobOutcome], quick: bool) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "# Validation against the exact reference{}\n",
        if quick { " (quick subset)" } else { "" }
    );
    let _ = writeln!(
        s,
        "Made by `signfold validate{}`: each job of `jobs/validation/` run by the Monte Carlo \
         with the numerics in its file and its fixed seed, compared with `signfold reference` \
         (taken from `jobs/validation/reference-cache/` when the hash of the job's physics \
         matches; docs/formats.md) at every output time. Scalars pass with |z| ≤ {ACCEPT}, z being the normal score of the \
         two-sided p-value of t = difference / standard error under Student's t with B − 1 degrees of \
         freedom (with B = 8 groups a |t| of 3.5 is a 1 % event, |z| = 3.5 a 0.05 % one); binned data pass with |Z| ≤ {ACCEPT}, Z being the normal score of the mean \
         per-bin p-value under Student's t with B − 1 degrees of freedom (two-sided: Z > 0 \
         means error bars too large), over the bins whose exact value is worth at least 16 \
         samples; the others are pooled and the pool passes as a scalar (see \
         `src/analysis/stats.rs` and docs/method.md §4).\n",
        if quick { " --quick" } else { "" }
    );
    let _ = writeln!(
        s,
        "| job | N | samples | checks | failed | worst scalar z | worst binned Z | transmitted s.e. | ∫n₂(x,x) s.e. | density noise L1 | peak count | MC wall (s) |"
    );
    let _ = writeln!(s, "|---|---|---|---|---|---|---|---|---|---|---|---|");
    for o in outcomes {
        let worst = |scalar: bool| {
            o.checks
                .iter()
                .filter(|c| matches!(c.kind, Kind::Scalar { .. }) == scalar)
                .max_by(|a, b| a.statistic().abs().total_cmp(&b.statistic().abs()))
                .map_or("–".to_string(), |c| {
                    format!("{:+.2} ({} at {} fs)", c.statistic(), c.observable, c.time)
                })
        };
        let opt = |v: Option<f64>| v.map_or("–".to_string(), |v| format!("{v:.4}"));
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} | {} | {} | {} | {} | {} | {:.3} | {:.3e} | {:.0} |",
            o.name,
            o.n,
            o.particles,
            o.checks.len(),
            o.checks.iter().filter(|c| !c.passed()).count(),
            worst(true),
            worst(false),
            opt(o.floors.transmitted_se),
            opt(o.floors.diagonal_pair_se),
            o.floors.density_noise_l1,
            o.floors.peak_particles,
            o.floors.wall_s
        );
    }
    if outcomes.iter().any(|o| !o.systematic.is_empty()) {
        let _ = writeln!(
            s,
            "\nSystematic check (each variant against the base run, difference over the combined error):\n"
        );
        let _ = writeln!(s, "| job | variant | checks | moved | largest |stat| |");
        let _ = writeln!(s, "|---|---|---|---|---|");
        for o in outcomes {
            for (label, checks) in &o.systematic {
                let worst = checks
                    .iter()
                    .map(|c| c.statistic().abs())
                    .fold(0.0, f64::max);
                let _ = writeln!(
                    s,
                    "| {} | {label} | {} | {} | {worst:.2} |",
                    o.name,
                    checks.len(),
                    checks.iter().filter(|c| !c.passed()).count()
                );
            }
        }
    }
    stationary_section(&mut s, outcomes);
    let _ = writeln!(s, "\nWarnings of the runs:\n");
    let mut warned = false;
    for o in outcomes {
        for w in &o.warnings {
            warned = true;
            let _ = writeln!(s, "- {}: {w}", o.name);
        }
    }
    if !warned {
        let _ = writeln!(s, "none.");
    }
    let _ = writeln!(s, "\nFailed checks:\n");
    let mut any = false;
    for o in outcomes {
        for c in o.checks.iter().filter(|c| !c.passed()) {
            any = true;
            let _ = match &c.kind {
                Kind::Scalar {
                    estimate,
                    se,
                    exact,
                    test,
                } => writeln!(
                    s,
                    "- {} t = {} fs {}: {estimate:.5} ± {se:.5} vs exact {exact:.5} (t = {:+.2}, z = {:+.2})",
                    o.name,
                    c.time,
                    c.observable,
                    test.t,
                    c.statistic()
                ),
                Kind::Binned(b) => writeln!(
                    s,
                    "- {} t = {} fs {}: Z = {:+.2}, mean t² {:.2} (expected {:.2}) over {} bins; {} sparse bins pooled: z = {:+.2}",
                    o.name,
                    c.time,
                    c.observable,
                    b.z,
                    b.mean_t2,
                    b.expected_t2,
                    b.bins,
                    b.sparse_bins,
                    b.pooled_z
                ),
            };
        }
    }
    if !any {
        let _ = writeln!(s, "none.");
    }
    s
}

/// The stationary-transmission section of VALIDATION.md.
fn stationary_section(s: &mut String, outcomes: &[JobOutcome]) {
    let rows: Vec<&Assessment> = outcomes
        .iter()
        .filter_map(|o| o.stationary.as_ref())
        .collect();
    if rows.is_empty() {
        return;
    }
    let _ = writeln!(
        s,
        "\nStationary transmission (one-body jobs; `src/reference/stationary.rs`, \
         docs/method.md §5): T(E) = transmitted over incident probability current of the \
         stationary state with a wave incident from the left (textbook definition, e.g. \
         Griffiths, Introduction to Quantum Mechanics, ch. 2; cited from memory), from a \
         transfer solution of the stationary Schrödinger equation across the job's potential \
         (midpoint cells of {} nm and half that, extrapolated). \"plane-wave average\" is \
         ∫_(k>0) |φ̃(k)|² T dk over the initial packet's momentum distribution; \"stationary\" \
         projects the initial packet on the scattering states incident from both sides and \
         sums the outgoing waves on the right, exact also when the packet's tail reaches \
         into the potential at t = 0 (near a resonance the two differ). Compared at the last \
         output time when the norm still undecided (inside the potential's range or not yet \
         arrived) is at most {:.0e}. The reference agrees when |reference − stationary| ≤ \
         bound = undecided norm + (1 − completeness of the projection) + stationary error + \
         reference Δt error (4/3 of the change at half the step) + reference grid error \
         (change on twice the points). The Monte Carlo check (`{STATIONARY}`) is a scalar \
         check like the others: t = (MC − stationary)/s.e.\n",
        transmission::SCAN_STEP,
        transmission::PENDING_LIMIT
    );
    let _ = writeln!(
        s,
        "| job | t (fs) | plane-wave average | stationary | reference | reference − stationary | bound | agrees | Monte Carlo | t |"
    );
    let _ = writeln!(s, "|---|---|---|---|---|---|---|---|---|---|");
    for a in &rows {
        match &a.outcome {
            Outcome::Compared(c) => {
                let t = (c.mc - c.stationary) / c.mc_se;
                let _ = writeln!(
                    s,
                    "| {} | {} | {:.5} | {:.5} ± {:.1e} | {:.5} | {:+.2e} | {:.2e} | {} | {:.5} ± {:.5} | {:+.2} |",
                    a.job,
                    c.time,
                    c.free,
                    c.stationary,
                    c.stationary_error,
                    c.reference,
                    c.reference_difference(),
                    c.tolerance,
                    if c.reference_agrees() {
                        "yes"
                    } else {
                        "**no**"
                    },
                    c.mc,
                    c.mc_se,
                    t
                );
            }
            Outcome::Skipped(why) => {
                let _ = writeln!(s, "| {} | – | not compared: {why} | | | | | | | |", a.job);
            }
        }
    }
    let _ = writeln!(
        s,
        "\nParts of the bound (compared jobs): undecided norm, 1 − completeness, stationary \
         error, reference Δt and grid errors; beside them the initial overlap with the \
         potential's range and the k < 0 weight (not in the bound: the projection accounts \
         for both):\n"
    );
    for a in &rows {
        if let Outcome::Compared(c) = &a.outcome {
            let _ = writeln!(
                s,
                "- {}: {:.1e}, {:.1e}, {:.1e}, {:.1e}, {:.1e}; overlap {:.1e}, k < 0 {:.1e}",
                a.job,
                c.pending,
                (1.0 - c.completeness).abs(),
                c.stationary_error,
                c.reference_dt_error,
                c.reference_dx_error,
                c.initial_overlap,
                c.backward_weight
            );
        }
    }
}

/// validation-stationary.csv: one row per one-body job.
fn stationary_csv(outcomes: &[JobOutcome]) -> String {
    let mut s = String::from(
        "job,compared,time_fs,stationary,stationary_error,completeness,plane_wave_average,backward_weight,initial_overlap,pending,reference,reference_dt_error,reference_dx_error,bound,reference_agrees,mc,mc_se,mc_t,note\n",
    );
    for a in outcomes.iter().filter_map(|o| o.stationary.as_ref()) {
        let _ = match &a.outcome {
            Outcome::Compared(c) => writeln!(
                s,
                "{},true,{},{:.8},{:.2e},{:.8},{:.8},{:.2e},{:.2e},{:.2e},{:.8},{:.2e},{:.2e},{:.2e},{},{:.6},{:.6},{:.3},",
                a.job,
                c.time,
                c.stationary,
                c.stationary_error,
                c.completeness,
                c.free,
                c.backward_weight,
                c.initial_overlap,
                c.pending,
                c.reference,
                c.reference_dt_error,
                c.reference_dx_error,
                c.tolerance,
                c.reference_agrees(),
                c.mc,
                c.mc_se,
                (c.mc - c.stationary) / c.mc_se
            ),
            Outcome::Skipped(why) => writeln!(
                s,
                "{},false,,,,,,,,,,,,,,,,,\"{}\"",
                a.job,
                why.replace('"', "'")
            ),
        };
    }
    s
}

/// Every statistic per job (one column of points per job), with the acceptance band.
fn figure(path: &Path, outcomes: &[JobOutcome]) -> Result<()> {
    ensure_font()?;
    let stats: Vec<(usize, f64, bool)> = outcomes
        .iter()
        .enumerate()
        .flat_map(|(j, o)| {
            o.checks.iter().map(move |c| {
                (
                    j,
                    c.statistic().clamp(-10.0, 10.0),
                    matches!(c.kind, Kind::Binned(_)),
                )
            })
        })
        .collect();
    let n = outcomes.len();
    render(path, (1100, 640), |root: &Area| {
        let area = root.titled(
            "Monte Carlo against the exact reference (|t|, |Z| ≤ 3.5 accepted)",
            (FONT_NAME, TITLE_PX),
        )?;
        let mut chart = ChartBuilder::on(&area)
            .margin(15)
            .x_label_area_size(70)
            .y_label_area_size(60)
            .build_cartesian_2d(-0.5f64..(n as f64 - 0.5), -10.5f64..10.5f64)?;
        let labels: Vec<String> = outcomes.iter().map(|o| o.name.clone()).collect();
        chart
            .configure_mesh()
            .x_labels(n.max(1))
            .x_label_formatter(&|v| {
                let i = v.round();
                if (v - i).abs() < 1e-6 && i >= 0.0 && (i as usize) < labels.len() {
                    labels[i as usize].chars().take(12).collect()
                } else {
                    String::new()
                }
            })
            .y_desc("t (scalars, ○) or Z (binned, ×), clamped to ±10")
            .label_style((FONT_NAME, TICK_PX))
            .axis_desc_style((FONT_NAME, LABEL_PX))
            .draw()?;
        let grey = RGBColor(150, 150, 150);
        for y in [-ACCEPT, ACCEPT] {
            chart.draw_series(LineSeries::new(
                [(-0.5, y), (n as f64 - 0.5, y)],
                grey.stroke_width(2),
            ))?;
        }
        let (r, g, b) = colormap::line(0);
        let scalar = RGBColor(r, g, b);
        let (r, g, b) = colormap::line(1);
        let binned = RGBColor(r, g, b);
        chart.draw_series(
            stats
                .iter()
                .filter(|s| !s.2)
                .map(|&(j, v, _)| Circle::new((j as f64 - 0.12, v), 4, scalar.stroke_width(2))),
        )?;
        chart.draw_series(
            stats
                .iter()
                .filter(|s| s.2)
                .map(|&(j, v, _)| Cross::new((j as f64 + 0.12, v), 5, binned.stroke_width(2))),
        )?;
        Ok(())
    })
}
