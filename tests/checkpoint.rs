//! Checkpoints and restart: identical results after a stop and resume on any rank count,
//! after kill -9 at random moments, with damaged newest checkpoints, and clean failures
//! when writes fail. (Contracts of the engine, no outside source.)

mod common;

use common::*;
use signfold::io::results::ResultFile;
use std::os::unix::process::CommandExt;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

/// The barrier demo, small: kernel events, annihilation and absorption all happen.
const SMALL: [&str; 8] = [
    "--samples",
    "20000",
    "--set",
    "numerics.end_time=40",
    "--set",
    "output.x_bins=40",
    "--set",
    "output.k_bins=20",
];

fn args<'a>(cmd: &'a str, job: &'a str, out: &'a str, extra: &[&'a str]) -> Vec<&'a str> {
    let mut v = vec![cmd, job, "--out", out];
    v.extend_from_slice(&SMALL);
    v.extend_from_slice(extra);
    v
}

fn job() -> String {
    demo("barrier-packet.toml").to_str().unwrap().to_string()
}

fn results(dir: &Path) -> ResultFile {
    ResultFile::read(&dir.join("observables.h5")).unwrap()
}

/// Every dataset outside /run is identical bit for bit. (The job texts differ where a run
/// asked for checkpoints: that must not matter.)
fn assert_same(a: &ResultFile, b: &ResultFile, what: &str) {
    assert_same_datasets(a, b, what);
}

fn uninterrupted(tmp: &Path) -> ResultFile {
    let out = tmp.join("full");
    ok(&signfold(&args("run", &job(), out.to_str().unwrap(), &[])));
    results(&out)
}

fn checkpoints(dir: &Path) -> Vec<PathBuf> {
    signfold::io::checkpoint::list(dir)
        .into_iter()
        .map(|s| signfold::io::checkpoint::particle_path(dir, s))
        .collect()
}

#[test]
fn resume_continues_bit_identically_on_any_rank_count() {
    let tmp = tempfile::tempdir().unwrap();
    let full = uninterrupted(tmp.path());
    // 1 rank → 1 rank, 2 → 1, 1 → 3.
    for (first, second) in [(1, 1), (2, 1), (1, 3)] {
        let out = tmp.path().join(format!("part-{first}-{second}"));
        let o = out.to_str().unwrap();
        let j = job();
        let a = args("run", &j, o, &["--until", "20"]);
        ok(&if first == 1 {
            signfold(&a)
        } else {
            mpirun(first, &a)
        });
        assert_eq!(checkpoints(&out).len(), 1, "a checkpoint at t = 20");
        let partial = results(&out);
        assert_eq!(*partial.times().last().unwrap(), 20.0);
        let r = ["resume", o];
        ok(&if second == 1 {
            signfold(&r)
        } else {
            mpirun(second, &r)
        });
        assert_same(
            &full,
            &results(&out),
            &format!("{first} rank(s), then {second}"),
        );
    }
}

/// kill -9 of the whole mpirun process group at random moments of a run that checkpoints
/// at every other step: resume always succeeds and ends with the uninterrupted results.
#[test]
fn kill_nine_at_random_moments_loses_nothing() {
    let tmp = tempfile::tempdir().unwrap();
    let full = uninterrupted(tmp.path());
    let mut state: u64 = 0x2545_f491_4f6c_dd1d;
    let mut rand = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        state
    };
    for trial in 0..10 {
        let out = tmp.path().join(format!("killed-{trial}"));
        let o = out.to_str().unwrap().to_string();
        let mut cmd = Command::new("mpirun");
        cmd.args(["-np", "2", "--oversubscribe", bin()])
            .args(args(
                "run",
                &job(),
                &o,
                &["--set", "checkpoint.every=2", "--set", "checkpoint.keep=2"],
            ))
            .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
            .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .process_group(0);
        let mut child = cmd.spawn().unwrap();
        // Wait for the first checkpoint, then a random further delay.
        let t0 = Instant::now();
        while checkpoints(&out).is_empty() && t0.elapsed() < Duration::from_secs(60) {
            std::thread::sleep(Duration::from_millis(5));
        }
        std::thread::sleep(Duration::from_millis(rand() % 1500));
        // SAFETY: sending a signal to the child's own process group.
        unsafe {
            libc::kill(-(child.id() as i32), libc::SIGKILL);
        }
        let _ = child.wait();
        // Open MPI starts the ranks in process groups of their own, so they outlive the
        // killed mpirun by a second or two. A crash of the job kills them too: do so for
        // the rank that holds the output directory's lock (the one process that could
        // still write there), and wait until it is gone.
        if let Ok(lock) = std::fs::read_to_string(out.join("signfold.lock"))
            && let Some(pid) = lock
                .lines()
                .find_map(|l| l.strip_prefix("pid="))
                .and_then(|p| p.trim().parse::<i32>().ok())
        {
            // SAFETY: signals to a rank of the job this test started.
            unsafe {
                libc::kill(pid, libc::SIGKILL);
            }
            let t0 = Instant::now();
            while unsafe { libc::kill(pid, 0) } == 0 && t0.elapsed() < Duration::from_secs(30) {
                std::thread::sleep(Duration::from_millis(10));
            }
        }
        assert!(
            !checkpoints(&out).is_empty(),
            "trial {trial}: no checkpoint was written"
        );
        // The files of a killed run stay readable by the standard tools.
        for f in [checkpoints(&out)[0].clone(), out.join("observables.h5")] {
            let h = Command::new("h5dump")
                .args(["-H", f.to_str().unwrap()])
                .output()
                .unwrap();
            assert!(
                h.status.success(),
                "trial {trial}: h5dump -H {} failed",
                f.display()
            );
        }
        let ranks = 1 + trial % 2;
        let r = ["resume", o.as_str()];
        ok(&if ranks == 1 {
            signfold(&r)
        } else {
            mpirun(ranks, &r)
        });
        assert_same(&full, &results(&out), &format!("trial {trial}"));
    }
}

