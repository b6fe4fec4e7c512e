//! Every name a file written by signfold carries: datasets with their units, attributes,
//! groups, file-type words, format versions and file names (docs/formats.md). No dataset
//! name appears as a string literal anywhere else in the library.

/// A dataset of a result file: its name and the units written in its `units` attribute.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Dataset {
    pub name: &'static str,
    pub units: &'static str,
}

const fn ds(name: &'static str, units: &'static str) -> Dataset {
    Dataset { name, units }
}

/// Version of the result-file layout (observables.h5, reference.h5); checked on reading.
/// Version 2 renamed the sample counts (`particles*` → `samples*`, with soft links under the
/// old names), the phase `regeneration` → `selection` and dropped `lost_norm`.
pub const FORMAT_VERSION: u32 = 2;
/// The oldest result-file layout still read (its names are read as their new ones).
pub const OLDEST_FORMAT_VERSION: u32 = 1;
/// Version of the checkpoint layout; checked on resume. Version 2 renamed the attribute and
/// group `particles` → `samples` and dropped the `lost_momentum` tally.
pub const CHECKPOINT_FORMAT: u32 = 2;
/// The oldest checkpoint layout still resumed.
pub const OLDEST_CHECKPOINT_FORMAT: u32 = 1;
/// File-type words (root attribute [`ATTR_FILE_TYPE`]).
pub const OBSERVABLES_TYPE: &str = "signfold-observables";
pub const REFERENCE_TYPE: &str = "signfold-reference";
pub const CHECKPOINT_TYPE: &str = "signfold-checkpoint";

/// Files in an output directory.
pub const OBSERVABLES_FILE: &str = "observables.h5";
pub const REFERENCE_FILE: &str = "reference.h5";
pub const JOB_COPY_FILE: &str = "job.toml";
/// The cache of exact references of the validation jobs (docs/formats.md): a
/// subdirectory of the jobs' directory holding `<hash>.h5` (a reference result file) and
/// `<hash>.key` (the physics key text the hash was taken of).
pub const REFERENCE_CACHE_DIR: &str = "reference-cache";
pub const REFERENCE_CACHE_DATA_EXT: &str = "h5";
pub const REFERENCE_CACHE_KEY_EXT: &str = "key";
/// Held by the run or resume working in the directory (holder's host, pid, start time).
pub const LOCK_FILE: &str = "signfold.lock";
/// Probe written and removed to test that a directory is writable.
pub const PROBE_FILE: &str = ".signfold-write-probe";

/// Root attributes of result files and checkpoints.
pub const ATTR_FILE_TYPE: &str = "file_type";
pub const ATTR_JOB: &str = "job";
pub const ATTR_PROGRAM_VERSION: &str = "program_version";
pub const ATTR_FORMAT_VERSION: &str = "format_version";
/// The attribute every dataset carries with its units.
pub const ATTR_UNITS: &str = "units";

/// Axes.
pub const TIME: Dataset = ds("time", "fs");
pub const X: Dataset = ds("x", "nm");
pub const K: Dataset = ds("k", "1/nm");
/// The second position axis of `pair_density` (index [t][x][x′]): the same bin centres as
/// `x`, stored again so that netCDF-aware tools see two distinct named axes.
pub const X_PRIME: Dataset = ds("x_prime", "nm");

/// The named axes (HDF5 dimension scales) of the frame of an observable, after the time
/// axis: `Some` for the observables (and their `_error`) of docs/formats.md, `None` for a
/// name this program does not know (the writer then matches the axis by its length).
pub fn frame_axes(name: &str) -> Option<&'static [Dataset]> {
    let base = name.strip_suffix(ERROR_SUFFIX).unwrap_or(name);
    const XS: &[Dataset] = &[X];
    const PAIR: &[Dataset] = &[X, X_PRIME];
    const PHASE: &[Dataset] = &[X, K];
    const KS: &[Dataset] = &[K];
    Some(match base {
        n if n == DENSITY.name || n == CURRENT_DENSITY.name => XS,
        n if n == PAIR_DENSITY.name => PAIR,
        n if n == WIGNER.name => PHASE,
        n if n == MOMENTUM_DENSITY.name => KS,
        n if SCALARS.iter().any(|d| d.name == n) => &[],
        _ => return None,
    })
}

