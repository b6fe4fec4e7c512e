//! Validated numerics: everything the run derives from the job before the first particle
//! exists (meshes, Δk, the transfer cap, kernel tables, Γ_max, cells, memory estimates).

use crate::config::job::{Boundary, CellKind, Job, LoadedJob, Resolution, Statistics};
use crate::physics::grid::{self, Bins};
use crate::physics::images::{self, Component};
use crate::physics::initial::NBodyWigner;
use crate::physics::kernel::KernelTable;
use crate::physics::orbitals::Gaussian;
use crate::physics::particles::Store;
use crate::physics::potential::{OneBody, PairPotential};
use crate::physics::resonance;
use crate::physics::units;
use anyhow::{Result, anyhow};

pub struct Setup {
    pub job: Job,
    /// Effective job text (stored in every output file).
    pub text: String,
    pub n: usize,
    pub stats: Statistics,
    /// Mass, eV·fs²/nm².
    pub mass: f64,
    pub orbitals: Vec<Gaussian>,
    /// Each orbital as a signed sum of Gaussians: itself and, in a reflecting box, its wall
    /// images that can reach the box by the end time (docs/method.md §2.5).
    pub orbital_components: Vec<Vec<Component>>,
    pub lo: f64,
    pub hi: f64,
    pub boundary: Boundary,
    pub k_max: f64,
    /// Space mesh cell, nm.
    pub mesh_dx: f64,
    pub one_body: OneBody,
    pub pair: Option<PairPotential>,
    /// Coherence length and window roll-off, nm.
    pub lc: f64,
    pub rolloff: f64,
    /// Period of the one-body transfer lattice, P₁ = max(L_c, (L + L_c)/2), nm: no coherence
    /// inside the domain (half-length ≤ L/2) reaches an image of the window (docs/method.md
    /// §2.3). The pair table has its own period (`table2.period`).
    pub period: f64,
    /// One-body transfer quantum Δk = π/P₁, 1/nm, and cap K = ⌊k_max/Δk⌋.
    pub dk: f64,
    pub cap: usize,
    /// Kernel table of the summed one-body potential on the space mesh.
    pub table1: Option<KernelTable>,
    /// Kernel table of the pair potential on the relative-coordinate mesh [−L, L].
    pub table2: Option<KernelTable>,
    /// Bound on the total generation rate Γ(z) of one particle: N·max γ₁ + C(N,2)·max γ₂.
    pub gamma_max: f64,
    /// Synchronisation step, fs.
    pub dt: f64,
    pub steps: u64,
    pub output_steps: Vec<u64>,
    pub x_bins: Bins,
    pub k_bins: Bins,
    /// Annihilation cell sizes, nm and 1/nm.
    pub cell_x: f64,
    pub cell_k: f64,
    pub cells: CellKind,
    pub resolution: Resolution,
    pub merge_exchange: bool,
    pub groups: u32,
    pub seed: u64,
    pub target: u64,
    pub trigger: f64,
    /// Live samples allowed on all ranks together.
    pub budget: u64,
    /// Memory cap per rank, bytes: `numerics.memory_limit_mib`, else half this machine's
    /// memory; `run` replaces the default by the node's available memory shared by its ranks
    /// (the forecast in `engine::memory` and the run's own check compare with it).
    pub memory_limit: f64,
}

/// Default sample budget, in units of the initial sample count.
pub const DEFAULT_BUDGET_FACTOR: u64 = 10;

/// Physical memory of this machine in bytes (from /proc/meminfo; 8 GiB if unknown).
pub fn machine_memory() -> f64 {
    std::fs::read_to_string("/proc/meminfo")
        .ok()
        .and_then(|t| {
            t.lines()
                .find(|l| l.starts_with("MemTotal:"))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|v| v.parse::<f64>().ok())
        })
        .map(|kib| kib * 1024.0)
        .unwrap_or(8.0 * (1u64 << 30) as f64)
}

/// Fewest initial particles per error group: fewer leave groups without a net norm.
pub const MIN_PARTICLES_PER_GROUP: u64 = 10;

const GIB: f64 = (1u64 << 30) as f64;

