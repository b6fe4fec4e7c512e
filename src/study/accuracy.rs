//! `accuracy`: how close the Monte Carlo comes to the exact reference, and how that
//! distance falls with the particle count.
//!
//! For each study job (`fermion-pair`, `barrier-packet`, `fermion-pair-coulomb`) the exact
//! reference is solved once (it does not depend on the coherence length), then the Monte
//! Carlo is run as child processes of this same executable on a ladder of particle counts
//! and at a few coherence lengths. Every run is compared with the reference on the job's
//! own output bins:
//!
//! - density and pair-density L1: the relative L1 distance Σ|A − B|/Σ|B| (as `compare`),
//!   the largest over the common output times;
//! - the noise alone would give, per bin, E|A − B| = sqrt(2/π) σ_b with σ_b the standard
//!   error the engine reports in `*_error`, so the expected noise L1 is
//!   sqrt(2/π) Σσ_b / Σ|B| (at the time of the largest L1);
//! - the transmitted norm (one-particle jobs): `absorbed_right` plus the norm in the bins
//!   at x > 0 at the last output.
//!
//! The floor is fitted per job and setting from L1(N)² ≈ floor² + c²/N (noise and a bias
//! add in quadrature on average). Absorbing jobs with N ≥ 2 need no special treatment
//! here: the reference already keeps only the configurations with all particles inside,
//! which is what the Monte Carlo's removal does (docs/method.md §5, docs/reference.md).

use crate::analysis::compare::relative_l1;
use crate::io::names;
use crate::io::results::ResultFile;
use crate::viz::chart::{Area, FONT_NAME, LABEL_PX, TICK_PX, TITLE_PX, ensure_font, render};
use crate::viz::colormap;
use anyhow::{Context, Result, anyhow, bail};
use plotters::prelude::*;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

/// Options of `signfold accuracy`.
#[derive(clap::Args, Clone, Debug)]
pub struct Options {
    /// A short ladder at the default coherence lengths only (a few minutes).
    #[arg(long)]
    pub quick: bool,
    /// Also run the interacting pair at 10^7 particles (about ten minutes more).
    #[arg(long)]
    pub large: bool,
    /// Directory for the results and the runs behind them (OUT/runs).
    #[arg(long, default_value = "scaling-results")]
    pub out: PathBuf,
    /// Directory of the demo jobs.
    #[arg(long, default_value = "jobs")]
    pub jobs: PathBuf,
}

/// One Monte Carlo setting of a study job: the coherence length, further overrides, and
/// the particle counts it is run at.
#[derive(Clone, Debug)]
struct Setting {
    coherence_length: f64,
    extra: Vec<String>,
    particles: Vec<u64>,
}

impl Setting {
    fn label(&self) -> String {
        let mut s = format!("L_c = {} nm", self.coherence_length);
        for e in &self.extra {
            s.push_str(", ");
            s.push_str(e.trim_start_matches("annihilation."));
        }
        s
    }
}

/// The study plan: job name and its settings.
fn plan(opts: &Options) -> Vec<(&'static str, Vec<Setting>)> {
    let s = |lc: f64, extra: &[&str], n: &[u64]| Setting {
        coherence_length: lc,
        extra: extra.iter().map(|e| e.to_string()).collect(),
        particles: n.to_vec(),
    };
    if opts.quick {
        return vec![
            ("fermion-pair", vec![s(120.0, &[], &[30_000, 100_000])]),
            ("barrier-packet", vec![s(60.0, &[], &[30_000, 100_000])]),
            (
                "fermion-pair-coulomb",
                vec![s(120.0, &[], &[30_000, 100_000])],
            ),
        ];
    }
    let ladder: &[u64] = &[30_000, 100_000, 300_000, 1_000_000];
    let mut coulomb = ladder.to_vec();
    if opts.large {
        coulomb.push(10_000_000);
    }
    vec![
        (
            "fermion-pair",
            vec![
                s(90.0, &[], &[100_000, 1_000_000]),
                s(120.0, &[], ladder),
                s(150.0, &[], &[100_000, 1_000_000]),
            ],
        ),
        (
            "barrier-packet",
            vec![
                s(60.0, &[], ladder),
                s(90.0, &[], &[100_000, 300_000]),
                // Annihilation cells four times finer in x than the job's 2 nm: the
                // cell-size (annihilation diffusion) part of the floor, docs/method.md §3.
                s(60.0, &["annihilation.cell_x=0.5"], &[100_000, 300_000]),
            ],
        ),
        (
            "fermion-pair-coulomb",
            vec![
                s(90.0, &[], &[100_000, 300_000]),
                s(120.0, &[], &coulomb),
                s(150.0, &[], &[100_000, 300_000]),
            ],
        ),
    ]
}

