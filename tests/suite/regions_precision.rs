//! Precision and recall of the field-mark finders (bare glyphs, drawn annotations, rulers,
//! stickers) beyond the marks and pictures they were written with (issue 23):
//!
//! * **False finds** on real pictures nobody here drew and that carry no mark, in two sets fixed
//!   before the finders were run on them (tests/fixtures/regions/wider/make_wider_fixtures.py
//!   says which file is in which and why): the TUNING set (the 18 committed clean photographs
//!   of tests/fixtures/regions plus `wider/tune-*`, looked at while the thresholds were set) and
//!   the HELD-OUT set (`wider/held-*`: matplotlib's and scipy's sample images and pydicom's CT,
//!   NM and MR test files, run only after the thresholds were fixed).
//! * **Recall** on marks this test pastes onto real pictures (grey and colour, tuning and
//!   held-out backgrounds), at several sizes, polarities and places, and on marks of shapes the
//!   finders were not written for (a stroked font, a tilted ruler, a filled arrow, logo-like
//!   blobs, marks blurred by a resize), reported as measured.
//!
//! Found / named as in regions_marks.rs (a removal mask covering 95 % of the changed pixels).
//! `cargo test --test suite regions_precision -- --nocapture` prints the tables.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use ndarray::Array3;
use spurion::feed::Picture;
use spurion::regions::{MarkShape, Region, find_regions_in};

use crate::regions_marks::{blend, covering, differs, ground, segments, text, with_field_marks};

fn fixtures() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/regions")
}

fn open(path: &Path) -> Array3<f32> {
    Picture::open(path)
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()))
        .pixels
}

fn shape_name(r: &Region) -> String {
    r.mark
        .map_or(r.kind.name().to_string(), |m| m.name().to_string())
}

/// The files of `wider/` whose names start with `prefix`, sorted.
fn wider(prefix: &str) -> Vec<PathBuf> {
    let dir = fixtures().join("wider");
    let mut v: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| {
            p.extension().is_some_and(|e| e == "png")
                && p.file_name().unwrap().to_string_lossy().starts_with(prefix)
        })
        .collect();
    v.sort();
    v
}

/// False finds per finder (mark shape) over `files`, printed per file.
fn false_finds(set: &str, files: &[PathBuf]) -> (usize, BTreeMap<String, usize>) {
    let mut by_shape = BTreeMap::new();
    let mut total = 0;
    for f in files {
        let found = find_regions_in(&open(f), &with_field_marks());
        eprintln!(
            "[{set}] {}: {} region(s)",
            f.file_name().unwrap().to_string_lossy(),
            found.len()
        );
        for r in &found {
            eprintln!("    {} {:?}: {}", shape_name(r), r.bbox, r.reason);
            *by_shape.entry(shape_name(r)).or_insert(0usize) += 1;
        }
        total += found.len();
    }
    eprintln!(
        "[{set}] false finds on {} clean pictures: {total} {by_shape:?}",
        files.len()
    );
    (total, by_shape)
}

#[test]
fn false_finds_on_the_tuning_and_held_out_sets() {
    let mut tuning: Vec<PathBuf> = crate::common::CLEAN_PHOTOS
        .iter()
        .map(|f| fixtures().join(f))
        .collect();
    tuning.extend(wider("tune-"));
    let held = wider("held-");
    assert_eq!(
        (tuning.len(), held.len()),
        (26, 10),
        "the fixture sets changed; see make_wider_fixtures.py"
    );
    let (t, _) = false_finds("tuning", &tuning);
    let (h, _) = false_finds("held-out", &held);
    // Regression checks on the counts measured 2026-12-05 (tuning 32 = 31 field marks + 1 text
    // tag; held-out 16 = 10 field marks + 6 text tags, the text-tag finder that is on by default
    // reading Grace Hopper's insignia as text): they may only fall. They are far from zero,
    // which is why the field-mark finders stay off by default (DEVELOPERS.md "Field marks").
    assert!(t <= TUNING_MAX, "false finds on the tuning set rose to {t}");
    assert!(h <= HELD_MAX, "false finds on the held-out set rose to {h}");
}

const TUNING_MAX: usize = 32;
const HELD_MAX: usize = 16;

/// One mark to paste: a name, the finder shapes that count as naming it, and how to draw it
/// with its top-left near (x, y) in `ink`.
type Draw = Box<dyn Fn(&mut Array3<f32>, &[f32], f32, f32)>;

