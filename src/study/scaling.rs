//! Strong and weak scaling series: launch `signfold run` under the MPI launcher at several
//! rank counts, read each run's `/run` figures and write one CSV row and one picture per
//! series, plus a description of the machine.
//!
//! Strong scaling keeps the total particle count fixed; weak scaling keeps the count per
//! rank fixed. A third series compares one rank with two threads against two ranks with
//! one thread at the strong-scaling count. Efficiencies are relative to the smallest rank
//! count of the series (normally 1): strong T_b·P_b/(P·T_P), weak T_b/T_P, threads
//! T(1×1)/(ranks·threads·T). T is the longest `wall_seconds` over the ranks, the run loop
//! from the start of sampling to the last output; `launch_s` adds process start-up, job
//! set-up and MPI start-up as the driver saw them.

use crate::engine::timers::PHASES;
use crate::io::names;
use crate::io::results::ResultFile;
use crate::viz::chart::{Curve, FONT_NAME, TITLE_PX, draw_curves, ensure_font, render};
use crate::viz::colormap;
use anyhow::{Context, Result, bail};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

/// Which series to run.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum Mode {
    Strong,
    Weak,
    /// 1 rank × 1 thread, 1 rank × 2 threads, 2 ranks × 1 thread.
    Threads,
    /// Strong and weak.
    StrongWeak,
    /// The old spelling of `strong-weak` (format version 1), read with a warning.
    #[value(hide = true)]
    Both,
    /// Strong, weak and threads.
    All,
}

