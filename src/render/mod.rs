//! Pictures of readings, for files and reports (the GUI turns the same RGBA buffers into
//! textures): the map alone with a legend, and the map tinted over the image.

pub mod colour;
pub mod plot;
mod review;
mod text;

use std::path::Path;

use anyhow::{Context, Result};
use image::{Rgb, RgbImage};
use ndarray::{Array2, Array3};
use crate::sign::Sign;

pub use colour::{diverging, opposing_colour, sequential, supporting_colour};
pub use review::review_panel;
pub use text::{draw_text, text_width};

/// The share of |values| that sets the colour scale's end: the 99.5th percentile, so a few
/// extreme pixels do not wash the rest out (common practice for saliency display).
pub const SCALE_PERCENTILE: f64 = 99.5;

/// Symmetric colour-scale end for a map: the `SCALE_PERCENTILE` of |values| (never zero).
pub fn robust_scale(map: &Array2<f32>) -> f32 {
    let mut v: Vec<f32> = map.iter().map(|x| x.abs()).filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return 1.0;
    }
    let k = (((SCALE_PERCENTILE / 100.0) * (v.len() - 1) as f64).round() as usize).min(v.len() - 1);
    let (_, kth, _) = v.select_nth_unstable_by(k, |a, b| a.partial_cmp(b).unwrap());
    let s = *kth;
    if s > 0.0 { s } else { v.iter().cloned().fold(0.0, f32::max).max(f32::MIN_POSITIVE) }
}

/// Colour and strength (0..1) of one map value under a sign view and scale.
pub fn shade(v: f32, scale: f32, sign: Sign) -> ([u8; 3], f32) {
    let t = v / scale;
    match sign {
        Sign::Supporting => {
            let a = t.clamp(0.0, 1.0);
            (diverging(a), a)
        }
        Sign::Opposing => {
            let a = (-t).clamp(0.0, 1.0);
            (diverging(-a), a)
        }
        Sign::Both => (diverging(t), t.abs().min(1.0)),
        Sign::Magnitude => (sequential(t.abs()), t.abs().min(1.0)),
    }
}

/// The map alone, one colour per pixel.
pub fn map_rgb(map: &Array2<f32>, scale: f32, sign: Sign) -> RgbImage {
    let (h, w) = map.dim();
    RgbImage::from_fn(w as u32, h as u32, |x, y| Rgb(shade(map[[y as usize, x as usize]], scale, sign).0))
}

/// The image in gray or colour as 8-bit RGB.
pub fn picture_rgb(pixels: &Array3<f32>) -> RgbImage {
    let (h, w, c) = pixels.dim();
    RgbImage::from_fn(w as u32, h as u32, |x, y| {
        let (x, y) = (x as usize, y as usize);
        let g = |k: usize| (pixels[[y, x, k.min(c - 1)]].clamp(0.0, 1.0) * 255.0).round() as u8;
        Rgb([g(0), g(1), g(2)])
    })
}

/// The map tinted over the image: each pixel's colour is mixed in by `opacity` × its strength,
/// so pixels without attribution show the image as it is. The image is dimmed slightly so the
/// tint reads on bright film.
pub fn tint(pixels: &Array3<f32>, map: &Array2<f32>, scale: f32, sign: Sign, opacity: f32) -> RgbImage {
    let base = picture_rgb(pixels);
    let (h, w) = map.dim();
    assert_eq!((h as u32, w as u32), (base.height(), base.width()), "map and image must share a grid");
    RgbImage::from_fn(w as u32, h as u32, |x, y| {
        let b = base.get_pixel(x, y).0;
        let (c, a) = shade(map[[y as usize, x as usize]], scale, sign);
        let a = (opacity * a.powf(0.7)).clamp(0.0, 1.0);
        Rgb(std::array::from_fn(|k| {
            let bv = b[k] as f32 * 0.85;
            (bv * (1.0 - a) + c[k] as f32 * a).round() as u8
        }))
    })
}

/// The value (in units of the scale, −1..1) at position `f` of a legend ramp, where `f` runs
/// from 0 at the ramp's low end to 1 at its high end. Every legend (files, the inspector) draws
/// its ramp from this.
pub fn ramp_value(sign: Sign, f: f32) -> f32 {
    match sign {
        Sign::Both => 2.0 * f - 1.0,
        Sign::Opposing => -f,
        _ => f,
    }
}

/// What a legend writes at its two ends: the values and the words, (low, high).
pub struct LegendEnds {
    pub low: String,
    pub high: String,
    pub low_word: &'static str,
    pub high_word: &'static str,
}

/// The end labels of a legend for `sign` on a scale ending at `scale`. Opposing ramps run from 0
/// (low) to the most opposing value (high), like the ramp of [`ramp_value`].
pub fn legend_ends(sign: Sign, scale: f32) -> LegendEnds {
    let (low, high, low_word, high_word) = match sign {
        Sign::Both => (format_value(-scale, true), format_value(scale, true), "opposing", "supporting"),
        Sign::Supporting => ("0".to_string(), format_value(scale, true), "", "supporting"),
        Sign::Opposing => ("0".to_string(), format_value(-scale, true), "", "opposing"),
        Sign::Magnitude => ("0".to_string(), format_value(scale, false), "", "magnitude"),
    };
    LegendEnds { low, high, low_word, high_word }
}