/// A distance of one series from the reference: the largest relative L1 over the common
/// output times, when it happened, and the L1 the noise alone would give then.
#[derive(Clone, Copy, Debug)]
pub struct Distance {
    pub l1: f64,
    pub time: f64,
    pub expected_noise: f64,
}

/// sqrt(2/π) Σσ_b / Σ|ref_b|: the expected relative L1 of an unbiased estimate with
/// per-bin standard errors σ_b (E|Gaussian| = sqrt(2/π) σ).
pub fn expected_noise_l1(err: &[f64], reference: &[f64]) -> f64 {
    let den: f64 = reference.iter().map(|v| v.abs()).sum();
    (2.0 / std::f64::consts::PI).sqrt() * err.iter().sum::<f64>() / den
}

/// Frames (mc, ref, time) at the output times both files hold.
pub fn common_frames(mc: &ResultFile, reference: &ResultFile) -> Vec<(usize, usize, f64)> {
    let tr = reference.times();
    mc.times()
        .iter()
        .enumerate()
        .filter_map(|(i, &t)| {
            tr.iter()
                .position(|&u| (u - t).abs() <= 1e-9)
                .map(|j| (i, j, t))
        })
        .collect()
}

/// The distance of series `name` (None when either file lacks it).
pub fn distance(mc: &ResultFile, reference: &ResultFile, name: &str) -> Result<Option<Distance>> {
    let (Some(a), Some(b)) = (mc.series.get(name), reference.series.get(name)) else {
        return Ok(None);
    };
    let err = mc
        .series
        .get(&format!("{name}_error"))
        .ok_or_else(|| anyhow!("the Monte Carlo file has no `{name}_error`"))?;
    if a.frame_shape != b.frame_shape {
        bail!("`{name}` has different bins in the two files");
    }
    let mut best: Option<Distance> = None;
    for (i, j, t) in common_frames(mc, reference) {
        let l1 = relative_l1(a.frame(i), b.frame(j));
        if best.is_none_or(|d| l1 > d.l1) {
            best = Some(Distance {
                l1,
                time: t,
                expected_noise: expected_noise_l1(err.frame(i), b.frame(j)),
            });
        }
    }
    Ok(best)
}

/// Transmitted norm at the last output: `absorbed_right` plus ∫_{x>0} n dx (bins centred
/// at x > 0), with its standard error. A Monte Carlo file holds it as `norm_right` with
/// its own group error; for a reference it is computed from the density (error 0
/// there; a file without `norm_right` gets the per-bin errors added linearly, an upper
/// bound). None for N ≥ 2, where it has no one-body meaning.
pub fn transmitted(f: &ResultFile) -> Option<(f64, f64)> {
    let density = f.series.get(names::DENSITY.name)?;
    let nt = density.frames();
    if nt == 0 || f.x.len() < 2 {
        return None;
    }
    let dx = f.x[1] - f.x[0];
    let count = (density.frame(0).iter().sum::<f64>() * dx).round();
    if count != 1.0 {
        return None;
    }
    let last = nt - 1;
    if let (Some(v), Some(e)) = (
        f.series.get(names::NORM_RIGHT.name),
        f.series.get(&names::error_of(names::NORM_RIGHT.name)),
    ) {
        return Some((v.frame(last)[0], e.frame(last)[0]));
    }
    let right = |name: &str| -> f64 {
        f.series
            .get(name)
            .map_or(0.0, |s| s.frame(last).first().copied().unwrap_or(0.0))
    };
    let inside: f64 =
        f.x.iter()
            .zip(density.frame(last))
            .filter(|(x, _)| **x > 0.0)
            .map(|(_, v)| v * dx)
            .sum();
    let err_inside: f64 = f.series.get("density_error").map_or(0.0, |e| {
        f.x.iter()
            .zip(e.frame(last))
            .filter(|(x, _)| **x > 0.0)
            .map(|(_, v)| v * dx)
            .sum()
    });
    Some((
        right(names::ABSORBED_RIGHT.name) + inside,
        right("absorbed_right_error") + err_inside,
    ))
}

