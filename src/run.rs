//! The run: initial particles, then (advance → annihilate → observe → write)* to the end.

use crate::advance;
use crate::annihilate::{self, CellMesh};
use crate::checkpoint;
use crate::comm::Comm;
use crate::initial;
use crate::job::LoadedJob;
use crate::observe::{self, Counts, Departed};
use crate::particles::Store;
use crate::results::{self, ResultFile};
use crate::setup::Setup;
use anyhow::{Result, bail};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// What a run needs besides the job.
pub struct RunOptions {
    pub out: PathBuf,
    pub force: bool,
    /// Stop with a checkpoint at the first synchronisation time ≥ this (fs).
    pub until: Option<f64>,
    /// Stop with a checkpoint before this much wall time has passed.
    pub walltime: Option<std::time::Duration>,
}

/// The particles of this rank and the global bookkeeping of the run.
pub struct State {
    pub step: u64,
    pub store: Store,
    /// Initial net sign per group (the estimator's normalisation).
    pub s0: Vec<i64>,
    pub gone: Departed,
    pub initial_count: u64,
    pub annihilations: u64,
}

/// Sample the initial particles: D = target draws split over ranks by contiguous ranges.
pub fn initial_state(setup: &Setup, comm: &dyn Comm) -> Result<(State, InitialReport)> {
    let w = setup.initial_state()?;
    let d = setup.target;
    let (r, p) = (comm.rank() as u64, comm.size() as u64);
    let (from, to) = (d * r / p, d * (r + 1) / p);
    let sums = initial::sum_draws(&w, setup.seed, from, to);
    let mut s = [sums.abs, sums.net];
    comm.sum_i128(&mut s);
    let admit = Inside(setup);
    let plan = initial::EmitPlan {
        seed: setup.seed,
        abs_sum: s[0],
        target: setup.target,
        groups: setup.groups,
    };
    let (store, dropped) = initial::emit(&w, &plan, from, to, &admit);
    let g = setup.groups as usize;
    let mut s0 = vec![0i64; g];
    for (id, &sign) in store.id.iter().zip(&store.sign) {
        s0[crate::rng::group_of(*id) as usize] += sign as i64;
    }
    let mut counts: Vec<i64> = s0.clone();
    counts.push(store.len() as i64);
    counts.push(dropped as i64);
    comm.sum_i64(&mut counts);
    let (dropped, total) = (counts.pop().unwrap_or(0), counts.pop().unwrap_or(0));
    let s0 = counts;
    if let Some(gr) = s0.iter().position(|&v| v <= 0) {
        bail!(
            "error group {gr} has no positive net norm at t = 0 ({} net particles): raise numerics.particles or lower numerics.groups",
            s0[gr]
        );
    }
    let report = InitialReport {
        abs_over_net: s[0] as f64 / s[1] as f64,
        particles: total as u64,
        dropped: dropped as u64,
    };
    let state = State {
        step: 0,
        store,
        s0,
        gone: Departed {
            left: vec![0; g],
            right: vec![0; g],
            momentum: vec![0; g],
        },
        initial_count: total as u64,
        annihilations: 0,
    };
    Ok((state, report))
}

/// Facts about the initial sampling.
pub struct InitialReport {
    /// ∫|W| / ∫W estimated from the draws (particles per unit of net norm).
    pub abs_over_net: f64,
    pub particles: u64,
    /// Emitted particles that fell outside the domain or momentum range (not kept).
    pub dropped: u64,
}

struct Inside<'a>(&'a Setup);

impl initial::Admit for Inside<'_> {
    fn admits(&self, x: &[f64], k: &[f64]) -> bool {
        let s = self.0;
        x.iter().all(|&v| v >= s.lo && v < s.hi) && k.iter().all(|&v| v.abs() <= s.k_max)
    }
}

/// Refuse to overwrite results unless forced; create the directory.
pub fn prepare_out(dir: &Path, force: bool) -> Result<()> {
    if dir.exists() && !dir.is_dir() {
        bail!("--out {}: exists and is not a directory", dir.display());
    }
    let obs = dir.join("observables.h5");
    if obs.exists() && !force {
        bail!(
            "--out {}: already holds results ({}); choose another directory or pass --force to overwrite them",
            dir.display(),
            obs.display()
        );
    }
    std::fs::create_dir_all(dir)
        .map_err(|e| anyhow::anyhow!("--out {}: cannot create directory: {e}", dir.display()))?;
    Ok(())
}

