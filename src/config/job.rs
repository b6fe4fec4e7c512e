//! The job file: TOML schema, command-line overrides and validation.
//!
//! A job is read as a TOML document, `--set KEY=VALUE` overrides are applied to the
//! document, and the result is deserialised into [`Job`] (unknown keys rejected) and then
//! validated. Every error names the file and the key. Units: nm, fs, eV, 1/nm, electron
//! masses (see the README for the full reference).

use anyhow::{Context, Result, anyhow, bail};
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
    /// Cells of the space mesh on which the kernel tables live.
    #[serde(default = "default_mesh_cells")]
    pub cells: usize,
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
    /// Target number of initial signed particles.
    pub particles: u64,
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
    /// Cells in coordinates relative to the centre of mass (no one-body potential only).
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
    /// Live samples the run may hold on all ranks together (default 10 × numerics.particles).
    /// When an annihilation at the job's cells leaves more than half of it, coarser cells
    /// are used for that pass (and reported).
    pub budget: Option<u64>,
    #[serde(default)]
    pub cells: CellKind,
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
            cells: CellKind::Full,
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

/// A job as loaded: the effective TOML text (after overrides), its origin, and the schema.
#[derive(Clone, Debug)]
pub struct LoadedJob {
    pub job: Job,
    /// The effective job text (after `--set` overrides), stored in every output file.
    pub text: String,
    /// Directory that relative paths in the job (potential tables) are resolved against.
    pub base_dir: PathBuf,
    /// Name used in messages.
    pub origin: String,
}

/// Read and validate a job file, applying `KEY=VALUE` overrides first.
pub fn load(path: &Path, overrides: &[String]) -> Result<LoadedJob> {
    let text = std::fs::read_to_string(path)
        .with_context(|| format!("cannot read job file {}", path.display()))?;
    let base_dir = path.parent().map(Path::to_path_buf).unwrap_or_default();
    from_text(&text, &path.display().to_string(), base_dir, overrides)
}

/// Parse job text (`origin` names it in messages), apply overrides, deserialise, validate.
pub fn from_text(
    text: &str,
    origin: &str,
    base_dir: PathBuf,
    overrides: &[String],
) -> Result<LoadedJob> {
    let mut doc: toml::Table = toml::from_str(text).map_err(|e| anyhow!("{origin}: {e}"))?;
    for o in overrides {
        apply_override(&mut doc, o).with_context(|| format!("--set {o}"))?;
    }
    let effective = toml::to_string(&doc).expect("a TOML table always serialises");
    // Messages carry the line numbers of the text as written: the re-serialised text
    // orders keys differently, so its line numbers would point elsewhere.
    let job: Job = if overrides.is_empty() {
        toml::from_str(text).map_err(|e| anyhow!("{origin}: {}", locate(text, &e)))?
    } else {
        toml::from_str(&effective).map_err(|e| match toml::from_str::<Job>(text) {
            Err(original) => anyhow!("{origin}: {}", locate(text, &original)),
            Ok(_) => anyhow!(
                "{origin} (after --set overrides {}): {}",
                overrides.join(" "),
                e.message()
            ),
        })?
    };
    let loaded = LoadedJob {
        job,
        text: if overrides.is_empty() {
            text.to_string()
        } else {
            effective
        },
        base_dir,
        origin: origin.to_string(),
    };
    validate(&loaded.job).map_err(|e| anyhow!("{origin}: {e}"))?;
    Ok(loaded)
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

/// Apply `a.b.c=value` (array elements as `potential.0.height=…`) to a TOML document. The
/// value is parsed as a TOML value; if that fails it is taken as a string.
pub fn apply_override(doc: &mut toml::Table, spec: &str) -> Result<()> {
    let (key, raw) = spec
        .split_once('=')
        .ok_or_else(|| anyhow!("expected KEY=VALUE"))?;
    let key = key.trim();
    let raw = raw.trim();
    let value: toml::Value = toml::from_str::<toml::Table>(&format!("v = {raw}"))
        .ok()
        .and_then(|mut t| t.remove("v"))
        .unwrap_or_else(|| toml::Value::String(raw.to_string()));
    let parts: Vec<&str> = key.split('.').collect();
    if parts.iter().any(|p| p.is_empty()) {
        bail!("malformed key `{key}`");
    }
    let (last, path) = parts.split_last().expect("split gives at least one part");
    let mut root = toml::Value::Table(std::mem::take(doc));
    let result = set_at(&mut root, path, last, value);
    if let toml::Value::Table(t) = root {
        *doc = t;
    }
    result
}

fn set_at(root: &mut toml::Value, path: &[&str], last: &str, value: toml::Value) -> Result<()> {
    let mut cur = root;
    for (depth, part) in path.iter().enumerate() {
        cur = step(cur, part, &path[..=depth].join("."))?;
    }
    match cur {
        toml::Value::Table(t) => {
            t.insert(last.to_string(), value);
        }
        toml::Value::Array(a) => {
            let i: usize = last
                .parse()
                .map_err(|_| anyhow!("`{}` is a list: expected an index", path.join(".")))?;
            let n = a.len();
            *a.get_mut(i)
                .ok_or_else(|| anyhow!("index {i} out of range: `{}` has {n}", path.join(".")))? =
                value;
        }
        _ => bail!("`{}` is not a table", path.join(".")),
    }
    Ok(())
}

fn step<'a>(cur: &'a mut toml::Value, part: &str, so_far: &str) -> Result<&'a mut toml::Value> {
    match cur {
        toml::Value::Table(t) => {
            if !t.contains_key(part) {
                t.insert(part.to_string(), toml::Value::Table(toml::Table::new()));
            }
            Ok(t.get_mut(part).expect("just inserted"))
        }
        toml::Value::Array(a) => {
            let i: usize = part
                .parse()
                .map_err(|_| anyhow!("`{so_far}`: expected a list index"))?;
            let n = a.len();
            a.get_mut(i)
                .ok_or_else(|| anyhow!("`{so_far}`: index {i} out of range (list has {n})"))
        }
        _ => bail!("`{so_far}` is not a table"),
    }
}