/// Weighted least-squares fit of y = L1² = floor² + c²/N with relative weights
/// (1/y²): returns (floor, c). A negative floor² is reported as 0 (the floor is then not
/// resolved by the data) and c refitted alone; a negative c² likewise.
pub fn fit_floor(points: &[(f64, f64)]) -> Option<(f64, f64)> {
    let pts: Vec<(f64, f64, f64)> = points
        .iter()
        .filter(|(n, l)| *n > 0.0 && l.is_finite() && *l > 0.0)
        .map(|&(n, l)| (1.0 / n, l * l, 1.0 / (l * l * l * l)))
        .collect();
    if pts.len() < 2 {
        return None;
    }
    let (mut sw, mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for &(x, y, w) in &pts {
        sw += w;
        sx += w * x;
        sy += w * y;
        sxx += w * x * x;
        sxy += w * x * y;
    }
    let det = sw * sxx - sx * sx;
    let (mut a, mut b) = if det.abs() > 0.0 {
        ((sy * sxx - sx * sxy) / det, (sw * sxy - sx * sy) / det)
    } else {
        (sy / sw, 0.0)
    };
    if a < 0.0 {
        a = 0.0;
        b = sxy / sxx;
    }
    if b < 0.0 {
        b = 0.0;
        a = sy / sw;
    }
    Some((a.sqrt(), b.sqrt()))
}

/// One Monte Carlo run against the reference.
#[derive(Clone, Debug)]
struct Row {
    job: String,
    setting: usize,
    label: String,
    extra: String,
    particles: u64,
    coherence_length: f64,
    bins: usize,
    bin_width: f64,
    density: Distance,
    pair: Option<Distance>,
    transmitted_mc: Option<(f64, f64)>,
    transmitted_ref: Option<f64>,
    peak_particles: f64,
    wall_s: f64,
}

/// Per job and setting: the fitted floors.
#[derive(Clone, Debug)]
struct Fit {
    job: String,
    label: String,
    coherence_length: f64,
    extra: String,
    density: Option<(f64, f64)>,
    pair: Option<(f64, f64)>,
    /// Weighted mean of T_mc − T_ref over the ladder and its standard error.
    transmitted_bias: Option<(f64, f64)>,
}

fn run_child(exe: &Path, args: &[String], log: &Path) -> Result<f64> {
    let t0 = Instant::now();
    let out = Command::new(exe)
        .args(args)
        .output()
        .with_context(|| format!("cannot start {}", exe.display()))?;
    let wall = t0.elapsed().as_secs_f64();
    let mut text = String::from_utf8_lossy(&out.stdout).into_owned();
    text.push_str(&String::from_utf8_lossy(&out.stderr));
    std::fs::write(log, &text).with_context(|| format!("cannot write {}", log.display()))?;
    if !out.status.success() {
        let tail: Vec<&str> = text.lines().rev().take(8).collect();
        let tail: Vec<&str> = tail.into_iter().rev().collect();
        bail!(
            "`signfold {}` failed ({}):\n{}",
            args.join(" "),
            out.status,
            tail.join("\n")
        );
    }
    Ok(wall)
}

fn machine_text() -> String {
    let read = |p: &str| std::fs::read_to_string(p).unwrap_or_default();
    let cpu = read("/proc/cpuinfo")
        .lines()
        .find(|l| l.starts_with("model name"))
        .and_then(|l| l.split(':').nth(1))
        .map(|s| s.trim().to_string())
        .unwrap_or_else(|| "unknown".into());
    let mem = read("/proc/meminfo")
        .lines()
        .find(|l| l.starts_with("MemTotal"))
        .map(|l| l.trim_start_matches("MemTotal:").trim().to_string())
        .unwrap_or_else(|| "unknown".into());
    let cores = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1);
    format!(
        "cpu: {cpu}\ncores available: {cores}\nmemory: {mem}\nsignfold version: {}\nload average at start: {}",
        env!("CARGO_PKG_VERSION"),
        read("/proc/loadavg").trim()
    )
}

