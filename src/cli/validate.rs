//! `signfold validate`: the validation suite against the exact reference; exit 1 when a
//! check fails.

use signfold::study::validate;
use std::process::ExitCode;

pub fn command(opts: &validate::Options) -> anyhow::Result<ExitCode> {
    let (paths, ok) = validate::command(opts, &mut |line| println!("{line}"))?;
    for path in paths {
        println!("wrote {}", path.display());
    }
    if ok {
        println!("validation: every check passed");
        Ok(ExitCode::SUCCESS)
    } else {
        println!("validation: some checks failed (see the report)");
        Ok(ExitCode::from(1))
    }
}