/// Make a local outcome collective: every rank fails when any rank failed (a failing rank
/// keeps its own message), so no rank is left waiting in a collective call.
pub fn agree(comm: &dyn Comm, r: Result<()>) -> Result<()> {
    let failed = comm.any(r.is_err());
    match r {
        Err(e) => Err(e),
        Ok(()) if failed => Err(crate::SilentError.into()),
        Ok(()) => Ok(()),
    }
}

fn hms(s: f64) -> String {
    let s = s.max(0.0).round() as u64;
    format!("{:02}:{:02}:{:02}", s / 3600, (s / 60) % 60, s % 60)
}

/// Phases of a run whose wall time is reported (seconds per rank).
pub const PHASES: [&str; 9] = [
    "initial",
    "advance",
    "binning",
    "reduction",
    "regeneration",
    "observe",
    "output",
    "checkpoint",
    "bookkeeping",
];

#[derive(Clone, Copy, Debug, Default)]
pub struct Timers {
    pub secs: [f64; PHASES.len()],
}

impl Timers {
    fn add(&mut self, phase: usize, since: Instant) {
        self.secs[phase] += since.elapsed().as_secs_f64();
    }
}

const P_INITIAL: usize = 0;
const P_ADVANCE: usize = 1;
const P_BINNING: usize = 2;
const P_REDUCTION: usize = 3;
const P_REGENERATION: usize = 4;
const P_OBSERVE: usize = 5;
const P_OUTPUT: usize = 6;
const P_CHECKPOINT: usize = 7;
const P_BOOKKEEPING: usize = 8;

/// Stop requests from SIGUSR1, SIGTERM and SIGINT (a second SIGINT ends the process).
static STOP: std::sync::OnceLock<std::sync::Arc<std::sync::atomic::AtomicBool>> =
    std::sync::OnceLock::new();

/// Install the stop signals. Called once by the command line.
pub fn install_signals() -> Result<()> {
    use signal_hook::consts::{SIGINT, SIGTERM, SIGUSR1};
    let flag = std::sync::Arc::new(std::sync::atomic::AtomicBool::new(false));
    signal_hook::flag::register_conditional_shutdown(SIGINT, 130, flag.clone())?;
    for sig in [SIGUSR1, SIGTERM, SIGINT] {
        signal_hook::flag::register(sig, flag.clone())?;
    }
    let _ = STOP.set(flag);
    Ok(())
}

/// Ignore SIGXFSZ, so that a file-size limit makes writes fail with an error instead of
/// killing the process. Called first thing, before MPI starts.
pub fn ignore_file_size_signal() {
    // SAFETY: setting a signal disposition to SIG_IGN has no other effect.
    unsafe {
        libc::signal(libc::SIGXFSZ, libc::SIG_IGN);
    }
}

fn stop_requested() -> bool {
    STOP.get()
        .is_some_and(|f| f.load(std::sync::atomic::Ordering::Relaxed))
}

/// Parse HH:MM or HH:MM:SS.
pub fn parse_walltime(s: &str) -> Result<std::time::Duration> {
    let parts: Vec<&str> = s.split(':').collect();
    let nums: Option<Vec<u64>> = parts.iter().map(|p| p.parse().ok()).collect();
    match (parts.len(), nums) {
        (2, Some(v)) => Ok(std::time::Duration::from_secs(v[0] * 3600 + v[1] * 60)),
        (3, Some(v)) => Ok(std::time::Duration::from_secs(
            v[0] * 3600 + v[1] * 60 + v[2],
        )),
        _ => bail!("--walltime {s}: expected HH:MM or HH:MM:SS"),
    }
}

/// How a run or resume ended.
#[derive(Debug, PartialEq, Eq, Clone, Copy)]
pub enum Ending {
    Finished,
    /// Stopped early with a checkpoint (--until, --walltime or a signal).
    Checkpointed,
}

/// Run the job from t = 0, writing `observables.h5` from rank 0.
pub fn run(
    loaded: &LoadedJob,
    setup: &Setup,
    opts: &RunOptions,
    comm: &dyn Comm,
) -> Result<Ending> {
    let started = Instant::now();
    let root = comm.is_root();
    let prepared = if root {
        prepare_out(&opts.out, opts.force)
    } else {
        Ok(())
    };
    agree(comm, prepared)?;
    if root {
        // Older checkpoints of a forced rerun must not be resumed by mistake.
        for step in checkpoint::list(&opts.out) {
            let _ = std::fs::remove_file(checkpoint::particle_path(&opts.out, step));
            let _ = std::fs::remove_file(checkpoint::results_path(&opts.out, step));
        }
        let _ = std::fs::write(opts.out.join("job.toml"), &loaded.text);
    }
    let mut timers = Timers::default();
    let t0 = Instant::now();
    let (st, init) = initial_state(setup, comm)?;
    timers.add(P_INITIAL, t0);
    if root {
        println!(
            "signfold: {} particles at t = 0 on {} rank(s) ({} threads each); ∫|W|/∫W = {:.3}{}",
            init.particles,
            comm.size(),
            rayon::current_num_threads(),
            init.abs_over_net,
            if init.dropped > 0 {
                format!(
                    "; {} outside domain or momentum range, not kept",
                    init.dropped
                )
            } else {
                String::new()
            }
        );
    }
    let out = ResultFile::new(
        results::OBSERVABLES_TYPE,
        &setup.text,
        setup.x_bins.centres(),
        setup.k_bins.centres(),
    );
    drive(loaded, setup, opts, comm, st, out, started, timers, true)
}