fn marks_of_known_shapes() -> Vec<(String, Vec<MarkShape>, usize, Draw)> {
    let mut v: Vec<(String, Vec<MarkShape>, usize, Draw)> = Vec::new();
    for (letters, scale) in [("R", 2usize), ("LT", 1), ("L", 3)] {
        let size =
            spurion::demo::tag_width(letters, scale).max(spurion::demo::tag_height(scale)) + 2;
        v.push((
            format!("glyph {letters} x{scale}"),
            vec![MarkShape::Glyph, MarkShape::Text],
            size,
            Box::new(move |img, ink, x, y| text(img, ink, letters, x as usize, y as usize, scale)),
        ));
    }
    for r in [10.0f32, 18.0] {
        v.push((
            format!("ring r{r}"),
            vec![MarkShape::DrawnAnnotation],
            (2.0 * r + 4.0) as usize,
            Box::new(move |img, ink, x, y| {
                let (cx, cy) = (x + r + 2.0, y + r + 2.0);
                blend(
                    img,
                    ink,
                    [cx - r - 2.0, cy - r - 2.0, cx + r + 2.0, cy + r + 2.0],
                    |px, py| (((px - cx).powi(2) + (py - cy).powi(2)).sqrt() - r).abs() <= 1.0,
                );
            }),
        ));
        v.push((
            format!("arrow {r}"),
            vec![MarkShape::DrawnAnnotation],
            (2.0 * r) as usize,
            Box::new(move |img, ink, x, y| {
                let tip = (x + 2.0 * r, y + 2.0 * r);
                let h = 0.6 * r;
                segments(
                    img,
                    ink,
                    &[
                        ((x, y), tip),
                        (tip, (tip.0 - h, tip.1)),
                        (tip, (tip.0, tip.1 - h)),
                    ],
                    2.0,
                );
            }),
        ));
    }
    v.push((
        "ruler 60/6".into(),
        vec![MarkShape::Ruler],
        62,
        Box::new(|img, ink, x, y| {
            let (x, y) = (x + 0.5, y + 0.5);
            let mut segs = vec![((x, y), (x + 60.0, y))];
            for k in 0..=10 {
                let tick = if k % 5 == 0 { 7.0 } else { 4.0 };
                segs.push(((x + 6.0 * k as f32, y), (x + 6.0 * k as f32, y + tick)));
            }
            segments(img, ink, &segs, 1.5);
        }),
    ));
    for r in [5.0f32, 10.0] {
        v.push((
            format!("sticker r{r}"),
            vec![MarkShape::Sticker],
            (2.0 * r + 2.0) as usize,
            Box::new(move |img, ink, x, y| {
                let (cx, cy) = (x + r + 1.0, y + r + 1.0);
                blend(img, ink, [cx - r, cy - r, cx + r, cy + r], |px, py| {
                    (px - cx).powi(2) + (py - cy).powi(2) <= r * r
                });
            }),
        ));
    }
    v
}

#[derive(Default)]
struct Count {
    drawn: usize,
    found: usize,
    named: usize,
}

/// Counts one pasted mark. A mark that changes few pixels (dark ink on a black background, a
/// bright one on a clipped highlight) is not visible and is not counted: fewer than half of the
/// pixels it covers (`ink_px`, drawn on an empty canvas) changed by more than 0.05.
fn try_mark(
    clean: &Array3<f32>,
    marked: &Array3<f32>,
    ink_px: usize,
    shapes: &[MarkShape],
    c: &mut Count,
    what: &str,
) {
    let changed = differs(clean, marked, 0.05);
    if changed.iter().filter(|&&m| m).count() * 2 < ink_px {
        return;
    }
    let found = find_regions_in(marked, &with_field_marks());
    c.drawn += 1;
    match covering(&found, &changed) {
        Some(r) => {
            c.found += 1;
            c.named += usize::from(r.mark.is_some_and(|m| shapes.contains(&m)));
        }
        None if std::env::var_os("SPURION_MARKS_VERBOSE").is_some() => {
            eprintln!("  missed {what}: found {:?}", found.iter().map(|r| (r.mark, r.bbox, r.reason.clone())).collect::<Vec<_>>())
        }
        None => {}
    }
}

