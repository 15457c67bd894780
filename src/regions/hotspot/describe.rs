//! What tells a mark from anatomy, measured on one hotspot.
//!
//! - **place**: the gap from the hotspot's box to the nearest image edge; corner, border or
//!   interior; the share of its pixels outside the foreground. The foreground is estimated
//!   generically: Otsu's threshold on the image shrunk and median-filtered, the class
//!   that holds less of the image's outermost ring being the foreground (a body or object lies
//!   inside the frame; background reaches its edges). When Otsu separates the two poorly
//!   (separability η under 0.5) the whole image counts as foreground.
//! - **ink**: the pixels near the hotspot that stand out from its surroundings (by at least a
//!   fifth of the image's value range from the median of a ring around it).
//! - **saturation**: the share of the hotspot's ink at the image's extremes (within 8 % of the
//!   range from its minimum or maximum): burned-in and drawn marks are written at full white or
//!   black, anatomy seldom is.
//! - **edge sharpness**: the 90th percentile of the gradient magnitude on the ink's outline,
//!   per pixel, as a fraction of the image's range: drawn pixels end abruptly.
//! - **stroke thinness**: 1 − stroke width / half the ink's size, the width from the ink's
//!   distance transform: letters, rings and arrows are thin, organs and lesions are not.
//! - **area**: the hotspot's share of the image.

use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::morph;

/// Side of the appearance patch.
pub const APPEARANCE_SIDE: usize = 8;
/// Length of the appearance vector: the patch, then six figures (see [`appearance`]).
pub const APPEARANCE_LEN: usize = APPEARANCE_SIDE * APPEARANCE_SIDE + 6;

/// Where a hotspot lies.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Place {
    /// Near two edges that meet.
    Corner,
    /// Near one edge (or two opposite ones).
    Border,
    Interior,
}

impl Place {
    pub fn name(self) -> &'static str {
        match self {
            Place::Corner => "corner",
            Place::Border => "border",
            Place::Interior => "interior",
        }
    }
}

/// The measurements of one hotspot.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Descriptor {
    /// Centre of the box, `[x, y]` as fractions of the width and height.
    pub centre: [f32; 2],
    /// The box `[x0, y0, x1, y1]` as fractions of the width and height.
    pub box_fraction: [f32; 4],
    pub place: Place,
    /// Gap from the box to the nearest image edge, as a fraction of the shorter side.
    pub edge_distance: f32,
    /// Share of the hotspot's pixels outside the estimated foreground.
    pub outside_foreground: f32,
    /// Share of the hotspot's ink at the image's extremes.
    pub saturation: f32,
    /// Step across the ink's outline per pixel, as a fraction of the image's range.
    pub edge_sharpness: f32,
    /// Stroke width of the ink, pixels.
    pub stroke_width_px: f32,
    /// 1 − stroke width / half the ink's size, 0..1.
    pub thinness: f32,
    /// The hotspot's share of the image.
    pub area_fraction: f64,
}

impl Descriptor {
    /// 0..1. A mark has sharp edges *and* at least one of: pixels at the extremes, thin strokes,
    /// a place outside the body (or in a corner, where tags are put; less so on a border).
    /// Sharpness gates because smooth things are what anatomy is made of in these images; the
    /// rest raises it from 0.4 to 1.
    pub fn mark_likeness(&self) -> f32 {
        let ramp = |v: f32, lo: f32, hi: f32| ((v - lo) / (hi - lo)).clamp(0.0, 1.0);
        let sharp = ramp(self.edge_sharpness, 0.08, 0.25);
        let sat = ramp(self.saturation, 0.0, 0.5);
        let thin = ramp(self.thinness, 0.3, 0.7);
        let place = match self.place {
            Place::Corner => 0.6,
            Place::Border => 0.3,
            Place::Interior => 0.0,
        };
        let place = f32::max(place, ramp(self.outside_foreground, 0.2, 0.8));
        sharp * (0.4 + 0.6 * sat.max(thin).max(place))
    }
}

/// What every hotspot of one image is measured against.
pub(super) struct Context<'a> {
    image: &'a Array2<f32>,
    lo: f32,
    hi: f32,
    /// Robust range (0.5 to 99.5 percentile), at least 1e-3.
    range: f32,
    grad: Array2<f32>,
    foreground: Option<Array2<bool>>,
}

