//! Checkpoints: one HDF5 file per checkpoint, written by all ranks at once through MPI-IO,
//! atomically (temporary name, flush, rename), with a completeness marker and an
//! order-independent checksum; read back on any number of ranks.
//!
//! Checkpoint of step s = `checkpoint-<s>-results.h5` (the results file as it stood, written
//! first by rank 0) + `checkpoint-<s>.h5` (particles and run state, renamed into place
//! last). A checkpoint counts only when both exist and the particle file verifies.

use crate::config::job::{self, LoadedJob};
use crate::engine::comm::{Comm, agree};
use crate::engine::state::State;
use crate::io::names::{self, checkpoint as cp};
use crate::io::results::{ResultFile, read_str_attr, write_str_attr};
use crate::physics::estimators::Departed;
use crate::physics::kernel::KernelTable;
use crate::physics::numerics::Setup;
use crate::physics::particles::Store;
use crate::physics::rng;
use anyhow::{Context, Result, anyhow, bail};
use ndarray::ArrayView1;
use std::path::{Path, PathBuf};

pub use crate::io::names::{CHECKPOINT_FORMAT, CHECKPOINT_TYPE, OLDEST_CHECKPOINT_FORMAT};

pub fn particle_path(dir: &Path, step: u64) -> PathBuf {
    dir.join(format!("{}{step:010}{}", cp::FILE_PREFIX, cp::FILE_SUFFIX))
}

pub fn results_path(dir: &Path, step: u64) -> PathBuf {
    dir.join(format!(
        "{}{step:010}{}",
        cp::FILE_PREFIX,
        cp::RESULTS_SUFFIX
    ))
}

/// Steps of the checkpoint particle files in `dir`, newest first.
pub fn list(dir: &Path) -> Vec<u64> {
    let mut steps: Vec<u64> = std::fs::read_dir(dir)
        .map(|rd| {
            rd.filter_map(|e| e.ok())
                .filter_map(|e| {
                    let name = e.file_name().into_string().ok()?;
                    let num = name
                        .strip_prefix(cp::FILE_PREFIX)?
                        .strip_suffix(cp::FILE_SUFFIX)?;
                    (num.len() == 10).then(|| num.parse().ok()).flatten()
                })
                .collect()
        })
        .unwrap_or_default();
    steps.sort_unstable_by(|a, b| b.cmp(a));
    steps
}

/// What a file named `checkpoint-<step>…` in a run directory is.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Part {
    Particles,
    Results,
    /// A temporary file of a write that did not finish.
    Temporary,
}

/// Every checkpoint file in `dir`: (step, part, path).
fn files(dir: &Path) -> Vec<(u64, Part, PathBuf)> {
    let results_tmp = format!("{}.tmp", cp::RESULTS_SUFFIX);
    std::fs::read_dir(dir)
        .map(|rd| {
            rd.filter_map(|e| e.ok())
                .filter_map(|e| {
                    let name = e.file_name().into_string().ok()?;
                    let rest = name.strip_prefix(cp::FILE_PREFIX)?;
                    let (num, tail) = rest.split_at_checked(10)?;
                    let step = num.parse().ok()?;
                    let part = match tail {
                        t if t == cp::FILE_SUFFIX => Part::Particles,
                        t if t == cp::RESULTS_SUFFIX => Part::Results,
                        t if t == cp::TMP_SUFFIX || t == results_tmp => Part::Temporary,
                        _ => return None,
                    };
                    Some((step, part, e.path()))
                })
                .collect()
        })
        .unwrap_or_default()
}

/// Remove the checkpoint files of `dir` that belong to no checkpoint: a results copy
/// whose particle file does not exist (the run ended between the two writes) and the
/// temporary files of an unfinished write. Returns what was removed. Called by rank 0
/// while it holds the directory's lock (no write of this run is under way).
pub fn remove_leftovers(dir: &Path) -> Vec<PathBuf> {
    let all = files(dir);
    let has_particles = |s: u64| all.iter().any(|&(t, p, _)| t == s && p == Part::Particles);
    all.iter()
        .filter(|(s, p, _)| match p {
            Part::Particles => false,
            Part::Results => !has_particles(*s),
            Part::Temporary => true,
        })
        .filter(|(_, _, path)| std::fs::remove_file(path).is_ok())
        .map(|(_, _, path)| path.clone())
        .collect()
}

