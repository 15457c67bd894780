//! The finders of the field's marks (bare glyphs, drawn annotations, rulers, stickers and pen
//! marks) on marks this test draws, anti-aliased, at several sizes, places (corners, edges, the
//! middle over texture) and polarities; and on clean real photographs (scikit-image 0.26.0 and
//! pydicom 3.0.2 test data, grey and colour; tests/fixtures/regions/SOURCES.txt) and the demo's
//! mark-free sites, where every region found is a false find.
//!
//! A drawn mark counts as **found** when one burned-in mark's removal mask covers at least 95 %
//! of the pixels the mark changed by more than 0.05, and holds at most a quarter of the image
//! (a finder that takes the whole picture has found nothing). It counts as **named** when that
//! region also carries the expected `mark` shape. `SPURION_MARKS_VERBOSE=1` prints every miss.
//! `cargo test --test suite regions_marks -- --nocapture` prints the figures.

use std::path::PathBuf;

use ndarray::{Array2, Array3};
use spurion::demo::{PhantomSpec, Site, for_each_lit, render};
use spurion::feed::Picture;
use spurion::regions::{FinderSettings, MarkShape, Region, RegionKind, find_regions_in};

/// Textured ground: waves and hashed noise, grey (one channel) or a skin-like colour.
pub fn ground(h: usize, w: usize, seed: u32, colour: bool, lo: f32, hi: f32) -> Array3<f32> {
    let c = if colour { 3 } else { 1 };
    Array3::from_shape_fn((h, w, c), |(y, x, k)| {
        let mut z = (y as u32).wrapping_mul(73_856_093) ^ (x as u32).wrapping_mul(19_349_663) ^ seed.wrapping_mul(83_492_791);
        z ^= z >> 13;
        z = z.wrapping_mul(0x5bd1_e995);
        z ^= z >> 15;
        let noise = (z % 1000) as f32 / 1000.0 - 0.5;
        let t = 0.5 + 0.3 * ((x as f32 / 7.0 + seed as f32).sin() * (y as f32 / 11.0).cos()) + 0.2 * noise;
        let g = lo + (hi - lo) * t.clamp(0.0, 1.0);
        // Colour ground: a warm tone whose channels follow the same texture.
        if colour { g * [1.0, 0.8, 0.7][k] + [0.05, 0.0, 0.0][k] } else { g }
    })
}

/// Blends `colour` into `img` with each pixel's coverage by `inside` (4×4 samples per pixel),
/// within the box `[x0, y0, x1, y1]`: anti-aliased drawing.
pub fn blend(img: &mut Array3<f32>, colour: &[f32], bbox: [f32; 4], inside: impl Fn(f32, f32) -> bool) {
    let (h, w, c) = img.dim();
    let (x0, y0) = (bbox[0].floor().max(0.0) as usize, bbox[1].floor().max(0.0) as usize);
    let (x1, y1) = ((bbox[2].ceil().max(0.0) as usize + 1).min(w), (bbox[3].ceil().max(0.0) as usize + 1).min(h));
    for y in y0..y1 {
        for x in x0..x1 {
            let mut n = 0;
            for j in 0..4 {
                for i in 0..4 {
                    if inside(x as f32 + (i as f32 + 0.5) / 4.0, y as f32 + (j as f32 + 0.5) / 4.0) {
                        n += 1;
                    }
                }
            }
            let a = n as f32 / 16.0;
            for k in 0..c {
                img[[y, x, k]] = img[[y, x, k]] * (1.0 - a) + colour[k.min(colour.len() - 1)] * a;
            }
        }
    }
}

fn seg_dist(px: f32, py: f32, a: (f32, f32), b: (f32, f32)) -> f32 {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let t = (((px - a.0) * dx + (py - a.1) * dy) / (dx * dx + dy * dy).max(1e-9)).clamp(0.0, 1.0);
    ((px - a.0 - t * dx).powi(2) + (py - a.1 - t * dy).powi(2)).sqrt()
}

/// Anti-aliased segments of width `stroke`.
pub fn segments(img: &mut Array3<f32>, colour: &[f32], segs: &[((f32, f32), (f32, f32))], stroke: f32) {
    for &(a, b) in segs {
        let bb = [a.0.min(b.0) - stroke, a.1.min(b.1) - stroke, a.0.max(b.0) + stroke, a.1.max(b.1) + stroke];
        blend(img, colour, bb, |x, y| seg_dist(x, y, a, b) <= stroke / 2.0);
    }
}

