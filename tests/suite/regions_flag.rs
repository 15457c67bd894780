//! The flag rule, `reading.json`'s regions block, the `spurion regions` output, and the finders'
//! speed. Images are demo phantoms (invented data) or small hand-made arrays.

use std::time::Instant;

use ndarray::Array2;
use spurion::demo::{PhantomSpec, Site, render};
use spurion::sign::Sign;
use spurion::regions::drawn::{DrawnShape, Shape, drawn_region};
use spurion::regions::{
    FinderSettings, FlagSettings, RegionKind, RegionsFile, assess, assess_regions, find_regions, write_regions,
};

fn hillmoor() -> (Array2<f32>, Array2<bool>) {
    let ph = render(&PhantomSpec::new(77, Site::Hillmoor, true));
    (ph.image.mapv(|v| v as f32 / 255.0), ph.tag_mask)
}

#[test]
fn map_on_the_tag_is_suspect_and_a_flat_map_is_not() {
    let (img, tag) = hillmoor();
    // Support on the tag's pixels, a little everywhere else.
    let on_tag = tag.mapv(|t| if t { 1.0f32 } else { 0.001 });
    let a = assess(&on_tag, &img, &FinderSettings::default(), &FlagSettings::default()).unwrap();
    assert!(a.suspect, "{}", a.reason);
    assert!(a.reason.contains("burned-in mark"), "{}", a.reason);
    let mark = a.regions.iter().find(|r| r.kind == RegionKind::BurnedInMark).unwrap();
    assert!(mark.suspect && mark.figures.mark_share.unwrap() > 0.5 && mark.figures.lift.unwrap() > 50.0, "{mark:?}");
    // A flat map: every region's share equals its area share, so every lift is 1.
    let flat = Array2::from_elem(img.dim(), 1.0f32);
    let b = assess(&flat, &img, &FinderSettings::default(), &FlagSettings::default()).unwrap();
    assert!(!b.suspect, "{}", b.reason);
    assert!(b.reason.starts_with("no region passes"), "{}", b.reason);
    for r in &b.regions {
        assert!((r.figures.lift.unwrap() - 1.0).abs() < 1e-9);
        assert!((r.figures.mark_share.unwrap() - r.figures.area_fraction).abs() < 1e-12);
    }
    // Thresholds are settable: a low bar flags the flat map on the frame (share = its area
    // share, 1 − (248/256)² ≈ 0.0615 for a 4-px frame, lift 1).
    let low = FlagSettings { min_mark_share: 0.05, min_lift: 0.5, ..Default::default() };
    let c = assess(&flat, &img, &FinderSettings::default(), &low).unwrap();
    assert!(c.suspect && c.reason.contains("border band"), "{}", c.reason);
    let frame = c.regions.iter().find(|r| r.kind == RegionKind::BorderBand).unwrap();
    assert!((frame.figures.area_fraction - (1.0 - (248.0f64 / 256.0).powi(2))).abs() < 1e-9);
}

#[test]
fn union_of_regions_and_region_kinds() {
    // 10×10 map; A = row 0, columns 0..5 and B = row 9, columns 0..5 (5 pixels each, area 0.05).
    // Each holds 4 × 5 = 20 of the 100 units: share 0.2 (< 0.25), lift 0.2 / 0.05 = 4.
    // Together: share 0.4, lift 0.4 / 0.1 = 4 → suspect only through the union.
    let rect = |y: f64| DrawnShape { label: format!("row {y}"), shape: Shape::Rect { bbox: [0.0, y, 5.0, y + 1.0] } };
    let regions = vec![drawn_region(&rect(0.0), 10, 10).unwrap(), drawn_region(&rect(9.0), 10, 10).unwrap()];
    let map = Array2::from_shape_fn((10, 10), |(y, x)| if (y == 0 || y == 9) && x < 5 { 4.0f32 } else { 60.0 / 90.0 });
    let quarter = FlagSettings { min_mark_share: 0.25, ..Default::default() };
    let a = assess_regions(&map, &regions, &quarter).unwrap();
    assert!(a.regions.iter().all(|r| !r.suspect && (r.figures.mark_share.unwrap() - 0.2).abs() < 1e-6));
    let all = a.all_regions.as_ref().unwrap();
    assert!((all.mark_share.unwrap() - 0.4).abs() < 1e-6 && (all.lift.unwrap() - 4.0).abs() < 1e-5);
    assert!(a.suspect && a.reason.contains("together"), "{}", a.reason);
    let single = FlagSettings { check_union: false, ..quarter.clone() };
    assert!(!assess_regions(&map, &regions, &single).unwrap().suspect);
    // Only border bands may raise the flag: drawn regions then do not.
    let bands_only = FlagSettings { kinds: vec![RegionKind::BorderBand], ..quarter.clone() };
    let b = assess_regions(&map, &regions, &bands_only).unwrap();
    assert!(!b.suspect && b.all_regions.is_none());
}