/// Remove every checkpoint file of `dir` (a forced new run must not resume old ones).
pub fn remove_all(dir: &Path) {
    for (_, _, path) in files(dir) {
        let _ = std::fs::remove_file(path);
    }
}

/// The parts of a run's numerics that decide its trajectory and that the program computes
/// rather than reads from the job (floating-point FFTs, libm, SIMD code paths may differ
/// between builds and machines): key in the `numerics_hash` attribute, and what it covers.
pub const NUMERICS_PARTS: [(&str, &str); 3] = [
    ("one_body_table", "the one-body kernel table"),
    ("pair_table", "the pair kernel table"),
    (
        "derived",
        "the derived numerics (sync step, step count, Γ_max, transfer lattice, momentum cap, \
         annihilation cells, budget, output steps)",
    ),
];

/// One 64-bit hash per entry of [`NUMERICS_PARTS`], over IEEE bit patterns and counts.
pub fn numerics_fingerprint(setup: &Setup) -> [u64; 3] {
    let table = |t: &Option<KernelTable>| -> u64 {
        let Some(t) = t else { return 0 };
        let mut w: Vec<u64> = vec![
            t.points as u64,
            t.cap as u64,
            t.lo.to_bits(),
            t.dx.to_bits(),
            t.period.to_bits(),
            t.dk.to_bits(),
            t.gamma_max.to_bits(),
        ];
        w.extend(t.values.iter().map(|v| v.to_bits()));
        w.extend(t.gamma.iter().map(|v| v.to_bits()));
        rng::hash(&w)
    };
    let mut d: Vec<u64> = [
        setup.dt,
        setup.gamma_max,
        setup.k_max,
        setup.mesh_dx,
        setup.lc,
        setup.rolloff,
        setup.period,
        setup.dk,
        setup.cell_x,
        setup.cell_k,
        setup.trigger,
        setup.lo,
        setup.hi,
        setup.mass,
    ]
    .iter()
    .map(|v| v.to_bits())
    .collect();
    d.extend([
        setup.steps,
        setup.cap as u64,
        setup.budget,
        setup.groups as u64,
    ]);
    d.extend(&setup.output_steps);
    [table(&setup.table1), table(&setup.table2), rng::hash(&d)]
}

/// The `numerics_hash` attribute: `one_body_table=<16 hex> pair_table=<…> derived=<…>`.
pub fn numerics_hash(setup: &Setup) -> String {
    NUMERICS_PARTS
        .iter()
        .zip(numerics_fingerprint(setup))
        .map(|((key, _), h)| format!("{key}={h:016x}"))
        .collect::<Vec<_>>()
        .join(" ")
}

/// Compare a checkpoint's `numerics_hash` with the numerics this program rebuilt from its
/// job. A mismatch is an error naming what differs; a checkpoint written before the hash
/// existed (`None`) cannot be verified: the returned note says so.
pub fn verify_numerics(stored: Option<&str>, setup: &Setup, shown: &str) -> Result<Option<String>> {
    let Some(stored) = stored else {
        return Ok(Some(format!(
            "{shown} has no {} attribute (written by an older version): the kernel tables rebuilt for the resume \
             cannot be verified against those of the original run",
            cp::ATTR_NUMERICS_HASH
        )));
    };
    let value = |key: &str| {
        stored
            .split_whitespace()
            .find_map(|kv| kv.strip_prefix(key)?.strip_prefix('='))
    };
    let differ: Vec<String> = NUMERICS_PARTS
        .iter()
        .zip(numerics_fingerprint(setup))
        .filter_map(|((key, what), h)| {
            let now = format!("{h:016x}");
            match value(key) {
                Some(v) if v == now => None,
                Some(v) => Some(format!("{what} ({key}: stored {v}, rebuilt {now})")),
                None => Some(format!("{what} ({key}: not stored, rebuilt {now})")),
            }
        })
        .collect();
    if differ.is_empty() {
        return Ok(None);
    }
    bail!(
        "{shown}: this program rebuilds numerics that differ from those the run was written with: {}. \
         The run would not continue the same trajectory (a different program version, build or machine type \
         computes the tables differently). Resume with the build and machine type that wrote the checkpoint, or \
         start again with `signfold run … --force`",
        differ.join("; ")
    )
}

