//! The `signfold` command line: thin wrappers around the library.
#![allow(clippy::needless_range_loop)]

use clap::{Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

use signfold::comm::{Comm, World};
use signfold::setup::Setup;
use signfold::{check, job, run};

#[derive(Parser)]
#[command(
    name = "signfold",
    version,
    about = "Signed-particle Wigner Monte Carlo for a few interacting particles"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Validate a job and print its derived numerics, without running.
    Check {
        job: PathBuf,
        /// Override a job key (repeatable), e.g. --set numerics.particles=200000
        #[arg(long = "set", value_name = "KEY=VALUE")]
        set: Vec<String>,
        /// Shortcut for --set numerics.particles=N
        #[arg(long)]
        particles: Option<u64>,
    },
    /// Run a job, writing DIR/observables.h5.
    Run {
        job: PathBuf,
        #[arg(long)]
        out: PathBuf,
        #[arg(long = "set", value_name = "KEY=VALUE")]
        set: Vec<String>,
        #[arg(long)]
        particles: Option<u64>,
        /// Overwrite results already in DIR.
        #[arg(long)]
        force: bool,
        /// Stop at the first synchronisation time ≥ T (fs).
        #[arg(long, value_name = "T_FS")]
        until: Option<f64>,
        /// Stop with a checkpoint before this much wall time has passed (HH:MM or HH:MM:SS).
        #[arg(long, value_name = "HH:MM")]
        walltime: Option<String>,
        /// rayon threads per rank (default: all cores / ranks on this node).
        #[arg(long)]
        threads: Option<usize>,
    },
    /// Continue a run from the newest valid checkpoint in DIR, on any number of ranks.
    Resume {
        dir: PathBuf,
        /// Stop again at the first synchronisation time ≥ T (fs).
        #[arg(long, value_name = "T_FS")]
        until: Option<f64>,
        #[arg(long, value_name = "HH:MM")]
        walltime: Option<String>,
        #[arg(long)]
        threads: Option<usize>,
    },
    /// Solve the job exactly on a grid (N ≤ 3), writing DIR/reference.h5.
    Reference {
        job: PathBuf,
        #[arg(long)]
        out: PathBuf,
        #[arg(long = "set", value_name = "KEY=VALUE")]
        set: Vec<String>,
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
        a: PathBuf,
        b: PathBuf,
        /// Exit 1 when a density distance exceeds X (relative L1).
        #[arg(long)]
        tolerance: Option<f64>,
    },
    /// Write PNG pictures of a result file.
    Plot {
        file: PathBuf,
        #[arg(long)]
        out: PathBuf,
        /// Comma-separated output times (fs); default: first, middle, last.
        #[arg(long, value_delimiter = ',')]
        times: Option<Vec<f64>>,
        /// A second file (e.g. reference.h5) drawn on the same axes.
        #[arg(long)]
        against: Option<PathBuf>,
    },
    /// Print what a result or checkpoint file holds.
    Inspect { file: PathBuf },
    /// Strong and weak scaling series: launch `run` at several rank counts, write CSV and PNG.
    Scaling(signfold::scaling::Options),
    /// Measure the Monte Carlo against the exact reference over particle counts and
    /// coherence lengths for the demo jobs (see docs/accuracy.md).
    Accuracy(signfold::accuracy::Options),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    run::ignore_file_size_signal();
    if matches!(cli.command, Command::Scaling(_)) {
        signfold::scaling::save_starting_environment();
    }
    let Some(universe) = mpi::initialize() else {
        eprintln!("signfold: error: MPI could not be initialised");
        return ExitCode::from(2);
    };
    let world = World::new(universe.world());
    let root = world.is_root();
    match dispatch(cli.command, &world) {
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

fn with_particles(mut set: Vec<String>, particles: Option<u64>) -> Vec<String> {
    if let Some(n) = particles {
        set.push(format!("numerics.particles={n}"));
    }
    set
}

fn configure_threads(threads: Option<usize>) -> anyhow::Result<()> {
    let local_ranks: usize = std::env::var("OMPI_COMM_WORLD_LOCAL_SIZE")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(1);
    let cores = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1);
    let n = threads.unwrap_or((cores / local_ranks.max(1)).max(1));
    rayon::ThreadPoolBuilder::new()
        .num_threads(n)
        .build_global()
        .map_err(|e| anyhow::anyhow!("thread pool: {e}"))
}

fn dispatch(cmd: Command, world: &World) -> anyhow::Result<ExitCode> {
    // The serial tools run on rank 0 only, so that under mpirun they neither race on their
    // output files nor print twice.
    let serial = matches!(
        cmd,
        Command::Reference { .. }
            | Command::Compare { .. }
            | Command::Plot { .. }
            | Command::Inspect { .. }
            | Command::Scaling(_)
            | Command::Accuracy(_)
    );
    if serial && !world.is_root() {
        return Ok(ExitCode::SUCCESS);
    }
    match cmd {
        Command::Check {
            job,
            set,
            particles,
        } => {
            configure_threads(None)?;
            let loaded = collective(job::load(&job, &with_particles(set, particles)))?;
            let setup = collective(Setup::new(&loaded))?;
            let text = collective(check::report(&setup, world.size()))?;
            if world.is_root() {
                print!("{text}");
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Run {
            job,
            out,
            set,
            particles,
            force,
            until,
            walltime,
            threads,
        } => {
            configure_threads(threads)?;
            run::install_signals()?;
            let walltime = collective(walltime.as_deref().map(run::parse_walltime).transpose())?;
            let loaded = collective(job::load(&job, &with_particles(set, particles)))?;
            let setup = collective(Setup::new(&loaded))?;
            let opts = run::RunOptions {
                out,
                force,
                until,
                walltime,
            };
            collective(run::run(&loaded, &setup, &opts, world))?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Resume {
            dir,
            until,
            walltime,
            threads,
        } => {
            configure_threads(threads)?;
            run::install_signals()?;
            let walltime = collective(walltime.as_deref().map(run::parse_walltime).transpose())?;
            collective(run::resume(&dir, until, walltime, world))?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Plot {
            file,
            out,
            times,
            against,
        } => {
            for path in signfold::plot::plot(&file, &out, times.as_deref(), against.as_deref())? {
                println!("{}", path.display());
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Inspect { file } => {
            print!("{}", signfold::inspect::inspect(&file)?);
            Ok(ExitCode::SUCCESS)
        }
        Command::Reference {
            job,
            out,
            set,
            force,
            points,
            dt,
        } => {
            let opts = signfold::reference::ReferenceOptions {
                points_per_axis: points,
                dt,
            };
            signfold::reference::command(&job, &out, &set, force, &opts)?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Scaling(opts) => {
            for path in signfold::scaling::drive(&opts)? {
                println!("{}", path.display());
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Accuracy(opts) => {
            for path in signfold::accuracy::command(&opts)? {
                println!("wrote {}", path.display());
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Compare { a, b, tolerance } => {
            let ok = signfold::compare::compare(&a, &b, tolerance)?;
            Ok(if ok {
                ExitCode::SUCCESS
            } else {
                ExitCode::from(1)
            })
        }
    }
}
