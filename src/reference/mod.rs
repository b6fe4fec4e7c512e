//! The exact reference: the job's N-body Schrödinger equation (N ≤ 3) solved on a grid with
//! the split-operator Fourier method (Feit, Fleck & Steiger, J. Comput. Phys. 47, 412
//! (1982)): ψ ← e^{−iVΔt/2ħ} F⁻¹ e^{−iTΔt/ħ} F e^{−iVΔt/2ħ} ψ, second order in Δt and
//! unitary (without absorber). See `docs/reference.md` for the grid and boundary choices.
//!
//! V(x_1..x_N) = Σ_i U(x_i) + Σ_{i<j} U₂(x_i − x_j) with U the whole one-body potential
//! (force terms included: here they are ordinary potentials).

pub mod binavg;
mod lines;
pub mod mesh;
mod observe;
mod state;
pub mod stationary;

use crate::config::job::LoadedJob;
use crate::io::names;
use crate::io::results::{REFERENCE_TYPE, ResultFile};
use crate::physics::grid;
use crate::physics::orbitals::Gaussian;
use crate::physics::potential::{OneBody, PairPotential};
use crate::physics::units;
use anyhow::{Result, bail};
use binavg::BinAverage;
use lines::{LineOp, Shape, apply_axis};
use mesh::{Axis, AxisKind};
use num_complex::Complex64 as C;
use observe::Rdm;
use rayon::prelude::*;
use std::f64::consts::PI;

/// Optional overrides of the grid the solver would choose.
#[derive(Clone, Copy, Debug, Default)]
pub struct ReferenceOptions {
    /// Grid points per axis (padding included on absorbing grids).
    pub points_per_axis: Option<usize>,
    /// Largest time step, fs (each output interval is split into equal steps ≤ this).
    pub dt: Option<f64>,
}

/// What the solver will do, for printing before it starts.
#[derive(Clone, Debug)]
pub struct Plan {
    pub axis: Axis,
    pub particles: usize,
    /// Largest time step, fs.
    pub dt: f64,
    /// Rough peak memory, bytes.
    pub memory_bytes: f64,
    pub warnings: Vec<String>,
}

impl std::fmt::Display for Plan {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let a = &self.axis;
        let kind = match a.kind {
            AxisKind::Periodic => "periodic FFT grid on the domain".to_string(),
            AxisKind::Dirichlet => "hard walls (sine series) at the domain edges".to_string(),
            AxisKind::Padded => format!(
                "domain plus {:.2} nm of absorbing padding on each side (peak {:.3e} eV)",
                a.pad as f64 * a.dx,
                a.cap_height
            ),
        };
        writeln!(
            f,
            "reference grid: {} points per axis, {}D ({} points), dx = {:.5} nm, k up to {:.4}/nm",
            a.n,
            self.particles,
            a.n.pow(self.particles as u32),
            a.dx,
            a.nyquist()
        )?;
        writeln!(f, "boundary: {kind}")?;
        write!(
            f,
            "time step ≤ {:.5} fs; memory about {:.0} MiB",
            self.dt,
            self.memory_bytes / (1024.0 * 1024.0)
        )
    }
}

/// Progress after each output time.
#[derive(Clone, Debug)]
pub enum Progress {
    /// A warning about the job or the grid (does not stop the solver).
    Warning(String),
    /// An output time was reached.
    Output {
        time: f64,
        end_time: f64,
        norm: f64,
        energy: f64,
    },
}

struct Solver {
    shape: Shape,
    axis: Axis,
    op: LineOp,
    mass: f64,
    identical: bool,
    psi: Vec<C>,
    /// Real potential V on the grid, eV.
    v: Vec<f64>,
    /// Absorbing potential W ≥ 0 (absorbing grids only), eV.
    cap: Option<Vec<f64>>,
    /// Cached half-step factors for the step `cached_dt`.
    cached_dt: f64,
    half_v: Vec<C>,
    /// Per point, the fraction of |ψ|² one half step's absorber removes, split by side
    /// (each coordinate's share W(x_i)/W of the removal goes to the side it is on).
    loss_left: Vec<f64>,
    loss_right: Vec<f64>,
    /// Norm removed by the absorber so far, per side.
    removed: (f64, f64),
    kin: Vec<C>,
    tmp: Vec<C>,
}

