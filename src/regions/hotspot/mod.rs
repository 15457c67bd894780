//! Hotspots: the compact places that carry much of a map's supporting attribution, found from
//! the map itself whatever their shape, and described by what tells a mark from anatomy.
//!
//! A finder knows a shape (a band, a tag, a patch that repeats); a hotspot knows none. It is a
//! connected part of the top of the map (smoothed a little, so single pixels do not count),
//! closed so that the strokes of a letter or the arc of a ring make one part, and kept only when
//! it is small (a part too large is cut at a higher level, then dropped) and holds a real share
//! of the supporting attribution. Each is described ([`Descriptor`]) by where it lies (border,
//! corner, outside the foreground), how much of it sits at the image's extremes (saturation),
//! how sharp its edges are, how thin its strokes are and how large it is; from these a
//! mark-likeness in 0..1.
//!
//! This module is plain image and map processing. Whether a hotspot matters is the model's
//! business: `methods::hotspots` paints each one out and runs the model again, and [`judge`]
//! then makes a hotspot that looks like a mark *and* whose removal moves the score suspect
//! evidence of its own kind ([`super::Evidence::Hotspot`]). One whose removal matters but that
//! looks like anatomy is the model's evidence, shown and not flagged. Attribution alone never
//! flags a hotspot: maps light up on prominent marks whether or not the model uses them.
//!
//! The thresholds are a starting point chosen by reasoning about drawn marks and smooth
//! anatomy, then checked on marks drawn by the tests and on clean photographs; they are not a
//! calibration.

mod describe;
mod judge;
mod morph;

use anyhow::{Result, bail};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

pub use describe::{APPEARANCE_LEN, APPEARANCE_SIDE, Descriptor, Place, appearance};
pub use judge::{HotspotRemoval, HotspotReport, HotspotRole, add_hotspot_evidence, judge};
pub use morph::{close, components, distance, otsu};

use crate::sign::Sign;

/// Settings of the hotspot search and its evidence. Sizes given as fractions of the image's
/// shorter side scale with the image, since a map carried back onto a large picture is spread
/// over as many more pixels.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct HotspotSettings {
    /// Look for hotspots at all. Default true.
    pub enabled: bool,
    /// Standard deviation of the blur applied to the map's part before thresholding, as a
    /// fraction of the shorter side (at least 0.7 pixels). Default 0.01.
    pub smooth_fraction: f32,
    /// The top of the map: the pixels in this top share of the image by the smoothed part...
    /// Default 0.04.
    pub top_fraction: f64,
    /// ... that also reach this fraction of its maximum. Default 0.2.
    pub min_peak_fraction: f32,
    /// Radius of the square closing, as a fraction of the shorter side (at least 1 pixel).
    /// Default 0.025.
    pub close_fraction: f32,
    /// Largest side of a hotspot's box, as a fraction of the shorter side. Default 0.4.
    pub max_side_fraction: f32,
    /// Largest hotspot area, as a fraction of the image. Default 0.08.
    pub max_area_fraction: f64,
    /// Smallest hotspot area in pixels. Default 4.
    pub min_area_px: usize,
    /// Smallest share of the map's part inside a hotspot. Default 0.05.
    pub min_share: f64,
    /// At most this many hotspots per reading, largest share first. Default 4.
    pub max_hotspots: usize,
    /// The painted-out mask: the hotspot plus the ink connected to it, grown by this fraction
    /// of the shorter side (at least 1 pixel). Default 0.015.
    pub grow_fraction: f32,
    /// A hotspot looks like a mark from this mark-likeness on. Default 0.5.
    pub min_mark_likeness: f32,
}

impl Default for HotspotSettings {
    fn default() -> Self {
        HotspotSettings {
            enabled: true,
            smooth_fraction: 0.01,
            top_fraction: 0.04,
            min_peak_fraction: 0.2,
            close_fraction: 0.025,
            max_side_fraction: 0.4,
            max_area_fraction: 0.08,
            min_area_px: 4,
            min_share: 0.05,
            max_hotspots: 4,
            grow_fraction: 0.015,
            min_mark_likeness: 0.5,
        }
    }
}

