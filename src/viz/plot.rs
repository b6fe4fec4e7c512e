//! PNG pictures of a result file: the reduced one-body Wigner function and the pair density
//! as heat maps at chosen output times, the one-body density at those times (optionally
//! beside a second file, with Monte Carlo error bands), and norm, energy and particle count
//! against time.
//!
//! Text is drawn with a font embedded in the binary, so pictures look the same on every
//! machine and need no system fonts.

use crate::io::names;
use crate::io::results::{ResultFile, Series};
use crate::viz::chart::*;
use crate::viz::colormap;
use anyhow::{Context, Result, anyhow, bail};
use plotters::prelude::*;
use std::path::{Path, PathBuf};

/// Size in pixels of each Wigner-function picture.
pub const WIGNER_SIZE: (u32, u32) = (960, 720);
/// Size in pixels of each pair-density picture.
pub const PAIR_SIZE: (u32, u32) = (900, 760);
/// Size in pixels of the density picture.
pub const DENSITY_SIZE: (u32, u32) = (960, 600);
/// Size in pixels of the norm/energy/particles picture.
pub const HISTORY_SIZE: (u32, u32) = (960, 840);

/// What `plot` wrote, and notes on the times it drew.
pub struct Plotted {
    pub paths: Vec<PathBuf>,
    /// One line per requested time that is not an output time: the output drawn instead.
    pub notes: Vec<String>,
}

/// Write the pictures of `file` into `out` (created if needed) and return their paths.
///
/// `times` (fs) must lie within the file's output times; one between two outputs is drawn
/// at the nearest output, with a note. By default the first, middle and last outputs are
/// drawn. `against` is a second result file whose density, norm and energy are drawn on
/// the same axes.
pub fn plot(
    file: &Path,
    out: &Path,
    times: Option<&[f64]>,
    against: Option<&Path>,
) -> Result<Plotted> {
    ensure_font()?;
    let a = ResultFile::read(file)?;
    let b = against
        .map(|p| ResultFile::read(p).map(|r| (p, r)))
        .transpose()?;
    let (nx, nk) = (a.x.len(), a.k.len());
    let wigner = required(&a, file, names::WIGNER.name, &[nx, nk])?;
    let density = required(&a, file, names::DENSITY.name, &[nx])?;
    let pair = optional(&a, file, names::PAIR_DENSITY.name, &[nx, nx])?;
    let (picks, notes) = match times {
        Some(req) => pick_times(a.times(), req).with_context(|| format!("{}", file.display()))?,
        None => (
            snap_times(a.times(), None).with_context(|| format!("{}", file.display()))?,
            Vec::new(),
        ),
    };
    std::fs::create_dir_all(out).with_context(|| format!("cannot create {}", out.display()))?;
    let mut written = Vec::new();

    for &t in &picks {
        let time = a.times()[t];
        let path = out.join(format!("wigner_t{}fs.png", short(time)));
        render(&path, WIGNER_SIZE, |root| {
            let limit = max_abs(wigner.frame(t));
            let map = Heatmap {
                title: format!(
                    "Reduced one-body Wigner function f₁(x, k) at t = {} fs",
                    short(time)
                ),
                x_desc: "x (nm)".into(),
                y_desc: "k (1/nm)".into(),
                xs: &a.x,
                ys: &a.k,
                values: wigner.frame(t),
                scale: Scale::Diverging(limit),
                bar_desc: bar_label("f₁(x, k)", &wigner.units),
                square: false,
            };
            map.draw(root).map(|_| ())
        })?;
        written.push(path);
    }

    if let Some(pair) = pair {
        for &t in &picks {
            let time = a.times()[t];
            let path = out.join(format!("pair_density_t{}fs.png", short(time)));
            render(&path, PAIR_SIZE, |root| {
                pair_heatmap(&a, pair, t).draw(root).map(|_| ())
            })?;
            written.push(path);
        }
    }

    let path = out.join("density.png");
    render(&path, DENSITY_SIZE, |root| {
        draw_density(root, (file, &a, density), b.as_ref(), &picks)
    })?;
    written.push(path);

    let path = out.join("history.png");
    if render_history(&path, (file, &a), b.as_ref())? {
        written.push(path);
    }
    Ok(Plotted {
        paths: written,
        notes,
    })
}