fn table(title: &str, rows: &BTreeMap<String, Count>) -> (usize, usize, usize) {
    eprintln!("{title}");
    let (mut d, mut f, mut n) = (0, 0, 0);
    for (k, c) in rows {
        eprintln!(
            "  {k:<44} {:>3} drawn  found {:>3} ({:>3.0} %)  named {:>3}",
            c.drawn,
            c.found,
            100.0 * c.found as f64 / c.drawn as f64,
            c.named
        );
        if k.starts_with("on ") {
            continue; // per-background rows repeat the per-mark ones
        }
        d += c.drawn;
        f += c.found;
        n += c.named;
    }
    eprintln!(
        "  {:<44} {d:>3} drawn  found {f:>3} ({:>3.0} %)  named {n:>3}",
        "all",
        100.0 * f as f64 / d.max(1) as f64
    );
    (d, f, n)
}

/// Pastes each known mark in bright and dark ink (grey pictures) or a saturated green (colour
/// pictures) at three places (a corner, an edge's middle, the centre) of each background.
fn recall_on(set: &str, backgrounds: &[PathBuf]) -> (usize, usize, usize) {
    let mut rows: BTreeMap<String, Count> = BTreeMap::new();
    for path in backgrounds {
        let clean = open(path);
        let (h, w, c) = clean.dim();
        let inks: Vec<(&str, Vec<f32>)> = if c >= 3 {
            vec![("green", vec![0.1, 0.85, 0.15])]
        } else {
            vec![("bright", vec![0.98]), ("dark", vec![0.02])]
        };
        for (name, shapes, size, draw) in marks_of_known_shapes() {
            if size + 8 >= w.min(h) {
                continue;
            }
            let places = [
                (6.0, 6.0),
                ((w - size) as f32 / 2.0, (h - size - 6) as f32),
                ((w - size) as f32 / 2.0, (h - size) as f32 / 2.0),
            ];
            for (ink_name, ink) in &inks {
                for &(x, y) in &places {
                    let mut marked = clean.clone();
                    draw(&mut marked, ink, x, y);
                    let empty = Array3::<f32>::zeros(clean.dim());
                    let mut canvas = empty.clone();
                    draw(&mut canvas, &[1.0, 1.0, 1.0], x, y);
                    let ink_px = differs(&empty, &canvas, 0.05)
                        .iter()
                        .filter(|&&m| m)
                        .count();
                    let what = format!(
                        "{} {name} {ink_name} at ({x},{y})",
                        path.file_name().unwrap().to_string_lossy()
                    );
                    let kind = name.split(' ').next().unwrap().to_string();
                    let mut one = Count::default();
                    try_mark(&clean, &marked, ink_px, &shapes, &mut one, &what);
                    for key in [
                        format!("{kind} ({ink_name})"),
                        format!("on {}", path.file_name().unwrap().to_string_lossy()),
                    ] {
                        let c = rows.entry(key).or_default();
                        c.drawn += one.drawn;
                        c.found += one.found;
                        c.named += one.named;
                    }
                }
            }
        }
    }
    table(
        &format!(
            "recall on marks pasted onto {set} pictures ({} backgrounds)",
            backgrounds.len()
        ),
        &rows,
    )
}

#[test]
fn marks_pasted_on_real_pictures_are_found() {
    let tuning: Vec<PathBuf> = [
        "skimage-camera.png",
        "skimage-moon.png",
        "pydicom-ct-small.png",
    ]
    .iter()
    .map(|f| fixtures().join(f))
    .chain(
        [
            "tune-scipy-ascent.png",
            "tune-skimage-rgb-motorcycle_left.png",
        ]
        .iter()
        .map(|f| fixtures().join("wider").join(f)),
    )
    .collect();
    let held: Vec<PathBuf> = [
        "held-mpl-s1045-mr.png",
        "held-pydicom-693-j2ki.png",
        "held-scipy-face.png",
        "held-scipy-rgb-face.png",
    ]
    .iter()
    .map(|f| fixtures().join("wider").join(f))
    .collect();
    let (d, f, _) = recall_on("tuning-set", &tuning);
    let (hd, hf, _) = recall_on("held-out", &held);
    let (r, hr) = (f as f64 / d as f64, hf as f64 / hd as f64);
    // Regression checks on the figures measured 2026-12-05, not targets: found 172 of 250
    // (0.69) on tuning backgrounds, 105 of 196 (0.54) on held-out ones, against 0.9 and more on
    // the synthetic ground of regions_marks.rs; dark marks on the held-out MR, CT and raccoon
    // are found least (25 to 31 %).
    assert!(r >= RECALL_TUNING, "recall on tuning backgrounds {r:.2}");
    assert!(hr >= RECALL_HELD, "recall on held-out backgrounds {hr:.2}");
}

