//! A cache of exact references for the validation suite, kept in the repository beside the
//! jobs (docs/formats.md, "Reference cache").
//!
//! An entry is keyed by a hash of the job's *physics*: everything that changes the exact
//! answer or the bins it is written on (particles, orbitals, the resolved one-body potential
//! including table contents and default edge smoothing, the pair term, the domain and its
//! boundary, the output times and bins) and a scheme number of the reference solver —
//! never the Monte Carlo numerics (coherence length, particle count, seed, groups,
//! annihilation). The key text itself is stored beside the data and compared in full
//! before an entry is used, so a stale entry (or a hash collision) is never used: it is
//! recomputed instead.

use crate::config::job::LoadedJob;
use crate::io::names;
use crate::io::results::{REFERENCE_TYPE, ResultFile};
use crate::physics::grid;
use crate::physics::potential::{OneBody, PairPotential};
use crate::physics::units;
use crate::reference;
use anyhow::{Context, Result, anyhow};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// Version of the reference solver's discretisation choices (grid, time step, absorber,
/// binning). Raise it whenever `src/reference/` changes what it computes for the same job:
/// every cached entry then becomes stale and is recomputed.
pub const SCHEME: u32 = 1;

/// The physics key of a job: a canonical text of everything the exact reference depends on
/// (floating-point values in Rust's shortest round-trip notation).
pub fn physics_key(loaded: &LoadedJob) -> Result<String> {
    let job = &loaded.job;
    let d = &job.domain;
    let mass = units::mass_from_electron_masses(job.particles.mass);
    let mesh_dx = (d.x_max - d.x_min) / d.mesh_cells as f64;
    // Resolved: default barrier smoothing in nm, table files as their numbers.
    let one = OneBody::from_job(&job.potentials, mesh_dx, mass, &loaded.base_dir)?;
    let mut s = String::new();
    let _ = writeln!(s, "signfold reference cache key");
    let _ = writeln!(s, "scheme {SCHEME}");
    let _ = writeln!(s, "particles {:?}", job.particles);
    for (i, o) in job.orbitals.iter().enumerate() {
        let _ = writeln!(s, "orbital {i} {o:?}");
    }
    let _ = writeln!(
        s,
        "domain x_min {:?} x_max {:?} boundary {:?} k_max {:?}",
        d.x_min, d.x_max, d.boundary, d.k_max
    );
    let _ = writeln!(s, "one-body {one:?}");
    let _ = writeln!(s, "pair {:?}", PairPotential::from_job(&job.pair));
    let _ = writeln!(s, "times {:?}", grid::output_times(job));
    let _ = writeln!(
        s,
        "bins x {:?} k {:?}",
        grid::x_bins(job),
        grid::k_bins(job)
    );
    Ok(s)
}

/// 64-bit FNV-1a of the key text, as 16 hexadecimal digits (a file name, not a security
/// measure: the stored key text is compared in full).
pub fn hash(key: &str) -> String {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in key.bytes() {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0100_0000_01b3);
    }
    format!("{h:016x}")
}

/// Paths of the entry for `key` in `dir`: (data, key text).
pub fn entry_paths(dir: &Path, key: &str) -> (PathBuf, PathBuf) {
    let h = hash(key);
    (
        dir.join(format!("{h}.{}", names::REFERENCE_CACHE_DATA_EXT)),
        dir.join(format!("{h}.{}", names::REFERENCE_CACHE_KEY_EXT)),
    )
}

/// The cached reference for `key`, when an entry exists whose stored key text equals it.
pub fn load(dir: &Path, key: &str) -> Result<Option<ResultFile>> {
    let (data, key_path) = entry_paths(dir, key);
    let Ok(stored) = std::fs::read_to_string(&key_path) else {
        return Ok(None);
    };
    if stored != key || !data.exists() {
        return Ok(None);
    }
    let f = ResultFile::read(&data)
        .with_context(|| format!("reference cache entry {}", data.display()))?;
    if f.file_type != REFERENCE_TYPE {
        return Ok(None);
    }
    Ok(Some(f))
}

/// What a cache entry keeps of a reference: everything but the Wigner function, which the
/// validation suite does not compare and which would make the entries several times larger.
pub fn trimmed(f: &ResultFile) -> ResultFile {
    let mut t = f.clone();
    t.series.remove(names::WIGNER.name);
    t
}

/// Write the entry for `key` (the data first, then the key text, each under a temporary
/// name and renamed: a reader sees either no entry, or a complete one).
pub fn store(dir: &Path, key: &str, f: &ResultFile) -> Result<()> {
    std::fs::create_dir_all(dir).with_context(|| format!("cannot create {}", dir.display()))?;
    let (data, key_path) = entry_paths(dir, key);
    // An old key file would vouch for the new data before the data is complete: remove it
    // first.
    match std::fs::remove_file(&key_path) {
        Ok(()) => {}
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
        Err(e) => return Err(anyhow!("cannot remove {}: {e}", key_path.display())),
    }
    trimmed(f).write_atomic(&data)?;
    let tmp = key_path.with_extension("key.tmp");
    std::fs::write(&tmp, key).with_context(|| format!("cannot write {}", tmp.display()))?;
    std::fs::rename(&tmp, &key_path)
        .with_context(|| format!("cannot rename {} to {}", tmp.display(), key_path.display()))?;
    Ok(())
}

