//! Rulers and scales: evenly spaced ticks along a line, with or without a baseline joining them.
//!
//! The components that stand out (see [`super::field`]) are joined when their boxes lie at most
//! `ruler_gap_px` apart. A joined run that is long (at least `ruler_min_len`) and at least
//! three times longer than it is thick is profiled along its length: the count of its pixels in
//! each column (row, for an upright run). A baseline adds the same count everywhere; ticks rise
//! above it as narrow pulses. The run is a ruler when it has at least `ruler_min_ticks` pulses,
//! each narrow (at most 3 px or half the spacing), spaced evenly: nine gaps in ten within
//! `ruler_spacing_tolerance` of their median. Letters on a line make wide, unevenly spaced
//! pulses and are left to the glyph finders. Rulers are looked for along the rows and columns
//! only; a tilted scale is not found as a ruler (its strokes may still be found as a line).

use super::FieldMarkSettings;
use super::measure::Blob;

/// A found ruler: its box, tick count and tick spacing (pixels).
pub(crate) type Ruler = ([usize; 4], usize, f32);

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
            rulers.push((bb, ticks, period));
        }
    }
    let rest = blobs.into_iter().zip(used).filter(|(_, u)| !u).map(|(b, _)| b).collect();
    (rulers, rest)
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