/// Run the study and write its files; returns the paths written.
pub fn command(opts: &Options, say: &mut dyn FnMut(String)) -> Result<Vec<PathBuf>> {
    let exe = std::env::current_exe().context("cannot locate this executable")?;
    std::fs::create_dir_all(&opts.out)
        .with_context(|| format!("cannot create {}", opts.out.display()))?;
    let work = opts.out.join("runs");
    std::fs::create_dir_all(&work)?;
    let started = Instant::now();
    let machine = machine_text();
    let mut rows: Vec<Row> = Vec::new();
    for (job, settings) in plan(opts) {
        let job_file = opts.jobs.join(format!("{job}.toml"));
        if !job_file.exists() {
            bail!(
                "{}: no such job (run from the repository root or pass --jobs DIR)",
                job_file.display()
            );
        }
        let ref_dir = work.join(format!("{job}-reference"));
        let args: Vec<String> = vec![
            "reference".into(),
            job_file.display().to_string(),
            "--out".into(),
            ref_dir.display().to_string(),
            "--force".into(),
        ];
        std::fs::create_dir_all(&ref_dir)?;
        let wall = run_child(&exe, &args, &ref_dir.join("log.txt"))?;
        let reference = ResultFile::read(&ref_dir.join(names::REFERENCE_FILE))?;
        say(format!("{job}: reference in {wall:.1} s"));
        let t_ref = transmitted(&reference).map(|t| t.0);
        for (si, setting) in settings.iter().enumerate() {
            for &n in &setting.particles {
                let dir = work.join(format!("{job}-lc{}-{si}-n{n}", setting.coherence_length));
                std::fs::create_dir_all(&dir)?;
                let mut args: Vec<String> = vec![
                    "run".into(),
                    job_file.display().to_string(),
                    "--out".into(),
                    dir.display().to_string(),
                    "--force".into(),
                    "--samples".into(),
                    n.to_string(),
                    "--set".into(),
                    format!("numerics.coherence_length={}", setting.coherence_length),
                ];
                for e in &setting.extra {
                    args.push("--set".into());
                    args.push(e.clone());
                }
                let wall = run_child(&exe, &args, &dir.join("log.txt"))?;
                let mc = ResultFile::read(&dir.join(names::OBSERVABLES_FILE))?;
                let density = distance(&mc, &reference, names::DENSITY.name)?
                    .ok_or_else(|| anyhow!("{job}: no density to compare"))?;
                let pair = distance(&mc, &reference, names::PAIR_DENSITY.name)?;
                let bin_width = if mc.x.len() > 1 {
                    mc.x[1] - mc.x[0]
                } else {
                    f64::NAN
                };
                let peak_particles = mc
                    .series
                    .get(names::SAMPLES.name)
                    .map_or(f64::NAN, |s| s.data.iter().cloned().fold(0.0, f64::max));
                let row = Row {
                    job: job.to_string(),
                    setting: si,
                    label: setting.label(),
                    extra: setting.extra.join(" "),
                    particles: n,
                    coherence_length: setting.coherence_length,
                    bins: mc.x.len(),
                    bin_width,
                    density,
                    pair,
                    transmitted_mc: transmitted(&mc),
                    transmitted_ref: t_ref,
                    peak_particles,
                    wall_s: wall,
                };
                say(format!(
                    "{job} {} N = {n}: density L1 {:.4} (noise {:.4}){}{} in {wall:.1} s",
                    row.label,
                    density.l1,
                    density.expected_noise,
                    pair.map_or(String::new(), |p| format!(
                        ", pair L1 {:.4} (noise {:.4})",
                        p.l1, p.expected_noise
                    )),
                    match (row.transmitted_mc, t_ref) {
                        (Some((t, e)), Some(r)) => format!(", T {t:.4} ± {e:.4} vs {r:.4}"),
                        _ => String::new(),
                    }
                ));
                rows.push(row);
                // The results are summarised in the CSV; the bulky files are not kept.
                let _ = std::fs::remove_file(dir.join(names::OBSERVABLES_FILE));
            }
        }
    }
    let fits = fits(&rows);
    let mut written = Vec::new();
    let csv = opts.out.join("accuracy.csv");
    std::fs::write(&csv, rows_csv(&rows)?)?;
    written.push(csv);
    let fit_csv = opts.out.join("accuracy-fit.csv");
    std::fs::write(&fit_csv, fits_csv(&fits)?)?;
    written.push(fit_csv);
    let png = opts.out.join("accuracy.png");
    plot(&png, &rows, &fits)?;
    written.push(png);
    let m = opts.out.join("accuracy-machine.txt");
    let read = |p: &str| std::fs::read_to_string(p).unwrap_or_default();
    std::fs::write(
        &m,
        format!(
            "{machine}\nload average at end: {}\nstudy: {}\ntotal wall time: {:.0} s\n",
            read("/proc/loadavg").trim(),
            if opts.quick {
                "--quick"
            } else if opts.large {
                "full, with 10^7 particles for fermion-pair-coulomb"
            } else {
                "full"
            },
            started.elapsed().as_secs_f64()
        ),
    )?;
    written.push(m);
    say(fits_text(&fits).trim_end().to_string());
    Ok(written)
}

