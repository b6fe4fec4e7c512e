//! Colour scales for the pictures: piecewise-linear interpolation between a few anchor
//! colours. `diverging` is for signed quantities (white at zero, blue below, red above);
//! `sequential` is for non-negative ones (light at zero, dark at the top); `line` gives
//! distinct colours for curves on one axes.

/// An RGB colour, 8 bits per channel.
pub type Rgb = (u8, u8, u8);

/// Colour for values that are not finite.
pub const MISSING: Rgb = (128, 128, 128);

const DIVERGING: [Rgb; 5] = [
    (33, 62, 140),
    (120, 165, 215),
    (247, 247, 247),
    (230, 130, 100),
    (150, 20, 35),
];

const SEQUENTIAL: [Rgb; 5] = [
    (255, 253, 230),
    (250, 205, 120),
    (225, 110, 60),
    (150, 35, 80),
    (40, 10, 60),
];

const LINES: [Rgb; 6] = [
    (31, 100, 180),
    (215, 95, 20),
    (40, 150, 70),
    (190, 40, 50),
    (120, 80, 170),
    (110, 110, 110),
];

fn interpolate(anchors: &[Rgb], t: f64) -> Rgb {
    if !t.is_finite() {
        return MISSING;
    }
    let s = t.clamp(0.0, 1.0) * (anchors.len() - 1) as f64;
    let i = (s.floor() as usize).min(anchors.len() - 2);
    let f = s - i as f64;
    let mix = |a: u8, b: u8| (a as f64 + (b as f64 - a as f64) * f).round() as u8;
    let (a, b) = (anchors[i], anchors[i + 1]);
    (mix(a.0, b.0), mix(a.1, b.1), mix(a.2, b.2))
}

/// Diverging scale on [−limit, limit]: white at 0, values beyond the limit saturate.
pub fn diverging(value: f64, limit: f64) -> Rgb {
    let limit = if limit > 0.0 { limit } else { 1.0 };
    interpolate(&DIVERGING, 0.5 + 0.5 * value / limit)
}

/// Sequential scale on [lo, hi].
pub fn sequential(value: f64, lo: f64, hi: f64) -> Rgb {
    let span = if hi > lo { hi - lo } else { 1.0 };
    interpolate(&SEQUENTIAL, (value - lo) / span)
}

/// The `i`-th curve colour (cycles).
pub fn line(i: usize) -> Rgb {
    LINES[i % LINES.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn diverging_is_white_at_zero_and_signed() {
        assert_eq!(diverging(0.0, 2.0), (247, 247, 247));
        let (r, _, b) = diverging(-2.0, 2.0);
        assert!(b > r, "negative end must be blue");
        let (r, _, b) = diverging(2.0, 2.0);
        assert!(r > b, "positive end must be red");
        assert_eq!(diverging(5.0, 2.0), diverging(2.0, 2.0), "saturates");
    }

    #[test]
    fn sequential_gets_darker() {
        let lum = |c: Rgb| c.0 as u32 + c.1 as u32 + c.2 as u32;
        let steps: Vec<u32> = (0..=10)
            .map(|i| lum(sequential(i as f64, 0.0, 10.0)))
            .collect();
        assert!(steps.windows(2).all(|w| w[1] < w[0]), "{steps:?}");
        assert_eq!(sequential(f64::NAN, 0.0, 1.0), MISSING);
    }
}
