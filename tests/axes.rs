//! Result files carry named axes (HDF5 dimension scales, which netCDF-4 reads as its
//! dimensions) and a units attribute on every dataset; files without them still read.

mod common;

use common::{demo, ok, signfold};
use signfold::io::axes;
use signfold::io::names;
use signfold::io::results::{ResultFile, write_str_attr};
use std::collections::BTreeMap;
use std::path::Path;

type Axes = BTreeMap<String, (String, Vec<String>)>;

/// The axes every dataset must carry (contract of docs/formats.md, "Named axes").
fn expected_axes(name: &str) -> Vec<&'static str> {
    let base = name.strip_suffix("_error").unwrap_or(name);
    match base {
        "time" => vec!["time"],
        "x" => vec!["x"],
        "x_prime" => vec!["x_prime"],
        "k" => vec!["k"],
        "density" | "current_density" => vec!["time", "x"],
        "pair_density" => vec!["time", "x", "x_prime"],
        "wigner" => vec!["time", "x", "k"],
        "momentum_density" => vec!["time", "k"],
        n if n.starts_with("annihilation_") => vec!["annihilation_time"],
        "run/rank" => vec!["rank"],
        "run/pass_rank" | "run/bytes_sent" | "run/messages_sent" | "run/occupied_cells" => {
            vec!["pass_rank"]
        }
        n if n.starts_with("run/seconds_") || n == "run/wall_seconds" => vec!["rank"],
        n if n.starts_with("run/") => vec!["single"],
        _ => vec!["time"],
    }
}

fn expected_units(name: &str) -> &'static str {
    let base = name.strip_suffix("_error").unwrap_or(name);
    match base {
        "time" | "annihilation_time" => "fs",
        "x" | "x_prime" | "mean_x" | "annihilation_cell_x" => "nm",
        "k" | "mean_k" | "annihilation_cell_k" => "1/nm",
        "density" => "1/nm",
        "pair_density" => "1/nm^2",
        "momentum_density" => "nm",
        "current_density" => "1/fs",
        "energy" => "eV",
        "mean_force" => "eV/nm",
        "run/bytes_sent" => "B",
        n if n.starts_with("run/seconds_") => "s",
        "run/wall_seconds" | "run/wall_time" => "s",
        "run/reference_dx" | "run/reference_padding" => "nm",
        "run/reference_max_dt" => "fs",
        _ => "1",
    }
}

/// Every dataset has its expected axes and units; returns the dataset names.
fn check_axes(path: &Path) -> Axes {
    let found = axes::read_axes(path).expect("axes readable");
    for (name, (units, axes)) in &found {
        let want: Vec<String> = expected_axes(name).iter().map(|s| s.to_string()).collect();
        assert_eq!(axes, &want, "{}: axes of `{name}`", path.display());
        assert_eq!(
            units,
            expected_units(name),
            "{}: units of `{name}`",
            path.display()
        );
    }
    found
}

/// The same check through the hdf5 crate alone: scales carry the `CLASS` attribute of the
/// dimension-scale convention, every other dataset a `DIMENSION_LIST` with one entry per
/// dimension.
fn check_attributes(path: &Path, found: &Axes) {
    let f = hdf5::File::open(path).unwrap();
    for name in found.keys() {
        let ds = f.dataset(name).unwrap();
        let is_scale = expected_axes(name) == [name.rsplit('/').next().unwrap()];
        if is_scale {
            assert!(
                ds.attr("CLASS").is_ok(),
                "`{name}` is not a dimension scale"
            );
            assert!(ds.attr("DIMENSION_LIST").is_err(), "`{name}`");
        } else {
            let dl = ds.attr("DIMENSION_LIST").expect(name);
            assert_eq!(dl.shape(), vec![ds.ndim()], "DIMENSION_LIST of `{name}`");
        }
    }
}

