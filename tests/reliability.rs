//! Defects a tester found in stopping, validation, locking and comparing: each test
//! states the contract that was broken.

mod common;

use common::*;
use std::path::Path;

/// The small free fermion pair of `common`.
const JOB: &str = FREE_PAIR;

/// Held while this test binary writes an HDF5 file and while it starts a child, so that
/// no child inherits (and keeps locked) a file being written.
static FILES: std::sync::Mutex<()> = std::sync::Mutex::new(());

/// `signfold ARGS` (shadows the helper of `common`: spawned under [`FILES`]).
fn signfold(args: &[&str]) -> std::process::Output {
    let child = {
        let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
        std::process::Command::new(bin())
            .args(args)
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .expect("the signfold binary runs")
    };
    child.wait_with_output().expect("signfold output")
}

fn stdout(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

fn stderr(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

#[track_caller]
/// Exit code 2, no panic, and every fragment of `expect` in the message.
fn refused_with(o: &std::process::Output, expect: &[&str]) {
    let err = stderr(o);
    assert_eq!(
        o.status.code(),
        Some(2),
        "exit {:?}: {err}",
        o.status.code()
    );
    assert!(!err.contains("panicked"), "a panic: {err}");
    for e in expect {
        assert!(err.contains(e), "the message should mention `{e}`:\n{err}");
    }
}

fn last_line(s: &str) -> &str {
    s.lines().last().unwrap_or("")
}

fn checkpoints(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .map(|d| {
            d.filter_map(|e| e.ok())
                .map(|e| e.file_name().to_string_lossy().into_owned())
                .filter(|n| n.starts_with("checkpoint-") && !n.ends_with("-results.h5"))
                .collect()
        })
        .unwrap_or_default();
    v.sort();
    v
}

/// `--until` at or before the current time stops resumably (a checkpoint at that time),
/// says it stopped, and the run continues from there; a non-finite or negative `--until`
/// is refused before anything is written.
#[test]
fn until_before_the_next_step_stops_resumably() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", JOB);
    let j = job.to_str().unwrap();
    for bad in ["nan", "-5", "inf"] {
        let out = dir.path().join(format!("bad{bad}"));
        let o = signfold(&["run", j, "--out", out.to_str().unwrap(), "--until", bad]);
        refused_with(&o, &["--until"]);
        assert!(
            !out.join("observables.h5").exists(),
            "--until {bad}: nothing written"
        );
    }
    let out = dir.path().join("u0");
    let o = out.to_str().unwrap();
    let text = ok(&signfold(&["run", j, "--out", o, "--until", "0"]));
    assert!(
        last_line(&text).starts_with("signfold: stopped at t = 0 fs"),
        "{text}"
    );
    assert!(!text.contains("signfold: finished"), "{text}");
    assert_eq!(checkpoints(&out).len(), 1, "a checkpoint at t = 0");
    // Continue to 6 fs, then ask for 3 fs: already past, so it stops where it stands.
    let text = ok(&signfold(&["resume", o, "--until", "6"]));
    assert!(
        last_line(&text).starts_with("signfold: stopped at t = 6 fs"),
        "{text}"
    );
    let text = ok(&signfold(&["resume", o, "--until", "3"]));
    assert!(
        last_line(&text).starts_with("signfold: stopped at t = 6 fs"),
        "{text}"
    );
    assert!(!text.contains("wrote"), "{text}");
    let o2 = signfold(&["resume", o, "--until", "-1"]);
    refused_with(&o2, &["--until -1"]);
    // And it finishes, saying so on the last line.
    let text = ok(&signfold(&["resume", o]));
    assert!(
        last_line(&text).starts_with("signfold: finished at t = 8 fs"),
        "{text}"
    );
    let r = signfold::io::results::ResultFile::read(&out.join("observables.h5")).unwrap();
    assert_eq!(r.times(), &[0.0, 2.0, 4.0, 6.0, 8.0]);
}

/// `check` and `run` both refuse, naming the key, sizes that would allocate more than the
/// machine holds (or leave error groups empty), before anything is written.
#[test]
fn sizes_that_allocate_are_refused_by_check_and_run() {
    let dir = tempfile::tempdir().unwrap();
    let with_potential =
        format!("{JOB}\n[[potential]]\nkind = \"barrier\"\nfrom = -1.5\nto = 1.5\nheight = 0.2\n");
    let job = write_job(dir.path(), "job.toml", &with_potential);
    let j = job.to_str().unwrap();
    for (set, key) in [
        ("output.x_bins=100000", "output.x_bins"),
        ("output.k_bins=100000000", "output.k_bins"),
        ("domain.mesh_cells=1000000000", "domain.mesh_cells"),
        ("numerics.coherence_length=1e9", "numerics.coherence_length"),
        ("numerics.groups=30000", "numerics.groups"),
    ] {
        let out = dir.path().join("out");
        for args in [
            vec!["check", j, "--set", set],
            vec!["run", j, "--out", out.to_str().unwrap(), "--set", set],
        ] {
            let o = signfold(&args);
            refused_with(&o, &[key, "job.toml"]);
        }
        assert!(!out.exists(), "{set}: nothing written");
    }
}

/// Inconsistent jobs and options are refused by `check` and `run` alike, naming the key or
/// option: a sync step past the end, an orbital outside the domain or beyond k_max,
/// zero threads, an impossible wall time, negative times and tolerances.
#[test]
fn inconsistent_jobs_and_options_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    for (from, to, key) in [
        ("sync_step = 2.0", "sync_step = 10.0", "numerics.sync_step"),
        ("centre = 20.0", "centre = 500.0", "orbital"),
        ("wavevector = -0.4", "wavevector = -2.0", "wavevector"),
    ] {
        let job = write_job(dir.path(), "job.toml", &JOB.replace(from, to));
        let out = dir.path().join("out");
        for args in [
            vec!["check", job.to_str().unwrap()],
            vec!["run", job.to_str().unwrap(), "--out", out.to_str().unwrap()],
        ] {
            refused_with(&signfold(&args), &[key, "job.toml"]);
        }
        assert!(!out.exists(), "{to}: nothing written");
    }
    let job = write_job(dir.path(), "job.toml", JOB);
    let j = job.to_str().unwrap();
    let out = dir.path().join("out");
    let o = out.to_str().unwrap();
    for (extra, expect) in [
        (["--threads", "0"], "--threads 0"),
        (["--walltime", "99:99"], "--walltime 99:99"),
        (["--walltime", "01:00:75"], "--walltime 01:00:75"),
        (["--until", "-5"], "--until -5"),
    ] {
        let mut args = vec!["run", j, "--out", o];
        args.extend_from_slice(&extra);
        refused_with(&signfold(&args), &[expect]);
        assert!(!out.exists(), "{extra:?}: nothing written");
    }
    ok(&signfold(&["run", j, "--out", o]));
    let h5 = out.join("observables.h5");
    let h5 = h5.to_str().unwrap();
    refused_with(
        &signfold(&["compare", h5, h5, "--tolerance", "-1"]),
        &["--tolerance -1"],
    );
}

