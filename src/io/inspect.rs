//! `signfold inspect`: a readable summary of what a result or checkpoint file holds.
//!
//! The file is opened directly and walked generically (groups, datasets, attributes), so this
//! works on any HDF5 file the program writes, complete or not.

use crate::io::names;
use crate::io::results::{OBSERVABLES_TYPE, REFERENCE_TYPE};
use anyhow::{Result, anyhow, bail};
use hdf5::types::{TypeDescriptor, VarLenAscii, VarLenUnicode};
use std::fmt::Write;
use std::path::Path;

/// File type word of checkpoint files.
pub const CHECKPOINT_TYPE: &str = "signfold-checkpoint";

/// The eight bytes every HDF5 file starts with (at offset 0, 512, 1024, 2048, …).
const HDF5_SIGNATURE: &[u8; 8] = b"\x89HDF\r\n\x1a\n";

/// Open an HDF5 file read-only; the error says whether the file is missing, is not HDF5 at
/// all, or is HDF5 but damaged (e.g. cut short).
pub fn open_hdf5(path: &Path) -> Result<hdf5::File> {
    let shown = path.display();
    let meta = std::fs::metadata(path).map_err(|e| match e.kind() {
        std::io::ErrorKind::NotFound => anyhow!("{shown}: no such file"),
        _ => anyhow!("{shown}: cannot be read ({e})"),
    })?;
    if meta.is_dir() {
        bail!("{shown}: is a directory, not a file");
    }
    hdf5::File::open(path).map_err(|e| {
        if has_hdf5_signature(path, meta.len()) {
            anyhow!("{shown}: HDF5 file cannot be opened, it is truncated or damaged ({e})")
        } else {
            anyhow!("{shown}: not an HDF5 file")
        }
    })
}

fn has_hdf5_signature(path: &Path, len: u64) -> bool {
    use std::io::{Read, Seek, SeekFrom};
    let Ok(mut f) = std::fs::File::open(path) else {
        return false;
    };
    let mut offset = 0u64;
    while offset + 8 <= len {
        let mut buf = [0u8; 8];
        if f.seek(SeekFrom::Start(offset)).is_err() || f.read_exact(&mut buf).is_err() {
            return false;
        }
        if &buf == HDF5_SIGNATURE {
            return true;
        }
        offset = if offset == 0 { 512 } else { offset * 2 };
    }
    false
}

/// One dataset found in the walk.
struct Entry {
    path: String,
    shape: Vec<usize>,
    dtype: String,
    units: String,
}

/// Summarise `file`: type and versions, job text, output times, grids, datasets with shapes
/// and units, particle counts, last time written, completeness and size.
/// The output times (fs) of a result file, in order; a checkpoint's one time.
pub fn output_times(file: &Path) -> Result<Vec<f64>> {
    let f = open_hdf5(file)?;
    let shown = file.display();
    if let Ok(a) = f.attr(names::checkpoint::ATTR_TIME)
        && let Ok(t) = a.read_scalar::<f64>()
    {
        return Ok(vec![t]);
    }
    f.dataset(names::TIME.name)
        .and_then(|d| d.read_raw::<f64>())
        .map_err(|_| {
            anyhow!(
                "{shown}: no `{}` dataset: not a result file",
                names::TIME.name
            )
        })
}

