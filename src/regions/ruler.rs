//! Rulers and scales: evenly spaced ticks along a line, with or without a baseline joining them.
//!
//! The components that stand out (see [`super::field`]) are joined when their boxes lie at most
//! `ruler_gap_px` apart. A joined run that is long (at least `ruler_min_len`) and at least
//! three times longer than it is thick is profiled along its length: the count of its pixels in
//! each column (row, for an upright run). A baseline adds the same count everywhere; ticks rise
//! above it as narrow pulses. The run is a ruler when it has at least `ruler_min_ticks` pulses,
//! each narrow (at most 3 px or half the spacing), spaced evenly: nine gaps in ten within
//! `ruler_spacing_tolerance` of their median. Letters on a line make wide, unevenly spaced
//! pulses and are left to the glyph finders.
//!
//! A run whose main axis (the principal axis of its pixels, common practice) is tilted by more
//! than `TILT_SNAP_DEG` from the rows and columns is profiled along that axis instead, and by
//! its **extent across** the axis in each step rather than its pixel count: a tilted line's
//! pixel count per step wobbles with the staircase of its rendering (a periodic ripple that
//! would pass for ticks), its extent across the axis does not by more than a pixel, while a
//! tick adds its length. Its mask is its own pixels rather than its box (a tilted box holds
//! the anatomy beside the scale).

use super::FieldMarkSettings;
use super::measure::Blob;

/// A found ruler: its box, tick count, tick spacing (pixels), its axis' angle from the rows
/// (degrees, 0..180) and, for a tilted ruler, its pixels (flat indices).
pub(crate) type Ruler = ([usize; 4], usize, f32, f32, Option<Vec<usize>>);

/// Runs whose axis lies within this many degrees of the rows or columns are profiled along
/// them, as before tilted rulers were searched: a scale drawn along the image's axes stays on
/// the path its tests were written for, and a few degrees of tilt leave its per-column
/// profile's pulses sharp (a 60 px run tilted 3 degrees drifts 3 px across).
const TILT_SNAP_DEG: f32 = 3.0;

/// A tilted ruler's ticks rise at least this many pixels across its axis above its baseline's
/// extent: a tick is drawn to be seen, and the staircase of a rendered tilted line changes its
/// extent by at most about one pixel (so 2.5 leaves room for that and an anti-aliased rim).
const TILTED_MIN_TICK_PX: f32 = 2.5;

/// Splits `blobs` into rulers and the blobs that are not part of one.
pub(crate) fn find_rulers(w: usize, blobs: Vec<Blob>, s: &FieldMarkSettings) -> (Vec<Ruler>, Vec<Blob>) {
    let n = blobs.len();
    if n == 0 || n > 4000 {
        return (Vec::new(), blobs);
    }
    let mut parent: Vec<usize> = (0..n).collect();
    fn find(p: &mut [usize], mut i: usize) -> usize {
        while p[i] != i {
            p[i] = p[p[i]];
            i = p[i];
        }
        i
    }
    let g = s.ruler_gap_px;
    for i in 0..n {
        for j in i + 1..n {
            let (a, b) = (blobs[i].bbox, blobs[j].bbox);
            let gx = a[0].max(b[0]).saturating_sub(a[2].min(b[2]));
            let gy = a[1].max(b[1]).saturating_sub(a[3].min(b[3]));
            if gx <= g && gy <= g {
                let (ra, rb) = (find(&mut parent, i), find(&mut parent, j));
                parent[ra] = rb;
            }
        }
    }
    let mut groups: std::collections::BTreeMap<usize, Vec<usize>> = Default::default();
    for i in 0..n {
        let r = find(&mut parent, i);
        groups.entry(r).or_default().push(i);
    }
    let mut used = vec![false; n];
    let mut rulers = Vec::new();
    for members in groups.values() {
        let mut bb = [usize::MAX, usize::MAX, 0, 0];
        for &i in members {
            let b = blobs[i].bbox;
            bb = [bb[0].min(b[0]), bb[1].min(b[1]), bb[2].max(b[2]), bb[3].max(b[3])];
        }
        if let Some((ticks, period, angle)) = tilted(w, members.iter().map(|&i| &blobs[i]), s) {
            for &i in members {
                used[i] = true;
            }
            let px = members.iter().flat_map(|&i| blobs[i].pixels.iter().copied()).collect();
            rulers.push((bb, ticks, period, angle, Some(px)));
            continue;
        }
        let (bw, bh) = (bb[2] - bb[0], bb[3] - bb[1]);
        let (len, thick) = (bw.max(bh), bw.min(bh));
        if len < s.ruler_min_len || len < 3 * thick {
            continue;
        }
        let across_x = bw >= bh;
        let mut profile = vec![0usize; len];
        for &i in members {
            for &p in &blobs[i].pixels {
                let (y, x) = (p / w, p % w);
                profile[if across_x { x - bb[0] } else { y - bb[1] }] += 1;
            }
        }
        if let Some((ticks, period)) = ticks(&profile, s) {
            for &i in members {
                used[i] = true;
            }
            rulers.push((bb, ticks, period, if across_x { 0.0 } else { 90.0 }, None));
        }
    }
    let rest = blobs.into_iter().zip(used).filter(|(_, u)| !u).map(|(b, _)| b).collect();
    (rulers, rest)
}

