//! One vocabulary (format version 2): physical bodies are "particles", Monte Carlo samples
//! are "samples". The names renamed in format version 2 keep working for one format
//! version, with a warning: job keys, options, the result datasets (as HDF5 soft links)
//! and files written with the old names. (Contract of the command line and of the result
//! files, docs/formats.md "Renamed in format version 2"; no outside source.)

mod common;

use common::*;
use signfold::config::job::{self, JobError, JobFileError, RENAMED_KEYS};
use signfold::io::names;
use signfold::io::results::ResultFile;
use std::path::{Path, PathBuf};

fn stderr(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// `FREE_PAIR` written with the format-1 key names (all three renamed keys).
fn old_spelling() -> String {
    FREE_PAIR
        .replace("samples = 2000", "samples = 2000\n")
        .replace("samples = ", "particles = ")
        .replace("mesh_cells = 160", "cells = 160")
        + "\n[annihilation]\ncells = \"full\"\n"
}

/// Every `*.toml` under `dir`, recursively.
fn toml_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            toml_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "toml") {
            out.push(p);
        }
    }
}

#[test]
fn old_job_keys_still_load_and_each_warns_naming_both_spellings() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "old.toml", &old_spelling());
    let o = signfold(&["check", job.to_str().unwrap()]);
    ok(&o);
    let err = stderr(&o);
    for (table, old, new) in RENAMED_KEYS {
        let (old, new) = (format!("`{table}.{old}`"), format!("`{table}.{new}`"));
        assert!(
            err.lines()
                .any(|l| l.contains("warning") && l.contains(&old) && l.contains(&new)),
            "no warning naming {old} and {new}:\n{err}"
        );
    }
    // The library returns the warnings as data, and the job reads the old values.
    let loaded = job::from_text(&old_spelling(), "old.toml", PathBuf::new(), &[]).unwrap();
    assert_eq!(loaded.warnings.len(), 3);
    assert_eq!(loaded.job.numerics.samples, 2000);
    assert_eq!(loaded.job.domain.mesh_cells, 160);
    // The stored text uses the current names, the user's layout otherwise unchanged.
    assert!(loaded.text.contains("\nsamples = 2000"), "{}", loaded.text);
    assert!(
        loaded.text.contains("\nmesh_cells = 160"),
        "{}",
        loaded.text
    );
    assert!(
        loaded.text.contains("\ncoordinates = \"full\""),
        "{}",
        loaded.text
    );
    assert_eq!(
        loaded.text.lines().count(),
        old_spelling().lines().count(),
        "renaming keeps the line numbers"
    );
    // The current spelling loads without warnings.
    let new = job::from_text(FREE_PAIR, "new.toml", PathBuf::new(), &[]).unwrap();
    assert!(new.warnings.is_empty(), "{:?}", new.warnings);
}

#[test]
fn an_old_key_given_through_set_warns_and_sets_the_new_key() {
    let loaded = job::from_text(
        FREE_PAIR,
        "new.toml",
        PathBuf::new(),
        &["numerics.particles=3000".into()],
    )
    .unwrap();
    assert_eq!(loaded.job.numerics.samples, 3000);
    assert_eq!(loaded.warnings.len(), 1);
    assert_eq!(loaded.warnings[0].place, "--set");
    assert_eq!(loaded.warnings[0].old, "numerics.particles");
    assert_eq!(loaded.warnings[0].new, "numerics.samples");
}

#[test]
fn both_spellings_of_one_key_are_an_error_naming_both() {
    let dir = tempfile::tempdir().unwrap();
    for (table, old, new, value) in [
        ("numerics", "particles", "samples", "2000"),
        ("domain", "cells", "mesh_cells", "160"),
        ("annihilation", "cells", "coordinates", "\"full\""),
    ] {
        let mut text = FREE_PAIR.to_string();
        if table == "annihilation" {
            text += "\n[annihilation]\ncoordinates = \"full\"\n";
        }
        let text = text.replacen(
            &format!("[{table}]\n"),
            &format!("[{table}]\n{old} = {value}\n"),
            1,
        );
        let (old, new) = (format!("{table}.{old}"), format!("{table}.{new}"));
        // The library: a typed error with both keys.
        let e = job::from_text(&text, "both.toml", PathBuf::new(), &[]).unwrap_err();
        let e = e.downcast_ref::<JobFileError>().expect("a job error");
        assert_eq!(
            e.error,
            JobError::BothSpellings {
                old: old.clone(),
                new: new.clone()
            }
        );
        // The command line: exit 2, a message naming both keys and the file.
        let job = write_job(dir.path(), "both.toml", &text);
        let o = signfold(&["check", job.to_str().unwrap()]);
        assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
        let err = stderr(&o);
        assert!(
            err.contains(&old) && err.contains(&new) && err.contains("both.toml"),
            "{err}"
        );
        assert!(!err.contains("panicked"), "{err}");
    }
}

