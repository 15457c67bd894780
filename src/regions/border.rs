//! Border bands: padding, letterboxing, thin frames and collimation-like straight edges.
//!
//! Per side: take the value of the outermost line (its median), walk inward from every position
//! along the side while pixels stay within a tolerance of that value, and call the place the
//! walk stops the edge there. A band is accepted when the edge is a straight line (fitted by
//! least squares with outliers dropped; tilted edges allowed up to `max_tilt`) over most of the
//! side, and the content just inside the edge differs from the band value by a clear step. A
//! smooth gradient (sky, vignetting) ends in no step and is not a band; a flat background that
//! meets an object along a curved outline is not a straight edge and is not a band either.

use ndarray::Array2;

use super::grid::{flat, median, to_mask};
use super::{BorderSettings, Region, RegionKind, Side};

struct SideBand {
    side: Side,
    /// Band depth (pixels from the edge) at each position along the side.
    depth: Vec<usize>,
    value: f32,
    spread: f32,
    step: f32,
    dark: bool,
    inliers: f32,
    tilt: f32,
    mean_depth: f32,
    detail: &'static str,
    tol: f32,
}

/// Finds border bands on any side of a luminance image (H×W, 0..1). Sides that share a kind
/// and value (a frame all round, letterbox top and bottom) come back as one region.
pub fn find_border_bands(image: &Array2<f32>, s: &BorderSettings) -> Vec<Region> {
    let (h, w, v) = flat(image);
    if h < 8 || w < 8 {
        return Vec::new();
    }
    let bands: Vec<SideBand> = Side::ALL.iter().filter_map(|&side| side_band(h, w, &v, side, s)).collect();
    merge(h, w, bands)
}

/// Flat index of the pixel `depth` pixels in from `side` at position `pos` along it.
fn at(h: usize, w: usize, side: Side, pos: usize, depth: usize) -> usize {
    match side {
        Side::Top => depth * w + pos,
        Side::Bottom => (h - 1 - depth) * w + pos,
        Side::Left => pos * w + depth,
        Side::Right => pos * w + (w - 1 - depth),
    }
}

fn side_band(
    h: usize,
    w: usize,
    v: &[f32],
    side: Side,
    s: &BorderSettings,
) -> Option<SideBand> {
    let (n, across) = match side {
        Side::Top | Side::Bottom => (w, h),
        Side::Left | Side::Right => (h, w),
    };
    let max_d = ((across as f32 * s.max_depth_fraction) as usize).clamp(1, across.saturating_sub(4).max(1));
    let px = |pos: usize, d: usize| v[at(h, w, side, pos, d)];
    let outer: Vec<f32> = (0..n).map(|p| px(p, 0)).collect();
    let value = median(&outer);
    // The tolerance follows the outermost line's own noise (robust: 1.4826·MAD, common
    // practice), so a digitally flat frame is held to a tight tolerance and a noisy exposed
    // margin to a loose one, whatever the rest of the image does.
    let dev: Vec<f32> = outer.iter().map(|x| (x - value).abs()).collect();
    let tol = s.flat_tolerance.max(s.noise_factor * 1.4826 * median(&dev));
    let contrast = s.edge_contrast.max(2.0 * tol);
    let near = |x: f32| (x - value).abs() <= tol;

    // Walk inward; a single stray noisy pixel followed by two in-band ones does not end the band.
    let depth: Vec<usize> = (0..n)
        .map(|p| {
            let mut d = 0;
            while d < max_d {
                if near(px(p, d)) || (d + 2 < max_d && near(px(p, d + 1)) && near(px(p, d + 2))) {
                    d += 1;
                } else {
                    break;
                }
            }
            d
        })
        .collect();

    // Positions whose walk runs the whole depth at the ends of the side lie in the band of the
    // neighbouring side (corners); leave them out of the count.
    let lo = depth.iter().position(|&d| d < max_d)?;
    let hi = n - depth.iter().rev().position(|&d| d < max_d)?;
    let considered = hi - lo;
    if considered * 2 < n {
        return None;
    }
    let mut edges: Vec<(f32, f32, f32)> = Vec::new(); // (pos, depth, step)
    let mut dark_votes = 0i64;
    for p in lo..hi {
        let d = depth[p];
        if d == 0 || d >= max_d {
            continue;
        }
        let inner: Vec<f32> = (d..(d + 3).min(across)).map(|k| px(p, k)).collect();
        let m = median(&inner);
        let step = (m - value).abs();
        if step >= contrast {
            edges.push((p as f32, d as f32, step));
            dark_votes += if m > value { 1 } else { -1 };
        }
    }
    let need = s.min_coverage * considered as f32;
    if (edges.len() as f32) < need {
        return None;
    }

    // Straight-edge fit with outliers (corner glyphs, stray content) dropped.
    let mut inlier: Vec<bool> = vec![true; edges.len()];
    let (mut a, mut b) = (0f32, 0f32);
    for _ in 0..3 {
        let pts: Vec<(f32, f32)> = edges
            .iter()
            .zip(&inlier)
            .filter(|(_, k)| **k)
            .map(|(e, _)| (e.0, e.1))
            .collect();
        if pts.len() < 2 {
            return None;
        }
        (a, b) = line_fit(&pts);
        for (k, e) in inlier.iter_mut().zip(&edges) {
            *k = (e.1 - (a + b * e.0)).abs() <= 2.0;
        }
    }
    let kept: Vec<&(f32, f32, f32)> =
        edges.iter().zip(&inlier).filter(|(_, k)| **k).map(|(e, _)| e).collect();
    if (kept.len() as f32) < need || b.abs() > s.max_tilt {
        return None;
    }
    let rms = (kept.iter().map(|e| (e.1 - (a + b * e.0)).powi(2)).sum::<f32>() / kept.len() as f32).sqrt();
    if rms > s.max_edge_residual {
        return None;
    }

    let band_depth: Vec<usize> = (0..n)
        .map(|p| ((a + b * p as f32).round().max(0.0) as usize).min(max_d))
        .collect();
    let mean_depth = band_depth.iter().sum::<usize>() as f32 / n as f32;
    if mean_depth < 1.0 {
        return None;
    }
    let mut vals = Vec::new();
    for (p, &d) in band_depth.iter().enumerate() {
        for k in 0..d {
            vals.push(px(p, k));
        }
    }
    let mean = vals.iter().sum::<f32>() / vals.len().max(1) as f32;
    let spread = (vals.iter().map(|x| (x - mean).powi(2)).sum::<f32>() / vals.len().max(1) as f32).sqrt();
    let steps: Vec<f32> = kept.iter().map(|e| e.2).collect();
    let step = median(&steps);
    let detail = if mean_depth <= s.frame_max_width as f32 && b.abs() < 0.05 {
        "frame"
    } else if spread <= s.padding_tolerance {
        "padding"
    } else if b.abs() >= 0.02 {
        "collimation edge"
    } else {
        "flat margin"
    };
    Some(SideBand {
        side,
        depth: band_depth,
        value,
        spread,
        step,
        dark: dark_votes > 0,
        inliers: kept.len() as f32 / considered as f32,
        tilt: b,
        mean_depth,
        detail,
        tol,
    })
}

