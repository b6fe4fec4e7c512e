//! PNG pictures of a result file: the reduced one-body Wigner function and the pair density
//! as heat maps at chosen output times, the one-body density at those times (optionally
//! beside a second file, with Monte Carlo error bands), and norm, energy and particle count
//! against time.
//!
//! Text is drawn with a font embedded in the binary, so pictures look the same on every
//! machine and need no system fonts.

use crate::colormap::{self, Rgb};
use crate::results::{ResultFile, Series};
use anyhow::{Context, Result, anyhow, bail};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::{FontStyle, register_font};
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

/// Size in pixels of each Wigner-function picture.
pub const WIGNER_SIZE: (u32, u32) = (960, 720);
/// Size in pixels of each pair-density picture.
pub const PAIR_SIZE: (u32, u32) = (900, 760);
/// Size in pixels of the density picture.
pub const DENSITY_SIZE: (u32, u32) = (960, 600);
/// Size in pixels of the norm/energy/particles picture.
pub const HISTORY_SIZE: (u32, u32) = (960, 840);

pub(crate) const FONT_NAME: &str = "sans-serif";
static FONT: &[u8] = include_bytes!("../assets/DejaVuSans.ttf");

pub(crate) const TITLE_PX: u32 = 22;
pub(crate) const LABEL_PX: u32 = 17;
pub(crate) const TICK_PX: u32 = 14;
const MARGIN: u32 = 15;
const X_LABELS: u32 = 55;
const Y_LABELS: u32 = 90;
/// Width of the colour-bar column next to a heat map.
const BAR_COLUMN: u32 = 150;

pub(crate) type Area<'a> = DrawingArea<BitMapBackend<'a>, Shift>;

pub(crate) fn ensure_font() -> Result<()> {
    static LOADED: OnceLock<bool> = OnceLock::new();
    let ok = *LOADED.get_or_init(|| register_font(FONT_NAME, FontStyle::Normal, FONT).is_ok());
    if !ok {
        bail!("the embedded font cannot be loaded");
    }
    Ok(())
}

/// Write the pictures of `file` into `out` (created if needed) and return their paths.
///
/// `times` (fs) are snapped to the nearest output times; by default the first, middle and
/// last outputs are drawn. `against` is a second result file whose density, norm and
/// energy are drawn on the same axes.
pub fn plot(
    file: &Path,
    out: &Path,
    times: Option<&[f64]>,
    against: Option<&Path>,
) -> Result<Vec<PathBuf>> {
    ensure_font()?;
    let a = ResultFile::read(file)?;
    let b = against
        .map(|p| ResultFile::read(p).map(|r| (p, r)))
        .transpose()?;
    let (nx, nk) = (a.x.len(), a.k.len());
    let wigner = required(&a, file, "wigner", &[nx, nk])?;
    let density = required(&a, file, "density", &[nx])?;
    let pair = optional(&a, file, "pair_density", &[nx, nx])?;
    let picks = snap_times(a.times(), times).with_context(|| format!("{}", file.display()))?;
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
    Ok(written)
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

/// Render a picture into memory and write it as an 8-bit RGB PNG.
pub(crate) fn render(
    path: &Path,
    size: (u32, u32),
    draw: impl FnOnce(&Area) -> Result<()>,
) -> Result<()> {
    let mut buf = vec![255u8; size.0 as usize * size.1 as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut buf, size).into_drawing_area();
        root.fill(&WHITE)?;
        draw(&root).with_context(|| format!("cannot draw {}", path.display()))?;
        root.present()?;
    }
    write_png(path, size, &buf).with_context(|| format!("cannot write {}", path.display()))
}

