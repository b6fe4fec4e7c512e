//! Hard walls by the method of images (docs/method.md §2.5).
//!
//! A reflecting box [lo, hi) of width L is the odd extension of the state about both walls:
//! ψ_ext(x) = Σ_n [φ(x − 2nL) − φ(2hi + 2nL − x)], odd about lo and about hi and periodic
//! with period 2L, evolves on the whole line under the folded Hamiltonian and equals the
//! Dirichlet (ψ = 0 at the walls) solution inside. For a Gaussian orbital each image is
//! again a Gaussian, with a complex coefficient:
//!
//!   φ(x − a)       = e^{−i k₀ a} · G(x₀ + a, k₀)                (translation, sign +1)
//!   φ(2hi + a − x) = e^{i k₀ (2hi + a)} · G(2hi + a − x₀, −k₀)  (reflection, sign −1)
//!
//! with a = 2nL. Only images that can reach the box before the end of the run are kept
//! ([`image_components`]). In the folded picture a phase-space point outside the box is
//! mapped back by [`fold`] (x → mirror, k → −k), which is also what flight does at a wall.

use crate::config::job::Boundary;
use crate::physics::orbitals::Gaussian;
use crate::physics::potential::OneBody;
use crate::physics::units;
use num_complex::Complex64;

/// One term c·G of an orbital written as a signed sum of Gaussians.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Component {
    pub coef: Complex64,
    pub g: Gaussian,
    /// The image's translation by 2nL (n) and whether it is mirrored (odd number of
    /// reflections); (0, false) for the orbital itself.
    pub cell: i64,
    pub mirrored: bool,
    /// A copy of a periodic box (translation by nL, `cell` = n): its coherences with the
    /// other copies are part of the ring's state and are kept.
    pub wrapped: bool,
}

impl Component {
    /// Whether `o` is this wall image translated by a non-zero multiple of 2L (the copies of
    /// a periodic box do not count: their mutual coherences belong to the ring's state).
    pub fn is_translate_of(&self, o: &Component) -> bool {
        !self.wrapped && !o.wrapped && self.mirrored == o.mirrored && self.cell != o.cell
    }

    /// Whether the coherence between this copy of a periodic box and `o` spans more than
    /// one turn around the ring (left out, [`periodic_copies`]).
    pub fn too_far_round(&self, o: &Component) -> bool {
        (self.wrapped || o.wrapped) && (self.cell - o.cell).abs() > 1
    }
}

impl Component {
    /// The orbital translated by `a` nm (copy `cell`): φ(x − a) = e^{−i k₀ a} G(x₀ + a, k₀);
    /// `wrapped` for a copy of a periodic box, else a wall image's translation by 2nL.
    pub fn translate(g: &Gaussian, a: f64, cell: i64, wrapped: bool) -> Self {
        Component {
            coef: Complex64::from_polar(1.0, -g.k0 * a),
            g: Gaussian {
                x0: g.x0 + a,
                k0: g.k0,
                sigma: g.sigma,
            },
            cell,
            mirrored: false,
            wrapped,
        }
    }

    /// The orbital itself, coefficient exactly 1.
    pub fn plain(g: Gaussian) -> Self {
        Component {
            coef: Complex64::new(1.0, 0.0),
            g,
            cell: 0,
            mirrored: false,
            wrapped: false,
        }
    }
}

/// Σ_p c_p G_p(x), nm^-1/2.
pub fn psi(components: &[Component], x: f64) -> Complex64 {
    components.iter().map(|c| c.coef * c.g.psi(x)).sum()
}

/// Fold (x, k) into the box [lo, hi) of a reflecting domain: mirror about the walls as
/// often as needed, reversing k at each mirror (specular reflection; exact for straight
/// flight). Points inside are left alone.
#[inline]
pub fn fold(lo: f64, hi: f64, x: &mut f64, k: &mut f64) {
    if *x >= lo && *x < hi {
        return;
    }
    let w = hi - lo;
    let m = (*x - lo).rem_euclid(2.0 * w);
    if m > w {
        *x = lo + 2.0 * w - m;
        *k = -*k;
    } else {
        *x = lo + m;
    }
    if *x >= hi {
        *x = hi - 1e-12 * w;
    }
}