/// One run at a time in an output directory: a live holder's lock refuses `run` and
/// `resume` (naming host and pid) and is left alone; a lock whose process is gone is
/// replaced with a note; the lock is removed when the run ends.
#[test]
fn output_directory_is_locked() {
    let (_dir, job, out) = stopped_at_4fs(JOB);
    let (j, o) = (job.to_str().unwrap(), out.to_str().unwrap());
    let lock = out.join("signfold.lock");
    assert!(!lock.exists(), "the lock is removed at exit");
    let host = signfold::runner::outdir::host_name();
    // A live holder: this test process.
    let live = format!("host={host}\npid={}\n", std::process::id());
    std::fs::write(&lock, &live).unwrap();
    let before = std::fs::read(out.join("observables.h5")).unwrap();
    for args in [vec!["run", j, "--out", o, "--force"], vec!["resume", o]] {
        let r = signfold(&args);
        refused_with(
            &r,
            &["in use", &std::process::id().to_string(), "signfold.lock"],
        );
        assert_eq!(
            std::fs::read_to_string(&lock).unwrap(),
            live,
            "lock untouched"
        );
    }
    assert_eq!(std::fs::read(out.join("observables.h5")).unwrap(), before);
    // A gone holder: a process that has exited.
    let mut child = std::process::Command::new("true").spawn().unwrap();
    let dead = child.id();
    child.wait().unwrap();
    std::fs::write(&lock, format!("host={host}\npid={dead}\n")).unwrap();
    let r = signfold(&["resume", o]);
    ok(&r);
    assert!(stderr(&r).contains("stale lock"), "{}", stderr(&r));
    assert!(!lock.exists());
    // Two runs at once into one directory: the second is refused while the first works.
    let slow = out.to_str().unwrap().to_string() + "-slow";
    let mut first = std::process::Command::new(bin())
        .args(["run", j, "--out", &slow, "--samples", "200000"])
        .args([
            "--set",
            "numerics.end_time=100000",
            "--set",
            "domain.boundary=periodic",
        ])
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let slow_lock = Path::new(&slow).join("signfold.lock");
    let t0 = std::time::Instant::now();
    while !slow_lock.exists() && t0.elapsed().as_secs() < 60 {
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    let second = signfold(&["run", j, "--out", &slow, "--force"]);
    // SAFETY: signalling our own child (a clean stop with a checkpoint).
    unsafe {
        libc::kill(first.id() as i32, libc::SIGUSR1);
    }
    assert!(first.wait().unwrap().success());
    refused_with(&second, &["in use", &first.id().to_string()]);
    assert!(!slow_lock.exists(), "the lock is removed after a stop");
}

/// `text` written as DIR/job.toml and run into DIR/out until 4 fs (a checkpoint at step 2):
/// the directory (removed when dropped), the job and the run directory.
fn stopped_at_4fs(text: &str) -> (tempfile::TempDir, std::path::PathBuf, std::path::PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", text);
    let out = dir.path().join("out");
    let (j, o) = (job.to_str().unwrap(), out.to_str().unwrap());
    ok(&signfold(&["run", j, "--out", o, "--until", "4"]));
    (dir, job, out)
}

/// A synthetic pair of result files on 50 x bins at `times`: B exact (no errors, a current
/// density that vanishes to rounding), A = B + se·z with known deviations z, errors from 8
/// groups (its job says so). Returns Σz² and the count of density bins with an error.
fn compare_pair(dir: &Path, times: &[f64], b_times: &[f64]) -> (f64, usize) {
    use signfold::io::results::ResultFile;
    let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
    let nx = 50;
    let x: Vec<f64> = (0..nx).map(|i| -25.0 + i as f64 + 0.5).collect();
    let k = vec![-1.0, 1.0];
    let mc_job = JOB.replace("groups = 4", "groups = 8");
    let mut fa = ResultFile::new("signfold-observables", &mc_job, x.clone(), k.clone());
    let mut fb = ResultFile::new("signfold-reference", JOB, x.clone(), k.clone());
    // Deterministic deviations in units of the error, a few standard deviations at most.
    let z = |i: usize, t: usize| ((i * 7 + t * 13) % 11) as f64 / 5.0 - 1.0;
    let (mut sum, mut bins) = (0.0, 0);
    for (n, &t) in times.iter().enumerate() {
        let exact: Vec<f64> = x.iter().map(|xi| (-0.02 * xi * xi).exp() / 12.5).collect();
        let se: Vec<f64> = exact.iter().map(|v| 0.05 * v + 1e-4).collect();
        let mc: Vec<f64> = (0..nx).map(|i| exact[i] + se[i] * z(i, n)).collect();
        for i in 0..nx {
            sum += z(i, n).powi(2);
            bins += 1;
        }
        fa.push("time", "fs", &[], &[t]);
        fa.push("density", "1/nm", &[nx], &mc);
        fa.push("density_error", "1/nm", &[nx], &se);
        let noise: Vec<f64> = (0..nx).map(|i| 1e-4 * z(i, n)).collect();
        fa.push("current_density", "1/fs", &[nx], &noise);
        fa.push("current_density_error", "1/fs", &[nx], &vec![1e-4; nx]);
        fa.push("norm", "1", &[], &[1.0 + 0.003]);
        fa.push("norm_error", "1", &[], &[0.001]);
    }
    for &t in b_times {
        let exact: Vec<f64> = x.iter().map(|xi| (-0.02 * xi * xi).exp() / 12.5).collect();
        fb.push("time", "fs", &[], &[t]);
        fb.push("density", "1/nm", &[nx], &exact);
        fb.push("current_density", "1/fs", &[nx], &vec![1e-18; nx]);
        fb.push("norm", "1", &[], &[1.0]);
    }
    fa.write_atomic(&dir.join("a.h5")).unwrap();
    fb.write_atomic(&dir.join("b.h5")).unwrap();
    (sum, bins)
}

/// `compare` reports an absolute scale where the reference vanishes (no exploding relative
/// distance), uses the `*_error` datasets (the mean F term with its expected value
/// (b − 1)/(b − 3) and the bin count; a z-score for the norm), and refuses files that share
/// fewer than two output times.
#[test]
fn compare_uses_errors_and_absolute_scales() {
    let dir = tempfile::tempdir().unwrap();
    let (sum, bins) = compare_pair(dir.path(), &[0.0, 5.0, 10.0], &[0.0, 5.0, 10.0]);
    let (a, b) = (dir.path().join("a.h5"), dir.path().join("b.h5"));
    let (a, b) = (a.to_str().unwrap(), b.to_str().unwrap());
    let text = ok(&signfold(&["compare", a, b, "--tolerance", "0.5"]));
    let row = |name: &str| -> Vec<String> {
        text.lines()
            .find(|l| l.split_whitespace().next() == Some(name))
            .unwrap_or_else(|| panic!("no row for {name} in\n{text}"))
            .split_whitespace()
            .map(str::to_string)
            .collect()
    };
    let cur = row("current_density");
    assert_eq!(
        cur[1], "—",
        "no relative distance against a vanishing B: {text}"
    );
    assert_eq!(cur[3], "—", "{text}");
    let max_abs: f64 = cur[4].parse().unwrap();
    assert!((max_abs - 1e-4).abs() < 1e-8, "max |A−B| = 1e-4: {text}");
    let den = row("density");
    let f_mean: f64 = den[5].parse().unwrap();
    assert!((f_mean - sum / bins as f64).abs() < 1e-3 * f_mean, "{text}");
    assert_eq!(
        den[6].parse::<f64>().unwrap(),
        1.4,
        "(8 − 1)/(8 − 3): {text}"
    );
    assert_eq!(den[7].parse::<usize>().unwrap(), bins, "{text}");
    let norm = row("norm");
    assert!(
        (norm[1].parse::<f64>().unwrap() - 3.0).abs() < 1e-6,
        "z = 0.003/0.001: {text}"
    );
    // Sharing only t = 0 is not a comparison.
    let dir2 = tempfile::tempdir().unwrap();
    compare_pair(dir2.path(), &[0.0, 5.0], &[0.0, 7.0]);
    let (a2, b2) = (dir2.path().join("a.h5"), dir2.path().join("b.h5"));
    let o = signfold(&["compare", a2.to_str().unwrap(), b2.to_str().unwrap()]);
    refused_with(&o, &["1 common output time", "at least two"]);
}

/// Parse errors point at the line as written, also with `--set` overrides, and keys are
/// spelled the way `--set` takes them (`potential.0.width`).
#[test]
fn errors_name_the_written_line_and_the_set_spelling() {
    let dir = tempfile::tempdir().unwrap();
    let with_potential = format!(
        "{JOB}\n[[potential]]\nkind = \"gaussian\"\ncentre = 0.0\nwidth = -3.0\nheight = 0.1\n"
    );
    // JOB starts with an empty line: `mass` is on line 5, the first `width` on line 11.
    let cases = [
        (JOB.replace("mass = 0.067", "mas = 0.067"), "line 5", "mas"),
        (
            JOB.replacen("width = 5.0", "widht = 5.0", 1),
            "line 11",
            "widht",
        ),
    ];
    for (text, line, key) in &cases {
        let job = write_job(dir.path(), "job.toml", text);
        for set in [&[][..], &["--set", "numerics.seed=3"][..]] {
            let mut args = vec!["check", job.to_str().unwrap()];
            args.extend_from_slice(set);
            refused_with(&signfold(&args), &[line, key, "job.toml"]);
        }
    }
    let job = write_job(dir.path(), "job.toml", &with_potential);
    let j = job.to_str().unwrap();
    refused_with(&signfold(&["check", j]), &["potential.0.width"]);
    // The key as named works with --set.
    ok(&signfold(&["check", j, "--set", "potential.0.width=3.0"]));
    let o = signfold(&["check", j, "--set", "potential.0.widht=3.0"]);
    refused_with(&o, &["--set", "widht"]);
}

/// `signfold ARGS` with a file-size limit of `bytes` (a directory that cannot take a file of
/// that size; as root a read-only mode would not stop writes, a size limit does).
fn signfold_fsize(args: &[&str], bytes: u64) -> std::process::Output {
    use std::os::unix::process::CommandExt as _;
    let child = {
        let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
        let mut cmd = std::process::Command::new(bin());
        cmd.args(args)
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped());
        // SAFETY: only async-signal-safe calls between fork and exec.
        unsafe {
            cmd.pre_exec(move || {
                let lim = libc::rlimit {
                    rlim_cur: bytes,
                    rlim_max: bytes,
                };
                libc::setrlimit(libc::RLIMIT_FSIZE, &lim);
                libc::signal(libc::SIGXFSZ, libc::SIG_IGN);
                Ok(())
            });
        }
        cmd.spawn().expect("the signfold binary runs")
    };
    child.wait_with_output().expect("signfold output")
}

