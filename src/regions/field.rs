//! The field's other marks, beside the text tags of [`super::mark`]: bare glyphs and letters
//! (a side marker with no plate), drawn annotations (a reader's ring, line, arrow or cross),
//! rulers ([`super::ruler`]) and stickers or pen blobs.
//!
//! Three channels are searched: brightness, darkness (both over the image's value range) and,
//! for colour pictures, saturation (max − min of R, G, B). In each, a white top-hat lifts
//! structures narrower than `max_stroke_px` off their local background, whatever the shading
//! under them; its components are kept only when they **stand out** from the pixels around
//! them: a rise of at least `min_contrast` over the ring 3..6 px out, at least `min_isolation`
//! times that ring's own spread, and at most `max_fade` of the rise left 2 px outside (a drawn
//! mark ends within its anti-aliased rim). Those that stand out are sorted by shape: a thin
//! stroke (distance-transform width at most `annotation_max_thinness` of its size) at least
//! `annotation_min_px` long is a drawn annotation (a ring when it encloses a large hole), a
//! smaller stroked component a glyph (glyphs close together join one region), and rows of
//! evenly spaced ticks a ruler (along the rows, the columns or a tilted axis). Stickers and pen
//! blobs are searched the same way with a top-hat as wide as the largest sticker, and must be
//! filled, flat inside and, on a grey image, at the image's extreme. No glyph, annotation or
//! sticker touches the image's outermost row or column (a mark is drawn whole inside the frame).
//! With the defaults only rulers are looked for (`FieldMarkSettings::rulers`); the other kinds
//! when `FieldMarkSettings::enabled` is set.
//!
//! The masks follow the mark: a glyph group or ruler its box, an annotation or sticker its own
//! pixels (a ring's box would hold the structure it rings, which is anatomy), each widened by a
//! pixel; [`super::grow`] then grows them for removal.

use ndarray::{Array2, Array3};

use super::grid::{dilate, flat, to_mask};
use super::measure::{Blob, blobs, top_hat};
use super::{FieldMarkSettings, MarkShape, Region, RegionKind};

/// One searched channel: values where a mark is high, and the threshold of a rise there.
struct Channel {
    name: &'static str,
    values: Vec<f32>,
    min_rise: f32,
    /// Stroke pixels have at least this value (grey channels: near the image's extreme; the
    /// saturation channel: clearly coloured).
    stroke_floor: f32,
    /// Sticker pixels have at least this value.
    sticker_floor: f32,
}

fn channels(pixels: &Array3<f32>, luma: &[f32], ex: &[bool], s: &FieldMarkSettings) -> Vec<Channel> {
    let (mut lo, mut hi) = (f32::INFINITY, f32::NEG_INFINITY);
    for (x, &e) in luma.iter().zip(ex) {
        if !e {
            lo = lo.min(*x);
            hi = hi.max(*x);
        }
    }
    let range = hi - lo;
    let mut out = Vec::new();
    if range >= 0.1 {
        let bright: Vec<f32> = luma.iter().map(|x| (x - lo) / range).collect();
        let dark: Vec<f32> = bright.iter().map(|x| 1.0 - x).collect();
        let (stroke_floor, sticker_floor) = (1.0 - s.extreme_margin, 1.0 - s.sticker_extreme_margin);
        out.push(Channel { name: "bright", values: bright, min_rise: s.min_contrast, stroke_floor, sticker_floor });
        out.push(Channel { name: "dark", values: dark, min_rise: s.min_contrast, stroke_floor, sticker_floor });
    }
    let (h, w, c) = pixels.dim();
    if c >= 3 {
        let sat: Vec<f32> = (0..h * w)
            .map(|p| {
                let (y, x) = (p / w, p % w);
                let v = [pixels[[y, x, 0]], pixels[[y, x, 1]], pixels[[y, x, 2]]];
                v.iter().copied().fold(f32::MIN, f32::max) - v.iter().copied().fold(f32::MAX, f32::min)
            })
            .collect();
        if sat.iter().any(|&v| v >= s.min_saturation) {
            let floor = s.min_saturation;
            out.push(Channel { name: "coloured", values: sat, min_rise: s.min_colour_contrast, stroke_floor: floor, sticker_floor: floor });
        }
    }
    out
}

/// Rises over its surroundings by enough, against their spread, and ends with a sharp edge.
fn rises_sharply(b: &Blob, ch: &Channel, s: &FieldMarkSettings) -> bool {
    b.contrast >= ch.min_rise && b.contrast >= s.min_isolation * b.ring_spread && b.fade <= s.max_fade
}

