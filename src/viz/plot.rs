//! PNG pictures of a result file: the reduced one-body Wigner function and the pair density
//! as heat maps at chosen output times (the pair density zoomed to where it lives, the
//! diagonal x = x′ marked), the one-body density at those times (optionally beside a
//! second file, with Monte Carlo error bands), and norm, transmitted norm, energy and
//! particle count against time (the second file on the same axes).
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
pub const HISTORY_SIZE: (u32, u32) = (960, 1080);

/// An x range [min, max] (nm) that the maps show (`--window XMIN:XMAX`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Window {
    pub min: f64,
    pub max: f64,
}

impl Window {
    /// Parse `XMIN:XMAX` (nm), e.g. `-40:40`.
    pub fn parse(text: &str) -> Result<Window> {
        let bad =
            |why: &str| anyhow!("--window {text}: {why} (expected XMIN:XMAX in nm, e.g. -40:40)");
        let (a, b) = text.split_once(':').ok_or_else(|| bad("no `:`"))?;
        let num = |v: &str| -> Result<f64> {
            v.trim()
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| bad(&format!("`{v}` is not a finite number")))
        };
        let (min, max) = (num(a)?, num(b)?);
        if min >= max {
            return Err(bad("XMIN must be below XMAX"));
        }
        Ok(Window { min, max })
    }

    /// The bins whose centres lie inside the window, as an index range; an error naming
    /// the option when none does.
    fn bins(self, centres: &[f64]) -> Result<std::ops::Range<usize>> {
        let inside: Vec<usize> = (0..centres.len())
            .filter(|&i| centres[i] >= self.min && centres[i] <= self.max)
            .collect();
        match (inside.first(), inside.last()) {
            (Some(&a), Some(&b)) => Ok(a..b + 1),
            _ => bail!(
                "--window {}:{}: no x bin centre lies inside (the bins run from {} to {} nm)",
                short(self.min),
                short(self.max),
                short(centres.first().copied().unwrap_or(f64::NAN)),
                short(centres.last().copied().unwrap_or(f64::NAN))
            ),
        }
    }
}

/// Fraction of ∫|n₂| the automatic pair-density window holds.
pub const PAIR_WINDOW_FRACTION: f64 = 0.99;

