//! Stop requests: signals (SIGUSR1, SIGTERM, SIGINT) and wall-time limits. A stop acts at
//! a synchronisation time only, with a checkpoint, and never changes the trajectory.

use anyhow::{Result, bail};

/// Stop requests from SIGUSR1, SIGTERM and SIGINT (a second SIGINT ends the process).
static STOP: std::sync::OnceLock<std::sync::Arc<std::sync::atomic::AtomicBool>> =
    std::sync::OnceLock::new();

/// Install the stop signals. Called once by the command line.
pub fn install_signals() -> Result<()> {
    use signal_hook::consts::{SIGINT, SIGTERM, SIGUSR1};
    let flag = std::sync::Arc::new(std::sync::atomic::AtomicBool::new(false));
    signal_hook::flag::register_conditional_shutdown(SIGINT, 130, flag.clone())?;
    for sig in [SIGUSR1, SIGTERM, SIGINT] {
        signal_hook::flag::register(sig, flag.clone())?;
    }
    let _ = STOP.set(flag);
    Ok(())
}

/// Ignore SIGXFSZ, so that a file-size limit makes writes fail with an error instead of
/// killing the process. Called first thing, before MPI starts.
pub fn ignore_file_size_signal() {
    // SAFETY: setting a signal disposition to SIG_IGN has no other effect.
    unsafe {
        libc::signal(libc::SIGXFSZ, libc::SIG_IGN);
    }
}

pub fn stop_requested() -> bool {
    STOP.get()
        .is_some_and(|f| f.load(std::sync::atomic::Ordering::Relaxed))
}

/// Parse HH:MM or HH:MM:SS.
pub fn parse_walltime(s: &str) -> Result<std::time::Duration> {
    let parts: Vec<&str> = s.split(':').collect();
    let nums: Option<Vec<u64>> = parts.iter().map(|p| p.parse().ok()).collect();
    if let Some(v) = &nums
        && v.iter().skip(1).any(|&x| x >= 60)
    {
        bail!("--walltime {s}: minutes and seconds must be below 60");
    }
    match (parts.len(), nums) {
        (2, Some(v)) => Ok(std::time::Duration::from_secs(v[0] * 3600 + v[1] * 60)),
        (3, Some(v)) => Ok(std::time::Duration::from_secs(
            v[0] * 3600 + v[1] * 60 + v[2],
        )),
        _ => bail!("--walltime {s}: expected HH:MM or HH:MM:SS"),
    }
}
