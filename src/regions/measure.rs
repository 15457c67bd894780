//! Generic measures of a candidate mark, shared by the finders of the field's marks
//! ([`super::field`], [`super::ruler`]) and the mask growth ([`super::grow`]): the white top-hat
//! (what rises above the local background by less than a given width), the distance transform
//! inside a component (its stroke width), and the contrast, isolation and edge sharpness of a
//! component against the rings of pixels around it.
//!
//! All on flat row-major slices; per-component work stays inside the component's box plus a
//! margin, so a textured photograph with thousands of components stays cheap.

use super::grid::{components, median};

/// Separable square min (`max = false`) or max filter of radius `r`, clipped at the edges, in
/// constant time per pixel whatever `r` (the van Herk / Gil-Werman running extreme, common
/// practice).
fn extreme_filter(h: usize, w: usize, v: &[f32], r: usize, max: bool) -> Vec<f32> {
    let mut tmp = vec![0f32; h * w];
    let mut line = Vec::new();
    let mut res = Vec::new();
    for y in 0..h {
        running_extreme(&v[y * w..(y + 1) * w], r, max, &mut res);
        tmp[y * w..(y + 1) * w].copy_from_slice(&res);
    }
    let mut out = vec![0f32; h * w];
    for x in 0..w {
        line.clear();
        line.extend((0..h).map(|y| tmp[y * w + x]));
        running_extreme(&line, r, max, &mut res);
        for y in 0..h {
            out[y * w + x] = res[y];
        }
    }
    out
}

/// `out[i]` = min or max of `src[i-r ..= i+r]` (clipped): block prefix and suffix extremes over
/// blocks of 2r+1, so any window spans at most two blocks.
fn running_extreme(src: &[f32], r: usize, max: bool, out: &mut Vec<f32>) {
    let pick = |a: f32, b: f32| if max { a.max(b) } else { a.min(b) };
    let (n, k) = (src.len(), 2 * r + 1);
    let mut pre = src.to_vec();
    let mut suf = src.to_vec();
    for i in 1..n {
        if i % k != 0 {
            pre[i] = pick(pre[i - 1], src[i]);
        }
    }
    for i in (0..n.saturating_sub(1)).rev() {
        if (i + 1) % k != 0 {
            suf[i] = pick(suf[i + 1], src[i]);
        }
    }
    out.clear();
    out.extend((0..n).map(|i| {
        let (a, b) = (i.saturating_sub(r), (i + r).min(n - 1));
        if a / k != b / k {
            pick(suf[a], pre[b])
        } else if a % k == 0 {
            pre[b]
        } else {
            suf[a]
        }
    }));
}

/// White top-hat: `v` minus its opening by a (2r+1)² square. Bright structures narrower than
/// 2r+1 pixels keep their height above the local background; anything wider, and smooth
/// shading, goes to about 0 (morphological top-hat, common practice).
pub(crate) fn top_hat(h: usize, w: usize, v: &[f32], r: usize) -> Vec<f32> {
    let opened = extreme_filter(h, w, &extreme_filter(h, w, v, r, false), r, true);
    v.iter().zip(&opened).map(|(a, b)| (a - b).max(0.0)).collect()
}

/// One 8-connected component of a candidate mask, with the measures the finders judge it by.
#[derive(Clone, Debug)]
pub(crate) struct Blob {
    /// `[x0, y0, x1, y1]`, end exclusive.
    pub bbox: [usize; 4],
    /// Flat indices of its pixels.
    pub pixels: Vec<usize>,
    /// Median of the channel inside minus the median of the surroundings (ring 3..=6 px out).
    pub contrast: f32,
    /// Robust spread (1.4826·MAD) of the channel on the surroundings ring.
    pub ring_spread: f32,
    /// Share of the contrast still present 2 px outside the component (0 = a sharp edge that
    /// ends within the anti-aliased rim, near 1 = a soft blob that fades slowly).
    pub fade: f32,
    /// Stroke width from the distance transform: 2·median ridge distance − 1.
    pub stroke: f32,
    /// Area divided by box area.
    pub fill: f32,
    /// Largest enclosed hole (pixels not in the component, not reachable from outside its box),
    /// as a share of the box area.
    pub hole: f32,
    /// Robust spread of the channel inside, as a share of the contrast.
    pub inner_spread: f32,
    /// Robust spread of the brighter half of the pixels inside (channel units): the core of a
    /// stroke drawn in one ink holds one value; a photograph's bright structures vary.
    pub core_spread: f32,
}