impl Mode {
    fn series(self) -> Vec<Series> {
        match self {
            Mode::Strong => vec![Series::Strong],
            Mode::Weak => vec![Series::Weak],
            Mode::Threads => vec![Series::Threads],
            Mode::StrongWeak | Mode::Both => vec![Series::Strong, Series::Weak],
            Mode::All => vec![Series::Strong, Series::Weak, Series::Threads],
        }
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Series {
    Strong,
    Weak,
    Threads,
}

impl Series {
    fn name(self) -> &'static str {
        match self {
            Series::Strong => "strong",
            Series::Weak => "weak",
            Series::Threads => "threads",
        }
    }
}

/// What the driver needs (the arguments of `signfold scaling`).
#[derive(clap::Args, Clone, Debug)]
pub struct Options {
    /// The job file.
    pub job: PathBuf,
    /// Comma-separated rank counts, e.g. 1,2,4,8.
    #[arg(long, value_delimiter = ',', required = true)]
    pub ranks: Vec<usize>,
    /// Strong and threads: total Monte Carlo samples; weak: samples per rank
    /// (default: the job's count; with --quick 20000).
    #[arg(long)]
    pub samples: Option<u64>,
    /// The old spelling of --samples, read with a warning.
    #[arg(long, hide = true, conflicts_with = "samples")]
    pub particles: Option<u64>,
    #[arg(long, value_enum, default_value = "all")]
    pub mode: Mode,
    /// Short series: at most 20 synchronisation steps, 20000 samples by default.
    #[arg(long)]
    pub quick: bool,
    /// Directory for the CSV files, pictures and machine.txt.
    #[arg(long, default_value = "scaling-results")]
    pub out: PathBuf,
    /// Override a job key in every run (repeatable), e.g. --set numerics.end_time=20
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// MPI launcher and its options; `-n P PROGRAM run …` follows.
    #[arg(long, default_value = "mpirun --oversubscribe --bind-to none")]
    pub launcher: String,
    /// Runs per point; the shortest is reported.
    #[arg(long, default_value_t = 1)]
    pub repeat: usize,
    /// Keep each run's directory under OUT/runs.
    #[arg(long)]
    pub keep_runs: bool,
}

/// Sample count of quick series unless --samples is given.
pub const QUICK_SAMPLES: u64 = 20_000;
/// Synchronisation steps of a quick run at most.
pub const QUICK_STEPS: f64 = 20.0;

/// One measured point.
#[derive(Clone, Debug)]
pub struct Row {
    pub mode: String,
    pub ranks: usize,
    pub threads: usize,
    pub samples_initial: f64,
    pub samples_final: f64,
    pub annihilations: usize,
    /// Longest `wall_seconds` over the ranks.
    pub wall_s: f64,
    /// The launcher's whole run as the driver timed it.
    pub launch_s: f64,
    /// Longest time over the ranks per phase, in the order of [`PHASES`].
    pub phase_s: Vec<f64>,
    /// max/mean over ranks of the advance time.
    pub imbalance_advance: f64,
    /// Mean over ranks and annihilations of the bytes one rank sent in one annihilation.
    pub bytes_sent_per_rank: f64,
    /// Mean over ranks and annihilations of the messages one rank sent to other ranks.
    pub messages_per_rank: f64,
    /// Mean over ranks and annihilations of the occupied cells on one rank.
    pub occupied_cells_per_rank: f64,
    pub efficiency: f64,
}

/// CSV header (the column order of [`Row::fields`]). The phase columns follow the
/// engine's phase list, so rows are written as records of text fields through the csv
/// crate (which quotes where needed) rather than through a fixed serde struct.
pub fn header() -> Vec<String> {
    let mut h: Vec<String> = [
        "mode",
        "ranks",
        "threads",
        "samples_initial",
        "samples_final",
        "annihilations",
        "wall_s",
        "launch_s",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    h.extend(PHASES.iter().map(|p| format!("{p}_s")));
    h.extend(
        [
            "imbalance_advance",
            "bytes_sent_per_rank",
            "messages_per_rank",
            "occupied_cells_per_rank",
            "efficiency",
        ]
        .iter()
        .map(|s| s.to_string()),
    );
    h
}

impl Row {
    /// The row's fields, in the order of [`header`].
    pub fn fields(&self) -> Vec<String> {
        let mut f = vec![
            self.mode.clone(),
            self.ranks.to_string(),
            self.threads.to_string(),
            self.samples_initial.to_string(),
            self.samples_final.to_string(),
            self.annihilations.to_string(),
            format!("{:.6}", self.wall_s),
            format!("{:.6}", self.launch_s),
        ];
        f.extend(self.phase_s.iter().map(|v| format!("{v:.6}")));
        f.extend([
            format!("{:.4}", self.imbalance_advance),
            format!("{:.1}", self.bytes_sent_per_rank),
            format!("{:.2}", self.messages_per_rank),
            format!("{:.1}", self.occupied_cells_per_rank),
            format!("{:.4}", self.efficiency),
        ]);
        f
    }
}

/// The CSV text of a series: the header, then one record per row.
pub fn csv_text(rows: &[Row]) -> Result<String> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(header())?;
    for r in rows {
        w.write_record(r.fields())?;
    }
    let bytes = w.into_inner().map_err(|e| anyhow::anyhow!("CSV: {e}"))?;
    Ok(String::from_utf8(bytes)?)
}

/// The launcher command split like a POSIX shell would (quotes and backslashes), so that
/// an option with spaces can be passed: `--launcher "mpirun --mca btl 'self,tcp'"`.
pub fn launcher_words(launcher: &str) -> Result<Vec<String>> {
    let words = shell_words::split(launcher)
        .map_err(|e| anyhow::anyhow!("--launcher {launcher:?}: {e}"))?;
    if words.is_empty() {
        bail!("--launcher is empty");
    }
    Ok(words)
}

/// The `/run` figures of one result file as a row (efficiency 0 until the series is done).
pub fn row_from(file: &ResultFile, mode: &str, launch_s: f64) -> Result<Row> {
    let get = |name: &str| -> Result<&Vec<f64>> {
        file.run
            .get(name)
            .map(|(_, v)| v)
            .with_context(|| format!("/run/{name} is missing"))
    };
    let ranks = get("ranks")?.first().copied().unwrap_or(0.0) as usize;
    let threads = get("threads")?.first().copied().unwrap_or(0.0) as usize;
    if ranks == 0 {
        bail!("/run/ranks is empty or zero");
    }
    let max = |v: &[f64]| v.iter().copied().fold(0.0, f64::max);
    let mean = |v: &[f64]| {
        if v.is_empty() {
            0.0
        } else {
            v.iter().sum::<f64>() / v.len() as f64
        }
    };
    let mut phase_s = Vec::new();
    for p in PHASES {
        phase_s.push(max(get(&format!("seconds_{p}"))?));
    }
    let advance = get("seconds_advance")?;
    let imbalance_advance = if mean(advance) > 0.0 {
        max(advance) / mean(advance)
    } else {
        1.0
    };
    let bytes = get("bytes_sent")?;
    let cells = get("occupied_cells")?;
    let counts = file
        .series
        .get(names::SAMPLES.name)
        .map(|s| s.data.clone())
        .unwrap_or_default();
    Ok(Row {
        mode: mode.to_string(),
        ranks,
        threads,
        samples_initial: counts.first().copied().unwrap_or(f64::NAN),
        samples_final: counts.last().copied().unwrap_or(f64::NAN),
        annihilations: bytes.len() / ranks,
        wall_s: max(get("wall_seconds")?),
        launch_s,
        phase_s,
        imbalance_advance,
        bytes_sent_per_rank: mean(bytes),
        messages_per_rank: mean(get("messages_sent")?),
        occupied_cells_per_rank: mean(cells),
        efficiency: 0.0,
    })
}

/// Fill in the efficiencies of one series (see the module comment).
pub fn set_efficiency(series: &str, rows: &mut [Row]) {
    let Some(base) = rows
        .iter()
        .min_by_key(|r| (r.ranks * r.threads, r.ranks))
        .cloned()
    else {
        return;
    };
    let base_work = (base.ranks * base.threads) as f64 * base.wall_s;
    for r in rows.iter_mut() {
        let cores = (r.ranks * r.threads) as f64;
        r.efficiency = match series {
            "weak" => base.wall_s / r.wall_s,
            _ => base_work / (cores * r.wall_s),
        };
    }
}

/// Run the series and write the CSV files, pictures and `machine.txt`; returns the paths.
pub fn drive(opts: &Options, say: &mut dyn FnMut(String)) -> Result<Vec<PathBuf>> {
    if opts.ranks.is_empty() || opts.ranks.contains(&0) {
        bail!("--ranks: give positive rank counts, e.g. --ranks 1,2,4");
    }
    if opts.repeat == 0 {
        bail!("--repeat must be at least 1");
    }
    let loaded = crate::physics::defaults::load(&opts.job, &opts.set)?;
    let numerics = &loaded.job.numerics;
    let mut set = opts.set.clone();
    if opts.quick {
        let end = numerics.end_time.min(QUICK_STEPS * numerics.sync_step);
        set.push(format!("numerics.end_time={end}"));
    }
    let particles = opts.samples.or(opts.particles).unwrap_or(if opts.quick {
        QUICK_SAMPLES
    } else {
        numerics.samples
    });
    let stem = opts
        .job
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "job".into());
    std::fs::create_dir_all(&opts.out)
        .with_context(|| format!("cannot create {}", opts.out.display()))?;
    let runs_dir = opts.out.join("runs");
    let mut written = Vec::new();
    let machine = opts.out.join("machine.txt");
    std::fs::write(&machine, machine_text(&opts.launcher))
        .with_context(|| format!("cannot write {}", machine.display()))?;
    written.push(machine);
    let exe = std::env::current_exe().context("cannot find the signfold executable")?;
    for series in opts.mode.series() {
        let points: Vec<(usize, usize, u64)> = match series {
            Series::Strong => opts.ranks.iter().map(|&p| (p, 1, particles)).collect(),
            Series::Weak => opts
                .ranks
                .iter()
                .map(|&p| (p, 1, particles * p as u64))
                .collect(),
            Series::Threads => vec![(1, 1, particles), (1, 2, particles), (2, 1, particles)],
        };
        let mut rows = Vec::new();
        for (ranks, threads, n) in points {
            let mut best: Option<Row> = None;
            for rep in 0..opts.repeat {
                let dir = runs_dir.join(format!(
                    "{stem}-{}-p{ranks}-t{threads}-r{rep}",
                    series.name()
                ));
                let row = measure(&exe, opts, &set, series.name(), &dir, ranks, threads, n)?;
                say(format!(
                    "signfold scaling: {} {} rank(s) × {} thread(s), {} samples: {:.3} s",
                    series.name(),
                    ranks,
                    threads,
                    row.samples_initial,
                    row.wall_s
                ));
                if !opts.keep_runs {
                    let _ = std::fs::remove_dir_all(&dir);
                }
                if best.as_ref().is_none_or(|b| row.wall_s < b.wall_s) {
                    best = Some(row);
                }
            }
            rows.extend(best);
        }
        set_efficiency(series.name(), &mut rows);
        let csv = opts.out.join(format!("{stem}-{}.csv", series.name()));
        let text = csv_text(&rows)?;
        std::fs::write(&csv, text).with_context(|| format!("cannot write {}", csv.display()))?;
        written.push(csv);
        let png = opts.out.join(format!("{stem}-{}.png", series.name()));
        scaling_picture(&png, &format!("{stem}: {} scaling", series.name()), &rows)?;
        written.push(png);
        for r in &rows {
            say(format!(
                "signfold scaling: {:<7} P={} T={} wall {:>9.3} s  efficiency {:.3}",
                r.mode, r.ranks, r.threads, r.wall_s, r.efficiency
            ));
        }
    }
    if !opts.keep_runs {
        let _ = std::fs::remove_dir(&runs_dir);
    }
    Ok(written)
}

