//! Burned-in marks: text, tags, rulers, arrows and symbols drawn into the pixels.
//!
//! Candidate pixels sit near the image's brightest or darkest value and stand out from their
//! neighbourhood mean. Their 8-connected components are kept as glyphs when they are small,
//! thin-stroked (2·area / outline length) and sharp-edged (a large mean step across the
//! outline: rendered pixels end abruptly, anatomy and highlights fade). Glyphs of one polarity
//! close to each other join one mark, so the letters of a tag make one region. A mark is
//! believed more when it has several glyphs on a common line with similar strokes, and when it
//! lies near an edge or corner, where digitisers put them; marks in the interior need several
//! aligned glyphs.
//!
//! Confidence (kept when at least `min_confidence`, default 0.6): 0.3 for sharp extreme glyphs,
//! +0.35 when they share a text line, +0.05 for even strokes, +0.1 near an edge, +0.05 near a
//! corner, +0.15 when crisp (mean edge step ≥ `crisp_edge_step`). So a crisp lone symbol counts
//! only in a corner, and soft or scattered bright bits (highlights, texture) not at all.

use ndarray::Array2;

use super::grid::{box_mean, components, flat};
use super::{MarkSettings, MarkShape, Region, RegionKind};

#[derive(Clone, Debug)]
struct Glyph {
    bbox: [usize; 4],
    area: usize,
    stroke: f32,
    step: f32,
    bright: bool,
}

impl Glyph {
    fn width(&self) -> usize {
        self.bbox[2] - self.bbox[0]
    }
    fn height(&self) -> usize {
        self.bbox[3] - self.bbox[1]
    }
    fn size(&self) -> usize {
        self.width().max(self.height())
    }
}

/// Finds burned-in marks in a luminance image (H×W, 0..1). Pixels set in `exclude` (border
/// bands found first) are never part of a mark.
pub fn find_burned_in_marks(
    image: &Array2<f32>,
    exclude: Option<&Array2<bool>>,
    s: &MarkSettings,
) -> Vec<Region> {
    let (h, w, v) = flat(image);
    if h < 8 || w < 8 {
        return Vec::new();
    }
    let ex: Vec<bool> = match exclude {
        Some(m) if m.dim() == (h, w) => m.iter().copied().collect(),
        _ => vec![false; h * w],
    };
    let (mut lo, mut hi) = (f32::INFINITY, f32::NEG_INFINITY);
    for (x, &e) in v.iter().zip(&ex) {
        if !e {
            lo = lo.min(*x);
            hi = hi.max(*x);
        }
    }
    let range = hi - lo;
    if !(range >= 0.1) {
        return Vec::new();
    }
    let mean = box_mean(h, w, &v, s.window / 2);
    let mut glyphs = Vec::new();
    for bright in [true, false] {
        let on: Vec<bool> = (0..h * w)
            .map(|i| {
                !ex[i]
                    && if bright {
                        v[i] >= hi - s.extreme_margin * range && v[i] - mean[i] >= s.local_contrast * range
                    } else {
                        v[i] <= lo + s.extreme_margin * range && mean[i] - v[i] >= s.local_contrast * range
                    }
            })
            .collect();
        glyphs.extend(glyphs_of(h, w, &v, &on, bright, range, s));
    }
    // The background between a bright glyph's strokes is dark next to them and can pass as dark
    // glyphs (and the reverse); where opposite glyphs touch, keep the crisper one.
    let touches = |a: &Glyph, b: &Glyph| {
        a.bbox[0] <= b.bbox[2] && b.bbox[0] <= a.bbox[2] && a.bbox[1] <= b.bbox[3] && b.bbox[1] <= a.bbox[3]
    };
    let keep: Vec<bool> = glyphs
        .iter()
        .map(|g| !glyphs.iter().any(|o| o.bright != g.bright && o.step > g.step && touches(g, o)))
        .collect();
    let glyphs = glyphs.into_iter().zip(keep).filter(|(_, k)| *k).map(|(g, _)| g).collect();
    group(h, w, glyphs, s)
}