fn fits(rows: &[Row]) -> Vec<Fit> {
    let mut out: Vec<Fit> = Vec::new();
    for r in rows {
        if out
            .iter()
            .any(|f| f.job == r.job && f.label == r.label && f.extra == r.extra)
        {
            continue;
        }
        let same: Vec<&Row> = rows
            .iter()
            .filter(|q| q.job == r.job && q.setting == r.setting)
            .collect();
        let pts = |g: &dyn Fn(&Row) -> Option<f64>| -> Vec<(f64, f64)> {
            same.iter()
                .filter_map(|q| g(q).map(|v| (q.particles as f64, v)))
                .collect()
        };
        let density = fit_floor(&pts(&|q| Some(q.density.l1)));
        let pair = fit_floor(&pts(&|q| q.pair.map(|p| p.l1)));
        let tb: Vec<(f64, f64)> = same
            .iter()
            .filter_map(|q| match (q.transmitted_mc, q.transmitted_ref) {
                (Some((t, e)), Some(r)) if e > 0.0 => Some((t - r, e)),
                _ => None,
            })
            .collect();
        let transmitted_bias = if tb.is_empty() {
            None
        } else {
            let sw: f64 = tb.iter().map(|(_, e)| 1.0 / (e * e)).sum();
            let m: f64 = tb.iter().map(|(d, e)| d / (e * e)).sum::<f64>() / sw;
            Some((m, 1.0 / sw.sqrt()))
        };
        out.push(Fit {
            job: r.job.clone(),
            label: r.label.clone(),
            coherence_length: r.coherence_length,
            extra: r.extra.clone(),
            density,
            pair,
            transmitted_bias,
        });
    }
    out
}

