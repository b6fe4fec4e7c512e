//! The `plot` and `inspect` commands, run as a user would run them on result files.

use signfold::io::results::{self, ResultFile};
use signfold::viz::plot::{DENSITY_SIZE, HISTORY_SIZE, PAIR_SIZE, WIGNER_SIZE};
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::sync::Mutex;

const JOB_TEXT: &str =
    "# synthetic job for the plotting tests\n[domain]\nx_min = -20.0\nx_max = 20.0\n";
const TIMES: [f64; 5] = [0.0, 2.5, 5.0, 7.5, 10.0];
const NX: usize = 40;
const NK: usize = 30;

/// A small result file of two particles whose Wigner function has negative fringes.
/// `skip` names series left out.
fn synthetic(path: &Path, skip: &[&str]) {
    let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
    let x: Vec<f64> = (0..NX)
        .map(|i| -20.0 + (i as f64 + 0.5) * 40.0 / NX as f64)
        .collect();
    let k: Vec<f64> = (0..NK)
        .map(|j| -6.0 + (j as f64 + 0.5) * 12.0 / NK as f64)
        .collect();
    let mut rf = ResultFile::new(results::OBSERVABLES_TYPE, JOB_TEXT, x.clone(), k.clone());
    let g = |u: f64, s: f64| (-0.5 * (u / s).powi(2)).exp();
    for (n, &t) in TIMES.iter().enumerate() {
        let a = 5.0 + 0.5 * t;
        let mut push = |name: &str, units: &str, shape: &[usize], v: Vec<f64>| {
            if !skip.contains(&name) {
                rf.push(name, units, shape, &v);
            }
        };
        push("time", "fs", &[], vec![t]);
        let mut w = Vec::new();
        for &xi in &x {
            for &kj in &k {
                let cross = 2.0 * g(xi, 2.0) * (2.0 * a * kj).cos();
                w.push(0.02 * g(kj, 1.0) * (g(xi - a, 2.0) + g(xi + a, 2.0) + cross));
            }
        }
        push("wigner", "1", &[NX, NK], w);
        let d: Vec<f64> = x
            .iter()
            .map(|&xi| 0.1 * (g(xi - a, 2.0) + g(xi + a, 2.0)))
            .collect();
        push(
            "density_error",
            "1/nm",
            &[NX],
            d.iter().map(|v| 0.1 * v + 0.002).collect(),
        );
        push("density", "1/nm", &[NX], d.clone());
        let mut p = Vec::new();
        for i in 0..NX {
            for j in 0..NX {
                p.push(d[i] * d[j] * (1.0 - g(x[i] - x[j], 1.5)));
            }
        }
        push("pair_density", "1/nm²", &[NX, NX], p);
        push("norm", "1", &[], vec![1.0 - 0.01 * n as f64]);
        push("energy", "eV", &[], vec![0.3 + 0.001 * (n as f64).sin()]);
        push("samples", "1", &[], vec![1000.0 + 250.0 * n as f64]);
    }
    rf.write_atomic(path)
        .expect("the synthetic file is written");
}

/// Held while a test writes an HDF5 file and while it starts a child process, so that no
/// child inherits (and keeps locked) a file another test thread is writing.
static FILES: Mutex<()> = Mutex::new(());

fn signfold(args: &[&str]) -> Output {
    let child = {
        let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
        Command::new(env!("CARGO_BIN_EXE_signfold"))
            .args(args)
            .env("RUST_BACKTRACE", "1")
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .expect("the binary starts")
    };
    child.wait_with_output().expect("the binary runs")
}

fn s(p: &Path) -> &str {
    p.to_str().expect("temporary paths are UTF-8")
}