/// Order-independent checksum of particles: the wrapping sum over particles of a mix of
/// each of their words, salted by the word's place in the record (so that swapped fields
/// within a particle change it). Computed in parallel; any partition gives the same sum.
fn local_checksum(store: &Store) -> u64 {
    use rayon::prelude::*;
    let n = store.n;
    (0..store.len())
        .into_par_iter()
        .map(|p| {
            let mut h = rng::mix(store.id[p]) ^ rng::mix(store.sign[p] as i64 as u64 ^ 0x51);
            for i in 0..n {
                h = h.wrapping_add(rng::mix(
                    store.x[p * n + i]
                        .to_bits()
                        .wrapping_add(0x9e37_79b9 * (i as u64 + 1)),
                ));
                h = h.wrapping_add(rng::mix(
                    store.k[p * n + i]
                        .to_bits()
                        .wrapping_add(0x7f4a_7c15 * (i as u64 + 1)),
                ));
            }
            rng::mix(h)
        })
        .reduce(|| 0u64, |a, b| a.wrapping_add(b))
}

fn global_checksum(store: &Store, comm: &dyn Comm) -> u64 {
    let mut v = [local_checksum(store) as i128];
    comm.sum_i128(&mut v);
    v[0] as u64
}

/// Global offsets: (first particle of this rank, total).
fn offsets(n_local: usize, comm: &dyn Comm) -> (u64, u64) {
    let counts: Vec<u64> = comm
        .gather_all(&[n_local as u64])
        .into_iter()
        .map(|v| v[0])
        .collect();
    (counts[..comm.rank()].iter().sum(), counts.iter().sum())
}

fn open_for(comm: &dyn Comm, path: &Path, create: bool) -> hdf5::Result<hdf5::File> {
    let mut b = hdf5::FileBuilder::new();
    // One rank writes alone through the plain POSIX driver; more share the file via MPI-IO.
    let world = comm.as_any().downcast_ref::<crate::engine::mpi::World>();
    if let Some(c) = world.map(|w| w.raw()).filter(|_| comm.size() > 1) {
        b.with_fapl(|p| p.mpio(c, None));
    }
    if create { b.create(path) } else { b.open(path) }
}

/// Would a file of `bytes` fit under this process's file-size limit and on the disk?
fn preflight(dir: &Path, bytes: f64) -> Result<()> {
    let mut lim = libc::rlimit {
        rlim_cur: 0,
        rlim_max: 0,
    };
    // SAFETY: getrlimit writes into the struct we pass.
    if unsafe { libc::getrlimit(libc::RLIMIT_FSIZE, &mut lim) } == 0
        && lim.rlim_cur != libc::RLIM_INFINITY
        && (lim.rlim_cur as f64) < bytes
    {
        bail!(
            "cannot write a checkpoint of about {:.1} MiB in {}: the file-size limit (ulimit -f) is {:.1} MiB",
            bytes / (1u64 << 20) as f64,
            dir.display(),
            lim.rlim_cur as f64 / (1u64 << 20) as f64
        );
    }
    let c = std::ffi::CString::new(dir.as_os_str().as_encoded_bytes())
        .map_err(|_| anyhow!("{}: bad path", dir.display()))?;
    // SAFETY: statvfs fills the zeroed struct for a valid C string path.
    let mut v: libc::statvfs = unsafe { std::mem::zeroed() };
    if unsafe { libc::statvfs(c.as_ptr(), &mut v) } == 0 {
        let free = v.f_bavail as f64 * v.f_frsize as f64;
        if free < bytes {
            bail!(
                "cannot write a checkpoint of about {:.1} MiB in {}: only {:.1} MiB free on its disk",
                bytes / (1u64 << 20) as f64,
                dir.display(),
                free / (1u64 << 20) as f64
            );
        }
    }
    Ok(())
}