impl<'a> Context<'a> {
    pub fn new(image: &'a Array2<f32>) -> Context<'a> {
        let (lo, hi) = image.iter().fold((f32::INFINITY, f32::NEG_INFINITY), |(l, h), &v| (l.min(v), h.max(v)));
        let mut v: Vec<f32> = image.iter().copied().collect();
        let p_lo = morph::quantile(&mut v, 0.005).unwrap_or(lo);
        let p_hi = morph::quantile(&mut v, 0.995).unwrap_or(hi);
        let range = (p_hi - p_lo).max(hi - lo).max(1e-3);
        Context { image, lo, hi, range, grad: morph::gradient(image), foreground: foreground(image) }
    }

    /// The descriptor of a hotspot `mask` with box `b`; the ink around it and the strokes
    /// among that ink (both on the whole grid, true only near the hotspot).
    pub fn describe(&self, mask: &Array2<bool>, b: [usize; 4]) -> (Descriptor, Array2<bool>, Array2<bool>) {
        let (h, w) = mask.dim();
        let side = h.min(w) as f32;
        let area = mask.iter().filter(|&&m| m).count();
        // Ink: within the box grown by its size (at least an eighth of the shorter side), on the
        // hotspot's side of the median of the ring just outside it (brighter or darker, as most
        // of the hotspot's own standing-out pixels are), by at least a fifth of the range.
        let size = (b[2] - b[0]).max(b[3] - b[1]);
        let grow = size.max((0.12 * side).round() as usize).max(3);
        let win = [b[0].saturating_sub(grow), b[1].saturating_sub(grow), (b[2] + grow).min(w), (b[3] + grow).min(h)];
        let near = morph::dilate(mask, 2);
        let far = morph::dilate(mask, 2 + (size / 2).clamp(3, 6));
        let mut ring: Vec<f32> = vec![];
        for y in win[1]..win[3] {
            for x in win[0]..win[2] {
                if far[[y, x]] && !near[[y, x]] {
                    ring.push(self.image[[y, x]]);
                }
            }
        }
        let bg = morph::quantile(&mut ring, 0.5).unwrap_or_else(|| self.image.mean().unwrap_or(0.0));
        let step = 0.2 * self.range;
        let (mut up, mut down) = (0usize, 0usize);
        for (p, &m) in near.indexed_iter() {
            if m {
                let d = self.image[p] - bg;
                up += (d >= step) as usize;
                down += (d <= -step) as usize;
            }
        }
        let bright = up >= down;
        let stands_out = |v: f32| if bright { v - bg >= step } else { bg - v >= step };
        let mut ink = Array2::from_elem((h, w), false);
        for y in win[1]..win[3] {
            for x in win[0]..win[2] {
                ink[[y, x]] = stands_out(self.image[[y, x]]);
            }
        }
        let strokes = self.strokes(win, bright, step);
        // The hotspot's own ink: what lies in it or right next to it.
        let own: Vec<(usize, usize)> = ink.indexed_iter().filter(|(p, i)| **i && near[*p]).map(|(p, _)| p).collect();
        let margin = 0.08 * (self.hi - self.lo);
        let extreme = |v: f32| v >= self.hi - margin || v <= self.lo + margin;
        let saturation = if own.len() >= 3 {
            own.iter().filter(|&&p| extreme(self.image[p])).count() as f32 / own.len() as f32
        } else {
            0.0
        };
        // The outline of the own ink: ink pixels with a 4-neighbour that is not ink.
        let is_ink = |y: isize, x: isize| y >= 0 && x >= 0 && (y as usize) < h && (x as usize) < w && ink[[y as usize, x as usize]];
        let mut steps: Vec<f32> = own
            .iter()
            .filter(|&&(y, x)| {
                let (y, x) = (y as isize, x as isize);
                !(is_ink(y - 1, x) && is_ink(y + 1, x) && is_ink(y, x - 1) && is_ink(y, x + 1))
            })
            .map(|&p| self.grad[p] / self.range)
            .collect();
        let edge_sharpness = morph::quantile(&mut steps, 0.9).unwrap_or(0.0);
        // Stroke width from the distance transform of the ink near the hotspot.
        let mut own_mask = Array2::from_elem((h, w), false);
        for &p in &own {
            own_mask[p] = true;
        }
        let (stroke_width_px, thinness) = match super::super::mask_bbox(&own_mask) {
            Some(ib) => {
                let d = morph::distance(&own_mask);
                let dmax = own.iter().map(|&p| d[p]).fold(0f32, f32::max);
                let width = (2.0 * dmax - 1.0).max(1.0);
                let size = (ib[2] - ib[0]).max(ib[3] - ib[1]) as f32;
                (width, (1.0 - width / (0.5 * size).max(1.0)).clamp(0.0, 1.0))
            }
            None => (0.0, 0.0),
        };
        let edge_distance = b[0].min(b[1]).min(w - b[2]).min(h - b[3]) as f32 / side;
        let zone = 0.12 * side;
        let near_x = (b[0] as f32) <= zone || ((w - b[2]) as f32) <= zone;
        let near_y = (b[1] as f32) <= zone || ((h - b[3]) as f32) <= zone;
        let place = match (near_x, near_y) {
            (true, true) => Place::Corner,
            (true, false) | (false, true) => Place::Border,
            _ => Place::Interior,
        };
        let outside_foreground = match &self.foreground {
            Some(f) if area > 0 => mask.iter().zip(f.iter()).filter(|(m, f)| **m && !**f).count() as f32 / area as f32,
            _ => 0.0,
        };
        let (wf, hf) = (w as f32, h as f32);
        let d = Descriptor {
            centre: [(b[0] + b[2]) as f32 / 2.0 / wf, (b[1] + b[3]) as f32 / 2.0 / hf],
            box_fraction: [b[0] as f32 / wf, b[1] as f32 / hf, b[2] as f32 / wf, b[3] as f32 / hf],
            place,
            edge_distance,
            outside_foreground,
            saturation,
            edge_sharpness,
            stroke_width_px,
            thinness,
            area_fraction: area as f64 / (h * w) as f64,
        };
        (d, ink, strokes)
    }

    /// The strokes in window `win`: pixels that a grey opening (bright) or closing (dark) by a
    /// square of side 2r+1 (r = 3 % of the shorter side, at least 2) takes away by at least
    /// `step` — the top-hat transform, which keeps what is thinner than the square and leaves
    /// out smooth or wide structures (common practice in mathematical morphology).
    fn strokes(&self, win: [usize; 4], bright: bool, step: f32) -> Array2<bool> {
        let (h, w) = self.image.dim();
        let r = ((0.03 * h.min(w) as f32).round() as usize).max(2);
        let crop = self.image.slice(ndarray::s![win[1]..win[3], win[0]..win[2]]).to_owned();
        let s = if bright { 1.0 } else { -1.0 };
        let v = crop.mapv(|x| s * x);
        let opened = morph::grey_max(&morph::grey_min(&v, r), r);
        let mut out = Array2::from_elem((h, w), false);
        for ((y, x), &o) in opened.indexed_iter() {
            out[[win[1] + y, win[0] + x]] = v[[y, x]] - o >= step;
        }
        out
    }
}

/// The foreground by Otsu on a smoothed image (see the module text); `None` when the image has
/// no clear two classes. The image is first shrunk by block means to about 128 pixels on its
/// shorter side, then median-filtered over 5×5 there, so thin marks (strokes, rings, letters)
/// do not count as foreground however bright they are.
fn foreground(image: &Array2<f32>) -> Option<Array2<bool>> {
    let (h, w) = image.dim();
    let f = h.min(w).div_ceil(128).max(1);
    let (sh, sw) = (h.div_ceil(f), w.div_ceil(f));
    let mut small = Array2::<f32>::zeros((sh, sw));
    let mut count = Array2::<f32>::zeros((sh, sw));
    for ((y, x), &v) in image.indexed_iter() {
        small[[y / f, x / f]] += v;
        count[[y / f, x / f]] += 1.0;
    }
    small.zip_mut_with(&count, |s, &c| *s /= c);
    let median = Array2::from_shape_fn((sh, sw), |(y, x)| {
        let mut v: Vec<f32> = vec![];
        for yy in y.saturating_sub(2)..(y + 3).min(sh) {
            for xx in x.saturating_sub(2)..(x + 3).min(sw) {
                v.push(small[[yy, xx]]);
            }
        }
        morph::quantile(&mut v, 0.5).unwrap_or(0.0)
    });
    let (t, eta) = morph::otsu(&median)?;
    if eta < 0.5 {
        return None;
    }
    let above = median.mapv(|v| v > t);
    let ring = (0..sh).flat_map(|y| (0..sw).map(move |x| (y, x))).filter(|&(y, x)| y == 0 || x == 0 || y == sh - 1 || x == sw - 1);
    let (n, up) = ring.fold((0usize, 0usize), |(n, u), p| (n + 1, u + above[p] as usize));
    // The class holding more of the outermost ring is the background.
    let bright_is_background = 2 * up > n;
    Some(Array2::from_shape_fn((h, w), |(y, x)| above[[y / f, x / f]] != bright_is_background))
}

/// A hotspot's appearance, for comparing hotspots across images: its box resampled to
/// 8×8 (area averaging) and normalised to mean 0 and standard deviation 1 (all 0 when flat),
/// then six figures: the box's mean and standard deviation of luminance, the saturation, the
/// edge sharpness, the thinness and log2 of the box's width over its height.
pub fn appearance(image: &Array2<f32>, b: [usize; 4], d: &Descriptor) -> Vec<f32> {
    let mut patch = morph::resample_box(image, b, APPEARANCE_SIDE);
    let n = patch.len() as f32;
    let mean = patch.iter().sum::<f32>() / n;
    let sd = (patch.iter().map(|v| (v - mean).powi(2)).sum::<f32>() / n).sqrt();
    for v in &mut patch {
        *v = if sd > 1e-6 { (*v - mean) / sd } else { 0.0 };
    }
    let aspect = ((b[2] - b[0]).max(1) as f32 / (b[3] - b[1]).max(1) as f32).log2();
    patch.extend([mean, sd, d.saturation, d.edge_sharpness, d.thinness, aspect]);
    patch
}
