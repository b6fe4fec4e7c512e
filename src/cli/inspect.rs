//! `signfold inspect`: what a result or checkpoint file holds.

use std::path::Path;
use std::process::ExitCode;

pub fn command(file: &Path) -> anyhow::Result<ExitCode> {
    print!("{}", signfold::io::inspect::inspect(file)?);
    Ok(ExitCode::SUCCESS)
}
