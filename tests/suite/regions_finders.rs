//! The region finders on small synthetic pictures whose answer is known by construction:
//! padding, frames and tilted collimation-like edges on various sides; bright and dark
//! burned-in text; repeated patches across a set; drawn rectangles and polygons. Only the
//! finders' own geometry is checked here; the demo set and real images have their own tests.

use ndarray::Array2;
use spurion::demo::for_each_lit;
use spurion::regions::drawn::{DrawnFile, DrawnShape, Shape, drawn_region, load_drawn, polygon_mask, save_drawn};
use spurion::regions::{
    FinderSettings, MarkSettings, RepeatedPatchSettings, RegionKind, Side, box_iou, find_border_bands, find_burned_in_marks,
    find_regions, find_repeated_patches, mask_bbox, mask_iou,
};

/// Textured content (no flat margins, no extremes): smooth waves plus hashed noise in 0.25..0.75.
fn content(h: usize, w: usize, seed: u32) -> Array2<f32> {
    Array2::from_shape_fn((h, w), |(y, x)| {
        let mut z = (y as u32).wrapping_mul(73_856_093) ^ (x as u32).wrapping_mul(19_349_663) ^ seed.wrapping_mul(83_492_791);
        z ^= z >> 13;
        z = z.wrapping_mul(0x5bd1_e995);
        z ^= z >> 15;
        let noise = (z % 1000) as f32 / 1000.0 - 0.5;
        0.5 + 0.15 * ((x as f32 / 9.0).sin() * (y as f32 / 13.0).cos()) + 0.08 * noise
    })
}

fn draw_text(img: &mut Array2<f32>, text: &str, x: usize, y: usize, scale: usize, value: f32) -> Array2<bool> {
    let mut m = Array2::from_elem(img.dim(), false);
    for_each_lit(text, x, y, scale, |px, py| {
        img[(py, px)] = value;
        m[(py, px)] = true;
    });
    m
}

#[test]
fn letterbox_padding_top_and_bottom_is_one_band() {
    let (h, w) = (200, 256);
    let mut img = content(h, w, 1);
    let mut truth = Array2::from_elem((h, w), false);
    for y in (0..30).chain(170..200) {
        for x in 0..w {
            img[(y, x)] = 0.0;
            truth[(y, x)] = true;
        }
    }
    let bands = find_border_bands(&img, &Default::default());
    assert_eq!(bands.len(), 1, "{bands:?}");
    let b = &bands[0];
    assert_eq!(b.detail, "padding");
    assert_eq!(b.sides, vec![Side::Top, Side::Bottom]);
    assert_eq!(b.mask, truth, "the band mask is exactly the padded rows");
}

#[test]
fn thin_bright_frame_on_left_and_right() {
    let (h, w) = (160, 192);
    let mut img = content(h, w, 2);
    let mut truth = Array2::from_elem((h, w), false);
    for y in 0..h {
        for x in (0..3).chain(w - 3..w) {
            img[(y, x)] = 1.0;
            truth[(y, x)] = true;
        }
    }
    let bands = find_border_bands(&img, &Default::default());
    assert_eq!(bands.len(), 1, "{bands:?}");
    assert_eq!(bands[0].detail, "frame");
    assert_eq!(bands[0].sides, vec![Side::Left, Side::Right]);
    assert!(bands[0].reason.starts_with("bright frame"), "{}", bands[0].reason);
    assert_eq!(bands[0].mask, truth);
}

#[test]
fn tilted_noisy_collimation_edge_on_the_right() {
    // Exposed but collimated margin: flat 0.92 with ±0.01 noise right of x = 200 − 0.12·y.
    let (h, w) = (240, 240);
    let mut img = content(h, w, 3);
    let mut truth = Array2::from_elem((h, w), false);
    for y in 0..h {
        let edge = 200.0 - 0.12 * y as f32;
        for x in 0..w {
            if x as f32 + 0.5 >= edge {
                let jitter = ((x * 31 + y * 17) % 21) as f32 / 1000.0 - 0.01;
                img[(y, x)] = 0.92 + jitter;
                truth[(y, x)] = true;
            }
        }
    }
    let bands = find_border_bands(&img, &Default::default());
    assert_eq!(bands.len(), 1, "{bands:?}");
    assert_eq!(bands[0].detail, "collimation edge");
    assert_eq!(bands[0].sides, vec![Side::Right]);
    let iou = mask_iou(&bands[0].mask, &truth);
    assert!(iou > 0.95, "mask IoU {iou}");
}

