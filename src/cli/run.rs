//! `signfold run` and `signfold resume`: the engine on every rank, progress printed by
//! rank 0 as plain lines (no carriage returns: a terminal and a batch log read the same).

use super::collective;
use signfold::engine::mpi::World;
use signfold::engine::stop::{install_signals, parse_walltime};
use signfold::physics::numerics::Setup;
use signfold::runner::driver::{self, RunOptions};
use signfold::runner::progress::{Progress, StopReason};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Arguments of `run`.
pub struct RunArgs {
    pub job: PathBuf,
    pub out: PathBuf,
    pub set: Vec<String>,
    pub force: bool,
    pub until: Option<f64>,
    pub walltime: Option<String>,
    /// Rerun at a larger budget and coherence length and compare (`--systematic`).
    pub systematic: bool,
}

/// `--until T`: a finite time ≥ 0 fs.
pub fn check_until(until: Option<f64>) -> anyhow::Result<()> {
    match until {
        Some(t) if !t.is_finite() || t < 0.0 => anyhow::bail!(
            "--until {t}: expected a finite time ≥ 0 fs (the run stops with a checkpoint at the first synchronisation time ≥ T)"
        ),
        _ => Ok(()),
    }
}

pub fn run(args: RunArgs, world: &World) -> anyhow::Result<ExitCode> {
    collective(check_until(args.until))?;
    install_signals()?;
    let walltime = collective(args.walltime.as_deref().map(parse_walltime).transpose())?;
    let runtime = signfold::engine::memory::process_status_bytes("VmRSS").unwrap_or(0.0);
    let loaded = collective(signfold::physics::defaults::load(&args.job, &args.set))?;
    if signfold::engine::comm::Comm::is_root(world) {
        super::warn_job(&loaded);
    }
    let mut setup = collective(Setup::new(&loaded))?;
    // The memory check of `check`, before anything is written (docs/method.md §3).
    let plan = collective(super::check::plan(&mut setup, world, runtime))?;
    collective(plan.verdict)?;
    setup.memory_limit = plan.available;
    let opts = RunOptions {
        out: args.out.clone(),
        force: args.force,
        until: args.until,
        walltime,
    };
    let ending = collective(driver::run(&loaded, &setup, &opts, world, &mut show))?;
    if !args.systematic || ending != driver::Ending::Finished {
        return Ok(ExitCode::SUCCESS);
    }
    systematic(&args, &loaded, setup.budget, world, runtime)
}

/// `--systematic`: each variant of [`signfold::study::systematic`] run like the base run into
/// DIR/systematic/<tag>, compared with it on rank 0, reported in DIR/systematic.md.
fn systematic(
    args: &RunArgs,
    loaded: &signfold::config::job::LoadedJob,
    budget: u64,
    world: &World,
    runtime: f64,
) -> anyhow::Result<ExitCode> {
    use signfold::io::{names, results::ResultFile};
    use signfold::study::systematic::{self, Outcome};
    let root = signfold::engine::comm::Comm::is_root(world);
    let read = |dir: &Path| ResultFile::read(&dir.join(names::OBSERVABLES_FILE));
    // The base run, read once (rank 0 compares).
    let base = if root {
        Some(collective(read(&args.out))?)
    } else {
        None
    };
    let groups = loaded.job.numerics.groups as usize;
    let mut results = Vec::new();
    for v in systematic::variants(loaded, budget) {
        let out = args.out.join("systematic").join(v.tag);
        if root {
            println!(
                "signfold: systematic check, {} ({}) into {}",
                v.label,
                v.set.join(", "),
                out.display()
            );
        }
        let set: Vec<String> = args.set.iter().chain(&v.set).cloned().collect();
        let loaded_v = collective(signfold::physics::defaults::load(&args.job, &set))?;
        let mut setup = collective(Setup::new(&loaded_v))?;
        let plan = collective(super::check::plan(&mut setup, world, runtime))?;
        // The forecast is the same on every rank: a variant that would not fit is skipped.
        if let Err(e) = plan.verdict {
            if root {
                eprintln!(
                    "signfold: warning: systematic check, {}: skipped: {e:#}",
                    v.label
                );
            }
            results.push((v, Outcome::Skipped(format!("{e:#}"))));
            continue;
        }
        setup.memory_limit = plan.available;
        let opts = RunOptions {
            out: out.clone(),
            force: args.force,
            until: None,
            walltime: None,
        };
        collective(driver::run(&loaded_v, &setup, &opts, world, &mut show))?;
        let outcome = match &base {
            Some(base) => {
                let var = collective(read(&out))?;
                Outcome::Compared(systematic::compare_runs(v.label, groups, base, &var))
            }
            None => Outcome::Compared(Vec::new()),
        };
        results.push((v, outcome));
    }
    if !root {
        return Ok(ExitCode::SUCCESS);
    }
    let path = args.out.join("systematic.md");
    let name = args.job.display().to_string();
    std::fs::write(&path, systematic::report(&name, &results))
        .map_err(|e| anyhow::anyhow!("cannot write {}: {e}", path.display()))?;
    let mut moved = 0;
    for (v, o) in &results {
        moved += systematic::moved(o);
        match o {
            Outcome::Compared(c) => println!(
                "signfold: systematic check, {}: {} checks against the base run, {} moved beyond the noise",
                v.label,
                c.len(),
                systematic::moved(o)
            ),
            Outcome::Skipped(_) => println!("signfold: systematic check, {}: skipped", v.label),
        }
    }
    if moved > 0 {
        eprintln!(
            "signfold: the answer moved beyond the noise in {moved} checks when the budget or the coherence length grew: \
             the run is not converged in them (see {}); trust it only after a larger budget or L_c stops moving it",
            path.display()
        );
        return Ok(ExitCode::from(1));
    }
    println!(
        "signfold: systematic check passed: nothing moved beyond the noise ({})",
        path.display()
    );
    Ok(ExitCode::SUCCESS)
}