/// An output directory that cannot take files is found before any computing (run,
/// resume, reference); a write that fails after all leaves no temporary file; `plot` of a
/// directory is a plain message.
#[test]
fn unwritable_output_is_found_before_computing() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", JOB);
    let j = job.to_str().unwrap();
    let out = dir.path().join("ref");
    let o = out.to_str().unwrap();
    let r = signfold_fsize(&["reference", j, "--out", o], 1024);
    refused_with(&r, &["not writable", o]);
    let text = stdout(&r);
    assert!(
        !text.lines().any(|l| l.starts_with("t = ")),
        "solved first:\n{text}"
    );
    // MPI cannot start under a file-size limit, so `run` and `resume` meet a directory that
    // refuses files even to root (sysfs).
    let sys = "/sys/kernel";
    if std::fs::File::create(Path::new(sys).join("signfold-probe")).is_err() {
        let r = signfold(&["run", j, "--out", sys]);
        refused_with(&r, &["not writable", sys]);
        assert!(!stdout(&r).contains("samples at t = 0"), "{}", stdout(&r));
        // resume finds it before looking for checkpoints.
        refused_with(&signfold(&["resume", sys]), &["not writable", sys]);
    }
    let mc = dir.path().join("mc2");
    ok(&signfold(&[
        "run",
        j,
        "--out",
        mc.to_str().unwrap(),
        "--until",
        "2",
    ]));
    // Room for the probe but not for the result file: the write fails after the solve
    // and leaves neither the file nor its temporary.
    let r = signfold_fsize(&["reference", j, "--out", o, "--force"], 32 * 1024);
    refused_with(&r, &["reference.h5"]);
    let left: Vec<_> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert!(left.is_empty(), "left behind: {left:?}");
    // plot of a directory.
    let r = signfold(&["plot", mc.to_str().unwrap(), "--out", o]);
    refused_with(&r, &["is a directory"]);
    assert!(!stderr(&r).contains("HDF5"), "{}", stderr(&r));
}