/// A truncated and a bit-flipped newest checkpoint are detected and the older one is used;
/// with none valid the message says so.
#[test]
fn damaged_checkpoints_fall_back_to_older_ones() {
    let tmp = tempfile::tempdir().unwrap();
    let full = uninterrupted(tmp.path());
    for damage in ["truncate", "flip"] {
        let out = tmp.path().join(damage);
        let o = out.to_str().unwrap();
        ok(&signfold(&args(
            "run",
            &job(),
            o,
            &[
                "--until",
                "24",
                "--set",
                "checkpoint.every=8",
                "--set",
                "checkpoint.keep=3",
            ],
        )));
        let cps = checkpoints(&out);
        assert_eq!(cps.len(), 3, "checkpoints at 8, 16 and 24 fs");
        let newest = &cps[0];
        let mut bytes = std::fs::read(newest).unwrap();
        if damage == "truncate" {
            bytes.truncate(bytes.len() / 2);
        } else {
            // A byte inside the particle data (the datasets fill the end of the file).
            let at = bytes.len() - bytes.len() / 5;
            bytes[at] ^= 0x10;
        }
        std::fs::write(newest, &bytes).unwrap();
        let res = signfold(&["resume", o]);
        ok(&res);
        let err = String::from_utf8_lossy(&res.stderr);
        assert!(
            err.contains("not usable") && err.contains("0000000024"),
            "{damage}: the damage is reported: {err}"
        );
        assert_same(&full, &results(&out), damage);
    }
    // None valid.
    let out = tmp.path().join("none");
    let o = out.to_str().unwrap();
    ok(&signfold(&args("run", &job(), o, &["--until", "8"])));
    for c in checkpoints(&out) {
        std::fs::write(&c, b"not a checkpoint").unwrap();
    }
    let res = signfold(&["resume", o]);
    assert_eq!(res.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&res.stderr).contains("no valid checkpoint"));
}

