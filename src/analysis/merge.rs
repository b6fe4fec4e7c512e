//! `signfold merge`: combine Monte Carlo runs of one job that differ only in the seed (and
//! the sample count, the number of error groups) into one result whose error bars come
//! from all groups of all runs (docs/method.md §4, "Merging runs").
//!
//! A result file stores per output the pooled value V_r = Σ_g N_g / S₀_r of its B_r groups
//! (N_g the signed sum of group g, S₀_r = Σ_g S₀,g its net initial sign) and the standard
//! error σ_r = sqrt(Σ_g (A_g − Ā_r)² / (B_r(B_r − 1))) of the group estimates A_g = N_g/S₀,g
//! about their mean Ā_r. Over all M = Σ B_r groups of R runs:
//!
//! * value: V = Σ_r S₀_r V_r / Σ_r S₀_r, exactly the pooled value of all groups (S₀_r is the
//!   net sign at t = 0, `particles_positive` − `particles_negative` of the first output);
//! * error: σ² = [Σ_r B_r(B_r − 1) σ_r² + Σ_r B_r (V_r − V̄)²] / (M(M − 1)), with V̄ = Σ_r
//!   B_r V_r / M. This is the single-run formula over all M groups, by the identity
//!   Σ_{r,g} (A_g − Ā)² = Σ_r Σ_g (A_g − Ā_r)² + Σ_r B_r (Ā_r − Ā)², exact when each run's
//!   groups start with equal S₀,g (then V_r = Ā_r); otherwise V_r stands in for Ā_r, which
//!   it differs from by a fraction of σ_r of the order of the spread of S₀,g/S₀_r·B_r.
//!   A run with one group (σ_r NaN) adds no within-run term (its B_r(B_r − 1) = 0).
//!
//! Sample counts (`particles`, `particles_positive`, `particles_negative`) are summed.
//! Per-run records (`annihilation_*`, `/run`) are not carried over: they describe each
//! run, not the merged estimate.

use anyhow::{Result, anyhow, bail};
use std::path::{Path, PathBuf};

use crate::config::job::{Job, apply_override, current_spelling, parse_stored};
use crate::io::names;
use crate::io::results::{OBSERVABLES_TYPE, ResultFile, Series};

/// Job keys (dotted) that may differ between merged runs: the seed, the sample count, the
/// number of error groups, the memory cap and the checkpoint schedule. Every other key, set
/// or left out, must agree (integers and floats of equal value agree).
pub const MAY_DIFFER: [&str; 5] = [
    "numerics.seed",
    "numerics.samples",
    "numerics.groups",
    "numerics.memory_limit_mib",
    "checkpoint",
];

/// One input run.
#[derive(Clone, Debug, PartialEq)]
pub struct Run {
    pub path: PathBuf,
    pub seed: u64,
    pub samples: u64,
    pub groups: u32,
    /// Net sign at t = 0 (the estimators' normalisation S₀).
    pub s0: f64,
}

/// What a merge produced.
#[derive(Clone, Debug)]
pub struct Merged {
    pub file: ResultFile,
    pub runs: Vec<Run>,
}

/// One run's share of one value: its weight S₀_r, its groups B_r, its value and error.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Part {
    pub weight: f64,
    pub groups: u32,
    pub value: f64,
    pub error: f64,
}

/// Combine the parts of one value (module documentation): (pooled value, standard error
/// over all groups). The error is NaN when there is only one group in all, or when a run
/// with more than one group has a NaN error.
pub fn combine(parts: &[Part]) -> (f64, f64) {
    let w: f64 = parts.iter().map(|p| p.weight).sum();
    let value = parts.iter().map(|p| p.weight * p.value).sum::<f64>() / w;
    let m: f64 = parts.iter().map(|p| p.groups as f64).sum();
    if m < 2.0 {
        return (value, f64::NAN);
    }
    let mean = parts.iter().map(|p| p.groups as f64 * p.value).sum::<f64>() / m;
    let mut ss = 0.0;
    for p in parts {
        let b = p.groups as f64;
        if p.groups > 1 {
            ss += b * (b - 1.0) * p.error * p.error;
        }
        ss += b * (p.value - mean) * (p.value - mean);
    }
    (value, (ss / (m * (m - 1.0))).sqrt())
}

/// The result file of a run given as a file or as its directory.
fn result_path(p: &Path) -> PathBuf {
    if p.is_dir() {
        p.join(names::OBSERVABLES_FILE)
    } else {
        p.to_path_buf()
    }
}