/// A long run of the free pair (periodic, so nothing leaves; steps of a few ms) started
/// with `launch` in front of the binary, and the time its t = 0 output exists.
fn start_long(launch: &[&str], job: &Path, out: &Path) -> std::process::Child {
    let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
    let (prog, pre) = match launch {
        [] => (bin(), &[][..]),
        [p, rest @ ..] => (*p, rest),
    };
    let mut cmd = std::process::Command::new(prog);
    cmd.args(pre);
    if !launch.is_empty() {
        cmd.arg(bin());
    }
    let child = cmd
        .args(["run", job.to_str().unwrap(), "--out", out.to_str().unwrap()])
        .args(["--samples", "200000", "--threads", "1"])
        .args([
            "--set",
            "numerics.end_time=100000",
            "--set",
            "domain.boundary=periodic",
        ])
        .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
        .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
        .env("OMPI_MCA_rmaps_base_oversubscribe", "1")
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("the run starts");
    drop(_guard);
    let t0 = std::time::Instant::now();
    while !out.join("observables.h5").exists() && t0.elapsed().as_secs() < 60 {
        std::thread::sleep(std::time::Duration::from_millis(20));
    }
    std::thread::sleep(std::time::Duration::from_millis(300));
    child
}

/// The time of the `stopped at t = … fs` line, which must be the last line.
fn stopped_at(text: &str) -> f64 {
    let last = last_line(text);
    let rest = last
        .strip_prefix("signfold: stopped at t = ")
        .unwrap_or_else(|| panic!("the last line says where it stopped:\n{text}"));
    rest.split(' ').next().unwrap().parse().unwrap()
}

