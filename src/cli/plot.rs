//! `signfold plot`: PNG pictures of a result file; prints the paths written.

use std::path::Path;
use std::process::ExitCode;

pub fn command(
    file: &Path,
    out: &Path,
    times: Option<&[f64]>,
    against: Option<&Path>,
    window: Option<&str>,
) -> anyhow::Result<ExitCode> {
    let window = window.map(signfold::viz::plot::Window::parse).transpose()?;
    let plotted = signfold::viz::plot::plot(file, out, times, against, window)?;
    for note in &plotted.notes {
        eprintln!("signfold: note: {note}");
    }
    for path in plotted.paths {
        println!("{}", path.display());
    }
    Ok(ExitCode::SUCCESS)
}