impl Blob {
    pub fn width(&self) -> usize {
        self.bbox[2] - self.bbox[0]
    }
    pub fn height(&self) -> usize {
        self.bbox[3] - self.bbox[1]
    }
    pub fn size(&self) -> usize {
        self.width().max(self.height())
    }
}

/// Components of `on` whose box passes `keep_box(width, height, area)`, measured on `channel`.
pub(crate) fn blobs(
    h: usize,
    w: usize,
    channel: &[f32],
    on: &[bool],
    keep_box: impl Fn(usize, usize, usize) -> bool,
) -> Vec<Blob> {
    let (label, n) = components(h, w, on);
    if n == 0 {
        return Vec::new();
    }
    let mut bbox = vec![[usize::MAX, usize::MAX, 0, 0]; n + 1];
    let mut px: Vec<Vec<usize>> = vec![Vec::new(); n + 1];
    for (i, &l) in label.iter().enumerate() {
        if l == 0 {
            continue;
        }
        let (y, x) = (i / w, i % w);
        let b = &mut bbox[l as usize];
        b[0] = b[0].min(x);
        b[1] = b[1].min(y);
        b[2] = b[2].max(x + 1);
        b[3] = b[3].max(y + 1);
        px[l as usize].push(i);
    }
    let mut out = Vec::new();
    for l in 1..=n {
        let b = bbox[l];
        if !keep_box(b[2] - b[0], b[3] - b[1], px[l].len()) {
            continue;
        }
        out.push(measure(h, w, channel, &label, l as u32, b, std::mem::take(&mut px[l])));
    }
    out
}

/// Robust spread: 1.4826 × the median absolute deviation (common practice for a Gaussian-like
/// spread that ignores outliers).
pub(crate) fn robust_spread(v: &[f32]) -> f32 {
    let m = median(v);
    let dev: Vec<f32> = v.iter().map(|x| (x - m).abs()).collect();
    1.4826 * median(&dev)
}

const MARGIN: usize = 6;

fn quantile(v: &[f32], q: f32) -> f32 {
    let mut s = v.to_vec();
    s.sort_by(|a, b| a.total_cmp(b));
    s[((s.len() - 1) as f32 * q).round() as usize]
}