#[test]
fn opposing_part_flags_opposition_on_the_tag() {
    let (img, tag) = hillmoor();
    let map = tag.mapv(|t| if t { -1.0f32 } else { 0.001 });
    let sup = assess(&map, &img, &FinderSettings::default(), &FlagSettings::default()).unwrap();
    assert!(!sup.suspect, "{}", sup.reason);
    let opp = FlagSettings { part: Sign::Opposing, ..Default::default() };
    let o = assess(&map, &img, &FinderSettings::default(), &opp).unwrap();
    assert!(o.suspect && o.reason.contains("opposing"), "{}", o.reason);
}

#[test]
fn assessment_json_has_the_reading_fields() {
    let (img, tag) = hillmoor();
    let map = tag.mapv(|t| if t { 1.0f32 } else { 0.0 });
    let a = assess(&map, &img, &FinderSettings::default(), &FlagSettings::default()).unwrap();
    let v = serde_json::to_value(&a).unwrap();
    assert_eq!(v["suspect"], serde_json::Value::Bool(true));
    assert!(v["suspect_reason"].as_str().unwrap().contains("mark share"));
    let first = &v["regions"][0];
    for key in ["kind", "box", "area_fraction", "mark_share", "lift", "relevance_mass_accuracy", "pointing_hit"] {
        assert!(first.get(key).is_some(), "missing {key} in {first}");
    }
    assert_eq!(first["kind"], "border-band");
    // Map and image on different grids: a clear error.
    let err = assess(&Array2::zeros((10, 10)), &img, &FinderSettings::default(), &FlagSettings::default()).unwrap_err();
    assert!(err.to_string().contains("image grid"), "{err}");
}

#[test]
fn regions_command_writes_masks_and_json() {
    let dir = tempfile::tempdir().unwrap();
    let ph = render(&PhantomSpec::new(78, Site::Hillmoor, false));
    let png = dir.path().join("hm.png");
    image::GrayImage::from_raw(256, 256, ph.image.iter().copied().collect()).unwrap().save(&png).unwrap();
    let out = dir.path().join("out");
    let file = write_regions(&png, &out, &FinderSettings::default()).unwrap();
    let back: RegionsFile = serde_json::from_str(&std::fs::read_to_string(out.join("regions.json")).unwrap()).unwrap();
    assert_eq!(back, file);
    let kinds: Vec<RegionKind> = back.regions.iter().map(|r| r.kind).collect();
    assert_eq!(kinds, vec![RegionKind::BorderBand, RegionKind::BurnedInMark]);
    let found = find_regions(&ph.image.mapv(|v| v as f32 / 255.0), &FinderSettings::default());
    for (r, f) in found.iter().zip(&back.regions) {
        let mask = image::open(out.join(f.mask.as_ref().unwrap())).unwrap().to_luma8();
        let on: Vec<bool> = mask.pixels().map(|p| p[0] == 255).collect();
        assert_eq!(on, r.mask.iter().copied().collect::<Vec<_>>(), "{}", f.label);
    }
    // A missing image is an error naming the file.
    let err = format!("{:#}", write_regions(&dir.path().join("nope.png"), &out, &FinderSettings::default()).unwrap_err());
    assert!(err.contains("nope.png"), "{err}");
    std::fs::write(dir.path().join("text.png"), "not a picture").unwrap();
    assert!(write_regions(&dir.path().join("text.png"), &out, &FinderSettings::default()).is_err());
}

#[test]
fn finders_are_fast_enough_for_a_sweep() {
    let (img, _) = hillmoor();
    let settings = FinderSettings::default();
    let mut times = Vec::new();
    for _ in 0..5 {
        let t = Instant::now();
        let found = find_regions(&img, &settings);
        times.push(t.elapsed().as_secs_f64() * 1000.0);
        assert_eq!(found.len(), 2);
    }
    times.sort_by(|a, b| a.total_cmp(b));
    eprintln!("find_regions on 256×256 (this build's profile): median {:.1} ms, runs {times:.1?}", times[2]);
    // Generous bound for an unoptimised test build on a loaded 2-core machine; an optimised
    // build is far quicker (see the regions note).
    assert!(times[2] < 500.0, "median {:.1} ms", times[2]);
}