/// Decode a PNG; return its size and whether it has more than one colour.
fn decode(path: &Path) -> ((u32, u32), bool) {
    let file = std::fs::File::open(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let mut reader = png::Decoder::new(std::io::BufReader::new(file))
        .read_info()
        .expect("a PNG header");
    let mut buf = vec![0; reader.output_buffer_size().expect("a sane size")];
    let info = reader.next_frame(&mut buf).expect("PNG image data");
    let px = info.color_type.samples() * (info.bit_depth as usize / 8).max(1);
    let data = &buf[..info.buffer_size()];
    let varied = data.chunks(px).any(|c| c != &data[..px]);
    ((info.width, info.height), varied)
}

/// Distinct colours in the image.
fn colours(path: &Path) -> std::collections::HashSet<Vec<u8>> {
    let file = std::fs::File::open(path).unwrap();
    let mut reader = png::Decoder::new(std::io::BufReader::new(file))
        .read_info()
        .unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    let px = info.color_type.samples();
    buf[..info.buffer_size()]
        .chunks(px)
        .map(|c| c.to_vec())
        .collect()
}

fn assert_clean_failure(out: &Output, needles: &[&str]) {
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "stderr: {err}");
    assert!(err.contains("signfold: error:"), "stderr: {err}");
    for n in needles {
        assert!(err.contains(n), "stderr should name {n:?}: {err}");
    }
    for bad in ["panicked", "backtrace", "RUST_BACKTRACE"] {
        assert!(!err.contains(bad), "stderr has {bad:?}: {err}");
    }
}

#[test]
fn plot_writes_every_picture_at_its_size() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("observables.h5");
    synthetic(&file, &[]);
    let out = dir.path().join("pictures");
    let run = signfold(&["plot", s(&file), "--out", s(&out)]);
    assert!(
        run.status.success(),
        "stderr: {}",
        String::from_utf8_lossy(&run.stderr)
    );
    let printed: Vec<PathBuf> = String::from_utf8_lossy(&run.stdout)
        .lines()
        .map(PathBuf::from)
        .collect();
    let mut expected: Vec<(PathBuf, (u32, u32))> = Vec::new();
    for t in ["0", "5", "10"] {
        expected.push((out.join(format!("wigner_t{t}fs.png")), WIGNER_SIZE));
        expected.push((out.join(format!("pair_density_t{t}fs.png")), PAIR_SIZE));
    }
    expected.push((out.join("density.png"), DENSITY_SIZE));
    expected.push((out.join("history.png"), HISTORY_SIZE));
    assert_eq!(printed.len(), expected.len(), "printed: {printed:?}");
    for (path, size) in &expected {
        assert!(printed.contains(path), "{} not printed", path.display());
        let (got, varied) = decode(path);
        assert_eq!(got, *size, "{}", path.display());
        assert!(varied, "{} is a single colour", path.display());
    }
}

#[test]
fn wigner_picture_shows_both_signs() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("observables.h5");
    synthetic(&file, &[]);
    let out = dir.path().join("p");
    assert!(
        signfold(&["plot", s(&file), "--out", s(&out), "--times", "0"])
            .status
            .success()
    );
    let c = colours(&out.join("wigner_t0fs.png"));
    let blue = c.iter().any(|p| p[2] as i32 - p[0] as i32 > 60);
    let red = c.iter().any(|p| p[0] as i32 - p[2] as i32 > 60);
    assert!(
        blue && red,
        "a diverging map shows negative (blue) and positive (red) values"
    );
}

#[test]
fn requested_times_snap_to_outputs_and_against_adds_no_pictures() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b) = (
        dir.path().join("observables.h5"),
        dir.path().join("reference.h5"),
    );
    synthetic(&a, &[]);
    synthetic(&b, &["pair_density", "samples", "density_error"]);
    let out = dir.path().join("p");
    let run = signfold(&[
        "plot",
        s(&a),
        "--out",
        s(&out),
        "--times",
        "2.4,2.6,9",
        "--against",
        s(&b),
    ]);
    assert!(
        run.status.success(),
        "stderr: {}",
        String::from_utf8_lossy(&run.stderr)
    );
    let names: Vec<String> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    let mut names = names;
    names.sort();
    assert_eq!(
        names,
        [
            "density.png",
            "history.png",
            "pair_density_t10fs.png",
            "pair_density_t2.5fs.png",
            "wigner_t10fs.png",
            "wigner_t2.5fs.png"
        ]
    );
}