const RECALL_TUNING: f64 = 0.65;
const RECALL_HELD: f64 = 0.5;

/// A filled polygon test (even-odd rule).
fn in_polygon(px: f32, py: f32, pts: &[(f32, f32)]) -> bool {
    let mut inside = false;
    let n = pts.len();
    for i in 0..n {
        let (a, b) = (pts[i], pts[(i + n - 1) % n]);
        if (a.1 > py) != (b.1 > py) && px < (b.0 - a.0) * (py - a.1) / (b.1 - a.1) + a.0 {
            inside = !inside;
        }
    }
    inside
}

/// Shrinks a picture by 2 with a box filter: a mark burned in at twice the size, then resized.
fn halve(img: &Array3<f32>) -> Array3<f32> {
    let (h, w, c) = img.dim();
    Array3::from_shape_fn((h / 2, w / 2, c), |(y, x, k)| {
        (img[[2 * y, 2 * x, k]]
            + img[[2 * y + 1, 2 * x, k]]
            + img[[2 * y, 2 * x + 1, k]]
            + img[[2 * y + 1, 2 * x + 1, k]])
            / 4.0
    })
}

#[test]
fn marks_of_shapes_the_finders_were_not_written_for() {
    let side = 128usize;
    let mut rows: BTreeMap<String, Count> = BTreeMap::new();
    for seed in 0..6u32 {
        for (ink_name, ink) in [("bright", [0.97f32]), ("dark", [0.03])] {
            let clean = ground(side, side, 900 + seed, false, 0.25, 0.7);
            let (x, y) = (10.0 + 12.0 * seed as f32, 14.0 + 9.0 * seed as f32);
            let mut go = |name: &str, shapes: &[MarkShape], draw: &dyn Fn(&mut Array3<f32>)| {
                let mut marked = clean.clone();
                draw(&mut marked);
                try_mark(
                    &clean,
                    &marked,
                    0,
                    shapes,
                    rows.entry(name.to_string()).or_default(),
                    &format!("{name} {ink_name} seed {seed}"),
                );
            };
            // A stroked font: "RL" of straight 2 px strokes, 12 px high (not the pixel font).
            go(
                "stroked letters RL",
                &[MarkShape::Glyph, MarkShape::Text],
                &|m| {
                    let s = [
                        ((x, y), (x, y + 12.0)),
                        ((x, y), (x + 5.0, y)),
                        ((x + 5.0, y), (x + 6.0, y + 3.0)),
                        ((x + 6.0, y + 3.0), (x + 5.0, y + 6.0)),
                        ((x + 5.0, y + 6.0), (x, y + 6.0)),
                        ((x + 2.0, y + 6.0), (x + 6.0, y + 12.0)),
                        ((x + 10.0, y), (x + 10.0, y + 12.0)),
                        ((x + 10.0, y + 12.0), (x + 16.0, y + 12.0)),
                    ];
                    segments(m, &ink, &s, 2.0);
                },
            );
            // A ruler tilted by 30 degrees: 60 px, a tick every 6 px.
            go("ruler tilted 30 deg", &[MarkShape::Ruler], &|m| {
                let (c, s) = (30f32.to_radians().cos(), 30f32.to_radians().sin());
                let mut segs = vec![((x, y), (x + 60.0 * c, y + 60.0 * s))];
                for k in 0..=10 {
                    let (bx, by) = (x + 6.0 * k as f32 * c, y + 6.0 * k as f32 * s);
                    let t = if k % 5 == 0 { 7.0 } else { 4.0 };
                    segs.push(((bx, by), (bx - t * s, by + t * c)));
                }
                segments(m, &ink, &segs, 1.5);
            });
            // A filled arrow: a 3 px shaft and a solid triangular head.
            go("filled arrow", &[MarkShape::DrawnAnnotation], &|m| {
                segments(m, &ink, &[((x, y), (x + 24.0, y + 24.0))], 3.0);
                let pts = [
                    (x + 30.0, y + 30.0),
                    (x + 18.0, y + 26.0),
                    (x + 26.0, y + 18.0),
                ];
                blend(
                    m,
                    &ink,
                    [x + 17.0, y + 17.0, x + 31.0, y + 31.0],
                    |px, py| in_polygon(px, py, &pts),
                );
            });
            // A logo-like blob: a filled five-pointed star, 20 px across.
            go("star logo", &[MarkShape::Sticker, MarkShape::Glyph], &|m| {
                let (cx, cy) = (x + 10.0, y + 10.0);
                let pts: Vec<(f32, f32)> = (0..10)
                    .map(|i| {
                        let r = if i % 2 == 0 { 10.0 } else { 4.0 };
                        let a = std::f32::consts::PI * (i as f32 / 5.0 - 0.5);
                        (cx + r * a.cos(), cy + r * a.sin())
                    })
                    .collect();
                blend(m, &ink, [x - 1.0, y - 1.0, x + 21.0, y + 21.0], |px, py| {
                    in_polygon(px, py, &pts)
                });
            });
            // A bullseye logo: a disc in a ring.
            go(
                "bullseye logo",
                &[
                    MarkShape::Sticker,
                    MarkShape::DrawnAnnotation,
                    MarkShape::Glyph,
                ],
                &|m| {
                    let (cx, cy) = (x + 10.0, y + 10.0);
                    blend(m, &ink, [x - 1.0, y - 1.0, x + 21.0, y + 21.0], |px, py| {
                        let r = ((px - cx).powi(2) + (py - cy).powi(2)).sqrt();
                        r <= 4.0 || (7.0..=9.5).contains(&r)
                    });
                },
            );
        }
        // Marks burned in at twice the size on a twice larger picture, then the picture halved
        // (a box filter): edges softened by a resize.
        for (ink_name, ink) in [("bright", [0.97f32]), ("dark", [0.03])] {
            let big = ground(2 * side, 2 * side, 950 + seed, false, 0.25, 0.7);
            let (x, y) = (20 + 24 * seed as usize, 28 + 18 * seed as usize);
            let mut go = |name: &str, shapes: &[MarkShape], draw: &dyn Fn(&mut Array3<f32>)| {
                let mut marked = big.clone();
                draw(&mut marked);
                let (c, m) = (halve(&big), halve(&marked));
                try_mark(
                    &c,
                    &m,
                    0,
                    shapes,
                    rows.entry(name.to_string()).or_default(),
                    &format!("{name} {ink_name} seed {seed}"),
                );
            };
            go(
                "resized glyphs LT x2",
                &[MarkShape::Glyph, MarkShape::Text],
                &|m| text(m, &ink, "LT", x, y, 2),
            );
            go("resized ring r12", &[MarkShape::DrawnAnnotation], &|m| {
                let (cx, cy, r) = (x as f32 + 26.0, y as f32 + 26.0, 24.0);
                blend(
                    m,
                    &ink,
                    [cx - r - 3.0, cy - r - 3.0, cx + r + 3.0, cy + r + 3.0],
                    |px, py| (((px - cx).powi(2) + (py - cy).powi(2)).sqrt() - r).abs() <= 1.5,
                );
            });
        }
    }
    let (d, f, _) = table(
        "recall on marks of shapes the finders were not written for (synthetic ground)",
        &rows,
    );
    // Measured 2026-12-05: found 70 of 84 (0.83); named 58. The tilted ruler is found and
    // named in 12 of 12 (46 named, the tilted ruler never, before rulers were searched along
    // tilted axes), the star is found as a glyph, the bullseye in 3 of 12, the resized "LT" in
    // 7 of 12. A regression check on the total, not a target.
    assert!(f as f64 >= UNUSUAL_MIN * d as f64, "found {f} of {d}");
}

