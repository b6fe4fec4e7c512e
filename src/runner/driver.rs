//! The run: initial particles, then (advance → annihilate → observe → write)* to the end.

use crate::config::job::LoadedJob;
use crate::engine::budget::{Annihilation, Pass};
use crate::engine::comm::{Comm, agree};
use crate::engine::memory;
use crate::engine::observe;
use crate::engine::start::initial_state;
use crate::engine::state::State;
use crate::engine::step::{Annihilated, StepBuffers, sync_step};
use crate::engine::stop::stop_requested;
use crate::engine::timers::{Phase, Timers};
use crate::io::checkpoint;
use crate::io::names;
use crate::io::results::ResultFile;
use crate::physics::estimators::Counts;
use crate::physics::numerics::Setup;
use crate::runner::outdir::{DirLock, lock_dir, prepare_out};
use crate::runner::progress::{Progress, Sink, StopReason};
use crate::runner::records::{phase_table, record_run};
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
    progress: Sink,
) -> Result<Ending> {
    let started = Instant::now();
    let root = comm.is_root();
    let _lock = claim_dir(
        &opts.out,
        root,
        || prepare_out(&opts.out, opts.force),
        comm,
        progress,
    )?;
    if root {
        // Older checkpoints of a forced rerun (also a results copy or a temporary file left
        // by a run that ended mid-write) must not be resumed by mistake.
        checkpoint::remove_all(&opts.out);
        let _ = std::fs::write(opts.out.join(names::JOB_COPY_FILE), &loaded.text);
    }
    let mut timers = Timers::default();
    // Set-up from the start: the directory's lock and waiting for the other ranks count too.
    let t0 = started;
    let (st, init) = initial_state(setup, comm)?;
    // A coherence length too short for the physics (a resonance the packet meets, a ring's
    // copy one turn away); the resonance scan is part of the set-up time.
    let warnings = if root {
        setup.coherence_warnings()
    } else {
        Vec::new()
    };
    timers.add(Phase::Initial, t0);
    if root {
        for w in warnings {
            progress(Progress::Warning(w));
        }
        progress(Progress::Started {
            samples: init.particles,
            draws: init.draws,
            ranks: comm.size(),
            threads: rayon::current_num_threads(),
            abs_over_net: init.abs_over_net,
            dropped: init.dropped,
        });
    }
    let out = ResultFile::new(
        names::OBSERVABLES_TYPE,
        &setup.text,
        setup.x_bins.centres(),
        setup.k_bins.centres(),
    );
    drive(
        loaded, setup, opts, comm, st, out, started, timers, true, progress,
    )
}

/// Where `act` (rank 0): `check` the directory, then take its lock, reporting a replaced
/// stale lock. Every rank agrees on the outcome; the lock is held while the value lives.
fn claim_dir(
    dir: &Path,
    act: bool,
    check: impl FnOnce() -> Result<()>,
    comm: &dyn Comm,
    progress: Sink,
) -> Result<Option<DirLock>> {
    let mut lock = None;
    let claimed = if act {
        check().and_then(|()| lock_dir(dir)).map(|(l, note)| {
            lock = Some(l);
            if let Some(n) = note {
                progress(Progress::Warning(n));
            }
        })
    } else {
        Ok(())
    };
    agree(comm, claimed)?;
    Ok(lock)
}