/// The outputs to draw for requested times `req` (fs): a time outside the first to last
/// output is refused with the available range; one between outputs is drawn at the
/// nearest output and named in a note. Sorted, without repeats.
pub fn pick_times(times: &[f64], req: &[f64]) -> Result<(Vec<usize>, Vec<String>)> {
    let picks = snap_times(times, Some(req))?;
    let (first, last) = (times[0], times[times.len() - 1]);
    let tol = 1e-9 * first.abs().max(last.abs()).max(1.0);
    let mut notes = Vec::new();
    for &r in req {
        if r < first - tol || r > last + tol {
            let list: Vec<String> = times.iter().take(12).map(|&t| short(t)).collect();
            bail!(
                "--times {}: no output at that time; the file's {} output times run from {} to {} fs ({}{})",
                short(r),
                times.len(),
                short(first),
                short(last),
                list.join(", "),
                if times.len() > 12 { ", …" } else { "" }
            );
        }
        let near = snap_times(times, Some(&[r]))?[0];
        if (times[near] - r).abs() > tol {
            notes.push(format!(
                "--times {}: not an output time; drew the nearest output, t = {} fs",
                short(r),
                short(times[near])
            ));
        }
    }
    Ok((picks, notes))
}

/// Indices of the output times to draw: the nearest output to each requested time, or the
/// first, middle and last outputs; sorted, without repeats.
pub fn snap_times(times: &[f64], requested: Option<&[f64]>) -> Result<Vec<usize>> {
    if times.is_empty() {
        bail!("the file holds no output times");
    }
    let n = times.len();
    let mut picks = match requested {
        None => vec![0, (n - 1) / 2, n - 1],
        Some(req) => {
            if req.is_empty() {
                bail!("no times requested");
            }
            let mut v = Vec::new();
            for &r in req {
                if !r.is_finite() {
                    bail!("requested time {r} is not a number of fs");
                }
                let nearest = (0..n)
                    .min_by(|&i, &j| (times[i] - r).abs().total_cmp(&(times[j] - r).abs()))
                    .expect("times is not empty");
                v.push(nearest);
            }
            v
        }
    };
    picks.sort_unstable();
    picks.dedup();
    Ok(picks)
}

fn required<'a>(
    rf: &'a ResultFile,
    file: &Path,
    name: &str,
    frame: &[usize],
) -> Result<&'a Series> {
    optional(rf, file, name, frame)?
        .ok_or_else(|| anyhow!("{}: dataset `{name}` is missing", file.display()))
}

fn optional<'a>(
    rf: &'a ResultFile,
    file: &Path,
    name: &str,
    frame: &[usize],
) -> Result<Option<&'a Series>> {
    let shown = file.display();
    match rf.series.get(name) {
        Some(s) if s.frame_shape == frame => Ok(Some(s)),
        Some(s) => bail!(
            "{shown}: dataset `{name}` has frames of shape {:?}, expected {frame:?} from the x and k grids",
            s.frame_shape
        ),
        None if rf.records.contains_key(name) => bail!(
            "{shown}: dataset `{name}` does not have one row per output time ({} outputs in `time`)",
            rf.times().len()
        ),
        None => Ok(None),
    }
}

fn pair_heatmap<'a>(a: &'a ResultFile, pair: &'a Series, t: usize) -> Heatmap<'a> {
    let frame = pair.frame(t);
    let hi = frame
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max);
    let lo = frame
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .fold(0.0, f64::min);
    let hi = if hi > lo { hi } else { lo + 1.0 };
    Heatmap {
        title: format!("Pair density n₂(x, x′) at t = {} fs", short(a.times()[t])),
        x_desc: "x (nm)".into(),
        y_desc: "x′ (nm)".into(),
        xs: &a.x,
        ys: &a.x,
        values: frame,
        scale: Scale::Sequential(lo, hi),
        bar_desc: bar_label("n₂(x, x′)", &pair.units),
        square: true,
    }
}

/// How values map to colours.
#[derive(Clone, Copy)]
enum Scale {
    /// Symmetric about zero, saturating at ± the limit.
    Diverging(f64),
    /// From the low to the high value.
    Sequential(f64, f64),
}