/// One hotspot of one reading, on the image grid.
#[derive(Clone, Debug, PartialEq)]
pub struct Hotspot {
    /// Box `[x0, y0, x1, y1]` of `mask`, end exclusive.
    pub bbox: [usize; 4],
    /// The closed part of the top of the map.
    pub mask: Array2<bool>,
    /// What removal paints out: `mask`, the ink connected to it nearby, grown a little.
    pub removal_mask: Array2<bool>,
    /// The strokes alone (thin ink that a grey opening takes away) joined to the hotspot, grown
    /// a little; `None` when there are none. Painting only these out tells a mark drawn over
    /// anatomy from the anatomy under it.
    pub stroke_mask: Option<Array2<bool>>,
    /// Share of the map's part inside `mask`, and that over the mask's area share (lift).
    pub share: f64,
    pub lift: f64,
    pub descriptor: Descriptor,
    /// 0..1, how much the hotspot looks like a mark rather than anatomy.
    pub mark_likeness: f32,
    pub looks_like_mark: bool,
    /// A small appearance vector for comparing hotspots across images (see [`appearance`]).
    pub appearance: Vec<f32>,
}

/// Hotspots of `map` (the reading's map on the image grid, channels summed) over `image` (its
/// luminance, 0..1, same grid), in order of share, largest first. `part` is the part of the
/// map looked at (supporting by default in the flag settings).
pub fn find_hotspots(image: &Array2<f32>, map: &Array2<f32>, part: Sign, s: &HotspotSettings) -> Result<Vec<Hotspot>> {
    if map.dim() != image.dim() {
        bail!(
            "the map is {}×{} but the image is {}×{} (width×height); hotspots need the map on the image grid",
            map.dim().1,
            map.dim().0,
            image.dim().1,
            image.dim().0
        );
    }
    if map.iter().any(|v| !v.is_finite()) {
        bail!("the map holds NaN or infinite values; no hotspots can be found on it");
    }
    let (h, w) = map.dim();
    if !s.enabled || h < 4 || w < 4 {
        return Ok(vec![]);
    }
    let side = h.min(w) as f32;
    let px = |f: f32, least: f32| (f * side).max(least);
    let part_map = map.mapv(|v| part.apply(v).max(0.0));
    let total: f64 = part_map.iter().map(|&v| v as f64).sum();
    if total <= 0.0 {
        return Ok(vec![]);
    }
    let smooth = morph::gaussian(&part_map, px(s.smooth_fraction, 0.7));
    let peak = smooth.iter().copied().fold(0f32, f32::max);
    let mut positive: Vec<f32> = smooth.iter().copied().filter(|&v| v > 0.0).collect();
    let q = 1.0 - s.top_fraction * (h * w) as f64 / positive.len().max(1) as f64;
    let level = morph::quantile(&mut positive, q.max(0.0)).unwrap_or(peak).max(s.min_peak_fraction * peak);
    // Hysteresis, as edge detectors link edges (common practice): the top is every part above
    // a lower level (three times the share, and at least half the peak fraction) that reaches
    // the level, so a mark lit unevenly stays whole. Values within rounding of a level count as
    // reaching it, so a flat top does not break into specks.
    let q_low = 1.0 - 3.0 * s.top_fraction * (h * w) as f64 / positive.len().max(1) as f64;
    let low = morph::quantile(&mut positive, q_low.max(0.0)).unwrap_or(level).max(0.5 * s.min_peak_fraction * peak).min(level);
    let high = smooth.mapv(|v| v > 0.0 && v >= level * (1.0 - 1e-4));
    let top = flood(&high, &smooth.mapv(|v| v > 0.0 && v >= low * (1.0 - 1e-4)));
    let close_r = px(s.close_fraction, 1.0).round() as usize;
    let closed = morph::close(&top, close_r);
    let limits = Limits {
        max_side: (s.max_side_fraction * side).max(1.0) as usize,
        max_area: (s.max_area_fraction * (h * w) as f64).max(1.0) as usize,
        min_area: s.min_area_px.max(1),
    };
    let mut parts = vec![];
    for c in morph::components(&closed) {
        split(&smooth, c, &limits, 0, &mut parts);
    }
    let ctx = describe::Context::new(image);
    let grow = px(s.grow_fraction, 1.0).round() as usize;
    let mut out: Vec<Hotspot> = parts
        .into_iter()
        .filter_map(|pix| {
            let mut mask = Array2::from_elem((h, w), false);
            for &(y, x) in &pix {
                mask[[y, x]] = true;
            }
            let share = pix.iter().map(|&(y, x)| part_map[[y, x]] as f64).sum::<f64>() / total;
            if share < s.min_share {
                return None;
            }
            let bbox = super::mask_bbox(&mask)?;
            let lift = share / (pix.len() as f64 / (h * w) as f64);
            let (descriptor, ink, strokes) = ctx.describe(&mask, bbox);
            // The ink joined to the hotspot: a map often lights up only part of a mark, and
            // painting out part of a mark leaves the rest.
            let removal_mask = morph::dilate(&flood(&mask, &ink), grow);
            let near = morph::dilate(&mask, 2);
            let stroke_seeds = Array2::from_shape_fn((h, w), |p| strokes[p] && near[p]);
            let stroke_mask = stroke_seeds.iter().any(|&m| m).then(|| morph::dilate(&flood(&stroke_seeds, &strokes), grow));
            let mark_likeness = descriptor.mark_likeness();
            Some(Hotspot {
                bbox,
                appearance: appearance(image, bbox, &descriptor),
                mask,
                removal_mask,
                stroke_mask,
                share,
                lift,
                looks_like_mark: mark_likeness >= s.min_mark_likeness,
                mark_likeness,
                descriptor,
            })
        })
        .collect();
    out.sort_by(|a, b| b.share.total_cmp(&a.share));
    out.truncate(s.max_hotspots);
    Ok(out)
}