fn measure(h: usize, w: usize, ch: &[f32], label: &[u32], l: u32, b: [usize; 4], pixels: Vec<usize>) -> Blob {
    // Local window: the box plus MARGIN on every side (clipped); distances are chessboard
    // distances to the component, by two passes of a chamfer transform (common practice).
    let (x0, y0) = (b[0].saturating_sub(MARGIN), b[1].saturating_sub(MARGIN));
    let (x1, y1) = ((b[2] + MARGIN).min(w), (b[3] + MARGIN).min(h));
    let (lw, lh) = (x1 - x0, y1 - y0);
    let inside: Vec<bool> = (0..lw * lh).map(|k| label[(y0 + k / lw) * w + x0 + k % lw] == l).collect();
    let out_dist = chessboard(lw, lh, &inside, true);
    let in_dist = chessboard(lw, lh, &inside, false);
    let at = |k: usize| ch[(y0 + k / lw) * w + x0 + k % lw];
    let (mut ring, mut near2, mut inner) = (Vec::new(), Vec::new(), Vec::new());
    for k in 0..lw * lh {
        match out_dist[k] {
            0 => inner.push(at(k)),
            2 => near2.push(at(k)),
            3..=6 => ring.push(at(k)),
            _ => {}
        }
    }
    let bg = if ring.is_empty() { median(&near2) } else { median(&ring) };
    let contrast = median(&inner) - bg;
    let ring_spread = robust_spread(&ring);
    // The lower quartile 2 px out: a neighbouring stroke (a ruler's next tick, a letter's other
    // leg) lifts part of that ring, a soft blob lifts all of it.
    let fade = if contrast > 0.0 && !near2.is_empty() { ((quantile(&near2, 0.25) - bg) / contrast).max(0.0) } else { 1.0 };
    // Ridge of the inner distance: pixels whose distance no 8-neighbour exceeds.
    let mut ridge = Vec::new();
    for k in 0..lw * lh {
        let d = in_dist[k];
        if d == 0 {
            continue;
        }
        let (ly, lx) = (k / lw, k % lw);
        let mut top = true;
        for dy in -1i64..=1 {
            for dx in -1i64..=1 {
                let (ny, nx) = (ly as i64 + dy, lx as i64 + dx);
                if ny >= 0 && nx >= 0 && (ny as usize) < lh && (nx as usize) < lw && in_dist[ny as usize * lw + nx as usize] > d {
                    top = false;
                }
            }
        }
        if top {
            ridge.push(d as f32);
        }
    }
    let stroke = 2.0 * median(&ridge) - 1.0;
    let (bw, bh) = (b[2] - b[0], b[3] - b[1]);
    let fill = pixels.len() as f32 / (bw * bh) as f32;
    let hole = largest_hole(w, label, l, b) as f32 / (bw * bh) as f32;
    let inner_spread = if contrast > 0.0 { robust_spread(&inner) / contrast } else { f32::INFINITY };
    let mid = median(&inner);
    let core: Vec<f32> = inner.iter().copied().filter(|&x| x >= mid).collect();
    let core_spread = robust_spread(&core);
    Blob { bbox: b, pixels, contrast, ring_spread, fade, stroke, fill, hole, inner_spread, core_spread }
}

/// Chessboard distances in a `lw`×`lh` window. With `to_inside`: each pixel's distance to the
/// component (0 inside it). Otherwise: each inside pixel's distance to the nearest outside pixel
/// or the window edge (0 outside, 1 on the outline).
pub(crate) fn chessboard(lw: usize, lh: usize, inside: &[bool], to_inside: bool) -> Vec<u16> {
    const FAR: u16 = u16::MAX / 2;
    let mut d: Vec<u16> = inside.iter().map(|&i| if i == to_inside { 0 } else { FAR }).collect();
    if !to_inside {
        // The window edge counts as outside.
        for k in 0..lw * lh {
            let (y, x) = (k / lw, k % lw);
            if d[k] != 0 && (y == 0 || x == 0 || y + 1 == lh || x + 1 == lw) {
                d[k] = 1;
            }
        }
    }
    for y in 0..lh {
        for x in 0..lw {
            let k = y * lw + x;
            let mut m = d[k];
            if x > 0 {
                m = m.min(d[k - 1] + 1);
            }
            if y > 0 {
                m = m.min(d[k - lw] + 1);
                if x > 0 {
                    m = m.min(d[k - lw - 1] + 1);
                }
                if x + 1 < lw {
                    m = m.min(d[k - lw + 1] + 1);
                }
            }
            d[k] = m;
        }
    }
    for y in (0..lh).rev() {
        for x in (0..lw).rev() {
            let k = y * lw + x;
            let mut m = d[k];
            if x + 1 < lw {
                m = m.min(d[k + 1] + 1);
            }
            if y + 1 < lh {
                m = m.min(d[k + lw] + 1);
                if x + 1 < lw {
                    m = m.min(d[k + lw + 1] + 1);
                }
                if x > 0 {
                    m = m.min(d[k + lw - 1] + 1);
                }
            }
            d[k] = m;
        }
    }
    d
}

