//! What `check`, `run`, `inspect`, `plot` and `--help` print is in the job file's words and
//! says what it means (contract of the command line, no outside source).

mod common;

use common::*;

fn stderr(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// The line of `text` that starts with `prefix`.
fn line<'a>(text: &'a str, prefix: &str) -> &'a str {
    text.lines()
        .find(|l| l.starts_with(prefix))
        .unwrap_or_else(|| panic!("no line `{prefix}…` in\n{text}"))
}

/// `check` names statistics, boundary and cell kind as the job file spells them (no Rust
/// names), prints a fine mesh with its digits (not `0.0000 nm`), and says what it is for.
#[test]
fn check_speaks_the_job_file_words() {
    let dir = tempfile::tempdir().unwrap();
    // Equal-width orbitals far from the walls: the centre of mass separates and the cells
    // are relative to it; a wider second orbital gives full cells.
    for (from, to, words) in [
        (
            "",
            "",
            [
                "statistics \"fermion\"",
                "boundary \"absorbing\"",
                "coordinates \"relative\"",
            ],
        ),
        (
            "statistics = \"fermion\"",
            "statistics = \"boson\"",
            [
                "statistics \"boson\"",
                "boundary \"absorbing\"",
                "coordinates \"relative\"",
            ],
        ),
        (
            "boundary = \"absorbing\"",
            "boundary = \"reflecting\"",
            [
                "statistics \"fermion\"",
                "boundary \"reflecting\"",
                "coordinates \"relative\"",
            ],
        ),
        (
            "width = 5.0\n\n[domain]",
            "width = 6.0\n\n[domain]",
            [
                "statistics \"fermion\"",
                "boundary \"absorbing\"",
                "coordinates \"full\"",
            ],
        ),
    ] {
        let text = if from.is_empty() {
            FREE_PAIR.to_string()
        } else {
            FREE_PAIR.replace(from, to)
        };
        let job = write_job(dir.path(), "job.toml", &text);
        let out = ok(&signfold(&["check", job.to_str().unwrap()]));
        for w in words {
            assert!(out.contains(w), "`{w}` in\n{out}");
        }
        for debug in [
            "Fermion",
            "Boson",
            "Absorbing",
            "Reflecting",
            "Full",
            "Relative",
        ] {
            assert!(!out.contains(debug), "Rust name `{debug}` in\n{out}");
        }
    }
    let job = write_job(dir.path(), "job.toml", FREE_PAIR);
    // 160 nm over 10^6 cells: 1.6e-4 nm.
    let out = ok(&signfold(&[
        "check",
        job.to_str().unwrap(),
        "--set",
        "domain.mesh_cells=1000000",
    ]));
    let domain = line(&out, "domain:");
    assert!(domain.contains("1000000 cells of 1.60e-4 nm"), "{domain}");
    assert!(domain.contains("kernel tables"), "{domain}");
    assert!(!out.contains("0.0000 nm"), "{out}");
}

/// The ∫|W|/∫W that `check` prints at t = 0 is the one `run` prints (the same draws,
/// summed the same way), labelled as such; with more draws than `check` sums it says it
/// used the first ones. Both explain why the initial count differs from
/// numerics.samples, and the count lies within five of the standard deviations they name.
#[test]
fn check_and_run_agree_on_the_initial_state() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", FREE_PAIR);
    let j = job.to_str().unwrap();
    let ratio_of = |l: &str| -> String {
        let rest = &l[l.find("∫|W|/∫W = ").expect("a ratio") + "∫|W|/∫W = ".len()..];
        rest.split([' ', ';']).next().unwrap().to_string()
    };
    let check = ok(&signfold(&["check", j]));
    let sign = line(&check, "sign problem:");
    assert!(sign.contains("the value `run` prints"), "{sign}");
    let note = line(&check, "initial samples:");
    assert!(note.contains("numerics.samples = 2000"), "{note}");
    let out = dir.path().join("out");
    let run = ok(&signfold(&[
        "run",
        j,
        "--out",
        out.to_str().unwrap(),
        "--until",
        "0",
    ]));
    let started = line(&run, "signfold: ");
    assert_eq!(
        ratio_of(started),
        ratio_of(sign),
        "check:\n{check}\nrun:\n{run}"
    );
    let count: f64 = started["signfold: ".len()..]
        .split(' ')
        .next()
        .unwrap()
        .parse()
        .unwrap();
    // Stochastic rounding of 2000 draws: one standard deviation ≤ √2000/2 ≈ 22.4.
    assert!((count - 2000.0).abs() <= 5.0 * 22.4, "{started}");
    assert!(
        run.contains("the initial count is random around numerics.samples = 2000"),
        "{run}"
    );
    let many = ok(&signfold(&["check", j, "--samples", "3000000"]));
    let sign = line(&many, "sign problem:");
    assert!(
        sign.contains("over the first 2000000 of the run's 3000000 initial draws"),
        "{sign}"
    );
}

