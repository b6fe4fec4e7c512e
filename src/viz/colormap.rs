//! Colour scales for the pictures, from the `colorous` crate (the d3 colour schemes):
//! `diverging` is for signed quantities (the Wigner function: ColorBrewer's red–blue, near
//! white at zero, blue below, red above; a colour-blind safe diverging scheme); `sequential` is
//! for non-negative ones (densities: viridis, perceptually uniform, colour-blind safe, its
//! lightness rising monotonically from zero to the top); `line` gives distinct colours for
//! curves on one axes.

/// An RGB colour, 8 bits per channel.
pub type Rgb = (u8, u8, u8);

/// Colour for values that are not finite.
pub const MISSING: Rgb = (128, 128, 128);

/// Curve colours: the Okabe–Ito palette (Okabe & Ito 2008, "Color Universal Design";
/// values from memory), without its yellow and black, which read poorly as thin lines
/// beside the black axes on white. Kept by hand because `colorous` has no categorical
/// scheme designed to stay distinct under the common colour-vision deficiencies
/// (its Category10 and Tableau10 put red and green side by side).
const LINES: [Rgb; 6] = [
    (0, 114, 178),   // blue
    (213, 94, 0),    // vermillion
    (0, 158, 115),   // bluish green
    (204, 121, 167), // reddish purple
    (230, 159, 0),   // orange
    (86, 180, 233),  // sky blue
];

/// A colour that stands out on every colour of [`sequential`] (for marks drawn over a
/// density map): the Okabe–Ito vermillion, absent from viridis.
pub const MARK: Rgb = (213, 94, 0);

fn rgb(c: colorous::Color) -> Rgb {
    (c.r, c.g, c.b)
}

/// Diverging scale on [−limit, limit]: near white at 0 (the lightest colour), blue below, red above; values beyond
/// the limit saturate.
pub fn diverging(value: f64, limit: f64) -> Rgb {
    if !value.is_finite() {
        return MISSING;
    }
    let limit = if limit > 0.0 { limit } else { 1.0 };
    let t = (0.5 + 0.5 * value / limit).clamp(0.0, 1.0);
    // colorous::RED_BLUE runs from red (t = 0) to blue (t = 1): reversed, so that positive
    // values are red.
    rgb(colorous::RED_BLUE.eval_continuous(1.0 - t))
}

/// Sequential scale on [lo, hi] (dark at lo, bright at hi).
pub fn sequential(value: f64, lo: f64, hi: f64) -> Rgb {
    if !value.is_finite() {
        return MISSING;
    }
    let span = if hi > lo { hi - lo } else { 1.0 };
    rgb(colorous::VIRIDIS.eval_continuous(((value - lo) / span).clamp(0.0, 1.0)))
}

/// The `i`-th curve colour (cycles).
pub fn line(i: usize) -> Rgb {
    LINES[i % LINES.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Relative luminance of an sRGB colour (linearised channels, Rec. 709 weights; the
    /// textbook sRGB definition, from memory).
    fn luminance(c: Rgb) -> f64 {
        let lin = |u: u8| {
            let v = u as f64 / 255.0;
            if v <= 0.04045 {
                v / 12.92
            } else {
                ((v + 0.055) / 1.055).powf(2.4)
            }
        };
        0.2126 * lin(c.0) + 0.7152 * lin(c.1) + 0.0722 * lin(c.2)
    }

    #[test]
    fn diverging_is_near_white_at_zero_and_signed() {
        // Zero is the lightest colour, and nearly neutral (a grey: channels within a few
        // levels of each other).
        let (r, g, b) = diverging(0.0, 2.0);
        assert!(r.abs_diff(g) < 8 && g.abs_diff(b) < 8, "{:?}", (r, g, b));
        let (r, _, b) = diverging(-2.0, 2.0);
        assert!(b > r, "negative end must be blue");
        let (r, _, b) = diverging(2.0, 2.0);
        assert!(r > b, "positive end must be red");
        assert_eq!(diverging(5.0, 2.0), diverging(2.0, 2.0), "saturates");
        assert_eq!(diverging(f64::NAN, 2.0), MISSING);
        // Darker with |value| on both sides.
        for side in [-1.0, 1.0] {
            let l: Vec<f64> = (0..=8)
                .map(|i| luminance(diverging(side * i as f64 / 4.0, 2.0)))
                .collect();
            assert!(l.windows(2).all(|w| w[1] < w[0]), "{side}: {l:?}");
        }
    }

    #[test]
    fn sequential_gets_brighter_monotonically() {
        let steps: Vec<f64> = (0..=50)
            .map(|i| luminance(sequential(i as f64, 0.0, 50.0)))
            .collect();
        assert!(steps.windows(2).all(|w| w[1] > w[0]), "{steps:?}");
        assert_eq!(sequential(f64::NAN, 0.0, 1.0), MISSING);
        assert_eq!(sequential(-1.0, 0.0, 1.0), sequential(0.0, 0.0, 1.0));
    }

    #[test]
    fn line_colours_are_distinct() {
        for i in 0..LINES.len() {
            for j in 0..i {
                assert_ne!(line(i), line(j));
            }
        }
        assert_eq!(line(LINES.len()), line(0), "cycles");
    }
}