/// SIGTERM and SIGINT to a run without mpirun stop it at the next synchronisation time with
/// a checkpoint and exit 0, like SIGUSR1; the checkpoint continues.
#[test]
fn sigterm_and_sigint_stop_a_single_run_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", JOB);
    for (name, sig) in [("term", libc::SIGTERM), ("int", libc::SIGINT)] {
        let out = dir.path().join(name);
        let child = start_long(&[], &job, &out);
        // SAFETY: signalling our own child.
        unsafe {
            libc::kill(child.id() as i32, sig);
        }
        let o = child.wait_with_output().unwrap();
        let text = stdout(&o);
        assert_eq!(o.status.code(), Some(0), "{name}: exit 0\n{}", stderr(&o));
        let t = stopped_at(&text);
        assert!(last_line(&text).contains("(stop signal)"), "{text}");
        let cps = checkpoints(&out);
        assert_eq!(cps.len(), 1, "{name}: one checkpoint");
        assert_eq!(cps[0], format!("checkpoint-{:010}.h5", (t / 2.0) as u64));
        let until = format!("{}", t + 4.0);
        let o = out.to_str().unwrap();
        let text = ok(&signfold(&["resume", o, "--until", &until]));
        assert_eq!(stopped_at(&text), t + 4.0, "{text}");
    }
}