static STARTING_ENVIRONMENT: std::sync::OnceLock<Vec<(std::ffi::OsString, std::ffi::OsString)>> =
    std::sync::OnceLock::new();

/// Remember the environment before MPI is initialised, for the launches of [`drive`].
pub fn save_starting_environment() {
    let _ = STARTING_ENVIRONMENT.set(std::env::vars_os().collect());
}

/// One launch of `signfold run` and its row.
#[allow(clippy::too_many_arguments)]
fn measure(
    exe: &Path,
    opts: &Options,
    set: &[String],
    series: &str,
    dir: &Path,
    ranks: usize,
    threads: usize,
    particles: u64,
) -> Result<Row> {
    let words = launcher_words(&opts.launcher)?;
    let program = &words[0];
    let mut cmd = Command::new(program);
    cmd.args(&words[1..])
        .args(["-n", &ranks.to_string()])
        .arg(exe)
        .arg("run")
        .arg(&opts.job)
        .arg("--out")
        .arg(dir)
        .args(["--samples", &particles.to_string()])
        .args(["--threads", &threads.to_string()])
        .arg("--force");
    for s in set {
        cmd.args(["--set", s]);
    }
    // This process is an MPI singleton, and MPI start-up added variables to its environment
    // that the child launcher would take for its own: the child gets the environment this
    // process started with.
    if let Some(env) = STARTING_ENVIRONMENT.get() {
        cmd.env_clear().envs(env.iter().map(|(k, v)| (k, v)));
    }
    let t0 = Instant::now();
    let out = cmd
        .output()
        .with_context(|| format!("cannot start the launcher `{program}`"))?;
    let launch_s = t0.elapsed().as_secs_f64();
    if !out.status.success() {
        bail!(
            "{} run on {ranks} rank(s) failed ({}):\n{}{}",
            series,
            out.status,
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        );
    }
    let file = ResultFile::read(&dir.join(names::OBSERVABLES_FILE))?;
    let row = row_from(&file, series, launch_s)?;
    if row.ranks != ranks || row.threads != threads {
        bail!(
            "the launcher ran {} rank(s) × {} thread(s), not {ranks} × {threads}: check --launcher",
            row.ranks,
            row.threads
        );
    }
    Ok(row)
}

