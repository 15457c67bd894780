//! spurion's colour maps, built (not copied) by the method of Kovesi (2015), "Good Colour Maps:
//! How to Design Them", arXiv:1509.03700: paths through CIELAB whose lightness changes at a
//! constant rate, so equal steps in value look like equal steps in colour.
//!
//! * Diverging (signed maps): supporting runs from a near-white centre (L* 97) to a deep amber
//!   (L* 42, hue 62°); opposing to a deep teal (L* 42, hue 215°). Both halves share one
//!   lightness ramp, so a value and its negative are equally prominent.
//! * Sequential (magnitude): L* falls linearly from 97 to 22 while the hue turns from straw to
//!   plum.
//!
//! Out-of-gamut colours are pulled in by lowering chroma at constant lightness and hue.

use std::sync::LazyLock;

const N: usize = 256;

/// The two maps as 256-entry sRGB tables.
pub struct Tables {
    /// Index 0 = most opposing, 128 ≈ zero, 255 = most supporting.
    pub diverging: [[u8; 3]; N],
    /// Index 0 = zero, 255 = largest magnitude.
    pub sequential: [[u8; 3]; N],
}

pub static TABLES: LazyLock<Tables> = LazyLock::new(build);

/// Colour of a signed value `t` in −1..1 (clamped): positive = supporting.
pub fn diverging(t: f32) -> [u8; 3] {
    let i = (((t.clamp(-1.0, 1.0) + 1.0) * 0.5) * (N - 1) as f32).round() as usize;
    TABLES.diverging[i]
}

/// Colour of a magnitude `t` in 0..1 (clamped).
pub fn sequential(t: f32) -> [u8; 3] {
    let i = (t.clamp(0.0, 1.0) * (N - 1) as f32).round() as usize;
    TABLES.sequential[i]
}

/// Supporting and opposing end colours, for legends and outlines.
pub fn supporting_colour() -> [u8; 3] {
    diverging(1.0)
}
pub fn opposing_colour() -> [u8; 3] {
    diverging(-1.0)
}

fn build() -> Tables {
    let mut diverging = [[0u8; 3]; N];
    let mut sequential = [[0u8; 3]; N];
    let (l_mid, l_end) = (97.0, 42.0);
    for (i, slot) in diverging.iter_mut().enumerate() {
        let t = i as f64 / (N - 1) as f64 * 2.0 - 1.0; // −1..1
        let a = t.abs();
        let l = l_mid + (l_end - l_mid) * a;
        let hue: f64 = if t >= 0.0 { 62.0 } else { 215.0 };
        let chroma = 62.0 * a;
        *slot = lch_to_srgb(l, chroma, hue);
    }
    for (i, slot) in sequential.iter_mut().enumerate() {
        let t = i as f64 / (N - 1) as f64;
        let l = 97.0 + (22.0 - 97.0) * t;
        let hue = 95.0 - 110.0 * t; // straw → orange → plum (wraps below 0°)
        let chroma = 18.0 + 50.0 * (std::f64::consts::PI * t).sin();
        *slot = lch_to_srgb(l, chroma, hue);
    }
    Tables { diverging, sequential }
}

/// CIE L*C*h° (D65) to 8-bit sRGB, lowering chroma until the colour is in gamut.
pub fn lch_to_srgb(l: f64, c: f64, h_deg: f64) -> [u8; 3] {
    let mut c = c;
    loop {
        let h = h_deg.to_radians();
        let rgb = lab_to_linear_srgb(l, c * h.cos(), c * h.sin());
        if rgb.iter().all(|v| (-1e-9..=1.0 + 1e-9).contains(v)) || c <= 0.0 {
            return rgb.map(|v| (linear_to_srgb(v.clamp(0.0, 1.0)) * 255.0).round() as u8);
        }
        c -= 0.5;
    }
}

/// CIELAB to linear sRGB (D65 white; sRGB primaries per IEC 61966-2-1: open standard).
fn lab_to_linear_srgb(l: f64, a: f64, b: f64) -> [f64; 3] {
    let (xn, yn, zn) = (0.95047, 1.0, 1.08883);
    let fy = (l + 16.0) / 116.0;
    let fx = fy + a / 500.0;
    let fz = fy - b / 200.0;
    let finv = |f: f64| if f > 6.0 / 29.0 { f * f * f } else { 3.0 * (6.0f64 / 29.0).powi(2) * (f - 4.0 / 29.0) };
    let (x, y, z) = (xn * finv(fx), yn * finv(fy), zn * finv(fz));
    [
        3.2404542 * x - 1.5371385 * y - 0.4985314 * z,
        -0.9692660 * x + 1.8760108 * y + 0.0415560 * z,
        0.0556434 * x - 0.2040259 * y + 1.0572252 * z,
    ]
}

fn linear_to_srgb(v: f64) -> f64 {
    if v <= 0.0031308 { 12.92 * v } else { 1.055 * v.powf(1.0 / 2.4) - 0.055 }
}

fn srgb_to_linear(v: f64) -> f64 {
    if v <= 0.04045 { v / 12.92 } else { ((v + 0.055) / 1.055).powf(2.4) }
}

/// CIE L* of an 8-bit sRGB colour (for tests and legends).
pub fn lightness(rgb: [u8; 3]) -> f64 {
    let [r, g, b] = rgb.map(|v| srgb_to_linear(v as f64 / 255.0));
    let y = 0.2126729 * r + 0.7151522 * g + 0.0721750 * b;
    if y > (6.0f64 / 29.0).powi(3) { 116.0 * y.cbrt() - 16.0 } else { y * (29.0f64 / 3.0).powi(3) }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn white_and_black_land_where_cielab_says() {
        // L* = 100, a = b = 0 is the D65 white point; L* = 0 is black (CIE 15 definition).
        assert_eq!(lch_to_srgb(100.0, 0.0, 0.0), [255, 255, 255]);
        assert_eq!(lch_to_srgb(0.0, 0.0, 0.0), [0, 0, 0]);
        assert!((lightness([119, 119, 119]) - 50.0).abs() < 0.3, "sRGB 119 grey is about L* 50 (from memory)");
    }

    #[test]
    fn lightness_changes_at_a_constant_rate() {
        // The property Kovesi (2015) asks of a uniform map: L* linear in the data value.
        let t = &*TABLES;
        for half in [0..128usize, 128..256] {
            let ls: Vec<f64> = half.clone().map(|i| lightness(t.diverging[i])).collect();
            let steps: Vec<f64> = ls.windows(2).map(|w| (w[1] - w[0]).abs()).collect();
            let mean = steps.iter().sum::<f64>() / steps.len() as f64;
            // 8-bit rounding limits how even the steps can be; half an L* unit is well below a
            // just-noticeable difference (about 1 ΔE; common practice).
            assert!(steps.iter().all(|s| (s - mean).abs() < 0.5), "uneven L* steps in {half:?}");
        }
        // Symmetric: a value and its negative have the same lightness.
        for i in 0..128 {
            assert!((lightness(t.diverging[i]) - lightness(t.diverging[255 - i])).abs() < 0.8);
        }
        let seq: Vec<f64> = t.sequential.iter().map(|c| lightness(*c)).collect();
        assert!(seq.windows(2).all(|w| w[1] < w[0] + 0.3), "sequential map must darken monotonically");
    }
}