/// The point y folded into [lo, hi] (position only): the wall-mirrored coordinate.
#[inline]
pub fn fold_position(lo: f64, hi: f64, y: f64) -> f64 {
    let w = hi - lo;
    let m = (y - lo).rem_euclid(2.0 * w);
    if m > w { lo + 2.0 * w - m } else { lo + m }
}

/// How far (nm) a Gaussian orbital's content can travel by `end_time` (fs): its fastest
/// relevant wavevector k_orb = |k₀| + 5/(2σ) (five standard deviations of |φ̃|², which has
/// σ_k = 1/(2σ)), raised by the energy `delta_u` (eV) the potential can give it,
/// k_reach = sqrt(k_orb² + 2mΔU/ħ²), times the time, plus six widths of the packet itself.
pub fn reach(g: &Gaussian, mass: f64, delta_u: f64, end_time: f64) -> f64 {
    let hbar = crate::physics::units::HBAR;
    let k_orb = g.k0.abs() + 2.5 / g.sigma;
    let k_reach = (k_orb * k_orb + 2.0 * mass * delta_u.max(0.0) / (hbar * hbar)).sqrt();
    hbar * k_reach / mass * end_time + 6.0 * g.sigma
}

/// Largest share of an orbital's probability that may reach a wall by the end of the run
/// and still be left without images: the interference an image adds in the box is at most
/// 2·P (Cauchy–Schwarz on 2 Re ψ_in ψ_refl* over the content that met the wall, P the
/// probability that did), so with this bound the left-out fringes hold at most 2·10⁻⁵ of
/// the norm, far below the Monte Carlo noise, while an image costs a large rise of
/// ∫|W|/∫W (docs/method.md §2.5).
pub const WALL_REACH_PROBABILITY: f64 = 1e-5;

/// Probability P (dimensionless) that a Gaussian orbital's content reaches the wall at
/// `wall` by `end_time` (fs), from a classical bound over its Wigner distribution at t = 0:
/// x ~ N(x₀, σ²), k ~ N(k₀, 1/(4σ²)) (independent for these orbitals), energy
/// E = U(x) + ħ²k²/2m. Along the path to the wall the kinetic energy is E − U(y); where a
/// kernel potential (a barrier) would stop it, the content is taken to tunnel at its
/// starting kinetic energy (conservative), and only the flight potential U_f (field, trap)
/// can stop it. The travel time ∫dy/v(y) is compared with the end time, whatever the
/// initial direction (conservative: a force may turn the content around).
/// Quadrature: 41 positions over ±5σ, 61 wavevectors over ±6σ_k, 400 path steps.
pub fn wall_reach_probability(
    g: &Gaussian,
    one_body: &OneBody,
    mass: f64,
    lo: f64,
    hi: f64,
    wall: f64,
    end_time: f64,
) -> f64 {
    let hbar = units::HBAR;
    let c = hbar * hbar / (2.0 * mass);
    let sk = 0.5 / g.sigma;
    let (nx, nk, steps) = (41usize, 61usize, 400usize);
    let gauss = |u: f64| (-0.5 * u * u).exp();
    let (mut total, mut reached) = (0.0, 0.0);
    for i in 0..nx {
        let ux = -5.0 + 10.0 * i as f64 / (nx - 1) as f64;
        let x = (g.x0 + ux * g.sigma).clamp(lo, hi);
        for j in 0..nk {
            let uk = -6.0 + 12.0 * j as f64 / (nk - 1) as f64;
            let k = g.k0 + uk * sk;
            let w = gauss(ux) * gauss(uk);
            total += w;
            let kin0 = c * k * k;
            let e = one_body.total(x) + kin0;
            let (mut t, mut blocked) = (0.0, false);
            let dy = (wall - x) / steps as f64;
            for s in 0..steps {
                let y = x + (s as f64 + 0.5) * dy;
                let mut kin = e - one_body.total(y);
                if kin <= kin0.max(0.0) {
                    // A kernel barrier is crossed at the starting kinetic energy; the
                    // flight potential alone may stop the content.
                    if e - one_body.force.value(y)
                        - (one_body.total(y) - one_body.force.value(y)).min(0.0)
                        < 0.0
                    {
                        blocked = true;
                        break;
                    }
                    kin = kin.max(kin0);
                }
                if kin <= 0.0 {
                    blocked = true;
                    break;
                }
                // v = ħk/m = 2 sqrt(c·kin)/ħ, nm/fs.
                t += dy.abs() / (2.0 * (c * kin).sqrt() / hbar);
                if t > end_time {
                    break;
                }
            }
            if !blocked && t <= end_time {
                reached += w;
            }
        }
    }
    reached / total
}

