//! Result files (`observables.h5`, `reference.h5`): an in-memory time series of named
//! datasets, written to HDF5 atomically and read back with checks.
//!
//! Layout (see the README): root datasets `x` (nm), `k` (1/nm) and, per output time, one
//! row of every series (`time`, `density`, `pair_density`, …) so that a series of frame
//! shape (a, b) is stored with shape (nt, a, b). Root attributes: `file_type`,
//! `format_version`, `program_version`, `job`. Machine-dependent values go under `/run`.

use anyhow::{Context, Result, anyhow, bail};
use std::collections::BTreeMap;
use std::path::Path;

pub use crate::io::attrs::{read_str_attr, write_str_attr};
use crate::io::names::{self, Dataset};
pub use crate::io::names::{
    FORMAT_VERSION, OBSERVABLES_TYPE, OLDEST_FORMAT_VERSION, REFERENCE_TYPE,
};
use crate::physics::estimators::{Estimate, Frame};

/// One time series: `data` holds nt frames of `frame_shape` each, row-major.
#[derive(Clone, Debug, PartialEq)]
pub struct Series {
    pub units: String,
    pub frame_shape: Vec<usize>,
    pub data: Vec<f64>,
}

impl Series {
    pub fn frame_len(&self) -> usize {
        self.frame_shape.iter().product()
    }
    pub fn frames(&self) -> usize {
        self.data.len() / self.frame_len().max(1)
    }
    /// Frame `t` as a slice.
    pub fn frame(&self, t: usize) -> &[f64] {
        let n = self.frame_len();
        &self.data[t * n..(t + 1) * n]
    }
}

#[derive(Clone, Debug, Default, PartialEq)]
pub struct ResultFile {
    pub file_type: String,
    /// The layout version the file was written with ([`FORMAT_VERSION`] for a new one;
    /// files of older versions are read with their names updated, and written back in the
    /// current layout).
    pub format_version: u32,
    pub job_text: String,
    pub program_version: String,
    /// Bin centres in x, nm.
    pub x: Vec<f64>,
    /// Bin centres of the wavevector, 1/nm.
    pub k: Vec<f64>,
    /// Per-output series, keyed by dataset name (includes `time`).
    pub series: BTreeMap<String, Series>,
    /// Other 1-d datasets that are not per output time (e.g. annihilation records).
    pub records: BTreeMap<String, (String, Vec<f64>)>,
    /// Machine-dependent numbers, written under `/run` as datasets.
    pub run: BTreeMap<String, (String, Vec<f64>)>,
}

impl ResultFile {
    pub fn new(file_type: &str, job_text: &str, x: Vec<f64>, k: Vec<f64>) -> Self {
        ResultFile {
            file_type: file_type.to_string(),
            format_version: FORMAT_VERSION,
            job_text: job_text.to_string(),
            program_version: env!("CARGO_PKG_VERSION").to_string(),
            x,
            k,
            ..Default::default()
        }
    }

    /// Append one frame of series `name` (created on first use).
    pub fn push(&mut self, name: &str, units: &str, frame_shape: &[usize], values: &[f64]) {
        let s = self
            .series
            .entry(name.to_string())
            .or_insert_with(|| Series {
                units: units.to_string(),
                frame_shape: frame_shape.to_vec(),
                data: Vec::new(),
            });
        assert_eq!(
            s.frame_len(),
            values.len(),
            "frame of {name} has the wrong size"
        );
        s.data.extend_from_slice(values);
    }

    /// Append one frame of the named dataset `d`.
    pub fn put(&mut self, d: Dataset, frame_shape: &[usize], values: &[f64]) {
        self.push(d.name, d.units, frame_shape, values);
    }

    /// Append an estimate and its standard error (`<name>_error`).
    fn put_estimate(&mut self, d: Dataset, frame_shape: &[usize], e: &Estimate) {
        self.push(d.name, d.units, frame_shape, &e.value);
        self.push(&names::error_of(d.name), d.units, frame_shape, &e.error);
    }

