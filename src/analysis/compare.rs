//! `compare`: the distance between two result files, observable by observable, at the
//! output times they share (at least two).
//!
//! For each array series both files hold (not `time`, not `*_error`) the relative L1
//! distance Σ|A − B| / Σ|B| is computed per common time; the table shows the largest over
//! time and the value at the last common time. Where B vanishes (Σ|B| below 1e-9 Σ|A|, or
//! below the summed standard error of the bins) a relative distance means nothing: it is
//! shown as `—` and the absolute max |A − B| over all common times (always listed) is the
//! measure. Where the files carry `<name>_error` datasets, the mean over bins and times of
//! (A − B)²/(se_A² + se_B²) is listed with its expected value (b − 1)/(b − 3) for errors
//! from b groups (see `analysis::stats`), and scalar series get z-scores. Scalar series get
//! max |A − B|. Norm and energy are listed per common time. With a tolerance, a
//! density-like relative distance (density, pair_density, wigner, momentum_density) above
//! it makes the comparison fail.

use crate::analysis::stats::{self, BinnedTerms};
use crate::io::names;
use crate::io::results::{ResultFile, Series};
use anyhow::{Result, bail};
use std::fmt::Write as _;
use std::path::Path;

/// Series whose distance is held against the tolerance.
pub const DENSITY_LIKE: [&str; 4] = [
    names::DENSITY.name,
    names::PAIR_DENSITY.name,
    names::WIGNER.name,
    names::MOMENTUM_DENSITY.name,
];

/// Two output times are the same when they agree within this, fs.
const TIME_MATCH: f64 = 1e-9;

/// Describe a bin-centre axis as "n bins on [lo, hi] unit (w unit wide)".
fn describe(c: &[f64], unit: &str) -> String {
    match c.len() {
        0 => "no bins".to_string(),
        1 => format!("1 bin centred at {}{unit}", c[0]),
        n => {
            let w = (c[n - 1] - c[0]) / (n - 1) as f64;
            format!(
                "{n} bins on [{}, {}] {unit} ({} {unit} wide)",
                fmt_g(c[0] - 0.5 * w),
                fmt_g(c[n - 1] + 0.5 * w),
                fmt_g(w)
            )
        }
    }
}

/// Shortest decimal that shows the value to 6 significant digits.
fn fmt_g(v: f64) -> String {
    let s = format!("{:.6}", v);
    let s = s.trim_end_matches('0').trim_end_matches('.').to_string();
    if s == "-0" { "0".to_string() } else { s }
}

fn same_axis(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len()
        && a.iter()
            .zip(b)
            .all(|(x, y)| (x - y).abs() <= 1e-9 * x.abs().max(y.abs()).max(1.0))
}

/// Relative L1 distance Σ|a − b| / Σ|b| (0 when both vanish, infinite when only b does).
pub fn relative_l1(a: &[f64], b: &[f64]) -> f64 {
    let num: f64 = a.iter().zip(b).map(|(x, y)| (x - y).abs()).sum();
    let den: f64 = b.iter().map(|y| y.abs()).sum();
    if num == 0.0 {
        0.0
    } else if den == 0.0 {
        f64::INFINITY
    } else {
        num / den
    }
}

/// B counts as vanishing when Σ|B| is below this fraction of Σ|A|.
const VANISHING: f64 = 1e-9;

/// Σ|A − B| / Σ|B| of one frame, `None` where B vanishes against A or against the summed
/// standard error `err_sum` (0 when unknown).
fn relative_or_vanishing(a: &[f64], b: &[f64], err_sum: f64) -> Option<f64> {
    let num: f64 = a.iter().zip(b).map(|(x, y)| (x - y).abs()).sum();
    let den: f64 = b.iter().map(|y| y.abs()).sum();
    let scale: f64 = a.iter().map(|x| x.abs()).sum();
    if num == 0.0 {
        Some(0.0)
    } else if den <= VANISHING * scale || (err_sum > 0.0 && den <= err_sum) || den == 0.0 {
        None
    } else {
        Some(num / den)
    }
}