/// Anti-aliased text from the demo's pixel font at integer `scale`, its top-left at (x, y)
/// plus a quarter pixel, so every edge pixel is partly covered (a renderer's anti-aliasing).
pub fn text(img: &mut Array3<f32>, colour: &[f32], s: &str, x: usize, y: usize, scale: usize) {
    let mut lit = std::collections::HashSet::new();
    for_each_lit(s, 0, 0, scale * 4, |px, py| {
        lit.insert((px, py));
    });
    // Lit cells at quarter-pixel resolution, shifted by one quarter pixel.
    let wd = spurion::demo::tag_width(s, scale) as f32 + 1.0;
    let ht = spurion::demo::tag_height(scale) as f32 + 1.0;
    let (fx, fy) = (x as f32, y as f32);
    blend(img, colour, [fx, fy, fx + wd, fy + ht], |px, py| {
        let (u, v) = (((px - fx) * 4.0 - 1.0).floor(), ((py - fy) * 4.0 - 1.0).floor());
        u >= 0.0 && v >= 0.0 && lit.contains(&(u as usize, v as usize))
    });
}

/// Pixels where two pictures differ by more than `by` in any channel.
pub fn differs(a: &Array3<f32>, b: &Array3<f32>, by: f32) -> Array2<bool> {
    let (h, w, c) = a.dim();
    Array2::from_shape_fn((h, w), |(y, x)| (0..c).any(|k| (a[[y, x, k]] - b[[y, x, k]]).abs() > by))
}

/// The burned-in mark that covers the drawn mark, if any (see the module comment).
pub fn covering<'a>(found: &'a [Region], changed: &Array2<bool>) -> Option<&'a Region> {
    let need = changed.iter().filter(|&&m| m).count();
    found.iter().filter(|r| r.kind == RegionKind::BurnedInMark).find(|r| {
        let m = r.removal_mask();
        let hit = m.iter().zip(changed.iter()).filter(|(a, b)| **a && **b).count();
        hit as f64 >= 0.95 * need as f64 && r.mask_used().pixels * 4 <= m.len()
    })
}

#[derive(Default)]
struct Tally {
    drawn: usize,
    found: usize,
    named: usize,
}

impl Tally {
    fn add(&mut self, what: &str, clean: &Array3<f32>, marked: &Array3<f32>, shape: &[MarkShape]) {
        let found = find_regions_in(marked, &with_field_marks());
        let changed = differs(clean, marked, 0.05);
        self.drawn += 1;
        match covering(&found, &changed) {
            Some(r) => {
                self.found += 1;
                if r.mark.is_some_and(|m| shape.contains(&m)) {
                    self.named += 1;
                } else if verbose() {
                    eprintln!("  {what}: found as {:?} {}", r.mark, r.reason);
                }
            }
            None if verbose() => {
                eprintln!("  {what}: missed; found {:?}", found.iter().map(|r| (r.mark, r.bbox, r.reason.clone())).collect::<Vec<_>>())
            }
            None => {}
        }
    }
    fn report(&self, finder: &str) -> (f64, f64) {
        let (f, n) = (self.found as f64 / self.drawn as f64, self.named as f64 / self.drawn as f64);
        eprintln!("{finder}: {} drawn, found {} ({:.0} %), named {} ({:.0} %)", self.drawn, self.found, 100.0 * f, self.named, 100.0 * n);
        (f, n)
    }
}

/// The default settings with the field-mark finders on (they are off by default; see
/// `FieldMarkSettings::enabled`).
pub fn with_field_marks() -> FinderSettings {
    let mut s = FinderSettings::default();
    s.field_marks.enabled = true;
    s
}

fn verbose() -> bool {
    std::env::var_os("SPURION_MARKS_VERBOSE").is_some()
}

const SIDE: usize = 128;

