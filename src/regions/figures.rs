//! Figures that say how much of an attribution map falls on a region.
//!
//! All take a map on the image grid (H×W, e.g. `Reading::map2d`) and a region mask of the same
//! shape, and first turn the map into the part asked for ([`Sign`]): the supporting part
//! (positive values) by default. A figure is `None` when it is undefined, e.g. a share of a map
//! with no support at all.
//!
//! - **mark share**: part inside the region / part over the whole image (vocabulary).
//! - **lift**: mark share / (region area / image area); 1 means the map treats the region like
//!   any other pixels, above 1 that it is drawn to it (vocabulary).
//! - **relevance mass accuracy** (Arras, Osman, Samek 2022, CLEVR-XAI, Information Fusion):
//!   R_within / R_total, the relevance inside the ground-truth mask over the relevance of the
//!   whole image. The paper uses positive relevance only (from memory), so with the default part
//!   it equals the mark share; it is kept as its own figure so reports can cite it by name.
//! - **relevance rank accuracy** (same paper): with K = number of mask pixels, the share of the
//!   K highest-ranked pixels that lie in the mask. Ties are broken by raster order (row, then
//!   column), which the paper does not specify. For the one-signed parts only pixels with a
//!   value above zero are ranked: a pixel with no support is not "highly relevant".
//! - **pointing game** (Zhang et al. 2018, "Top-down neural attention by excitation backprop",
//!   IJCV): a hit when the map's maximum lies inside the region, or within a tolerance (pixels,
//!   Euclidean between pixel centres) of it. We recall a 15-pixel tolerance in the paper (from
//!   memory, not checked); the default here is 0 since spurion's images are often far smaller
//!   than the paper's. With several equal maxima the first in raster order is used.

use anyhow::{Result, bail};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use crate::sign::Sign;

/// All figures of one map against one region.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Figures {
    pub part: Sign,
    pub area_fraction: f64,
    pub mark_share: Option<f64>,
    pub lift: Option<f64>,
    pub relevance_mass_accuracy: Option<f64>,
    pub relevance_rank_accuracy: Option<f64>,
    pub pointing_hit: Option<bool>,
}

fn check(map: &Array2<f32>, mask: &Array2<bool>) -> Result<()> {
    if map.dim() != mask.dim() {
        bail!(
            "the map is {}×{} but the region mask is {}×{} (width×height); the map must be on the \
             image grid (use the reading's map on the image, not the model tensor)",
            map.dim().1,
            map.dim().0,
            mask.dim().1,
            mask.dim().0
        );
    }
    if map.iter().any(|v| !v.is_finite()) {
        bail!("the map holds NaN or infinite values; figures cannot be computed from it");
    }
    Ok(())
}

/// (part inside, part total).
fn sums(map: &Array2<f32>, mask: &Array2<bool>, part: Sign) -> (f64, f64) {
    let (mut inside, mut total) = (0f64, 0f64);
    for (&v, &m) in map.iter().zip(mask.iter()) {
        let a = part.apply(v) as f64;
        total += a;
        if m {
            inside += a;
        }
    }
    (inside, total)
}

fn ratio(inside: f64, total: f64) -> Option<f64> {
    // A total this small is no map at all (all zero, or support and opposition cancelling).
    (total.abs() > 1e-30).then(|| inside / total)
}

/// Share of the map's part inside the region.
pub fn mark_share(map: &Array2<f32>, mask: &Array2<bool>, part: Sign) -> Result<Option<f64>> {
    check(map, mask)?;
    let (i, t) = sums(map, mask, part);
    Ok(ratio(i, t))
}

/// Mark share divided by the region's share of the image area.
pub fn lift(map: &Array2<f32>, mask: &Array2<bool>, part: Sign) -> Result<Option<f64>> {
    let share = mark_share(map, mask, part)?;
    let area = mask.iter().filter(|&&m| m).count() as f64 / mask.len().max(1) as f64;
    Ok(share.and_then(|s| (area > 0.0).then(|| s / area)))
}

/// Relevance mass accuracy, Arras et al. 2022: R_within / R_total.
pub fn relevance_mass_accuracy(map: &Array2<f32>, mask: &Array2<bool>, part: Sign) -> Result<Option<f64>> {
    check(map, mask)?;
    let mut within = 0f64;
    let mut total = 0f64;
    for (&v, &m) in map.iter().zip(mask.iter()) {
        let r = part.apply(v) as f64;
        total += r;
        within += if m { r } else { 0.0 };
    }
    Ok(ratio(within, total))
}

/// Relevance rank accuracy, Arras et al. 2022: |top-K ∩ mask| / K with K = |mask|.
pub fn relevance_rank_accuracy(map: &Array2<f32>, mask: &Array2<bool>, part: Sign) -> Result<Option<f64>> {
    check(map, mask)?;
    let k = mask.iter().filter(|&&m| m).count();
    if k == 0 {
        return Ok(None);
    }
    let mut ranked: Vec<(f64, usize, bool)> = map
        .iter()
        .zip(mask.iter())
        .enumerate()
        .map(|(i, (&v, &m))| (part.apply(v) as f64, i, m))
        .filter(|(a, _, _)| part == Sign::Both || *a > 0.0)
        .collect();
    if ranked.is_empty() {
        return Ok(None);
    }
    // Descending value, then raster order.
    ranked.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
    let hits = ranked.iter().take(k).filter(|r| r.2).count();
    Ok(Some(hits as f64 / k as f64))
}

/// Pointing game, Zhang et al. 2018: is the map's maximum in the region (within `tolerance_px`)?
pub fn pointing_hit(map: &Array2<f32>, mask: &Array2<bool>, part: Sign, tolerance_px: f64) -> Result<Option<bool>> {
    check(map, mask)?;
    let mut best: Option<(f64, (usize, usize))> = None;
    for (idx, &v) in map.indexed_iter() {
        let a = part.apply(v) as f64;
        if best.is_none_or(|(b, _)| a > b) {
            best = Some((a, idx));
        }
    }
    let Some((top, (py, px))) = best else { return Ok(None) };
    if part != Sign::Both && top <= 0.0 {
        return Ok(None);
    }
    if mask[(py, px)] {
        return Ok(Some(true));
    }
    if tolerance_px <= 0.0 {
        return Ok(Some(false));
    }
    let t2 = tolerance_px * tolerance_px;
    let hit = mask.indexed_iter().any(|((y, x), &m)| {
        m && {
            let (dy, dx) = (y as f64 - py as f64, x as f64 - px as f64);
            dy * dy + dx * dx <= t2
        }
    });
    Ok(Some(hit))
}

/// Every figure at once.
pub fn figures(map: &Array2<f32>, mask: &Array2<bool>, part: Sign, pointing_tolerance_px: f64) -> Result<Figures> {
    check(map, mask)?;
    let area_fraction = mask.iter().filter(|&&m| m).count() as f64 / mask.len().max(1) as f64;
    Ok(Figures {
        part,
        area_fraction,
        mark_share: mark_share(map, mask, part)?,
        lift: lift(map, mask, part)?,
        relevance_mass_accuracy: relevance_mass_accuracy(map, mask, part)?,
        relevance_rank_accuracy: relevance_rank_accuracy(map, mask, part)?,
        pointing_hit: pointing_hit(map, mask, part, pointing_tolerance_px)?,
    })
}