fn particles_ok(loaded: &LoadedJob) -> Result<usize> {
    let n = loaded.job.particles.count;
    if n > 3 {
        bail!(
            "{}: the exact reference handles at most 3 particles (particles.count = {n}); its \
             grid grows as points^N",
            loaded.origin
        );
    }
    Ok(n)
}

fn potentials(loaded: &LoadedJob) -> Result<(OneBody, Option<PairPotential>)> {
    let job = &loaded.job;
    let mass = units::mass_from_electron_masses(job.particles.mass);
    let mesh_dx = (job.domain.x_max - job.domain.x_min) / job.domain.mesh_cells as f64;
    let one = OneBody::from_job(&job.potentials, mesh_dx, mass, &loaded.base_dir)?;
    Ok((one, PairPotential::from_job(&job.pair)))
}

/// V and W on the N-dimensional grid.
fn build_potential(
    axis: &Axis,
    shape: Shape,
    one: &OneBody,
    pair: Option<PairPotential>,
) -> (Vec<f64>, Option<Vec<f64>>) {
    let n = axis.n;
    let v1: Vec<f64> = (0..n).map(|j| one.total(axis.x(j))).collect();
    let v2: Option<Vec<f64>> = pair.map(|p| {
        (0..n * n)
            .map(|ab| p.value(axis.x(ab / n) - axis.x(ab % n)))
            .collect()
    });
    let v: Vec<f64> = (0..shape.len())
        .into_par_iter()
        .map(|idx| {
            let c = shape.coords(idx);
            let mut s: f64 = (0..shape.dims).map(|i| v1[c[i]]).sum();
            if let Some(t) = &v2 {
                for i in 0..shape.dims {
                    for j in i + 1..shape.dims {
                        s += t[c[i] * n + c[j]];
                    }
                }
            }
            s
        })
        .collect();
    let cap = (axis.kind == AxisKind::Padded).then(|| {
        let w1: Vec<f64> = (0..n).map(|j| axis.cap(j)).collect();
        (0..shape.len())
            .into_par_iter()
            .map(|idx| {
                let c = shape.coords(idx);
                (0..shape.dims).map(|i| w1[c[i]]).sum()
            })
            .collect()
    });
    (v, cap)
}

/// Default time step: 0.1 ħ over the energy range the state explores (N times the kinetic
/// energy at the orbitals' wavevector plus three momentum widths, plus the range of V over
/// the grid inside the domain), and never more than the synchronisation step.
fn default_dt(loaded: &LoadedJob, axis: &Axis, shape: Shape, v: &[f64]) -> f64 {
    let job = &loaded.job;
    let mass = units::mass_from_electron_masses(job.particles.mass);
    let k_typ = job
        .orbitals
        .iter()
        .map(|o| {
            let g = crate::physics::orbitals::Gaussian::from(o);
            g.k0.abs() + 3.0 / (2.0 * g.sigma)
        })
        .fold(0.0, f64::max);
    let e_kin = shape.dims as f64 * units::kinetic_energy(k_typ, mass);
    let (lo, hi) = v
        .iter()
        .enumerate()
        .filter(|(i, _)| observe::inside_except(shape, axis, *i, None))
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), (_, &x)| {
            (lo.min(x), hi.max(x))
        });
    let range = if hi >= lo { hi - lo } else { 0.0 };
    (0.1 * units::HBAR / (e_kin + range)).min(job.numerics.sync_step)
}