/// Read the runs, check that they can be merged, and merge them.
pub fn merge_paths(inputs: &[PathBuf]) -> Result<Merged> {
    if inputs.len() < 2 {
        bail!("merge needs at least two runs (got {})", inputs.len());
    }
    let mut files = Vec::new();
    for p in inputs {
        let path = result_path(p);
        let f = ResultFile::read(&path)?;
        files.push((path, f));
    }
    merge(&files)
}

/// A job's text as a TOML table, the keys that may differ removed.
fn comparable(path: &Path, text: &str) -> Result<toml::Table> {
    let (text, _) = current_spelling(text, &path.display().to_string())?;
    let mut t: toml::Table = toml::from_str(&text).map_err(|e| {
        anyhow!(
            "{}: the stored job text does not parse ({e})",
            path.display()
        )
    })?;
    for key in MAY_DIFFER {
        let mut parts: Vec<&str> = key.split('.').collect();
        let last = parts.pop().expect("a key");
        let mut table = Some(&mut t);
        for p in parts {
            table = table
                .and_then(|t| t.get_mut(p))
                .and_then(|v| v.as_table_mut());
        }
        if let Some(table) = table {
            table.remove(last);
        }
    }
    Ok(t)
}

/// The first key (dotted, arrays by index) where two job tables differ, with both values.
fn first_difference(
    a: &toml::Value,
    b: &toml::Value,
    at: &str,
) -> Option<(String, String, String)> {
    use toml::Value as V;
    let join = |k: &str| {
        if at.is_empty() {
            k.to_string()
        } else {
            format!("{at}.{k}")
        }
    };
    let shown = |v: Option<&V>| v.map_or("(not set)".to_string(), |v| v.to_string());
    match (a, b) {
        (V::Table(ta), V::Table(tb)) => {
            let mut keys: Vec<&String> = ta.keys().chain(tb.keys()).collect();
            keys.sort();
            keys.dedup();
            for k in keys {
                match (ta.get(k), tb.get(k)) {
                    (Some(x), Some(y)) => {
                        if let Some(d) = first_difference(x, y, &join(k)) {
                            return Some(d);
                        }
                    }
                    (x, y) => return Some((join(k), shown(x), shown(y))),
                }
            }
            None
        }
        (V::Array(xa), V::Array(xb)) => {
            for i in 0..xa.len().max(xb.len()) {
                match (xa.get(i), xb.get(i)) {
                    (Some(x), Some(y)) => {
                        if let Some(d) = first_difference(x, y, &join(&i.to_string())) {
                            return Some(d);
                        }
                    }
                    (x, y) => return Some((join(&i.to_string()), shown(x), shown(y))),
                }
            }
            None
        }
        (V::Integer(i), V::Float(f)) | (V::Float(f), V::Integer(i)) if *i as f64 == *f => None,
        _ if a == b => None,
        _ => Some((at.to_string(), a.to_string(), b.to_string())),
    }
}

