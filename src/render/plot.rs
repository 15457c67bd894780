//! Small line plots drawn straight into an RGB image, with the bundled font: axes with ticks,
//! anti-aliased polylines (solid or dashed), reference lines. Enough for the review panel's
//! curves; no system fonts, no plotting library.

use image::{Rgb, RgbImage};

use super::text::{draw_text, text_width};

pub const INK: Rgb<u8> = Rgb([30, 30, 34]);
pub const PAPER: Rgb<u8> = Rgb([250, 250, 248]);
const GRID: [u8; 3] = [226, 226, 222];

/// Blends `c` into the pixel at (x, y) with weight `a` (0..1); outside the image: nothing.
pub fn blend_pixel(img: &mut RgbImage, x: i64, y: i64, c: [u8; 3], a: f32) {
    if a <= 0.0 || x < 0 || y < 0 || x >= img.width() as i64 || y >= img.height() as i64 {
        return;
    }
    let p = img.get_pixel_mut(x as u32, y as u32);
    for k in 0..3 {
        p.0[k] = (p.0[k] as f32 * (1.0 - a) + c[k] as f32 * a).round() as u8;
    }
}

/// A filled rectangle blended with weight `a`.
pub fn fill_rect(img: &mut RgbImage, x: i64, y: i64, w: i64, h: i64, c: [u8; 3], a: f32) {
    for yy in y..y + h {
        for xx in x..x + w {
            blend_pixel(img, xx, yy, c, a);
        }
    }
}

/// A rectangle's outline, one pixel wide.
pub fn outline(img: &mut RgbImage, x: i64, y: i64, w: i64, h: i64, c: [u8; 3]) {
    for xx in x..x + w {
        blend_pixel(img, xx, y, c, 1.0);
        blend_pixel(img, xx, y + h - 1, c, 1.0);
    }
    for yy in y..y + h {
        blend_pixel(img, x, yy, c, 1.0);
        blend_pixel(img, x + w - 1, yy, c, 1.0);
    }
}

/// An anti-aliased segment of width `w`: each pixel is covered by how far its centre lies
/// within w/2 of the segment.
pub fn segment(img: &mut RgbImage, a: (f32, f32), b: (f32, f32), c: [u8; 3], w: f32) {
    let r = w / 2.0 + 1.0;
    let (x0, x1) = (a.0.min(b.0) - r, a.0.max(b.0) + r);
    let (y0, y1) = (a.1.min(b.1) - r, a.1.max(b.1) + r);
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let len2 = (dx * dx + dy * dy).max(1e-12);
    for y in y0.floor() as i64..=y1.ceil() as i64 {
        for x in x0.floor() as i64..=x1.ceil() as i64 {
            let (px, py) = (x as f32 + 0.5, y as f32 + 0.5);
            let t = (((px - a.0) * dx + (py - a.1) * dy) / len2).clamp(0.0, 1.0);
            let (qx, qy) = (a.0 + t * dx - px, a.1 + t * dy - py);
            let d = (qx * qx + qy * qy).sqrt();
            blend_pixel(img, x, y, c, (w / 2.0 + 0.5 - d).clamp(0.0, 1.0));
        }
    }
}

/// Draws `s` centred on x.
pub fn text_centred(img: &mut RgbImage, cx: f32, y: u32, size: f32, s: &str, ink: Rgb<u8>) {
    let x = (cx - text_width(s, size) / 2.0).max(0.0);
    draw_text(img, x as u32, y, size, s, ink);
}

/// Breaks `s` into lines no wider than `width` pixels at `size`.
pub fn wrap(s: &str, size: f32, width: f32) -> Vec<String> {
    let mut lines = vec![];
    let mut line = String::new();
    for word in s.split_whitespace() {
        let trial = if line.is_empty() { word.to_string() } else { format!("{line} {word}") };
        if text_width(&trial, size) > width && !line.is_empty() {
            lines.push(std::mem::take(&mut line));
            line = word.to_string();
        } else {
            line = trial;
        }
    }
    if !line.is_empty() {
        lines.push(line);
    }
    lines
}