/// The grid and step the solver would use, without solving.
pub fn plan(loaded: &LoadedJob, opts: &ReferenceOptions) -> Result<Plan> {
    let n_p = particles_ok(loaded)?;
    let axis = mesh::choose_axis(&loaded.job, opts.points_per_axis)?;
    let shape = Shape {
        n: axis.n,
        dims: n_p,
    };
    let (one, pair) = potentials(loaded)?;
    let (v, _) = build_potential(&axis, shape, &one, pair);
    let dt = match opts.dt {
        Some(d) if d > 0.0 && d.is_finite() => d,
        Some(d) => bail!("the reference time step must be a positive number of fs (got {d})"),
        None => default_dt(loaded, &axis, shape, &v),
    };
    let len = shape.len() as f64;
    let cap_bytes = if axis.kind == AxisKind::Padded {
        8.0
    } else {
        0.0
    };
    // ψ, e^{-iVΔt/2ħ}, transpose buffer, ψ_in and a derivative copy (16 B each), V (8 B).
    let memory_bytes = len * (5.0 * 16.0 + 8.0 + cap_bytes);
    let mut warnings = Vec::new();
    let k_need = mesh::content_wavevector(&loaded.job);
    if PI / axis.dx < 1.5 * k_need {
        warnings.push(format!(
            "grid spacing {:.4} nm resolves wavevectors up to {:.3}/nm, close to the state's \
             content up to {:.3}/nm: results may be inaccurate",
            axis.dx,
            PI / axis.dx,
            k_need
        ));
    }
    Ok(Plan {
        axis,
        particles: n_p,
        dt,
        memory_bytes,
        warnings,
    })
}

impl Solver {
    fn set_dt(&mut self, dt: f64) {
        if dt == self.cached_dt {
            return;
        }
        let f = dt / (2.0 * units::HBAR);
        let (v, cap) = (&self.v, &self.cap);
        self.half_v = (0..v.len())
            .into_par_iter()
            .map(|i| {
                let w = cap.as_ref().map_or(0.0, |c| c[i]);
                C::new(-w * f, -v[i] * f).exp()
            })
            .collect();
        self.kin = self.op.kinetic_multiplier(dt, self.mass);
        if let Some(cap) = &self.cap {
            let (shape, axis) = (self.shape, &self.axis);
            let w1: Vec<f64> = (0..axis.n).map(|j| axis.cap(j)).collect();
            let mid = axis.inside.start;
            let parts: Vec<(f64, f64)> = (0..cap.len())
                .into_par_iter()
                .map(|i| {
                    if cap[i] == 0.0 {
                        return (0.0, 0.0);
                    }
                    let c = shape.coords(i);
                    let wl: f64 = (0..shape.dims)
                        .filter(|&a| c[a] < mid)
                        .map(|a| w1[c[a]])
                        .sum();
                    let loss = 1.0 - (-cap[i] * dt / units::HBAR).exp();
                    let fl = wl / cap[i];
                    (loss * fl, loss * (1.0 - fl))
                })
                .collect();
            self.loss_left = parts.iter().map(|p| p.0).collect();
            self.loss_right = parts.iter().map(|p| p.1).collect();
        }
        self.cached_dt = dt;
    }

    /// Account for the norm the next half step's absorber removes.
    fn tally_absorbed(&mut self) {
        if self.cap.is_none() {
            return;
        }
        let vol = self.axis.dx.powi(self.shape.dims as i32);
        let (psi, ll, lr) = (&self.psi, &self.loss_left, &self.loss_right);
        self.removed.0 += observe::ordered_sum(psi.len(), |i| psi[i].norm_sqr() * ll[i]) * vol;
        self.removed.1 += observe::ordered_sum(psi.len(), |i| psi[i].norm_sqr() * lr[i]) * vol;
    }