struct Limits {
    max_side: usize,
    max_area: usize,
    min_area: usize,
}

/// Keeps a part within the size limits; a part too large is cut at the median of its smoothed
/// values (its upper half, taken apart again), at most three times, then dropped.
fn split(smooth: &Array2<f32>, part: Vec<(usize, usize)>, l: &Limits, depth: usize, out: &mut Vec<Vec<(usize, usize)>>) {
    if part.len() < l.min_area {
        return;
    }
    let (mut y0, mut x0, mut y1, mut x1) = (usize::MAX, usize::MAX, 0, 0);
    for &(y, x) in &part {
        (y0, x0, y1, x1) = (y0.min(y), x0.min(x), y1.max(y), x1.max(x));
    }
    let fits = part.len() <= l.max_area && (y1 - y0 + 1).max(x1 - x0 + 1) <= l.max_side;
    if fits {
        out.push(part);
        return;
    }
    if depth >= 3 {
        return;
    }
    let mut vals: Vec<f32> = part.iter().map(|&(y, x)| smooth[[y, x]]).collect();
    let Some(level) = morph::quantile(&mut vals, 0.5) else { return };
    let top = vals.iter().copied().fold(0f32, f32::max);
    if top - level <= 1e-3 * top {
        // A flat part has no higher level to cut it at.
        return;
    }
    let mut sub = Array2::from_elem(smooth.dim(), false);
    for &(y, x) in &part {
        sub[[y, x]] = smooth[[y, x]] > level;
    }
    for c in morph::components(&sub) {
        split(smooth, c, l, depth + 1, out);
    }
}

/// `seeds` and the pixels of `through` 8-connected to them through `through`.
fn flood(seeds: &Array2<bool>, through: &Array2<bool>) -> Array2<bool> {
    let (h, w) = seeds.dim();
    let mut out = seeds.clone();
    let mut stack: Vec<(usize, usize)> = seeds.indexed_iter().filter(|(_, m)| **m).map(|(p, _)| p).collect();
    while let Some((y, x)) = stack.pop() {
        for dy in -1isize..=1 {
            for dx in -1isize..=1 {
                let (ny, nx) = (y as isize + dy, x as isize + dx);
                if ny < 0 || nx < 0 || ny >= h as isize || nx >= w as isize {
                    continue;
                }
                let (ny, nx) = (ny as usize, nx as usize);
                if through[[ny, nx]] && !out[[ny, nx]] {
                    out[[ny, nx]] = true;
                    stack.push((ny, nx));
                }
            }
        }
    }
    out
}