/// Everything the run needs to continue bit-identically, besides the particles.
fn write_state(
    f: &hdf5::File,
    st: &State,
    job: &LoadedJob,
    time: f64,
    numerics: &str,
) -> hdf5::Result<()> {
    write_str_attr(f, names::ATTR_FILE_TYPE, CHECKPOINT_TYPE)
        .map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
    write_str_attr(f, cp::ATTR_NUMERICS_HASH, numerics)
        .map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
    write_str_attr(f, names::ATTR_JOB, &job.text)
        .map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
    write_str_attr(f, cp::ATTR_JOB_DIR, &job.base_dir.to_string_lossy())
        .map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
    write_str_attr(f, names::ATTR_PROGRAM_VERSION, env!("CARGO_PKG_VERSION"))
        .map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
    f.new_attr::<u32>()
        .create(names::ATTR_FORMAT_VERSION)?
        .write_scalar(&CHECKPOINT_FORMAT)?;
    f.new_attr::<f64>()
        .create(cp::ATTR_TIME)?
        .write_scalar(&time)?;
    f.new_attr::<u64>()
        .create(cp::ATTR_STEP)?
        .write_scalar(&st.step)?;
    f.new_attr::<u64>()
        .create(cp::ATTR_INITIAL_COUNT)?
        .write_scalar(&st.initial_count)?;
    f.new_attr::<u64>()
        .create(cp::ATTR_ANNIHILATIONS)?
        .write_scalar(&st.annihilations)?;
    f.new_attr::<u64>()
        .create(cp::ATTR_COUNT_AFTER_ANNIHILATION)?
        .write_scalar(&st.count_after_annihilation)?;
    let g = f.create_group(cp::STATE_GROUP)?;
    for (name, v) in [
        (cp::S0, &st.s0),
        (cp::ABSORBED_LEFT, &st.gone.left),
        (cp::ABSORBED_RIGHT, &st.gone.right),
    ] {
        let ds = g.new_dataset::<i64>().shape([v.len()]).create(name)?;
        ds.write_raw(v)?;
    }
    Ok(())
}