#[test]
fn missing_wigner_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("no-wigner.h5");
    synthetic(&file, &["wigner"]);
    let out = dir.path().join("p");
    assert_clean_failure(
        &signfold(&["plot", s(&file), "--out", s(&out)]),
        &["no-wigner.h5", "`wigner`"],
    );
    // inspect still describes such a file, and says nothing of a `wigner` dataset.
    let run = signfold(&["inspect", s(&file)]);
    assert!(
        run.status.success(),
        "stderr: {}",
        String::from_utf8_lossy(&run.stderr)
    );
    let text = String::from_utf8_lossy(&run.stdout);
    assert!(
        text.contains("/density") && !text.contains("/wigner"),
        "{text}"
    );
}

#[test]
fn missing_density_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("no-density.h5");
    synthetic(&file, &["density"]);
    let out = dir.path().join("p");
    assert_clean_failure(
        &signfold(&["plot", s(&file), "--out", s(&out)]),
        &["no-density.h5", "`density`"],
    );
}

#[test]
fn truncated_file_fails_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let good = dir.path().join("good.h5");
    synthetic(&good, &[]);
    let bytes = std::fs::read(&good).unwrap();
    let cut = dir.path().join("cut.h5");
    std::fs::write(&cut, &bytes[..bytes.len() / 2]).unwrap();
    let out = dir.path().join("p");
    assert_clean_failure(
        &signfold(&["plot", s(&cut), "--out", s(&out)]),
        &["cut.h5", "truncated"],
    );
    assert_clean_failure(&signfold(&["inspect", s(&cut)]), &["cut.h5", "truncated"]);
}

#[test]
fn text_file_is_not_hdf5() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("notes.h5");
    std::fs::write(&file, "these are not the results you are looking for\n").unwrap();
    let out = dir.path().join("p");
    assert_clean_failure(
        &signfold(&["plot", s(&file), "--out", s(&out)]),
        &["notes.h5", "HDF5"],
    );
    assert_clean_failure(
        &signfold(&["inspect", s(&file)]),
        &["notes.h5", "not an HDF5 file"],
    );
}

#[test]
fn missing_file_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("absent.h5");
    let out = dir.path().join("p");
    assert_clean_failure(
        &signfold(&["plot", s(&file), "--out", s(&out)]),
        &["absent.h5", "no such file"],
    );
    assert_clean_failure(
        &signfold(&["inspect", s(&file)]),
        &["absent.h5", "no such file"],
    );
}

#[test]
fn inspect_lists_job_times_grids_and_datasets() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("observables.h5");
    synthetic(&file, &[]);
    let run = signfold(&["inspect", s(&file)]);
    assert!(
        run.status.success(),
        "stderr: {}",
        String::from_utf8_lossy(&run.stderr)
    );
    let text = String::from_utf8_lossy(&run.stdout);
    for l in JOB_TEXT.lines() {
        assert!(text.contains(l), "job line {l:?} missing from:\n{text}");
    }
    let expect = [
        "signfold-observables",
        "5, from 0 to 10 fs",
        "last time:       10 fs",
        "40 bins over [-20, 20] nm",
        "30 bins over [-6, 6] 1/nm",
        "first 1000, last 2000",
        "complete:        yes",
    ];
    for e in expect {
        assert!(text.contains(e), "{e:?} missing from:\n{text}");
    }
    let size = std::fs::metadata(&file).unwrap().len();
    assert!(text.contains(&format!("{size} bytes")), "{text}");
    let wigner = text
        .lines()
        .find(|l| l.trim_start().starts_with("/wigner"))
        .expect("a /wigner line");
    assert!(wigner.contains("(5, 40, 30)"), "{wigner}");
    let pair = text
        .lines()
        .find(|l| l.trim_start().starts_with("/pair_density"))
        .expect("a /pair_density line");
    assert!(
        pair.contains("(5, 40, 40)") && pair.contains("[1/nm²]"),
        "{pair}"
    );
}

