//! Named axes of result files: HDF5 dimension scales (the H5DS convention of the HDF5
//! high-level library, which netCDF-4 reads as its dimensions), so that netCDF-aware tools
//! (xarray with h5netcdf, ncdump) show every dataset with named, unit-carrying axes.
//!
//! Root axes: `time`, `x`, `x_prime` (the second position axis of `pair_density`, same
//! centres as `x`), `k` and `annihilation_time` (the per-annihilation records); `/run` axes:
//! `rank`, `pass_rank`, `single` (docs/formats.md). The datasets `time`, `x`, `k` and
//! `annihilation_time` are scales themselves; `x_prime` and the `/run` axes are written
//! only for this purpose and skipped by the reader. Attaching scales adds attributes
//! (`CLASS`, `NAME`, `REFERENCE_LIST`, `DIMENSION_LIST`) and no dataset a reader of the
//! previous layout needs, so the format version stays 1.

use anyhow::{Result, bail};
use hdf5_sys::h5::herr_t;
use hdf5_sys::h5i::hid_t;
use std::collections::BTreeMap;
use std::ffi::{CString, c_char, c_int, c_uint, c_void};
use std::path::Path;

use crate::io::names::{self, Dataset};

type IterateScales =
    Option<unsafe extern "C" fn(did: hid_t, dim: c_uint, dsid: hid_t, data: *mut c_void) -> herr_t>;

// The dimension-scale functions of the HDF5 high-level library (libhdf5_hl, linked through
// the `hl` feature of hdf5-metno-sys, which declares no bindings for them). Signatures
// from the HDF5 reference manual, H5DS module.
unsafe extern "C" {
    fn H5DSset_scale(dsid: hid_t, dimname: *const c_char) -> herr_t;
    fn H5DSattach_scale(did: hid_t, dsid: hid_t, idx: c_uint) -> herr_t;
    fn H5DSiterate_scales(
        did: hid_t,
        dim: c_uint,
        idx: *mut c_int,
        visitor: IterateScales,
        visitor_data: *mut c_void,
    ) -> herr_t;
    fn H5DSget_scale_name(did: hid_t, name: *mut c_char, size: usize) -> isize;
    fn H5DSis_scale(did: hid_t) -> c_int;
}

/// Make `scale` a dimension scale named `name`.
fn set_scale(scale: &hdf5::Dataset, name: &str) -> Result<()> {
    let c = CString::new(name)?;
    let _guard = hdf5_sys::LOCK.lock();
    // SAFETY: a valid open dataset id and a NUL-terminated name.
    if unsafe { H5DSset_scale(scale.id(), c.as_ptr()) } < 0 {
        bail!("cannot make `{name}` a dimension scale");
    }
    Ok(())
}

/// Attach `scale` to dimension `dim` of `ds`.
fn attach(ds: &hdf5::Dataset, scale: &hdf5::Dataset, dim: usize, what: &str) -> Result<()> {
    let _guard = hdf5_sys::LOCK.lock();
    // SAFETY: two valid open dataset ids; H5DS checks the dimension index.
    if unsafe { H5DSattach_scale(ds.id(), scale.id(), dim as c_uint) } < 0 {
        bail!("cannot attach the axis of dimension {dim} to `{what}`");
    }
    Ok(())
}

/// One group's scales: axis name → (dataset, length).
struct Scales(BTreeMap<&'static str, (hdf5::Dataset, usize)>);

impl Scales {
    /// Take the existing dataset `d` as a scale, if the group holds it.
    fn existing(&mut self, g: &hdf5::Group, d: Dataset) -> Result<()> {
        if let Ok(s) = g.dataset(d.name) {
            set_scale(&s, d.name)?;
            let len = s.size();
            self.0.insert(d.name, (s, len));
        }
        Ok(())
    }

    /// Write `values` as the new scale dataset `d`.
    fn create(&mut self, g: &hdf5::Group, d: Dataset, values: &[f64]) -> Result<()> {
        let s = g
            .new_dataset::<f64>()
            .shape([values.len()])
            .create(d.name)?;
        if !values.is_empty() {
            s.write_raw(values)?;
        }
        crate::io::attrs::write_str_attr(&s, names::ATTR_UNITS, d.units)?;
        set_scale(&s, d.name)?;
        self.0.insert(d.name, (s, values.len()));
        Ok(())
    }

    /// Attach the scale named `axis` to dimension `dim` of `ds` (of length `len`) when it
    /// exists with that length and is not `ds` itself.
    fn attach(&self, ds: &hdf5::Dataset, name: &str, dim: usize, axis: &str) -> Result<()> {
        let len = ds.shape().get(dim).copied().unwrap_or(0);
        match self.0.get(axis) {
            Some((s, n)) if *n == len && name != axis => attach(ds, s, dim, name),
            _ => Ok(()),
        }
    }

    /// The axis of length `len` for a dimension of a dataset whose name this program does
    /// not know: the first of `candidates` that has this length.
    fn by_length(&self, len: usize, candidates: &[Dataset]) -> Option<&'static str> {
        candidates
            .iter()
            .find(|d| self.0.get(d.name).is_some_and(|(_, n)| *n == len))
            .map(|d| d.name)
    }
}