/// Continue the run in `dir` from its newest valid checkpoint, on any number of ranks;
/// `ranks_on_node` (of this rank's node) sets the memory cap per rank as `run` does.
pub fn resume(
    dir: &Path,
    until: Option<f64>,
    walltime: Option<std::time::Duration>,
    ranks_on_node: usize,
    comm: &dyn Comm,
    progress: Sink,
) -> Result<Ending> {
    let started = Instant::now();
    let _lock = claim_dir(
        dir,
        comm.is_root() && dir.is_dir(),
        || crate::io::results::probe_writable(dir),
        comm,
        progress,
    )?;
    if comm.is_root() {
        // A results copy without its particle file, or a temporary file, is what a run
        // that ended between two writes left behind: no checkpoint, so removed.
        for p in checkpoint::remove_leftovers(dir) {
            progress(Progress::Warning(format!(
                "removed {}, left behind by a run that ended while writing a checkpoint",
                p.display()
            )));
        }
    }
    let mut timers = Timers::default();
    // The lock and the clean-up (with the waits for the other ranks) are set-up.
    timers.add(Phase::Initial, started);
    let t0 = Instant::now();
    let restored = checkpoint::newest_valid(dir, comm)?;
    let mut setup = Setup::new(&restored.job)?;
    // The memory cap of the loop (docs/method.md §3): the job's numerics.memory_limit_mib,
    // else the node's available memory shared by its ranks, the smallest over the ranks —
    // the ranks of a resume may share nodes differently from the run's.
    let (cap, _) = crate::engine::memory::available_per_rank(&setup, ranks_on_node);
    setup.memory_limit = -comm.max_f64(-cap);
    // The tables rebuilt here must be those the run was written with (every rank checks).
    let (note, checked) = match checkpoint::verify_numerics(
        restored.numerics_hash.as_deref(),
        &setup,
        &restored.path.display().to_string(),
    ) {
        Ok(note) => (note, Ok(())),
        Err(e) => (None, Err(e)),
    };
    agree(comm, checked)?;
    if comm.is_root() {
        for w in restored.skipped.iter().chain(&note) {
            progress(Progress::Warning(w.clone()));
        }
        progress(Progress::Resumed {
            dir: dir.to_path_buf(),
            time_fs: restored.time,
            step: restored.state.step,
            ranks: comm.size(),
        });
    }
    // The results file goes back to exactly the state of the checkpoint.
    let r = if comm.is_root() {
        restored
            .results
            .write_atomic(&dir.join(names::OBSERVABLES_FILE))
    } else {
        Ok(())
    };
    agree(comm, r)?;
    timers.add(Phase::Checkpoint, t0);
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
        progress,
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
    progress: Sink,
) -> Result<Ending> {
    let root = comm.is_root();
    let t0 = Instant::now();
    // The cell hierarchy and annihilation buffers, kept from one pass to the next.
    let mut buffers = StepBuffers::new(setup)?;
    timers.add(Phase::Initial, t0);
    // Most merging the budget has forced so far (warned when it grows).
    let mut forced_threshold = 0.0f64;
    let mut forced_level = 0u32;
    let mut warned_beyond = 0.0f64;
    let mut warned_binding = false;
    let obs_path = opts.out.join(names::OBSERVABLES_FILE);
    let observe = |st: &State, out: &mut ResultFile, timers: &mut Timers| {
        let t0 = Instant::now();
        let c = observe::reduce(Counts::collect(setup, &st.store), comm);
        if root {
            let frame = c.frame(setup, st.step as f64 * setup.dt, &st.s0, &st.gone);
            out.push_frame(&frame);
        }
        timers.add(Phase::Observe, t0);
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
        timers.add(Phase::Output, t0);
    }
    let stop_step = match opts.until {
        Some(t) => ((t / setup.dt) - 1e-9).ceil().max(0.0) as u64,
        None => setup.steps,
    }
    .min(setup.steps);
    let ck = &setup.job.checkpoint;
    let t0 = Instant::now();
    // Every rank must have built the same tables (a heterogeneous cluster may not).
    let numerics = checkpoint::numerics_hash(setup);
    same_numerics_on_every_rank(setup, comm)?;
    timers.add(Phase::Initial, t0);
    // The one checkpoint write of the run (early stops, stops in the loop, cadence).
    let save = |st: &State, out: &ResultFile, timers: &mut Timers| -> Result<f64> {
        let t0 = Instant::now();
        let time = st.step as f64 * setup.dt;
        checkpoint::write(&opts.out, st, out, loaded, time, &numerics, ck.keep, comm)?;
        timers.add(Phase::Checkpoint, t0);
        Ok(t0.elapsed().as_secs_f64())
    };
    if opts.until.is_some() && stop_step <= st.step && st.step < setup.steps {
        // --until at or before the current time: stop here, resumable. A fresh run writes
        // its checkpoint now; a resumed one already stands on the checkpoint it read.
        if fresh {
            save(&st, &out, &mut timers)?;
        }
        report_stop(
            &st,
            setup,
            opts,
            &timers,
            started,
            StopReason::Until,
            comm,
            progress,
        );
        return Ok(Ending::Checkpointed);
    }
    let every_steps = ck.every.map(|t| ((t / setup.dt).round() as u64).max(1));
    let mut last_checkpoint = Instant::now();
    let mut longest_checkpoint: f64 = (setup.checkpoint_bytes() / 50e6 / comm.size() as f64) + 2.0;
    let mut longest_step: f64 = 0.0;
    let deadline = opts.walltime.map(|w| started + w);
    let mut last_print = Instant::now();
    let mut events = 0u64;
    let mut bytes_sent: Vec<f64> = Vec::new();
    let mut messages_sent: Vec<f64> = Vec::new();
    let mut cells: Vec<f64> = Vec::new();
    // Occupied annihilation cells per particle of this rank at the latest annihilation
    // (one per particle, the most there can be, before the first).
    let mut cells_per_particle = 1.0;
    while st.step < stop_step {
        let step_started = Instant::now();
        let step = sync_step(setup, &mut buffers, &mut st, comm, &mut timers);
        events += step.events;
        let count = step.count;
        let t0 = Instant::now();
        if let Some(Annihilated { pass }) = &step.annihilation {
            let rep = pass.report;
            let worse = if pass.threshold.is_nan() {
                pass.coarsest_level > forced_level
            } else {
                pass.threshold > forced_threshold
            };
            let t = st.step as f64 * setup.dt;
            let mut said = Vec::new();
            // Merges beyond half the exchange period: warned at 10 % of the mixed samples,
            // and again each time the share doubles (a reporting threshold, not a bound on
            // the bias, which the validation suite measures).
            if pass.beyond_scales >= 0.1 && pass.beyond_scales >= 2.0 * warned_beyond {
                warned_beyond = pass.beyond_scales;
                said.push(beyond_scales_warning(setup, pass, t));
            }
            // Several particles and the budget binds (cells merged beyond the finest): in the
            // validation suite every such job was biased at the default budget; said once.
            if setup.n >= 2 && pass.coarsest_level > 0 && !warned_binding {
                warned_binding = true;
                said.push(binding_warning(setup, &buffers.annihilation, pass, t));
            }
            if pass.forced && worse {
                forced_level = forced_level.max(pass.coarsest_level);
                forced_threshold = forced_threshold.max(pass.threshold);
                said.push(forced_warning(setup, &buffers.annihilation, pass, t));
            }
            if root {
                for w in said {
                    progress(Progress::Warning(w));
                }
            }
            bytes_sent.push(8.0 * rep.words_sent as f64);
            messages_sent.push(rep.messages_sent as f64);
            cells.push(rep.local_cells as f64);
            if root {
                let rec = &mut out.records;
                let (cx, ck) = buffers.annihilation.cell_sizes(pass.coarsest_level);
                for (d, v) in [
                    (names::ANNIHILATION_LEVEL, pass.mean_level),
                    (
                        names::ANNIHILATION_COARSEST_LEVEL,
                        f64::from(pass.coarsest_level),
                    ),
                    (names::ANNIHILATION_THRESHOLD, pass.threshold),
                    (names::ANNIHILATION_BEYOND_SCALES, pass.beyond_scales),
                    (names::ANNIHILATION_CELL_X, cx),
                    (names::ANNIHILATION_CELL_K, ck),
                    (names::ANNIHILATION_TIME, st.step as f64 * setup.dt),
                    (names::ANNIHILATION_BEFORE, rep.before as f64),
                    (
                        names::ANNIHILATION_CANCELLED,
                        (rep.before - rep.after) as f64,
                    ),
                ] {
                    rec.entry(d.name.to_string())
                        .or_insert_with(|| (d.units.to_string(), Vec::new()))
                        .1
                        .push(v);
                }
            }
        }
        // Memory cap (docs/method.md §3): what this rank holds now (resident) and what the
        // next step's growth, at this step's rate, would add.
        if let Some(a) = &step.annihilation {
            cells_per_particle =
                a.pass.report.local_cells as f64 / step.local_advanced.max(1) as f64;
        }
        let growth = step.local_advanced as f64 / step.local_start.max(1) as f64;
        let len = st.store.len() as f64;
        let per_particle = memory::bytes_per_live_particle(
            setup,
            cells_per_particle,
            rayon::current_num_threads(),
            comm.size(),
        );
        let resident = memory::process_status_bytes("VmRSS").unwrap_or(len * per_particle);
        let need = resident + len * (growth.max(1.0) - 1.0) * per_particle;
        if comm.any(need > setup.memory_limit) {
            let mut n = [st.store.len() as i64];
            comm.sum_i64(&mut n);
            bail!(
                "the sample count ({} on all ranks, {} here, ×{growth:.3} in the last step) would take this rank to \
                 {:.1} MiB ({:.1} MiB resident now + {per_particle:.0} B per new particle), past the memory cap of \
                 {:.1} MiB per rank (numerics.memory_limit_mib, or the node's available memory shared by its ranks) \
                 at t = {} fs: the sign problem outgrew annihilation; lower annihilation.budget, use more ranks, or \
                 fewer particles",
                n[0],
                st.store.len(),
                need / (1u64 << 20) as f64,
                resident / (1u64 << 20) as f64,
                setup.memory_limit / (1u64 << 20) as f64,
                st.step as f64 * setup.dt
            );
        }
        timers.add(Phase::Bookkeeping, t0);
        let is_output = setup.output_steps.binary_search(&st.step).is_ok();
        if is_output {
            observe(&st, &mut out, &mut timers);
            let t0 = Instant::now();
            let passes = [
                (names::RUN_BYTES_SENT, &bytes_sent[..]),
                (names::RUN_MESSAGES_SENT, &messages_sent[..]),
                (names::RUN_OCCUPIED_CELLS, &cells[..]),
            ];
            record_run(&mut out, &timers, started, &passes, comm);
            let written = if root {
                out.write_atomic(&obs_path)
            } else {
                Ok(())
            };
            agree(comm, written)?;
            timers.add(Phase::Output, t0);
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
        timers.add(Phase::Bookkeeping, t0);
        if unfinished && (signal || out_of_time || until || cadence) {
            longest_checkpoint = longest_checkpoint.max(save(&st, &out, &mut timers)?);
            last_checkpoint = Instant::now();
            if signal || out_of_time || until {
                let why = if signal {
                    StopReason::Signal
                } else if out_of_time {
                    StopReason::Walltime
                } else {
                    StopReason::Until
                };
                report_stop(&st, setup, opts, &timers, started, why, comm, progress);
                return Ok(Ending::Checkpointed);
            }
        }
        let t0 = Instant::now();
        if root && (is_output || last_print.elapsed().as_secs_f64() >= 2.0) {
            last_print = Instant::now();
            let el = started.elapsed().as_secs_f64();
            let frac = st.step as f64 / setup.steps as f64;
            let norm = out
                .series
                .get(names::NORM.name)
                .and_then(|s| s.data.last())
                .copied()
                .unwrap_or(f64::NAN);
            let last = |d: names::Dataset| {
                out.series
                    .get(d.name)
                    .and_then(|s| s.data.last())
                    .copied()
                    .unwrap_or(f64::NAN)
            };
            let (pos, neg) = (last(names::SAMPLES_POSITIVE), last(names::SAMPLES_NEGATIVE));
            progress(Progress::Step {
                time_fs: st.step as f64 * setup.dt,
                end_fs: setup.steps as f64 * setup.dt,
                samples: count,
                sign_ratio: (pos + neg) / (pos - neg).abs(),
                norm,
                events_per_s: events as f64 / el.max(1e-9),
                elapsed_s: el,
                left_s: el / frac.max(1e-9) - el,
            });
        }
        timers.add(Phase::Bookkeeping, t0);
    }
    // The last line says how the run ended (batch scripts look for it).
    if let Some(rows) = phase_table(&timers, started, comm) {
        progress(Progress::Phases(rows));
    }
    if root {
        progress(Progress::Finished {
            time_fs: st.step as f64 * setup.dt,
            path: obs_path.clone(),
            outputs: out.times().len(),
            elapsed_s: started.elapsed().as_secs_f64(),
        });
    }
    Ok(Ending::Finished)
}

/// The warning of the first annihilation of a several-particle run whose budget made it
/// merge cells beyond the finest.
fn binding_warning(setup: &Setup, annihilation: &Annihilation, pass: &Pass, t: f64) -> String {
    let (cx, ck) = annihilation.cell_sizes(pass.coarsest_level);
    format!(
        "t = {t} fs: the sample budget binds (annihilation.budget = {}): annihilation merged cells beyond the finest, \
         up to {cx:.3} nm × {ck:.4} 1/nm (mean level {:.2}); in the validation suite every two-body job with a kernel \
         one-body potential (barrier, well, Gaussian, table) whose count reached the default budget \
         (10 × numerics.samples) showed a density or pair-density bias beyond its error bars, several of them with no \
         other warning (docs/method.md §3.1); the trapped fermions, with cells relative to the centre of mass, did \
         not: rerun with a larger budget and \
         compare before trusting the result (`signfold run JOB --out DIR --systematic` does this)",
        setup.budget, pass.mean_level,
    )
}

/// The warning of an annihilation that merged cells beyond half the exchange period.
fn beyond_scales_warning(setup: &Setup, pass: &Pass, t: f64) -> String {
    let ck = setup.cell_k * f64::from(1u32 << setup.scale_level(crate::physics::cells::MAX_LEVEL));
    format!(
        "t = {t} fs: {:.1} % of the samples annihilated with both signs in their cell were in cells wider in k than \
         half the exchange period 2π/d = {:.4} 1/nm (cells up to {ck:.4} 1/nm stay within it): such merges erase \
         exchange structure and can bias the pair density; raise the sample budget (annihilation.budget = {}) and \
         check convergence (`signfold run JOB --out DIR --systematic` reruns at 2× and 4× the budget and compares)",
        100.0 * pass.beyond_scales,
        setup.structure_period_k().unwrap_or(f64::NAN),
        setup.budget,
    )
}

/// The warning of an annihilation whose cells the budget forced beyond the least merging.
fn forced_warning(setup: &Setup, annihilation: &Annihilation, pass: &Pass, t: f64) -> String {
    let (cx, ck) = annihilation.cell_sizes(pass.coarsest_level);
    let how = if pass.threshold.is_nan() {
        format!(
            "used cells {}× coarser than the job's {:.3} nm × {:.4} 1/nm",
            1u32 << pass.coarsest_level,
            setup.cell_x,
            setup.cell_k
        )
    } else {
        format!(
            "merged cells whose two signs were spread unalike (χ² score up to {}, where 2 keeps the \
             structure the samples resolve)",
            if pass.threshold.is_finite() {
                format!("{:.0}", pass.threshold)
            } else {
                "any".to_string()
            }
        )
    };
    format!(
        "t = {t} fs: to keep within the budget of {} samples (annihilation.budget), annihilation {how}; \
         the coarsest cells used were {cx:.3} nm × {ck:.4} 1/nm (mean level {:.2}); coarse cells blur the \
         Wigner function (Δk = {:.4} 1/nm{}) and may bias the result: raise the budget or check convergence",
        setup.budget,
        pass.mean_level,
        setup.dk,
        exchange_note(setup),
    )
}

/// The end of a run stopped early with a checkpoint: the phase table, then the line that
/// says where it stopped (batch scripts look for it).
#[allow(clippy::too_many_arguments)]
fn report_stop(
    st: &State,
    setup: &Setup,
    opts: &RunOptions,
    timers: &Timers,
    started: Instant,
    why: StopReason,
    comm: &dyn Comm,
    progress: Sink,
) {
    if let Some(rows) = phase_table(timers, started, comm) {
        progress(Progress::Phases(rows));
    }
    if comm.is_root() {
        progress(Progress::Stopped {
            time_fs: st.step as f64 * setup.dt,
            why,
            dir: opts.out.clone(),
        });
    }
}

/// Refuse to run when a rank built different kernel tables or numerics than rank 0 (a
/// cluster of mixed machine types): the ranks would not follow one trajectory.
fn same_numerics_on_every_rank(setup: &Setup, comm: &dyn Comm) -> Result<()> {
    let mine = checkpoint::numerics_fingerprint(setup);
    let all = comm.gather_all(&mine);
    for (r, theirs) in all.iter().enumerate() {
        let differ: Vec<&str> = checkpoint::NUMERICS_PARTS
            .iter()
            .zip(theirs.iter().zip(&all[0]))
            .filter(|(_, (a, b))| a != b)
            .map(|((_, what), _)| *what)
            .collect();
        if !differ.is_empty() {
            bail!(
                "rank {r} built {} differently from rank 0, so the ranks would not follow one trajectory: \
                 run all ranks on one machine type with one build",
                differ.join(" and ")
            );
        }
    }
    Ok(())
}

/// ", exchange period 2π/d = … 1/nm" for identical particles (d the largest orbital
/// separation), which annihilation cells must resolve in k.
fn exchange_note(setup: &Setup) -> String {
    match setup.exchange_period() {
        Some(p) => format!(", exchange period 2π/d = {p:.4} 1/nm"),
        None => String::new(),
    }
}