/// A checkpoint as the engine writes it: root attributes and particle arrays under
/// `/particles`.
fn checkpoint(path: &Path, complete: u8) {
    let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
    let f = hdf5::File::create(path).unwrap();
    results::write_str_attr(&f, "file_type", "signfold-checkpoint").unwrap();
    results::write_str_attr(&f, "program_version", "0.1.0").unwrap();
    results::write_str_attr(&f, "job", JOB_TEXT).unwrap();
    f.new_attr::<u32>()
        .create("format_version")
        .unwrap()
        .write_scalar(&1u32)
        .unwrap();
    f.new_attr::<f64>()
        .create("time")
        .unwrap()
        .write_scalar(&12.5)
        .unwrap();
    f.new_attr::<u8>()
        .create("complete")
        .unwrap()
        .write_scalar(&complete)
        .unwrap();
    let g = f.create_group("particles").unwrap();
    for name in ["x", "k", "sign"] {
        let ds = g.new_dataset::<f64>().shape([100, 2]).create(name).unwrap();
        ds.write_raw(&[0.5; 200]).unwrap();
    }
}

#[test]
fn inspect_reports_checkpoint_state() {
    let dir = tempfile::tempdir().unwrap();
    for (complete, expect) in [(1u8, "complete:        yes"), (0, "complete:        no")] {
        let file = dir.path().join(format!("checkpoint-{complete}.h5"));
        checkpoint(&file, complete);
        let run = signfold(&["inspect", s(&file)]);
        assert!(
            run.status.success(),
            "stderr: {}",
            String::from_utf8_lossy(&run.stderr)
        );
        let text = String::from_utf8_lossy(&run.stdout);
        for e in [
            expect,
            "signfold-checkpoint",
            "time:            12.5 fs",
            "100 stored",
            "/particles/sign",
        ] {
            assert!(text.contains(e), "{e:?} missing from:\n{text}");
        }
        assert!(text.contains("x_min = -20.0"), "job text missing:\n{text}");
    }
}

#[test]
fn inspect_flags_a_result_file_with_a_short_series() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("partial.h5");
    {
        let _guard = FILES.lock().unwrap_or_else(|e| e.into_inner());
        let mut rf = ResultFile::new(
            results::OBSERVABLES_TYPE,
            JOB_TEXT,
            vec![0.0, 1.0],
            vec![0.0],
        );
        rf.push("time", "fs", &[], &[0.0]);
        rf.push("time", "fs", &[], &[1.0]);
        rf.push("density", "1/nm", &[2], &[0.5, 0.5]);
        rf.write_atomic(&file).unwrap();
    }
    let run = signfold(&["inspect", s(&file)]);
    assert!(
        run.status.success(),
        "stderr: {}",
        String::from_utf8_lossy(&run.stderr)
    );
    let text = String::from_utf8_lossy(&run.stdout);
    assert!(
        text.contains("complete:        no (/density has 1 frames; `time` has 2)"),
        "{text}"
    );
}

#[test]
fn window_limits_every_map_and_bad_windows_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("observables.h5");
    synthetic(&file, &[]);
    let full = dir.path().join("full");
    let zoom = dir.path().join("zoom");
    for (out, extra) in [(&full, None), (&zoom, Some("--window=-8:8"))] {
        let mut args = vec!["plot", s(&file), "--out", s(out), "--times", "5"];
        args.extend(extra);
        let run = signfold(&args);
        assert!(
            run.status.success(),
            "stderr: {}",
            String::from_utf8_lossy(&run.stderr)
        );
    }
    // Both maps are written at their sizes and the window changes what they show.
    for (name, size) in [
        ("wigner_t5fs.png", WIGNER_SIZE),
        ("pair_density_t5fs.png", PAIR_SIZE),
    ] {
        let (got, varied) = decode(&zoom.join(name));
        assert_eq!(got, size, "{name}");
        assert!(varied, "{name} is a single colour");
        assert_ne!(
            std::fs::read(full.join(name)).unwrap(),
            std::fs::read(zoom.join(name)).unwrap(),
            "{name}: --window changed nothing"
        );
    }
    // The window syntax (also with a space and a leading minus), and windows holding no
    // bin, are refused naming the option.
    let out = dir.path().join("bad");
    for (w, needle) in [
        ("-8", "no `:`"),
        ("8:-8", "XMIN must be below XMAX"),
        ("100:200", "no x bin centre lies inside"),
    ] {
        assert_clean_failure(
            &signfold(&["plot", s(&file), "--out", s(&out), "--window", w]),
            &["--window", needle],
        );
    }
}
