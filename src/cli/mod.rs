//! The command line: the only code that prints. One file per subcommand; this file holds
//! the argument schema, the MPI policy and error reporting.
//!
//! MPI is initialised only by the commands that run the engine on every rank (`check`,
//! `run`, `resume`). The serial tools (reference, compare, plot, inspect, scaling,
//! accuracy, validate) do not initialise MPI; under `mpirun` they act on the launcher's rank 0 only
//! (see [`launcher_rank`]), so they neither race on their files nor print twice.

mod accuracy;
mod check;
mod compare;
mod inspect;
mod merge;
mod plot;
mod reference;
mod run;
mod scaling;
mod validate;

use clap::{Parser, Subcommand};
use signfold::engine::comm::Comm;
use signfold::engine::mpi::World;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(
    name = "signfold",
    version,
    about = "Signed-particle Wigner Monte Carlo for a few interacting particles"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand)]
pub enum Command {
    /// Validate a job and print its derived numerics, without running.
    Check {
        /// The job file (TOML; see the README for its keys).
        job: PathBuf,
        /// Override a job key (repeatable), e.g. --set numerics.samples=200000
        #[arg(long = "set", value_name = "KEY=VALUE")]
        set: Vec<String>,
        /// Shortcut for --set numerics.samples=N (initial Monte Carlo samples)
        #[arg(long, value_name = "N")]
        samples: Option<u64>,
        /// The old spelling of --samples, read with a warning.
        #[arg(long, value_name = "N", hide = true, conflicts_with = "samples")]
        particles: Option<u64>,
    },
    /// Run a job, writing DIR/observables.h5.
    Run {
        /// The job file (TOML; see the README for its keys).
        job: PathBuf,
        /// Output directory: observables.h5, job.toml, checkpoints (created if needed).
        #[arg(long, value_name = "DIR")]
        out: PathBuf,
        /// Override a job key (repeatable), e.g. --set numerics.samples=200000
        #[arg(long = "set", value_name = "KEY=VALUE")]
        set: Vec<String>,
        /// Shortcut for --set numerics.samples=N (initial Monte Carlo samples)
        #[arg(long, value_name = "N")]
        samples: Option<u64>,
        /// The old spelling of --samples, read with a warning.
        #[arg(long, value_name = "N", hide = true, conflicts_with = "samples")]
        particles: Option<u64>,
        /// Overwrite results already in DIR (its old checkpoints are deleted).
        #[arg(long)]
        force: bool,
        /// Stop with a checkpoint at the first synchronisation time ≥ T (fs).
        #[arg(long, value_name = "T_FS", allow_negative_numbers = true)]
        until: Option<f64>,
        /// Stop with a checkpoint before this much wall time has passed (HH:MM or HH:MM:SS).
        #[arg(long, value_name = "HH:MM")]
        walltime: Option<String>,
        /// rayon threads per rank (default: all cores / ranks on this node).
        #[arg(long, value_name = "N")]
        threads: Option<usize>,
        /// After the run, run the job again at 2× and 4× the sample budget and at 1.5× the
        /// coherence length (each with its own seed, into DIR/systematic/) and test whether
        /// the answer moved beyond the noise; writes DIR/systematic.md; exit 1 if it moved.
        #[arg(long, conflicts_with_all = ["until", "walltime"])]
        systematic: bool,
    },
    /// Continue a run from the newest valid checkpoint in DIR, on any number of ranks.
    Resume {
        /// The run directory (the --out of `run`), holding its checkpoints.
        dir: PathBuf,
        /// Stop again with a checkpoint at the first synchronisation time ≥ T (fs).
        #[arg(long, value_name = "T_FS", allow_negative_numbers = true)]
        until: Option<f64>,
        /// Stop with a checkpoint before this much wall time has passed (HH:MM or HH:MM:SS).
        #[arg(long, value_name = "HH:MM")]
        walltime: Option<String>,
        /// rayon threads per rank (default: all cores / ranks on this node).
        #[arg(long, value_name = "N")]
        threads: Option<usize>,
    },
    /// Solve the job exactly on a grid (N ≤ 3), writing DIR/reference.h5.
    Reference {
        /// The job file (TOML; see the README for its keys).
        job: PathBuf,
        /// Output directory for reference.h5 (created if needed).
        #[arg(long, value_name = "DIR")]
        out: PathBuf,
        /// Override a job key (repeatable), e.g. --set numerics.samples=200000
        #[arg(long = "set", value_name = "KEY=VALUE")]
        set: Vec<String>,
        /// Overwrite a reference.h5 already in DIR.
        #[arg(long)]
        force: bool,
        /// Grid points per axis (default: chosen from the job).
        #[arg(long)]
        points: Option<usize>,
        /// Largest time step, fs (default: chosen from the job).
        #[arg(long, value_name = "FS")]
        dt: Option<f64>,
    },
    /// Compare two result files observable by observable.
    Compare {
        /// The result file to judge (e.g. observables.h5).
        a: PathBuf,
        /// The result file to compare it with (e.g. reference.h5); relative distances are
        /// taken against it.
        b: PathBuf,
        /// Exit 1 when a density distance exceeds X (relative L1).
        #[arg(long, value_name = "X", allow_negative_numbers = true)]
        tolerance: Option<f64>,
    },
    /// Write PNG pictures of a result file.
    Plot {
        /// The result file to draw (observables.h5 or reference.h5).
        file: PathBuf,
        /// Directory for the PNG files (created if needed).
        #[arg(long, value_name = "DIR")]
        out: PathBuf,
        /// Comma-separated output times (fs) within the file's range; a time between
        /// outputs is drawn at the nearest one, with a note; default: first, middle, last.
        #[arg(long, value_delimiter = ',')]
        times: Option<Vec<f64>>,
        /// A second file (e.g. reference.h5) drawn on the same axes: density, norm,
        /// transmitted norm, energy.
        #[arg(long, value_name = "B.h5")]
        against: Option<PathBuf>,
        /// Limit every map (Wigner function, pair density) to XMIN ≤ x ≤ XMAX (nm), e.g.
        /// --window=-40:40; default: the whole domain for the Wigner function, the window
        /// holding 99 % of ∫|n₂| for the pair density.
        #[arg(long, value_name = "XMIN:XMAX", allow_hyphen_values = true)]
        window: Option<String>,
    },
    /// Print what a result or checkpoint file holds.
    Inspect {
        /// A result file or a checkpoint.
        file: PathBuf,
        /// Print only the output times (fs), one per line.
        #[arg(long)]
        times: bool,
    },
    /// Combine runs of one job with different seeds (e.g. a cluster job array) into one
    /// result whose error bars come from all error groups of all runs.
    Merge {
        /// Result files or run directories (at least two).
        #[arg(required = true, num_args = 2..)]
        runs: Vec<PathBuf>,
        /// Directory for the merged result (DIR/observables.h5, DIR/job.toml).
        #[arg(long, value_name = "DIR")]
        out: PathBuf,
        /// Write into a non-empty DIR (overwrites DIR/observables.h5).
        #[arg(long)]
        force: bool,
    },
    /// Strong and weak scaling series: launch `run` at several rank counts, write CSV and PNG.
    Scaling(signfold::study::scaling::Options),
    /// Measure the Monte Carlo against the exact reference over particle counts and
    /// coherence lengths for the demo jobs (see docs/accuracy.md).
    Accuracy(signfold::study::accuracy::Options),
    /// Run the validation jobs (jobs/validation/) and compare each with the exact
    /// reference; writes VALIDATION.md, a CSV and a figure; exit 1 when a check fails.
    Validate(signfold::study::validate::Options),
}