#[test]
fn smooth_gradient_and_textured_content_are_not_bands() {
    // A sky-like vertical ramp: flat along each row, but no step anywhere.
    let ramp = Array2::from_shape_fn((128, 128), |(y, _)| 0.2 + 0.6 * y as f32 / 127.0);
    assert!(find_border_bands(&ramp, &Default::default()).is_empty());
    assert!(find_regions(&content(128, 128, 4), &Default::default()).is_empty());
    // Flat dark background around a round object: flat outside, but the edge is not straight.
    let disc = Array2::from_shape_fn((128, 128), |(y, x)| {
        let (dy, dx) = (y as f32 - 64.0, x as f32 - 64.0);
        if dx * dx + dy * dy < 50.0 * 50.0 { 0.6 } else { 0.05 }
    });
    assert!(find_border_bands(&disc, &Default::default()).is_empty());
}

#[test]
fn bright_tag_letters_group_into_one_mark() {
    let mut img = content(256, 256, 5);
    // "R 12" at the bottom-right corner, 2× scale (6×10 px glyphs).
    let truth = draw_text(&mut img, "R 12", 200, 236, 2, 1.0);
    let marks = find_burned_in_marks(&img, None, &MarkSettings::default());
    assert_eq!(marks.len(), 1, "{marks:?}");
    let m = &marks[0];
    assert_eq!(m.kind, RegionKind::BurnedInMark);
    assert_eq!(m.detail, "text-like tag");
    assert!(m.reason.contains("bottom-right corner"), "{}", m.reason);
    let iou = box_iou(m.bbox, mask_bbox(&truth).unwrap());
    assert!(iou >= 0.7, "box IoU {iou}: {:?} vs {:?}", m.bbox, mask_bbox(&truth));
}

#[test]
fn dark_text_at_the_top_edge_is_found() {
    let mut img = content(200, 300, 6);
    let truth = draw_text(&mut img, "AP 3", 120, 6, 2, 0.0);
    let marks = find_burned_in_marks(&img, None, &MarkSettings::default());
    assert_eq!(marks.len(), 1, "{marks:?}");
    assert!(marks[0].reason.contains("dark"), "{}", marks[0].reason);
    assert!(box_iou(marks[0].bbox, mask_bbox(&truth).unwrap()) >= 0.7);
}

#[test]
fn a_lone_glyph_in_the_interior_is_not_a_mark_but_a_line_of_text_is() {
    let mut one = content(256, 256, 7);
    draw_text(&mut one, "X", 120, 120, 2, 1.0);
    assert!(find_burned_in_marks(&one, None, &MarkSettings::default()).is_empty());
    let mut line = content(256, 256, 7);
    let truth = draw_text(&mut line, "SCAN 4", 100, 120, 2, 1.0);
    let marks = find_burned_in_marks(&line, None, &MarkSettings::default());
    assert_eq!(marks.len(), 1, "{marks:?}");
    assert!(box_iou(marks[0].bbox, mask_bbox(&truth).unwrap()) >= 0.7);
}

#[test]
fn frame_and_tag_together_come_out_as_two_regions() {
    let mut img = content(128, 128, 8);
    for ((y, x), v) in img.indexed_iter_mut() {
        if x < 2 || y < 2 || x >= 126 || y >= 126 {
            *v = 0.0;
        }
    }
    draw_text(&mut img, "HM L", 5, 5, 1, 1.0);
    let found = find_regions(&img, &FinderSettings::default());
    let kinds: Vec<RegionKind> = found.iter().map(|r| r.kind).collect();
    assert_eq!(kinds, vec![RegionKind::BorderBand, RegionKind::BurnedInMark], "{found:?}");
}

#[test]
fn static_overlay_across_a_set() {
    // Ten images of fresh content; eight carry the same 12×5 block of exact values at (40, 30).
    let stamp: Vec<f32> = (0..60).map(|i| 0.3 + 0.01 * i as f32).collect();
    let images: Vec<Array2<f32>> = (0..10)
        .map(|k| {
            let mut im = content(64, 96, 100 + k);
            if k < 8 {
                for (i, v) in stamp.iter().enumerate() {
                    im[(30 + i / 12, 40 + i % 12)] = *v;
                }
            }
            im
        })
        .collect();
    let found = find_repeated_patches(&images, &RepeatedPatchSettings::default()).unwrap();
    assert_eq!(found.len(), 1, "{found:?}");
    // Static pixels are the block; the mask grows them by one pixel.
    assert_eq!(found[0].bbox, [39, 29, 53, 36]);
    assert!((found[0].confidence - 0.8).abs() < 1e-6);
    // With a share of 0.9 asked, eight of ten is not enough.
    let strict = RepeatedPatchSettings { min_share: 0.9, ..Default::default() };
    assert!(find_repeated_patches(&images, &strict).unwrap().is_empty());
    // Unequal sizes are refused with the offending image named.
    let mut mixed = images.clone();
    mixed[3] = Array2::zeros((64, 95));
    let err = find_repeated_patches(&mixed, &RepeatedPatchSettings::default()).unwrap_err().to_string();
    assert!(err.contains("image 3") && err.contains("95×64"), "{err}");
}