const UNUSUAL_MIN: f64 = 0.8;

/// A ruler of `len` px with a tick every `period` px (every fifth longer), its axis at `deg`
/// degrees from the rows, starting at (x, y); with or without a baseline.
fn tilted_ruler(img: &mut Array3<f32>, ink: &[f32], x: f32, y: f32, deg: f32, len: f32, period: f32, baseline: bool) {
    let (c, s) = (deg.to_radians().cos(), deg.to_radians().sin());
    let mut segs = Vec::new();
    if baseline {
        segs.push(((x, y), (x + len * c, y + len * s)));
    }
    let mut k = 0;
    while k as f32 * period <= len {
        let (bx, by) = (x + k as f32 * period * c, y + k as f32 * period * s);
        let t = if k % 5 == 0 { 7.0 } else { 4.0 };
        segs.push(((bx, by), (bx - t * s, by + t * c)));
        k += 1;
    }
    segments(img, ink, &segs, 1.5);
}

#[test]
fn tilted_rulers_are_found_and_named_and_tilted_lines_are_not_rulers() {
    let side = 128usize;
    let mut rows: BTreeMap<String, Count> = BTreeMap::new();
    let mut line_as_ruler = 0;
    let mut lines = 0;
    for (ai, deg) in [10.0f32, 20.0, 30.0, 45.0, 60.0, 75.0, 120.0, 150.0].into_iter().enumerate() {
        for (pi, (len, period, baseline)) in [(60.0f32, 6.0f32, true), (70.0, 7.0, false), (80.0, 5.0, true)].into_iter().enumerate() {
            for (ink_name, ink) in [("bright", [0.97f32]), ("dark", [0.03])] {
                let clean = ground(side, side, (ai * 10 + pi) as u32 + 300, false, 0.25, 0.7);
                // Start so the whole ruler stays inside the picture whatever the angle.
                let (c, s) = (deg.to_radians().cos(), deg.to_radians().sin());
                let x = 64.0 - 0.5 * len * c;
                let y = 64.0 - 0.5 * len * s;
                let mut marked = clean.clone();
                tilted_ruler(&mut marked, &ink, x, y, deg, len, period, baseline);
                let key = format!("{deg:>3}° {} ({ink_name})", if baseline { "baseline" } else { "ticks only" });
                try_mark(&clean, &marked, 0, &[MarkShape::Ruler], rows.entry(key).or_default(), &format!("tilted ruler {deg} {len}/{period}"));
                // The same run as a plain line 1.5 and 3 px wide, no ticks: never a ruler.
                for width in [1.5f32, 3.0] {
                    let mut line = clean.clone();
                    segments(&mut line, &ink, &[((x, y), (x + len * c, y + len * s))], width);
                    lines += 1;
                    let found = find_regions_in(&line, &with_field_marks());
                    line_as_ruler += usize::from(found.iter().any(|r| r.mark == Some(MarkShape::Ruler)));
                }
            }
        }
    }
    let (d, f, n) = table("tilted rulers on synthetic ground (8 angles, 3 kinds, 2 inks)", &rows);
    eprintln!("tilted plain lines taken for rulers: {line_as_ruler} of {lines}");
    assert_eq!(line_as_ruler, 0, "a tilted line without ticks was taken for a ruler");
    // Regression checks on the figures measured 2026-12-05, not targets: found and named 42 of
    // 48 (0.88): every ruler with a baseline, and the separate ticks at 45 degrees and some
    // others (ticks far apart across a steep tilt do not join one run).
    assert!(f as f64 >= TILTED_FOUND * d as f64, "tilted rulers found {f} of {d}");
    assert!(n as f64 >= TILTED_NAMED * d as f64, "tilted rulers named {n} of {d}");
}