/// ... and holds one value in its core (one ink).
fn stands_out(b: &Blob, ch: &Channel, s: &FieldMarkSettings) -> bool {
    rises_sharply(b, ch, s) && b.core_spread <= s.max_core_spread
}

/// What a standing-out stroke component is.
enum Stroke {
    Ring,
    Line,
    Glyph,
    /// Too small or too thick for the others; may still be a ruler's tick.
    Bit,
}

/// Whether the component's box reaches the image's outermost row or column. A mark is drawn
/// inside the frame, whole; a structure the frame cuts (a retina's rim, a coin at the edge, a
/// photograph's foreground running out of shot) continues beyond it, so its shape says nothing.
/// Rulers are exempt: a scale is often laid along the very edge.
fn touches_edge(b: &Blob, w: usize, h: usize) -> bool {
    b.bbox[0] == 0 || b.bbox[1] == 0 || b.bbox[2] >= w || b.bbox[3] >= h
}

fn classify(b: &Blob, w: usize, h: usize, s: &FieldMarkSettings) -> Stroke {
    if touches_edge(b, w, h) {
        return Stroke::Bit;
    }
    let short = h.min(w) as f32;
    let size = b.size() as f32;
    let thin = b.stroke <= s.annotation_max_thinness * size;
    if b.size() >= s.annotation_min_px && thin && size <= s.max_size_fraction * short {
        return if b.hole >= s.ring_min_hole { Stroke::Ring } else { Stroke::Line };
    }
    if b.size() >= s.min_px
        && b.width().min(b.height()) >= s.glyph_min_side_px
        && size <= s.glyph_max_fraction * short
        && b.stroke <= s.glyph_max_thinness * size
        && b.stroke <= s.max_stroke_px as f32
    {
        return Stroke::Glyph;
    }
    Stroke::Bit
}