/// Legend strip: a colour bar with values and the meaning of its ends.
fn legend(height: u32, scale: f32, sign: Sign) -> RgbImage {
    let w = 150u32;
    let mut img = RgbImage::from_pixel(w, height, Rgb([250, 250, 248]));
    let (top, bottom) = (34u32, height.saturating_sub(34).max(40));
    let bar_x = 12u32;
    for y in top..bottom {
        let f = 1.0 - (y - top) as f32 / (bottom - top).max(1) as f32; // 1 at top, 0 at bottom
        let c = shade(ramp_value(sign, f) * scale, scale, sign).0;
        for x in bar_x..bar_x + 22 {
            img.put_pixel(x, y, Rgb(c));
        }
    }
    let ink = Rgb([30, 30, 34]);
    let ends = legend_ends(sign, scale);
    draw_text(&mut img, bar_x + 28, top - 4, 13.0, &ends.high, ink);
    draw_text(&mut img, bar_x + 28, bottom - 10, 13.0, &ends.low, ink);
    if sign == Sign::Both {
        draw_text(&mut img, bar_x + 28, (top + bottom) / 2 - 6, 13.0, "0", ink);
    }
    draw_text(&mut img, 8, 8, 13.0, ends.high_word, ink);
    if !ends.low_word.is_empty() {
        draw_text(&mut img, 8, height - 22, 13.0, ends.low_word, ink);
    }
    img
}

/// A map value for legends and readouts: three decimals in the usual range, else scientific;
/// `signed` writes a leading + on positive values.
pub fn format_value(v: f32, signed: bool) -> String {
    match (v == 0.0, v.abs() >= 0.01 && v.abs() < 1000.0, signed) {
        (true, _, _) => "0".into(),
        (false, true, true) => format!("{v:+.3}"),
        (false, true, false) => format!("{v:.3}"),
        (false, false, true) => format!("{v:+.2e}"),
        (false, false, false) => format!("{v:.2e}"),
    }
}

/// A number with four decimals and a real minus sign (U+2212), as people write it.
pub fn number4(v: f64) -> String {
    let t = format!("{v:.4}");
    match t.strip_prefix('-') {
        Some(m) if m.trim_matches(|c| c == '0' || c == '.').is_empty() => m.to_string(),
        Some(m) => format!("−{m}"),
        None => t,
    }
}

/// "a − b" written out: a negative b in parentheses ("0.5539 − (−1.3992)"), never "− −".
pub fn difference_text(a: f64, b: f64) -> String {
    let (ta, tb) = (number4(a), number4(b));
    if tb.starts_with('−') { format!("{ta} − ({tb})") } else { format!("{ta} − {tb}") }
}

/// Joins a picture and a legend side by side, scaling small pictures up (nearest) so the
/// legend's text fits.
fn with_legend(pic: RgbImage, scale: f32, sign: Sign) -> RgbImage {
    let up = (320 / pic.height().max(1)).clamp(1, 8);
    let pic = if up > 1 {
        image::imageops::resize(&pic, pic.width() * up, pic.height() * up, image::imageops::FilterType::Nearest)
    } else {
        pic
    };
    let lg = legend(pic.height().max(200), scale, sign);
    let mut out = RgbImage::from_pixel(pic.width() + lg.width(), pic.height().max(lg.height()), Rgb([250, 250, 248]));
    image::imageops::overlay(&mut out, &pic, 0, 0);
    image::imageops::overlay(&mut out, &lg, pic.width() as i64, 0);
    out
}

/// `map.png`: the map alone, with its legend.
pub fn write_map_png(path: &Path, map: &Array2<f32>, sign: Sign) -> Result<()> {
    let s = robust_scale(map);
    save(path, &with_legend(map_rgb(map, s, sign), s, sign))
}

/// `overlay.png`: the map tinted over the image, with its legend.
pub fn write_overlay_png(path: &Path, pixels: &Array3<f32>, map: &Array2<f32>, sign: Sign, opacity: f32) -> Result<()> {
    let s = robust_scale(map);
    save(path, &with_legend(tint(pixels, map, s, sign, opacity), s, sign))
}

pub fn save(path: &Path, img: &RgbImage) -> Result<()> {
    img.save(path).with_context(|| format!("cannot write {}", path.display()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_difference_of_negative_numbers_reads_as_written_by_hand() {
        assert_eq!(difference_text(0.5539, -1.3992), "0.5539 − (−1.3992)");
        assert_eq!(difference_text(-0.25, 0.5), "−0.2500 − 0.5000");
        assert_eq!(number4(-0.00001), "0.0000", "no negative zero");
    }

    #[test]
    fn robust_scale_ignores_a_lone_outlier() {
        let mut m = Array2::<f32>::from_elem((20, 20), 1.0);
        m[[0, 0]] = 1000.0;
        assert_eq!(robust_scale(&m), 1.0);
        assert_eq!(robust_scale(&Array2::zeros((3, 3))), f32::MIN_POSITIVE);
    }

    #[test]
    fn tint_leaves_unattributed_pixels_alone_and_colours_the_rest() {
        let px = Array3::<f32>::from_elem((2, 2, 1), 0.5);
        let mut m = Array2::<f32>::zeros((2, 2));
        m[[0, 1]] = 2.0;
        m[[1, 0]] = -2.0;
        let img = tint(&px, &m, 2.0, Sign::Supporting, 1.0);
        let dim = (0.5f32 * 255.0).round() * 0.85;
        assert_eq!(img.get_pixel(0, 0).0, [dim.round() as u8; 3]);
        assert_eq!(img.get_pixel(1, 0).0, supporting_colour());
        assert_eq!(img.get_pixel(0, 1).0, [dim.round() as u8; 3], "opposing pixels are not shown under 'supporting'");
    }
}