/// A write that fails (file-size limit; a path blocked by another file) is a clear error on
/// every rank, leaves the previous checkpoint intact, and ends the run.
#[test]
fn failed_writes_are_clean_errors() {
    let tmp = tempfile::tempdir().unwrap();
    let full = uninterrupted(tmp.path());
    // File-size limit (ulimit -f, in KiB blocks): the particle count grows, and so do the
    // checkpoints, until one no longer fits. Two ranks, both limited.
    let out = tmp.path().join("limited");
    let o = out.to_str().unwrap();
    let inner = args(
        "run",
        &job(),
        o,
        &["--set", "checkpoint.every=2", "--set", "checkpoint.keep=1"],
    )
    .join(" ");
    let t0 = Instant::now();
    // The limit is set inside each rank (mpirun's own shared-memory files must not hit it).
    let res = Command::new("mpirun")
        .args([
            "-np",
            "2",
            "--oversubscribe",
            "bash",
            "-c",
            &format!("ulimit -f 2000; exec {} {inner}", bin()),
        ])
        .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
        .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
        .output()
        .unwrap();
    assert!(t0.elapsed() < Duration::from_secs(120), "no hang");
    assert!(!res.status.success(), "the run must fail");
    let err = String::from_utf8_lossy(&res.stderr);
    assert!(err.contains("cannot write"), "clear message: {err}");
    assert!(
        !checkpoints(&out).is_empty(),
        "an earlier checkpoint survives"
    );
    ok(&signfold(&["resume", o]));
    assert_same(&full, &results(&out), "after the size-limited run");

    // An output directory blocked by a regular file.
    let blocker = tmp.path().join("file");
    std::fs::write(&blocker, b"x").unwrap();
    let res = signfold(&args(
        "run",
        &job(),
        blocker.join("sub").to_str().unwrap(),
        &[],
    ));
    assert_eq!(res.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&res.stderr).contains("cannot create directory"));

    // The next checkpoint's temporary path blocked by a directory: the error names it and
    // the previous checkpoint (t = 20) stays valid.
    let out = tmp.path().join("blocked");
    let o = out.to_str().unwrap();
    ok(&signfold(&args("run", &job(), o, &["--until", "20"])));
    let tmp_path = signfold::io::checkpoint::particle_path(&out, 30).with_extension("h5.tmp");
    std::fs::create_dir(&tmp_path).unwrap();
    let res = mpirun(2, &["resume", o, "--until", "30"]);
    assert!(!res.status.success());
    assert!(
        String::from_utf8_lossy(&res.stderr).contains("cannot write"),
        "{}",
        String::from_utf8_lossy(&res.stderr)
    );
    std::fs::remove_dir(&tmp_path).unwrap();
    ok(&signfold(&["resume", o]));
    assert_same(&full, &results(&out), "after the blocked checkpoint");
}

/// --walltime stops with a checkpoint before the allocation ends (here the margin exceeds
/// the whole allowance, so at the first synchronisation time), and SIGUSR1 sent to mpirun
/// (which forwards it) makes every rank checkpoint at the next synchronisation time and
/// exit 0. Neither changes the trajectory.
#[test]
fn walltime_and_signals_stop_cleanly() {
    let tmp = tempfile::tempdir().unwrap();
    let full = uninterrupted(tmp.path());
    let out = tmp.path().join("walltime");
    let o = out.to_str().unwrap();
    let text = ok(&signfold(&args(
        "run",
        &job(),
        o,
        &["--walltime", "00:00:05"],
    )));
    assert!(text.contains("--walltime"), "{text}");
    assert!(
        results(&out).times().len() < full.times().len(),
        "stopped early"
    );
    ok(&signfold(&["resume", o]));
    assert_same(&full, &results(&out), "after --walltime");

    let out = tmp.path().join("signal");
    let o = out.to_str().unwrap().to_string();
    let mut child = Command::new("mpirun")
        .args(["-np", "2", "--oversubscribe", bin()])
        .args(args("run", &job(), &o, &["--set", "numerics.end_time=400"]))
        .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
        .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
        .stdout(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let t0 = Instant::now();
    while !out.join("observables.h5").exists() && t0.elapsed() < Duration::from_secs(60) {
        std::thread::sleep(Duration::from_millis(20));
    }
    std::thread::sleep(Duration::from_millis(300));
    // SAFETY: signalling our own child.
    unsafe {
        libc::kill(child.id() as i32, libc::SIGUSR1);
    }
    let status = child.wait().unwrap();
    assert!(status.success(), "exit 0 after the stop signal");
    let cps = checkpoints(&out);
    assert_eq!(cps.len(), 1, "one checkpoint written at the stop");
    let stopped = results(&out);
    assert!(*stopped.times().last().unwrap() < 400.0);
    // Resume to the same end as `full` by capping the end time the job asked for: the
    // stored job says 400 fs, so compare the common prefix with a straight run instead.
    ok(&signfold(&["resume", &o, "--until", "40"]));
    let straight = tmp.path().join("straight");
    ok(&signfold(&args(
        "run",
        &job(),
        straight.to_str().unwrap(),
        &["--set", "numerics.end_time=400", "--until", "40"],
    )));
    assert_same(&results(&straight), &results(&out), "after SIGUSR1");
}