    fn step(&mut self, dt: f64) {
        self.set_dt(dt);
        self.tally_absorbed();
        let hv = &self.half_v;
        self.psi
            .par_chunks_mut(4096)
            .zip(hv.par_chunks(4096))
            .for_each(|(p, h)| p.iter_mut().zip(h).for_each(|(a, b)| *a *= b));
        for ax in 0..self.shape.dims {
            apply_axis(
                &mut self.psi,
                self.shape,
                ax,
                &self.op,
                &self.kin,
                &mut self.tmp,
            );
        }
        self.tally_absorbed();
        let hv = &self.half_v;
        self.psi
            .par_chunks_mut(4096)
            .zip(hv.par_chunks(4096))
            .for_each(|(p, h)| p.iter_mut().zip(h).for_each(|(a, b)| *a *= b));
    }

    /// Norm that has left the domain through each side: removed by the absorber, plus
    /// what is outside now (docs/method.md §5: a configuration counts as gone as soon as any
    /// particle is outside). With norm inside, the three add up to 1 to round-off.
    fn absorbed(&self) -> (f64, f64) {
        if self.axis.kind != AxisKind::Padded {
            return (0.0, 0.0);
        }
        let (l, r) = observe::outside_norm(&self.psi, self.shape, &self.axis);
        (self.removed.0 + l, self.removed.1 + r)
    }
}

/// Solve with the grid chosen from the job.
pub fn solve(loaded: &LoadedJob) -> Result<ResultFile> {
    solve_with(loaded, &ReferenceOptions::default(), &mut |_| {})
}

/// Solve with optional grid overrides, calling `progress` after every output time.
pub fn solve_with(
    loaded: &LoadedJob,
    opts: &ReferenceOptions,
    progress: &mut dyn FnMut(&Progress),
) -> Result<ResultFile> {
    let started = std::time::Instant::now();
    let job = &loaded.job;
    let plan = plan(loaded, opts)?;
    let axis = plan.axis.clone();
    let shape = Shape {
        n: axis.n,
        dims: plan.particles,
    };
    let (one, pair) = potentials(loaded)?;
    let (v, cap) = build_potential(&axis, shape, &one, pair);
    // The same orbitals as the Monte Carlo's: in a reflecting box each minus its wall
    // images (the odd extension restricted to the box, docs/method.md §2.5).
    let components = crate::physics::images::orbital_components(
        &job.orbitals.iter().map(Gaussian::from).collect::<Vec<_>>(),
        &one,
        units::mass_from_electron_masses(job.particles.mass),
        job.domain.x_min,
        job.domain.x_max,
        job.domain.boundary,
        job.numerics.end_time,
    )
    .components;
    let (psi, warnings) = state::initial_state(job, &components, &axis, shape)?;
    for w in plan.warnings.iter().chain(&warnings) {
        progress(&Progress::Warning(format!("{}: {w}", loaded.origin)));
    }
    let mut s = Solver {
        shape,
        op: LineOp::new(&axis),
        axis,
        mass: units::mass_from_electron_masses(job.particles.mass),
        identical: job.particles.statistics.identical(),
        psi,
        v,
        cap,
        cached_dt: f64::NAN,
        half_v: Vec::new(),
        loss_left: Vec::new(),
        loss_right: Vec::new(),
        removed: (0.0, 0.0),
        kin: Vec::new(),
        tmp: Vec::new(),
    };
    let out_bins = OutputBins::new(loaded, &s.axis);
    let mut file = ResultFile::new(
        REFERENCE_TYPE,
        &loaded.text,
        grid::x_bins(job).centres(),
        grid::k_bins(job).centres(),
    );
    let times = grid::output_times(job);
    let end = *times.last().expect("at least one output time");
    let mut t = 0.0;
    for (i, &t_out) in times.iter().enumerate() {
        if i > 0 {
            let span = t_out - t;
            let steps = ((span / plan.dt) - 1e-9).ceil().max(1.0) as usize;
            let dt = span / steps as f64;
            for _ in 0..steps {
                s.step(dt);
            }
        }
        t = t_out;
        let fr = frame(&s, &out_bins);
        let (absorbed_l, absorbed_r) = s.absorbed();
        let nx = out_bins.x.bins();
        let nk = out_bins.k_wigner.bins();
        file.put(names::TIME, &[], &[t_out]);
        file.put(names::DENSITY, &[nx], &fr.density);
        if let Some(p) = &fr.pair {
            file.put(names::PAIR_DENSITY, &[nx, nx], p);
        }
        file.put(names::WIGNER, &[nx, nk], &fr.wigner);
        file.put(names::MOMENTUM_DENSITY, &[nk], &fr.momentum);
        file.put(names::CURRENT_DENSITY, &[nx], &fr.current);
        file.put(names::NORM, &[], &[fr.norm]);
        file.put(names::ABSORBED_LEFT, &[], &[absorbed_l]);
        file.put(names::ABSORBED_RIGHT, &[], &[absorbed_r]);
        file.put(names::ENERGY, &[], &[fr.energy]);
        progress(&Progress::Output {
            time: t_out,
            end_time: end,
            norm: fr.norm,
            energy: fr.energy,
        });
    }
    let a = &s.axis;
    let run = [
        (names::RUN_REFERENCE_POINTS, a.n as f64),
        (names::RUN_REFERENCE_DX, a.dx),
        (names::RUN_REFERENCE_MAX_DT, plan.dt),
        (names::RUN_REFERENCE_PADDING, a.pad as f64 * a.dx),
        (names::RUN_WALL_TIME, started.elapsed().as_secs_f64()),
    ];
    for (d, value) in run {
        file.run
            .insert(d.name.to_string(), (d.units.to_string(), vec![value]));
    }
    Ok(file)
}