/// Under Open MPI's mpirun (4.1 here) SIGTERM cannot be passed on as a stop request:
/// `ess_base_forward_signals` refuses it (Open MPI's own message, seen here), and mpirun
/// treats it as an abort: it sends SIGTERM to the ranks, SIGKILL after
/// `odls_base_sigkill_timeout` seconds (1 by default; mpirun itself exits after about twice
/// that, measured here), and exits 1 whatever the ranks do. What the README documents:
/// given the time (a raised timeout), the ranks still stop at the next synchronisation time
/// with a complete checkpoint that resumes; mpirun exits 1.
/// SIGUSR1 is the clean stop under mpirun (exit 0: tests/checkpoint.rs).
#[test]
fn sigterm_to_mpirun_is_an_abort_but_the_ranks_checkpoint() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", JOB);
    let out = dir.path().join("mpi");
    let child = start_long(
        &[
            "mpirun",
            "-np",
            "2",
            "--oversubscribe",
            "--mca",
            "odls_base_sigkill_timeout",
            "5",
        ],
        &job,
        &out,
    );
    // SAFETY: signalling our own child.
    unsafe {
        libc::kill(child.id() as i32, libc::SIGTERM);
    }
    let o = child.wait_with_output().unwrap();
    let text = stdout(&o);
    assert_eq!(
        o.status.code(),
        Some(1),
        "Open MPI's mpirun exits 1 after SIGTERM (the README says so)\n{text}\n{}",
        stderr(&o)
    );
    let t = stopped_at(&text);
    assert_eq!(checkpoints(&out).len(), 1, "{text}");
    let until = format!("{}", t + 4.0);
    let text = ok(&signfold(&[
        "resume",
        out.to_str().unwrap(),
        "--until",
        &until,
    ]));
    assert_eq!(stopped_at(&text), t + 4.0, "{text}");
}