/// About `n` round tick values covering lo..hi (steps of 1, 2 or 5 × 10^k; common practice).
pub fn ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    if !(hi > lo) || !lo.is_finite() || !hi.is_finite() {
        return vec![lo];
    }
    let raw = (hi - lo) / n.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0].iter().map(|m| m * mag).find(|s| *s >= raw).unwrap_or(10.0 * mag);
    let mut t = (lo / step).ceil() * step;
    let mut out = vec![];
    while t <= hi + step * 1e-9 {
        out.push(if t.abs() < step * 1e-9 { 0.0 } else { t });
        t += step;
    }
    out
}

/// A tick label: few digits, no trailing zeros.
pub fn tick_label(v: f64) -> String {
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if a >= 1000.0 || a < 0.001 {
        format!("{v:.0e}")
    } else {
        let s = format!("{v:.3}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

/// Where a legend goes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Corner {
    TopRight,
    BottomRight,
    BottomLeft,
}

/// A plot area inside an image: data ranges and how they map to pixels.
#[derive(Clone, Copy, Debug)]
pub struct Axes {
    /// The inner (data) rectangle in image pixels.
    pub x: f32,
    pub y: f32,
    pub w: f32,
    pub h: f32,
    pub xr: (f64, f64),
    pub yr: (f64, f64),
    pub log_x: bool,
    pub log_y: bool,
}

impl Axes {
    /// A plot in the box (left, top, width, height) with room kept for labels.
    pub fn in_box(left: u32, top: u32, width: u32, height: u32, xr: (f64, f64), yr: (f64, f64)) -> Axes {
        let (ml, mr, mt, mb) = (46.0, 10.0, 26.0, 34.0);
        Axes {
            x: left as f32 + ml,
            y: top as f32 + mt,
            w: width as f32 - ml - mr,
            h: height as f32 - mt - mb,
            xr,
            yr,
            log_x: false,
            log_y: false,
        }
    }

    fn t(v: f64, (lo, hi): (f64, f64), log: bool) -> f64 {
        if log { (v.max(1e-300).ln() - lo.ln()) / (hi.ln() - lo.ln()) } else { (v - lo) / (hi - lo) }
    }

    /// Image position of a data point.
    pub fn at(&self, vx: f64, vy: f64) -> (f32, f32) {
        let tx = Self::t(vx, self.xr, self.log_x);
        let ty = Self::t(vy, self.yr, self.log_y);
        (self.x + (tx as f32) * self.w, self.y + self.h - (ty as f32) * self.h)
    }

    fn clip(&self, p: (f32, f32)) -> (f32, f32) {
        (p.0.clamp(self.x - 2.0, self.x + self.w + 2.0), p.1.clamp(self.y - 2.0, self.y + self.h + 2.0))
    }

    /// Frame, grid lines at the ticks, tick labels, the title above and the x label below.
    pub fn frame(&self, img: &mut RgbImage, title: &str, xlabel: &str, xticks: &[f64], yticks: &[f64]) {
        for &t in xticks {
            let (px, _) = self.at(t, self.yr.0);
            segment(img, (px, self.y), (px, self.y + self.h), GRID, 1.0);
            text_centred(img, px, (self.y + self.h + 4.0) as u32, 11.0, &tick_label(t), INK);
        }
        for &t in yticks {
            let (_, py) = self.at(self.xr.0, t);
            segment(img, (self.x, py), (self.x + self.w, py), GRID, 1.0);
            let l = tick_label(t);
            draw_text(img, (self.x - 4.0 - text_width(&l, 11.0)).max(0.0) as u32, (py - 7.0).max(0.0) as u32, 11.0, &l, INK);
        }
        outline(img, self.x as i64, self.y as i64, self.w as i64 + 1, self.h as i64 + 1, [120, 120, 120]);
        draw_text(img, (self.x - 40.0).max(0.0) as u32, (self.y - 22.0).max(0.0) as u32, 13.0, title, INK);
        text_centred(img, self.x + self.w / 2.0, (self.y + self.h + 18.0) as u32, 11.0, xlabel, INK);
    }

    /// A polyline through data points, solid or dashed (`dash`: on and off length in pixels).
    pub fn polyline(&self, img: &mut RgbImage, pts: &[(f64, f64)], c: [u8; 3], width: f32, dash: Option<f32>) {
        let ps: Vec<(f32, f32)> = pts.iter().filter(|p| p.0.is_finite() && p.1.is_finite()).map(|p| self.clip(self.at(p.0, p.1))).collect();
        let mut travelled = 0.0f32;
        for w in ps.windows(2) {
            let (a, b) = (w[0], w[1]);
            let len = ((b.0 - a.0).powi(2) + (b.1 - a.1).powi(2)).sqrt();
            match dash {
                None => segment(img, a, b, c, width),
                Some(d) => {
                    // Walk the segment in pieces, drawing the "on" half of each 2d period.
                    let mut s = 0.0;
                    while s < len {
                        let phase = (travelled + s) % (2.0 * d);
                        let piece = (if phase < d { d - phase } else { 2.0 * d - phase }).min(len - s);
                        if phase < d {
                            let p = |u: f32| (a.0 + (b.0 - a.0) * u / len, a.1 + (b.1 - a.1) * u / len);
                            segment(img, p(s), p(s + piece), c, width);
                        }
                        s += piece.max(1e-3);
                    }
                }
            }
            travelled += len;
        }
    }

    /// A horizontal reference line at data value `v`, dashed.
    pub fn hline(&self, img: &mut RgbImage, v: f64, c: [u8; 3]) {
        self.polyline(img, &[(self.xr.0, v), (self.xr.1, v)], c, 1.2, Some(4.0));
    }

    /// A legend of (colour, dashed, text) rows in a corner of the plot.
    pub fn legend_at(&self, img: &mut RgbImage, rows: &[([u8; 3], bool, String)], corner: Corner) {
        let wmax = rows.iter().map(|r| text_width(&r.2, 11.0)).fold(0.0, f32::max);
        let x = match corner {
            Corner::BottomLeft => self.x + 8.0,
            _ => self.x + self.w - wmax - 34.0,
        };
        let y0 = match corner {
            Corner::TopRight => self.y + 6.0,
            _ => self.y + self.h - 6.0 - 14.0 * rows.len() as f32,
        };
        fill_rect(img, x as i64 - 4, y0 as i64 - 2, (wmax + 36.0) as i64, 14 * rows.len() as i64 + 4, PAPER.0, 0.85);
        for (i, (c, dashed, t)) in rows.iter().enumerate() {
            let y = y0 + 14.0 * i as f32 + 7.0;
            swatch(img, (x, y), (x + 22.0, y), *c, *dashed);
            draw_text(img, (x + 27.0) as u32, (y - 7.0) as u32, 11.0, t, INK);
        }
    }
}

/// A legend's sample of a line, solid or dashed.
fn swatch(img: &mut RgbImage, a: (f32, f32), b: (f32, f32), c: [u8; 3], dashed: bool) {
    if dashed {
        let at = |u: f32| (a.0 + (b.0 - a.0) * u, a.1 + (b.1 - a.1) * u);
        segment(img, at(0.0), at(0.3), c, 2.0);
        segment(img, at(0.6), at(0.9), c, 2.0);
    } else {
        segment(img, a, b, c, 2.0);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round_and_cover_the_range() {
        let t = ticks(0.0, 1.0, 5);
        assert_eq!(t.len(), 6);
        assert!(t.iter().zip([0.0, 0.2, 0.4, 0.6, 0.8, 1.0]).all(|(a, b)| (a - b).abs() < 1e-12), "{t:?}");
        // About six ticks over 4.27: a step of 1 (0.71 rounds up to 1).
        assert_eq!(ticks(-1.37, 2.9, 6), vec![-1.0, 0.0, 1.0, 2.0]);
        // About four: a step of 2 (1.07 rounds up to 2).
        assert_eq!(ticks(-1.37, 2.9, 4), vec![0.0, 2.0]);
        assert_eq!(tick_label(0.25), "0.25");
        assert_eq!(tick_label(2.0), "2");
    }

    #[test]
    fn a_segment_covers_the_pixels_on_it_and_not_far_ones() {
        let mut img = RgbImage::from_pixel(20, 20, Rgb([255, 255, 255]));
        segment(&mut img, (2.0, 10.5), (18.0, 10.5), [0, 0, 0], 2.0);
        assert_eq!(img.get_pixel(10, 10).0, [0, 0, 0]);
        assert_eq!(img.get_pixel(10, 3).0, [255, 255, 255]);
    }

    #[test]
    fn wrapping_keeps_words_whole() {
        let lines = wrap("one two three four five six seven", 13.0, 60.0);
        assert!(lines.len() > 1);
        assert_eq!(lines.join(" "), "one two three four five six seven");
    }
}
