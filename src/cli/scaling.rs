//! `signfold scaling`: strong, weak and threads series launched through the MPI launcher.

use signfold::study::scaling;
use std::process::ExitCode;

pub fn command(opts: &scaling::Options) -> anyhow::Result<ExitCode> {
    if opts.particles.is_some() {
        super::warn_old_option("--particles", "--samples");
    }
    if opts.mode == scaling::Mode::Both {
        super::warn_old_option("--mode both", "--mode strong-weak");
    }
    scaling::save_starting_environment();
    for path in scaling::drive(opts, &mut |line| println!("{line}"))? {
        println!("{}", path.display());
    }
    Ok(ExitCode::SUCCESS)
}