/// One row of `accuracy.csv` (docs/formats.md, "Accuracy study CSVs"); the column names
/// are the field names (renamed where a column name is not a Rust identifier).
#[derive(serde::Serialize)]
struct RowRecord<'a> {
    job: &'a str,
    /// Initial Monte Carlo samples (`numerics.samples`; column `particles` before format
    /// version 2).
    samples: u64,
    coherence_length: f64,
    bins: usize,
    bin_width_nm: f64,
    #[serde(rename = "density_L1")]
    density_l1: f64,
    #[serde(rename = "pair_density_L1")]
    pair_density_l1: Option<f64>,
    transmitted_norm_mc: Option<f64>,
    transmitted_norm_ref: Option<f64>,
    #[serde(rename = "expected_noise_L1")]
    expected_noise_l1: f64,
    wall_s: f64,
    /// Free text (`--set` overrides): quoted by the CSV writer when it holds a comma or a
    /// quote.
    settings: &'a str,
    #[serde(rename = "density_L1_time_fs")]
    density_l1_time_fs: f64,
    #[serde(rename = "pair_expected_noise_L1")]
    pair_expected_noise_l1: Option<f64>,
    transmitted_norm_mc_error: Option<f64>,
    peak_samples: f64,
}

/// One row of `accuracy-fit.csv`.
#[derive(serde::Serialize)]
struct FitRecord<'a> {
    job: &'a str,
    coherence_length: f64,
    settings: &'a str,
    density_floor: Option<f64>,
    density_c: Option<f64>,
    pair_density_floor: Option<f64>,
    pair_density_c: Option<f64>,
    transmitted_bias: Option<f64>,
    transmitted_bias_error: Option<f64>,
}

/// Serialise records as CSV text with a header line (None: an empty cell).
fn to_csv<T: serde::Serialize>(records: impl IntoIterator<Item = T>) -> Result<String> {
    let mut w = csv::Writer::from_writer(Vec::new());
    for r in records {
        w.serialize(r)?;
    }
    let bytes = w.into_inner().map_err(|e| anyhow!("CSV: {e}"))?;
    Ok(String::from_utf8(bytes)?)
}

fn rows_csv(rows: &[Row]) -> Result<String> {
    to_csv(rows.iter().map(|r| RowRecord {
        job: &r.job,
        samples: r.particles,
        coherence_length: r.coherence_length,
        bins: r.bins,
        bin_width_nm: r.bin_width,
        density_l1: r.density.l1,
        pair_density_l1: r.pair.map(|p| p.l1),
        transmitted_norm_mc: r.transmitted_mc.map(|t| t.0),
        transmitted_norm_ref: r.transmitted_ref,
        expected_noise_l1: r.density.expected_noise,
        wall_s: r.wall_s,
        settings: &r.extra,
        density_l1_time_fs: r.density.time,
        pair_expected_noise_l1: r.pair.map(|p| p.expected_noise),
        transmitted_norm_mc_error: r.transmitted_mc.map(|t| t.1),
        peak_samples: r.peak_particles,
    }))
}

fn fits_csv(fits: &[Fit]) -> Result<String> {
    to_csv(fits.iter().map(|f| FitRecord {
        job: &f.job,
        coherence_length: f.coherence_length,
        settings: &f.extra,
        density_floor: f.density.map(|d| d.0),
        density_c: f.density.map(|d| d.1),
        pair_density_floor: f.pair.map(|d| d.0),
        pair_density_c: f.pair.map(|d| d.1),
        transmitted_bias: f.transmitted_bias.map(|d| d.0),
        transmitted_bias_error: f.transmitted_bias.map(|d| d.1),
    }))
}

fn fits_text(fits: &[Fit]) -> String {
    let mut s =
        String::from("\nfloors from L1² = floor² + c²/N (relative L1 on the job's bins):\n");
    for f in fits {
        let _ = write!(s, "{} ({}):", f.job, f.label);
        if let Some((fl, c)) = f.density {
            let _ = write!(s, " density floor {fl:.4}, c {c:.2};");
        }
        if let Some((fl, c)) = f.pair {
            let _ = write!(s, " pair floor {fl:.4}, c {c:.2};");
        }
        if let Some((b, e)) = f.transmitted_bias {
            let _ = write!(s, " transmitted bias {b:+.4} ± {e:.4}");
        }
        s.push('\n');
    }
    s
}

