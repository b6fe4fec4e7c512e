//! `signfold inspect`: what a result or checkpoint file holds, or its output times.

use std::path::Path;
use std::process::ExitCode;

pub fn command(file: &Path, times: bool) -> anyhow::Result<ExitCode> {
    if times {
        for t in signfold::io::inspect::output_times(file)? {
            println!("{t}");
        }
    } else {
        print!("{}", signfold::io::inspect::inspect(file)?);
    }
    Ok(ExitCode::SUCCESS)
}