/// The error groups behind a file's `*_error` datasets (from its job), `None` when it has
/// no errors or its job does not say.
fn error_groups(f: &ResultFile) -> Option<u32> {
    if !f.series.keys().any(|k| k.ends_with(names::ERROR_SUFFIX)) {
        return None;
    }
    crate::config::job::parse_stored(&f.job_text)
        .ok()
        .map(|j| j.numerics.groups)
}

/// The frame of `<name>_error` in `f` at output `i`, empty when absent.
fn error_frame<'a>(f: &'a ResultFile, name: &str, i: usize) -> &'a [f64] {
    f.series
        .get(&names::error_of(name))
        .map_or(&[], |s| s.frame(i))
}

fn opt(v: Option<f64>, w: usize) -> String {
    match v {
        Some(x) => format!("{x:>w$.4e}"),
        None => format!("{:>w$}", "—"),
    }
}

/// Pairs (frame in A, frame in B) at common times.
fn common_times(a: &ResultFile, b: &ResultFile) -> Vec<(usize, usize, f64)> {
    let tb = b.times();
    a.times()
        .iter()
        .enumerate()
        .filter_map(|(i, &t)| {
            tb.iter()
                .position(|&u| (u - t).abs() <= TIME_MATCH)
                .map(|j| (i, j, t))
        })
        .collect()
}

