//! `signfold merge`: combine runs of one job with different seeds into one result.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

pub fn command(runs: &[PathBuf], out: &Path, force: bool) -> anyhow::Result<ExitCode> {
    let (path, merged) = signfold::analysis::merge::merge_into(runs, out, force)?;
    let groups: u64 = merged.runs.iter().map(|r| r.groups as u64).sum();
    let samples: u64 = merged.runs.iter().map(|r| r.samples).sum();
    for r in &merged.runs {
        println!(
            "{}: seed {}, {} samples, {} groups",
            r.path.display(),
            r.seed,
            r.samples,
            r.groups
        );
    }
    println!(
        "signfold: merged {} runs ({samples} samples, {groups} error groups in all); wrote {}",
        merged.runs.len(),
        path.display()
    );
    Ok(ExitCode::SUCCESS)
}