fn glyphs_of(h: usize, w: usize, v: &[f32], on: &[bool], bright: bool, range: f32, s: &MarkSettings) -> Vec<Glyph> {
    let (label, n) = components(h, w, on);
    if n == 0 {
        return Vec::new();
    }
    let mut bbox = vec![[usize::MAX, usize::MAX, 0, 0]; n + 1];
    let mut area = vec![0usize; n + 1];
    let mut outline = vec![0usize; n + 1];
    let mut step = vec![0f32; n + 1];
    for y in 0..h {
        for x in 0..w {
            let i = y * w + x;
            let l = label[i] as usize;
            if l == 0 {
                continue;
            }
            let b = &mut bbox[l];
            b[0] = b[0].min(x);
            b[1] = b[1].min(y);
            b[2] = b[2].max(x + 1);
            b[3] = b[3].max(y + 1);
            area[l] += 1;
            let mut look = |j: usize| {
                if label[j] as usize != l {
                    outline[l] += 1;
                    step[l] += (v[i] - v[j]).abs();
                }
            };
            if x > 0 {
                look(i - 1);
            }
            if x + 1 < w {
                look(i + 1);
            }
            if y > 0 {
                look(i - w);
            }
            if y + 1 < h {
                look(i + w);
            }
        }
    }
    let max_size = (s.max_glyph_fraction * h.min(w) as f32).max(s.min_glyph_px as f32);
    (1..=n)
        .filter_map(|l| {
            let g = Glyph {
                bbox: bbox[l],
                area: area[l],
                stroke: 2.0 * area[l] as f32 / outline[l].max(1) as f32,
                step: step[l] / outline[l].max(1) as f32 / range,
                bright,
            };
            let ok = g.area >= 3
                && g.size() >= s.min_glyph_px
                && g.size() as f32 <= max_size
                && g.stroke <= s.max_stroke_px.max(s.max_stroke_fraction * g.size() as f32)
                && g.step >= s.min_edge_step;
            ok.then_some(g)
        })
        .collect()
}

fn find(parent: &mut [usize], mut i: usize) -> usize {
    while parent[i] != i {
        parent[i] = parent[parent[i]];
        i = parent[i];
    }
    i
}

