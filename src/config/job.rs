//! The job file: TOML schema, command-line overrides and validation.
//!
//! A job is read as a TOML document, `--set KEY=VALUE` overrides are applied to the
//! document, and the result is deserialised into [`Job`] (unknown keys rejected) and then
//! validated. Every error names the file and the key. Units: nm, fs, eV, 1/nm, electron
//! masses (see the README for the full reference).

use anyhow::{Context, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Statistics of the particles: decides how the orbitals are (anti)symmetrised.
#[derive(Deserialize, Serialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "kebab-case")]
pub enum Statistics {
    Fermion,
    Boson,
    Distinguishable,
}

impl Statistics {
    /// Identical particles (fermions or bosons): the Wigner function is exchange-symmetric.
    pub fn identical(self) -> bool {
        !matches!(self, Statistics::Distinguishable)
    }
}

#[derive(Deserialize, Serialize, Clone, Debug)]
#[serde(deny_unknown_fields)]
pub struct Particles {
    /// Number of particles N (each in one space dimension).
    pub count: usize,
    pub statistics: Statistics,
    /// Mass in electron masses.
    #[serde(default = "one")]
    pub mass: f64,
}

/// A one-particle orbital. Only Gaussians exist now; new kinds add a variant here and a
/// cross-Wigner function in `orbitals`.
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(tag = "kind", rename_all = "kebab-case", deny_unknown_fields)]
pub enum Orbital {
    /// φ(x) = (2πw²)^-1/4 exp(−(x − centre)²/(4w²) + i·wavevector·x)
    Gaussian {
        /// nm
        centre: f64,
        /// 1/nm
        wavevector: f64,
        /// standard deviation of |φ|², nm
        width: f64,
    },
}

#[derive(Deserialize, Serialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "kebab-case")]
pub enum Boundary {
    Absorbing,
    Reflecting,
    Periodic,
}

#[derive(Deserialize, Serialize, Clone, Debug)]
#[serde(deny_unknown_fields)]
pub struct Domain {
    /// Left edge, nm.
    pub x_min: f64,
    /// Right edge, nm.
    pub x_max: f64,
    /// Cells of the space mesh on which the kernel tables live (`domain.mesh_cells`; read
    /// from `domain.cells` with a warning, format version 1).
    #[serde(default = "default_mesh_cells")]
    pub mesh_cells: usize,
    pub boundary: Boundary,
    /// Momentum range as a wavevector: |k| ≤ k_max = p_max/ħ, 1/nm (unset: derived from
    /// the physics, `physics::defaults`).
    #[serde(default = "unset")]
    pub k_max: f64,
}

/// One term of the one-body potential (all terms are summed).
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(tag = "kind", rename_all = "kebab-case", deny_unknown_fields)]
pub enum PotentialTerm {
    /// Rectangular barrier (height > 0) or well (height < 0) on [from, to], edges smoothed
    /// by a logistic step of length `smoothing` (nm; default two mesh cells).
    Barrier {
        from: f64,
        to: f64,
        height: f64,
        smoothing: Option<f64>,
    },
    /// height·exp(−(x − centre)²/(2 width²)).
    Gaussian {
        centre: f64,
        width: f64,
        height: f64,
    },
    /// Piecewise-linear profile read from a two-column text file (x in nm, U in eV),
    /// relative to the job file; constant beyond its ends.
    Table { file: PathBuf },
    /// Uniform field: U = slope·x (eV/nm). Acts as a classical force in the drift.
    Field { slope: f64 },
    /// Harmonic trap U = m ω² (x − centre)²/2 with ħω = `hbar_omega` (eV). A force.
    Harmonic { centre: f64, hbar_omega: f64 },
}

impl PotentialTerm {
    /// Whether the term enters the Wigner kernel (transfers momentum to single particles);
    /// `field` and `harmonic`, at most quadratic, act as classical forces instead.
    pub fn is_kernel(&self) -> bool {
        !matches!(
            self,
            PotentialTerm::Field { .. } | PotentialTerm::Harmonic { .. }
        )
    }
}

#[derive(Deserialize, Serialize, Clone, Debug, PartialEq, Default)]
#[serde(tag = "kind", rename_all = "kebab-case", deny_unknown_fields)]
pub enum Pair {
    #[default]
    None,
    /// e²/(4πε₀ ε_r sqrt(r² + a²)).
    SoftCoulomb { permittivity: f64, softening: f64 },
}