/// Entry point of the binary.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    signfold::engine::stop::ignore_file_size_signal();
    let parallel = matches!(
        cli.command,
        Command::Check { .. } | Command::Run { .. } | Command::Resume { .. }
    );
    if !parallel {
        if launcher_rank() > 0 {
            return ExitCode::SUCCESS;
        }
        return match serial(cli.command) {
            Ok(code) => code,
            Err(e) => {
                eprintln!("signfold: error: {e:#}");
                ExitCode::from(2)
            }
        };
    }
    let Some(universe) = mpi::initialize() else {
        eprintln!("signfold: error: MPI could not be initialised");
        return ExitCode::from(2);
    };
    let world = World::new(universe.world());
    let root = world.is_root();
    match engine_command(cli.command, &world) {
        Ok(code) => code,
        Err(e) => {
            // Collective errors are printed once, by rank 0; a rank-local error is printed
            // by its rank.
            if e.downcast_ref::<signfold::SilentError>().is_none()
                && (root || world.size() == 1 || !is_collective(&e))
            {
                if world.size() > 1 && !root {
                    eprintln!("signfold: error (rank {}): {e:#}", world.rank());
                } else {
                    eprintln!("signfold: error: {e:#}");
                }
            }
            ExitCode::from(2)
        }
    }
}

