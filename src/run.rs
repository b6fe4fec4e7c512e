//! The run: initial particles, then (advance → annihilate → observe → write)* to the end.

use crate::advance;
use crate::annihilate::{self, CellMesh};
use crate::comm::Comm;
use crate::initial;
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
    pub until: Option<f64>,
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

/// Make a rank-0 outcome collective: every rank fails when rank 0 failed, so no rank is
/// left waiting in a collective call.
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

/// Run the job to its end time (or `until`), writing `observables.h5` from rank 0.
pub fn run(setup: &Setup, opts: &RunOptions, comm: &dyn Comm) -> Result<()> {
    let root = comm.is_root();
    let prepared = if root {
        prepare_out(&opts.out, opts.force)
    } else {
        Ok(())
    };
    agree(comm, prepared)?;
    let started = Instant::now();
    let mesh = CellMesh::new(setup)?;
    let (mut st, init) = initial_state(setup, comm)?;
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
    let mut out = ResultFile::new(
        results::OBSERVABLES_TYPE,
        &setup.text,
        setup.x_bins.centres(),
        setup.k_bins.centres(),
    );
    let obs_path = opts.out.join("observables.h5");
    let mut ann_time = Vec::new();
    let mut ann_before = Vec::new();
    let mut ann_cancelled = Vec::new();
    let write = |st: &State, out: &mut ResultFile, root: bool| -> Result<()> {
        let c = Counts::collect(setup, &st.store).reduce(comm);
        if root {
            observe::frame(setup, out, st.step as f64 * setup.dt, &c, &st.s0, &st.gone);
        }
        Ok(())
    };
    write(&st, &mut out, root)?;
    let threshold = (setup.trigger * st.initial_count as f64) as u64;
    let last_step = match opts.until {
        Some(t) => ((t / setup.dt) - 1e-9).ceil().max(0.0) as u64,
        None => setup.steps,
    }
    .min(setup.steps);
    let mut last_print = Instant::now();
    let mut events_total = 0u64;
    let step_limit = setup.memory_limit / setup.bytes_per_particle();
    while st.step < last_step {
        let (store, tally) = advance::advance(setup, &st.store, st.step);
        st.store = store;
        st.step += 1;
        let mut t = [
            tally.absorbed_left.clone(),
            tally.absorbed_right.clone(),
            tally.lost_momentum.clone(),
            vec![tally.events as i64, st.store.len() as i64],
        ]
        .concat();
        comm.sum_i64(&mut t);
        let g = setup.groups as usize;
        for i in 0..g {
            st.gone.left[i] += t[i];
            st.gone.right[i] += t[g + i];
            st.gone.momentum[i] += t[2 * g + i];
        }
        events_total += t[3 * g] as u64;
        let count = t[3 * g + 1] as u64;
        if count > threshold {
            let rep = annihilate::annihilate(setup, &mesh, &mut st.store, st.step, comm);
            annihilate::rebalance(&mut st.store, comm);
            st.annihilations += 1;
            ann_time.push(st.step as f64 * setup.dt);
            ann_before.push(rep.before as f64);
            ann_cancelled.push((rep.before - rep.after) as f64);
        }
        let local_bytes = st.store.len() as f64 * setup.bytes_per_particle();
        if comm.any(local_bytes * 2.0 > setup.memory_limit) {
            let mut n = [st.store.len() as i64];
            comm.sum_i64(&mut n);
            bail!(
                "the particle count ({} on all ranks, {} here) would exceed the memory cap of {:.0} MiB per rank \
                 (numerics.memory_limit_mib; {:.0} particles fit at 2× headroom) at t = {} fs: the sign problem outgrew \
                 annihilation; use finer annihilation cells, a lower annihilation.trigger, more ranks, or fewer particles",
                n[0],
                st.store.len(),
                setup.memory_limit / (1u64 << 20) as f64,
                step_limit / 2.0,
                st.step as f64 * setup.dt
            );
        }
        let is_output = setup.output_steps.binary_search(&st.step).is_ok() || st.step == last_step;
        if is_output {
            write(&st, &mut out, root)?;
            if root {
                out.records
                    .insert("annihilation_time".into(), ("fs".into(), ann_time.clone()));
                out.records.insert(
                    "annihilation_before".into(),
                    ("1".into(), ann_before.clone()),
                );
                out.records.insert(
                    "annihilation_cancelled".into(),
                    ("1".into(), ann_cancelled.clone()),
                );
                out.run.insert(
                    "wall_seconds".into(),
                    ("s".into(), vec![started.elapsed().as_secs_f64()]),
                );
            }
            let written = if root {
                out.write_atomic(&obs_path)
            } else {
                Ok(())
            };
            agree(comm, written)?;
        }
        if root && (is_output || last_print.elapsed().as_secs_f64() >= 2.0) {
            last_print = Instant::now();
            let el = started.elapsed().as_secs_f64();
            let frac = st.step as f64 / last_step as f64;
            let norm = out
                .series
                .get("norm")
                .and_then(|s| s.data.last())
                .copied()
                .unwrap_or(f64::NAN);
            println!(
                "t {:>8.2} / {:.2} fs | particles {:>10} | norm {:.5} | events/s {:>9.3e} | elapsed {} | left {}",
                st.step as f64 * setup.dt,
                last_step as f64 * setup.dt,
                count,
                norm,
                events_total as f64 / el.max(1e-9),
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
    Ok(())
}
