//! `signfold accuracy`: the Monte Carlo against the exact reference over particle counts
//! and coherence lengths (docs/accuracy.md).

use signfold::study::accuracy;
use std::process::ExitCode;

pub fn command(opts: &accuracy::Options) -> anyhow::Result<ExitCode> {
    for path in accuracy::command(opts, &mut |line| println!("{line}"))? {
        println!("wrote {}", path.display());
    }
    Ok(ExitCode::SUCCESS)
}
