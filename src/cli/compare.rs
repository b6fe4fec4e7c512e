//! `signfold compare`: distances between two result files, exit 1 above a tolerance.

use std::io::Write as _;
use std::path::Path;
use std::process::ExitCode;

pub fn command(a: &Path, b: &Path, tolerance: Option<f64>) -> anyhow::Result<ExitCode> {
    if let Some(t) = tolerance
        && !(t.is_finite() && t >= 0.0)
    {
        anyhow::bail!("--tolerance {t}: expected a finite number ≥ 0");
    }
    let (text, ok) = signfold::analysis::compare::compare(a, b, tolerance)?;
    // A closed stdout (e.g. piped into `head`) is not an error of the comparison.
    let _ = write!(std::io::stdout(), "{text}");
    Ok(if ok {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}