impl Scale {
    fn colour(self, v: f64) -> RGBColor {
        let (r, g, b) = match self {
            Scale::Diverging(limit) => colormap::diverging(v, limit),
            Scale::Sequential(lo, hi) => colormap::sequential(v, lo, hi),
        };
        RGBColor(r, g, b)
    }
    fn range(self) -> (f64, f64) {
        match self {
            Scale::Diverging(limit) => (-limit, limit),
            Scale::Sequential(lo, hi) => (lo, hi),
        }
    }
}

/// A heat map of `values[ix * ys.len() + iy]` over bin centres `xs` × `ys`, with a colour
/// bar on the right.
struct Heatmap<'a> {
    title: String,
    x_desc: String,
    y_desc: String,
    xs: &'a [f64],
    ys: &'a [f64],
    values: &'a [f64],
    scale: Scale,
    bar_desc: String,
    square: bool,
}

impl Heatmap<'_> {
    /// Draw into `root`; returns the plotting area's size in pixels.
    fn draw(&self, root: &Area) -> Result<(u32, u32)> {
        let area = root.titled(&self.title, (FONT_NAME, TITLE_PX))?;
        let (w, h) = area.dim_in_pixel();
        let (main, bar) = area.split_horizontally(w.saturating_sub(BAR_COLUMN));
        let plot_w = (w - BAR_COLUMN).saturating_sub(Y_LABELS + 2 * MARGIN);
        let plot_h = h.saturating_sub(X_LABELS + 2 * MARGIN);
        let (extra_w, extra_h) = if self.square {
            let side = plot_w.min(plot_h);
            (plot_w - side, plot_h - side)
        } else {
            (0, 0)
        };
        let xe = edges(self.xs);
        let ye = edges(self.ys);
        let mut chart = ChartBuilder::on(&main)
            .margin(MARGIN)
            .margin_right(MARGIN + extra_w)
            .margin_top(MARGIN + extra_h)
            .x_label_area_size(X_LABELS)
            .y_label_area_size(Y_LABELS)
            .build_cartesian_2d(xe[0]..xe[xe.len() - 1], ye[0]..ye[ye.len() - 1])?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_desc(self.x_desc.as_str())
            .y_desc(self.y_desc.as_str())
            .axis_desc_style((FONT_NAME, LABEL_PX))
            .label_style((FONT_NAME, TICK_PX))
            .x_label_formatter(&ticks(xe[0], xe[xe.len() - 1]))
            .y_label_formatter(&ticks(ye[0], ye[ye.len() - 1]))
            .draw()?;
        let ny = self.ys.len();
        chart.draw_series((0..self.xs.len()).flat_map(|i| {
            let (xe, ye) = (&xe, &ye);
            (0..ny).map(move |j| {
                let c = self.scale.colour(self.values[i * ny + j]);
                Rectangle::new([(xe[i], ye[j]), (xe[i + 1], ye[j + 1])], c.filled())
            })
        }))?;
        let plot_dims = chart.plotting_area().dim_in_pixel();

        let (lo, hi) = self.scale.range();
        let mut bar_chart = ChartBuilder::on(&bar)
            .margin(MARGIN)
            .margin_top(MARGIN + extra_h)
            .x_label_area_size(X_LABELS)
            .right_y_label_area_size(BAR_COLUMN - 2 * MARGIN - 30)
            .build_cartesian_2d(0.0..1.0, lo..hi)?;
        bar_chart
            .configure_mesh()
            .disable_mesh()
            .disable_x_axis()
            .y_desc(self.bar_desc.as_str())
            .axis_desc_style((FONT_NAME, LABEL_PX))
            .label_style((FONT_NAME, TICK_PX))
            .y_label_formatter(&ticks(lo, hi))
            .draw()?;
        let steps = 256;
        bar_chart.draw_series((0..steps).map(|s| {
            let v0 = lo + (hi - lo) * s as f64 / steps as f64;
            let v1 = lo + (hi - lo) * (s + 1) as f64 / steps as f64;
            let c = self.scale.colour(0.5 * (v0 + v1));
            Rectangle::new([(0.0, v0), (1.0, v1)], c.filled())
        }))?;
        bar_chart.draw_series(std::iter::once(Rectangle::new(
            [(0.0, lo), (1.0, hi)],
            BLACK.stroke_width(1),
        )))?;
        Ok(plot_dims)
    }
}