/// L1 against particles, one panel per job; solid: density, dashed: pair density; thin
/// grey lines: the fit floor² + c²/N, its 1/sqrt(N) part and its floor.
fn plot(path: &Path, rows: &[Row], fits: &[Fit]) -> Result<()> {
    ensure_font()?;
    let mut jobs: Vec<&str> = Vec::new();
    for r in rows {
        if !jobs.contains(&r.job.as_str()) {
            jobs.push(&r.job);
        }
    }
    let size = (560 * jobs.len().max(1) as u32, 620);
    render(path, size, |root: &Area| {
        let panels = root.split_evenly((1, jobs.len().max(1)));
        for (job, area) in jobs.iter().zip(panels.iter()) {
            panel(area, job, rows, fits)?;
        }
        Ok(())
    })
}

fn panel(area: &Area, job: &str, rows: &[Row], fits: &[Fit]) -> Result<()> {
    let mine: Vec<&Row> = rows.iter().filter(|r| r.job == job).collect();
    let n_lo = mine
        .iter()
        .map(|r| r.particles as f64)
        .fold(f64::INFINITY, f64::min)
        / 1.5;
    let n_hi = mine.iter().map(|r| r.particles as f64).fold(0.0, f64::max) * 1.5;
    let mut y_lo = f64::INFINITY;
    let mut y_hi: f64 = 0.0;
    for r in &mine {
        for v in [Some(r.density.l1), r.pair.map(|p| p.l1)]
            .into_iter()
            .flatten()
        {
            y_lo = y_lo.min(v);
            y_hi = y_hi.max(v);
        }
    }
    for f in fits.iter().filter(|f| f.job == job) {
        for (fl, _) in [f.density, f.pair].into_iter().flatten() {
            if fl > 0.0 {
                y_lo = y_lo.min(fl);
            }
        }
    }
    let (y_lo, y_hi) = (y_lo / 1.6, y_hi * 1.6);
    let bin = mine.first().map_or(f64::NAN, |r| r.bin_width);
    let title = format!("{job} ({bin} nm bins)");
    let area = area.titled(&title, (FONT_NAME, TITLE_PX))?;
    let mut chart = ChartBuilder::on(&area)
        .margin(12)
        .margin_right(24)
        .x_label_area_size(50)
        .y_label_area_size(70)
        .build_cartesian_2d((n_lo..n_hi).log_scale(), (y_lo..y_hi).log_scale())?;
    chart
        .configure_mesh()
        .light_line_style(RGBColor(235, 235, 235))
        .bold_line_style(RGBColor(215, 215, 215))
        .x_desc("initial samples N")
        .y_desc("relative L1 vs reference")
        .axis_desc_style((FONT_NAME, LABEL_PX))
        .label_style((FONT_NAME, TICK_PX))
        .x_label_formatter(&|v| format!("{v:.0e}"))
        .y_label_formatter(&|v| format!("{v:.2e}"))
        .draw()?;
    let grey = RGBColor(120, 120, 120);
    for (k, f) in fits.iter().filter(|f| f.job == job).enumerate() {
        let (r, g, b) = colormap::line(k);
        let colour = RGBColor(r, g, b);
        let sel: Vec<&&Row> = mine
            .iter()
            .filter(|r| r.label == f.label && r.extra == f.extra)
            .collect();
        let grid: Vec<f64> = (0..=40)
            .map(|i| n_lo * (n_hi / n_lo).powf(i as f64 / 40.0))
            .collect();
        for (which, fitted) in [(0, f.density), (1, f.pair)] {
            let pts: Vec<(f64, f64)> = sel
                .iter()
                .filter_map(|r| {
                    let v = if which == 0 {
                        Some(r.density.l1)
                    } else {
                        r.pair.map(|p| p.l1)
                    };
                    v.map(|v| (r.particles as f64, v))
                })
                .collect();
            if pts.is_empty() {
                continue;
            }
            let style = colour.stroke_width(2);
            let what = if which == 0 {
                names::DENSITY.name
            } else {
                "pair"
            };
            let label = format!("{what}, {}", f.label);
            if which == 0 {
                chart
                    .draw_series(LineSeries::new(pts.clone(), style))?
                    .label(label)
                    .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], style));
                chart.draw_series(pts.iter().map(|&p| Circle::new(p, 4, colour.filled())))?;
            } else {
                chart
                    .draw_series(DashedLineSeries::new(pts.clone(), 7, 4, style))?
                    .label(label)
                    .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 8, y)], style));
                chart.draw_series(
                    pts.iter()
                        .map(|&p| TriangleMarker::new(p, 5, colour.filled())),
                )?;
            }
            if let Some((fl, c)) = fitted {
                let thin = colour.mix(0.6).stroke_width(1);
                let curve: Vec<(f64, f64)> = grid
                    .iter()
                    .map(|&n| (n, (fl * fl + c * c / n).sqrt()))
                    .collect();
                chart.draw_series(LineSeries::new(curve, thin))?;
                let noise: Vec<(f64, f64)> = grid
                    .iter()
                    .map(|&n| (n, c / n.sqrt()))
                    .filter(|p| p.1 >= y_lo && p.1 <= y_hi)
                    .collect();
                chart.draw_series(DashedLineSeries::new(noise, 3, 4, grey.stroke_width(1)))?;
                if fl > 0.0 {
                    chart.draw_series(DashedLineSeries::new(
                        vec![(n_lo, fl), (n_hi, fl)],
                        10,
                        6,
                        thin,
                    ))?;
                }
            }
        }
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::LowerLeft)
        .background_style(WHITE.mix(0.85))
        .border_style(RGBColor(150, 150, 150))
        .label_font((FONT_NAME, TICK_PX - 2))
        .draw()?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The free-text `settings` column is quoted when it holds a comma or a quote, empty
    /// cells stand for "not applicable", and every record has the header's columns.
    #[test]
    fn csv_quotes_free_text_and_leaves_missing_values_empty() {
        let d = Distance {
            l1: 0.02,
            time: 35.0,
            expected_noise: 0.015,
        };
        let settings = "annihilation.coordinates=\"relative\", numerics.rolloff=10";
        let row = Row {
            job: "fermion-pair".into(),
            setting: 0,
            label: String::new(),
            extra: settings.into(),
            particles: 1000,
            coherence_length: 120.0,
            bins: 100,
            bin_width: 2.0,
            density: d,
            pair: None,
            transmitted_mc: Some((0.5, 0.01)),
            transmitted_ref: None,
            peak_particles: 1500.0,
            wall_s: 1.5,
        };
        let text = rows_csv(&[row]).unwrap();
        let mut r = csv::Reader::from_reader(text.as_bytes());
        let h = r.headers().unwrap().clone();
        assert_eq!(h.len(), 16);
        assert_eq!(&h[5], "density_L1");
        let rec = r.records().next().unwrap().unwrap();
        assert_eq!(rec.len(), 16);
        let col = |name: &str| rec[h.iter().position(|c| c == name).unwrap()].to_string();
        assert_eq!(col("settings"), settings);
        assert_eq!(col("pair_density_L1"), "");
        assert_eq!(col("transmitted_norm_mc").parse::<f64>().unwrap(), 0.5);
        assert!(
            text.contains("\"annihilation.coordinates=\"\"relative\"\", numerics.rolloff=10\"")
        );
    }

    #[test]
    fn floor_fit_recovers_a_known_floor_and_noise_amplitude() {
        let pts: Vec<(f64, f64)> = [3e4, 1e5, 3e5, 1e6]
            .iter()
            .map(|&n: &f64| (n, (0.02f64.powi(2) + 5.0f64.powi(2) / n).sqrt()))
            .collect();
        let (fl, c) = fit_floor(&pts).unwrap();
        assert!(
            (fl - 0.02).abs() < 1e-9 && (c - 5.0).abs() < 1e-9,
            "{fl} {c}"
        );
    }

    #[test]
    fn pure_noise_has_no_floor() {
        let pts: Vec<(f64, f64)> = [1e5, 1e6]
            .iter()
            .map(|&n: &f64| (n, 3.0 / n.sqrt()))
            .collect();
        let (fl, c) = fit_floor(&pts).unwrap();
        assert!(fl < 1e-9 && (c - 3.0).abs() < 1e-9, "{fl} {c}");
    }
}