/// Top-left positions for a mark of `mw`×`mh`: four corners, two edges, the middle.
fn places(mw: usize, mh: usize) -> Vec<(&'static str, usize, usize)> {
    let (r, b) = (SIDE - mw - 4, SIDE - mh - 4);
    vec![
        ("top-left", 4, 4),
        ("top-right", r, 4),
        ("bottom-left", 4, b),
        ("bottom-right", r, b),
        ("left edge", 4, (SIDE - mh) / 2),
        ("bottom edge", (SIDE - mw) / 2, b),
        ("middle", (SIDE - mw) / 2, (SIDE - mh) / 2),
    ]
}

#[test]
fn bare_glyphs_bright_and_dark_at_every_size_and_place() {
    let mut t = Tally::default();
    for (i, letters) in ["R", "L", "LT"].iter().enumerate() {
        for scale in [1, 2, 3] {
            let (mw, mh) = (spurion::demo::tag_width(letters, scale) + 1, spurion::demo::tag_height(scale) + 1);
            for (place, x, y) in places(mw, mh) {
                for (shade, value) in [("bright", 0.97f32), ("dark", 0.03)] {
                    let clean = ground(SIDE, SIDE, (i * 100 + scale * 10) as u32 + x as u32, false, 0.25, 0.7);
                    let mut marked = clean.clone();
                    text(&mut marked, &[value], letters, x, y, scale);
                    t.add(&format!("{shade} {letters} ×{scale} {place}"), &clean, &marked, &[MarkShape::Glyph, MarkShape::Text]);
                }
            }
        }
    }
    // Measured 2026-12-05: found 117 of 126 (0.93), named 115 (0.91) (119 and 117 before the
    // precision rules of regions_precision.rs).
    let (found, named) = t.report("bare glyphs");
    assert!(found >= 0.9, "bare glyphs found {found:.2}");
    assert!(named >= 0.8, "bare glyphs named {named:.2}");
}

fn ring(img: &mut Array3<f32>, colour: &[f32], cx: f32, cy: f32, r: f32, stroke: f32) {
    blend(img, colour, [cx - r - stroke, cy - r - stroke, cx + r + stroke, cy + r + stroke], |x, y| {
        (((x - cx).powi(2) + (y - cy).powi(2)).sqrt() - r).abs() <= stroke / 2.0
    });
}

/// Grey and colour grounds with a mark colour of each kind: bright, dark, saturated.
fn paints() -> Vec<(&'static str, bool, Vec<f32>)> {
    vec![
        ("bright on grey", false, vec![0.97]),
        ("dark on grey", false, vec![0.03]),
        ("green on skin", true, vec![0.1, 0.8, 0.2]),
        ("blue on skin", true, vec![0.15, 0.25, 0.9]),
    ]
}

#[test]
fn drawn_rings_lines_arrows_and_crosses() {
    let mut t = Tally::default();
    for (pi, (paint, colour_ground, colour)) in paints().into_iter().enumerate() {
        for (si, (r, stroke)) in [(12.0f32, 1.5f32), (20.0, 2.0), (32.0, 3.0)].into_iter().enumerate() {
            for (place, x, y) in places((2.0 * r + 4.0) as usize, (2.0 * r + 4.0) as usize) {
                let seed = (pi * 1000 + si * 100 + x) as u32;
                let clean = ground(SIDE, SIDE, seed, colour_ground, 0.25, 0.7);
                let (cx, cy) = (x as f32 + r + 2.0, y as f32 + r + 2.0);
                let mut marked = clean.clone();
                ring(&mut marked, &colour, cx, cy, r, stroke);
                t.add(&format!("{paint} ring r{r} {place}"), &clean, &marked, &[MarkShape::DrawnAnnotation]);
                // An arrow pointing at the middle of the same place, and a cross.
                let l = 1.6 * r;
                let mut arrow = clean.clone();
                let tip = (cx, cy);
                let tail = (cx - l * 0.7, cy - l * 0.7);
                let head = 0.35 * l;
                segments(&mut arrow, &colour, &[(tail, tip), (tip, (tip.0 - head, tip.1)), (tip, (tip.0, tip.1 - head))], stroke);
                t.add(&format!("{paint} arrow {l} {place}"), &clean, &arrow, &[MarkShape::DrawnAnnotation]);
                let mut cross = clean.clone();
                let a = 0.6 * r;
                segments(&mut cross, &colour, &[((cx - a, cy - a), (cx + a, cy + a)), ((cx - a, cy + a), (cx + a, cy - a))], stroke);
                t.add(&format!("{paint} cross {a} {place}"), &clean, &cross, &[MarkShape::DrawnAnnotation]);
            }
        }
    }
    // Measured 2026-12-05: found 243 of 252 (0.96), named 223 (0.88) (244 before the precision
    // rules).
    let (found, named) = t.report("drawn annotations");
    assert!(found >= 0.9, "drawn annotations found {found:.2}");
    assert!(named >= 0.8, "drawn annotations named {named:.2}");
}