/// Bin edges from bin centres: midpoints, with the outer edges half a bin out.
fn edges(centres: &[f64]) -> Vec<f64> {
    match centres.len() {
        0 => vec![0.0, 1.0],
        1 => vec![centres[0] - 0.5, centres[0] + 0.5],
        n => {
            let mut e = Vec::with_capacity(n + 1);
            e.push(centres[0] - 0.5 * (centres[1] - centres[0]));
            e.extend(centres.windows(2).map(|w| 0.5 * (w[0] + w[1])));
            e.push(centres[n - 1] + 0.5 * (centres[n - 1] - centres[n - 2]));
            e
        }
    }
}

/// Legend names for the two files: their file names, or their paths when those agree.
fn names(a: &Path, b: Option<&Path>) -> (String, String) {
    let name = |p: &Path| {
        p.file_name().map_or_else(
            || p.display().to_string(),
            |n| n.to_string_lossy().into_owned(),
        )
    };
    match b {
        None => (name(a), String::new()),
        Some(b) if name(a) == name(b) => (a.display().to_string(), b.display().to_string()),
        Some(b) => (name(a), name(b)),
    }
}

/// An error series to draw as a band: `None` when it holds no number (one error group
/// writes NaN errors).
fn band(err: Option<&Series>) -> Option<&Series> {
    err.filter(|e| e.data.iter().any(|v| !v.is_nan()))
}

fn draw_density(
    root: &Area,
    (file, rf, density): (&Path, &ResultFile, &Series),
    b: Option<&(&Path, ResultFile)>,
    picks: &[usize],
) -> Result<()> {
    let err = band(optional(rf, file, "density_error", &[rf.x.len()])?);
    let (name_a, name_b) = names(file, b.map(|b| b.0));
    let times: Vec<String> = picks.iter().map(|&t| short(rf.times()[t])).collect();
    let mut title = format!("One-body density n(x) at t = {} fs", times.join(", "));
    let mut curves = Vec::new();
    let mut berr_shown = false;
    for (i, &t) in picks.iter().enumerate() {
        curves.push(Curve {
            label: if b.is_some() {
                format!("{name_a}, t = {} fs", times[i])
            } else {
                format!("t = {} fs", times[i])
            },
            xs: rf.x.clone(),
            ys: density.frame(t).to_vec(),
            err: err.map(|e| e.frame(t).to_vec()),
            colour: colormap::line(i),
            dashed: false,
        });
    }
    if let Some((bfile, brf)) = b {
        let bd = required(brf, bfile, names::DENSITY.name, &[brf.x.len()])?;
        let berr = band(optional(brf, bfile, "density_error", &[brf.x.len()])?);
        berr_shown = berr.is_some();
        for (i, &t) in picks.iter().enumerate() {
            let bt = snap_times(brf.times(), Some(&[rf.times()[t]]))
                .with_context(|| format!("{}", bfile.display()))?[0];
            curves.push(Curve {
                label: format!("{name_b}, t = {} fs", short(brf.times()[bt])),
                xs: brf.x.clone(),
                ys: bd.frame(bt).to_vec(),
                err: berr.map(|e| e.frame(bt).to_vec()),
                colour: colormap::line(i),
                dashed: true,
            });
        }
        // The legend names the file of each curve (solid, dashed); the title stays short.
        title = format!("One-body density n(x) at t = {} fs", times.join(", "));
    }
    if err.is_some() || berr_shown {
        title.push_str(" (bands: ±1 s.e.)");
    }
    let area = root.titled(&title, (FONT_NAME, TITLE_PX))?;
    draw_curves(
        &area,
        "x (nm)",
        &with_units("n(x)", &density.units),
        &curves,
    )
}

/// Scalar series drawn against time, with their axis names.
const HISTORY: [(&str, &str); 3] = [
    (names::NORM.name, names::NORM.name),
    (names::ENERGY.name, names::ENERGY.name),
    (names::PARTICLES.name, "particle count"),
];

