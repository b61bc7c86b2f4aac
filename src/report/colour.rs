//! Colour maps and colour bars of the report.
//!
//! In: values and a range. Out: sRGB colours and colour-bar images. Two
//! maps of our own: `Ember` (sequential, for thickness: dark slate through
//! teal and moss to straw, lightness rising monotonically) and `Tide`
//! (diverging, for t, effects and log area ratios: deep blue through a warm
//! off-white at zero to brick red, symmetric in lightness). Stops are
//! interpolated piecewise linearly in sRGB. What stays true: `t = 0` and
//! `t = 1` give the first and last stops exactly; values outside the range
//! are clamped; NaN gives the neutral [`MISSING`] grey. The rule of a
//! monotone lightness ramp for sequential data and a light, neutral centre
//! for diverging data follows Brewer (Cartography and Geographic
//! Information Systems 21, 1994) and Moreland (ISVC 2009).

use super::png::Image;

/// Colour of missing values (NaN).
pub const MISSING: [u8; 3] = [150, 150, 150];

/// A colour map: stops evenly spaced on `[0, 1]`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColourMap {
    /// Sequential: low = dark slate, high = straw.
    Ember,
    /// Diverging: low = deep blue, middle = off-white, high = brick red.
    Tide,
}

const EMBER: [[u8; 3]; 6] = [
    [34, 30, 64],
    [52, 74, 122],
    [42, 128, 138],
    [88, 168, 112],
    [176, 200, 98],
    [246, 228, 148],
];

const TIDE: [[u8; 3]; 7] = [
    [28, 62, 124],
    [64, 118, 180],
    [150, 186, 214],
    [244, 240, 230],
    [226, 160, 130],
    [190, 88, 62],
    [120, 30, 30],
];

impl ColourMap {
    fn stops(self) -> &'static [[u8; 3]] {
        match self {
            ColourMap::Ember => &EMBER,
            ColourMap::Tide => &TIDE,
        }
    }

    /// The colour at `t` in `[0, 1]` (clamped; NaN gives [`MISSING`]).
    pub fn at(self, t: f64) -> [u8; 3] {
        if t.is_nan() {
            return MISSING;
        }
        let s = self.stops();
        let t = t.clamp(0.0, 1.0) * (s.len() - 1) as f64;
        let i = (t.floor() as usize).min(s.len() - 2);
        let f = t - i as f64;
        let mut c = [0u8; 3];
        for k in 0..3 {
            let a = f64::from(s[i][k]);
            let b = f64::from(s[i + 1][k]);
            c[k] = (a + (b - a) * f).round().clamp(0.0, 255.0) as u8;
        }
        c
    }

    /// The colour of `v` on the range `[lo, hi]`.
    pub fn value(self, v: f64, lo: f64, hi: f64) -> [u8; 3] {
        if !v.is_finite() {
            return MISSING;
        }
        let span = hi - lo;
        if span.is_nan() || span <= 0.0 {
            return self.at(0.5);
        }
        self.at((v - lo) / span)
    }

    /// Hex code `#rrggbb` of the colour at `t`.
    pub fn hex(self, t: f64) -> String {
        let c = self.at(t);
        format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2])
    }
}

/// A horizontal colour bar `width x height` (low on the left), with a
/// one-pixel dark frame and a tick at the middle for diverging maps.
pub fn colour_bar(map: ColourMap, width: usize, height: usize) -> Image {
    let frame = [60, 60, 60];
    let mut img = Image::filled(width.max(3), height.max(3), frame);
    let (w, h) = (img.width, img.height);
    for x in 1..w - 1 {
        let c = map.at((x - 1) as f64 / (w - 3).max(1) as f64);
        for y in 1..h - 1 {
            img.set(x, y, c);
        }
    }
    if map == ColourMap::Tide {
        let mid = 1 + (w - 3) / 2;
        for y in 1..h / 4 {
            img.set(mid, y, frame);
        }
    }
    img
}

/// Percentile of finite values by linear interpolation between order
/// statistics (`q` in `[0, 1]`); NaN when there are none.
pub fn percentile(values: &[f64], q: f64) -> f64 {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    let pos = q.clamp(0.0, 1.0) * (v.len() - 1) as f64;
    let i = pos.floor() as usize;
    let f = pos - i as f64;
    match v.get(i + 1) {
        Some(&b) => v[i] + (b - v[i]) * f,
        None => v[i],
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lightness(c: [u8; 3]) -> f64 {
        // Relative luminance weights of ITU-R BT.709 on the sRGB values.
        0.2126 * f64::from(c[0]) + 0.7152 * f64::from(c[1]) + 0.0722 * f64::from(c[2])
    }

    #[test]
    fn endpoints_are_the_first_and_last_stops() {
        assert_eq!(ColourMap::Ember.at(0.0), EMBER[0]);
        assert_eq!(ColourMap::Ember.at(1.0), EMBER[5]);
        assert_eq!(ColourMap::Tide.at(0.0), TIDE[0]);
        assert_eq!(ColourMap::Tide.at(1.0), TIDE[6]);
        assert_eq!(
            ColourMap::Tide.at(0.5),
            TIDE[3],
            "zero is the neutral centre"
        );
        assert_eq!(ColourMap::Ember.at(-3.0), EMBER[0], "clamped below");
        assert_eq!(ColourMap::Ember.at(7.0), EMBER[5], "clamped above");
        assert_eq!(ColourMap::Ember.at(f64::NAN), MISSING);
        assert_eq!(ColourMap::Tide.value(-2.0, -2.0, 2.0), TIDE[0]);
        assert_eq!(ColourMap::Tide.value(0.0, -2.0, 2.0), TIDE[3]);
        assert_eq!(ColourMap::Ember.hex(0.0), "#221e40");
    }

    #[test]
    fn sequential_lightness_rises_and_diverging_is_lightest_in_the_middle() {
        let mut last = -1.0;
        for k in 0..=100 {
            let l = lightness(ColourMap::Ember.at(k as f64 / 100.0));
            assert!(
                l >= last - 1.0,
                "Ember lightness falls at {k}: {l} < {last}"
            );
            last = l;
        }
        let mid = lightness(ColourMap::Tide.at(0.5));
        for k in 0..=100 {
            let t = k as f64 / 100.0;
            if (t - 0.5).abs() > 0.02 {
                assert!(lightness(ColourMap::Tide.at(t)) < mid);
            }
        }
    }

    #[test]
    fn bar_runs_low_to_high() {
        let b = colour_bar(ColourMap::Ember, 102, 10);
        assert_eq!(b.get(1, 5), Some(EMBER[0]));
        assert_eq!(b.get(100, 5), Some(EMBER[5]));
        assert_eq!(b.get(0, 5), Some([60, 60, 60]));
    }

    #[test]
    fn percentiles_interpolate() {
        let v = [4.0, 1.0, f64::NAN, 3.0, 2.0];
        assert_eq!(percentile(&v, 0.0), 1.0);
        assert_eq!(percentile(&v, 1.0), 4.0);
        assert_eq!(percentile(&v, 0.5), 2.5);
        assert!(percentile(&[], 0.5).is_nan());
    }
}