/// The smallest square window of bins [i, j) × [i, j) holding at least `fraction` of
/// Σ|values| (row-major n × n), by two-dimensional prefix sums; the whole range when the
/// frame is zero or not finite.
pub fn pair_window(values: &[f64], n: usize, fraction: f64) -> std::ops::Range<usize> {
    // prefix[(i)(n+1) + j] = Σ_{a<i, b<j} |v[a][b]|
    let mut prefix = vec![0.0; (n + 1) * (n + 1)];
    for a in 0..n {
        for b in 0..n {
            let v = values[a * n + b];
            let v = if v.is_finite() { v.abs() } else { 0.0 };
            prefix[(a + 1) * (n + 1) + b + 1] =
                v + prefix[a * (n + 1) + b + 1] + prefix[(a + 1) * (n + 1) + b]
                    - prefix[a * (n + 1) + b];
        }
    }
    let total = prefix[(n + 1) * (n + 1) - 1];
    if total.is_nan() || total <= 0.0 {
        return 0..n;
    }
    let mass = |i: usize, j: usize| {
        prefix[j * (n + 1) + j] - prefix[i * (n + 1) + j] - prefix[j * (n + 1) + i]
            + prefix[i * (n + 1) + i]
    };
    let mut best = 0..n;
    let mut j = 0;
    for i in 0..n {
        // The smallest end for start i is never before the smallest end for start i − 1.
        j = j.max(i + 1);
        while j < n && mass(i, j) < fraction * total {
            j += 1;
        }
        if mass(i, j) >= fraction * total * (1.0 - 1e-12) && j - i < best.len() {
            best = i..j;
        }
    }
    best
}

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
/// drawn. `against` is a second result file (e.g. the exact reference) whose density,
/// norm, transmitted norm and energy are drawn on the same axes. `window` limits every map
/// to an x range; without it the Wigner map shows the whole domain and the pair-density
/// map the smallest square holding 99 % of ∫|n₂|.
pub fn plot(
    file: &Path,
    out: &Path,
    times: Option<&[f64]>,
    against: Option<&Path>,
    window: Option<Window>,
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
        let rows = match window {
            Some(w) => w.bins(&a.x)?,
            None => 0..nx,
        };
        let values = &wigner.frame(t)[rows.start * nk..rows.end * nk];
        render(&path, WIGNER_SIZE, |root| {
            let limit = max_abs(values);
            let map = Heatmap {
                title: format!(
                    "Reduced one-body Wigner function f₁(x, k) at t = {} fs",
                    short(time)
                ),
                x_desc: "x (nm)".into(),
                y_desc: "k (1/nm)".into(),
                xs: &a.x[rows.clone()],
                ys: &a.k,
                values,
                scale: Scale::Diverging(limit),
                bar_desc: bar_label("f₁(x, k)", &wigner.units),
                square: false,
                diagonal: false,
            };
            map.draw(root).map(|_| ())
        })?;
        written.push(path);
    }

    if let Some(pair) = pair {
        for &t in &picks {
            let time = a.times()[t];
            let path = out.join(format!("pair_density_t{}fs.png", short(time)));
            let rows = match window {
                Some(w) => Some(w.bins(&a.x)?),
                None => None,
            };
            let (map, _) = pair_map(&a, pair, t, rows);
            render(&path, PAIR_SIZE, |root| {
                map.heatmap(&a).draw(root).map(|_| ())
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

/// The pair density of output `t` cut to a square window of x bins: `rows`, or the smallest
/// window holding [`PAIR_WINDOW_FRACTION`] of Σ|n₂| (then widened by one bin on each side).
/// Returns the map and the bin range used.
fn pair_map(
    a: &ResultFile,
    pair: &Series,
    t: usize,
    rows: Option<std::ops::Range<usize>>,
) -> (PairMap, std::ops::Range<usize>) {
    let n = a.x.len();
    let frame = pair.frame(t);
    let auto = rows.is_none();
    let rows = rows.unwrap_or_else(|| {
        let r = pair_window(frame, n, PAIR_WINDOW_FRACTION);
        r.start.saturating_sub(1)..(r.end + 1).min(n)
    });
    let mut values = Vec::with_capacity(rows.len() * rows.len());
    for i in rows.clone() {
        values.extend_from_slice(&frame[i * n + rows.start..i * n + rows.end]);
    }
    let map = PairMap {
        time: a.times()[t],
        units: pair.units.clone(),
        rows: rows.clone(),
        values,
        auto,
    };
    (map, rows)
}

/// A window of the pair density, ready to draw.
struct PairMap {
    time: f64,
    units: String,
    rows: std::ops::Range<usize>,
    values: Vec<f64>,
    auto: bool,
}

impl PairMap {
    fn heatmap<'a>(&'a self, a: &'a ResultFile) -> Heatmap<'a> {
        let finite = || self.values.iter().copied().filter(|v| v.is_finite());
        let hi = finite().fold(0.0, f64::max);
        let lo = finite().fold(0.0, f64::min);
        let hi = if hi > lo { hi } else { lo + 1.0 };
        let xs = &a.x[self.rows.clone()];
        let mut title = format!("Pair density n₂(x, x′) at t = {} fs", short(self.time));
        if self.auto && xs.len() < a.x.len() {
            title.push_str(&format!(
                " (the window holding {} % of ∫|n₂|)",
                short(100.0 * PAIR_WINDOW_FRACTION)
            ));
        }
        Heatmap {
            title,
            x_desc: "x (nm)".into(),
            y_desc: "x′ (nm)".into(),
            xs,
            ys: xs,
            values: &self.values,
            scale: Scale::Sequential(lo, hi),
            bar_desc: bar_label("n₂(x, x′)", &self.units),
            square: true,
            diagonal: true,
        }
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
    /// Mark the diagonal y = x (x = x′ of the pair density) with a dashed line.
    diagonal: bool,
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
        if self.diagonal {
            let lo = xe[0].max(ye[0]);
            let hi = xe[xe.len() - 1].min(ye[ye.len() - 1]);
            chart
                .draw_series(DashedLineSeries::new(
                    [(lo, lo), (hi, hi)],
                    6,
                    9,
                    RGBColor(colormap::MARK.0, colormap::MARK.1, colormap::MARK.2).stroke_width(1),
                ))?
                .label("x = x′")
                .legend(|(x, y)| {
                    PathElement::new(
                        vec![(x, y), (x + 20, y)],
                        RGBColor(colormap::MARK.0, colormap::MARK.1, colormap::MARK.2)
                            .stroke_width(1),
                    )
                });
            chart
                .configure_series_labels()
                .position(SeriesLabelPosition::UpperLeft)
                .background_style(WHITE.mix(0.85))
                .border_style(RGBColor(150, 150, 150))
                .label_font((FONT_NAME, TICK_PX))
                .draw()?;
        }
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

/// A panel of the history picture: what it shows and how its value axis is laid out.
#[derive(Clone, Copy)]
enum Panel {
    /// A scalar series of the file (dataset name, axis name, axis layout).
    Series(&'static str, &'static str, ValueAxis),
    /// The transmitted norm: `norm_right`, or for a file without it (the exact reference)
    /// `absorbed_right` + (1/N) ∫_{x>0} n dx, the same definition (docs/formats.md).
    Transmitted,
}

/// Norm-like and energy axes span at least 1 % of their value: changes below that are
/// round-off or far inside the error bars, and would otherwise take ten decimals.
const RELATIVE: ValueAxis = ValueAxis {
    min_relative_span: 0.01,
    integer: false,
};

const HISTORY: [Panel; 4] = [
    Panel::Series(names::NORM.name, names::NORM.name, RELATIVE),
    Panel::Transmitted,
    Panel::Series(names::ENERGY.name, names::ENERGY.name, RELATIVE),
    Panel::Series(
        names::SAMPLES.name,
        "sample count",
        ValueAxis {
            min_relative_span: 0.01,
            integer: true,
        },
    ),
];

/// A panel's values over time, their standard errors (if any) and units.
type PanelValues = (Vec<f64>, Option<Vec<f64>>, String);

impl Panel {
    fn desc(self) -> &'static str {
        match self {
            Panel::Series(_, d, _) => d,
            Panel::Transmitted => "transmitted norm",
        }
    }
    fn axis(self) -> ValueAxis {
        match self {
            Panel::Series(_, _, a) => a,
            Panel::Transmitted => RELATIVE,
        }
    }
    /// The panel's values, their standard errors (if any) and units, from one file.
    fn values(self, f: &Path, rf: &ResultFile) -> Result<Option<PanelValues>> {
        let with_error = |name: &str| -> Result<Option<PanelValues>> {
            let Some(s) = optional(rf, f, name, &[])? else {
                return Ok(None);
            };
            let err = band(optional(rf, f, &names::error_of(name), &[])?);
            Ok(Some((
                s.data.clone(),
                err.map(|e| e.data.clone()),
                s.units.clone(),
            )))
        };
        match self {
            Panel::Series(name, _, _) => with_error(name),
            Panel::Transmitted => {
                if rf.series.contains_key(names::NORM_RIGHT.name) {
                    return with_error(names::NORM_RIGHT.name);
                }
                let (Some(right), Some(density)) = (
                    optional(rf, f, names::ABSORBED_RIGHT.name, &[])?,
                    optional(rf, f, names::DENSITY.name, &[rf.x.len()])?,
                ) else {
                    return Ok(None);
                };
                // N from Σ n Δx = N × norm at t = 0 (docs/formats.md).
                let dx = if rf.x.len() > 1 {
                    rf.x[1] - rf.x[0]
                } else {
                    0.0
                };
                let Some(norm0) = optional(rf, f, names::NORM.name, &[])?
                    .and_then(|s| s.data.first().copied())
                    .filter(|v| *v > 0.0)
                else {
                    return Ok(None);
                };
                let n = (density.frame(0).iter().sum::<f64>() * dx / norm0).round();
                if n.is_nan() || n < 1.0 {
                    return Ok(None);
                }
                let dx = if rf.x.len() > 1 {
                    rf.x[1] - rf.x[0]
                } else {
                    0.0
                };
                let values = (0..rf.times().len())
                    .map(|t| {
                        let inside: f64 =
                            rf.x.iter()
                                .zip(density.frame(t))
                                .filter(|(x, _)| **x > 0.0)
                                .map(|(_, v)| v * dx)
                                .sum();
                        right.data[t] + inside / n
                    })
                    .collect();
                Ok(Some((values, None, right.units.clone())))
            }
        }
    }
}

/// Draw the scalar series against time, one panel each, the second file dashed on the same
/// axes; false (and nothing written) when there are none.
fn render_history(
    path: &Path,
    (file, a): (&Path, &ResultFile),
    b: Option<&(&Path, ResultFile)>,
) -> Result<bool> {
    let files: Vec<(&Path, &ResultFile)> = std::iter::once((file, a))
        .chain(b.map(|(p, r)| (*p, r)))
        .collect();
    let panels = history_panels(&files)?;
    if panels.is_empty() {
        return Ok(false);
    }
    render(path, HISTORY_SIZE, |root| {
        let shown: Vec<&str> = panels.iter().map(|p| p.0.desc()).collect();
        let mut title = match shown.as_slice() {
            [one] => format!("{one} against time"),
            [init @ .., last] => format!("{} and {last} against time", init.join(", ")),
            [] => unreachable!("panels is not empty"),
        };
        title[..1].make_ascii_uppercase();
        if panels.iter().any(|p| p.2.iter().any(|c| c.err.is_some())) {
            title.push_str(" (bands: ±1 s.e.)");
        }
        let area = root.titled(&title, (FONT_NAME, TITLE_PX))?;
        for (area, (p, units, curves)) in area.split_evenly((panels.len(), 1)).iter().zip(&panels) {
            draw_curves_on(
                area,
                "t (fs)",
                &with_units(p.desc(), units),
                curves,
                p.axis(),
            )?;
        }
        Ok(())
    })?;
    Ok(true)
}

/// The panels of the history picture with their units and curves (first file solid, second
/// dashed). The transmitted norm is shown only when the first file holds `norm_right` (a
/// Monte Carlo file; the quantity means something for a packet sent from the left).
fn history_panels(files: &[(&Path, &ResultFile)]) -> Result<Vec<(Panel, String, Vec<Curve>)>> {
    let (name_a, name_b) = names(files[0].0, files.get(1).map(|f| f.0));
    let a = files[0].1;
    let mut panels = Vec::new();
    for p in HISTORY {
        let mut curves = Vec::new();
        if matches!(p, Panel::Transmitted) && !a.series.contains_key(names::NORM_RIGHT.name) {
            continue;
        }
        let mut units = String::new();
        for (i, (f, rf)) in files.iter().enumerate() {
            if let Some((ys, err, u)) = p.values(f, rf)? {
                units = u;
                curves.push(Curve {
                    label: if i == 0 {
                        name_a.clone()
                    } else {
                        name_b.clone()
                    },
                    xs: rf.times().to_vec(),
                    ys,
                    err,
                    colour: colormap::line(i),
                    dashed: i == 1,
                });
            }
        }
        if !curves.is_empty() {
            panels.push((p, units, curves));
        }
    }
    Ok(panels)
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
    fn pair_window_is_the_smallest_square_holding_the_fraction() {
        // Mass only in bins 3..7 (both axes): the window is exactly that block.
        let n = 12;
        let mut v = vec![0.0; n * n];
        for i in 3..7 {
            for j in 3..7 {
                v[i * n + j] = if (i + j) % 2 == 0 { 1.0 } else { -2.0 };
            }
        }
        assert_eq!(pair_window(&v, n, 0.99), 3..7);
        // Uniform magnitude: the square of side s holds (s/n)² of the total, so 99 % needs
        // s ≥ n·sqrt(0.99) = 19.9 for n = 20, i.e. the whole frame; 81 % needs s = 18.
        let u = vec![1.0; 400];
        assert_eq!(pair_window(&u, 20, 0.99).len(), 20);
        assert_eq!(pair_window(&u, 20, 0.81).len(), 18);
        // Zero or NaN frames fall back to the whole range.
        assert_eq!(pair_window(&[0.0; 16], 4, 0.99), 0..4);
        assert_eq!(pair_window(&[f64::NAN; 16], 4, 0.99), 0..4);
    }

    #[test]
    fn window_option_parses_and_names_errors() {
        assert_eq!(
            Window::parse("-40:40.5").unwrap(),
            Window {
                min: -40.0,
                max: 40.5
            }
        );
        for bad in ["40", "a:3", "5:5", "6:2", "1:inf"] {
            let e = Window::parse(bad).unwrap_err().to_string();
            assert!(e.contains("--window") && e.contains(bad), "{e}");
        }
        let w = Window::parse("-3:3").unwrap();
        assert_eq!(w.bins(&[-5.0, -3.0, 0.0, 2.9, 4.0]).unwrap(), 1..4);
        assert!(
            w.bins(&[10.0, 11.0])
                .unwrap_err()
                .to_string()
                .contains("--window")
        );
    }

    #[test]
    fn history_shows_reference_scalars_and_its_transmitted_norm() {
        // Monte Carlo file: norm, norm_right, energy, particles with errors.
        let x = vec![-1.5, -0.5, 0.5, 1.5];
        let mut a = ResultFile::new(
            crate::io::results::OBSERVABLES_TYPE,
            "",
            x.clone(),
            vec![0.0],
        );
        // Reference: no norm_right; transmitted = absorbed_right + (1/N) Σ_{x>0} n Δx.
        let job = "[particles]\ncount = 2\nstatistics = \"fermion\"\n[domain]\nx_min = -2.0\nx_max = 2.0\nboundary = \"absorbing\"\n[numerics]\nend_time = 1.0\nsamples = 100\n";
        let mut b = ResultFile::new(
            crate::io::results::REFERENCE_TYPE,
            job,
            x.clone(),
            vec![0.0],
        );
        for (t, time) in [0.0, 1.0].into_iter().enumerate() {
            a.put(names::TIME, &[], &[time]);
            b.put(names::TIME, &[], &[time]);
            for d in [names::NORM, names::NORM_RIGHT, names::ENERGY] {
                a.put(d, &[], &[0.5]);
                a.push(&names::error_of(d.name), d.units, &[], &[0.01]);
            }
            a.put(names::SAMPLES, &[], &[1000.0]);
            b.put(names::NORM, &[], &[1.0]);
            b.put(names::ENERGY, &[], &[0.4]);
            b.put(names::ABSORBED_RIGHT, &[], &[0.1 * t as f64]);
            // ∫n dx = 2 at t = 0: N = 2.
            b.put(names::DENSITY, &[4], &[0.4, 0.6, 0.5, 0.5 + t as f64]);
        }
        let (pa, pb) = (Path::new("observables.h5"), Path::new("reference.h5"));
        let panels = history_panels(&[(pa, &a), (pb, &b)]).unwrap();
        let shown: Vec<(&str, usize)> = panels.iter().map(|p| (p.0.desc(), p.2.len())).collect();
        assert_eq!(
            shown,
            vec![
                ("norm", 2),
                ("transmitted norm", 2),
                ("energy", 2),
                ("sample count", 1)
            ]
        );
        let transmitted = &panels[1].2[1];
        // t = 0: (0.5 + 0.5)·1 nm / 2 = 0.5; t = 1: 0.1 + (0.5 + 1.5)/2 = 1.1.
        assert!((transmitted.ys[0] - 0.5).abs() < 1e-12 && (transmitted.ys[1] - 1.1).abs() < 1e-12);
        assert!(panels[1].2[0].err.is_some() && transmitted.err.is_none());
        assert!(panels[3].0.axis().integer);
    }

    #[test]
    fn value_axes_keep_a_sensible_span() {
        // A norm constant to round-off spans 1 % of its value, not 1e-9.
        let (lo, hi) = widen(0.999_999_995, 1.0, RELATIVE);
        assert!((hi - lo - 0.01).abs() < 1e-12 && lo < 0.999_999_995 && hi > 1.0);
        // Counts: at least 10 units, so integer ticks do not repeat.
        let count = ValueAxis {
            min_relative_span: 0.0,
            integer: true,
        };
        assert_eq!(widen(19988.0, 19988.0, count), (19983.0, 19993.0));
        // A range that is already wide stays as it is.
        assert_eq!(widen(0.2, 0.9, RELATIVE), (0.2, 0.9));
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
        let (map, _) = pair_map(&a, &a.series["pair_density"], 0, None);
        let (w, h) = map.heatmap(&a).draw(&root).unwrap();
        assert_eq!(w, h);
        assert!(w > PAIR_SIZE.1 / 2, "the plot fills the picture: {w}");
    }
}