/// Merge runs already read (path, file); refuses what cannot be merged, naming it.
pub fn merge(files: &[(PathBuf, ResultFile)]) -> Result<Merged> {
    let (p0, f0) = &files[0];
    let shown0 = p0.display();
    let job0 = comparable(p0, &f0.job_text)?;
    let mut runs = Vec::new();
    for (path, f) in files {
        let shown = path.display();
        if f.file_type != OBSERVABLES_TYPE {
            bail!(
                "{shown}: file type `{}`; only Monte Carlo results (`{OBSERVABLES_TYPE}`) can be merged",
                f.file_type
            );
        }
        if f.format_version != f0.format_version {
            bail!(
                "{shown0} and {shown} have different format versions ({} and {}): merge runs written by one program version",
                f0.format_version,
                f.format_version
            );
        }
        let job: Job = parse_stored(&f.job_text)
            .map_err(|e| anyhow!("{shown}: the stored job text does not load ({e})"))?;
        let t = comparable(path, &f.job_text)?;
        if let Some((key, a, b)) = first_difference(
            &toml::Value::Table(job0.clone()),
            &toml::Value::Table(t),
            "",
        ) {
            bail!(
                "{shown0} and {shown} are runs of different jobs: `{key}` is {a} in the first and {b} in the second (runs may differ only in {})",
                MAY_DIFFER.join(", ")
            );
        }
        if f.x != f0.x || f.k != f0.k {
            bail!("{shown0} and {shown} have different x or k bins");
        }
        if f.times() != f0.times() {
            bail!(
                "{shown0} and {shown} have different output times ({} and {} outputs, last {} and {} fs): merge complete runs only",
                f0.times().len(),
                f.times().len(),
                f0.times().last().copied().unwrap_or(f64::NAN),
                f.times().last().copied().unwrap_or(f64::NAN)
            );
        }
        let first = |d: names::Dataset| -> Result<f64> {
            f.series
                .get(d.name)
                .and_then(|s| s.data.first().copied())
                .ok_or_else(|| anyhow!("{shown}: dataset `{}` is missing", d.name))
        };
        let s0 = first(names::SAMPLES_POSITIVE)? - first(names::SAMPLES_NEGATIVE)?;
        if s0.is_nan() || s0 <= 0.0 {
            bail!("{shown}: the net sign at t = 0 is {s0}, not positive");
        }
        if let Some(other) = runs.iter().find(|r: &&Run| r.seed == job.numerics.seed) {
            bail!(
                "{} and {shown} have the same seed {}: they are not independent (give each run its own numerics.seed)",
                other.path.display(),
                job.numerics.seed
            );
        }
        runs.push(Run {
            path: path.clone(),
            seed: job.numerics.seed,
            samples: job.numerics.samples,
            groups: job.numerics.groups,
            s0,
        });
    }
    for (path, f) in files {
        let names0: Vec<&String> = f0.series.keys().collect();
        let names: Vec<&String> = f.series.keys().collect();
        if names != names0 {
            let missing = names0
                .iter()
                .find(|n| !f.series.contains_key(n.as_str()))
                .map(|n| format!("`{n}` is missing"))
                .or_else(|| {
                    names
                        .iter()
                        .find(|n| !f0.series.contains_key(n.as_str()))
                        .map(|n| format!("it has `{n}`, which {shown0} has not"))
                })
                .unwrap_or_default();
            bail!("{}: different datasets ({missing})", path.display());
        }
    }

    let mut out = ResultFile::new(
        OBSERVABLES_TYPE,
        &merged_job_text(&f0.job_text, &runs)?,
        f0.x.clone(),
        f0.k.clone(),
    );
    out.program_version = f0.program_version.clone();
    let counts = [
        names::SAMPLES.name,
        names::SAMPLES_POSITIVE.name,
        names::SAMPLES_NEGATIVE.name,
    ];
    for (name, s) in &f0.series {
        if name.ends_with(names::ERROR_SUFFIX) && f0.series.contains_key(base(name)) {
            continue; // merged with its value
        }
        let all: Vec<&Series> = files.iter().map(|(_, f)| &f.series[name]).collect();
        let mut value = s.clone();
        if name == names::TIME.name {
            out.series.insert(name.clone(), value);
            continue;
        }
        if counts.contains(&name.as_str()) {
            for (i, v) in value.data.iter_mut().enumerate() {
                *v = all.iter().map(|s| s.data[i]).sum();
            }
            out.series.insert(name.clone(), value);
            continue;
        }
        let err_name = names::error_of(name);
        let errors: Option<Vec<&Series>> =
            files.iter().map(|(_, f)| f.series.get(&err_name)).collect();
        let mut error = errors.as_ref().map(|_| s.clone());
        for i in 0..value.data.len() {
            let parts: Vec<Part> = runs
                .iter()
                .enumerate()
                .map(|(r, run)| Part {
                    weight: run.s0,
                    groups: run.groups,
                    value: all[r].data[i],
                    error: errors.as_ref().map_or(f64::NAN, |e| e[r].data[i]),
                })
                .collect();
            let (v, e) = combine(&parts);
            value.data[i] = v;
            if let Some(err) = error.as_mut() {
                err.data[i] = e;
            }
        }
        out.series.insert(name.clone(), value);
        if let Some(err) = error {
            out.series.insert(err_name, err);
        }
    }
    Ok(Merged { file: out, runs })
}

fn base(name: &str) -> &str {
    name.strip_suffix(names::ERROR_SUFFIX).unwrap_or(name)
}

/// The merged result's job: the first run's, with the summed sample count and groups, and
/// a comment naming the runs and their seeds.
fn merged_job_text(text: &str, runs: &[Run]) -> Result<String> {
    let (text, _) = current_spelling(text, "stored job")?;
    let mut t: toml_edit::DocumentMut = text.parse()?;
    let samples: u64 = runs.iter().map(|r| r.samples).sum();
    let groups: u32 = runs.iter().map(|r| r.groups).sum();
    apply_override(&mut t, &format!("numerics.samples={samples}"))?;
    apply_override(&mut t, &format!("numerics.groups={groups}"))?;
    let mut s = format!(
        "# merged by signfold merge from {} runs (numerics.samples and numerics.groups are their sums; numerics.seed is the first run's):\n",
        runs.len()
    );
    for r in runs {
        s.push_str(&format!(
            "#   {}: seed {}, {} samples, {} groups\n",
            r.path.display(),
            r.seed,
            r.samples,
            r.groups
        ));
    }
    s.push_str(&t.to_string());
    Ok(s)
}