fn write_png(path: &Path, size: (u32, u32), rgb: &[u8]) -> Result<()> {
    let file = std::io::BufWriter::new(std::fs::File::create(path)?);
    let mut enc = png::Encoder::new(file, size.0, size.1);
    enc.set_color(png::ColorType::Rgb);
    enc.set_depth(png::BitDepth::Eight);
    let mut w = enc.write_header()?;
    w.write_image_data(rgb)?;
    w.finish()?;
    Ok(())
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

/// A curve for a line plot.
struct Curve {
    label: String,
    xs: Vec<f64>,
    ys: Vec<f64>,
    /// One standard error per point, drawn as a band.
    err: Option<Vec<f64>>,
    colour: Rgb,
    dashed: bool,
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

fn draw_density(
    root: &Area,
    (file, rf, density): (&Path, &ResultFile, &Series),
    b: Option<&(&Path, ResultFile)>,
    picks: &[usize],
) -> Result<()> {
    let err = optional(rf, file, "density_error", &[rf.x.len()])?;
    let (name_a, name_b) = names(file, b.map(|b| b.0));
    let times: Vec<String> = picks.iter().map(|&t| short(rf.times()[t])).collect();
    let mut title = format!("One-body density n(x) at t = {} fs", times.join(", "));
    let mut curves = Vec::new();
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
        let bd = required(brf, bfile, "density", &[brf.x.len()])?;
        let berr = optional(brf, bfile, "density_error", &[brf.x.len()])?;
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
    if err.is_some() || b.is_some_and(|(_, r)| r.series.contains_key("density_error")) {
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

/// Draw curves on one axes under `area`'s title.
fn draw_curves(area: &Area, x_desc: &str, y_desc: &str, curves: &[Curve]) -> Result<()> {
    let points = |c: &Curve| {
        c.xs.iter()
            .zip(&c.ys)
            .map(|(&x, &y)| (x, y))
            .collect::<Vec<_>>()
    };
    let (mut x0, mut x1, mut y0, mut y1) = (
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    );
    for c in curves {
        for (i, (&x, &y)) in c.xs.iter().zip(&c.ys).enumerate() {
            let e = c.err.as_ref().map_or(0.0, |e| e[i].abs());
            if x.is_finite() && y.is_finite() {
                (x0, x1) = (x0.min(x), x1.max(x));
                (y0, y1) = (y0.min(y - e), y1.max(y + e));
            }
        }
    }
    if x1.partial_cmp(&x0) != Some(std::cmp::Ordering::Greater) {
        (x0, x1) = (x0.min(0.0) - 1.0, x1.max(0.0) + 1.0);
    }
    if y1.partial_cmp(&y0) != Some(std::cmp::Ordering::Greater) {
        let m = if y0.is_finite() { y0 } else { 0.0 };
        (y0, y1) = (m - 1.0, m + 1.0);
    }
    let pad = 0.05 * (y1 - y0);
    let mut chart = ChartBuilder::on(area)
        .margin(MARGIN)
        .margin_right(2 * MARGIN)
        .x_label_area_size(X_LABELS)
        .y_label_area_size(Y_LABELS)
        .build_cartesian_2d(x0..x1, (y0 - pad)..(y1 + pad))?;
    chart
        .configure_mesh()
        .light_line_style(RGBColor(235, 235, 235))
        .bold_line_style(RGBColor(215, 215, 215))
        .x_desc(x_desc)
        .y_desc(y_desc)
        .axis_desc_style((FONT_NAME, LABEL_PX))
        .label_style((FONT_NAME, TICK_PX))
        .x_label_formatter(&ticks(x0, x1))
        .y_label_formatter(&ticks(y0 - pad, y1 + pad))
        .draw()?;
    for c in curves {
        if let Some(err) = &c.err {
            let upper =
                c.xs.iter()
                    .zip(&c.ys)
                    .zip(err)
                    .map(|((&x, &y), &e)| (x, y + e.abs()));
            let lower =
                c.xs.iter()
                    .zip(&c.ys)
                    .zip(err)
                    .map(|((&x, &y), &e)| (x, y - e.abs()));
            let mut outline: Vec<(f64, f64)> = upper.collect();
            outline.extend(lower.rev());
            let fill = RGBColor(c.colour.0, c.colour.1, c.colour.2)
                .mix(0.22)
                .filled();
            chart.draw_series(std::iter::once(Polygon::new(outline, fill)))?;
        }
    }
    for c in curves {
        let style = RGBColor(c.colour.0, c.colour.1, c.colour.2).stroke_width(2);
        let legend = move |(x, y): (i32, i32)| {
            let solid = if c.dashed { 7 } else { 20 };
            EmptyElement::at((x, y))
                + PathElement::new(vec![(0, 0), (solid, 0)], style)
                + PathElement::new(vec![(if c.dashed { 13 } else { 0 }, 0), (20, 0)], style)
        };
        if c.dashed {
            chart.draw_series(DashedLineSeries::new(points(c), 8, 5, style))?
        } else {
            chart.draw_series(LineSeries::new(points(c), style))?
        }
        .label(c.label.as_str())
        .legend(legend);
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperRight)
        .background_style(WHITE.mix(0.85))
        .border_style(RGBColor(150, 150, 150))
        .label_font((FONT_NAME, TICK_PX))
        .draw()?;
    Ok(())
}

/// Scalar series drawn against time, with their axis names.
const HISTORY: [(&str, &str); 3] = [
    ("norm", "norm"),
    ("energy", "energy"),
    ("particles", "particle count"),
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
                    let err = optional(rf, f, &format!("{name}_error"), &[])?;
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

fn max_abs(v: &[f64]) -> f64 {
    let m = v
        .iter()
        .copied()
        .filter(|x| x.is_finite())
        .fold(0.0, |m: f64, x| m.max(x.abs()));
    if m > 0.0 { m } else { 1.0 }
}

/// An axis name with its units; pure numbers (units "" or "1") get none.
fn with_units(what: &str, units: &str) -> String {
    if units.is_empty() || units == "1" {
        what.to_string()
    } else {
        format!("{what} ({units})")
    }
}

/// A colour-bar name with its units, which are always stated ("1" reads dimensionless).
fn bar_label(what: &str, units: &str) -> String {
    match units {
        "" => what.to_string(),
        "1" => format!("{what} (dimensionless)"),
        u => format!("{what} ({u})"),
    }
}

/// Tick labels for an axis over [lo, hi]: as many decimals as a tenth of the span needs,
/// scientific notation for very small or large magnitudes.
fn ticks(lo: f64, hi: f64) -> impl Fn(&f64) -> String {
    let step = (hi - lo).abs() / 10.0;
    let decimals = if step > 0.0 && step.is_finite() {
        (-step.log10()).ceil().clamp(0.0, 12.0) as usize
    } else {
        3
    };
    let big = lo.abs().max(hi.abs());
    let scientific = big >= 1e6 || (big > 0.0 && big < 1e-3);
    move |v: &f64| {
        if scientific {
            return format!("{v:.2e}");
        }
        let s = format!("{v:.decimals$}");
        match s.strip_prefix('-') {
            Some(rest) if rest.bytes().all(|b| b == b'0' || b == b'.') => rest.to_string(),
            _ => s,
        }
    }
}

/// A short decimal form of a number: at most three decimals, trailing zeros dropped,
/// scientific notation for very small or large magnitudes.
pub fn short(v: f64) -> String {
    let a = v.abs();
    if a != 0.0 && !(1e-3..1e5).contains(&a) {
        return format!("{v:.2e}");
    }
    let s = format!("{v:.3}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" { "0".into() } else { s.into() }
}

/// Size in pixels of a scaling picture.
pub const SCALING_SIZE: (u32, u32) = (960, 840);

/// A scaling series: parallel efficiency (top) and the longest time over ranks per phase
/// (bottom) against the cores used (ranks × threads). Rows that use one thread per rank
/// form one curve; rows with one rank and several threads another.
pub fn scaling_picture(path: &Path, title: &str, rows: &[crate::scaling::Row]) -> Result<()> {
    ensure_font()?;
    let cores = |r: &crate::scaling::Row| (r.ranks * r.threads) as f64;
    let by_ranks: Vec<&crate::scaling::Row> = rows.iter().filter(|r| r.threads == 1).collect();
    let by_threads: Vec<&crate::scaling::Row> = rows.iter().filter(|r| r.ranks == 1).collect();
    let mut eff = vec![Curve {
        label: "P ranks × 1 thread".into(),
        xs: by_ranks.iter().map(|r| cores(r)).collect(),
        ys: by_ranks.iter().map(|r| r.efficiency).collect(),
        err: None,
        colour: colormap::line(0),
        dashed: false,
    }];
    if rows.iter().any(|r| r.threads > 1) {
        eff.push(Curve {
            label: "1 rank × T threads".into(),
            xs: by_threads.iter().map(|r| cores(r)).collect(),
            ys: by_threads.iter().map(|r| r.efficiency).collect(),
            err: None,
            colour: colormap::line(1),
            dashed: false,
        });
    }
    let (lo, hi) = rows
        .iter()
        .map(cores)
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), c| {
            (a.min(c), b.max(c))
        });
    eff.push(Curve {
        label: "ideal".into(),
        xs: vec![lo, hi],
        ys: vec![1.0, 1.0],
        err: None,
        colour: (120, 120, 120),
        dashed: true,
    });
    let mut phases = vec![Curve {
        label: "wall".into(),
        xs: by_ranks.iter().map(|r| cores(r)).collect(),
        ys: by_ranks.iter().map(|r| r.wall_s).collect(),
        err: None,
        colour: (0, 0, 0),
        dashed: true,
    }];
    for (i, name) in crate::run::PHASES.iter().enumerate() {
        if by_ranks.iter().all(|r| r.phase_s[i] == 0.0) {
            continue;
        }
        phases.push(Curve {
            label: (*name).into(),
            xs: by_ranks.iter().map(|r| cores(r)).collect(),
            ys: by_ranks.iter().map(|r| r.phase_s[i]).collect(),
            err: None,
            colour: colormap::line(phases.len() - 1),
            dashed: phases.len() > 6,
        });
    }
    render(path, SCALING_SIZE, |root| {
        let area = root.titled(title, (FONT_NAME, TITLE_PX))?;
        let panels = area.split_evenly((2, 1));
        draw_curves(
            &panels[0],
            "cores (ranks × threads)",
            "parallel efficiency",
            &eff,
        )?;
        draw_curves(
            &panels[1],
            "cores (ranks × threads)",
            "longest time over ranks (s)",
            &phases,
        )?;
        Ok(())
    })
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
            crate::results::OBSERVABLES_TYPE,
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
