//! The scaling driver, the per-phase timings of a run and the batch templates.
//!
//! No test here measures speed: the driver's efficiencies are only checked to be numbers in
//! the range a real measurement can give, and the timing test checks bookkeeping (every
//! second of a rank's run is attributed to a phase), not how long anything took.

mod common;

use common::{demo, mpirun, ok};
use signfold::engine::timers::PHASES;
use signfold::io::results::ResultFile;
use std::collections::BTreeMap;
use std::path::Path;
use std::process::Command;

/// The CSV as a header and rows of named fields.
fn read_csv(path: &Path) -> (Vec<String>, Vec<BTreeMap<String, String>>) {
    let text = std::fs::read_to_string(path).expect("CSV readable");
    let mut lines = text.lines();
    let header: Vec<String> = lines
        .next()
        .expect("CSV has a header")
        .split(',')
        .map(str::to_string)
        .collect();
    let rows = lines
        .map(|l| {
            let fields: Vec<&str> = l.split(',').collect();
            assert_eq!(
                fields.len(),
                header.len(),
                "row {l:?} has the header's width"
            );
            header
                .iter()
                .cloned()
                .zip(fields.iter().map(|s| s.to_string()))
                .collect()
        })
        .collect();
    (header, rows)
}

fn num(row: &BTreeMap<String, String>, col: &str) -> f64 {
    row[col]
        .parse()
        .unwrap_or_else(|_| panic!("{col} = {:?} is a number", row[col]))
}

#[test]
fn quick_series_writes_csv_picture_and_machine_description() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("results");
    let job = demo("barrier-packet.toml");
    let o = Command::new(common::bin())
        .args(["scaling", job.to_str().unwrap(), "--ranks", "1,2"])
        .args(["--quick", "--mode", "all", "--out", out.to_str().unwrap()])
        .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
        .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
        .output()
        .expect("signfold runs");
    ok(&o);
    let mut required: Vec<String> = [
        "mode",
        "ranks",
        "threads",
        "samples_initial",
        "wall_s",
        "imbalance_advance",
        "bytes_sent_per_rank",
        "messages_per_rank",
        "occupied_cells_per_rank",
        "efficiency",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    required.extend(PHASES.iter().map(|p| format!("{p}_s")));
    for (series, points) in [
        ("strong", vec![(1, 1), (2, 1)]),
        ("weak", vec![(1, 1), (2, 1)]),
        ("threads", vec![(1, 1), (1, 2), (2, 1)]),
    ] {
        let csv = out.join(format!("barrier-packet-{series}.csv"));
        let (header, rows) = read_csv(&csv);
        for c in &required {
            assert!(header.contains(c), "{series}: column {c} in {header:?}");
        }
        let got: Vec<(usize, usize)> = rows
            .iter()
            .map(|r| (num(r, "ranks") as usize, num(r, "threads") as usize))
            .collect();
        assert_eq!(got, points, "{series}: the points asked for");
        // Efficiency is a contract on the written wall times, not a timing claim (shared
        // cores can make a point faster than ideal): weak = T_base/T, otherwise
        // (cores_base·T_base)/(cores·T), the base being the first point (fewest cores).
        let base = &rows[0];
        let base_work = num(base, "ranks") * num(base, "threads") * num(base, "wall_s");
        for r in &rows {
            assert_eq!(r["mode"], series);
            let e = num(r, "efficiency");
            let cores = num(r, "ranks") * num(r, "threads");
            let want = match series {
                "weak" => num(base, "wall_s") / num(r, "wall_s"),
                _ => base_work / (cores * num(r, "wall_s")),
            };
            // Both sides are printed with 4 significant decimals (wall_s to ms or better).
            assert!(
                e > 0.0 && e.is_finite() && (e - want).abs() <= 1e-3 * want.max(1.0) + 1e-4,
                "{series}: efficiency {e} = {want} from the wall times"
            );
            assert!(num(r, "wall_s") > 0.0);
            assert!(num(r, "imbalance_advance") >= 1.0);
            // The quick barrier run annihilates at least once, so on several ranks the
            // placement of the particles sent data; one rank sends nothing.
            if num(r, "ranks") > 1.0 {
                assert!(num(r, "bytes_sent_per_rank") > 0.0, "{series}: bytes sent");
                assert!(num(r, "messages_per_rank") > 0.0, "{series}: messages sent");
            } else {
                assert_eq!(num(r, "bytes_sent_per_rank"), 0.0, "{series}: one rank");
                assert_eq!(num(r, "messages_per_rank"), 0.0, "{series}: one rank");
            }
            assert!(num(r, "occupied_cells_per_rank") > 0.0, "{series}: cells");
        }
        // Weak scaling keeps the particles per rank; strong the total (sampling drops a
        // few outside the domain, the same ones on any partition).
        let n: Vec<f64> = rows.iter().map(|r| num(r, "samples_initial")).collect();
        match series {
            "weak" => assert!((n[1] / n[0] - 2.0).abs() < 0.01, "weak counts {n:?}"),
            _ => assert!(n.iter().all(|&v| v == n[0]), "{series} counts {n:?}"),
        }
        let png = out.join(format!("barrier-packet-{series}.png"));
        let bytes = std::fs::read(&png).expect("picture written");
        assert_eq!(&bytes[1..4], b"PNG", "{} is a PNG", png.display());
    }
    let machine = std::fs::read_to_string(out.join("machine.txt")).unwrap();
    for key in [
        "cpu model:",
        "cores:",
        "memory:",
        "hdf5",
        "--version:",
        "rustc",
    ] {
        assert!(machine.contains(key), "machine.txt names {key}:\n{machine}");
    }
    assert!(
        !out.join("runs").exists(),
        "run directories are removed unless --keep-runs"
    );
}