pub fn inspect(file: &Path) -> Result<String> {
    let shown = file.display();
    let f = open_hdf5(file)?;
    let size = std::fs::metadata(file).map(|m| m.len()).unwrap_or(0);
    let ctx = |e: hdf5::Error| anyhow!("{shown}: {e}");

    let mut entries = Vec::new();
    walk(&f, "", &mut entries).map_err(ctx)?;
    let root_attrs = f.attr_names().map_err(ctx)?;
    let attr = |name: &str| f.attr(name).ok().and_then(|a| attr_text(&a).ok());
    let file_type = attr("file_type");
    let read_1d = |name: &str| -> Option<Vec<f64>> { f.dataset(name).ok()?.read_raw::<f64>().ok() };

    let mut s = String::new();
    let line = |s: &mut String, key: &str, value: &str| {
        let _ = writeln!(s, "{:<17}{value}", format!("{key}:"));
    };
    line(&mut s, "file", &shown.to_string());
    line(
        &mut s,
        "size",
        &format!("{size} bytes ({})", human_size(size)),
    );
    let kind = match file_type.as_deref() {
        Some(OBSERVABLES_TYPE) => "Monte Carlo result file",
        Some(REFERENCE_TYPE) => "exact reference result file",
        Some(CHECKPOINT_TYPE) => "checkpoint",
        Some(_) => "unknown file type",
        None => "not a signfold file (no `file_type` attribute)",
    };
    line(
        &mut s,
        "file type",
        &format!("{} ({kind})", file_type.as_deref().unwrap_or("-")),
    );
    line(
        &mut s,
        "format version",
        attr("format_version").as_deref().unwrap_or("-"),
    );
    line(
        &mut s,
        "program version",
        attr("program_version").as_deref().unwrap_or("-"),
    );

    let is_checkpoint = file_type.as_deref() == Some(CHECKPOINT_TYPE);
    if is_checkpoint {
        let complete = f
            .attr("complete")
            .ok()
            .and_then(|a| a.read_scalar::<u8>().ok());
        let state = match complete {
            Some(1) => "yes".to_string(),
            Some(v) => format!("no (`complete` is {v}: still being written or interrupted)"),
            None => "no (no `complete` attribute)".to_string(),
        };
        line(&mut s, "complete", &state);
        let time = f
            .attr("time")
            .ok()
            .and_then(|a| a.read_scalar::<f64>().ok());
        line(
            &mut s,
            "time",
            &time.map_or("- (no `time` attribute)".into(), |t| format!("{t} fs")),
        );
        let rows: Vec<usize> = entries
            .iter()
            .filter(|e| {
                [
                    names::checkpoint::SAMPLES_GROUP,
                    names::checkpoint::SAMPLES_GROUP_V1,
                ]
                .iter()
                .any(|g| e.path.starts_with(&format!("/{g}/")))
            })
            .map(|e| e.shape.first().copied().unwrap_or(1))
            .collect();
        let stored = match rows.as_slice() {
            [] => "none stored".to_string(),
            [first, rest @ ..] if rest.iter().all(|r| r == first) => format!("{first} stored"),
            _ => format!("datasets of the samples disagree in length: {rows:?}"),
        };
        line(&mut s, names::SAMPLES.name, &stored);
    } else {
        let times = read_1d("time");
        match &times {
            Some(t) if !t.is_empty() => {
                line(
                    &mut s,
                    "output times",
                    &format!(
                        "{}, from {} to {} fs",
                        t.len(),
                        num(t[0]),
                        num(t[t.len() - 1])
                    ),
                );
                line(&mut s, "last time", &format!("{} fs", num(t[t.len() - 1])));
                let shown: Vec<String> = t.iter().take(12).map(|&v| num(v)).collect();
                line(
                    &mut s,
                    "times (fs)",
                    &format!(
                        "{}{}",
                        shown.join(", "),
                        if t.len() > 12 {
                            ", … (`signfold inspect FILE --times` lists all)"
                        } else {
                            ""
                        }
                    ),
                );
            }
            Some(_) => line(&mut s, "output times", "none written yet"),
            None => line(&mut s, "output times", "- (no `time` dataset)"),
        }
        let state = match &times {
            None => "no (no `time` dataset)".to_string(),
            Some(t) => {
                let short: Vec<String> = entries
                    .iter()
                    .filter(|e| is_series(&e.path) && e.shape.first() != Some(&t.len()))
                    .map(|e| {
                        format!(
                            "{} has {} frames",
                            e.path,
                            e.shape.first().copied().unwrap_or(0)
                        )
                    })
                    .collect();
                if short.is_empty() {
                    format!("yes (every series has {} frames, as `time`)", t.len())
                } else {
                    format!("no ({}; `time` has {})", short.join(", "), t.len())
                }
            }
        };
        line(&mut s, "complete", &state);
        // Format version 1 named the sample counts `particles`.
        let old = names::RENAMED_DATASETS[0].0;
        match read_1d(names::SAMPLES.name).or_else(|| read_1d(old)) {
            Some(p) if !p.is_empty() => line(
                &mut s,
                names::SAMPLES.name,
                &format!("first {}, last {}", p[0], p[p.len() - 1]),
            ),
            _ => line(
                &mut s,
                names::SAMPLES.name,
                &format!("- (no `{}` dataset)", names::SAMPLES.name),
            ),
        }
    }
    for (axis, units) in [("x", "nm"), ("k", "1/nm")] {
        let text = match read_1d(axis) {
            Some(c) if c.len() >= 2 => {
                let w = (c[c.len() - 1] - c[0]) / (c.len() - 1) as f64;
                format!(
                    "{} bins over [{}, {}] {units} (bin width {} {units})",
                    c.len(),
                    num(c[0] - 0.5 * w),
                    num(c[c.len() - 1] + 0.5 * w),
                    num(w)
                )
            }
            Some(c) => format!("{} bins (centres {c:?} {units})", c.len()),
            None => "-".to_string(),
        };
        line(&mut s, &format!("{axis} grid"), &text);
    }

    let _ = writeln!(s, "datasets:");
    let shapes: Vec<String> = entries
        .iter()
        .map(|e| {
            format!(
                "({})",
                e.shape
                    .iter()
                    .map(|n| n.to_string())
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        })
        .collect();
    let width = entries.iter().map(|e| e.path.len()).max().unwrap_or(0);
    let shape_width = shapes.iter().map(|s| s.len()).max().unwrap_or(0);
    for (e, shape) in entries.iter().zip(&shapes) {
        let units = if e.units.is_empty() {
            String::new()
        } else {
            format!("  [{}]", e.units)
        };
        let _ = writeln!(
            s,
            "  {:<width$}  {shape:<shape_width$}  {}{units}",
            e.path, e.dtype
        );
    }
    let known = [
        "file_type",
        "format_version",
        "program_version",
        "job",
        "time",
        "complete",
    ];
    let others: Vec<&String> = root_attrs
        .iter()
        .filter(|n| !known.contains(&n.as_str()))
        .collect();
    if !others.is_empty() {
        let _ = writeln!(s, "other attributes:");
        for name in others {
            let value = f.attr(name).map_err(ctx).and_then(|a| attr_text(&a))?;
            let _ = writeln!(s, "  {name} = {value}");
        }
    }
    match attr("job") {
        Some(job) => {
            let _ = writeln!(s, "job:");
            for l in job.lines() {
                let _ = writeln!(s, "  | {l}");
            }
        }
        None => line(&mut s, "job", "- (no `job` attribute)"),
    }
    Ok(s)
}

/// Root datasets of a result file that hold one row per output time.
fn is_series(path: &str) -> bool {
    let Some(name) = path.strip_prefix('/') else {
        return false;
    };
    !name.contains('/')
        && name != names::X.name
        && name != names::K.name
        && !crate::io::axes::is_root_axis_only(name)
        && !name.starts_with(names::ANNIHILATION_PREFIX)
}

fn walk(g: &hdf5::Group, prefix: &str, out: &mut Vec<Entry>) -> hdf5::Result<()> {
    for name in g.member_names()? {
        let path = format!("{prefix}/{name}");
        // The old name of a renamed dataset: a soft link, shown as one.
        if let Some((_, new)) = names::RENAMED_DATASETS
            .iter()
            .find(|(old, new)| prefix.is_empty() && *old == name && g.dataset(new).is_ok())
            && let Ok(ds) = g.dataset(&name)
        {
            out.push(Entry {
                path,
                shape: ds.shape(),
                dtype: format!("soft link to /{new} (its name before format version 2)"),
                units: String::new(),
            });
            continue;
        }
        if let Ok(ds) = g.dataset(&name) {
            let dtype = ds
                .dtype()
                .and_then(|t| t.to_descriptor())
                .map_or("?".to_string(), |t| t.to_string());
            let units = ds
                .attr("units")
                .ok()
                .and_then(|a| attr_text(&a).ok())
                .unwrap_or_default();
            out.push(Entry {
                path,
                shape: ds.shape(),
                dtype,
                units,
            });
        } else if let Ok(sub) = g.group(&name) {
            walk(&sub, &path, out)?;
        }
    }
    Ok(())
}

/// An attribute's value as text (strings as they are, numbers in full, arrays listed).
fn attr_text(a: &hdf5::Attribute) -> Result<String> {
    let td = a.dtype()?.to_descriptor()?;
    let list = |v: Vec<String>| {
        if a.is_scalar() {
            v.join("")
        } else {
            format!("[{}]", v.join(", "))
        }
    };
    Ok(match td {
        TypeDescriptor::VarLenUnicode => list(
            a.read_raw::<VarLenUnicode>()?
                .iter()
                .map(|v| v.to_string())
                .collect(),
        ),
        TypeDescriptor::VarLenAscii => list(
            a.read_raw::<VarLenAscii>()?
                .iter()
                .map(|v| v.to_string())
                .collect(),
        ),
        TypeDescriptor::Integer(_) => {
            list(a.read_raw::<i64>()?.iter().map(|v| v.to_string()).collect())
        }
        TypeDescriptor::Unsigned(_) | TypeDescriptor::Boolean => {
            list(a.read_raw::<u64>()?.iter().map(|v| v.to_string()).collect())
        }
        TypeDescriptor::Float(_) => {
            list(a.read_raw::<f64>()?.iter().map(|v| v.to_string()).collect())
        }
        other => format!("<{other}>"),
    })
}

/// A number rounded to ten significant digits, so that 6.000000000000001 reads 6.
fn num(v: f64) -> String {
    format!("{v:.9e}").parse::<f64>().unwrap_or(v).to_string()
}

fn human_size(bytes: u64) -> String {
    let units = ["B", "KiB", "MiB", "GiB", "TiB"];
    let mut v = bytes as f64;
    let mut i = 0;
    while v >= 1024.0 && i + 1 < units.len() {
        v /= 1024.0;
        i += 1;
    }
    if i == 0 {
        format!("{bytes} B")
    } else {
        format!("{v:.1} {}", units[i])
    }
}