/// Finds bare glyphs, drawn annotations, rulers, stickers and pen blobs in `pixels` (H×W×C,
/// 0..1) whose luminance is `luma`. Pixels set in `exclude` (regions found before) are never
/// part of a mark. Rulers are looked for when `s.rulers` or `s.enabled` is set, the other kinds
/// when `s.enabled` is.
pub fn find_field_marks(pixels: &Array3<f32>, luma: &Array2<f32>, exclude: Option<&Array2<bool>>, s: &FieldMarkSettings) -> Vec<Region> {
    let (h, w, v) = flat(luma);
    if h < 16 || w < 16 || pixels.dim().0 != h || pixels.dim().1 != w {
        return Vec::new();
    }
    let ex: Vec<bool> = match exclude {
        Some(m) if m.dim() == (h, w) => m.iter().copied().collect(),
        _ => vec![false; h * w],
    };
    let short = h.min(w) as f32;
    let mut taken = ex.clone();
    let mut out = Vec::new();
    let (all, rulers_on) = (s.enabled, s.enabled || s.rulers);
    if !rulers_on {
        return Vec::new();
    }
    for ch in channels(pixels, &v, &ex, s) {
        // Stickers first: the rim of a large blob passes the stroke top-hat as thin crescents.
        if all {
            stickers(h, w, &ch, &mut taken, &mut out, s);
        }
        let th = top_hat(h, w, &ch.values, s.max_stroke_px.div_ceil(2));
        let on: Vec<bool> = (0..h * w).map(|p| !taken[p] && th[p] >= ch.min_rise && ch.values[p] >= ch.stroke_floor).collect();
        // Long runs may be rulers; the size limits of the other kinds apply in `classify`.
        let found = blobs(h, w, &ch.values, &on, |bw, bh, area| area >= 3 && bw.max(bh) >= 3);
        // The texture count below asks only that a component rise clearly over an even
        // surrounding, not that it be flat inside: a photograph's relief is counted whether or
        // not its highlights happen to be flat, so the count does not hinge on the core test.
        let rising = found
            .iter()
            .filter(|b| b.size() >= s.min_px && b.contrast >= ch.min_rise && b.contrast >= s.min_isolation * b.ring_spread)
            .count();
        // Rulers first: their ticks would otherwise pass as glyphs or lines. A ruler's evidence
        // is its evenly spaced ticks, so its ticks need only rise over their surroundings with a
        // sharp edge, not hold one value inside (a thin tilted tick's anti-aliased pixels never
        // do); the other kinds are judged on the components that stand out in full.
        let sharp: Vec<Blob> = found.into_iter().filter(|b| rises_sharply(b, &ch, s)).collect();
        let n_sharp = sharp.len();
        let (rulers, rest) = super::ruler::find_rulers(w, sharp, s);
        let taken_by_rulers = n_sharp - rest.len();
        let rest: Vec<Blob> = rest.into_iter().filter(|b| stands_out(b, &ch, s)).collect();
        for (bbox, ticks, period, angle, pixels) in rulers {
            let run = (bbox[2] - bbox[0]).max(bbox[3] - bbox[1]);
            match pixels {
                None => {
                    let reason = format!("{ticks} {} ticks every {period:.1} px along a {run} px run, standing out from the pixels around them", ch.name);
                    push_box(&mut out, &mut taken, h, w, bbox, 0.8, MarkShape::Ruler, "ruler", reason);
                }
                Some(px) => {
                    let reason = format!(
                        "{ticks} {} ticks every {period:.1} px along a run tilted {angle:.0}° from the rows, standing out from the pixels around them",
                        ch.name
                    );
                    push_pixels(&mut out, &mut taken, h, w, &px, 0.8, MarkShape::Ruler, "ruler", reason);
                }
            }
        }
        // A photograph's own texture (mortar, highlights on relief, whiskers) stands out in many
        // places at once; marks are few. Past `max_marks_per_channel` standing components the
        // channel is texture and gives no glyph or annotation.
        let few = all && rising.saturating_sub(taken_by_rulers) <= s.max_marks_per_channel;
        let mut glyphs = Vec::new();
        for b in rest.into_iter().filter(|_| few) {
            match classify(&b, w, h, s) {
                Stroke::Ring | Stroke::Line => {
                    let ring = matches!(classify(&b, w, h, s), Stroke::Ring);
                    let detail = if ring { "ring" } else { "line, arrow or cross" };
                    let reason = format!(
                        "a thin {} {detail} {} px across, stroke {:.0} px, rising {:.2} over its surroundings ({:.0}× their spread) with a sharp edge",
                        ch.name,
                        b.size(),
                        b.stroke,
                        b.contrast,
                        b.contrast / b.ring_spread.max(1e-3)
                    );
                    push_pixels(&mut out, &mut taken, h, w, &b.pixels, confidence(&b, s), MarkShape::DrawnAnnotation, detail, reason);
                }
                Stroke::Glyph => glyphs.push(b),
                Stroke::Bit => {}
            }
        }
        for group in group_glyphs(glyphs, s.group_gap) {
            let mut bb = [usize::MAX, usize::MAX, 0, 0];
            for g in &group {
                bb = [bb[0].min(g.bbox[0]), bb[1].min(g.bbox[1]), bb[2].max(g.bbox[2]), bb[3].max(g.bbox[3])];
            }
            if (bb[2] - bb[0]).max(bb[3] - bb[1]) as f32 > s.max_size_fraction * short {
                continue;
            }
            let k = group.len();
            let conf = group.iter().map(|g| confidence(g, s)).fold(0f32, f32::max);
            let reason = format!(
                "{k} {} letter-like glyph{} with no plate, {} px high, stroke {:.0} px, rising {:.2} over the surroundings with a sharp edge",
                ch.name,
                if k == 1 { "" } else { "s" },
                group.iter().map(|g| g.height()).max().unwrap_or(0),
                group[0].stroke,
                group.iter().map(|g| g.contrast).fold(f32::INFINITY, f32::min)
            );
            push_box(&mut out, &mut taken, h, w, bb, conf, MarkShape::Glyph, if k == 1 { "glyph" } else { "glyphs" }, reason);
        }
    }
    out
}

/// 0.6 for a component that stands out, up to 1 as it does so by a wide margin.
fn confidence(b: &Blob, s: &FieldMarkSettings) -> f32 {
    let mut c = 0.6f32;
    if b.contrast >= 2.0 * s.min_isolation * b.ring_spread {
        c += 0.15;
    }
    if b.fade <= 0.5 * s.max_fade {
        c += 0.15;
    }
    if b.contrast >= 0.5 {
        c += 0.1;
    }
    c.min(1.0)
}