#[test]
fn drawn_rectangle_and_polygon_rasterise_by_pixel_centres() {
    // Box [0,0,2,1]: pixel centres (0.5,0.5) and (1.5,0.5) only.
    let rect = DrawnShape { label: "ruler".into(), shape: Shape::Rect { bbox: [0.0, 0.0, 2.0, 1.0] } };
    let r = drawn_region(&rect, 3, 4).unwrap();
    assert_eq!(r.kind, RegionKind::DrawnRegion);
    assert_eq!(r.area(), 2);
    assert_eq!(r.bbox, [0, 0, 2, 1]);
    assert_eq!(r.label(), "drawn region (ruler)");
    // Right triangle (0,0), (4,0), (0,4) on a 4×4 grid: centre (c+.5, r+.5) inside when
    // c + r + 1 < 4, i.e. c + r ≤ 2: 3 + 2 + 1 = 6 pixels.
    let tri = polygon_mask(&[[0.0, 0.0], [4.0, 0.0], [0.0, 4.0]], 4, 4).unwrap();
    let expect = Array2::from_shape_fn((4, 4), |(r, c)| r + c <= 2);
    assert_eq!(tri, expect);
    // Errors say what is wrong.
    assert!(polygon_mask(&[[0.0, 0.0], [1.0, 1.0]], 4, 4).unwrap_err().to_string().contains("at least 3"));
    let outside = DrawnShape { label: "x".into(), shape: Shape::Rect { bbox: [10.0, 10.0, 12.0, 12.0] } };
    assert!(drawn_region(&outside, 4, 4).unwrap_err().to_string().contains("covers no pixel"));
}

#[test]
fn drawn_regions_file_round_trip_and_errors() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("a.regions.json");
    let file = DrawnFile::new(
        Some([8, 6]),
        vec![
            DrawnShape { label: "tag".into(), shape: Shape::Rect { bbox: [1.0, 1.0, 4.0, 3.0] } },
            DrawnShape { label: "arrow".into(), shape: Shape::Polygon { points: vec![[0.0, 0.0], [8.0, 0.0], [0.0, 6.0]] } },
        ],
    );
    save_drawn(&path, &file).unwrap();
    let back = load_drawn(&path).unwrap();
    assert_eq!(back, file);
    let text = std::fs::read_to_string(&path).unwrap();
    assert!(text.contains("\"shape\": \"rect\"") && text.contains("\"box\""), "{text}");
    let regions = back.to_regions(6, 8).unwrap();
    assert_eq!(regions[0].area(), 6);
    // Made for an 8×6 image, applied to a 9×6 one: refused.
    assert!(back.to_regions(6, 9).unwrap_err().to_string().contains("8×6"));
    std::fs::write(&path, r#"{"format": "other", "version": 1, "regions": []}"#).unwrap();
    let err = format!("{:#}", load_drawn(&path).unwrap_err());
    assert!(err.contains("a.regions.json") && err.contains("spurion-drawn-regions"), "{err}");
}

#[test]
fn finder_settings_are_settable_from_partial_json() {
    let s: FinderSettings = serde_json::from_str(r#"{"mark": {"min_confidence": 0.9}}"#).unwrap();
    assert_eq!(s.mark.min_confidence, 0.9);
    assert_eq!(s.border, Default::default());
    let round: FinderSettings = serde_json::from_str(&serde_json::to_string(&FinderSettings::default()).unwrap()).unwrap();
    assert_eq!(round, FinderSettings::default());
    assert!(serde_json::from_str::<FinderSettings>(r#"{"mark": {"no_such": 1}}"#).is_err());
    // A setting changes what is found: turning the border finder off drops the frame.
    let mut img = content(96, 96, 9);
    for ((y, x), v) in img.indexed_iter_mut() {
        if x < 2 || y < 2 || x >= 94 || y >= 94 {
            *v = 0.0;
        }
    }
    assert_eq!(find_regions(&img, &FinderSettings::default()).len(), 1);
    let mut off = FinderSettings::default();
    off.border.enabled = false;
    assert!(find_regions(&img, &off).iter().all(|r| r.kind != RegionKind::BorderBand));
}
