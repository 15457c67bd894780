//! Whole extents: the mask a removal paints out, grown from a found region until the pixels
//! around it look like the surroundings.
//!
//! A finder's box follows what it measured (a tag's strokes, a ring's stroke), but a mark is
//! more than that: the plate under the strokes, the anti-aliased rim a renderer leaves. Painted
//! out from a boundary that still holds a bright rim, a harmonic fill spreads the rim back over
//! the hole and the model may still see the mark. So, one ring of pixels at a time: the ring
//! just outside the current mask is compared with the surroundings (a wider ring one pixel
//! beyond it; per channel, median and robust spread); the ring's pixels that differ by more
//! than `tolerance` spreads (and `min_step`) join the mask. Growth stops when at most
//! `noise_share` of the ring differs (the ring looks like the surroundings) or after `max_px`
//! rings; the mask is then widened by `margin_px`. What was used is kept ([`MaskUsed`]) and
//! written to `reading.json` with the removal.

use ndarray::{Array2, Array3};
use serde::{Deserialize, Serialize};

use super::GrowSettings;
use super::grid::{dilate, median, to_mask};
use super::measure::robust_spread;

/// The mask a removal painted out, as `reading.json` and `regions.json` record it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MaskUsed {
    /// Its box `[x0, y0, x1, y1]` (end exclusive).
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    /// How many pixels it holds.
    pub pixels: usize,
    /// Rings added to the found region by growth (before the margin).
    pub grown_px: usize,
    /// Growth stopped because the ring looked like the surroundings; false when the limit
    /// stopped it (or growth was off).
    pub settled: bool,
}

/// A grown mask and its description.
#[derive(Clone, Debug, PartialEq)]
pub struct Grown {
    pub mask: Array2<bool>,
    pub used: MaskUsed,
}

/// Grows `mask` on `pixels` (H×W×C, 0..1) as the module says. With growth off the mask is
/// returned as it is.
pub fn grow_mask(pixels: &Array3<f32>, mask: &Array2<bool>, s: &GrowSettings) -> Grown {
    let (h, w, c) = pixels.dim();
    assert_eq!(mask.dim(), (h, w), "mask and pixels share a grid");
    let mut cur: Vec<bool> = mask.iter().copied().collect();
    let (mut steps, mut settled) = (0usize, false);
    if s.enabled {
        let planes: Vec<Vec<f32>> = (0..c).map(|k| pixels.index_axis(ndarray::Axis(2), k).iter().copied().collect()).collect();
        while steps < s.max_px {
            let near = dilate(h, w, &cur, 1);
            let inner = dilate(h, w, &cur, 2);
            let outer = dilate(h, w, &cur, 2 + s.outer_width_px);
            let thin: Vec<usize> = (0..h * w).filter(|&p| near[p] && !cur[p]).collect();
            let around: Vec<usize> = (0..h * w).filter(|&p| outer[p] && !inner[p]).collect();
            if thin.is_empty() || around.is_empty() {
                settled = true;
                break;
            }
            let stats: Vec<(f32, f32)> = planes
                .iter()
                .map(|v| {
                    let vals: Vec<f32> = around.iter().map(|&p| v[p]).collect();
                    (median(&vals), s.min_step.max(s.tolerance * robust_spread(&vals)))
                })
                .collect();
            let unlike: Vec<usize> = thin
                .iter()
                .copied()
                .filter(|&p| planes.iter().zip(&stats).any(|(v, (m, tol))| (v[p] - m).abs() > *tol))
                .collect();
            if unlike.len() as f32 <= s.noise_share * thin.len() as f32 {
                settled = true;
                break;
            }
            for p in unlike {
                cur[p] = true;
            }
            steps += 1;
        }
        cur = dilate(h, w, &cur, s.margin_px);
    }
    let mask = to_mask(h, w, cur);
    let bbox = super::mask_bbox(&mask).unwrap_or([0, 0, 0, 0]);
    let pixels = mask.iter().filter(|&&m| m).count();
    Grown { mask, used: MaskUsed { bbox, pixels, grown_px: steps, settled } }
}

/// The description of a union of masks (all regions painted out together).
pub fn union_used(mask: &Array2<bool>, parts: &[&MaskUsed]) -> MaskUsed {
    MaskUsed {
        bbox: super::mask_bbox(mask).unwrap_or([0, 0, 0, 0]),
        pixels: mask.iter().filter(|&&m| m).count(),
        grown_px: parts.iter().map(|u| u.grown_px).max().unwrap_or(0),
        settled: parts.iter().all(|u| u.settled),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_plate_wider_than_the_found_box_is_grown_over_with_its_rim() {
        // Flat ground 0.4; a bright plate rows 10..20, columns 8..30, with a half-bright rim one
        // pixel outside it; the finder found only rows 12..18, columns 10..28.
        let (h, w) = (40, 48);
        let mut px = Array3::from_elem((h, w, 1), 0.4f32);
        for y in 9..21 {
            for x in 7..31 {
                px[[y, x, 0]] = if (10..20).contains(&y) && (8..30).contains(&x) { 1.0 } else { 0.7 };
            }
        }
        let found = Array2::from_shape_fn((h, w), |(y, x)| (12..18).contains(&y) && (10..28).contains(&x));
        let g = grow_mask(&px, &found, &GrowSettings::default());
        assert!(g.used.settled);
        assert_eq!(g.used.grown_px, 3, "2 plate rings and the rim");
        // Every pixel that differs from the ground is covered; the margin adds one more ring.
        for ((y, x), &m) in g.mask.indexed_iter() {
            if px[[y, x, 0]] != 0.4 {
                assert!(m, "({y},{x}) left out");
            }
        }
        assert_eq!(g.used.bbox, [6, 8, 32, 22]);
    }

    #[test]
    fn on_flat_ground_a_mark_box_does_not_grow() {
        let px = Array3::from_elem((20, 20, 3), 0.5f32);
        let found = Array2::from_shape_fn((20, 20), |(y, x)| (5..9).contains(&y) && (5..9).contains(&x));
        let g = grow_mask(&px, &found, &GrowSettings { margin_px: 0, ..Default::default() });
        assert_eq!((g.used.grown_px, g.used.settled, g.used.pixels), (0, true, 16));
        assert_eq!(g.mask, found);
    }
}