#[test]
fn phase_times_account_for_each_ranks_wall_time() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("run");
    let job = demo("barrier-packet.toml");
    ok(&mpirun(
        2,
        &[
            "run",
            job.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--samples",
            "50000",
            "--threads",
            "1",
            "--set",
            "numerics.end_time=30",
        ],
    ));
    let f = ResultFile::read(&out.join("observables.h5")).unwrap();
    let get = |name: &str| {
        f.run
            .get(name)
            .unwrap_or_else(|| panic!("/run/{name}"))
            .1
            .clone()
    };
    assert_eq!(get("ranks"), vec![2.0]);
    let wall = get("wall_seconds");
    assert_eq!(wall.len(), 2, "wall_seconds per rank");
    for (r, &w) in wall.iter().enumerate() {
        let sum: f64 = PHASES.iter().map(|p| get(&format!("seconds_{p}"))[r]).sum();
        // Bookkeeping, not speed: untimed work would show up as a gap.
        let gap = (w - sum).abs() / w;
        assert!(
            gap < 0.05,
            "rank {r}: phases sum to {sum:.4} s of {w:.4} s wall ({:.1} % unaccounted)",
            100.0 * gap
        );
    }
    let passes = f
        .records
        .get("annihilation_time")
        .map_or(0, |(_, v)| v.len());
    assert!(
        passes > 0,
        "the run annihilates (else bytes_sent says nothing)"
    );
    for name in ["bytes_sent", "messages_sent", "occupied_cells"] {
        let v = get(name);
        assert_eq!(
            v.len(),
            passes * 2,
            "{name}: one value per annihilation × rank"
        );
        assert!(
            v.iter().all(|&b| b > 0.0),
            "{name} positive on every rank: {v:?}"
        );
    }
    // Placement (docs/method.md §3): a pass at the finest cells sends the particles to
    // their home ranks and nothing else, since every finest cell is then whole on one rank
    // (two ranks: one message per rank and pass).
    let coarsest = &f.records["annihilation_coarsest_level"].1;
    let messages = get("messages_sent");
    let finest: Vec<usize> = (0..passes).filter(|&a| coarsest[a] == 0.0).collect();
    assert!(
        !finest.is_empty(),
        "some pass at the finest cells: {coarsest:?}"
    );
    for a in finest {
        assert_eq!(
            &messages[2 * a..2 * a + 2],
            &[1.0, 1.0],
            "pass {a}: only the placement is sent"
        );
    }
}