#[derive(Deserialize, Serialize, Clone, Debug)]
#[serde(deny_unknown_fields)]
pub struct Numerics {
    /// Coherence length L_c, nm: width of the kernel window (transfers are multiples of
    /// Δk = π/P with the lattice period P ≥ L_c, docs/method.md §2.3). Unset: derived from
    /// the orbitals, `physics::defaults`.
    #[serde(default = "unset")]
    pub coherence_length: f64,
    /// Roll-off ℓ of the kernel window, nm (default L_c/8).
    pub rolloff: Option<f64>,
    /// Synchronisation step, fs (unset: derived from the generation rate).
    #[serde(default = "unset")]
    pub sync_step: f64,
    /// End time, fs.
    pub end_time: f64,
    /// Target number of initial Monte Carlo samples (signed particles of the method), not to
    /// be confused with the physical particles of `[particles]` (`numerics.samples`; read
    /// from `numerics.particles` with a warning, format version 1).
    pub samples: u64,
    /// Independent sub-ensembles for error bars.
    #[serde(default = "default_groups")]
    pub groups: u32,
    #[serde(default = "one_u64")]
    pub seed: u64,
    /// Memory cap per rank, MiB: `check` and `run` refuse a job whose forecast peak does not
    /// fit, and a run stops before it would pass it (default: the node's available memory
    /// shared by the ranks on the node; for `resume`, half the machine's memory).
    pub memory_limit_mib: Option<f64>,
}

#[derive(Deserialize, Serialize, Clone, Copy, Debug, PartialEq, Eq, Default)]
#[serde(rename_all = "kebab-case")]
pub enum CellKind {
    /// Cells in every particle's (x, k).
    #[default]
    Full,
    /// Cells in coordinates relative to the centre of mass, which is left unbinned (no
    /// kernel one-body potential only: a field or trap moves the centre of mass classically).
    Relative,
}

/// How annihilation chooses its cells (docs/method.md §3).
#[derive(Deserialize, Serialize, Clone, Copy, Debug, PartialEq, Eq, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Resolution {
    /// Cells from `cell_x` × `cell_k` up to 64× coarser, chosen per region of phase space
    /// by whether the two signs are spread alike over the finer cells.
    #[default]
    Adaptive,
    /// The cells `cell_x` × `cell_k` everywhere (coarsened as a whole only to keep within
    /// the budget).
    Fixed,
}

#[derive(Deserialize, Serialize, Clone, Debug)]
#[serde(deny_unknown_fields)]
pub struct Annihilation {
    /// Finest cell size in x, nm (default: the mesh cell).
    pub cell_x: Option<f64>,
    /// Finest cell size in k, 1/nm (default π/(2 L_c)).
    pub cell_k: Option<f64>,
    /// Adaptive cells (default) or the fixed cells `cell_x` × `cell_k`.
    #[serde(default)]
    pub resolution: Resolution,
    /// Annihilate when the global particle count exceeds trigger × the larger of the initial
    /// count and the count right after the latest annihilation.
    #[serde(default = "default_trigger")]
    pub trigger: f64,
    /// Live samples the run may hold on all ranks together (default 10 × numerics.samples).
    /// When an annihilation at the job's cells leaves more than half of it, coarser cells
    /// are used for that pass (and reported).
    pub budget: Option<u64>,
    /// The coordinates the cells are taken in (`annihilation.coordinates`; read from
    /// `annihilation.cells` with a warning, format version 1). Unset: chosen by
    /// `physics::defaults` ("relative" where the centre of mass separates exactly).
    #[serde(default)]
    pub coordinates: Option<CellKind>,
    /// Merge a cell with its images under particle exchange (identical particles only).
    #[serde(default = "yes")]
    pub merge_exchange: bool,
}

impl Default for Annihilation {
    fn default() -> Self {
        Annihilation {
            cell_x: None,
            cell_k: None,
            resolution: Resolution::Adaptive,
            trigger: default_trigger(),
            budget: None,
            coordinates: None,
            merge_exchange: true,
        }
    }
}