#[test]
fn rulers_with_and_without_a_baseline() {
    let mut t = Tally::default();
    for (pi, (paint, colour_ground, colour)) in paints().into_iter().enumerate() {
        for (len, period, baseline) in [(40.0f32, 4.0f32, true), (60.0, 6.0, false), (90.0, 8.0, true), (100.0, 5.0, false)] {
            for upright in [false, true] {
                for (place, x, y) in [("top edge", 20usize, 5usize), ("bottom edge", 20, 110), ("middle", 20, 60)] {
                    let clean = ground(SIDE, SIDE, (pi * 77 + len as usize + x + y) as u32, colour_ground, 0.25, 0.7);
                    let mut marked = clean.clone();
                    // Ticks and baseline 1.5 px wide centred on a pixel: a covered core and
                    // quarter-covered sides.
                    let (x, y) = (x as f32 + 0.5, y as f32 + 0.5);
                    let mut segs = Vec::new();
                    if baseline {
                        segs.push(((x, y), (x + len, y)));
                    }
                    let mut k = 0;
                    while k as f32 * period <= len {
                        let tick = if k % 5 == 0 { 7.0 } else { 4.0 };
                        let tx = x + k as f32 * period.round();
                        segs.push(((tx, y), (tx, y + tick)));
                        k += 1;
                    }
                    if upright {
                        // Swap x and y about the place: a scale along the left side.
                        segs = segs.into_iter().map(|(a, b)| ((a.1, a.0), (b.1, b.0))).collect();
                    }
                    segments(&mut marked, &colour, &segs, 1.5);
                    t.add(&format!("{paint} ruler {len}/{period} base {baseline} upright {upright} {place}"), &clean, &marked, &[MarkShape::Ruler]);
                }
            }
        }
    }
    let (found, named) = t.report("rulers");
    // Measured 2026-12-05: found 92 of 96 (0.96), named 89 (0.93) (86 and 86 before the
    // precision rules); the bars are regression checks.
    assert!(found >= 0.85, "rulers found {found:.2}");
    assert!(named >= 0.8, "rulers named {named:.2}");
}

#[test]
fn stickers_and_pen_blobs() {
    let mut t = Tally::default();
    let paints = [
        ("white label on grey", false, vec![0.99]),
        ("black label on grey", false, vec![0.01]),
        ("yellow sticker on skin", true, vec![0.95, 0.85, 0.1]),
        ("blue pen blob on skin", true, vec![0.1, 0.2, 0.8]),
        ("green dot on grey", false, vec![0.2, 0.75, 0.3]),
    ];
    for (pi, (paint, colour_ground, colour)) in paints.iter().enumerate() {
        for (si, r) in [4.0f32, 8.0, 14.0].into_iter().enumerate() {
            for (place, x, y) in places((2.0 * r + 2.0) as usize, (2.0 * r + 2.0) as usize) {
                let mut clean = ground(SIDE, SIDE, (pi * 500 + si * 50 + x + y) as u32, *colour_ground, 0.25, 0.7);
                if colour.len() == 3 && !colour_ground {
                    // A coloured dot on a grey picture: the picture is stored in colour.
                    let g = clean.clone();
                    clean = Array3::from_shape_fn((SIDE, SIDE, 3), |(y, x, _)| g[[y, x, 0]]);
                }
                let (cx, cy) = (x as f32 + r + 1.0, y as f32 + r + 1.0);
                let mut marked = clean.clone();
                if si == 2 {
                    // Rounded square label.
                    blend(&mut marked, colour, [cx - r, cy - r, cx + r, cy + r], |px, py| {
                        let (dx, dy) = (((px - cx).abs() - 0.6 * r).max(0.0), ((py - cy).abs() - 0.6 * r).max(0.0));
                        dx * dx + dy * dy <= (0.4 * r).powi(2)
                    });
                } else {
                    blend(&mut marked, colour, [cx - r, cy - r, cx + r, cy + r], |px, py| (px - cx).powi(2) + (py - cy).powi(2) <= r * r);
                }
                t.add(&format!("{paint} r{r} {place}"), &clean, &marked, &[MarkShape::Sticker]);
            }
        }
    }
    let (found, named) = t.report("stickers and pen blobs");
    // Measured 2026-12-05: found 91 of 105 (0.87), named 84 (0.80); the bars are regression
    // checks.
    assert!(found >= 0.85, "stickers found {found:.2}");
    assert!(named >= 0.75, "stickers named {named:.2}");
}

