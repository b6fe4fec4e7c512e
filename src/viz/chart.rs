//! The chart toolkit every picture uses: the embedded font, text sizes and margins,
//! rendering to an 8-bit RGB PNG, line charts with error bands, tick and label formats.

use crate::viz::colormap::Rgb;
use anyhow::{Context, Result, bail};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::{FontStyle, register_font};
use std::path::Path;
use std::sync::OnceLock;

pub const FONT_NAME: &str = "sans-serif";
static FONT: &[u8] = include_bytes!("../../assets/DejaVuSans.ttf");

pub const TITLE_PX: u32 = 22;
pub const LABEL_PX: u32 = 17;
pub const TICK_PX: u32 = 14;
pub const MARGIN: u32 = 15;
pub const X_LABELS: u32 = 55;
pub const Y_LABELS: u32 = 90;
/// Width of the colour-bar column next to a heat map.
pub const BAR_COLUMN: u32 = 150;

pub type Area<'a> = DrawingArea<BitMapBackend<'a>, Shift>;

pub fn ensure_font() -> Result<()> {
    static LOADED: OnceLock<bool> = OnceLock::new();
    let ok = *LOADED.get_or_init(|| register_font(FONT_NAME, FontStyle::Normal, FONT).is_ok());
    if !ok {
        bail!("the embedded font cannot be loaded");
    }
    Ok(())
}

/// Render a picture into memory and write it as an 8-bit RGB PNG.
pub fn render(path: &Path, size: (u32, u32), draw: impl FnOnce(&Area) -> Result<()>) -> Result<()> {
    let mut buf = vec![255u8; size.0 as usize * size.1 as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut buf, size).into_drawing_area();
        root.fill(&WHITE)?;
        draw(&root).with_context(|| format!("cannot draw {}", path.display()))?;
        root.present()?;
    }
    write_png(path, size, &buf).with_context(|| format!("cannot write {}", path.display()))
}

pub fn write_png(path: &Path, size: (u32, u32), rgb: &[u8]) -> Result<()> {
    let file = std::io::BufWriter::new(std::fs::File::create(path)?);
    let mut enc = png::Encoder::new(file, size.0, size.1);
    enc.set_color(png::ColorType::Rgb);
    enc.set_depth(png::BitDepth::Eight);
    let mut w = enc.write_header()?;
    w.write_image_data(rgb)?;
    w.finish()?;
    Ok(())
}

/// A curve for a line plot.
pub struct Curve {
    pub label: String,
    pub xs: Vec<f64>,
    pub ys: Vec<f64>,
    /// One standard error per point, drawn as a band.
    pub err: Option<Vec<f64>>,
    pub colour: Rgb,
    pub dashed: bool,
}

/// How a value axis is laid out.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ValueAxis {
    /// The axis spans at least this fraction of the largest magnitude shown, so that a
    /// series constant to round-off is not blown up into many decimals (0: no floor).
    pub min_relative_span: f64,
    /// Whole numbers (counts): integer tick labels, the axis at least 10 units long.
    pub integer: bool,
}

/// Draw curves on one axes under `area`'s title.
pub fn draw_curves(area: &Area, x_desc: &str, y_desc: &str, curves: &[Curve]) -> Result<()> {
    draw_curves_on(area, x_desc, y_desc, curves, ValueAxis::default())
}

/// The value range [lo, hi] widened, about its middle, to the span `axis` asks for.
pub fn widen(lo: f64, hi: f64, axis: ValueAxis) -> (f64, f64) {
    let mut span = axis.min_relative_span * lo.abs().max(hi.abs());
    if axis.integer {
        span = span.max(10.0);
    }
    if hi - lo >= span {
        return (lo, hi);
    }
    let mid = 0.5 * (lo + hi);
    (mid - 0.5 * span, mid + 0.5 * span)
}

/// Draw curves on one axes under `area`'s title, the value axis laid out as `axis` says.
pub fn draw_curves_on(
    area: &Area,
    x_desc: &str,
    y_desc: &str,
    curves: &[Curve],
    axis: ValueAxis,
) -> Result<()> {
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
    (y0, y1) = widen(y0, y1, axis);
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
        .y_label_formatter(&|v: &f64| {
            if axis.integer {
                format!("{v:.0}")
            } else {
                ticks(y0 - pad, y1 + pad)(v)
            }
        })
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

pub fn max_abs(v: &[f64]) -> f64 {
    let m = v
        .iter()
        .copied()
        .filter(|x| x.is_finite())
        .fold(0.0, |m: f64, x| m.max(x.abs()));
    if m > 0.0 { m } else { 1.0 }
}

/// An axis name with its units; pure numbers (units "" or "1") get none.
pub fn with_units(what: &str, units: &str) -> String {
    if units.is_empty() || units == "1" {
        what.to_string()
    } else {
        format!("{what} ({units})")
    }
}

/// A colour-bar name with its units, which are always stated ("1" reads dimensionless).
pub fn bar_label(what: &str, units: &str) -> String {
    match units {
        "" => what.to_string(),
        "1" => format!("{what} (dimensionless)"),
        u => format!("{what} ({u})"),
    }
}

/// Tick labels for an axis over [lo, hi]: as many decimals as a tenth of the span needs,
/// scientific notation for very small or large magnitudes.
pub fn ticks(lo: f64, hi: f64) -> impl Fn(&f64) -> String {
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