/// Which walls an orbital's content can touch: (lo, hi).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Touches {
    pub lo: bool,
    pub hi: bool,
}

/// The orbital and its images in the reflecting box [lo, hi): every image whose centre
/// lies within `reach` of the box (the orbital itself always, first), built only from
/// reflections about walls the orbital can touch (`touches`: the mirror about hi needs hi,
/// the mirror about lo needs lo, every other image both). Images farther away cannot bring
/// any of their content into the box before the end of the run.
pub fn image_components(
    g: &Gaussian,
    lo: f64,
    hi: f64,
    reach: f64,
    touches: Touches,
) -> Vec<Component> {
    let w = hi - lo;
    let dist = |c: f64| (lo - c).max(c - hi).max(0.0);
    let span =
        ((reach + 2.0 * w + (g.x0 - lo).abs() + (g.x0 - hi).abs()) / (2.0 * w)).ceil() as i64;
    let mut out = vec![Component::plain(*g)];
    let both = touches.lo && touches.hi;
    for n in -span..=span {
        let a = 2.0 * n as f64 * w;
        // Translation by a (n ≠ 0): sign +1, two reflections.
        if n != 0 && both && dist(g.x0 + a) <= reach {
            out.push(Component::translate(g, a, n, false));
        }
        // Reflection about hi, then translation by a: sign −1 (n = 0 the mirror about hi,
        // n = −1 the mirror about lo).
        let allowed = match n {
            0 => touches.hi,
            -1 => touches.lo,
            _ => both,
        };
        let c = 2.0 * hi + a - g.x0;
        if allowed && dist(c) <= reach {
            out.push(Component {
                coef: -Complex64::from_polar(1.0, g.k0 * (2.0 * hi + a)),
                g: Gaussian {
                    x0: c,
                    k0: -g.k0,
                    sigma: g.sigma,
                },
                cell: n,
                mirrored: true,
                wrapped: false,
            });
        }
    }
    out
}

/// The orbital and its nearest copies in the periodic box [lo, hi) of width L: the ring's
/// state is ψ_p(x) = Σ_n φ(x − nL), and φ(x − a) = e^{−i k₀ a} G(x₀ + a, k₀). In the box its
/// Wigner function is Σ_d W[φ_d, φ_0] folded into the box; the term d is the coherence of
/// the packet with itself d turns around the ring. The copies n = ±1 whose centre lies
/// within `reach` of the box are kept (the orbital itself first), and with them the terms
/// |d| ≤ 1 (`Component::too_far_round`): pieces of a packet that meet after wrapping
/// around once. Terms |d| ≥ 2 (pieces that have travelled more than 2L apart) are left
/// out (docs/method.md §2.5, §7).
pub fn periodic_copies(g: &Gaussian, lo: f64, hi: f64, reach: f64) -> Vec<Component> {
    let w = hi - lo;
    let dist = |c: f64| (lo - c).max(c - hi).max(0.0);
    let mut out = vec![Component::plain(*g)];
    for n in [-1i64, 1] {
        let a = n as f64 * w;
        if dist(g.x0 + a) <= reach {
            out.push(Component::translate(g, a, n, true));
        }
    }
    out
}