fn shape_name(r: &Region) -> String {
    r.mark.map_or(r.kind.name().to_string(), |m| m.name().to_string())
}

#[test]
fn clean_photographs_grey_and_colour_give_no_marks() {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/regions");
    let mut total = 0;
    let mut by_shape = std::collections::BTreeMap::new();
    for f in crate::common::CLEAN_PHOTOS {
        let pic = Picture::open(&dir.join(f)).unwrap();
        let found = find_regions_in(&pic.pixels, &with_field_marks());
        eprintln!("{f} ({} channel(s)): {} region(s)", pic.channels(), found.len());
        for r in &found {
            eprintln!("    {} {:?}: {}", shape_name(r), r.bbox, r.reason);
            *by_shape.entry(shape_name(r)).or_insert(0usize) += 1;
        }
        total += found.len();
    }
    eprintln!("false finds of the field-mark finders (on) on {} clean photographs: {total}", crate::common::CLEAN_PHOTOS.len());
    for (shape, n) in &by_shape {
        eprintln!("    {shape}: {n}");
    }
    // They must find nothing here, and do not yet: this is why `FieldMarkSettings::enabled` is
    // off by default (with the defaults, regions_clean.rs finds nothing on these pictures). A
    // regression check on the count measured on 2026-12-05: 24 over the 18 pictures (astronaut
    // 5 grey and 7 colour, camera 4, retina 3, ...); 66 before the precision rules of
    // regions_precision.rs (edge, glyph side, fade, core spread, texture count), 135 before the
    // texture rule `max_marks_per_channel`. It may only fall.
    assert!(total <= 24, "false finds on clean photographs rose to {total} (listed above)");
}

#[test]
fn demo_sites_without_marks_give_no_marks() {
    // Regression check on the invented demo (SCENARIO.md): North Quay and Saltmarsh leave no
    // marks, and Hillmoor's images generated without tag and frame carry none either.
    // Fellbrook, the later site, writes a bare side letter by habit: its images are the other
    // side of this check (below).
    let mut total = 0;
    let mut n = 0;
    let mut letters_found = 0;
    for i in 0..24u64 {
        let letter = render(&PhantomSpec::new(7000 + i, Site::Fellbrook, i % 2 == 0));
        let px = letter.image.mapv(|v| v as f32 / 255.0).insert_axis(ndarray::Axis(2));
        letters_found += usize::from(find_regions_in(&px, &with_field_marks()).iter().any(|r| shape_name(r) == "glyph"));
        for site in Site::FOUNDING {
            let mut spec = PhantomSpec::new(7000 + i, site, i % 2 == 0);
            spec.tag = false;
            spec.frame = false;
            let ph = render(&spec);
            let px = ph.image.mapv(|v| v as f32 / 255.0).insert_axis(ndarray::Axis(2));
            let found = find_regions_in(&px, &with_field_marks());
            for r in &found {
                eprintln!("  seed {} {site}: {} {:?}: {}", spec.seed, shape_name(r), r.bbox, r.reason);
            }
            total += found.len();
            n += 1;
        }
    }
    eprintln!("false finds on {n} mark-free demo phantoms: {total}; Fellbrook letters found as glyphs: {letters_found} of 24");
    assert_eq!(total, 0);
    // A regression check on the demo, not evidence (24 of 24 when written).
    assert!(letters_found >= 20, "Fellbrook's side letters found as glyphs in {letters_found} of 24 images");
}
