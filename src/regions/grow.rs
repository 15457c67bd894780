//! Whole extents: the mask a removal paints out, grown from a found region until the pixels
//! around it look like the surroundings.
//!
//! A finder's box follows what it measured (a tag's strokes, a ring's stroke), but a mark is
//! more than that: the plate under the strokes, the anti-aliased rim a renderer leaves. Painted
//! out from a boundary that still holds a bright rim, a harmonic fill spreads the rim back over
//! the hole and the model may still see the mark. So, one ring of pixels at a time: the pixels
//! next to the current mask are compared with the surroundings (the ring `outer_width_px` wide
//! just beyond the farthest growth, `max_px` + 2 px out; per channel, median and robust
//! spread); those that differ by more than `tolerance` spreads (and `min_step`) join the mask,
//! and their neighbours make the next ring. Growth stops when at most `noise_share` of a ring
//! differs (the ring looks like the surroundings) or after `max_px` rings; the mask is then
//! widened by `margin_px`. What was used is kept ([`MaskUsed`]) and written to `reading.json`
//! with the removal.

use ndarray::{Array2, Array3};
use serde::{Deserialize, Serialize};

use super::GrowSettings;
use super::grid::{dilate, median};
use super::measure::{chessboard, robust_spread};

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
/// returned as it is. The work stays inside the mask's box plus the farthest growth can reach.
pub fn grow_mask(pixels: &Array3<f32>, mask: &Array2<bool>, s: &GrowSettings) -> Grown {
    let (h, w, c) = pixels.dim();
    assert_eq!(mask.dim(), (h, w), "mask and pixels share a grid");
    let Some(b) = super::mask_bbox(mask) else {
        return Grown { mask: mask.clone(), used: MaskUsed { bbox: [0, 0, 0, 0], pixels: 0, grown_px: 0, settled: true } };
    };
    let reach = s.max_px + 2 + s.outer_width_px;
    let (x0, y0, x1, y1) = (b[0].saturating_sub(reach), b[1].saturating_sub(reach), (b[2] + reach).min(w), (b[3] + reach).min(h));
    let (lw, lh) = (x1 - x0, y1 - y0);
    let at = |k: usize| (y0 + k / lw, x0 + k % lw);
    let mut cur: Vec<bool> = (0..lw * lh).map(|k| mask[at(k)]).collect();
    let (mut steps, mut settled) = (0usize, false);
    if s.enabled {
        let planes: Vec<Vec<f32>> = (0..c)
            .map(|ch| {
                (0..lw * lh)
                    .map(|k| {
                        let (y, x) = at(k);
                        pixels[[y, x, ch]]
                    })
                    .collect()
            })
            .collect();
        // The surroundings: the ring just beyond the farthest growth, so a plate wider than a
        // few pixels is not taken for the surroundings of its own middle.
        let d = chessboard(lw, lh, &cur, true);
        let (near, far) = (s.max_px as u16 + 2, (s.max_px + 1 + s.outer_width_px) as u16);
        let around: Vec<usize> = (0..lw * lh).filter(|&p| (near..=far).contains(&d[p])).collect();
        if !around.is_empty() {
            let stats: Vec<(f32, f32)> = planes
                .iter()
                .map(|v| {
                    let vals: Vec<f32> = around.iter().map(|&p| v[p]).collect();
                    (median(&vals), s.min_step.max(s.tolerance * robust_spread(&vals)))
                })
                .collect();
            let unlike = |p: usize| planes.iter().zip(&stats).any(|(v, (m, tol))| (v[p] - m).abs() > *tol);
            let neighbours = |p: usize| {
                let (y, x) = (p / lw, p % lw);
                let mut out = Vec::with_capacity(8);
                for dy in -1i64..=1 {
                    for dx in -1i64..=1 {
                        let (ny, nx) = (y as i64 + dy, x as i64 + dx);
                        if (dy, dx) != (0, 0) && ny >= 0 && nx >= 0 && (ny as usize) < lh && (nx as usize) < lw {
                            out.push(ny as usize * lw + nx as usize);
                        }
                    }
                }
                out
            };
            // Ring by ring: the pixels next to the mask not judged before; those unlike the
            // surroundings join it, and their own neighbours make the next ring.
            let mut judged = cur.clone();
            let mut ring: Vec<usize> = (0..lw * lh).filter(|&p| d[p] == 1).collect();
            for &p in &ring {
                judged[p] = true;
            }
            while steps < s.max_px && !ring.is_empty() {
                let taken: Vec<usize> = ring.iter().copied().filter(|&p| unlike(p)).collect();
                if taken.len() as f32 <= s.noise_share * ring.len() as f32 {
                    settled = true;
                    break;
                }
                for &p in &taken {
                    cur[p] = true;
                }
                ring.clear();
                for &p in &taken {
                    for q in neighbours(p) {
                        if !judged[q] {
                            judged[q] = true;
                            ring.push(q);
                        }
                    }
                }
                steps += 1;
            }
            settled |= ring.is_empty();
        } else {
            settled = true;
        }
        cur = dilate(lh, lw, &cur, s.margin_px);
    }
    let mut full = mask.clone();
    for (k, &on) in cur.iter().enumerate() {
        if on {
            full[at(k)] = true;
        }
    }
    let bbox = super::mask_bbox(&full).unwrap_or([0, 0, 0, 0]);
    let pixels = full.iter().filter(|&&m| m).count();
    Grown { mask: full, used: MaskUsed { bbox, pixels, grown_px: steps, settled } }
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