pub fn resume(
    dir: &Path,
    until: Option<f64>,
    walltime: Option<String>,
    world: &World,
) -> anyhow::Result<ExitCode> {
    collective(check_until(until))?;
    install_signals()?;
    let walltime = collective(walltime.as_deref().map(parse_walltime).transpose())?;
    collective(driver::resume(
        dir,
        until,
        walltime,
        world.ranks_on_node(),
        world,
        &mut show,
    ))?;
    Ok(ExitCode::SUCCESS)
}

fn hms(s: f64) -> String {
    let s = s.max(0.0).round() as u64;
    format!("{:02}:{:02}:{:02}", s / 3600, (s / 60) % 60, s % 60)
}

/// Print one progress event (the driver emits them on rank 0 only).
fn show(p: Progress) {
    match p {
        Progress::Started {
            samples,
            draws,
            ranks,
            threads,
            abs_over_net,
            dropped,
        } => println!(
            "signfold: {samples} samples at t = 0 on {ranks} rank(s) ({threads} threads each); ∫|W|/∫W = {abs_over_net:.4}{}\n\
             signfold: {}",
            if dropped > 0 {
                format!("; {dropped} outside domain or momentum range, not kept")
            } else {
                String::new()
            },
            super::check::count_note(draws)
        ),
        Progress::Resumed {
            dir,
            time_fs,
            step,
            ranks,
        } => println!(
            "signfold: resuming {} at t = {time_fs} fs (step {step}) on {ranks} rank(s)",
            dir.display()
        ),
        Progress::Step {
            time_fs,
            end_fs,
            samples,
            sign_ratio,
            norm,
            events_per_s,
            elapsed_s,
            left_s,
        } => println!(
            "t {time_fs:>8.2} / {end_fs:.2} fs | samples {samples:>10} | ∫|W|/∫W {sign_ratio:>6.3} | norm {norm:.5} | events/s {events_per_s:>9.3e} | elapsed {} | left {}",
            hms(elapsed_s),
            hms(left_s)
        ),
        Progress::Stopped { time_fs, why, dir } => {
            let why = match why {
                StopReason::Signal => "stop signal",
                StopReason::Walltime => "--walltime",
                StopReason::Until => "--until",
            };
            println!(
                "signfold: stopped at t = {time_fs} fs ({why}); checkpoint written, continue with `signfold resume {}`",
                dir.display()
            )
        }
        Progress::Finished {
            time_fs,
            path,
            outputs,
            elapsed_s,
        } => println!(
            "signfold: finished at t = {time_fs} fs; wrote {} ({outputs} outputs) in {}",
            path.display(),
            hms(elapsed_s)
        ),
        Progress::Warning(w) => eprintln!("signfold: warning: {w}"),
        Progress::Phases(rows) => {
            println!("phase          sum over ranks (s)   max over ranks (s)   max/mean");
            for r in rows {
                println!(
                    "{:<14} {:>18.3} {:>20.3} {:>10.3}",
                    r.name, r.sum, r.max, r.imbalance
                );
            }
        }
    }
}