/// Checks that serde cannot express. Messages name the key.
pub fn validate(job: &Job) -> Result<()> {
    let n = job.particles.count;
    if n == 0 {
        bail!("particles.count: must be at least 1");
    }
    if n > crate::config::limits::MAX_N {
        bail!(
            "particles.count: at most {} particles are supported by this build (got {n})",
            crate::config::limits::MAX_N
        );
    }
    if job.orbitals.len() != n {
        bail!(
            "particles.count is {n} but {} [[orbital]] entries are given: one orbital per particle",
            job.orbitals.len()
        );
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
        bail!(
            "domain.x_max ({}) must be greater than domain.x_min ({})",
            d.x_max,
            d.x_min
        );
    }
    if d.cells < 4 {
        bail!("domain.cells: must be at least 4 (got {})", d.cells);
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
            bail!(
                "orbital.{i}.centre: the orbital ({centre} ± 5 × {width} nm) lies wholly outside the domain [{}, {}] nm",
                d.x_min,
                d.x_max
            );
        }
        if wavevector.abs() > d.k_max {
            bail!(
                "orbital.{i}.wavevector: |{wavevector}| 1/nm is beyond domain.k_max = {} 1/nm",
                d.k_max
            );
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
                    bail!(
                        "{}: must be greater than {} ({to} ≤ {from})",
                        key("to"),
                        key("from")
                    );
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
            bail!(
                "numerics.rolloff ({r} nm) must not exceed half the coherence length ({} nm)",
                m.coherence_length / 2.0
            );
        }
    }
    if !is_unset(m.sync_step) {
        positive("numerics.sync_step", m.sync_step)?;
    }
    positive("numerics.end_time", m.end_time)?;
    if m.sync_step > m.end_time {
        bail!(
            "numerics.sync_step ({} fs) is longer than numerics.end_time ({} fs): the run would go past its end",
            m.sync_step,
            m.end_time
        );
    }
    if m.particles == 0 {
        bail!("numerics.particles: must be at least 1");
    }
    if m.groups < 1 {
        bail!(
            "numerics.groups: at least 1 (got 0); 1 gives no error bars (`_error` datasets hold NaN), 2 or more do"
        );
    }
    if m.groups > 1 << 15 {
        bail!("numerics.groups: at most 32768 (got {})", m.groups);
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
        && b < 2 * job.numerics.particles
    {
        bail!(
            "annihilation.budget: must be at least twice numerics.particles ({}), got {b}",
            2 * job.numerics.particles
        );
    }
    if a.trigger <= 1.0 || !a.trigger.is_finite() {
        bail!(
            "annihilation.trigger: must be greater than 1 (got {})",
            a.trigger
        );
    }
    if a.cells == CellKind::Relative && !job.potentials.is_empty() {
        bail!(
            "annihilation.cells = \"relative\" needs a job without one-body potential terms: \
             with a one-body potential the centre of mass carries sign structure and unbinned \
             centre-of-mass cells would bias the result"
        );
    }
    if a.cells == CellKind::Relative && n < 2 {
        bail!("annihilation.cells = \"relative\" needs at least 2 particles");
    }
    let c = &job.checkpoint;
    if let Some(t) = c.every {
        positive("checkpoint.every", t)?;
    }
    if let Some(t) = c.every_minutes {
        positive("checkpoint.every_minutes", t)?;
    }
    if c.keep == 0 {
        bail!("checkpoint.keep: at least 1 checkpoint must be kept");
    }
    let o = &job.output;
    if let Some(t) = o.interval {
        positive("output.interval", t)?;
    }
    if o.x_bins == 0 {
        bail!("output.x_bins: must be at least 1");
    }
    if o.k_bins == 0 {
        bail!("output.k_bins: must be at least 1");
    }
    Ok(())
}

fn finite(key: &str, v: f64) -> Result<()> {
    if !v.is_finite() {
        bail!("{key}: must be a finite number (got {v})");
    }
    Ok(())
}

fn positive(key: &str, v: f64) -> Result<()> {
    finite(key, v)?;
    if v <= 0.0 {
        bail!("{key}: must be greater than zero (got {v})");
    }
    Ok(())
}
