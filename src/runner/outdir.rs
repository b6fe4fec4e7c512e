//! Output-directory policy: results are never overwritten without `--force`; one run at a
//! time works in a directory (a lock file).

use crate::io::names;
use anyhow::{Result, bail};
use std::io::Write as _;
use std::path::{Path, PathBuf};

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
    crate::io::results::probe_writable(dir)
}

/// The lock of an output directory, held by rank 0 of the run or resume working in it;
/// removed when dropped.
#[derive(Debug)]
pub struct DirLock {
    path: PathBuf,
}

impl Drop for DirLock {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.path);
    }
}

/// Who holds a lock: host, process id and the process's start time (clock ticks after
/// boot, from /proc; guards against a reused pid).
#[derive(Debug, Clone, PartialEq, Eq)]
struct Holder {
    host: String,
    pid: i32,
    start: Option<u64>,
}

impl Holder {
    fn me() -> Self {
        let pid = std::process::id() as i32;
        Holder {
            host: host_name(),
            pid,
            start: start_ticks(pid),
        }
    }

    fn text(&self) -> String {
        let mut s = format!("host={}\npid={}\n", self.host, self.pid);
        if let Some(t) = self.start {
            s.push_str(&format!("start={t}\n"));
        }
        s
    }

    fn parse(text: &str) -> Option<Self> {
        let field = |k: &str| {
            text.lines()
                .find_map(|l| l.strip_prefix(k)?.strip_prefix('='))
                .map(str::trim)
        };
        Some(Holder {
            host: field("host")?.to_string(),
            pid: field("pid")?.parse().ok()?,
            start: field("start").and_then(|t| t.parse().ok()),
        })
    }

    /// Whether the holder is certainly gone: same host and no live process with its pid
    /// and start time (a zombie counts as gone).
    fn gone(&self) -> bool {
        if self.host != host_name() || self.pid <= 0 {
            return false;
        }
        let stat = format!("/proc/{}/stat", self.pid);
        if Path::new("/proc/self/stat").exists() {
            let Ok(text) = std::fs::read_to_string(stat) else {
                return true;
            };
            let fields = stat_fields(&text);
            let zombie = fields.first().is_some_and(|s| *s == "Z" || *s == "X");
            let restarted = match (self.start, fields.get(19).and_then(|t| t.parse().ok())) {
                (Some(a), Some(b)) => a != b,
                _ => false,
            };
            return zombie || restarted;
        }
        // SAFETY: signal 0 only checks that the process exists.
        let r = unsafe { libc::kill(self.pid, 0) };
        r != 0 && std::io::Error::last_os_error().raw_os_error() == Some(libc::ESRCH)
    }
}

/// Fields of /proc/PID/stat after the command name (state first).
fn stat_fields(text: &str) -> Vec<&str> {
    text.rsplit_once(')')
        .map(|(_, rest)| rest.split_whitespace().collect())
        .unwrap_or_default()
}

fn start_ticks(pid: i32) -> Option<u64> {
    let text = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    stat_fields(&text).get(19)?.parse().ok()
}

/// This machine's host name.
pub fn host_name() -> String {
    let mut buf = [0u8; 256];
    // SAFETY: the buffer is valid for its length; gethostname NUL-terminates within it or
    // truncates, and we stop at the first NUL.
    let r = unsafe { libc::gethostname(buf.as_mut_ptr() as *mut libc::c_char, buf.len()) };
    if r != 0 {
        return "unknown".to_string();
    }
    let end = buf.iter().position(|&b| b == 0).unwrap_or(buf.len());
    String::from_utf8_lossy(&buf[..end]).into_owned()
}

/// Take the lock of `dir` (created atomically). A lock whose holder is gone from this host
/// is replaced; the returned note says so. A live holder, or one on another host, is an
/// error naming it.
pub fn lock_dir(dir: &Path) -> Result<(DirLock, Option<String>)> {
    let path = dir.join(names::LOCK_FILE);
    let me = Holder::me();
    let mut note = None;
    for _ in 0..3 {
        match std::fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&path)
        {
            Ok(mut f) => {
                let lock = DirLock { path: path.clone() };
                f.write_all(me.text().as_bytes())
                    .and_then(|_| f.sync_all())
                    .map_err(|e| {
                        anyhow::anyhow!("{}: cannot write the lock file: {e}", path.display())
                    })?;
                return Ok((lock, note));
            }
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {
                let text = std::fs::read_to_string(&path).unwrap_or_default();
                match Holder::parse(&text) {
                    Some(h) if h.gone() => {
                        let _ = std::fs::remove_file(&path);
                        note = Some(format!(
                            "{}: removed a stale lock (process {} on {} is no longer running)",
                            path.display(),
                            h.pid,
                            h.host
                        ));
                    }
                    Some(h) => bail!(
                        "{}: in use by another signfold run (host {}, pid {}; lock file {}); wait for it to end, \
                         or delete the lock file if that process is gone",
                        dir.display(),
                        h.host,
                        h.pid,
                        path.display()
                    ),
                    None => bail!(
                        "{}: in use by another signfold run (lock file {} exists but names no holder yet); \
                         delete it if no run is working in this directory",
                        dir.display(),
                        path.display()
                    ),
                }
            }
            Err(e) => bail!("{}: cannot create the lock file: {e}", path.display()),
        }
    }
    bail!(
        "{}: could not take the lock {}",
        dir.display(),
        path.display()
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn holder_round_trips_and_this_process_is_alive() {
        let me = Holder::me();
        assert_eq!(Holder::parse(&me.text()), Some(me.clone()));
        assert!(!me.gone());
        let other_host = Holder {
            host: format!("{}-elsewhere", me.host),
            ..me.clone()
        };
        assert!(
            !other_host.gone(),
            "a holder on another host is never presumed gone"
        );
    }
}