/// Write checkpoint `st.step` into `dir` (collective). `results` is significant on rank 0;
/// `numerics` is the [`numerics_hash`] of the run. Keeps the newest `keep` checkpoints. On
/// failure every rank returns an error and the previous checkpoints are untouched.
#[allow(clippy::too_many_arguments)]
pub fn write(
    dir: &Path,
    st: &State,
    results: &ResultFile,
    job: &LoadedJob,
    time: f64,
    numerics: &str,
    keep: usize,
    comm: &dyn Comm,
) -> Result<()> {
    let root = comm.is_root();
    let rp = results_path(dir, st.step);
    let r = if root {
        results.write_atomic(&rp)
    } else {
        Ok(())
    };
    agree(comm, r).context("checkpoint: writing the results copy")?;
    let final_path = particle_path(dir, st.step);
    let tmp = dir.join(format!(
        "{}{:010}{}",
        cp::FILE_PREFIX,
        st.step,
        cp::TMP_SUFFIX
    ));
    let (off, total) = offsets(st.store.len(), comm);
    // Parallel HDF5 cannot close a file cleanly after a failed write (its ranks fall out of
    // step inside H5Fclose), so refuse up front what would fail: a file-size limit or a
    // disk too small for this checkpoint, checked on every rank.
    let bytes = total as f64 * (16 * st.store.n + 9) as f64 + (256u64 << 10) as f64;
    // A stale temporary file of a killed run is unlinked first (rank 0, before the
    // agreement below, which every rank passes only after it).
    let stale = if root {
        match std::fs::remove_file(&tmp) {
            Err(e) if e.kind() != std::io::ErrorKind::NotFound => Err(anyhow!(
                "cannot write {}: something in the way cannot be removed ({e})",
                tmp.display()
            )),
            _ => Ok(()),
        }
    } else {
        Ok(())
    };
    agree(comm, stale.and_then(|_| preflight(dir, bytes))).context("checkpoint")?;
    let checksum = global_checksum(&st.store, comm);
    let n = st.store.n as u64;
    // Every collective HDF5 call happens on every rank: after each stage the ranks agree on
    // success, and on failure all of them stop at the same point (closing the file there).
    let stage = |r: hdf5::Result<()>, what: &str| -> Result<()> {
        let local =
            r.map_err(|e| anyhow!("checkpoint: cannot write {} ({what}): {e}", tmp.display()));
        if comm.any(local.is_err()) {
            return Err(local.err().unwrap_or_else(|| {
                anyhow!(
                    "checkpoint: another rank could not write {} ({what})",
                    tmp.display()
                )
            }));
        }
        Ok(())
    };
    let fail = |e: anyhow::Error| -> anyhow::Error {
        if root {
            let _ = std::fs::remove_file(&tmp);
        }
        e
    };
    let (f, created) = match open_for(comm, &tmp, true) {
        Ok(f) => (Some(f), Ok(())),
        Err(e) => (None, Err(e)),
    };
    stage(created, "create").map_err(fail)?;
    let f = f.expect("created on every rank");
    let mut sets = None;
    let meta = (|| -> hdf5::Result<()> {
        write_state(&f, st, job, time, numerics)?;
        f.new_attr::<u64>()
            .create(cp::ATTR_SAMPLES)?
            .write_scalar(&total)?;
        f.new_attr::<u64>()
            .create(cp::ATTR_COORDINATES)?
            .write_scalar(&n)?;
        f.new_attr::<u64>()
            .create(cp::ATTR_CHECKSUM)?
            .write_scalar(&checksum)?;
        let g = f.create_group(cp::SAMPLES_GROUP)?;
        let xs = g
            .new_dataset::<f64>()
            .shape([(total * n) as usize])
            .create(cp::X)?;
        let ks = g
            .new_dataset::<f64>()
            .shape([(total * n) as usize])
            .create(cp::K)?;
        let ids = g
            .new_dataset::<u64>()
            .shape([total as usize])
            .create(cp::ID)?;
        let signs = g
            .new_dataset::<i8>()
            .shape([total as usize])
            .create(cp::SIGN)?;
        sets = Some((xs, ks, ids, signs));
        Ok(())
    })();
    stage(meta, "metadata").map_err(fail)?;
    let (xs, ks, ids, signs) = sets.expect("created with the metadata");
    let data = (|| -> hdf5::Result<()> {
        let (a, b) = (off as usize, off as usize + st.store.len());
        if b > a {
            let nn = n as usize;
            xs.write_slice(ArrayView1::from(&st.store.x[..]), a * nn..b * nn)?;
            ks.write_slice(ArrayView1::from(&st.store.k[..]), a * nn..b * nn)?;
            ids.write_slice(ArrayView1::from(&st.store.id[..]), a..b)?;
            signs.write_slice(ArrayView1::from(&st.store.sign[..]), a..b)?;
        }
        Ok(())
    })();
    stage(data, "sample data").map_err(fail)?;
    drop((xs, ks, ids, signs));
    stage(f.flush(), "flush").map_err(fail)?;
    // The completeness marker goes last.
    let marker = f
        .new_attr::<u8>()
        .create(cp::ATTR_COMPLETE)
        .and_then(|a| a.write_scalar(&1u8))
        .and_then(|_| f.flush());
    stage(marker, "completeness marker").map_err(fail)?;
    stage(f.close(), "close").map_err(fail)?;
    let renamed = if root {
        std::fs::rename(&tmp, &final_path).with_context(|| {
            format!(
                "checkpoint: cannot rename {} to {}",
                tmp.display(),
                final_path.display()
            )
        })
    } else {
        Ok(())
    };
    agree(comm, renamed)?;
    if root {
        for old in list(dir).into_iter().skip(keep.max(1)) {
            let _ = std::fs::remove_file(particle_path(dir, old));
            let _ = std::fs::remove_file(results_path(dir, old));
        }
    }
    Ok(())
}