/// Bytes of the fixed structures of a rank (estimator histograms, the results kept by rank
/// 0, kernel tables) that the job asks for, each with the keys that set it.
pub fn fixed_sizes(
    job: &Job,
    one_body_kernel: bool,
    pair: bool,
    threads: usize,
) -> Vec<(&'static str, String, f64)> {
    let n = job.particles.count;
    let g = job.numerics.groups as f64;
    let (nx, nk) = (job.output.x_bins as f64, job.output.k_bins as f64);
    let pair_bins = if n >= 2 { nx * nx } else { 0.0 };
    // One histogram set per worker thread, the sum, and the global reduction's buffers.
    let copies = threads.max(1) as f64 + 3.0;
    let counts = copies * g * (8.0 * (nx + pair_bins + nx * nk + nk) + 16.0 * (nx + 5.0));
    let outputs = {
        let dt = job.numerics.sync_step;
        let steps = ((job.numerics.end_time / dt) - 1e-9).ceil().max(1.0);
        let every = (job.output.interval.unwrap_or(job.numerics.end_time / 20.0) / dt)
            .round()
            .max(1.0);
        (steps / every).floor() + 2.0
    };
    // Value and standard error of every frame, kept in memory and rewritten at each output.
    let results = 2.0 * outputs * 16.0 * (pair_bins + nx * nk + 2.0 * nx + nk + 8.0);
    let lc = job.numerics.coherence_length;
    let cap = (job.domain.k_max * lc / std::f64::consts::PI).floor();
    let width = 2.0 * cap + 1.0;
    let mesh_dx = (job.domain.x_max - job.domain.x_min) / job.domain.mesh_cells as f64;
    let fft = (8.0 * cap + 8.0).max((4.0 * lc / mesh_dx).ceil()).max(64.0);
    let fft = 2f64.powf(fft.log2().ceil());
    // Per point: the row while building, the stored row, the alias sampler (~24 B per entry).
    let table = |points: f64| points * width * 40.0 + threads.max(1) as f64 * fft * 32.0;
    let cells = job.domain.mesh_cells as f64;
    let mut v = vec![
        (
            "estimators",
            format!(
                "output.x_bins = {}, output.k_bins = {}, numerics.groups = {}: histograms",
                job.output.x_bins, job.output.k_bins, job.numerics.groups
            ),
            counts,
        ),
        (
            "results",
            format!(
                "output.x_bins = {}, output.k_bins = {}, {} outputs (numerics.end_time, output.interval): result frames",
                job.output.x_bins, job.output.k_bins, outputs
            ),
            results,
        ),
    ];
    let kernel_keys = format!(
        "domain.mesh_cells = {}, numerics.coherence_length = {lc}, domain.k_max = {} (momentum cap K = {cap}, FFT of {fft} points)",
        job.domain.mesh_cells, job.domain.k_max
    );
    if one_body_kernel {
        v.push(("one-body kernel table", kernel_keys.clone(), table(cells)));
    }
    if pair && n >= 2 {
        let points = if job.domain.boundary == Boundary::Periodic {
            cells
        } else {
            2.0 * cells
        };
        v.push(("pair kernel table", kernel_keys, table(points)));
    }
    v
}

/// Refuse, before anything is allocated, a job whose fixed structures would not fit in
/// half of this machine's memory, or whose error groups would be nearly empty.
pub fn check_sizes(job: &Job, one_body_kernel: bool, pair: bool, threads: usize) -> Result<()> {
    let (p, g) = (job.numerics.samples, job.numerics.groups as u64);
    if p < MIN_PARTICLES_PER_GROUP * g {
        return Err(anyhow!(
            "numerics.samples = {p} is below {MIN_PARTICLES_PER_GROUP} per error group (numerics.groups = {g}): \
             groups without particles have no net norm; raise numerics.samples or lower numerics.groups"
        ));
    }
    let budget = 0.5 * machine_memory();
    let sizes = fixed_sizes(job, one_body_kernel, pair, threads);
    let total: f64 = sizes.iter().map(|s| s.2).sum();
    if total > budget {
        let (what, keys, bytes) = sizes
            .iter()
            .max_by(|a, b| a.2.total_cmp(&b.2))
            .expect("at least the estimators");
        return Err(anyhow!(
            "{keys}: {what} of {:.3} GiB per rank ({:.3} GiB of fixed structures in all), more than half of \
             this machine's memory ({:.1} GiB): lower these values",
            bytes / GIB,
            total / GIB,
            budget / GIB
        ));
    }
    Ok(())
}