/// Bin averagers from the solver's samples to the output bins.
struct OutputBins {
    x: BinAverage,
    x_index: Vec<Option<usize>>,
    wigner_h: Vec<i64>,
    x_wigner: BinAverage,
    k_wigner: BinAverage,
    m_wigner: usize,
    r_wigner: usize,
    k_momentum: BinAverage,
    m_momentum: usize,
}

impl OutputBins {
    fn new(loaded: &LoadedJob, axis: &Axis) -> Self {
        let xb = grid::x_bins(&loaded.job);
        let kb = grid::k_bins(&loaded.job);
        let dx = axis.dx;
        let (pos, x_index) = observe::point_samples(axis);
        // Wigner samples every `stride` half-steps, at most 1/8 of an x bin apart, and at
        // most 1/8 of a k bin apart in k.
        let stride = ((xb.width() / 8.0) / (0.5 * dx)).floor().max(1.0) as usize;
        let wigner_h = observe::wigner_half_points(axis, stride);
        let hpos: Vec<f64> = wigner_h
            .iter()
            .map(|&h| axis.x0 + h as f64 * 0.5 * dx)
            .collect();
        // Decimate y by r where the grid is finer than the state's content needs.
        let dx_content = PI / (2.0 * mesh::content_wavevector(&loaded.job));
        let r_wigner = ((dx_content / dx).floor() as usize).max(1);
        let rdx = r_wigner as f64 * dx;
        let m_wigner = (8.0 * PI / (rdx * kb.width())).ceil().max(16.0) as usize;
        let m_wigner = m_wigner.next_power_of_two();
        // Momentum samples 1/32 of a k bin apart (one FFT per frame, so cheap).
        let m_momentum = (64.0 * PI / (dx * kb.width())).ceil().max(16.0) as usize;
        let m_momentum = m_momentum.next_power_of_two();
        OutputBins {
            x: BinAverage::new(&pos, &xb),
            x_index,
            x_wigner: BinAverage::new(&hpos, &xb),
            wigner_h,
            k_wigner: BinAverage::uniform(
                -PI / (2.0 * rdx),
                PI / (rdx * m_wigner as f64),
                m_wigner,
                &kb,
            ),
            m_wigner,
            r_wigner,
            k_momentum: BinAverage::uniform(
                -PI / dx,
                2.0 * PI / (dx * m_momentum as f64),
                m_momentum,
                &kb,
            ),
            m_momentum,
        }
    }