/// A checkpoint read back: the job, the state of this rank's share, the results so far.
pub struct Restored {
    pub job: LoadedJob,
    pub state: State,
    pub results: ResultFile,
    pub time: f64,
    /// The particle file read, and its `numerics_hash` (absent in older checkpoints).
    pub path: PathBuf,
    pub numerics_hash: Option<String>,
    /// Newer checkpoints that were not usable, and why (for the command line to report).
    pub skipped: Vec<String>,
}

fn read_one(dir: &Path, step: u64, comm: &dyn Comm) -> Result<Restored> {
    let path = particle_path(dir, step);
    let shown = path.display().to_string();
    // Metadata: every rank reads the same and so fails alike.
    let f = open_for(comm, &path, false)
        .map_err(|e| anyhow!("{shown}: cannot be opened as HDF5 ({e})"))?;
    let kind =
        read_str_attr(&f, names::ATTR_FILE_TYPE).map_err(|_| anyhow!("{shown}: no file type"))?;
    if kind != CHECKPOINT_TYPE {
        bail!("{shown}: not a checkpoint (file type `{kind}`)");
    }
    let complete: u8 = f
        .attr(cp::ATTR_COMPLETE)
        .and_then(|a| a.read_scalar())
        .unwrap_or(0);
    if complete != 1 {
        bail!("{shown}: incomplete (no completeness marker)");
    }
    let a = |name: &str| -> Result<u64> {
        f.attr(name)
            .and_then(|a| a.read_scalar())
            .map_err(|e| anyhow!("{shown}: attribute {name}: {e}"))
    };
    // Format 1 named the sample count and group `particles` and kept a `lost_momentum`
    // tally (always zero, not read).
    let version: u32 = f
        .attr(names::ATTR_FORMAT_VERSION)
        .and_then(|a| a.read_scalar())
        .unwrap_or(CHECKPOINT_FORMAT);
    let (count_attr, group) = if version < 2 {
        (cp::ATTR_SAMPLES_V1, cp::SAMPLES_GROUP_V1)
    } else {
        (cp::ATTR_SAMPLES, cp::SAMPLES_GROUP)
    };
    let (total, n, checksum) = (
        a(count_attr)?,
        a(cp::ATTR_COORDINATES)?,
        a(cp::ATTR_CHECKSUM)?,
    );
    let time: f64 = f.attr(cp::ATTR_TIME)?.read_scalar()?;
    let text = read_str_attr(&f, names::ATTR_JOB)?;
    let job_dir = read_str_attr(&f, cp::ATTR_JOB_DIR).unwrap_or_default();
    let numerics_hash = read_str_attr(&f, cp::ATTR_NUMERICS_HASH).ok();
    let s = f.group(cp::STATE_GROUP)?;
    let v = |name: &str| -> Result<Vec<i64>> { Ok(s.dataset(name)?.read_raw::<i64>()?) };
    let (s0, left, right) = (v(cp::S0)?, v(cp::ABSORBED_LEFT)?, v(cp::ABSORBED_RIGHT)?);
    let mut job = job::from_text(
        &text,
        &format!("job stored in {shown}"),
        PathBuf::from(job_dir),
        &[],
    )?;
    crate::physics::defaults::resolve(&mut job)?;
    // This rank's slice: reads may fail on some ranks only, so agree before going on.
    let (p, r) = (comm.size() as u64, comm.rank() as u64);
    let (from, to) = ((total * r / p) as usize, (total * (r + 1) / p) as usize);
    let nn = n as usize;
    let local = (|| -> Result<Store> {
        let g = f.group(group)?;
        let mut store = Store::new(nn);
        if to > from {
            let rd = |name: &str, a: usize, b: usize| -> Result<Vec<f64>> {
                Ok(g.dataset(name)?
                    .read_slice_1d::<f64, _>(a..b)?
                    .into_raw_vec_and_offset()
                    .0)
            };
            store.x = rd(cp::X, from * nn, to * nn)?;
            store.k = rd(cp::K, from * nn, to * nn)?;
            store.id = g
                .dataset(cp::ID)?
                .read_slice_1d::<u64, _>(from..to)?
                .into_raw_vec_and_offset()
                .0;
            store.sign = g
                .dataset(cp::SIGN)?
                .read_slice_1d::<i8, _>(from..to)?
                .into_raw_vec_and_offset()
                .0;
        }
        Ok(store)
    })();
    if comm.any(local.is_err()) {
        return Err(local.err().map_or_else(
            || anyhow!("{shown}: sample data unreadable on another rank"),
            |e| anyhow!("{shown}: sample data unreadable ({e})"),
        ));
    }
    let store = local.expect("checked above");
    if global_checksum(&store, comm) != checksum {
        bail!("{shown}: checksum mismatch (the sample data are damaged)");
    }
    let results = if comm.is_root() {
        ResultFile::read(&results_path(dir, step))?
    } else {
        ResultFile::default()
    };
    let state = State {
        step: a(cp::ATTR_STEP)?,
        store,
        s0,
        gone: Departed { left, right },
        initial_count: a(cp::ATTR_INITIAL_COUNT)?,
        annihilations: a(cp::ATTR_ANNIHILATIONS)?,
        // Absent from checkpoints written before the attribute existed: the trigger then
        // refers to the initial count until the next annihilation.
        count_after_annihilation: a(cp::ATTR_COUNT_AFTER_ANNIHILATION).unwrap_or(0),
    };
    Ok(Restored {
        job,
        state,
        results,
        time,
        path,
        numerics_hash,
        skipped: Vec::new(),
    })
}