impl Setup {
    pub fn new(loaded: &LoadedJob) -> Result<Self> {
        let job = loaded.job.clone();
        let n = job.particles.count;
        let mass = units::mass_from_electron_masses(job.particles.mass);
        let (lo, hi) = (job.domain.x_min, job.domain.x_max);
        let width = hi - lo;
        let mesh_dx = width / job.domain.mesh_cells as f64;
        let one_body = OneBody::from_job(&job.potentials, mesh_dx, mass, &loaded.base_dir)
            .map_err(|e| anyhow!("{}: {e:#}", loaded.origin))?;
        let pair = PairPotential::from_job(&job.pair);
        let orbitals: Vec<Gaussian> = job.orbitals.iter().map(Gaussian::from).collect();
        let reflecting = job.domain.boundary == Boundary::Reflecting;
        let walls = images::orbital_components(
            &orbitals,
            &one_body,
            mass,
            lo,
            hi,
            job.domain.boundary,
            job.numerics.end_time,
        );
        // Fail early, naming the file, when the (anti)symmetrised state does not exist.
        let orbital_components = walls.components.clone();
        NBodyWigner::with_components(orbital_components.clone(), job.particles.statistics)
            .map_err(|e| anyhow!("{}: {e:#}", loaded.origin))?;
        // Against a hard wall the folded field or trap has a kink: a kernel term beyond the
        // wall even without kernel potentials (docs/method.md §2.5).
        let touched = walls.touches.lo || walls.touches.hi;
        let needs_table1 = one_body.has_kernel() || (touched && !one_body.force.is_zero());
        check_sizes(
            &job,
            needs_table1,
            pair.is_some(),
            rayon::current_num_threads(),
        )
        .map_err(|e| anyhow!("{}: {e:#}", loaded.origin))?;
        let lc = job.numerics.coherence_length;
        let rolloff = job.numerics.rolloff.unwrap_or(lc / 8.0);
        // Transfer lattices (docs/method.md §2.3): window width L_c, period P ≥ L_c with
        // Δk = π/P, and P long enough that no coherence inside the mesh meets an image of the
        // window: a coherence of half-length s meets the first image at s = P − L_c/2.
        // One-body: |s| ≤ L/2, so P₁ = (L + L_c)/2. Pair, relative coordinate r ∈ [−L, L]:
        // |s| ≤ L, so P₂ = L + L_c/2 (periodic, minimal images in [−L/2, L/2]: P₂ = P₁).
        let cap_of =
            |period: f64| (job.domain.k_max * period / std::f64::consts::PI).floor() as usize;
        let period = lc.max(0.5 * (width + lc));
        let dk = std::f64::consts::PI / period;
        let cap = cap_of(period);
        let table1 = needs_table1.then(|| {
            let ob = one_body.clone();
            let t = walls.touches;
            let w = hi - lo;
            let periodic = job.domain.boundary == Boundary::Periodic;
            // Beyond the edges: the folded potential of touched walls (§2.5), the periodic
            // continuation of a ring (a coherence reaching past an edge sees the potential
            // one turn on), else the kernel part continued as it is.
            let u = move |y: f64| {
                if reflecting && touched {
                    images::kernel_potential_with_walls(&ob, lo, hi, t, y)
                } else if periodic {
                    ob.kernel_part(lo + (y - lo).rem_euclid(w))
                } else {
                    ob.kernel_part(y)
                }
            };
            KernelTable::build(
                &u,
                lo,
                mesh_dx,
                job.domain.mesh_cells,
                lc,
                rolloff,
                period,
                cap,
            )
        });
        let table2 = (n >= 2).then_some(()).and(pair).map(|p| {
            // Periodic: minimal-image separations lie in [−L/2, L/2]; otherwise [−L, L].
            let (r_lo, points, period2) = if job.domain.boundary == Boundary::Periodic {
                (-0.5 * width, job.domain.mesh_cells, period)
            } else {
                (-width, 2 * job.domain.mesh_cells, lc.max(width + 0.5 * lc))
            };
            let u = move |r: f64| p.value(r);
            let cap2 = cap_of(period2);
            KernelTable::build(&u, r_lo, mesh_dx, points, lc, rolloff, period2, cap2)
        });
        let pairs = (n * n.saturating_sub(1) / 2) as f64;
        let gamma_max = n as f64 * table1.as_ref().map_or(0.0, |t| t.gamma_max)
            + pairs * table2.as_ref().map_or(0.0, |t| t.gamma_max);
        let cell_x = job.annihilation.cell_x.unwrap_or(mesh_dx);
        // Default k cell: half the transfer quantum of the window, π/(2L_c) in 1/nm, as before
        // the lattice period was decoupled from L_c (not from the finer Δk = π/P).
        let cell_k = job
            .annihilation
            .cell_k
            .unwrap_or(std::f64::consts::PI / (2.0 * lc));
        let memory_limit = job
            .numerics
            .memory_limit_mib
            .map(|m| m * (1u64 << 20) as f64)
            .unwrap_or(0.5 * machine_memory());
        Ok(Setup {
            n,
            stats: job.particles.statistics,
            mass,
            orbitals,
            orbital_components,
            lo,
            hi,
            boundary: job.domain.boundary,
            k_max: job.domain.k_max,
            mesh_dx,
            one_body,
            pair,
            lc,
            rolloff,
            period,
            dk,
            cap,
            table1,
            table2,
            gamma_max,
            dt: job.numerics.sync_step,
            steps: grid::total_steps(&job),
            output_steps: grid::output_steps(&job),
            x_bins: grid::x_bins(&job),
            k_bins: grid::k_bins(&job),
            cell_x,
            cell_k,
            cells: job.annihilation.coordinates.unwrap_or_default(),
            resolution: job.annihilation.resolution,
            merge_exchange: job.annihilation.merge_exchange && job.particles.statistics.identical(),
            groups: job.numerics.groups,
            seed: job.numerics.seed,
            target: job.numerics.samples,
            trigger: job.annihilation.trigger,
            budget: job
                .annihilation
                .budget
                .unwrap_or(DEFAULT_BUDGET_FACTOR * job.numerics.samples),
            memory_limit,
            text: loaded.text.clone(),
            job,
        }
        .with_images_note())
    }