const TILTED_FOUND: f64 = 0.85;
const TILTED_NAMED: f64 = 0.85;

#[test]
fn with_the_defaults_only_rulers_are_looked_for_and_none_is_found_on_clean_pictures() {
    let defaults = spurion::regions::FinderSettings::default();
    assert!(!defaults.field_marks.enabled && defaults.field_marks.rulers);
    // A drawn ruler is found with the defaults; a drawn ring is not (its finder is off).
    let clean = ground(128, 128, 4242, false, 0.25, 0.7);
    let mut ruler = clean.clone();
    tilted_ruler(&mut ruler, &[0.97], 30.0, 20.0, 0.0, 60.0, 6.0, true);
    let found = find_regions_in(&ruler, &defaults);
    assert!(covering(&found, &differs(&clean, &ruler, 0.05)).is_some_and(|r| r.mark == Some(MarkShape::Ruler)), "{found:?}");
    let mut ring = clean.clone();
    blend(&mut ring, &[0.97], [40.0, 40.0, 90.0, 90.0], |x, y| (((x - 65.0).powi(2) + (y - 65.0).powi(2)).sqrt() - 20.0).abs() <= 1.0);
    assert!(find_regions_in(&ring, &defaults).iter().all(|r| r.mark != Some(MarkShape::DrawnAnnotation)));
    // No ruler on any clean picture of either set.
    let mut all: Vec<PathBuf> = crate::common::CLEAN_PHOTOS.iter().map(|f| fixtures().join(f)).collect();
    all.extend(wider("tune-"));
    all.extend(wider("held-"));
    let mut rulers = 0;
    for f in &all {
        for r in find_regions_in(&open(f), &defaults) {
            if r.mark == Some(MarkShape::Ruler) {
                eprintln!("{}: ruler {:?}: {}", f.display(), r.bbox, r.reason);
                rulers += 1;
            }
        }
    }
    assert_eq!(rulers, 0, "rulers found on clean pictures with the defaults");
}