/// Pixels of the largest part of the box (padded by one) not in component `l` and not
/// 4-connected to the padding: the component's largest enclosed hole.
fn largest_hole(w: usize, label: &[u32], l: u32, b: [usize; 4]) -> usize {
    let (bw, bh) = (b[2] - b[0] + 2, b[3] - b[1] + 2);
    let wall = |k: usize| {
        let (y, x) = (k / bw, k % bw);
        x > 0 && y > 0 && x + 1 < bw && y + 1 < bh && label[(b[1] + y - 1) * w + b[0] + x - 1] == l
    };
    let mut seen = vec![false; bw * bh];
    let mut best = 0usize;
    let mut stack = Vec::new();
    for start in 0..bw * bh {
        if seen[start] || wall(start) {
            continue;
        }
        seen[start] = true;
        stack.push(start);
        let (mut size, mut open) = (0usize, false);
        while let Some(k) = stack.pop() {
            size += 1;
            let (y, x) = (k / bw, k % bw);
            if x == 0 || y == 0 || x + 1 == bw || y + 1 == bh {
                open = true;
            }
            let nb = [(y > 0).then(|| k - bw), (y + 1 < bh).then(|| k + bw), (x > 0).then(|| k - 1), (x + 1 < bw).then(|| k + 1)];
            for q in nb.into_iter().flatten() {
                if !seen[q] && !wall(q) {
                    seen[q] = true;
                    stack.push(q);
                }
            }
        }
        if !open {
            best = best.max(size);
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn running_extreme_matches_the_plain_window() {
        let src: Vec<f32> = (0..37).map(|i| ((i * 7919) % 31) as f32).collect();
        let mut out = Vec::new();
        for r in [0, 1, 2, 5, 40] {
            for max in [false, true] {
                running_extreme(&src, r, max, &mut out);
                for i in 0..src.len() {
                    let w = &src[i.saturating_sub(r)..(i + r + 1).min(src.len())];
                    let want = if max { w.iter().copied().fold(f32::MIN, f32::max) } else { w.iter().copied().fold(f32::MAX, f32::min) };
                    assert_eq!(out[i], want, "r={r} max={max} i={i}");
                }
            }
        }
    }

    #[test]
    fn top_hat_keeps_a_thin_line_and_drops_a_ramp() {
        let (h, w) = (20, 30);
        let v: Vec<f32> = (0..h * w).map(|k| 0.2 + 0.01 * (k % w) as f32 + if k / w == 10 { 0.5 } else { 0.0 }).collect();
        let t = top_hat(h, w, &v, 3);
        for x in 3..27 {
            assert!((t[10 * w + x] - 0.5).abs() < 0.02, "line kept at x={x}: {}", t[10 * w + x]);
            assert!(t[5 * w + x] < 1e-6, "ramp gone at x={x}");
        }
    }

    #[test]
    fn a_ring_has_a_hole_a_thin_stroke_and_a_sharp_edge() {
        let (h, w) = (40, 40);
        let on: Vec<bool> = (0..h * w)
            .map(|k| {
                let (y, x) = ((k / w) as f32 - 20.0, (k % w) as f32 - 20.0);
                let r = (x * x + y * y).sqrt();
                (10.0..12.0).contains(&r)
            })
            .collect();
        let v: Vec<f32> = on.iter().map(|&o| if o { 0.9 } else { 0.3 }).collect();
        let b = blobs(h, w, &v, &on, |_, _, _| true);
        assert_eq!(b.len(), 1);
        let r = &b[0];
        assert!((r.contrast - 0.6).abs() < 1e-6 && r.fade < 1e-6 && r.ring_spread < 1e-6, "{r:?}");
        assert!(r.stroke <= 3.0 && r.hole > 0.4, "{r:?}");
    }
}