/// This process's rank as the MPI launcher announced it (0 without a launcher). Read from
/// the variables the common launchers set (Open MPI, PMIx, PMI-1/2 as used by MPICH, Intel
/// MPI and Slurm's srun, MVAPICH), because the serial tools do not initialise MPI.
fn launcher_rank() -> u64 {
    [
        "OMPI_COMM_WORLD_RANK",
        "PMIX_RANK",
        "PMI_RANK",
        "MV2_COMM_WORLD_RANK",
    ]
    .iter()
    .find_map(|v| std::env::var(v).ok().and_then(|s| s.parse().ok()))
    .unwrap_or(0)
}

/// Errors every rank reaches together (job validation, collective checks).
fn is_collective(e: &anyhow::Error) -> bool {
    e.downcast_ref::<Collective>().is_some()
}

/// Marks an error that all ranks raise identically.
#[derive(Debug)]
struct Collective(String);

impl std::fmt::Display for Collective {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for Collective {}

fn collective<T>(r: anyhow::Result<T>) -> anyhow::Result<T> {
    r.map_err(|e| Collective(format!("{e:#}")).into())
}

/// `--set` with `--samples N` (or its old spelling `--particles N`, warned about on rank 0).
fn with_samples(
    mut set: Vec<String>,
    samples: Option<u64>,
    particles: Option<u64>,
    root: bool,
) -> Vec<String> {
    if particles.is_some() && root {
        warn_old_option("--particles", "--samples");
    }
    if let Some(n) = samples.or(particles) {
        set.push(format!("numerics.samples={n}"));
    }
    set
}

/// The warning for an option renamed in format version 2 (the old spelling still works).
pub fn warn_old_option(old: &str, new: &str) {
    eprintln!(
        "signfold: warning: {old} is the old name of {new} (renamed in format version 2); read as {new} for now, use {new}"
    );
}

/// The deprecation warnings of a loaded job, one line each on stderr.
pub fn warn_job(job: &signfold::config::job::LoadedJob) {
    for w in &job.warnings {
        eprintln!("signfold: warning: {w}");
    }
}

/// One rayon pool per rank: `--threads`, or this node's cores shared among the ranks on
/// the node (a node-local communicator split, so any MPI implementation works).
fn configure_threads(threads: Option<usize>, world: &World) -> anyhow::Result<()> {
    let local_ranks = world.ranks_on_node().max(1);
    let cores = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1);
    if threads == Some(0) {
        anyhow::bail!("--threads 0: at least 1 thread per rank is needed");
    }
    let n = threads.unwrap_or((cores / local_ranks).max(1));
    rayon::ThreadPoolBuilder::new()
        .num_threads(n)
        .build_global()
        .map_err(|e| anyhow::anyhow!("thread pool: {e}"))
}

fn engine_command(cmd: Command, world: &World) -> anyhow::Result<ExitCode> {
    match cmd {
        Command::Check {
            job,
            set,
            samples,
            particles,
        } => {
            configure_threads(None, world)?;
            let set = with_samples(set, samples, particles, world.is_root());
            check::command(&job, &set, world)
        }
        Command::Run {
            job,
            out,
            set,
            samples,
            particles,
            force,
            until,
            walltime,
            threads,
            systematic,
        } => {
            collective(configure_threads(threads, world))?;
            let opts = run::RunArgs {
                job,
                out,
                set: with_samples(set, samples, particles, world.is_root()),
                force,
                until,
                walltime,
                systematic,
            };
            run::run(opts, world)
        }
        Command::Resume {
            dir,
            until,
            walltime,
            threads,
        } => {
            collective(configure_threads(threads, world))?;
            run::resume(&dir, until, walltime, world)
        }
        _ => unreachable!("serial commands are dispatched by `serial`"),
    }
}

fn serial(cmd: Command) -> anyhow::Result<ExitCode> {
    match cmd {
        Command::Plot {
            file,
            out,
            times,
            against,
            window,
        } => plot::command(
            &file,
            &out,
            times.as_deref(),
            against.as_deref(),
            window.as_deref(),
        ),
        Command::Inspect { file, times } => inspect::command(&file, times),
        Command::Merge { runs, out, force } => merge::command(&runs, &out, force),
        Command::Reference {
            job,
            out,
            set,
            force,
            points,
            dt,
        } => reference::command(&job, &out, &set, force, points, dt),
        Command::Scaling(opts) => scaling::command(&opts),
        Command::Accuracy(opts) => accuracy::command(&opts),
        Command::Validate(opts) => validate::command(&opts),
        Command::Compare { a, b, tolerance } => compare::command(&a, &b, tolerance),
        Command::Check { .. } | Command::Run { .. } | Command::Resume { .. } => {
            unreachable!("engine commands are dispatched by `engine_command`")
        }
    }
}