fn stickers(h: usize, w: usize, ch: &Channel, taken: &mut [bool], out: &mut Vec<Region>, s: &FieldMarkSettings) {
    let short = h.min(w) as f32;
    let max_side = (s.sticker_max_fraction * short) as usize;
    let th = top_hat(h, w, &ch.values, max_side / 2 + 1);
    let on: Vec<bool> = (0..h * w)
        .map(|p| !taken[p] && th[p] >= ch.min_rise && ch.values[p] >= ch.sticker_floor)
        .collect();
    let found = blobs(h, w, &ch.values, &on, |bw, bh, area| {
        bw.max(bh) >= s.min_px && bw.max(bh) <= max_side && area as f32 >= s.sticker_min_fill * (bw * bh) as f32
    });
    for b in found {
        let thick = b.stroke >= 0.3 * b.size() as f32;
        if !(stands_out(&b, ch, s) && !touches_edge(&b, w, h) && thick && b.fill >= s.sticker_min_fill && b.inner_spread <= s.sticker_max_inner_spread) {
            continue;
        }
        let reason = format!(
            "a flat {} blob {}×{} px (filled {:.0} %), rising {:.2} over its surroundings with a sharp edge: a sticker, label or pen mark",
            ch.name,
            b.width(),
            b.height(),
            100.0 * b.fill,
            b.contrast
        );
        push_pixels(out, taken, h, w, &b.pixels, confidence(&b, s), MarkShape::Sticker, "sticker or pen mark", reason);
    }
}

fn group_glyphs(glyphs: Vec<Blob>, gap: f32) -> Vec<Vec<Blob>> {
    let n = glyphs.len();
    if n > 2000 {
        return Vec::new();
    }
    let mut parent: Vec<usize> = (0..n).collect();
    fn find(p: &mut [usize], mut i: usize) -> usize {
        while p[i] != i {
            p[i] = p[p[i]];
            i = p[i];
        }
        i
    }
    for i in 0..n {
        for j in i + 1..n {
            let (a, b) = (&glyphs[i], &glyphs[j]);
            let (sa, sb) = (a.size() as f32, b.size() as f32);
            if sa.max(sb) > 3.0 * sa.min(sb) {
                continue;
            }
            let gx = a.bbox[0].max(b.bbox[0]).saturating_sub(a.bbox[2].min(b.bbox[2])) as f32;
            let gy = a.bbox[1].max(b.bbox[1]).saturating_sub(a.bbox[3].min(b.bbox[3])) as f32;
            let reach = gap * sa.max(sb);
            if gx <= reach && gy <= reach {
                let (ra, rb) = (find(&mut parent, i), find(&mut parent, j));
                parent[ra] = rb;
            }
        }
    }
    let mut groups: std::collections::BTreeMap<usize, Vec<Blob>> = Default::default();
    for (i, g) in glyphs.into_iter().enumerate() {
        let r = find(&mut parent, i);
        groups.entry(r).or_default().push(g);
    }
    groups.into_values().collect()
}

#[allow(clippy::too_many_arguments)]
fn push_box(out: &mut Vec<Region>, taken: &mut [bool], h: usize, w: usize, bb: [usize; 4], conf: f32, shape: MarkShape, detail: &str, reason: String) {
    let (x0, y0, x1, y1) = (bb[0].saturating_sub(1), bb[1].saturating_sub(1), (bb[2] + 1).min(w), (bb[3] + 1).min(h));
    let on: Vec<bool> = (0..h * w).map(|p| (y0..y1).contains(&(p / w)) && (x0..x1).contains(&(p % w))).collect();
    push(out, taken, h, w, on, conf, shape, detail, reason);
}

#[allow(clippy::too_many_arguments)]
fn push_pixels(out: &mut Vec<Region>, taken: &mut [bool], h: usize, w: usize, pixels: &[usize], conf: f32, shape: MarkShape, detail: &str, reason: String) {
    let mut on = vec![false; h * w];
    for &p in pixels {
        on[p] = true;
    }
    push(out, taken, h, w, dilate(h, w, &on, 1), conf, shape, detail, reason);
}

#[allow(clippy::too_many_arguments)]
fn push(out: &mut Vec<Region>, taken: &mut [bool], h: usize, w: usize, on: Vec<bool>, conf: f32, shape: MarkShape, detail: &str, reason: String) {
    for (t, &o) in taken.iter_mut().zip(&on) {
        *t |= o;
    }
    if let Some(mut r) = Region::from_mask(RegionKind::BurnedInMark, to_mask(h, w, on), conf, detail, reason) {
        r.mark = Some(shape);
        out.push(r);
    }
}