/// CPU, memory, MPI, HDF5 and compiler versions of this machine, as plain text.
pub fn machine_text(launcher: &str) -> String {
    let cpuinfo = std::fs::read_to_string("/proc/cpuinfo").unwrap_or_default();
    let field = |name: &str| {
        cpuinfo
            .lines()
            .find(|l| l.starts_with(name))
            .and_then(|l| l.split(':').nth(1))
            .map(|v| v.trim().to_string())
            .unwrap_or_else(|| "unknown".into())
    };
    let logical = cpuinfo
        .lines()
        .filter(|l| l.starts_with("processor"))
        .count();
    let mut physical: Vec<(String, String)> = Vec::new();
    let mut phys_id = String::new();
    for l in cpuinfo.lines() {
        let v = l.split(':').nth(1).unwrap_or("").trim().to_string();
        if l.starts_with("physical id") {
            phys_id = v;
        } else if l.starts_with("core id") {
            physical.push((phys_id.clone(), v));
        }
    }
    physical.sort();
    physical.dedup();
    let meminfo = std::fs::read_to_string("/proc/meminfo").unwrap_or_default();
    let mem = meminfo
        .lines()
        .find(|l| l.starts_with("MemTotal"))
        .and_then(|l| l.split(':').nth(1))
        .map(|v| v.trim().to_string())
        .unwrap_or_else(|| "unknown".into());
    let loadavg = std::fs::read_to_string("/proc/loadavg").unwrap_or_default();
    let usable = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(0);
    let words = launcher_words(launcher).unwrap_or_default();
    let launcher_program = words.first().map_or("mpirun", String::as_str);
    let (a, b, c) = hdf5::library_version();
    let mut s = String::new();
    let _ = writeln!(s, "signfold {}", env!("CARGO_PKG_VERSION"));
    let _ = writeln!(s, "cpu model: {}", field("model name"));
    let _ = writeln!(
        s,
        "cores: {logical} logical, {} physical, {usable} usable by this process",
        physical.len().max(1)
    );
    let _ = writeln!(s, "memory: {mem}");
    let _ = writeln!(
        s,
        "load average at start (1, 5, 15 min): {}",
        loadavg.trim()
    );
    let _ = writeln!(s, "hdf5 library linked: {a}.{b}.{c}");
    let _ = writeln!(
        s,
        "hdf5 (h5pcc/h5cc -showconfig): {}",
        first_match(&["h5pcc", "h5cc"], &["-showconfig"], "HDF5 Version")
    );
    let _ = writeln!(
        s,
        "hdf5 package (dpkg): {}",
        first_match(&["dpkg"], &["-s", "libhdf5-openmpi-dev"], "Version")
    );
    let _ = writeln!(
        s,
        "{launcher_program} --version: {}",
        first_line(launcher_program, &["--version"])
    );
    let _ = writeln!(
        s,
        "rustc --version: {}",
        first_line("rustc", &["--version"])
    );
    s
}