/// Observables with one value per output time.
const SCALARS: [Dataset; 12] = [
    NORM,
    ABSORBED_LEFT,
    ABSORBED_RIGHT,
    NORM_RIGHT,
    ENERGY,
    MEAN_X,
    MEAN_K,
    MEAN_FORCE,
    SAMPLES,
    SAMPLES_POSITIVE,
    SAMPLES_NEGATIVE,
    TIME,
];

/// Observables (each Monte Carlo observable also has `<name>_error`, same units).
pub const DENSITY: Dataset = ds("density", "1/nm");
pub const PAIR_DENSITY: Dataset = ds("pair_density", "1/nm^2");
pub const WIGNER: Dataset = ds("wigner", "1");
pub const MOMENTUM_DENSITY: Dataset = ds("momentum_density", "nm");
pub const CURRENT_DENSITY: Dataset = ds("current_density", "1/fs");
pub const NORM: Dataset = ds("norm", "1");
pub const ABSORBED_LEFT: Dataset = ds("absorbed_left", "1");
pub const ABSORBED_RIGHT: Dataset = ds("absorbed_right", "1");
pub const NORM_RIGHT: Dataset = ds("norm_right", "1");
pub const ENERGY: Dataset = ds("energy", "eV");
pub const MEAN_X: Dataset = ds("mean_x", "nm");
pub const MEAN_K: Dataset = ds("mean_k", "1/nm");
pub const MEAN_FORCE: Dataset = ds("mean_force", "eV/nm");
/// Live Monte Carlo samples per output: all, positive, negative.
pub const SAMPLES: Dataset = ds("samples", "1");
pub const SAMPLES_POSITIVE: Dataset = ds("samples_positive", "1");
pub const SAMPLES_NEGATIVE: Dataset = ds("samples_negative", "1");

/// Datasets renamed in format version 2 (old name, new name). Writers add an HDF5 soft
/// link under the old name for one format version; readers of version-1 files read the
/// old name as the new one.
pub const RENAMED_DATASETS: [(&str, &str); 3] = [
    ("particles", SAMPLES.name),
    ("particles_positive", SAMPLES_POSITIVE.name),
    ("particles_negative", SAMPLES_NEGATIVE.name),
];
/// Datasets of format version 1 that version 2 dropped (an identically zero tally since
/// wavevectors are unbounded, docs/method.md §2.5): skipped when a version-1 file is read.
pub const DROPPED_DATASETS: [&str; 2] = ["lost_norm", "lost_norm_error"];
/// `/run` datasets renamed in format version 2 (old name, new name), read as the new one.
pub const RENAMED_RUN: [(&str, &str); 1] = [("seconds_regeneration", "seconds_selection")];

/// The binned observables compared by relative L1 distance.
pub const DENSITY_LIKE: [Dataset; 4] = [DENSITY, PAIR_DENSITY, WIGNER, MOMENTUM_DENSITY];

/// Suffix of the standard-error dataset of an observable.
pub const ERROR_SUFFIX: &str = "_error";

/// `<name>_error`.
pub fn error_of(name: &str) -> String {
    format!("{name}{ERROR_SUFFIX}")
}

/// Per-annihilation records (one value per annihilation, not per output).
pub const ANNIHILATION_PREFIX: &str = "annihilation_";
pub const ANNIHILATION_TIME: Dataset = ds("annihilation_time", "fs");
pub const ANNIHILATION_BEFORE: Dataset = ds("annihilation_before", "1");
pub const ANNIHILATION_CANCELLED: Dataset = ds("annihilation_cancelled", "1");
/// The resolution used: mean level of the samples in mixed cells (cells 2^level × the
/// finest), the cell sizes at the coarsest level used, and (adaptive resolution) the χ²
/// normal-score threshold that merged cells (NaN for fixed cells).
pub const ANNIHILATION_LEVEL: Dataset = ds("annihilation_level", "1");
pub const ANNIHILATION_COARSEST_LEVEL: Dataset = ds("annihilation_coarsest_level", "1");
pub const ANNIHILATION_THRESHOLD: Dataset = ds("annihilation_threshold", "1");
/// Share of the mixed-sign samples annihilated in cells coarser than the Wigner function's
/// structure scales (docs/method.md §3.1).
pub const ANNIHILATION_BEYOND_SCALES: Dataset = ds("annihilation_beyond_scales", "1");
pub const ANNIHILATION_CELL_X: Dataset = ds("annihilation_cell_x", "nm");
pub const ANNIHILATION_CELL_K: Dataset = ds("annihilation_cell_k", "1/nm");