/// A run of `members` tilted by more than `TILT_SNAP_DEG` from the rows and columns, long and
/// thin along its principal axis, whose extent across that axis pulses like ticks: its tick
/// count, spacing and angle (degrees from the rows, 0..180).
fn tilted<'a>(w: usize, members: impl Iterator<Item = &'a Blob>, s: &FieldMarkSettings) -> Option<(usize, f32, f32)> {
    let pts: Vec<(f32, f32)> = members.flat_map(|b| b.pixels.iter().map(|&p| ((p % w) as f32, (p / w) as f32))).collect();
    let n = pts.len() as f32;
    if pts.len() < s.ruler_min_len {
        return None;
    }
    let (mx, my) = (pts.iter().map(|p| p.0).sum::<f32>() / n, pts.iter().map(|p| p.1).sum::<f32>() / n);
    let (mut sxx, mut syy, mut sxy) = (0f32, 0f32, 0f32);
    for &(x, y) in &pts {
        sxx += (x - mx) * (x - mx);
        syy += (y - my) * (y - my);
        sxy += (x - mx) * (y - my);
    }
    // Principal axis of the pixel cloud: half the angle of (sxx - syy, 2 sxy).
    let theta = 0.5 * (2.0 * sxy).atan2(sxx - syy);
    let deg = theta.to_degrees().rem_euclid(180.0);
    let off_axis = (deg % 90.0).min(90.0 - deg % 90.0);
    if off_axis <= TILT_SNAP_DEG {
        return None;
    }
    let (ux, uy) = (theta.cos(), theta.sin());
    let along: Vec<f32> = pts.iter().map(|&(x, y)| (x - mx) * ux + (y - my) * uy).collect();
    let across: Vec<f32> = pts.iter().map(|&(x, y)| -(x - mx) * uy + (y - my) * ux).collect();
    let (t0, t1) = along.iter().fold((f32::MAX, f32::MIN), |(a, b), &t| (a.min(t), b.max(t)));
    let (v0, v1) = across.iter().fold((f32::MAX, f32::MIN), |(a, b), &v| (a.min(v), b.max(v)));
    let (len, thick) = (t1 - t0, v1 - v0);
    if len < s.ruler_min_len as f32 || len < 3.0 * thick {
        return None;
    }
    // Extent across the axis in each one-pixel step along it (0 where the step is empty).
    let steps = len.floor() as usize + 1;
    let mut lo = vec![f32::MAX; steps];
    let mut hi = vec![f32::MIN; steps];
    for (&t, &v) in along.iter().zip(&across) {
        let k = ((t - t0).floor() as usize).min(steps - 1);
        lo[k] = lo[k].min(v);
        hi[k] = hi[k].max(v);
    }
    let extent: Vec<f32> = lo.iter().zip(&hi).map(|(&a, &b)| if b >= a { b - a + 1.0 } else { 0.0 }).collect();
    // The baseline's extent: the lower quartile of the steps (ticks are narrow, so most steps
    // hold only the baseline, or nothing for a scale of separate ticks).
    let mut sorted = extent.clone();
    sorted.sort_by(|a, b| a.total_cmp(b));
    let base = sorted[sorted.len() / 4];
    let top = sorted[sorted.len() - 1];
    let need = (0.3 * (top - base)).max(TILTED_MIN_TICK_PX);
    // Two per tick step, none elsewhere: `ticks` reads pulses at least 2 high.
    let profile: Vec<usize> = extent.iter().map(|&e| 2 * usize::from(e - base >= need)).collect();
    ticks(&profile, s).map(|(k, p)| (k, p, deg))
}

/// Tick count and spacing when `profile` is a train of narrow, evenly spaced pulses.
fn ticks(profile: &[usize], s: &FieldMarkSettings) -> Option<(usize, f32)> {
    let base = *profile.iter().min()?;
    let top = *profile.iter().max()?;
    let rise = (top - base) as f32;
    let need = (0.3 * rise).max(2.0);
    let mut runs: Vec<(usize, usize)> = Vec::new();
    let mut start = None;
    for (i, &c) in profile.iter().chain(std::iter::once(&base)).enumerate() {
        let up = (c - base) as f32 >= need;
        match (up, start) {
            (true, None) => start = Some(i),
            (false, Some(a)) => {
                runs.push((a, i));
                start = None;
            }
            _ => {}
        }
    }
    if runs.len() < s.ruler_min_ticks {
        return None;
    }
    let centres: Vec<f32> = runs.iter().map(|&(a, b)| 0.5 * (a + b) as f32).collect();
    let mut gaps: Vec<f32> = centres.windows(2).map(|c| c[1] - c[0]).collect();
    let widest = runs.iter().map(|&(a, b)| b - a).max()? as f32;
    gaps.sort_by(|a, b| a.total_cmp(b));
    let period = gaps[gaps.len() / 2];
    if period < 3.0 || widest > 3f32.max(0.5 * period) {
        return None;
    }
    let tol = (s.ruler_spacing_tolerance * period).max(1.0);
    let even = gaps.iter().filter(|&&g| (g - period).abs() <= tol).count();
    (even * 10 >= gaps.len() * 9).then_some((runs.len(), period))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_pulse_train_is_ticks_and_a_word_is_not() {
        let s = FieldMarkSettings::default();
        // Baseline 1, ticks of 5 (majors 8) every 6 px, 1 px wide.
        let ruler: Vec<usize> = (0..60).map(|i| if i % 6 == 2 { if i % 30 == 2 { 9 } else { 6 } } else { 1 }).collect();
        let (n, p) = ticks(&ruler, &s).unwrap();
        assert_eq!((n, p), (10, 6.0));
        // Letter-like columns: wide uneven pulses.
        let word = [0, 5, 2, 2, 5, 0, 0, 7, 7, 7, 7, 0, 0, 3, 6, 6, 3, 0, 1, 7, 1, 1, 1, 0, 0, 4, 4, 4, 0, 0];
        assert!(ticks(&word, &s).is_none());
    }
}