/// Shell words of a line, with quoted strings kept whole (enough for the templates).
fn words(line: &str) -> Vec<String> {
    let (mut out, mut cur, mut quote) = (Vec::new(), String::new(), None);
    for c in line.chars() {
        match (quote, c) {
            (None, '"' | '\'') => quote = Some(c),
            (Some(q), c) if c == q => quote = None,
            (None, c) if c.is_whitespace() => {
                if !cur.is_empty() {
                    out.push(std::mem::take(&mut cur));
                }
            }
            (_, c) => cur.push(c),
        }
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    out
}

#[test]
fn batch_templates_parse_and_use_only_existing_options() {
    let subcommands = ["run", "resume", "scaling", "check"];
    let mut help = BTreeMap::new();
    for sub in subcommands {
        help.insert(sub, ok(&common::signfold(&[sub, "--help"])));
    }
    for name in [
        "slurm-run.sh",
        "pbs-run.sh",
        "slurm-scaling.sh",
        "pbs-scaling.sh",
    ] {
        let path = demo(name);
        let syntax = Command::new("bash").arg("-n").arg(&path).output().unwrap();
        assert!(
            syntax.status.success(),
            "bash -n {name}: {}",
            String::from_utf8_lossy(&syntax.stderr)
        );
        let text = std::fs::read_to_string(&path).unwrap();
        assert!(
            text.lines().take(10).any(|l| l.contains("EDIT")),
            "{name} says what to edit at the top"
        );
        let joined = text.replace("\\\n", " ");
        let mut calls = 0;
        for line in joined.lines().filter(|l| !l.trim_start().starts_with('#')) {
            let w = words(line);
            for (i, word) in w.iter().enumerate() {
                let is_binary = word == "$SIGNFOLD" || word == "${SIGNFOLD}" || word == "signfold";
                let Some(sub) = w.get(i + 1).filter(|s| subcommands.contains(&s.as_str())) else {
                    continue;
                };
                if !is_binary {
                    continue;
                }
                calls += 1;
                for opt in w[i + 2..].iter().filter(|o| o.starts_with("--")) {
                    let opt = opt.split('=').next().unwrap();
                    let listed = help[sub.as_str()]
                        .split(|c: char| c.is_whitespace() || c == ',')
                        .any(|t| t == opt);
                    assert!(
                        listed,
                        "{name}: `signfold {sub} {opt}` is not in `signfold {sub} --help`"
                    );
                }
            }
        }
        assert!(calls > 0, "{name} calls signfold");
    }
}

/// slurm-run.sh with the Slurm commands replaced by stand-ins: a run stopped by --until is
/// resumed, finished, marked finished and not resubmitted; a second submission does nothing.
#[test]
fn slurm_template_resumes_and_detects_completion() {
    let tmp = tempfile::tempdir().unwrap();
    let bin = tmp.path().join("bin");
    std::fs::create_dir(&bin).unwrap();
    let stub = |name: &str, body: &str| {
        let p = bin.join(name);
        std::fs::write(&p, format!("#!/usr/bin/env bash\n{body}\n")).unwrap();
        Command::new("chmod").arg("+x").arg(&p).status().unwrap();
    };
    let submitted = tmp.path().join("submitted");
    stub("squeue", "echo 1:00:00");
    stub("srun", "exec \"$@\"");
    stub("scontrol", "echo '   Command=/nowhere/slurm-run.sh'");
    stub("sbatch", &format!("echo \"$@\" >> {}", submitted.display()));
    let dir = tmp.path().join("run");
    let job = demo("barrier-packet.toml");
    let overrides = ["--set", "numerics.end_time=10", "--samples", "5000"];
    let mut first = vec!["run", job.to_str().unwrap(), "--out", dir.to_str().unwrap()];
    first.extend(["--until", "5"]);
    first.extend(overrides);
    ok(&common::signfold(&first));
    assert!(
        signfold::io::checkpoint::list(&dir).len() == 1,
        "--until leaves one checkpoint"
    );
    let path = format!("{}:{}", bin.display(), std::env::var("PATH").unwrap());
    let template = |_: ()| {
        Command::new("bash")
            .arg(demo("slurm-run.sh"))
            .env("PATH", &path)
            .env("SLURM_JOB_ID", "42")
            .env("SLURM_CPUS_PER_TASK", "1")
            .env("JOB", &job)
            .env("DIR", &dir)
            .env("SIGNFOLD", common::bin())
            .output()
            .unwrap()
    };
    let log = ok(&template(()));
    assert!(
        log.contains("resuming"),
        "the checkpoint is resumed:\n{log}"
    );
    assert!(
        log.contains("signfold-run: finished"),
        "completion detected:\n{log}"
    );
    assert!(dir.join("signfold-finished").exists());
    assert!(!submitted.exists(), "a finished run is not resubmitted");
    let f = ResultFile::read(&dir.join("observables.h5")).unwrap();
    assert_eq!(
        f.times().last().copied(),
        Some(10.0),
        "the run reached its end"
    );
    let again = ok(&template(()));
    assert!(again.contains("nothing to do"), "{again}");
    assert!(!submitted.exists());
}