#[derive(Deserialize, Serialize, Clone, Debug)]
#[serde(deny_unknown_fields)]
pub struct Output {
    /// Time between outputs, fs (default: end_time/20, rounded to sync steps).
    pub interval: Option<f64>,
    /// Bins in x over the domain.
    #[serde(default = "default_bins")]
    pub x_bins: usize,
    /// Bins in k over [−k_max, k_max].
    #[serde(default = "default_bins")]
    pub k_bins: usize,
}

impl Default for Output {
    fn default() -> Self {
        Output {
            interval: None,
            x_bins: default_bins(),
            k_bins: default_bins(),
        }
    }
}

/// When checkpoints are written (at synchronisation times only) and how many are kept.
#[derive(Deserialize, Serialize, Clone, Debug)]
#[serde(deny_unknown_fields)]
pub struct Checkpoints {
    /// Simulated time between checkpoints, fs (rounded to whole sync steps).
    pub every: Option<f64>,
    /// Wall-clock minutes between checkpoints.
    pub every_minutes: Option<f64>,
    /// Checkpoints kept in the output directory (the newest ones).
    #[serde(default = "default_keep")]
    pub keep: usize,
}

fn default_keep() -> usize {
    2
}

impl Default for Checkpoints {
    fn default() -> Self {
        Checkpoints {
            every: None,
            every_minutes: None,
            keep: default_keep(),
        }
    }
}

#[derive(Deserialize, Serialize, Clone, Debug)]
#[serde(deny_unknown_fields)]
pub struct Job {
    pub particles: Particles,
    #[serde(rename = "orbital")]
    pub orbitals: Vec<Orbital>,
    pub domain: Domain,
    #[serde(default, rename = "potential")]
    pub potentials: Vec<PotentialTerm>,
    #[serde(default)]
    pub pair: Pair,
    pub numerics: Numerics,
    #[serde(default)]
    pub annihilation: Annihilation,
    #[serde(default)]
    pub output: Output,
    #[serde(default)]
    pub checkpoint: Checkpoints,
}

/// A numeric key the job did not set, to be derived from the physics (NaN).
fn unset() -> f64 {
    f64::NAN
}

/// Whether a derived key is still unset.
pub fn is_unset(v: f64) -> bool {
    v.is_nan()
}

fn one() -> f64 {
    1.0
}
fn one_u64() -> u64 {
    1
}
fn yes() -> bool {
    true
}
fn default_groups() -> u32 {
    8
}
fn default_trigger() -> f64 {
    3.0
}
fn default_bins() -> usize {
    100
}
fn default_mesh_cells() -> usize {
    400
}

/// What is wrong with a job, by kind, so that callers and tests match the variant (and its
/// key) rather than the wording. The messages are the ones the command line prints.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum JobError {
    /// A key whose value is wrong on its own.
    #[error("{key}: {problem}")]
    Invalid { key: String, problem: String },
    /// A key whose value does not fit another key's; the message names both.
    #[error("{message}")]
    Conflict {
        key: String,
        other: String,
        message: String,
    },
    /// A renamed key given in both its old and its new spelling.
    #[error(
        "{old} and {new} are both given: `{old}` is the old name of `{new}` (format version 1); give only {new}"
    )]
    BothSpellings { old: String, new: String },
    /// The text is not TOML or does not fit the schema (the parser's message, with the line).
    #[error("{0}")]
    Syntax(String),
    /// A `--set KEY=VALUE` that cannot be applied to the job.
    #[error("--set {spec}: {problem}")]
    Override { spec: String, problem: String },
}

impl JobError {
    /// The job key the error is about, where there is one.
    pub fn key(&self) -> Option<&str> {
        match self {
            JobError::Invalid { key, .. } | JobError::Conflict { key, .. } => Some(key),
            JobError::BothSpellings { new, .. } => Some(new),
            JobError::Syntax(_) | JobError::Override { .. } => None,
        }
    }
}

/// A [`JobError`] in a named job file (the message starts with the file's name).
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("{origin}: {error}")]
pub struct JobFileError {
    pub origin: String,
    pub error: JobError,
}

fn invalid(key: impl Into<String>, problem: impl Into<String>) -> JobError {
    JobError::Invalid {
        key: key.into(),
        problem: problem.into(),
    }
}