    /// Append the wall-image (or ring-copy) note to the job text stored in results (once).
    fn with_images_note(mut self) -> Self {
        if let Some(note) = self.images_note()
            && !self.text.contains("# wall images")
            && !self.text.contains("# ring copies")
        {
            self.text = format!("{}\n# {note}\n", self.text.trim_end());
        }
        self
    }

    /// The initial N-body Wigner function (fails when the Slater determinant vanishes), of
    /// the orbitals with their wall images in a reflecting box.
    pub fn initial_state(&self) -> Result<NBodyWigner> {
        NBodyWigner::with_components(self.orbital_components.clone(), self.stats)
    }

    /// For a reflecting box: how many wall images each orbital carries and why; for a
    /// periodic box whose content wraps: how many copies one turn away.
    pub fn images_note(&self) -> Option<String> {
        let per: Vec<String> = self
            .orbital_components
            .iter()
            .map(|c| (c.len() - 1).to_string())
            .collect();
        match self.boundary {
            Boundary::Reflecting => Some(format!(
                "wall images (method of images, docs/method.md §2.5): {} in all ({} per orbital), those whose centre \
                 lies within v·t_end + 6σ of the box (v = ħ sqrt((|k₀| + 5/(2σ))² + 2mΔU/ħ²)/m, ΔU the range of the \
                 one-body potential in the box), at walls the orbital's content reaches with probability above 1e-5",
                self.image_count(),
                per.join(", ")
            )),
            Boundary::Periodic if self.image_count() > 0 => Some(format!(
                "ring copies (docs/method.md §2.5): {} in all ({} per orbital), each orbital whose content can wrap \
                 round the box carries its copies one turn away (±L), so that its coherence with itself across the \
                 edge is in the initial state",
                self.image_count(),
                per.join(", ")
            )),
            _ => None,
        }
    }

    /// Number of wall-image components over all orbitals (0 without reflecting walls).
    pub fn image_count(&self) -> usize {
        self.orbital_components.iter().map(|c| c.len() - 1).sum()
    }

    /// Period 2π/d in k of the exchange (cross-Wigner) oscillation, 1/nm, for identical
    /// particles (d the largest distance between orbital centres); None otherwise.
    pub fn exchange_period(&self) -> Option<f64> {
        if !self.stats.identical() || self.orbitals.len() < 2 {
            return None;
        }
        let c = self.orbitals.iter().map(|o| o.x0);
        let d = c.clone().fold(f64::NEG_INFINITY, f64::max) - c.fold(f64::INFINITY, f64::min);
        (d > 0.0).then(|| 2.0 * std::f64::consts::PI / d)
    }