fn command_text(program: &str, args: &[&str]) -> Option<String> {
    let out = Command::new(program).args(args).output().ok()?;
    let mut t = String::from_utf8_lossy(&out.stdout).into_owned();
    t.push_str(&String::from_utf8_lossy(&out.stderr));
    Some(t)
}

fn first_line(program: &str, args: &[&str]) -> String {
    command_text(program, args)
        .and_then(|t| {
            t.lines()
                .find(|l| !l.trim().is_empty())
                .map(|l| l.trim().to_string())
        })
        .unwrap_or_else(|| "not available".into())
}

/// The value after `key:` in the first program's output that has it.
fn first_match(programs: &[&str], args: &[&str], key: &str) -> String {
    for p in programs {
        if let Some(t) = command_text(p, args)
            && let Some(l) = t.lines().find(|l| l.trim_start().starts_with(key))
        {
            let v = l.split_once(':').map(|x| x.1).unwrap_or(l).trim();
            return format!("{v} ({p})");
        }
    }
    "not available".into()
}

/// Size in pixels of a scaling picture.
pub const SCALING_SIZE: (u32, u32) = (960, 840);

/// A scaling series: parallel efficiency (top) and the longest time over ranks per phase
/// (bottom) against the cores used (ranks × threads). Rows that use one thread per rank
/// form one curve; rows with one rank and several threads another.
pub fn scaling_picture(path: &Path, title: &str, rows: &[Row]) -> Result<()> {
    ensure_font()?;
    let cores = |r: &Row| (r.ranks * r.threads) as f64;
    let by_ranks: Vec<&Row> = rows.iter().filter(|r| r.threads == 1).collect();
    let by_threads: Vec<&Row> = rows.iter().filter(|r| r.ranks == 1).collect();
    let mut eff = vec![Curve {
        label: "P ranks × 1 thread".into(),
        xs: by_ranks.iter().map(|r| cores(r)).collect(),
        ys: by_ranks.iter().map(|r| r.efficiency).collect(),
        err: None,
        colour: colormap::line(0),
        dashed: false,
    }];
    if rows.iter().any(|r| r.threads > 1) {
        eff.push(Curve {
            label: "1 rank × T threads".into(),
            xs: by_threads.iter().map(|r| cores(r)).collect(),
            ys: by_threads.iter().map(|r| r.efficiency).collect(),
            err: None,
            colour: colormap::line(1),
            dashed: false,
        });
    }
    let (lo, hi) = rows
        .iter()
        .map(cores)
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), c| {
            (a.min(c), b.max(c))
        });
    eff.push(Curve {
        label: "ideal".into(),
        xs: vec![lo, hi],
        ys: vec![1.0, 1.0],
        err: None,
        colour: (120, 120, 120),
        dashed: true,
    });
    let mut phases = vec![Curve {
        label: "wall".into(),
        xs: by_ranks.iter().map(|r| cores(r)).collect(),
        ys: by_ranks.iter().map(|r| r.wall_s).collect(),
        err: None,
        colour: (0, 0, 0),
        dashed: true,
    }];
    for (i, name) in PHASES.iter().enumerate() {
        if by_ranks.iter().all(|r| r.phase_s[i] == 0.0) {
            continue;
        }
        phases.push(Curve {
            label: (*name).into(),
            xs: by_ranks.iter().map(|r| cores(r)).collect(),
            ys: by_ranks.iter().map(|r| r.phase_s[i]).collect(),
            err: None,
            colour: colormap::line(phases.len() - 1),
            dashed: phases.len() > 6,
        });
    }
    render(path, SCALING_SIZE, |root| {
        let area = root.titled(title, (FONT_NAME, TITLE_PX))?;
        let panels = area.split_evenly((2, 1));
        draw_curves(
            &panels[0],
            "cores (ranks × threads)",
            "parallel efficiency",
            &eff,
        )?;
        draw_curves(
            &panels[1],
            "cores (ranks × threads)",
            "longest time over ranks (s)",
            &phases,
        )?;
        Ok(())
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(ranks: usize, threads: usize, wall_s: f64) -> Row {
        Row {
            mode: "x".into(),
            ranks,
            threads,
            samples_initial: 1.0,
            samples_final: 1.0,
            annihilations: 0,
            wall_s,
            launch_s: wall_s,
            phase_s: vec![0.0; PHASES.len()],
            imbalance_advance: 1.0,
            bytes_sent_per_rank: 0.0,
            messages_per_rank: 0.0,
            occupied_cells_per_rank: 0.0,
            efficiency: 0.0,
        }
    }

    #[test]
    fn strong_efficiency_is_speed_up_over_ranks() {
        let mut rows = vec![row(1, 1, 10.0), row(2, 1, 5.0), row(4, 1, 4.0)];
        set_efficiency("strong", &mut rows);
        let e: Vec<f64> = rows.iter().map(|r| r.efficiency).collect();
        assert_eq!(e, vec![1.0, 1.0, 0.625]);
    }

    #[test]
    fn weak_efficiency_is_time_ratio() {
        let mut rows = vec![row(2, 1, 8.0), row(4, 1, 10.0)];
        set_efficiency("weak", &mut rows);
        assert_eq!(rows[0].efficiency, 1.0);
        assert_eq!(rows[1].efficiency, 0.8);
    }

    #[test]
    fn threads_efficiency_counts_cores() {
        let mut rows = vec![row(1, 1, 6.0), row(1, 2, 4.0), row(2, 1, 3.0)];
        set_efficiency("threads", &mut rows);
        assert_eq!(rows[1].efficiency, 0.75);
        assert_eq!(rows[2].efficiency, 1.0);
    }

    #[test]
    fn header_and_row_have_the_same_columns() {
        let text = csv_text(&[row(1, 1, 1.0), row(2, 1, 0.6)]).unwrap();
        let mut r = csv::Reader::from_reader(text.as_bytes());
        let n = r.headers().unwrap().len();
        assert_eq!(n, header().len());
        for rec in r.records() {
            assert_eq!(rec.unwrap().len(), n);
        }
    }

    #[test]
    fn a_mode_with_a_comma_is_quoted() {
        let mut odd = row(1, 1, 1.0);
        odd.mode = "strong, \"re-run\"".into();
        let text = csv_text(&[odd]).unwrap();
        let mut r = csv::Reader::from_reader(text.as_bytes());
        let rec = r.records().next().unwrap().unwrap();
        assert_eq!(&rec[0], "strong, \"re-run\"");
        assert_eq!(rec.len(), header().len());
    }

    #[test]
    fn launcher_is_split_like_a_shell() {
        assert_eq!(
            launcher_words("mpirun --mca btl 'self,tcp' -x \"A B\"").unwrap(),
            vec!["mpirun", "--mca", "btl", "self,tcp", "-x", "A B"]
        );
        assert!(
            launcher_words("   ")
                .unwrap_err()
                .to_string()
                .contains("empty")
        );
        let e = launcher_words("mpirun 'open").unwrap_err().to_string();
        assert!(e.contains("--launcher"), "{e}");
    }
}