fn conflict(key: &str, other: &str, message: String) -> JobError {
    JobError::Conflict {
        key: key.to_string(),
        other: other.to_string(),
        message,
    }
}

/// Job keys renamed in format version 2 (table, old key, new key): the old spelling is
/// still read, with a [`Deprecated`] warning, for one format version.
pub const RENAMED_KEYS: [(&str, &str, &str); 3] = [
    ("numerics", "particles", "samples"),
    ("domain", "cells", "mesh_cells"),
    ("annihilation", "cells", "coordinates"),
];

/// A deprecated spelling found in a job (returned with the job; the command line prints it).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Deprecated {
    /// Where it was found: the job file's name or `--set`.
    pub place: String,
    pub old: String,
    pub new: String,
}

impl std::fmt::Display for Deprecated {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{}: `{}` is the old name of `{}` (renamed in format version 2); read as `{}` for now, rename it",
            self.place, self.old, self.new, self.new
        )
    }
}

/// The job text with every old key of [`RENAMED_KEYS`] renamed in place (comments, layout
/// and line numbers kept), and a warning for each. Both spellings of one key are an error.
/// Text that does not parse is returned as it is (the caller reports the parse error).
pub fn current_spelling(text: &str, place: &str) -> Result<(String, Vec<Deprecated>), JobError> {
    let Ok(doc) = toml_edit::ImDocument::parse(text) else {
        return Ok((text.to_string(), Vec::new()));
    };
    let mut spans = Vec::new();
    let mut warnings = Vec::new();
    for (table, old, new) in RENAMED_KEYS {
        let Some(t) = doc.get(table).and_then(|i| i.as_table_like()) else {
            continue;
        };
        let Some((key, _)) = t.get_key_value(old) else {
            continue;
        };
        let (old, new) = (format!("{table}.{old}"), format!("{table}.{new}"));
        if t.contains_key(new.rsplit('.').next().expect("a dotted key")) {
            return Err(JobError::BothSpellings { old, new });
        }
        let span = key
            .span()
            .expect("a parsed document's keys carry their spans");
        spans.push((
            span,
            new.rsplit('.').next().expect("a dotted key").to_string(),
        ));
        warnings.push(Deprecated {
            place: place.to_string(),
            old,
            new,
        });
    }
    spans.sort_by_key(|(s, _)| std::cmp::Reverse(s.start));
    let mut out = text.to_string();
    for (span, name) in spans {
        out.replace_range(span, &name);
    }
    Ok((out, warnings))
}

/// A `--set` key in its current spelling (and a warning when it was an old one).
fn current_override(spec: &str) -> (String, Option<Deprecated>) {
    if let Some((key, value)) = spec.split_once('=') {
        for (table, old, new) in RENAMED_KEYS {
            if key.trim() == format!("{table}.{old}") {
                let warning = Deprecated {
                    place: "--set".to_string(),
                    old: format!("{table}.{old}"),
                    new: format!("{table}.{new}"),
                };
                return (format!("{table}.{new}={value}"), Some(warning));
            }
        }
    }
    (spec.to_string(), None)
}

/// A stored job text (a result file's or checkpoint's) as a [`Job`], old key names read as
/// their new ones, without validation.
pub fn parse_stored(text: &str) -> Result<Job, JobError> {
    let (text, _) = current_spelling(text, "stored job")?;
    toml::from_str(&text).map_err(|e| JobError::Syntax(e.to_string()))
}

/// A job as loaded: the effective TOML text (after overrides), its origin, and the schema.
#[derive(Clone, Debug)]
pub struct LoadedJob {
    pub job: Job,
    /// The effective job text (after `--set` overrides and with renamed keys in their
    /// current spelling; the user's comments and layout kept), stored in every output file.
    pub text: String,
    /// Directory that relative paths in the job (potential tables) are resolved against.
    pub base_dir: PathBuf,
    /// Name used in messages.
    pub origin: String,
    /// Deprecated spellings read (the library does not print them; the command line does).
    pub warnings: Vec<Deprecated>,
}

/// Read and validate a job file, applying `KEY=VALUE` overrides first.
pub fn load(path: &Path, overrides: &[String]) -> Result<LoadedJob> {
    let text = std::fs::read_to_string(path)
        .with_context(|| format!("cannot read job file {}", path.display()))?;
    let base_dir = path.parent().map(Path::to_path_buf).unwrap_or_default();
    from_text(&text, &path.display().to_string(), base_dir, overrides)
}