#[test]
fn validation_errors_are_typed_with_their_key() {
    let cases = [
        ("samples = 2000", "samples = 0", "numerics.samples"),
        ("mesh_cells = 160", "mesh_cells = 2", "domain.mesh_cells"),
        ("end_time = 8.0", "end_time = -1.0", "numerics.end_time"),
    ];
    for (from, to, key) in cases {
        let text = FREE_PAIR.replace(from, to);
        let e = job::from_text(&text, "bad.toml", PathBuf::new(), &[]).unwrap_err();
        let e = e.downcast_ref::<JobFileError>().expect("a job error");
        assert!(
            matches!(&e.error, JobError::Invalid { key: k, .. } if k == key),
            "{:?}",
            e.error
        );
        assert_eq!(e.error.key(), Some(key));
    }
    let text = FREE_PAIR.replace("sync_step = 2.0", "sync_step = 20.0");
    let e = job::from_text(&text, "bad.toml", PathBuf::new(), &[]).unwrap_err();
    let e = e.downcast_ref::<JobFileError>().expect("a job error");
    assert!(
        matches!(&e.error, JobError::Conflict { key, other, .. }
            if key == "numerics.sync_step" && other == "numerics.end_time"),
        "{:?}",
        e.error
    );
    let e =
        job::from_text(FREE_PAIR, "x", PathBuf::new(), &["numerics.groups".into()]).unwrap_err();
    assert!(
        matches!(e.downcast_ref::<JobError>(), Some(JobError::Override { spec, .. }) if spec == "numerics.groups"),
        "{e:#}"
    );
}

#[test]
fn set_keeps_the_comments_and_layout_of_the_job() {
    let text = FREE_PAIR.replace("seed = 1", "seed = 1  # the first of the job array")
        + "# a closing remark\n";
    let loaded = job::from_text(
        &text,
        "commented.toml",
        PathBuf::new(),
        &[
            "numerics.seed=7".into(),
            "annihilation.budget=100000".into(),
        ],
    )
    .unwrap();
    assert_eq!(loaded.job.numerics.seed, 7);
    assert!(
        loaded
            .text
            .contains("seed = 7  # the first of the job array"),
        "{}",
        loaded.text
    );
    assert!(
        loaded.text.contains("# a closing remark"),
        "{}",
        loaded.text
    );
    // Keys stay where the user put them: the first lines are unchanged.
    assert!(
        loaded
            .text
            .starts_with(FREE_PAIR.split("[numerics]").next().unwrap())
    );
}