/// Every argument and option of every subcommand has a description in `--help`.
#[test]
fn help_describes_every_argument() {
    for cmd in [
        "check",
        "run",
        "resume",
        "reference",
        "compare",
        "plot",
        "inspect",
        "scaling",
        "accuracy",
        "validate",
    ] {
        let help = ok(&signfold(&[cmd, "--help"]));
        let mut in_list = false;
        let lines: Vec<&str> = help.lines().collect();
        for (i, l) in lines.iter().enumerate() {
            if *l == "Arguments:" || *l == "Options:" {
                in_list = true;
                continue;
            }
            let entry = l.trim_start();
            if !in_list || !(entry.starts_with('-') || entry.starts_with('<')) {
                continue;
            }
            if l.len() - entry.len() > 6 {
                continue; // a wrapped description, not an entry
            }
            // The description follows on the same line after two spaces, or (long help)
            // on the next line.
            let same_line = entry
                .split_once("  ")
                .is_some_and(|(_, d)| !d.trim().is_empty() && !d.trim().starts_with('['));
            let next_line = lines.get(i + 1).is_some_and(|n| {
                let t = n.trim_start();
                n.len() - t.len() > 6 && !t.is_empty() && !t.starts_with('[')
            });
            assert!(
                same_line || next_line,
                "`signfold {cmd}`: no description for `{l}`\n{help}"
            );
        }
    }
}

/// `inspect` lists the output times of a result file; `plot --times` refuses a time outside
/// them, naming the range, and names the output it drew for a time between two.
#[test]
fn output_times_are_listed_and_never_snapped_silently() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", FREE_PAIR);
    run_job(dir.path(), &job, &[]);
    let h5 = dir.path().join("out").join("observables.h5");
    let f = h5.to_str().unwrap();
    let times = ok(&signfold(&["inspect", f, "--times"]));
    assert_eq!(times.lines().collect::<Vec<_>>(), ["0", "2", "4", "6", "8"]);
    let summary = ok(&signfold(&["inspect", f]));
    assert!(
        line(&summary, "times (fs):").ends_with("0, 2, 4, 6, 8"),
        "{summary}"
    );
    let pics = dir.path().join("pics");
    let p = pics.to_str().unwrap();
    let o = signfold(&["plot", f, "--out", p, "--times", "999"]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(
        stderr(&o).contains("--times 999") && stderr(&o).contains("from 0 to 8 fs"),
        "{}",
        stderr(&o)
    );
    assert!(!pics.exists(), "nothing drawn");
    let o = signfold(&["plot", f, "--out", p, "--times", "4,5.2"]);
    let drawn = ok(&o);
    assert!(
        stderr(&o).contains("--times 5.2: not an output time; drew the nearest output, t = 6 fs"),
        "{}",
        stderr(&o)
    );
    assert!(!stderr(&o).contains("--times 4:"), "4 fs is an output time");
    assert!(
        drawn.contains("wigner_t6fs.png") && drawn.contains("wigner_t4fs.png"),
        "{drawn}"
    );
}