/// Parse job text (`origin` names it in messages), apply overrides, deserialise, validate.
/// Errors are [`JobFileError`]s (reach them with `anyhow::Error::downcast_ref`).
pub fn from_text(
    text: &str,
    origin: &str,
    base_dir: PathBuf,
    overrides: &[String],
) -> Result<LoadedJob> {
    let in_file = |error: JobError| {
        anyhow::Error::new(JobFileError {
            origin: origin.to_string(),
            error,
        })
    };
    // The parser's own message (with its line) for text that is not TOML.
    toml::from_str::<toml::Table>(text).map_err(|e| in_file(JobError::Syntax(e.to_string())))?;
    let (current, mut warnings) = current_spelling(text, origin).map_err(in_file)?;
    let mut doc: toml_edit::DocumentMut = current
        .parse()
        .map_err(|e: toml_edit::TomlError| in_file(JobError::Syntax(e.to_string())))?;
    for o in overrides {
        let (spec, warning) = current_override(o);
        warnings.extend(warning);
        apply_override(&mut doc, &spec).map_err(|e| match e {
            JobError::Override { problem, .. } => JobError::Override {
                spec: o.clone(),
                problem,
            },
            other => other,
        })?;
    }
    let effective = if overrides.is_empty() {
        current.clone()
    } else {
        doc.to_string()
    };
    // Messages carry the line numbers of the text as written (renaming a key keeps lines).
    let job: Job = if overrides.is_empty() {
        toml::from_str(&current).map_err(|e| in_file(JobError::Syntax(locate(&current, &e))))?
    } else {
        toml::from_str(&effective).map_err(|e| match toml::from_str::<Job>(&current) {
            Err(original) => in_file(JobError::Syntax(locate(&current, &original))),
            Ok(_) => anyhow::Error::new(JobFileError {
                origin: format!("{origin} (after --set overrides {})", overrides.join(" ")),
                error: JobError::Syntax(e.message().to_string()),
            }),
        })?
    };
    validate(&job).map_err(in_file)?;
    Ok(LoadedJob {
        job,
        text: effective,
        base_dir,
        origin: origin.to_string(),
        warnings,
    })
}

/// The parser's message, pointed at the offending line. Inside a tagged table (an
/// `[[orbital]]` or `[[potential]]`) the parser only knows the table's header line; an
/// unknown key is then looked up in that table and its own line reported.
fn locate(text: &str, e: &toml::de::Error) -> String {
    let full = e.to_string();
    let Some(span) = e.span() else {
        return full;
    };
    let Some(name) = e
        .message()
        .strip_prefix("unknown field `")
        .and_then(|r| r.split('`').next())
    else {
        return full;
    };
    let header = text[..span.start.min(text.len())].matches('\n').count();
    let found = text
        .lines()
        .enumerate()
        .skip(header)
        .take_while(|(i, l)| *i == header || !l.trim_start().starts_with('['))
        .find(|(_, l)| {
            l.trim_start()
                .strip_prefix(name)
                .is_some_and(|r| r.trim_start().starts_with('='))
        });
    match found {
        Some((i, line)) if i != header => format!(
            "TOML parse error at line {}\n  |\n{} | {line}\n  |\n{} (in the table that starts at line {})",
            i + 1,
            i + 1,
            e.message(),
            header + 1
        ),
        _ => full,
    }
}

