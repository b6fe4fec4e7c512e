//! `signfold reference`: the exact grid solution of a job (N ≤ 3).

use signfold::io::names;
use signfold::reference::{Progress, ReferenceOptions, plan, solve_with};
use std::io::Write as _;
use std::path::Path;
use std::process::ExitCode;

/// Load the job, refuse to overwrite DIR/reference.h5 unless `force`, solve, write the
/// file atomically. Prints the plan and progress to stdout.
pub fn command(
    job: &Path,
    out: &Path,
    overrides: &[String],
    force: bool,
    points: Option<usize>,
    dt: Option<f64>,
) -> anyhow::Result<ExitCode> {
    let opts = ReferenceOptions {
        points_per_axis: points,
        dt,
    };
    let loaded = signfold::physics::defaults::load(job, overrides)?;
    super::warn_job(&loaded);
    let target = out.join(names::REFERENCE_FILE);
    if target.exists() && !force {
        anyhow::bail!(
            "{} already exists: pass --force to overwrite it",
            target.display()
        );
    }
    // A closed stdout (e.g. piped into `head`) must not stop the solver.
    let say = |text: String| {
        let _ = writeln!(std::io::stdout(), "{text}");
    };
    let p = plan(&loaded, &opts)?;
    say(p.to_string());
    std::fs::create_dir_all(out)
        .map_err(|e| anyhow::anyhow!("cannot create {}: {e}", out.display()))?;
    signfold::io::results::probe_writable(out)?;
    let started = std::time::Instant::now();
    let file = solve_with(&loaded, &opts, &mut |pr| match pr {
        Progress::Warning(w) => eprintln!("signfold: warning: {w}"),
        Progress::Output {
            time,
            end_time,
            norm,
            energy,
        } => say(format!(
            "t = {:>9.3} / {} fs   norm inside {:.8}   energy {:.8} eV   ({:.1} s)",
            time,
            end_time,
            norm,
            energy,
            started.elapsed().as_secs_f64()
        )),
    })?;
    file.write_atomic(&target)?;
    say(format!("wrote {}", target.display()));
    Ok(ExitCode::SUCCESS)
}