/// What a run that dies between the two files of a checkpoint leaves (the results copy of
/// the next step, a temporary particle file) is removed by the next `resume` (with a note)
/// and by `run --force`; resume goes on from the last complete checkpoint.
#[test]
fn checkpoint_leftovers_are_removed() {
    let (_dir, job, out) = stopped_at_4fs(JOB);
    let (j, o) = (job.to_str().unwrap(), out.to_str().unwrap());
    let leave_debris = || {
        let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
        std::fs::copy(
            out.join("checkpoint-0000000002-results.h5"),
            out.join("checkpoint-0000000003-results.h5"),
        )
        .unwrap();
        std::fs::write(out.join("checkpoint-0000000003.h5.tmp"), b"partial").unwrap();
    };
    let names = |d: &Path| -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(d)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with("checkpoint-"))
            .collect();
        v.sort();
        v
    };
    leave_debris();
    let r = signfold(&["resume", o, "--until", "6"]);
    ok(&r);
    assert!(
        stderr(&r).contains("checkpoint-0000000003-results.h5")
            && stderr(&r).contains("checkpoint-0000000003.h5.tmp"),
        "the removal is reported: {}",
        stderr(&r)
    );
    assert_eq!(
        names(&out),
        [
            "checkpoint-0000000002-results.h5",
            "checkpoint-0000000002.h5",
            "checkpoint-0000000003-results.h5",
            "checkpoint-0000000003.h5"
        ],
        "the debris is gone; step 3 (6 fs) is now a complete checkpoint"
    );
    std::fs::remove_file(out.join("checkpoint-0000000003.h5")).unwrap();
    std::fs::write(out.join("checkpoint-0000000002.h5.tmp"), b"partial").unwrap();
    ok(&signfold(&[
        "run", j, "--out", o, "--force", "--until", "2",
    ]));
    assert_eq!(
        names(&out),
        [
            "checkpoint-0000000001-results.h5",
            "checkpoint-0000000001.h5"
        ],
        "a forced run keeps nothing of the old checkpoints"
    );
}

/// Replace the `numerics_hash` attribute of a checkpoint (None: remove it); returns the
/// value it had (empty when it had none).
fn set_numerics_hash(path: &Path, value: Option<&str>) -> String {
    let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
    let f = hdf5::File::open_rw(path).unwrap();
    let old = signfold::io::results::read_str_attr(&f, "numerics_hash").unwrap_or_default();
    if !old.is_empty() {
        f.delete_attr("numerics_hash").unwrap();
    }
    if let Some(v) = value {
        signfold::io::results::write_str_attr(&f, "numerics_hash", v).unwrap();
    }
    old
}