/// Least-squares line y = a + b·x.
fn line_fit(pts: &[(f32, f32)]) -> (f32, f32) {
    let n = pts.len() as f64;
    let (sx, sy) = pts.iter().fold((0f64, 0f64), |acc, p| (acc.0 + p.0 as f64, acc.1 + p.1 as f64));
    let (mx, my) = (sx / n, sy / n);
    let (mut sxx, mut sxy) = (0f64, 0f64);
    for p in pts {
        sxx += (p.0 as f64 - mx).powi(2);
        sxy += (p.0 as f64 - mx) * (p.1 as f64 - my);
    }
    let b = if sxx > 0.0 { sxy / sxx } else { 0.0 };
    ((my - b * mx) as f32, b as f32)
}

fn merge(h: usize, w: usize, bands: Vec<SideBand>) -> Vec<Region> {
    let mut used = vec![false; bands.len()];
    let mut out = Vec::new();
    for i in 0..bands.len() {
        if used[i] {
            continue;
        }
        let mut group = vec![i];
        used[i] = true;
        for j in i + 1..bands.len() {
            let (p, q) = (&bands[i], &bands[j]);
            let same = !used[j]
                && p.detail == q.detail
                && p.dark == q.dark
                && (p.value - q.value).abs() <= p.tol.max(q.tol)
                && (p.detail != "frame" || (p.mean_depth - q.mean_depth).abs() <= 2.0);
            if same {
                used[j] = true;
                group.push(j);
            }
        }
        let mut mask = vec![false; h * w];
        for &g in &group {
            let b = &bands[g];
            for (p, &d) in b.depth.iter().enumerate() {
                for k in 0..d {
                    mask[at(h, w, b.side, p, k)] = true;
                }
            }
        }
        let first = &bands[group[0]];
        let sides: Vec<Side> = group.iter().map(|&g| bands[g].side).collect();
        let conf = group
            .iter()
            .map(|&g| {
                let b = &bands[g];
                b.inliers.min(1.0) * (b.step / (2.0 * b.tol.max(0.04))).clamp(0.5, 1.0)
            })
            .sum::<f32>()
            / group.len() as f32;
        let widths: Vec<String> = group.iter().map(|&g| format!("{:.0}", bands[g].mean_depth)).collect();
        let tilt = group.iter().map(|&g| bands[g].tilt.abs()).fold(0f32, f32::max);
        let side_names: Vec<&str> = sides.iter().map(|s| s.name()).collect();
        let shade = if first.dark { "dark" } else { "bright" };
        let reason = format!(
            "{shade} {detail} {widths} px wide along {sides}: value {value:.3} (spread {spread:.3}), then a step of {step:.2} to the content inside{tilt}",
            detail = first.detail,
            widths = widths.join("/"),
            sides = side_names.join(", "),
            value = first.value,
            spread = first.spread,
            step = first.step,
            tilt = if tilt >= 0.02 { format!(", edge tilted {:.1}°", tilt.atan().to_degrees()) } else { String::new() },
        );
        if let Some(mut r) =
            Region::from_mask(RegionKind::BorderBand, to_mask(h, w, mask), conf, first.detail, reason)
        {
            r.sides = sides;
            out.push(r);
        }
    }
    out
}