/// Check the format version of a checkpoint: an incompatible version is refused outright.
fn check_version(path: &Path) -> Result<()> {
    let Ok(f) = hdf5::File::open(path) else {
        return Ok(());
    };
    let Ok(v) = f
        .attr(names::ATTR_FORMAT_VERSION)
        .and_then(|a| a.read_scalar::<u32>())
    else {
        return Ok(());
    };
    if !(OLDEST_CHECKPOINT_FORMAT..=CHECKPOINT_FORMAT).contains(&v) {
        bail!(
            "{}: checkpoint format version {v} is not supported by this program (it reads versions {OLDEST_CHECKPOINT_FORMAT} to {CHECKPOINT_FORMAT}); \
             resume it with the program version that wrote it",
            path.display()
        );
    }
    Ok(())
}

/// The newest valid checkpoint in `dir`; damaged ones are reported (by rank 0) and skipped.
pub fn newest_valid(dir: &Path, comm: &dyn Comm) -> Result<Restored> {
    let steps = list(dir);
    if steps.is_empty() {
        bail!("{}: no checkpoint found (checkpoint-*.h5)", dir.display());
    }
    hdf5::silence_errors(true);
    let mut skipped = Vec::new();
    for step in steps {
        let path = particle_path(dir, step);
        let version = if comm.is_root() {
            check_version(&path)
        } else {
            Ok(())
        };
        agree(comm, version)?;
        let results_ok = !comm.is_root() || ResultFile::read(&results_path(dir, step)).is_ok();
        let attempt = if comm.any(!results_ok) {
            Err(anyhow!(
                "{}: its results copy is missing or damaged",
                results_path(dir, step).display()
            ))
        } else {
            read_one(dir, step, comm)
        };
        let failed = comm.any(attempt.is_err());
        match attempt {
            Ok(mut r) if !failed => {
                r.skipped = skipped;
                return Ok(r);
            }
            Ok(_) => continue,
            Err(e) => skipped.push(format!(
                "checkpoint of step {step} is not usable: {e:#}; trying the previous one"
            )),
        }
    }
    bail!(
        "{}: no valid checkpoint (all were damaged or incomplete)",
        dir.display()
    )
}