/// Every checkpoint stores hashes of the kernel tables and derived numerics; `resume`
/// rebuilds them and refuses, naming what differs, when they disagree (as after a change
/// of the code or the machine), touching nothing; a checkpoint without the hash resumes
/// with a note that it cannot be verified.
#[test]
fn resume_refuses_tables_that_differ_from_the_checkpoint() {
    let with_potential = format!(
        "{JOB}\n[[potential]]\nkind = \"gaussian\"\ncentre = 0.0\nwidth = 4.0\nheight = 0.05\n"
    );
    let (_dir, _, out) = stopped_at_4fs(&with_potential);
    let o = out.to_str().unwrap();
    let cp = out.join("checkpoint-0000000002.h5");
    let stored = set_numerics_hash(&cp, Some("probe"));
    let keys: Vec<&str> = stored
        .split(' ')
        .map(|kv| kv.split('=').next().unwrap())
        .collect();
    assert_eq!(
        keys,
        ["one_body_table", "pair_table", "derived"],
        "{stored}"
    );
    let before = std::fs::read(out.join("observables.h5")).unwrap();
    for (part, what) in [
        ("one_body_table", "the one-body kernel table"),
        ("derived", "the derived numerics"),
    ] {
        let tampered: Vec<String> = stored
            .split(' ')
            .map(|kv| {
                if kv.starts_with(part) {
                    format!("{part}=0123456789abcdef")
                } else {
                    kv.to_string()
                }
            })
            .collect();
        set_numerics_hash(&cp, Some(&tampered.join(" ")));
        let r = signfold(&["resume", o]);
        refused_with(
            &r,
            &[what, "stored 0123456789abcdef", "checkpoint-0000000002.h5"],
        );
        let other = if part == "derived" {
            "one-body kernel table"
        } else {
            "derived numerics"
        };
        assert!(
            !stderr(&r).contains(other),
            "only what differs: {}",
            stderr(&r)
        );
        assert_eq!(std::fs::read(out.join("observables.h5")).unwrap(), before);
    }
    set_numerics_hash(&cp, None);
    let r = signfold(&["resume", o, "--until", "6"]);
    ok(&r);
    assert!(stderr(&r).contains("cannot be verified"), "{}", stderr(&r));
    set_numerics_hash(&cp, Some(&stored));
    ok(&signfold(&["resume", o]));
}

/// The MPI exchange splits each message into pieces of at most
/// SIGNFOLD_EXCHANGE_CHUNK_WORDS words (for 64-bit lengths beyond MPI's 32-bit counts); with
/// a limit of 61 words every annihilation pass sends many pieces, and 2 and 3 ranks still
/// give the one-rank datasets bit for bit, with exchanges sent directly and routed
/// (`SIGNFOLD_ROUTE_BELOW_WORDS` 0 and huge: on 3 ranks routing forwards messages).
#[test]
fn chunked_exchanges_give_identical_results() {
    let dir = tempfile::tempdir().unwrap();
    let job = demo("barrier-packet.toml");
    let run = |ranks: usize, route_below: &str| {
        let out = dir.path().join(format!("np{ranks}-{route_below}"));
        let mut cmd = std::process::Command::new("mpirun");
        cmd.args(["-np", &ranks.to_string(), "--oversubscribe", bin()])
            .args(["run", job.to_str().unwrap(), "--out", out.to_str().unwrap()])
            .args(["--samples", "20000", "--threads", "1"])
            .args(["--set", "numerics.end_time=30"])
            .args(["--set", "annihilation.trigger=1.5"])
            .env(signfold::engine::mpi::CHUNK_ENV, "61")
            .env(signfold::engine::mpi::ROUTE_ENV, route_below)
            .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
            .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1");
        let child = {
            let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
            cmd.stdout(std::process::Stdio::piped())
                .stderr(std::process::Stdio::piped())
                .spawn()
                .unwrap()
        };
        ok(&child.wait_with_output().unwrap());
        signfold::io::results::ResultFile::read(&out.join("observables.h5")).unwrap()
    };
    let base = run(1, "0");
    assert!(
        base.records["annihilation_time"].1.len() >= 3,
        "the test must exercise annihilation"
    );
    for (ranks, route_below) in [(2, "0"), (3, "0"), (3, "1000000000")] {
        let other = run(ranks, route_below);
        // The largest message of a pass is at least its words / (messages per pass), which
        // must fill ten 61-word pieces.
        let most = |name: &str| other.run[name].1.iter().cloned().fold(0.0, f64::max);
        let (bytes, messages) = (most("bytes_sent"), most("messages_sent"));
        assert!(
            bytes / 8.0 / messages.max(1.0) > 10.0 * 61.0,
            "at least ten pieces in the largest message ({bytes} B in {messages} messages)"
        );
        let how = if route_below == "0" {
            "direct"
        } else {
            "routed"
        };
        assert_same_datasets(
            &base,
            &other,
            &format!("{ranks} ranks {how}, 61-word pieces"),
        );
    }
}
