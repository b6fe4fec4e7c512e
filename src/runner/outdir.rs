//! Output-directory policy: results are never overwritten without `--force`.

use crate::io::names;
use anyhow::{Result, bail};
use std::path::Path;

/// Refuse to overwrite results unless forced; create the directory.
pub fn prepare_out(dir: &Path, force: bool) -> Result<()> {
    if dir.exists() && !dir.is_dir() {
        bail!("--out {}: exists and is not a directory", dir.display());
    }
    let obs = dir.join(names::OBSERVABLES_FILE);
    if obs.exists() && !force {
        bail!(
            "--out {}: already holds results ({}); choose another directory or pass --force to overwrite them",
            dir.display(),
            obs.display()
        );
    }
    std::fs::create_dir_all(dir)
        .map_err(|e| anyhow::anyhow!("--out {}: cannot create directory: {e}", dir.display()))?;
    Ok(())
}