/// Continue the run in `dir` from its newest valid checkpoint, on any number of ranks.
pub fn resume(
    dir: &Path,
    until: Option<f64>,
    walltime: Option<std::time::Duration>,
    comm: &dyn Comm,
) -> Result<Ending> {
    let started = Instant::now();
    let mut timers = Timers::default();
    let t0 = Instant::now();
    let restored = checkpoint::newest_valid(dir, comm)?;
    let setup = Setup::new(&restored.job)?;
    if comm.is_root() {
        println!(
            "signfold: resuming {} at t = {} fs (step {}) on {} rank(s)",
            dir.display(),
            restored.time,
            restored.state.step,
            comm.size()
        );
    }
    // The results file goes back to exactly the state of the checkpoint.
    let r = if comm.is_root() {
        restored.results.write_atomic(&dir.join("observables.h5"))
    } else {
        Ok(())
    };
    agree(comm, r)?;
    timers.add(P_CHECKPOINT, t0);
    let opts = RunOptions {
        out: dir.to_path_buf(),
        force: true,
        until,
        walltime,
    };
    drive(
        &restored.job,
        &setup,
        &opts,
        comm,
        restored.state,
        restored.results,
        started,
        timers,
        false,
    )
}

#[allow(clippy::too_many_arguments)]
fn drive(
    loaded: &LoadedJob,
    setup: &Setup,
    opts: &RunOptions,
    comm: &dyn Comm,
    mut st: State,
    mut out: ResultFile,
    started: Instant,
    mut timers: Timers,
    fresh: bool,
) -> Result<Ending> {
    let root = comm.is_root();
    let mesh = CellMesh::new(setup)?;
    let obs_path = opts.out.join("observables.h5");
    let observe = |st: &State, out: &mut ResultFile, timers: &mut Timers| {
        let t0 = Instant::now();
        let c = Counts::collect(setup, &st.store).reduce(comm);
        if root {
            observe::frame(setup, out, st.step as f64 * setup.dt, &c, &st.s0, &st.gone);
        }
        timers.add(P_OBSERVE, t0);
    };
    if fresh {
        observe(&st, &mut out, &mut timers);
        let t0 = Instant::now();
        let written = if root {
            out.write_atomic(&obs_path)
        } else {
            Ok(())
        };
        agree(comm, written)?;
        timers.add(P_OUTPUT, t0);
    }
    let threshold = (setup.trigger * st.initial_count as f64) as u64;
    let stop_step = match opts.until {
        Some(t) => ((t / setup.dt) - 1e-9).ceil().max(0.0) as u64,
        None => setup.steps,
    }
    .min(setup.steps);
    let ck = &setup.job.checkpoint;
    let every_steps = ck.every.map(|t| ((t / setup.dt).round() as u64).max(1));
    let mut last_checkpoint = Instant::now();
    let mut longest_checkpoint: f64 = (setup.checkpoint_bytes() / 50e6 / comm.size() as f64) + 2.0;
    let mut longest_step: f64 = 0.0;
    let deadline = opts.walltime.map(|w| started + w);
    let mut last_print = Instant::now();
    let mut events = 0u64;
    let mut bytes_sent: Vec<f64> = Vec::new();
    let mut cells: Vec<f64> = Vec::new();
    let g = setup.groups as usize;
    while st.step < stop_step {
        let step_started = Instant::now();
        let t0 = Instant::now();
        let tally = advance::advance_in_place(setup, &mut st.store, st.step);
        st.step += 1;
        timers.add(P_ADVANCE, t0);
        let t0 = Instant::now();
        let mut t = [
            tally.absorbed_left.clone(),
            tally.absorbed_right.clone(),
            tally.lost_momentum.clone(),
            vec![tally.events as i64, st.store.len() as i64],
        ]
        .concat();
        comm.sum_i64(&mut t);
        for i in 0..g {
            st.gone.left[i] += t[i];
            st.gone.right[i] += t[g + i];
            st.gone.momentum[i] += t[2 * g + i];
        }
        events += t[3 * g] as u64;
        let count = t[3 * g + 1] as u64;
        timers.add(P_BOOKKEEPING, t0);
        if count > threshold {
            let t0 = Instant::now();
            let rep = annihilate::annihilate(setup, &mesh, &mut st.store, st.step, comm);
            timers.secs[P_BINNING] += rep.binning_s;
            timers.secs[P_REDUCTION] += rep.reduction_s;
            // The rest of the call (the global before/after counts, which also absorb the
            // ranks' imbalance in selection, and freeing the cell buffers) is bookkeeping.
            timers.secs[P_BOOKKEEPING] +=
                (t0.elapsed().as_secs_f64() - rep.binning_s - rep.reduction_s - rep.selection_s)
                    .max(0.0);
            let t0 = Instant::now();
            let moved = annihilate::rebalance(&mut st.store, comm);
            timers.secs[P_REGENERATION] += rep.selection_s + t0.elapsed().as_secs_f64();
            st.annihilations += 1;
            bytes_sent.push(8.0 * (rep.words_sent + moved) as f64);
            cells.push(rep.local_cells as f64);
            if root {
                let rec = &mut out.records;
                for (name, units, v) in [
                    ("annihilation_time", "fs", st.step as f64 * setup.dt),
                    ("annihilation_before", "1", rep.before as f64),
                    (
                        "annihilation_cancelled",
                        "1",
                        (rep.before - rep.after) as f64,
                    ),
                ] {
                    rec.entry(name.to_string())
                        .or_insert_with(|| (units.to_string(), Vec::new()))
                        .1
                        .push(v);
                }
            }
        }
        let t0 = Instant::now();
        let local_bytes = st.store.len() as f64 * setup.bytes_per_particle();
        if comm.any(local_bytes * 2.0 > setup.memory_limit) {
            let mut n = [st.store.len() as i64];
            comm.sum_i64(&mut n);
            bail!(
                "the particle count ({} on all ranks, {} here) would exceed the memory cap of {:.0} MiB per rank \
                 (numerics.memory_limit_mib; {:.0} particles fit with 2× headroom) at t = {} fs: the sign problem \
                 outgrew annihilation; use finer annihilation cells, a lower annihilation.trigger, more ranks, or \
                 fewer particles",
                n[0],
                st.store.len(),
                setup.memory_limit / (1u64 << 20) as f64,
                setup.memory_limit / setup.bytes_per_particle() / 2.0,
                st.step as f64 * setup.dt
            );
        }
        timers.add(P_BOOKKEEPING, t0);
        let is_output = setup.output_steps.binary_search(&st.step).is_ok();
        if is_output {
            observe(&st, &mut out, &mut timers);
            let t0 = Instant::now();
            record_run(&mut out, &timers, started, &bytes_sent, &cells, comm);
            let written = if root {
                out.write_atomic(&obs_path)
            } else {
                Ok(())
            };
            agree(comm, written)?;
            timers.add(P_OUTPUT, t0);
        }
        longest_step = longest_step.max(step_started.elapsed().as_secs_f64());
        // Stop requests act at synchronisation times only and never change the trajectory.
        let t0 = Instant::now();
        let unfinished = st.step < setup.steps;
        let signal = comm.any(stop_requested());
        let out_of_time = deadline.is_some_and(|d| {
            let margin = std::time::Duration::from_secs_f64(
                3.0 * longest_checkpoint + 2.0 * longest_step + 5.0,
            );
            comm.any(root && Instant::now() + margin >= d)
        });
        let until = st.step == stop_step && stop_step < setup.steps;
        let cadence = every_steps.is_some_and(|e| st.step.is_multiple_of(e))
            || ck.every_minutes.is_some_and(|m| {
                comm.any(root && last_checkpoint.elapsed().as_secs_f64() >= 60.0 * m)
            });
        timers.add(P_BOOKKEEPING, t0);
        if unfinished && (signal || out_of_time || until || cadence) {
            let t0 = Instant::now();
            checkpoint::write(
                &opts.out,
                &st,
                &out,
                loaded,
                st.step as f64 * setup.dt,
                ck.keep,
                comm,
            )?;
            longest_checkpoint = longest_checkpoint.max(t0.elapsed().as_secs_f64());
            last_checkpoint = Instant::now();
            timers.add(P_CHECKPOINT, t0);
            if signal || out_of_time || until {
                if root {
                    let why = if signal {
                        "stop signal"
                    } else if out_of_time {
                        "--walltime"
                    } else {
                        "--until"
                    };
                    println!(
                        "signfold: stopped at t = {} fs ({why}); checkpoint written, continue with `signfold resume {}`",
                        st.step as f64 * setup.dt,
                        opts.out.display()
                    );
                }
                report_phases(&timers, started, comm);
                return Ok(Ending::Checkpointed);
            }
        }
        if root && (is_output || last_print.elapsed().as_secs_f64() >= 2.0) {
            last_print = Instant::now();
            let el = started.elapsed().as_secs_f64();
            let frac = st.step as f64 / setup.steps as f64;
            let norm = out
                .series
                .get("norm")
                .and_then(|s| s.data.last())
                .copied()
                .unwrap_or(f64::NAN);
            println!(
                "t {:>8.2} / {:.2} fs | particles {:>10} | norm {:.5} | events/s {:>9.3e} | elapsed {} | left {}",
                st.step as f64 * setup.dt,
                setup.steps as f64 * setup.dt,
                count,
                norm,
                events as f64 / el.max(1e-9),
                hms(el),
                hms(el / frac.max(1e-9) - el)
            );
        }
    }
    if root {
        println!(
            "signfold: wrote {} ({} outputs) in {}",
            obs_path.display(),
            out.times().len(),
            hms(started.elapsed().as_secs_f64())
        );
    }
    report_phases(&timers, started, comm);
    Ok(Ending::Finished)
}