#[test]
fn monte_carlo_results_have_named_axes_and_units() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("mc");
    let job = demo("fermion-pair.toml");
    ok(&signfold(&[
        "run",
        job.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--samples",
        "20000",
    ]));
    let path = out.join(names::OBSERVABLES_FILE);
    let found = check_axes(&path);
    for name in [
        "time",
        "x",
        "x_prime",
        "k",
        "density",
        "pair_density_error",
        "wigner",
        "momentum_density",
        "norm",
        "energy_error",
        "samples",
        "run/rank",
        "run/seconds_advance",
        "run/bytes_sent",
        "run/messages_sent",
        "run/ranks",
    ] {
        assert!(found.contains_key(name), "`{name}` missing: {found:?}");
    }
    check_attributes(&path, &found);

    // x_prime holds the x bin centres; the reader leaves the axis-only datasets out, and a
    // file read and written again (as resume does) has the same axes.
    let f = hdf5::File::open(&path).unwrap();
    let xp: Vec<f64> = f.dataset("x_prime").unwrap().read_raw().unwrap();
    let rf = ResultFile::read(&path).unwrap();
    assert_eq!(xp, rf.x);
    assert!(!rf.series.contains_key("x_prime") && !rf.records.contains_key("x_prime"));
    assert!(!rf.run.contains_key("rank") && !rf.run.contains_key("single"));
    let again = dir.path().join("again.h5");
    rf.write_atomic(&again).unwrap();
    assert_eq!(check_axes(&again), found);
    assert_eq!(ResultFile::read(&again).unwrap(), rf);
}

#[test]
fn annihilation_records_and_reference_have_named_axes() {
    let dir = tempfile::tempdir().unwrap();
    // A barrier generates particles, so annihilation passes happen within 20 fs.
    let mc = dir.path().join("mc");
    let job = demo("barrier-packet.toml");
    ok(&signfold(&[
        "run",
        job.to_str().unwrap(),
        "--out",
        mc.to_str().unwrap(),
        "--samples",
        "20000",
        "--set",
        "numerics.end_time=20",
    ]));
    let found = check_axes(&mc.join(names::OBSERVABLES_FILE));
    assert!(
        found.contains_key("annihilation_cancelled"),
        "no annihilation pass in the run: {:?}",
        found.keys()
    );
    check_attributes(&mc.join(names::OBSERVABLES_FILE), &found);

    // The exact reference shares the writer.
    let rd = dir.path().join("ref");
    let pair = demo("fermion-pair.toml");
    ok(&signfold(&[
        "reference",
        pair.to_str().unwrap(),
        "--out",
        rd.to_str().unwrap(),
        "--points",
        "300",
        "--set",
        "numerics.end_time=4",
    ]));
    let path = rd.join(names::REFERENCE_FILE);
    let found = check_axes(&path);
    for name in ["pair_density", "x_prime", "run/single", "run/reference_dx"] {
        assert!(found.contains_key(name), "`{name}` missing: {found:?}");
    }
    check_attributes(&path, &found);
}

/// A file of format version 1 written before the axes existed (no dimension scales, no
/// `x_prime`) still reads.
#[test]
fn files_without_axes_still_read() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("old.h5");
    {
        let f = hdf5::File::create(&path).unwrap();
        write_str_attr(&f, "file_type", "signfold-observables").unwrap();
        write_str_attr(&f, "job", "[domain]\n").unwrap();
        f.new_attr::<u32>()
            .create("format_version")
            .unwrap()
            .write_scalar(&1u32)
            .unwrap();
        let put = |name: &str, shape: &[usize], v: &[f64], units: &str| {
            let ds = f
                .new_dataset::<f64>()
                .shape(shape.to_vec())
                .create(name)
                .unwrap();
            ds.write_raw(v).unwrap();
            write_str_attr(&ds, "units", units).unwrap();
        };
        put("x", &[3], &[-1.0, 0.0, 1.0], "nm");
        put("k", &[2], &[-0.5, 0.5], "1/nm");
        put("time", &[2], &[0.0, 1.0], "fs");
        put("density", &[2, 3], &[0.1, 0.2, 0.3, 0.4, 0.5, 0.6], "1/nm");
    }
    let rf = ResultFile::read(&path).unwrap();
    assert_eq!(rf.times(), &[0.0, 1.0]);
    assert_eq!(rf.series["density"].frame(1), &[0.4, 0.5, 0.6]);
    let (_, density_axes) = &axes::read_axes(&path).unwrap()["density"];
    assert_eq!(density_axes, &vec![String::new(), String::new()]);
}