/// Where a `--set` path leads inside the document.
enum Slot<'a> {
    Table(&'a mut toml_edit::Table),
    Inline(&'a mut toml_edit::InlineTable),
    Tables(&'a mut toml_edit::ArrayOfTables),
    Values(&'a mut toml_edit::Array),
    Leaf,
}

fn slot(item: &mut toml_edit::Item) -> Slot<'_> {
    match item {
        toml_edit::Item::Table(t) => Slot::Table(t),
        toml_edit::Item::ArrayOfTables(a) => Slot::Tables(a),
        toml_edit::Item::Value(v) => slot_of_value(v),
        toml_edit::Item::None => Slot::Leaf,
    }
}

fn slot_of_value(v: &mut toml_edit::Value) -> Slot<'_> {
    match v {
        toml_edit::Value::InlineTable(t) => Slot::Inline(t),
        toml_edit::Value::Array(a) => Slot::Values(a),
        _ => Slot::Leaf,
    }
}

/// `value` in place of `old`, keeping the old value's surroundings (a trailing comment).
fn replace_value(old: &mut toml_edit::Value, value: toml_edit::Value) {
    let decor = old.decor().clone();
    *old = value;
    *old.decor_mut() = decor;
}

/// Apply `a.b.c=value` (array elements as `potential.0.height=…`) to a TOML document,
/// keeping its comments and layout. The value is parsed as a TOML value; if that fails it
/// is taken as a string.
pub fn apply_override(doc: &mut toml_edit::DocumentMut, spec: &str) -> Result<(), JobError> {
    let fail = |problem: String| JobError::Override {
        spec: spec.to_string(),
        problem,
    };
    let (key, raw) = spec
        .split_once('=')
        .ok_or_else(|| fail("expected KEY=VALUE".to_string()))?;
    let key = key.trim();
    let raw = raw.trim();
    let value: toml_edit::Value = raw.parse().unwrap_or_else(|_| toml_edit::Value::from(raw));
    let parts: Vec<&str> = key.split('.').collect();
    if parts.iter().any(|p| p.is_empty()) {
        return Err(fail(format!("malformed key `{key}`")));
    }
    let (last, path) = parts.split_last().expect("split gives at least one part");
    set_at(doc.as_item_mut(), path, last, value).map_err(fail)
}

fn set_at(
    root: &mut toml_edit::Item,
    path: &[&str],
    last: &str,
    value: toml_edit::Value,
) -> Result<(), String> {
    let index = |part: &str, so_far: &str| -> Result<usize, String> {
        part.parse()
            .map_err(|_| format!("`{so_far}`: expected a list index"))
    };
    let out_of_range = |so_far: &str, i: usize, n: usize| {
        format!("`{so_far}`: index {i} out of range (list has {n})")
    };
    let mut cur = slot(root);
    for (depth, part) in path.iter().enumerate() {
        let so_far = path[..=depth].join(".");
        cur = match cur {
            Slot::Table(t) => {
                if !t.contains_key(part) {
                    t.insert(part, toml_edit::Item::Table(toml_edit::Table::new()));
                }
                slot(t.get_mut(part).expect("just inserted"))
            }
            Slot::Inline(t) => {
                if !t.contains_key(part) {
                    t.insert(
                        *part,
                        toml_edit::Value::InlineTable(toml_edit::InlineTable::new()),
                    );
                }
                slot_of_value(t.get_mut(part).expect("just inserted"))
            }
            Slot::Tables(a) => {
                let i = index(part, &so_far)?;
                let n = a.len();
                Slot::Table(a.get_mut(i).ok_or_else(|| out_of_range(&so_far, i, n))?)
            }
            Slot::Values(a) => {
                let i = index(part, &so_far)?;
                let n = a.len();
                slot_of_value(a.get_mut(i).ok_or_else(|| out_of_range(&so_far, i, n))?)
            }
            Slot::Leaf => return Err(format!("`{so_far}` is not a table")),
        };
    }
    let whole = path.join(".");
    match cur {
        Slot::Table(t) => match t.get_mut(last) {
            Some(toml_edit::Item::Value(old)) => replace_value(old, value),
            Some(item) => *item = toml_edit::Item::Value(value),
            None => {
                t.insert(last, toml_edit::Item::Value(value));
            }
        },
        Slot::Inline(t) => match t.get_mut(last) {
            Some(old) => replace_value(old, value),
            None => {
                t.insert(last, value);
            }
        },
        Slot::Values(a) => {
            let i: usize = last
                .parse()
                .map_err(|_| format!("`{whole}` is a list: expected an index"))?;
            let n = a.len();
            let old = a
                .get_mut(i)
                .ok_or_else(|| format!("index {i} out of range: `{whole}` has {n}"))?;
            replace_value(old, value);
        }
        Slot::Tables(_) => {
            return Err(format!(
                "`{whole}` is a list of tables: name a key inside one of them (`{whole}.{last}.KEY`)"
            ));
        }
        Slot::Leaf => return Err(format!("`{whole}` is not a table")),
    }
    Ok(())
}

/// Checks that serde cannot express. Each error names the key.
pub fn validate(job: &Job) -> Result<(), JobError> {
    let n = job.particles.count;
    if n == 0 {
        return Err(invalid("particles.count", "must be at least 1"));
    }
    if n > crate::config::limits::MAX_N {
        return Err(invalid(
            "particles.count",
            format!(
                "at most {} particles are supported by this build (got {n})",
                crate::config::limits::MAX_N
            ),
        ));
    }
    if job.orbitals.len() != n {
        return Err(conflict(
            "particles.count",
            "orbital",
            format!(
                "particles.count is {n} but {} [[orbital]] entries are given: one orbital per particle",
                job.orbitals.len()
            ),
        ));
    }
    positive("particles.mass", job.particles.mass)?;
    for (i, o) in job.orbitals.iter().enumerate() {
        match o {
            Orbital::Gaussian {
                centre,
                wavevector,
                width,
            } => {
                finite(&format!("orbital.{i}.centre"), *centre)?;
                finite(&format!("orbital.{i}.wavevector"), *wavevector)?;
                positive(&format!("orbital.{i}.width"), *width)?;
            }
        }
    }
    let d = &job.domain;
    finite("domain.x_min", d.x_min)?;
    finite("domain.x_max", d.x_max)?;
    if d.x_max <= d.x_min {
        return Err(conflict(
            "domain.x_max",
            "domain.x_min",
            format!(
                "domain.x_max ({}) must be greater than domain.x_min ({})",
                d.x_max, d.x_min
            ),
        ));
    }
    if d.mesh_cells < 4 {
        return Err(invalid(
            "domain.mesh_cells",
            format!("must be at least 4 (got {})", d.mesh_cells),
        ));
    }
    if !is_unset(d.k_max) {
        positive("domain.k_max", d.k_max)?;
    }
    for (i, o) in job.orbitals.iter().enumerate() {
        let Orbital::Gaussian {
            centre,
            wavevector,
            width,
        } = *o;
        // Beyond five widths a Gaussian holds less than 1e-6 of its norm.
        if centre + 5.0 * width < d.x_min || centre - 5.0 * width > d.x_max {
            return Err(invalid(
                format!("orbital.{i}.centre"),
                format!(
                    "the orbital ({centre} ± 5 × {width} nm) lies wholly outside the domain [{}, {}] nm",
                    d.x_min, d.x_max
                ),
            ));
        }
        if wavevector.abs() > d.k_max {
            return Err(invalid(
                format!("orbital.{i}.wavevector"),
                format!(
                    "|{wavevector}| 1/nm is beyond domain.k_max = {} 1/nm",
                    d.k_max
                ),
            ));
        }
    }
    for (i, p) in job.potentials.iter().enumerate() {
        let key = |k: &str| format!("potential.{i}.{k}");
        match p {
            PotentialTerm::Barrier {
                from,
                to,
                height,
                smoothing,
            } => {
                finite(&key("from"), *from)?;
                finite(&key("to"), *to)?;
                finite(&key("height"), *height)?;
                if to <= from {
                    return Err(invalid(
                        key("to"),
                        format!("must be greater than {} ({to} ≤ {from})", key("from")),
                    ));
                }
                if let Some(s) = smoothing {
                    positive(&key("smoothing"), *s)?;
                }
            }
            PotentialTerm::Gaussian {
                centre,
                width,
                height,
            } => {
                finite(&key("centre"), *centre)?;
                positive(&key("width"), *width)?;
                finite(&key("height"), *height)?;
            }
            PotentialTerm::Table { .. } => {}
            PotentialTerm::Field { slope } => finite(&key("slope"), *slope)?,
            PotentialTerm::Harmonic { centre, hbar_omega } => {
                finite(&key("centre"), *centre)?;
                positive(&key("hbar_omega"), *hbar_omega)?;
            }
        }
    }
    if let Pair::SoftCoulomb {
        permittivity,
        softening,
    } = job.pair
    {
        positive("pair.permittivity", permittivity)?;
        positive("pair.softening", softening)?;
    }
    let m = &job.numerics;
    if !is_unset(m.coherence_length) {
        positive("numerics.coherence_length", m.coherence_length)?;
    }
    if let Some(r) = m.rolloff
        && !is_unset(m.coherence_length)
    {
        positive("numerics.rolloff", r)?;
        if r > m.coherence_length / 2.0 {
            return Err(conflict(
                "numerics.rolloff",
                "numerics.coherence_length",
                format!(
                    "numerics.rolloff ({r} nm) must not exceed half the coherence length ({} nm)",
                    m.coherence_length / 2.0
                ),
            ));
        }
    }
    if !is_unset(m.sync_step) {
        positive("numerics.sync_step", m.sync_step)?;
    }
    positive("numerics.end_time", m.end_time)?;
    if m.sync_step > m.end_time {
        return Err(conflict(
            "numerics.sync_step",
            "numerics.end_time",
            format!(
                "numerics.sync_step ({} fs) is longer than numerics.end_time ({} fs): the run would go past its end",
                m.sync_step, m.end_time
            ),
        ));
    }
    if m.samples == 0 {
        return Err(invalid("numerics.samples", "must be at least 1"));
    }
    if m.groups < 1 {
        return Err(invalid(
            "numerics.groups",
            "at least 1 (got 0); 1 gives no error bars (`_error` datasets hold NaN), 2 or more do",
        ));
    }
    if m.groups > 1 << 15 {
        return Err(invalid(
            "numerics.groups",
            format!("at most 32768 (got {})", m.groups),
        ));
    }
    if let Some(c) = m.memory_limit_mib {
        positive("numerics.memory_limit_mib", c)?;
    }
    let a = &job.annihilation;
    if let Some(c) = a.cell_x {
        positive("annihilation.cell_x", c)?;
    }
    if let Some(c) = a.cell_k {
        positive("annihilation.cell_k", c)?;
    }
    if let Some(b) = a.budget
        && b < 2 * job.numerics.samples
    {
        return Err(invalid(
            "annihilation.budget",
            format!(
                "must be at least twice numerics.samples ({}), got {b}",
                2 * job.numerics.samples
            ),
        ));
    }
    if a.trigger <= 1.0 || !a.trigger.is_finite() {
        return Err(invalid(
            "annihilation.trigger",
            format!("must be greater than 1 (got {})", a.trigger),
        ));
    }
    if a.coordinates == Some(CellKind::Relative)
        && job.potentials.iter().any(PotentialTerm::is_kernel)
    {
        return Err(conflict(
            "annihilation.coordinates",
            "potential",
            "annihilation.coordinates = \"relative\" needs a job whose one-body potential is at most \
             quadratic (`field`, `harmonic`): a barrier, well, Gaussian or table term transfers \
             momentum to single particles, so the centre of mass carries sign structure and \
             unbinned centre-of-mass cells would bias the result"
                .to_string(),
        ));
    }
    if a.coordinates == Some(CellKind::Relative) && n < 2 {
        return Err(conflict(
            "annihilation.coordinates",
            "particles.count",
            "annihilation.coordinates = \"relative\" needs at least 2 particles".to_string(),
        ));
    }
    let c = &job.checkpoint;
    if let Some(t) = c.every {
        positive("checkpoint.every", t)?;
    }
    if let Some(t) = c.every_minutes {
        positive("checkpoint.every_minutes", t)?;
    }
    if c.keep == 0 {
        return Err(invalid(
            "checkpoint.keep",
            "at least 1 checkpoint must be kept",
        ));
    }
    let o = &job.output;
    if let Some(t) = o.interval {
        positive("output.interval", t)?;
    }
    if o.x_bins == 0 {
        return Err(invalid("output.x_bins", "must be at least 1"));
    }
    if o.k_bins == 0 {
        return Err(invalid("output.k_bins", "must be at least 1"));
    }
    Ok(())
}

fn finite(key: &str, v: f64) -> Result<(), JobError> {
    if !v.is_finite() {
        return Err(invalid(key, format!("must be a finite number (got {v})")));
    }
    Ok(())
}

fn positive(key: &str, v: f64) -> Result<(), JobError> {
    finite(key, v)?;
    if v <= 0.0 {
        return Err(invalid(key, format!("must be greater than zero (got {v})")));
    }
    Ok(())
}