/// Where a reference came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Source {
    Cache,
    Computed,
}

/// The exact reference of a job: from the cache in `dir` when an entry matches and
/// `recompute` is false; otherwise solved, and stored in `dir` (when given).
pub fn reference(
    loaded: &LoadedJob,
    dir: Option<&Path>,
    recompute: bool,
) -> Result<(ResultFile, Source)> {
    let key = physics_key(loaded)?;
    if let Some(dir) = dir
        && !recompute
        && let Some(f) = load(dir, &key)?
    {
        return Ok((f, Source::Cache));
    }
    let f = reference::solve(loaded)?;
    if let Some(dir) = dir {
        store(dir, &key, &f)?;
    }
    Ok((f, Source::Computed))
}

/// Largest difference between two references over every series the cached one holds,
/// relative to each series' largest magnitude (for the honesty check of the cache).
pub fn max_relative_difference(cached: &ResultFile, fresh: &ResultFile) -> Result<f64> {
    let mut worst: f64 = 0.0;
    for (name, s) in &cached.series {
        let t = fresh
            .series
            .get(name)
            .ok_or_else(|| anyhow!("the recomputed reference lacks `{name}`"))?;
        if t.data.len() != s.data.len() || t.frame_shape != s.frame_shape {
            return Err(anyhow!("`{name}` changed shape"));
        }
        let scale = s
            .data
            .iter()
            .fold(0.0f64, |m, v| m.max(v.abs()))
            .max(1e-300);
        for (a, b) in s.data.iter().zip(&t.data) {
            worst = worst.max((a - b).abs() / scale);
        }
    }
    Ok(worst)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::defaults;

    fn jobs_dir() -> PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("jobs/validation")
    }

    fn load_job(name: &str, set: &[&str]) -> LoadedJob {
        let set: Vec<String> = set.iter().map(|s| s.to_string()).collect();
        defaults::load(&jobs_dir().join(name), &set).expect("job loads")
    }

    #[test]
    fn physics_changes_the_hash_and_numerics_do_not() {
        let base = physics_key(&load_job("v01-barrier.toml", &[])).unwrap();
        for set in [
            "potential.0.height=0.26",
            "orbital.0.width=10.5",
            "particles.mass=0.07",
            "domain.x_max=170.0",
            "output.x_bins=80",
            "numerics.end_time=100.0",
        ] {
            let k = physics_key(&load_job("v01-barrier.toml", &[set])).unwrap();
            assert_ne!(hash(&k), hash(&base), "{set} left the hash unchanged");
        }
        for set in [
            "numerics.seed=7",
            "numerics.samples=100000",
            "numerics.coherence_length=90.0",
            "annihilation.cell_x=1.0",
        ] {
            let k = physics_key(&load_job("v01-barrier.toml", &[set])).unwrap();
            assert_eq!(k, base, "{set} (Monte Carlo numerics) changed the key");
        }
    }

    #[test]
    fn a_stale_entry_is_not_used() {
        let dir = tempfile::tempdir().unwrap();
        let job = load_job("v01-barrier.toml", &[]);
        let key = physics_key(&job).unwrap();
        let mut f = ResultFile::new(REFERENCE_TYPE, &job.text, vec![0.0], vec![0.0]);
        f.put(names::TIME, &[], &[0.0]);
        store(dir.path(), &key, &f).unwrap();
        assert!(load(dir.path(), &key).unwrap().is_some());
        // The same hash file name with a different stored key (a collision, or an entry
        // edited by hand) is not used.
        let (_, key_path) = entry_paths(dir.path(), &key);
        std::fs::write(&key_path, format!("{key}changed\n")).unwrap();
        assert!(load(dir.path(), &key).unwrap().is_none());
    }

    /// The cache stays honest: the committed entry of a cheap job (v11-wall, one particle
    /// in a closed box, about a second to solve) equals a fresh solution. Bit-identical on
    /// the machine that wrote it; the tolerance 1e-9 of each series' largest value allows
    /// another FFT code path (round-off of ~10³ unitary steps, ~1e-13) while any change of
    /// the physics or of the solver's discretisation moves values by far more.
    #[test]
    fn committed_entry_matches_a_fresh_solution() {
        let job = load_job("v11-wall.toml", &[]);
        let key = physics_key(&job).unwrap();
        let dir = jobs_dir().join(names::REFERENCE_CACHE_DIR);
        let cached = load(&dir, &key)
            .unwrap()
            .expect("v11-wall has a committed reference cache entry with the current key");
        let fresh = reference::solve(&job).unwrap();
        let d = max_relative_difference(&cached, &trimmed(&fresh)).unwrap();
        assert!(
            d <= 1e-9,
            "cached reference differs from a fresh one by {d:.3e}"
        );
        assert!(cached.series.contains_key(names::DENSITY.name));
    }
}