/// Draw the scalar series against time; false (and nothing written) when there are none.
fn render_history(
    path: &Path,
    (file, a): (&Path, &ResultFile),
    b: Option<&(&Path, ResultFile)>,
) -> Result<bool> {
    let files: Vec<(&Path, &ResultFile)> = std::iter::once((file, a))
        .chain(b.map(|(p, r)| (*p, r)))
        .collect();
    let present: Vec<(&str, &str)> = HISTORY
        .into_iter()
        .filter(|(n, _)| files.iter().any(|(_, r)| r.series.contains_key(*n)))
        .collect();
    if present.is_empty() {
        return Ok(false);
    }
    let (name_a, name_b) = names(file, b.map(|b| b.0));
    render(path, HISTORY_SIZE, |root| {
        let shown: Vec<&str> = present.iter().map(|p| p.1).collect();
        let title = match shown.as_slice() {
            [one] => format!("{one} against time"),
            [init @ .., last] => format!("{} and {last} against time", init.join(", ")),
            [] => unreachable!("present is not empty"),
        };
        let mut title = title;
        title[..1].make_ascii_uppercase();
        let area = root.titled(&title, (FONT_NAME, TITLE_PX))?;
        for (panel, (name, desc)) in area.split_evenly((present.len(), 1)).iter().zip(&present) {
            let mut curves = Vec::new();
            let mut units = String::new();
            for (i, (f, rf)) in files.iter().enumerate() {
                if let Some(s) = optional(rf, f, name, &[])? {
                    let err = band(optional(rf, f, &format!("{name}_error"), &[])?);
                    units.clone_from(&s.units);
                    curves.push(Curve {
                        label: if i == 0 {
                            name_a.clone()
                        } else {
                            name_b.clone()
                        },
                        xs: rf.times().to_vec(),
                        ys: s.data.clone(),
                        err: err.map(|e| e.data.clone()),
                        colour: colormap::line(i),
                        dashed: i == 1,
                    });
                }
            }
            draw_curves(panel, "t (fs)", &with_units(desc, &units), &curves)?;
        }
        Ok(())
    })?;
    Ok(true)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn default_times_are_first_middle_last() {
        let t = [0.0, 1.0, 2.0, 3.0, 4.0];
        assert_eq!(snap_times(&t, None).unwrap(), vec![0, 2, 4]);
        assert_eq!(snap_times(&[7.0], None).unwrap(), vec![0]);
        assert!(snap_times(&[], None).is_err());
    }

    #[test]
    fn requested_times_snap_to_nearest_output() {
        let t = [0.0, 2.5, 5.0, 7.5, 10.0];
        assert_eq!(
            snap_times(&t, Some(&[9.0, 2.4, 2.6, -3.0, 100.0])).unwrap(),
            vec![0, 1, 4]
        );
        assert!(snap_times(&t, Some(&[f64::NAN])).is_err());
    }

    #[test]
    fn edges_surround_centres() {
        assert_eq!(edges(&[0.5, 1.5, 2.5]), vec![0.0, 1.0, 2.0, 3.0]);
        assert_eq!(edges(&[4.0]), vec![3.5, 4.5]);
    }

    #[test]
    fn tick_labels_resolve_the_span() {
        let f = ticks(0.299, 0.3012);
        assert_ne!(f(&0.2998), f(&0.3000));
        assert_eq!(ticks(-20.0, 20.0)(&-5.0), "-5");
        assert_eq!(ticks(-1.0, 1.0)(&-0.0001), "0.0");
    }

    #[test]
    fn pair_density_plot_area_is_square() {
        ensure_font().unwrap();
        let x: Vec<f64> = (0..8).map(|i| i as f64).collect();
        let mut a = ResultFile::new(
            crate::io::results::OBSERVABLES_TYPE,
            "",
            x.clone(),
            vec![0.0, 1.0],
        );
        a.push("time", "fs", &[], &[0.0]);
        a.push("pair_density", "1/nm²", &[8, 8], &[1.0; 64]);
        let mut buf = vec![0u8; PAIR_SIZE.0 as usize * PAIR_SIZE.1 as usize * 3];
        let root = BitMapBackend::with_buffer(&mut buf, PAIR_SIZE).into_drawing_area();
        let (w, h) = pair_heatmap(&a, &a.series["pair_density"], 0)
            .draw(&root)
            .unwrap();
        assert_eq!(w, h);
        assert!(w > PAIR_SIZE.1 / 2, "the plot fills the picture: {w}");
    }
}