/// Per-rank figures gathered to rank 0 into `/run`: wall seconds per phase, total wall
/// seconds, bytes sent and occupied cells per annihilation (annihilation-major, ranks inner).
fn record_run(
    out: &mut ResultFile,
    timers: &Timers,
    started: Instant,
    bytes: &[f64],
    cells: &[f64],
    comm: &dyn Comm,
) {
    let mut mine: Vec<u64> = timers.secs.iter().map(|v| v.to_bits()).collect();
    mine.push(started.elapsed().as_secs_f64().to_bits());
    mine.extend(bytes.iter().map(|v| v.to_bits()));
    mine.extend(cells.iter().map(|v| v.to_bits()));
    let all = comm.gather_all(&mine);
    if !comm.is_root() {
        return;
    }
    let f = |r: usize, i: usize| f64::from_bits(all[r][i]);
    let ranks = all.len();
    for (i, name) in PHASES.iter().enumerate() {
        out.run.insert(
            format!("seconds_{name}"),
            ("s".into(), (0..ranks).map(|r| f(r, i)).collect()),
        );
    }
    let np = PHASES.len();
    out.run.insert(
        "wall_seconds".into(),
        ("s".into(), (0..ranks).map(|r| f(r, np)).collect()),
    );
    let na = bytes.len();
    out.run.insert(
        "bytes_sent".into(),
        (
            "B".into(),
            (0..na)
                .flat_map(|a| (0..ranks).map(move |r| (a, r)))
                .map(|(a, r)| f(r, np + 1 + a))
                .collect(),
        ),
    );
    out.run.insert(
        "occupied_cells".into(),
        (
            "1".into(),
            (0..na)
                .flat_map(|a| (0..ranks).map(move |r| (a, r)))
                .map(|(a, r)| f(r, np + 1 + na + a))
                .collect(),
        ),
    );
    out.run
        .insert("ranks".into(), ("1".into(), vec![ranks as f64]));
    out.run.insert(
        "threads".into(),
        ("1".into(), vec![rayon::current_num_threads() as f64]),
    );
}

/// Print the phase table on rank 0: sum over ranks, max over ranks, max/mean.
fn report_phases(timers: &Timers, started: Instant, comm: &dyn Comm) {
    let mut mine: Vec<u64> = timers.secs.iter().map(|v| v.to_bits()).collect();
    mine.push(started.elapsed().as_secs_f64().to_bits());
    let all = comm.gather_all(&mine);
    if !comm.is_root() {
        return;
    }
    let p = all.len() as f64;
    println!("phase          sum over ranks (s)   max over ranks (s)   max/mean");
    for (i, name) in PHASES.iter().chain(std::iter::once(&"wall")).enumerate() {
        let v: Vec<f64> = all.iter().map(|r| f64::from_bits(r[i])).collect();
        let (sum, max) = (v.iter().sum::<f64>(), v.iter().cloned().fold(0.0, f64::max));
        let imb = if sum > 0.0 { max / (sum / p) } else { 1.0 };
        println!("{name:<14} {sum:>18.3} {max:>20.3} {imb:>10.3}");
    }
}