    /// The finest sign structure of the Wigner function known before the run, 1/nm: for
    /// identical particles the exchange oscillation, period 2π/d in k (d the largest
    /// distance between orbital centres); None otherwise (docs/method.md §3.1).
    pub fn structure_period_k(&self) -> Option<f64> {
        self.exchange_period()
    }

    /// The coarsest annihilation level whose k cells stay within half the exchange period
    /// (a cell spanning half a period holds both signs of it): `cell_k`·2^ℓ ≤ (2π/d)/2; 0
    /// when the finest cells are already coarser, `max` (the coarsest level) without identical
    /// particles.
    /// Merges beyond it are recorded (`annihilation_beyond_scales`) and warned.
    pub fn scale_level(&self, max: u32) -> u32 {
        let Some(period) = self.structure_period_k() else {
            return max;
        };
        (1..=max)
            .take_while(|&l| self.cell_k * f64::from(1u32 << l) <= 0.5 * period)
            .last()
            .unwrap_or(0)
    }

    /// Warnings for a coherence length too short for the physics, with the numbers: a
    /// transmission resonance of a one-body scattering job (`physics::resonance`), or the
    /// copy one turn around a ring whose content wraps (docs/method.md §2.5).
    /// The library returns them; `check` and `run` print them.
    pub fn coherence_warnings(&self) -> Vec<String> {
        let mut out = resonance::coherence_warnings(
            &self.job,
            &self.one_body,
            self.lc,
            self.rolloff,
            self.hi - self.lo,
        );
        // A ring whose content wraps: the copy one turn away must lie inside the window.
        let copies: usize = self
            .orbital_components
            .iter()
            .flatten()
            .filter(|c| c.wrapped)
            .count();
        let w = self.orbitals.iter().map(|o| o.sigma).fold(0.0, f64::max);
        let ring = self.hi - self.lo + 6.0 * w;
        if copies > 0 && self.lc < ring {
            out.push(format!(
                "content wraps around the periodic box, but the coherence length {} nm is below L + 6w = {ring} nm: the \
                 coherence of a packet with its copy one turn away (y ≈ L) lies outside the window and feels no potential, \
                 so pieces that meet after wrapping around interfere wrongly (docs/method.md §2.5)",
                self.lc
            ));
        }
        out
    }

    /// Bytes per particle in the store.
    pub fn bytes_per_particle(&self) -> f64 {
        Store::bytes_per_particle(self.n) as f64
    }

    /// Size of one checkpoint at the annihilation trigger, bytes.
    pub fn checkpoint_bytes(&self) -> f64 {
        self.trigger * self.target as f64 * self.bytes_per_particle()
    }

    /// One-body potential energy (kernel part and forces) of coordinate x, eV.
    #[inline]
    pub fn u1(&self, x: f64) -> f64 {
        self.one_body.total(x)
    }

    /// dU/dx of the whole one-body potential (kernel part and forces), eV/nm, by a
    /// central difference over 1e-4 nm.
    #[inline]
    pub fn force_at(&self, x: f64) -> f64 {
        let h = 1e-4;
        (self.u1(x + h) - self.u1(x - h)) / (2.0 * h)
    }

    /// Relative coordinate of a pair, minimal image when periodic.
    #[inline]
    pub fn separation(&self, xi: f64, xj: f64) -> f64 {
        let r = xi - xj;
        if self.boundary == Boundary::Periodic {
            let w = self.hi - self.lo;
            r - w * (r / w).round()
        } else {
            r
        }
    }

    /// H(z) = Σ ħ²k²/2m + Σ U(x_i) + Σ_{i<j} U₂(x_i − x_j), eV.
    pub fn energy(&self, x: &[f64], k: &[f64]) -> f64 {
        let mut e = 0.0;
        for i in 0..self.n {
            e += units::kinetic_energy(k[i], self.mass) + self.u1(x[i]);
            if let Some(p) = &self.pair {
                for j in i + 1..self.n {
                    e += p.value(self.separation(x[i], x[j]));
                }
            }
        }
        e
    }
}