/// The group of machine- and run-dependent figures.
pub const RUN_GROUP: &str = "run";
/// `/run/seconds_<phase>` (s, one per rank).
pub const RUN_SECONDS_PREFIX: &str = "seconds_";
pub const RUN_WALL_SECONDS: Dataset = ds("wall_seconds", "s");
pub const RUN_BYTES_SENT: Dataset = ds("bytes_sent", "B");
pub const RUN_OCCUPIED_CELLS: Dataset = ds("occupied_cells", "1");
pub const RUN_MESSAGES_SENT: Dataset = ds("messages_sent", "1");
pub const RUN_RANKS: Dataset = ds("ranks", "1");
pub const RUN_THREADS: Dataset = ds("threads", "1");
/// Reference-solver figures under `/run`.
pub const RUN_REFERENCE_POINTS: Dataset = ds("reference_points_per_axis", "1");
pub const RUN_REFERENCE_DX: Dataset = ds("reference_dx", "nm");
pub const RUN_REFERENCE_MAX_DT: Dataset = ds("reference_max_dt", "fs");
pub const RUN_REFERENCE_PADDING: Dataset = ds("reference_padding", "nm");
pub const RUN_WALL_TIME: Dataset = ds("wall_time", "s");
/// Axes (dimension scales) of `/run`: the rank of a per-rank figure (values 0, 1, …), the
/// entry a·ranks + r of a per-annihilation-and-rank figure, and the one entry of a single
/// figure. Written by the result writer, skipped by the reader.
pub const RUN_RANK: Dataset = ds("rank", "1");
pub const RUN_PASS_RANK: Dataset = ds("pass_rank", "1");
pub const RUN_SINGLE: Dataset = ds("single", "1");

/// The named axis of the `/run` dataset `name` holding `len` values (`None`: a name this
/// program does not know, with more than one value).
pub fn run_axis(name: &str, len: usize) -> Option<Dataset> {
    if name.starts_with(RUN_SECONDS_PREFIX) || name == RUN_WALL_SECONDS.name {
        Some(RUN_RANK)
    } else if name == RUN_BYTES_SENT.name
        || name == RUN_OCCUPIED_CELLS.name
        || name == RUN_MESSAGES_SENT.name
    {
        Some(RUN_PASS_RANK)
    } else if len == 1 {
        Some(RUN_SINGLE)
    } else {
        None
    }
}

/// Checkpoint layout: attributes, groups and datasets.
pub mod checkpoint {
    pub const ATTR_JOB_DIR: &str = "job_dir";
    pub const ATTR_TIME: &str = "time";
    pub const ATTR_STEP: &str = "step";
    pub const ATTR_INITIAL_COUNT: &str = "initial_count";
    pub const ATTR_ANNIHILATIONS: &str = "annihilations";
    pub const ATTR_COUNT_AFTER_ANNIHILATION: &str = "count_after_annihilation";
    /// Live samples in the checkpoint (all ranks).
    pub const ATTR_SAMPLES: &str = "samples";
    /// [`ATTR_SAMPLES`] in checkpoint format 1.
    pub const ATTR_SAMPLES_V1: &str = "particles";
    pub const ATTR_COORDINATES: &str = "coordinates";
    pub const ATTR_CHECKSUM: &str = "checksum";
    /// Hashes of the kernel tables and derived numerics the checkpoint was written with.
    pub const ATTR_NUMERICS_HASH: &str = "numerics_hash";
    /// Written last: the file is complete.
    pub const ATTR_COMPLETE: &str = "complete";
    pub const STATE_GROUP: &str = "state";
    pub const S0: &str = "s0";
    pub const ABSORBED_LEFT: &str = "absorbed_left";
    pub const ABSORBED_RIGHT: &str = "absorbed_right";
    /// The samples' coordinates, identities and signs.
    pub const SAMPLES_GROUP: &str = "samples";
    /// [`SAMPLES_GROUP`] in checkpoint format 1.
    pub const SAMPLES_GROUP_V1: &str = "particles";
    pub const X: &str = "x";
    pub const K: &str = "k";
    pub const ID: &str = "id";
    pub const SIGN: &str = "sign";
    pub const FILE_PREFIX: &str = "checkpoint-";
    pub const FILE_SUFFIX: &str = ".h5";
    pub const RESULTS_SUFFIX: &str = "-results.h5";
    /// Suffix of a particle file being written (renamed to `FILE_SUFFIX` when complete).
    pub const TMP_SUFFIX: &str = ".h5.tmp";
}
