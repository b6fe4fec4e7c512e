//! The `signfold` command line: thin wrappers around the library.

use clap::{Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

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
        /// rayon threads per rank (default: all cores / ranks on this node).
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
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match dispatch(cli.command) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("signfold: error: {e:#}");
            ExitCode::from(2)
        }
    }
}

fn dispatch(cmd: Command) -> anyhow::Result<ExitCode> {
    match cmd {
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
        Command::Compare { a, b, tolerance } => {
            let ok = signfold::compare::compare(&a, &b, tolerance)?;
            Ok(if ok {
                ExitCode::SUCCESS
            } else {
                ExitCode::from(1)
            })
        }
        _ => anyhow::bail!("not implemented yet"),
    }
}