/// Range max U − min U of the whole one-body potential over the box, eV: the most energy
/// it can hand a particle (4001 samples).
pub fn potential_range(one_body: &OneBody, lo: f64, hi: f64) -> f64 {
    let samples = 4001usize;
    let (mut u_lo, mut u_hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for j in 0..samples {
        let u = one_body.total(lo + (hi - lo) * j as f64 / (samples - 1) as f64);
        u_lo = u_lo.min(u);
        u_hi = u_hi.max(u);
    }
    u_hi - u_lo
}

/// Whether some orbital's content can wrap around the periodic box [lo, hi) by `end_time`
/// (fs): a copy ±L lies within its [`reach`], so the ring carries copies
/// ([`periodic_copies`]) and the coherence of a packet with its copy one turn away, at
/// y ≈ L, takes part in the dynamics.
pub fn ring_wraps(
    orbitals: &[Gaussian],
    one_body: &OneBody,
    mass: f64,
    lo: f64,
    hi: f64,
    end_time: f64,
) -> bool {
    let du = potential_range(one_body, lo, hi);
    orbitals
        .iter()
        .any(|g| periodic_copies(g, lo, hi, reach(g, mass, du, end_time)).len() > 1)
}

/// The orbitals of a job as signed sums of Gaussians, and the walls their content can touch.
#[derive(Clone, Debug)]
pub struct WallImages {
    pub components: Vec<Vec<Component>>,
    /// Walls some orbital's content can touch (both false without reflecting walls).
    pub touches: Touches,
}

/// The orbitals as signed sums of Gaussians: in a reflecting box each with its wall images
/// that can reach the box by `end_time`; otherwise each alone (docs/method.md §2.5).
///
/// Energy bound of an orbital's content: E = max U_f over x₀ ± 6σ (inside the box) +
/// ħ²k_orb²/2m + the range of the kernel part over the box, k_orb = |k₀| + 5/(2σ). A wall
/// is touched when the flight potential U_f (field and trap, classical) stays below E all
/// the way from x₀ to it; the reach uses ΔU = E − min U_total over the box
/// ([`reach`]). A trapped packet far from the walls thus carries no images.
pub fn orbital_components(
    orbitals: &[Gaussian],
    one_body: &OneBody,
    mass: f64,
    lo: f64,
    hi: f64,
    boundary: Boundary,
    end_time: f64,
) -> WallImages {
    if boundary == Boundary::Periodic {
        let du = potential_range(one_body, lo, hi);
        return WallImages {
            components: orbitals
                .iter()
                .map(|g| periodic_copies(g, lo, hi, reach(g, mass, du, end_time)))
                .collect(),
            touches: Touches {
                lo: false,
                hi: false,
            },
        };
    }
    if boundary != Boundary::Reflecting {
        return WallImages {
            components: orbitals
                .iter()
                .map(|g| vec![Component::plain(*g)])
                .collect(),
            touches: Touches {
                lo: false,
                hi: false,
            },
        };
    }
    let samples = 4001usize;
    let at = |j: usize| lo + (hi - lo) * j as f64 / (samples - 1) as f64;
    let (mut k_min, mut k_max, mut u_min) = (f64::INFINITY, f64::NEG_INFINITY, f64::INFINITY);
    for j in 0..samples {
        let x = at(j);
        let uk = one_body.kernel_part(x);
        k_min = k_min.min(uk);
        k_max = k_max.max(uk);
        u_min = u_min.min(one_body.total(x));
    }
    let f = &one_body.force;
    let mut any = Touches {
        lo: false,
        hi: false,
    };
    let components = orbitals
        .iter()
        .map(|g| {
            let hbar = units::HBAR;
            let k_orb = g.k0.abs() + 2.5 / g.sigma;
            let start = (0..samples)
                .map(at)
                .filter(|x| (x - g.x0).abs() <= 6.0 * g.sigma)
                .map(|x| f.value(x))
                .fold(f.value(g.x0.clamp(lo, hi)), f64::max);
            let e = start + hbar * hbar * k_orb * k_orb / (2.0 * mass) + (k_max - k_min);
            let open = |from: f64, to: f64| {
                (0..samples)
                    .map(at)
                    .filter(|x| *x >= from.min(to) && *x <= from.max(to))
                    .all(|x| f.value(x) <= e)
            };
            let x0 = g.x0.clamp(lo, hi);
            let p = |wall: f64| wall_reach_probability(g, one_body, mass, lo, hi, wall, end_time);
            let touches = Touches {
                lo: open(x0, lo) && p(lo) > WALL_REACH_PROBABILITY,
                hi: open(x0, hi) && p(hi) > WALL_REACH_PROBABILITY,
            };
            any.lo |= touches.lo;
            any.hi |= touches.hi;
            let r = reach(
                g,
                mass,
                e - u_min - hbar * hbar * k_orb * k_orb / (2.0 * mass),
                end_time,
            );
            image_components(g, lo, hi, r, touches)
        })
        .collect();
    WallImages {
        components,
        touches: any,
    }
}

/// The one-body kernel potential of a reflecting box at y: inside, the kernel part U(y);
/// beyond a wall that the content can touch, U_total(fold y) − U_f(y), so that the bracket
/// U(x + s) − U(x − s) of a coherence reaching across the wall sees the mirrored potential
/// of the odd extension, while the flight still carries the unfolded force U_f exactly.
/// Beyond a wall no content can reach (the state vanishes before it, energy bound of
/// [`orbital_components`]) every continuation gives the same kernel on the state, and the
/// smooth one, U(y) with U_f continued by the flight, is kept (docs/method.md §2.5).
pub fn kernel_potential_with_walls(
    one_body: &OneBody,
    lo: f64,
    hi: f64,
    touches: Touches,
    y: f64,
) -> f64 {
    let folded = (y < lo && touches.lo) || (y > hi && touches.hi);
    if !folded {
        one_body.kernel_part(y)
    } else {
        one_body.total(fold_position(lo, hi, y)) - one_body.force.value(y)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const ALL: Touches = Touches { lo: true, hi: true };

    fn g() -> Gaussian {
        Gaussian {
            x0: 6.0,
            k0: 0.9,
            sigma: 1.5,
        }
    }

    /// The image sum is odd about both walls wherever all images that matter are kept
    /// (definition of the odd extension), so it vanishes at the walls.
    #[test]
    fn image_sum_is_odd_about_both_walls() {
        let (lo, hi) = (-4.0, 10.0);
        let c = image_components(&g(), lo, hi, 200.0, ALL);
        for &y in &[0.3, 1.7, 4.0, 9.9] {
            for wall in [lo, hi] {
                let (a, b) = (psi(&c, wall + y), psi(&c, wall - y));
                assert!((a + b).norm() < 1e-12, "wall {wall}, y {y}: {a} {b}");
            }
        }
        assert!(psi(&c, hi).norm() < 1e-12 && psi(&c, lo).norm() < 1e-12);
    }

    #[test]
    fn reach_keeps_only_images_that_can_arrive() {
        let (lo, hi) = (-100.0, 80.0);
        let o = Gaussian {
            x0: 20.0,
            k0: 0.5,
            sigma: 8.0,
        };
        // Reach 174 nm: the mirrors about hi (140, 60 nm away) and lo (−220, 120 nm away);
        // the translations by ±360 nm are 240 and 300 nm away.
        let c = image_components(&o, lo, hi, 174.0, ALL);
        let centres: Vec<f64> = c.iter().map(|c| c.g.x0).collect();
        assert_eq!(centres.len(), 3, "{centres:?}");
        assert!(centres.contains(&140.0) && centres.contains(&-220.0));
        assert_eq!(image_components(&o, lo, hi, 10.0, ALL).len(), 1);
        // A wall the content cannot touch has no mirror (and no composed images).
        let right = Touches {
            lo: false,
            hi: true,
        };
        let c = image_components(&o, lo, hi, 174.0, right);
        assert_eq!(c.len(), 2);
        assert_eq!(c[1].g.x0, 140.0);
    }

    /// Without a potential the bound is the free-flight one: content at x + v·t with
    /// x ~ N(x₀, σ²), v ~ N(v₀, (ħσ_k/m)²); for k₀ = 0 and either direction,
    /// P = 2·Q(D/σ_t), σ_t² = σ² + (ħσ_k t/m)² the spread packet's width (Q the normal tail):
    /// the quadrature agrees within its grid error (spacing σ/4, σ_k/5: a few per cent at
    /// P ≈ 10⁻², tested at 10 %). A packet heading at a near wall reaches it almost surely.
    #[test]
    fn wall_reach_probability_is_the_free_flight_tail() {
        let ob = OneBody::from_job(
            &[],
            0.1,
            units::mass_from_electron_masses(0.067),
            std::path::Path::new("."),
        )
        .unwrap();
        let m = units::mass_from_electron_masses(0.067);
        let g = Gaussian {
            x0: 0.0,
            k0: 0.0,
            sigma: 4.0,
        };
        let t = 50.0;
        let v_sd = units::HBAR * (0.5 / g.sigma) / m;
        let st = (g.sigma * g.sigma + (v_sd * t).powi(2)).sqrt();
        let d = 2.3 * st;
        // 2Q(z) = 2∫_z^∞ e^{−u²/2}/√(2π) du by the midpoint rule (step 10⁻⁴, to z + 12).
        let z = d / st;
        let h = 1e-4;
        let exact: f64 = (0..120_000)
            .map(|i| {
                let u = z + (i as f64 + 0.5) * h;
                (-0.5 * u * u).exp()
            })
            .sum::<f64>()
            * h
            * 2.0
            / (2.0 * std::f64::consts::PI).sqrt();
        let p = wall_reach_probability(&g, &ob, m, -200.0, d, d, t);
        assert!((p / exact - 1.0).abs() < 0.1, "{p} vs {exact}");
        let far = wall_reach_probability(&g, &ob, m, -200.0, 8.0 * st, 8.0 * st, t);
        assert!(far < WALL_REACH_PROBABILITY, "{far}");
        let fast = Gaussian { k0: 1.0, ..g };
        let near = units::HBAR * fast.k0 / m * t * 0.5;
        assert!(wall_reach_probability(&fast, &ob, m, -200.0, near, near, t) > 0.9);
    }

    #[test]
    fn fold_mirrors_and_reverses() {
        let (mut x, mut k) = (12.0, 0.5);
        fold(0.0, 10.0, &mut x, &mut k);
        assert_eq!((x, k), (8.0, -0.5));
        let (mut x, mut k) = (-3.0, 0.5);
        fold(0.0, 10.0, &mut x, &mut k);
        assert_eq!((x, k), (3.0, -0.5));
        assert_eq!(fold_position(0.0, 10.0, 23.0), 3.0);
        assert_eq!(fold_position(0.0, 10.0, -13.0), 7.0);
    }

    /// The Hamiltonian of the odd extension is symmetric about every touched wall: the
    /// kernel potential beyond such a wall plus the flight's unfolded U_f equals the whole
    /// potential at the folded point (docs/method.md §2.5), continuous at the wall; beyond an
    /// untouched wall the kernel part is left unfolded.
    #[test]
    fn kernel_potential_mirrors_the_potential_about_touched_walls() {
        use crate::config::job::PotentialTerm;
        let ob = OneBody::from_job(
            &[
                PotentialTerm::Gaussian {
                    centre: 7.0,
                    width: 1.0,
                    height: 0.2,
                },
                PotentialTerm::Field { slope: 0.01 },
            ],
            0.1,
            units::mass_from_electron_masses(0.067),
            std::path::Path::new("."),
        )
        .unwrap();
        let (lo, hi) = (-10.0, 10.0);
        let right = Touches {
            lo: false,
            hi: true,
        };
        let ext = |y: f64| kernel_potential_with_walls(&ob, lo, hi, right, y) + ob.force.value(y);
        for d in [0.0, 0.4, 2.5, 6.0, 9.0] {
            let (a, b) = (ext(hi + d), ext(hi - d));
            assert!((a - b).abs() < 1e-12, "d = {d}: {a} vs {b}");
        }
        // The field's kink makes a kernel term beyond the wall: U_f(2hi − y) − U_f(y).
        let y = hi + 3.0;
        let kink =
            kernel_potential_with_walls(&ob, lo, hi, right, y) - ob.kernel_part(2.0 * hi - y);
        assert!((kink - 0.01 * ((2.0 * hi - y) - y)).abs() < 1e-12);
        // Untouched left wall: the kernel part unfolded.
        assert_eq!(
            kernel_potential_with_walls(&ob, lo, hi, right, -13.0),
            ob.kernel_part(-13.0)
        );
    }
}
