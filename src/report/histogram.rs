//! Histogram images (distortion histograms of the report).
//!
//! In: values, a range `[lo, hi]`, a bin count and an image size. Out: the
//! bin counts and an RGB image of bars (heights relative to the fullest
//! bin), with a marker line at a reference value (0 for log area ratios,
//! 1 for angle distortion). What stays true: values outside the range go
//! to the end bins (so none is lost), NaN is skipped; numbers and axis
//! labels are written by the HTML around the image, not drawn into it.

use super::png::Image;

/// Counts of `values` in `bins` equal bins over `[lo, hi]` (outside values
/// clamped into the end bins; NaN skipped).
pub fn bin_counts(values: &[f64], lo: f64, hi: f64, bins: usize) -> Vec<usize> {
    let bins = bins.max(1);
    let mut c = vec![0usize; bins];
    let span = hi - lo;
    for &v in values {
        if v.is_nan() {
            continue;
        }
        let k = if span > 0.0 {
            ((v - lo) / span * bins as f64).floor()
        } else {
            0.0
        };
        let k = k.clamp(0.0, (bins - 1) as f64) as usize;
        c[k] += 1;
    }
    c
}

/// Style of a histogram image.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HistogramStyle {
    pub width: usize,
    pub height: usize,
    pub bar: [u8; 3],
    pub background: [u8; 3],
    pub axis: [u8; 3],
    /// Value where a marker line is drawn (`None`: no marker).
    pub marker: Option<f64>,
}

/// The histogram image of `values` over `[lo, hi]`.
pub fn histogram_image(
    values: &[f64],
    lo: f64,
    hi: f64,
    bins: usize,
    st: &HistogramStyle,
) -> Image {
    let (w, h) = (st.width.max(8), st.height.max(8));
    let mut img = Image::filled(w, h, st.background);
    let counts = bin_counts(values, lo, hi, bins);
    let max = counts.iter().copied().max().unwrap_or(0).max(1) as f64;
    let plot_h = h - 2;
    let bins = counts.len();
    for (k, &n) in counts.iter().enumerate() {
        let x0 = 1 + k * (w - 2) / bins;
        let x1 = (1 + (k + 1) * (w - 2) / bins).max(x0 + 1);
        let bh = ((n as f64 / max) * plot_h as f64).round() as usize;
        let bh = if n > 0 { bh.max(1) } else { 0 };
        img.fill_rect(x0, h - 1 - bh, x1, h - 1, st.bar);
    }
    // Base line.
    img.fill_rect(0, h - 1, w, h, st.axis);
    if let Some(m) = st.marker {
        if hi > lo && m >= lo && m <= hi {
            let x = 1 + (((m - lo) / (hi - lo)) * (w - 3) as f64).round() as usize;
            for y in (0..h - 1).step_by(2) {
                img.set(x, y, st.axis);
            }
        }
    }
    img
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_clamp_and_skip_nan() {
        let v = [-5.0, 0.0, 0.1, 0.49, 0.5, 0.99, 1.0, 7.0, f64::NAN];
        assert_eq!(bin_counts(&v, 0.0, 1.0, 2), vec![4, 4]);
        assert_eq!(bin_counts(&v, 0.0, 1.0, 4).iter().sum::<usize>(), 8);
    }

    #[test]
    fn the_fullest_bin_reaches_the_top() {
        let st = HistogramStyle {
            width: 42,
            height: 20,
            bar: [255, 0, 0],
            background: [255, 255, 255],
            axis: [0, 0, 0],
            marker: None,
        };
        // 40 px of plot in 4 bins: bin 2 has 3 values, bin 0 one.
        let img = histogram_image(&[0.1, 0.6, 0.6, 0.6], 0.0, 1.0, 4, &st);
        assert_eq!(img.get(25, 1), Some([255, 0, 0]), "full bar at the top");
        assert_eq!(img.get(5, 1), Some([255, 255, 255]), "short bar");
        assert_eq!(img.get(5, 17), Some([255, 0, 0]));
        assert_eq!(img.get(15, 17), Some([255, 255, 255]), "empty bin");
    }
}