    /// Append the Monte Carlo estimators of one output time.
    pub fn push_frame(&mut self, f: &Frame) {
        let (nx, nk) = (self.x.len(), self.k.len());
        self.put(names::TIME, &[], &[f.time]);
        self.put_estimate(names::DENSITY, &[nx], &f.density);
        if let Some(p) = &f.pair_density {
            self.put_estimate(names::PAIR_DENSITY, &[nx, nx], p);
        }
        self.put_estimate(names::WIGNER, &[nx, nk], &f.wigner);
        self.put_estimate(names::MOMENTUM_DENSITY, &[nk], &f.momentum_density);
        self.put_estimate(names::CURRENT_DENSITY, &[nx], &f.current_density);
        for (d, e) in [
            (names::NORM, &f.norm),
            (names::ABSORBED_LEFT, &f.absorbed_left),
            (names::ABSORBED_RIGHT, &f.absorbed_right),
            (names::NORM_RIGHT, &f.norm_right),
            (names::ENERGY, &f.energy),
            (names::MEAN_X, &f.mean_x),
            (names::MEAN_K, &f.mean_k),
            (names::MEAN_FORCE, &f.mean_force),
        ] {
            self.put_estimate(d, &[], e);
        }
        self.put(names::SAMPLES, &[], &[f.samples as f64]);
        self.put(names::SAMPLES_POSITIVE, &[], &[f.samples_positive as f64]);
        self.put(names::SAMPLES_NEGATIVE, &[], &[f.samples_negative as f64]);
    }

    /// Output times, fs.
    pub fn times(&self) -> &[f64] {
        self.series
            .get(names::TIME.name)
            .map(|s| s.data.as_slice())
            .unwrap_or(&[])
    }

    /// Write to `path` atomically: a temporary file in the same directory, then rename.
    pub fn write_atomic(&self, path: &Path) -> Result<()> {
        let tmp = path.with_extension("h5.tmp");
        // A killed earlier writer may have left (or may still hold) a temporary file:
        // unlink it, so that this write starts from a fresh file of its own.
        match std::fs::remove_file(&tmp) {
            Ok(()) => {}
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
            Err(e) => return Err(anyhow!("cannot remove the stale {}: {e}", tmp.display())),
        }
        let written = self
            .write_to(&tmp)
            .with_context(|| format!("cannot write {}", tmp.display()))
            .and_then(|()| {
                std::fs::rename(&tmp, path).with_context(|| {
                    format!("cannot rename {} to {}", tmp.display(), path.display())
                })
            });
        if written.is_err() {
            // A failed write leaves nothing behind; the previous file stays as it was.
            let _ = std::fs::remove_file(&tmp);
        }
        written
    }

    fn write_to(&self, path: &Path) -> Result<()> {
        let f = hdf5::File::create(path)?;
        write_str_attr(&f, names::ATTR_FILE_TYPE, &self.file_type)?;
        write_str_attr(&f, names::ATTR_JOB, &self.job_text)?;
        write_str_attr(&f, names::ATTR_PROGRAM_VERSION, &self.program_version)?;
        f.new_attr::<u32>()
            .create(names::ATTR_FORMAT_VERSION)?
            .write_scalar(&FORMAT_VERSION)?;
        write_1d(&f, names::X.name, names::X.units, &self.x)?;
        write_1d(&f, names::K.name, names::K.units, &self.k)?;
        for (name, s) in &self.series {
            let mut shape = vec![s.frames()];
            shape.extend_from_slice(&s.frame_shape);
            let ds = f
                .new_dataset::<f64>()
                .shape(shape.clone())
                .create(name.as_str())?;
            if !s.data.is_empty() {
                ds.write_raw(&s.data)?;
            }
            write_str_attr(&ds, names::ATTR_UNITS, &s.units)?;
        }
        for (name, (units, v)) in &self.records {
            write_1d(&f, name, units, v)?;
        }
        if !self.run.is_empty() {
            let g = f.create_group(names::RUN_GROUP)?;
            for (name, (units, v)) in &self.run {
                write_1d(&g, name, units, v)?;
            }
        }
        crate::io::axes::write_axes(&f, &self.x)?;
        // Old names of renamed datasets, as soft links (after the axes: a link is no dataset of its own), for one format version.
        for (old, new) in names::RENAMED_DATASETS {
            if self.series.contains_key(new) && !self.series.contains_key(old) {
                f.link_soft(new, old)?;
            }
        }
        f.flush()?;
        Ok(())
    }