/// Merge `inputs` (result files or run directories) into `out/observables.h5` (and
/// `out/job.toml`). Refuses a non-empty `out` unless `force`.
pub fn merge_into(inputs: &[PathBuf], out: &Path, force: bool) -> Result<(PathBuf, Merged)> {
    if out.exists() && !out.is_dir() {
        bail!("--out {}: exists and is not a directory", out.display());
    }
    let non_empty = out.is_dir()
        && std::fs::read_dir(out)
            .map_err(|e| anyhow!("--out {}: cannot be read ({e})", out.display()))?
            .next()
            .is_some();
    if non_empty && !force {
        bail!(
            "--out {}: the directory is not empty; choose another directory or pass --force to write into it",
            out.display()
        );
    }
    let merged = merge_paths(inputs)?;
    std::fs::create_dir_all(out)
        .map_err(|e| anyhow!("--out {}: cannot create directory: {e}", out.display()))?;
    let path = out.join(names::OBSERVABLES_FILE);
    merged.file.write_atomic(&path)?;
    std::fs::write(out.join(names::JOB_COPY_FILE), &merged.file.job_text)
        .map_err(|e| anyhow!("{}: {e}", out.join(names::JOB_COPY_FILE).display()))?;
    Ok((path, merged))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The single-run estimator of physics::estimators over groups with equal S₀,g.
    fn single(groups: &[f64]) -> (f64, f64) {
        let b = groups.len() as f64;
        let mean = groups.iter().sum::<f64>() / b;
        let ss: f64 = groups.iter().map(|a| (a - mean) * (a - mean)).sum();
        (mean, (ss / (b * (b - 1.0))).sqrt())
    }

    /// Combining runs gives exactly the estimator over all their groups (equal S₀,g).
    #[test]
    fn combine_equals_the_estimator_over_all_groups() {
        let runs: [&[f64]; 3] = [
            &[1.0, 1.3, 0.8, 1.1],
            &[0.7, 1.6, 1.2, 0.9, 1.0, 1.4, 0.95, 1.05],
            &[2.0, 0.5],
        ];
        // S₀,g = 100 in every group: weights are 100 B_r.
        let parts: Vec<Part> = runs
            .iter()
            .map(|g| {
                let (value, error) = single(g);
                Part {
                    weight: 100.0 * g.len() as f64,
                    groups: g.len() as u32,
                    value,
                    error,
                }
            })
            .collect();
        let all: Vec<f64> = runs.iter().flat_map(|g| g.iter().copied()).collect();
        let (v, e) = combine(&parts);
        let (v_all, e_all) = single(&all);
        assert!((v - v_all).abs() < 1e-14, "{v} vs {v_all}");
        assert!((e - e_all).abs() < 1e-14, "{e} vs {e_all}");
    }

    /// Runs of one group each (NaN errors) still give an error from their spread.
    #[test]
    fn one_group_runs_give_the_spread_of_their_values() {
        let vals = [1.0, 2.0, 4.0];
        let parts: Vec<Part> = vals
            .iter()
            .map(|&value| Part {
                weight: 10.0,
                groups: 1,
                value,
                error: f64::NAN,
            })
            .collect();
        let (v, e) = combine(&parts);
        let (v_all, e_all) = single(&vals);
        assert!((v - v_all).abs() < 1e-14 && (e - e_all).abs() < 1e-14);
        assert!(combine(&parts[..1]).1.is_nan());
    }

    #[test]
    fn jobs_that_differ_name_the_key() {
        let a: toml::Value = toml::from_str(
            "[numerics]\nend_time = 70\n[[potential]]\nkind = \"barrier\"\nheight = 0.2\n",
        )
        .unwrap();
        let b: toml::Value = toml::from_str(
            "[numerics]\nend_time = 70.0\n[[potential]]\nkind = \"barrier\"\nheight = 0.3\n",
        )
        .unwrap();
        let d = first_difference(&a, &b, "").unwrap();
        assert_eq!(d, ("potential.0.height".into(), "0.2".into(), "0.3".into()));
        assert!(first_difference(&a, &a, "").is_none());
    }
}