#[test]
fn old_options_still_work_and_warn() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", FREE_PAIR);
    let o = signfold(&["check", job.to_str().unwrap(), "--particles", "3000"]);
    ok(&o);
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(out.contains("numerics.samples = 3000"), "{out}");
    let err = stderr(&o);
    assert!(
        err.contains("warning") && err.contains("--particles") && err.contains("--samples"),
        "{err}"
    );
    let o = signfold(&["check", job.to_str().unwrap(), "--samples", "3000"]);
    ok(&o);
    assert!(!stderr(&o).contains("warning"), "{}", stderr(&o));
    // Both spellings of the option at once: refused by the parser.
    let o = signfold(&[
        "check",
        job.to_str().unwrap(),
        "--samples",
        "3000",
        "--particles",
        "3000",
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    // `scaling --mode both` is read as `--mode strong-weak`, with a warning (the launcher
    // `false` fails at once: only the warning is looked at).
    let o = signfold(&[
        "scaling",
        job.to_str().unwrap(),
        "--ranks",
        "1",
        "--mode",
        "both",
        "--launcher",
        "false",
        "--out",
        dir.path().join("sc").to_str().unwrap(),
    ]);
    let err = stderr(&o);
    assert!(
        err.contains("warning: --mode both") && err.contains("--mode strong-weak"),
        "{err}"
    );
}

#[test]
fn no_job_file_in_jobs_uses_an_old_key() {
    let mut files = Vec::new();
    toml_files(
        &Path::new(env!("CARGO_MANIFEST_DIR")).join("jobs"),
        &mut files,
    );
    assert!(files.len() >= 19, "{files:?}");
    for f in files {
        let text = std::fs::read_to_string(&f).unwrap();
        let (_, warnings) = job::current_spelling(&text, &f.display().to_string()).unwrap();
        assert!(warnings.is_empty(), "{}: {warnings:?}", f.display());
    }
}

/// Rewrite a format-2 result file as format 1 wrote it: `particles*` datasets instead of
/// `samples*` (no links), a zero `lost_norm` series, `/run/seconds_regeneration`, the job
/// text with the old keys, format version 1.
fn make_format_1(path: &Path, old_job: &str) {
    let f = hdf5::File::open_rw(path).unwrap();
    for (old, new) in names::RENAMED_DATASETS {
        f.unlink(old).unwrap();
        f.relink(new, old).unwrap();
    }
    let nt = f.dataset("time").unwrap().shape()[0];
    for name in ["lost_norm", "lost_norm_error"] {
        let ds = f.new_dataset::<f64>().shape([nt]).create(name).unwrap();
        ds.write_raw(&vec![0.0; nt]).unwrap();
    }
    if let Ok(run) = f.group("run") {
        run.relink("seconds_selection", "seconds_regeneration")
            .unwrap();
    }
    f.delete_attr("format_version").unwrap();
    f.new_attr::<u32>()
        .create("format_version")
        .unwrap()
        .write_scalar(&1u32)
        .unwrap();
    f.delete_attr("job").unwrap();
    signfold::io::results::write_str_attr(&f, "job", old_job).unwrap();
}

#[test]
fn result_files_link_the_old_names_and_files_with_the_old_names_are_read() {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", FREE_PAIR);
    let run = |out: &str, seed: &str| {
        let out = dir.path().join(out);
        ok(&signfold(&[
            "run",
            job.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--set",
            &format!("numerics.seed={seed}"),
        ]));
        out.join(names::OBSERVABLES_FILE)
    };
    let (a, b) = (run("a", "1"), run("b", "2"));
    // The new layout: `samples`, and `particles` a soft link resolving to the same data.
    {
        let f = hdf5::File::open(&a).unwrap();
        for (old, new) in names::RENAMED_DATASETS {
            let kind = f
                .find_link(
                    hdf5::IndexType::Name,
                    hdf5::IterationOrder::Increasing,
                    |name, info| Ok((name == old).then_some(info.link_type)),
                )
                .unwrap();
            assert_eq!(kind, Some(hdf5::LinkType::Soft), "`{old}`");
            let via_link = f.dataset(old).unwrap().read_raw::<f64>().unwrap();
            let direct = f.dataset(new).unwrap().read_raw::<f64>().unwrap();
            assert_eq!(via_link, direct, "`{old}` → `{new}`");
            assert!(!direct.is_empty() && direct[0] > 0.0);
        }
        assert!(f.dataset("lost_norm").is_err(), "the dropped tally");
        let v: u32 = f.attr("format_version").unwrap().read_scalar().unwrap();
        assert_eq!(v, names::FORMAT_VERSION);
    }
    let new_a = ResultFile::read(&a).unwrap();
    assert!(new_a.run.contains_key("seconds_selection"));
    assert!(
        !new_a.series.contains_key("particles"),
        "links are not read twice"
    );
    // The same files as format 1 wrote them are read with the new names.
    let (a1, b1) = (dir.path().join("a1.h5"), dir.path().join("b1.h5"));
    std::fs::copy(&a, &a1).unwrap();
    std::fs::copy(&b, &b1).unwrap();
    make_format_1(&a1, &old_spelling());
    make_format_1(&b1, &old_spelling().replace("seed = 1", "seed = 2"));
    let old_a = ResultFile::read(&a1).unwrap();
    assert_eq!(old_a.format_version, 1);
    assert_eq!(
        old_a.series, new_a.series,
        "the same series under the new names"
    );
    assert_eq!(
        old_a.run["seconds_selection"], new_a.run["seconds_selection"],
        "the old phase name read as the new one"
    );
    // inspect, compare, plot and merge take them.
    let shown = ok(&signfold(&["inspect", a1.to_str().unwrap()]));
    assert!(shown.contains("samples:"), "{shown}");
    let shown = ok(&signfold(&["inspect", a.to_str().unwrap()]));
    assert!(shown.contains("soft link to /samples"), "{shown}");
    ok(&signfold(&[
        "compare",
        a1.to_str().unwrap(),
        b.to_str().unwrap(),
    ]));
    ok(&signfold(&[
        "plot",
        a1.to_str().unwrap(),
        "--out",
        dir.path().join("plots").to_str().unwrap(),
    ]));
    let merged = dir.path().join("m");
    ok(&signfold(&[
        "merge",
        a1.to_str().unwrap(),
        b1.to_str().unwrap(),
        "--out",
        merged.to_str().unwrap(),
    ]));
    let m = ResultFile::read(&merged.join(names::OBSERVABLES_FILE)).unwrap();
    assert_eq!(m.format_version, names::FORMAT_VERSION);
    let j = job::parse_stored(&m.job_text).unwrap();
    assert_eq!(j.numerics.samples, 4000, "the summed samples of both runs");
    assert!(m.job_text.contains("samples = 4000"), "{}", m.job_text);
    // Runs of different format versions are not merged.
    let o = signfold(&[
        "merge",
        a1.to_str().unwrap(),
        b.to_str().unwrap(),
        "--out",
        dir.path().join("m2").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("format version"), "{}", stderr(&o));
}

/// The stored job text with the format-1 key names.
fn old_keys(text: &str) -> String {
    text.replace("\nsamples = ", "\nparticles = ")
        .replace("\nmesh_cells = ", "\ncells = ")
}

/// A checkpoint of format 1 (attribute and group `particles`, a zero `/state/lost_momentum`,
/// the job with the old keys, a results copy of format 1) is resumed, and the run ends
/// bit-identical to one that never stopped.
#[test]
fn a_checkpoint_of_format_1_is_resumed_bit_identically() {
    use signfold::io::checkpoint;
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(dir.path(), "job.toml", FREE_PAIR);
    let (full, part) = (dir.path().join("full"), dir.path().join("part"));
    let run = |out: &Path, extra: &[&str]| {
        let mut a = vec!["run", job.to_str().unwrap(), "--out", out.to_str().unwrap()];
        a.extend_from_slice(extra);
        ok(&signfold(&a));
    };
    run(&full, &[]);
    run(&part, &["--until", "4"]);
    let steps = checkpoint::list(&part);
    assert_eq!(steps.len(), 1, "one checkpoint at t = 4");
    let cp = checkpoint::particle_path(&part, steps[0]);
    {
        let f = hdf5::File::open_rw(&cp).unwrap();
        let total: u64 = f.attr("samples").unwrap().read_scalar().unwrap();
        f.delete_attr("samples").unwrap();
        f.new_attr::<u64>()
            .create("particles")
            .unwrap()
            .write_scalar(&total)
            .unwrap();
        f.relink("samples", "particles").unwrap();
        let state = f.group("state").unwrap();
        let groups = state.dataset("s0").unwrap().size();
        state
            .new_dataset::<i64>()
            .shape([groups])
            .create("lost_momentum")
            .unwrap()
            .write_raw(&vec![0i64; groups])
            .unwrap();
        f.delete_attr("format_version").unwrap();
        f.new_attr::<u32>()
            .create("format_version")
            .unwrap()
            .write_scalar(&1u32)
            .unwrap();
        let text = signfold::io::results::read_str_attr(&f, "job").unwrap();
        assert!(text.contains("\nsamples = "), "{text}");
        f.delete_attr("job").unwrap();
        signfold::io::results::write_str_attr(&f, "job", &old_keys(&text)).unwrap();
    }
    let copy = checkpoint::results_path(&part, steps[0]);
    let text = ResultFile::read(&copy).unwrap().job_text;
    make_format_1(&copy, &old_keys(&text));
    let shown = ok(&signfold(&["inspect", cp.to_str().unwrap()]));
    assert!(shown.contains("samples:"), "{shown}");
    ok(&signfold(&["resume", part.to_str().unwrap()]));
    let a = ResultFile::read(&full.join(names::OBSERVABLES_FILE)).unwrap();
    let b = ResultFile::read(&part.join(names::OBSERVABLES_FILE)).unwrap();
    assert_eq!(
        b.format_version,
        names::FORMAT_VERSION,
        "written in the new layout"
    );
    assert_same_datasets(&a, &b, "resumed from a format-1 checkpoint");
}