/// Write the axes of the result file `f` (all its datasets already written) and attach them
/// to every dataset. `x` holds the bin centres (copied into `x_prime` when a dataset needs
/// that axis).
pub fn write_axes(f: &hdf5::File, x: &[f64]) -> Result<()> {
    let mut root = Scales(BTreeMap::new());
    for d in [names::TIME, names::X, names::K, names::ANNIHILATION_TIME] {
        root.existing(f, d)?;
    }
    let members = f.member_names()?;
    let needs_x_prime = members.iter().any(|m| {
        names::frame_axes(m).is_some_and(|a| a.contains(&names::X_PRIME)) && f.dataset(m).is_ok()
    });
    if needs_x_prime && !members.iter().any(|m| m == names::X_PRIME.name) {
        root.create(f, names::X_PRIME, x)?;
    }
    let nt = root.0.get(names::TIME.name).map(|(_, n)| *n);
    for name in &members {
        let Ok(ds) = f.dataset(name) else { continue };
        let shape = ds.shape();
        if root.0.contains_key(name.as_str()) {
            continue;
        }
        if name.starts_with(names::ANNIHILATION_PREFIX) {
            root.attach(&ds, name, 0, names::ANNIHILATION_TIME.name)?;
            continue;
        }
        if shape.is_empty() || Some(shape[0]) != nt {
            continue;
        }
        root.attach(&ds, name, 0, names::TIME.name)?;
        let known = names::frame_axes(name).filter(|a| a.len() + 1 == shape.len());
        for dim in 1..shape.len() {
            let axis = match known {
                Some(a) => Some(a[dim - 1].name),
                None => root.by_length(shape[dim], &[names::X, names::K]),
            };
            if let Some(axis) = axis {
                root.attach(&ds, name, dim, axis)?;
            }
        }
    }
    if let Ok(g) = f.group(names::RUN_GROUP) {
        let mut run = Scales(BTreeMap::new());
        let members = g.member_names()?;
        for name in &members {
            let Ok(ds) = g.dataset(name) else { continue };
            let len = ds.size();
            let Some(axis) = names::run_axis(name, len) else {
                continue;
            };
            if !run.0.contains_key(axis.name) {
                let values: Vec<f64> = (0..len).map(|i| i as f64).collect();
                run.create(&g, axis, &values)?;
            }
            run.attach(&ds, name, 0, axis.name)?;
        }
    }
    Ok(())
}

/// Datasets the writer creates only as axes (not read back as data), in the root group.
pub fn is_root_axis_only(name: &str) -> bool {
    name == names::X_PRIME.name
}

/// Datasets the writer creates only as axes in `/run`.
pub fn is_run_axis_only(name: &str) -> bool {
    [names::RUN_RANK, names::RUN_PASS_RANK, names::RUN_SINGLE]
        .iter()
        .any(|d| d.name == name)
}

unsafe extern "C" fn visit_scale(
    _did: hid_t,
    _dim: c_uint,
    dsid: hid_t,
    data: *mut c_void,
) -> herr_t {
    // SAFETY: `data` is the `Vec<String>` passed by `axes_of`, alive for the call.
    let out = unsafe { &mut *(data as *mut Vec<String>) };
    let mut buf = [0 as c_char; 256];
    // SAFETY: `dsid` is a valid scale id given by H5DSiterate_scales; the buffer's size
    // is passed.
    let n = unsafe { H5DSget_scale_name(dsid, buf.as_mut_ptr(), buf.len()) };
    if n < 0 {
        out.push(String::new());
    } else {
        let bytes: Vec<u8> = buf
            .iter()
            .take_while(|&&c| c != 0)
            .map(|&c| c as u8)
            .collect();
        out.push(String::from_utf8_lossy(&bytes).into_owned());
    }
    0
}

/// Names of the scales attached to each dimension of `ds` (an empty string where none is);
/// a dimension scale is its own axis.
pub fn axes_of(ds: &hdf5::Dataset) -> Vec<String> {
    let _guard = hdf5_sys::LOCK.lock();
    // SAFETY: a valid dataset id.
    if unsafe { H5DSis_scale(ds.id()) } > 0 {
        let mut own: Vec<String> = Vec::new();
        // SAFETY: as in the visitor, with `ds` itself as the scale.
        unsafe {
            visit_scale(
                ds.id(),
                0,
                ds.id(),
                &mut own as *mut Vec<String> as *mut c_void,
            )
        };
        return own;
    }
    (0..ds.ndim())
        .map(|dim| {
            let mut found: Vec<String> = Vec::new();
            // SAFETY: a valid dataset id, a dimension below its rank, and a visitor that
            // writes into `found` only during the call.
            let r = unsafe {
                H5DSiterate_scales(
                    ds.id(),
                    dim as c_uint,
                    std::ptr::null_mut(),
                    Some(visit_scale),
                    &mut found as *mut Vec<String> as *mut c_void,
                )
            };
            if r < 0 {
                String::new()
            } else {
                found.into_iter().next().unwrap_or_default()
            }
        })
        .collect()
}

/// Every dataset of a result file (`run/<name>` inside `/run`) with its units attribute and
/// the names of its axes: what netCDF-aware tools will show.
pub fn read_axes(path: &Path) -> Result<BTreeMap<String, (String, Vec<String>)>> {
    let f = hdf5::File::open(path)?;
    let mut out = BTreeMap::new();
    let mut walk = |g: &hdf5::Group, prefix: &str| -> Result<()> {
        for name in g.member_names()? {
            if let Ok(ds) = g.dataset(&name) {
                let units =
                    crate::io::attrs::read_str_attr(&ds, names::ATTR_UNITS).unwrap_or_default();
                out.insert(format!("{prefix}{name}"), (units, axes_of(&ds)));
            }
        }
        Ok(())
    };
    walk(&f, "")?;
    if let Ok(g) = f.group(names::RUN_GROUP) {
        walk(&g, &format!("{}/", names::RUN_GROUP))?;
    }
    Ok(out)
}