fn group(h: usize, w: usize, glyphs: Vec<Glyph>, s: &MarkSettings) -> Vec<Region> {
    let n = glyphs.len();
    // Textured photographs can yield thousands of tiny glyphs; they are not marks, and the
    // pairwise grouping below would be slow.
    if n == 0 || n > 4000 {
        return Vec::new();
    }
    let mut parent: Vec<usize> = (0..n).collect();
    for i in 0..n {
        for j in i + 1..n {
            let (a, b) = (&glyphs[i], &glyphs[j]);
            if a.bright != b.bright {
                continue;
            }
            let (sa, sb) = (a.size() as f32, b.size() as f32);
            if sa.max(sb) > 3.0 * sa.min(sb) {
                continue;
            }
            let gap_x = a.bbox[0].max(b.bbox[0]).saturating_sub(a.bbox[2].min(b.bbox[2])) as f32;
            let gap_y = a.bbox[1].max(b.bbox[1]).saturating_sub(a.bbox[3].min(b.bbox[3])) as f32;
            let reach = s.group_gap * sa.max(sb);
            if gap_x <= reach && gap_y <= reach {
                let (ra, rb) = (find(&mut parent, i), find(&mut parent, j));
                parent[ra] = rb;
            }
        }
    }
    let mut members: std::collections::BTreeMap<usize, Vec<usize>> = Default::default();
    for i in 0..n {
        let r = find(&mut parent, i);
        members.entry(r).or_default().push(i);
    }
    let short = h.min(w) as f32;
    let zone = s.edge_zone * short;
    let mut out = Vec::new();
    for (_, idx) in members {
        let gs: Vec<&Glyph> = idx.iter().map(|&i| &glyphs[i]).collect();
        let mut bb = [usize::MAX, usize::MAX, 0, 0];
        for g in &gs {
            bb[0] = bb[0].min(g.bbox[0]);
            bb[1] = bb[1].min(g.bbox[1]);
            bb[2] = bb[2].max(g.bbox[2]);
            bb[3] = bb[3].max(g.bbox[3]);
        }
        // A whole mark is still small: a cluster spanning much of the image is texture.
        if (bb[2] - bb[0]).max(bb[3] - bb[1]) as f32 > 0.5 * short {
            continue;
        }
        let k = gs.len();
        // Aligned: most glyphs share a text line (vertical overlap of at least half the shorter
        // glyph) or a text column with another glyph.
        let aligned = k >= 2 && {
            let shares = |a: &Glyph, b: &Glyph, axis: usize| {
                let (a0, a1, b0, b1) = (a.bbox[axis], a.bbox[axis + 2], b.bbox[axis], b.bbox[axis + 2]);
                let ov = a1.min(b1).saturating_sub(a0.max(b0)) as f32;
                ov >= 0.5 * ((a1 - a0).min(b1 - b0)) as f32
            };
            let in_line = gs
                .iter()
                .enumerate()
                .filter(|(i, a)| gs.iter().enumerate().any(|(j, b)| *i != j && (shares(a, b, 1) || shares(a, b, 0))))
                .count();
            in_line * 3 >= k * 2
        };
        let strokes: Vec<f32> = gs.iter().map(|g| g.stroke).collect();
        let (smin, smax) = strokes.iter().fold((f32::INFINITY, 0f32), |a, &x| (a.0.min(x), a.1.max(x)));
        let even_strokes = k >= 2 && smax <= 2.5 * smin;
        let near = [
            bb[1] as f32 <= zone,
            (h - bb[3]) as f32 <= zone,
            bb[0] as f32 <= zone,
            (w - bb[2]) as f32 <= zone,
        ];
        let near_edge = near.iter().any(|&b| b);
        let near_corner = (near[0] || near[1]) && (near[2] || near[3]);
        if !near_edge && !(k >= s.interior_min_glyphs && aligned) {
            continue;
        }
        let mean_step = gs.iter().map(|g| g.step).sum::<f32>() / k as f32;
        // Evidence adds up: text-like layout, position where digitisers write, crisp rendering.
        let mut conf = 0.3f32;
        if aligned {
            conf += 0.35;
        }
        if even_strokes {
            conf += 0.05;
        }
        if near_edge {
            conf += 0.1;
        }
        if near_corner {
            conf += 0.05;
        }
        if mean_step >= s.crisp_edge_step {
            conf += 0.15;
        }
        let conf = conf.min(1.0);
        if conf < s.min_confidence {
            continue;
        }
        let g = s.grow_px;
        let (x0, y0, x1, y1) = (bb[0].saturating_sub(g), bb[1].saturating_sub(g), (bb[2] + g).min(w), (bb[3] + g).min(h));
        let mut mask = Array2::from_elem((h, w), false);
        mask.slice_mut(ndarray::s![y0..y1, x0..x1]).fill(true);
        let detail = if k >= 2 && aligned { "text-like tag" } else { "symbol" };
        let place = match (near[0], near[1], near[2], near[3]) {
            (true, _, true, _) => "top-left corner",
            (true, _, _, true) => "top-right corner",
            (_, true, true, _) => "bottom-left corner",
            (_, true, _, true) => "bottom-right corner",
            (true, ..) => "top edge",
            (_, true, ..) => "bottom edge",
            (_, _, true, _) => "left edge",
            (_, _, _, true) => "right edge",
            _ => "interior",
        };
        let height = gs.iter().map(|g| g.height()).max().unwrap_or(0);
        let mean_stroke = strokes.iter().sum::<f32>() / k as f32;
        let reason = format!(
            "{k} {shade} sharp-edged glyph{plural}{line} near the {place}, {height} px high, stroke {mean_stroke:.1} px, edge step {mean_step:.2} of the value range",
            shade = if gs[0].bright { "bright" } else { "dark" },
            plural = if k == 1 { "" } else { "s" },
            line = if aligned { " on a common line" } else { "" },
        );
        if let Some(mut r) = Region::from_mask(RegionKind::BurnedInMark, mask, conf, detail, reason) {
            r.mark = Some(if detail == "text-like tag" { MarkShape::Text } else { MarkShape::Glyph });
            out.push(r);
        }
    }
    out
}