    /// Read a result file, checking its file type and format version.
    pub fn read(path: &Path) -> Result<Self> {
        let shown = path.display();
        if !path.exists() {
            bail!("{shown}: no such file");
        }
        if path.is_dir() {
            bail!(
                "{shown}: is a directory, not a result file (e.g. {})",
                path.join(names::OBSERVABLES_FILE).display()
            );
        }
        let f = hdf5::File::open(path)
            .map_err(|e| anyhow!("{shown}: not a readable HDF5 file ({e})"))?;
        let file_type = read_str_attr(&f, names::ATTR_FILE_TYPE).map_err(|_| {
            anyhow!("{shown}: not a signfold result file (no `file_type` attribute)")
        })?;
        if file_type != OBSERVABLES_TYPE && file_type != REFERENCE_TYPE {
            bail!(
                "{shown}: file type `{file_type}` is not a result file (expected `{OBSERVABLES_TYPE}` or `{REFERENCE_TYPE}`)"
            );
        }
        let version: u32 = f
            .attr(names::ATTR_FORMAT_VERSION)
            .and_then(|a| a.read_scalar())
            .map_err(|_| anyhow!("{shown}: no format_version attribute"))?;
        if !(OLDEST_FORMAT_VERSION..=FORMAT_VERSION).contains(&version) {
            bail!(
                "{shown}: format version {version} is not supported (this program reads {OLDEST_FORMAT_VERSION} to {FORMAT_VERSION})"
            );
        }
        let mut out = ResultFile {
            file_type,
            format_version: version,
            job_text: read_str_attr(&f, names::ATTR_JOB).unwrap_or_default(),
            program_version: read_str_attr(&f, names::ATTR_PROGRAM_VERSION).unwrap_or_default(),
            ..Default::default()
        };
        let need = |name: &str| -> Result<hdf5::Dataset> {
            f.dataset(name)
                .map_err(|_| anyhow!("{shown}: dataset `{name}` is missing"))
        };
        out.x = need(names::X.name)?.read_raw::<f64>()?;
        out.k = need(names::K.name)?.read_raw::<f64>()?;
        let nt = need(names::TIME.name)?
            .shape()
            .first()
            .copied()
            .unwrap_or(0);
        for name in f.member_names()? {
            if name == names::X.name
                || name == names::K.name
                || name == names::RUN_GROUP
                || crate::io::axes::is_root_axis_only(&name)
            {
                continue;
            }
            // A soft link under an old name (read through its target), a dropped tally, or
            // (format version 1) an old name read as the new one.
            let stored = name.clone();
            let renamed = names::RENAMED_DATASETS.iter().find(|(old, _)| *old == name);
            let name = match renamed {
                Some(_) if version >= 2 => continue,
                Some((_, new)) => new.to_string(),
                None if version < 2 && names::DROPPED_DATASETS.contains(&name.as_str()) => {
                    continue;
                }
                None => name,
            };
            let ds = match f.dataset(&stored) {
                Ok(d) => d,
                Err(_) => continue,
            };
            let shape = ds.shape();
            let units = read_str_attr(&ds, names::ATTR_UNITS).unwrap_or_default();
            let data = ds
                .read_raw::<f64>()
                .map_err(|e| anyhow!("{shown}: dataset `{name}` cannot be read ({e})"))?;
            if !shape.is_empty() && shape[0] == nt && (shape.len() > 1 || is_series_name(&name)) {
                out.series.insert(
                    name,
                    Series {
                        units,
                        frame_shape: shape[1..].to_vec(),
                        data,
                    },
                );
            } else {
                out.records.insert(name, (units, data));
            }
        }
        if let Ok(g) = f.group(names::RUN_GROUP) {
            for name in g.member_names()? {
                if crate::io::axes::is_run_axis_only(&name) {
                    continue;
                }
                if let Ok(ds) = g.dataset(&name) {
                    let units = read_str_attr(&ds, names::ATTR_UNITS).unwrap_or_default();
                    let name = names::RENAMED_RUN
                        .iter()
                        .find(|(old, _)| *old == name)
                        .map_or(name, |(_, new)| new.to_string());
                    out.run.insert(name, (units, ds.read_raw::<f64>()?));
                }
            }
        }
        Ok(out)
    }
}

/// Scalar-per-time series names (1-d datasets of length nt that belong to the series).
fn is_series_name(name: &str) -> bool {
    !name.starts_with(names::ANNIHILATION_PREFIX)
}

fn write_1d(g: &hdf5::Group, name: &str, units: &str, v: &[f64]) -> Result<hdf5::Dataset> {
    let ds = g.new_dataset::<f64>().shape([v.len()]).create(name)?;
    if !v.is_empty() {
        ds.write_raw(v)?;
    }
    write_str_attr(&ds, names::ATTR_UNITS, units)?;
    Ok(ds)
}

/// Check that `dir` takes a file: create a probe of a few KiB, sync it and remove it. Run
/// before any long computation, so that a read-only directory, a full disk or a file-size
/// limit is found at once rather than after the work.
pub fn probe_writable(dir: &Path) -> Result<()> {
    use std::io::Write as _;
    let probe = dir.join(names::PROBE_FILE);
    let r = std::fs::File::create(&probe).and_then(|mut f| {
        f.write_all(&[0u8; 4096])?;
        f.sync_all()
    });
    let _ = std::fs::remove_file(&probe);
    r.map_err(|e| anyhow!("{}: the directory is not writable ({e})", dir.display()))
}