    fn points(&self, grid_values: &[f64]) -> Vec<f64> {
        self.x_index
            .iter()
            .map(|i| i.map_or(0.0, |j| grid_values[j]))
            .collect()
    }
}

struct Frame {
    density: Vec<f64>,
    pair: Option<Vec<f64>>,
    wigner: Vec<f64>,
    momentum: Vec<f64>,
    current: Vec<f64>,
    norm: f64,
    energy: f64,
}

fn frame(s: &Solver, b: &OutputBins) -> Frame {
    let (shape, axis) = (s.shape, &s.axis);
    let n = shape.n;
    let dx = axis.dx;
    let dims = shape.dims;
    let vol = dx.powi(dims as i32);
    let psi_in = observe::restrict_inside(&s.psi, shape, axis);
    let norm = observe::ordered_sum(shape.len(), |i| psi_in[i].norm_sqr()) * vol;

    let rho: Rdm = observe::rdm(&psi_in, shape, axis, s.identical);
    let density = b.x.apply(&b.points(&rho.diag(n)));

    let pair = (dims >= 2).then(|| {
        let p = observe::pair_density(&psi_in, shape, dx, s.identical);
        let p = &p;
        let ext: Vec<f64> = b
            .x_index
            .iter()
            .flat_map(|ia| {
                b.x_index.iter().map(move |ib| match (ia, ib) {
                    (Some(a), Some(c)) => p[a * n + c],
                    _ => 0.0,
                })
            })
            .collect();
        BinAverage::apply_2d(&b.x, &b.x, &ext)
    });

    let rows = observe::wigner_rows(&rho, axis, &b.wigner_h, b.r_wigner, b.m_wigner, |r| {
        b.k_wigner.apply(r)
    });
    let wigner = b.x_wigner.apply_rows(&rows, b.k_wigner.bins());

    let momentum = b
        .k_momentum
        .apply(&observe::momentum_density(&rho, n, dx, b.m_momentum));

    // Current and kinetic energy from ∂ψ/∂x_i along the axes (axis 0 times N for identical
    // particles).
    let (axes, factor) = observe::axes_and_factor(dims, s.identical);
    let hbar = units::HBAR;
    let mut current = vec![0.0; n];
    let mut kinetic = 0.0;
    let dmult = s.op.derivative_multiplier();
    let mut tmp = Vec::new();
    for &ax in &axes {
        let mut d = s.psi.clone();
        apply_axis(&mut d, shape, ax, &s.op, &dmult, &mut tmp);
        let j = observe::marginal1(shape, ax, |i| (psi_in[i].conj() * d[i]).im);
        for (c, v) in current.iter_mut().zip(j) {
            *c += v * factor * dx.powi(dims as i32 - 1) * hbar / s.mass;
        }
        let grad2 = if axis.kind == AxisKind::Padded {
            // ∫_inside |∂ψ|²: the part of the state inside the domain.
            observe::ordered_sum(shape.len(), |i| {
                if observe::inside_except(shape, axis, i, None) {
                    d[i].norm_sqr()
                } else {
                    0.0
                }
            }) * vol
        } else {
            // Parseval on each line: exact for the grid's kinetic operator (hard walls
            // included, where ∂ψ does not vanish at the wall).
            let op = &s.op;
            lines::lines_sum(&s.psi, shape, ax, op.scratch_len(), |line, scr| {
                op.k2_sum(line, dx, scr)
            }) * dx.powi(dims as i32 - 1)
        };
        kinetic += factor * hbar * hbar / (2.0 * s.mass) * grad2;
    }
    let current = b.x.apply(&b.points(&current));
    let potential = observe::ordered_sum(shape.len(), |i| s.v[i] * psi_in[i].norm_sqr()) * vol;
    Frame {
        density,
        pair,
        wigner,
        momentum,
        current,
        norm,
        energy: kinetic + potential,
    }
}