/// The comparison as text, and whether it is within `tolerance`.
pub fn report(a: &ResultFile, b: &ResultFile, tolerance: Option<f64>) -> Result<(String, bool)> {
    if !same_axis(&a.x, &b.x) {
        bail!(
            "x grids differ: {} vs {}",
            describe(&a.x, "nm"),
            describe(&b.x, "nm")
        );
    }
    if !same_axis(&a.k, &b.k) {
        bail!(
            "k grids differ: {} vs {}",
            describe(&a.k, "1/nm"),
            describe(&b.k, "1/nm")
        );
    }
    let common = common_times(a, b);
    if common.len() < 2 {
        bail!(
            "{} common output time(s){}: a comparison needs at least two (A has {} times, B has {}; times match within {TIME_MATCH} fs)",
            common.len(),
            common
                .first()
                .map_or(String::new(), |c| format!(" (t = {} fs)", fmt_g(c.2))),
            a.times().len(),
            b.times().len()
        );
    }
    // Errors from b groups: the smaller b of the files that carry errors.
    let groups = [error_groups(a), error_groups(b)]
        .into_iter()
        .flatten()
        .min();
    let mut out = String::new();
    let t_last = common.last().expect("non-empty").2;
    writeln!(out, "x: {}", describe(&a.x, "nm"))?;
    writeln!(out, "k: {}", describe(&a.k, "1/nm"))?;
    writeln!(
        out,
        "common times: {} (from {} to {} fs)",
        common.len(),
        fmt_g(common[0].2),
        fmt_g(t_last)
    )?;
    let shared: Vec<(&String, &Series, &Series)> = a
        .series
        .iter()
        .filter(|(name, _)| {
            name.as_str() != names::TIME.name && !name.ends_with(names::ERROR_SUFFIX)
        })
        .filter_map(|(name, sa)| b.series.get(name).map(|sb| (name, sa, sb)))
        .collect();
    for (name, sa, sb) in &shared {
        if sa.frame_shape != sb.frame_shape {
            bail!(
                "dataset `{name}` has frames of shape {:?} in A but {:?} in B",
                sa.frame_shape,
                sb.frame_shape
            );
        }
    }
    let mut ok = true;
    let mut failed = Vec::new();
    writeln!(out)?;
    writeln!(
        out,
        "relative L1 distance Σ|A−B|/Σ|B| per output time (B is the yardstick; — where B vanishes: see max |A−B|)"
    )?;
    match groups {
        Some(g) => writeln!(
            out,
            "F-mean: mean over bins with an error of (A−B)²/(se_A²+se_B²); expected {} for errors from {g} groups",
            stats::expected_mean(g)
                .map_or("— (needs more than 3 groups)".to_string(), |e| format!(
                    "{e:.4}"
                ))
        )?,
        None => writeln!(out, "F-mean: — (neither file has *_error datasets)")?,
    }
    writeln!(
        out,
        "{:<20} {:>12} {:>12} {:>14} {:>12} {:>10} {:>10} {:>9}",
        "dataset",
        "largest",
        "at t (fs)",
        format!("at t = {}", fmt_g(t_last)),
        "max |A−B|",
        "F-mean",
        "expected",
        "bins"
    )?;
    for (name, sa, sb) in shared.iter().filter(|(_, s, _)| s.frame_len() > 1) {
        let mut terms = BinnedTerms::default();
        let mut abs_max: f64 = 0.0;
        let d: Vec<Option<f64>> = common
            .iter()
            .map(|&(i, j, _)| {
                let (fa, fb) = (sa.frame(i), sb.frame(j));
                let (ea, eb) = (error_frame(a, name, i), error_frame(b, name, j));
                terms.add(fa, fb, ea, eb);
                for (x, y) in fa.iter().zip(fb) {
                    abs_max = abs_max.max((x - y).abs());
                }
                let err_sum: f64 = (0..fa.len())
                    .map(|k| {
                        let (u, v) = (
                            ea.get(k).copied().unwrap_or(0.0),
                            eb.get(k).copied().unwrap_or(0.0),
                        );
                        (u * u + v * v).sqrt()
                    })
                    .sum();
                relative_or_vanishing(fa, fb, err_sum)
            })
            .collect();
        let worst = d
            .iter()
            .enumerate()
            .filter_map(|(i, v)| v.map(|v| (i, v)))
            .fold(None, |best: Option<(usize, f64)>, (i, v)| match best {
                Some((_, bv)) if !(v > bv || v.is_nan()) => best,
                _ => Some((i, v)),
            });
        let mark = match (tolerance, worst) {
            (Some(tol), Some((_, dmax))) if DENSITY_LIKE.contains(&name.as_str()) => {
                if dmax <= tol {
                    ""
                } else {
                    ok = false;
                    failed.push(format!("{name} ({dmax:.3e})"));
                    "  > tolerance"
                }
            }
            _ => "",
        };
        let expected = if terms.bins > 0 {
            groups.and_then(stats::expected_mean)
        } else {
            None
        };
        writeln!(
            out,
            "{:<20} {} {:>12} {} {:>12.4e} {} {} {:>9}{mark}",
            name,
            opt(worst.map(|w| w.1), 12),
            worst.map_or("—".to_string(), |w| fmt_g(common[w.0].2)),
            opt(*d.last().expect("non-empty"), 14),
            abs_max,
            opt(terms.mean(), 10),
            opt(expected, 10),
            terms.bins
        )?;
    }
    let scalars: Vec<_> = shared
        .iter()
        .filter(|(n, s, _)| {
            s.frame_len() == 1 && n.as_str() != names::NORM.name && n.as_str() != names::ENERGY.name
        })
        .collect();
    if !scalars.is_empty() {
        writeln!(out)?;
        writeln!(out, "scalar series: |A − B|")?;
        writeln!(
            out,
            "{:<20} {:>12} {:>12} {:>14}",
            "dataset",
            "largest",
            "at t (fs)",
            format!("at t = {}", fmt_g(t_last))
        )?;
        for (name, sa, sb) in scalars {
            let d: Vec<f64> = common
                .iter()
                .map(|&(i, j, _)| (sa.frame(i)[0] - sb.frame(j)[0]).abs())
                .collect();
            let (imax, dmax) =
                d.iter()
                    .enumerate()
                    .fold((0, f64::NEG_INFINITY), |(bi, bv), (i, &v)| {
                        if v > bv { (i, v) } else { (bi, bv) }
                    });
            writeln!(
                out,
                "{:<20} {:>12.4e} {:>12} {:>14.4e}",
                name,
                dmax,
                fmt_g(common[imax].2),
                d.last().expect("non-empty")
            )?;
        }
    }
    // z-scores of the scalar series that carry an error in either file.
    let with_errors: Vec<_> = shared
        .iter()
        .filter(|(n, s, _)| {
            s.frame_len() == 1
                && (a.series.contains_key(&names::error_of(n))
                    || b.series.contains_key(&names::error_of(n)))
        })
        .collect();
    if !with_errors.is_empty() {
        writeln!(out)?;
        writeln!(
            out,
            "z-scores (A − B)/√(se_A² + se_B²) of scalar series (|z| of a few is noise; z follows t with b − 1 degrees of freedom)"
        )?;
        writeln!(
            out,
            "{:<20} {:>12} {:>12} {:>14}",
            "dataset",
            "largest |z|",
            "at t (fs)",
            format!("at t = {}", fmt_g(t_last))
        )?;
        for (name, sa, sb) in with_errors {
            let z: Vec<Option<f64>> = common
                .iter()
                .map(|&(i, j, _)| {
                    let se = |f: &ResultFile, k: usize| {
                        error_frame(f, name, k).first().copied().unwrap_or(0.0)
                    };
                    stats::z_score(sa.frame(i)[0], sb.frame(j)[0], se(a, i), se(b, j))
                })
                .collect();
            let worst = z
                .iter()
                .enumerate()
                .filter_map(|(i, v)| v.map(|v| (i, v)))
                .fold(None, |best: Option<(usize, f64)>, (i, v)| match best {
                    Some((_, bv)) if v.abs() <= bv.abs() => best,
                    _ => Some((i, v)),
                });
            writeln!(
                out,
                "{:<20} {} {:>12} {}",
                name,
                opt(worst.map(|w| w.1.abs()), 12),
                worst.map_or("—".to_string(), |w| fmt_g(common[w.0].2)),
                opt(*z.last().expect("non-empty"), 14)
            )?;
        }
    }
    let get = |f: &ResultFile, name: &str, i: usize| f.series.get(name).map(|s| s.frame(i)[0]);
    writeln!(out)?;
    writeln!(
        out,
        "{:>10} {:>13} {:>13} {:>11} {:>13} {:>13} {:>11}",
        "t (fs)", "norm A", "norm B", "A − B", "energy A (eV)", "energy B (eV)", "A − B"
    )?;
    let cell = |v: Option<f64>, w: usize| match v {
        Some(x) => format!("{x:>w$.8}"),
        None => format!("{:>w$}", "—"),
    };
    let diff = |x: Option<f64>, y: Option<f64>| match (x, y) {
        (Some(x), Some(y)) => format!("{:>11.3e}", x - y),
        _ => format!("{:>11}", "—"),
    };
    for &(i, j, t) in &common {
        let (na, nb) = (get(a, names::NORM.name, i), get(b, names::NORM.name, j));
        let (ea, eb) = (get(a, names::ENERGY.name, i), get(b, names::ENERGY.name, j));
        writeln!(
            out,
            "{:>10} {} {} {} {} {} {}",
            fmt_g(t),
            cell(na, 13),
            cell(nb, 13),
            diff(na, nb),
            cell(ea, 13),
            cell(eb, 13),
            diff(ea, eb)
        )?;
    }
    if let Some(tol) = tolerance {
        writeln!(out)?;
        if ok {
            writeln!(out, "within tolerance {tol} (relative L1 of the densities)")?;
        } else {
            writeln!(out, "tolerance {tol} exceeded by: {}", failed.join(", "))?;
        }
    }
    Ok((out, ok))
}

/// Compare two result files: the table (headed by both paths and file types) and whether
/// every distance is within `tolerance` (always true without one).
pub fn compare(a: &Path, b: &Path, tolerance: Option<f64>) -> Result<(String, bool)> {
    if let Some(t) = tolerance
        && (t.is_nan() || t < 0.0)
    {
        bail!("--tolerance must be a non-negative number (got {t})");
    }
    let fa = ResultFile::read(a)?;
    let fb = ResultFile::read(b)?;
    let (text, ok) = report(&fa, &fb, tolerance)
        .map_err(|e| anyhow::anyhow!("{} vs {}: {e}", a.display(), b.display()))?;
    let head = format!(
        "A: {} ({})\nB: {} ({})\n",
        a.display(),
        fa.file_type,
        b.display(),
        fb.file_type
    );
    Ok((head + &text, ok))
}
