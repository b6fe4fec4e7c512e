//! `compare`: the distance between two result files, observable by observable, at the
//! output times they share.
//!
//! For each array series both files hold (not `time`, not `*_error`) the relative L1
//! distance Σ|A − B| / Σ|B| is computed per common time; the table shows the largest over
//! time and the value at the last common time. Scalar series get max |A − B|. Norm and
//! energy are listed per common time. With a tolerance, a density-like distance (density,
//! pair_density, wigner, momentum_density) above it makes the comparison fail.

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
    if common.is_empty() {
        bail!(
            "no common output times (A has {} times, B has {}; times match within {TIME_MATCH} fs)",
            a.times().len(),
            b.times().len()
        );
    }
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
        .filter(|(name, _)| name.as_str() != "time" && !name.ends_with("_error"))
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
        "relative L1 distance Σ|A−B|/Σ|B| per output time (B is the yardstick)"
    )?;
    writeln!(
        out,
        "{:<20} {:>12} {:>12} {:>14}",
        "dataset",
        "largest",
        "at t (fs)",
        format!("at t = {}", fmt_g(t_last))
    )?;
    for (name, sa, sb) in shared.iter().filter(|(_, s, _)| s.frame_len() > 1) {
        let d: Vec<f64> = common
            .iter()
            .map(|&(i, j, _)| relative_l1(sa.frame(i), sb.frame(j)))
            .collect();
        let (imax, dmax) =
            d.iter()
                .enumerate()
                .fold((0, f64::NEG_INFINITY), |(bi, bv), (i, &v)| {
                    if v > bv || v.is_nan() {
                        (i, v)
                    } else {
                        (bi, bv)
                    }
                });
        let mark = match tolerance {
            Some(tol) if DENSITY_LIKE.contains(&name.as_str()) => {
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
        writeln!(
            out,
            "{:<20} {:>12.4e} {:>12} {:>14.4e}{mark}",
            name,
            dmax,
            fmt_g(common[imax].2),
            d.last().expect("non-empty")
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
