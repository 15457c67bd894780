//! Repeated patches across a folder: a tag stamped at one place in most images is found; clean,
//! varied images (real photographs, the demo's unmarked sites, a small folder whose 8-bit grain
//! agrees by chance) give none; and nothing that covers most of the image (a frame, an empty
//! mask, a letterbox, film that saturates in the same bright place) is called a patch.
//!
//! The photographs are scikit-image 0.26.0's and pydicom 3.0.2's test images as
//! tests/fixtures/regions/make_clean_fixtures.py shrank them (see SOURCES.txt there).

use std::path::PathBuf;

use ndarray::{Array2, s};
use spurion::demo::{PhantomSpec, Site, for_each_lit, render};
use spurion::regions::{RepeatedPatchSettings, box_iou, find_repeated_patches, load_luminance, mask_bbox};

/// The centre 96×96 of every photograph (the smallest is 128 px on a side; pydicom's 64-px MR
/// slice is left out).
fn photos() -> Vec<Array2<f32>> {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/regions");
    crate::common::clean_grey_photos()
        .filter(|f| *f != "pydicom-mr-small.png")
        .map(|f| {
            let im = load_luminance(&dir.join(f)).unwrap();
            let (h, w) = im.dim();
            assert!(h >= 96 && w >= 96, "{f} is {w}×{h}");
            let (y, x) = ((h - 96) / 2, (w - 96) / 2);
            im.slice(s![y..y + 96, x..x + 96]).to_owned()
        })
        .collect()
}

fn phantoms(site: Site, n: u64, seed: u64) -> Vec<Array2<f32>> {
    (0..n).map(|i| render(&PhantomSpec::new(seed + i, site, i % 2 == 0)).image.mapv(|v| v as f32 / 255.0)).collect()
}

/// Stamps `text` at (x, y) with `value` into the first `k` images; returns the stamp's box.
fn stamp(images: &mut [Array2<f32>], k: usize, text: &str, (x, y): (usize, usize), scale: usize, value: f32) -> [usize; 4] {
    let mut mask = Array2::from_elem(images[0].dim(), false);
    for_each_lit(text, x, y, scale, |px, py| mask[(py, px)] = true);
    for im in images.iter_mut().take(k) {
        im.zip_mut_with(&mask, |v, &m| {
            if m {
                *v = value
            }
        });
    }
    mask_bbox(&mask).unwrap()
}

fn describe(found: &[spurion::regions::Region]) -> Vec<([usize; 4], usize, String)> {
    found.iter().map(|r| (r.bbox, r.area(), r.reason.clone())).collect()
}

#[test]
fn a_tag_stamped_on_most_of_a_folder_is_found_where_it_is() {
    let settings = RepeatedPatchSettings::default();
    // Real photographs, eight of eleven carrying a dark tag in the lower right.
    let mut p = photos();
    let tag = stamp(&mut p, 8, "QA 7", (52, 80), 1, 0.02);
    let found = find_repeated_patches(&p, &settings).unwrap();
    eprintln!("photos with a tag: {:?}", describe(&found));
    assert_eq!(found.len(), 1, "{:?}", describe(&found));
    assert!(box_iou(found[0].bbox, tag) > 0.6, "found {:?}, stamped {tag:?}", found[0].bbox);
    assert!((found[0].confidence - 8.0 / 11.0).abs() < 0.05, "share {}", found[0].confidence);
    // Demo phantoms of a site without marks, eight of ten carrying a bright tag mid-body at
    // twice the scale: a tag is found anywhere, not only in a corner.
    let mut d = phantoms(Site::Saltmarsh, 10, 400);
    let tag = stamp(&mut d, 8, "ZX", (150, 180), 2, 1.0);
    let found = find_repeated_patches(&d, &settings).unwrap();
    eprintln!("phantoms with a tag: {:?}", describe(&found));
    assert_eq!(found.len(), 1, "{:?}", describe(&found));
    assert!(box_iou(found[0].bbox, tag) > 0.6, "found {:?}, stamped {tag:?}", found[0].bbox);
}

#[test]
fn clean_varied_folders_have_no_repeated_patch() {
    let settings = RepeatedPatchSettings::default();
    let found = find_repeated_patches(&photos(), &settings).unwrap();
    assert!(found.is_empty(), "photographs: {:?}", describe(&found));
    for site in [Site::NorthQuay, Site::Saltmarsh] {
        let found = find_repeated_patches(&phantoms(site, 24, 7100), &settings).unwrap();
        assert!(found.is_empty(), "{site}: {:?}", describe(&found));
    }
    // Six 8-bit phantoms: with film grain of a few grey levels, three of six images share a
    // value at many pixels by chance (the sweep of the demo's six DICOM copies found 13
    // "patches" this way before the fix). Scattered agreement is not a patch.
    for seed in [0, 50, 900] {
        let mut six = phantoms(Site::NorthQuay, 3, seed);
        six.extend(phantoms(Site::Saltmarsh, 3, seed + 10));
        let found = find_repeated_patches(&six, &settings).unwrap();
        assert!(found.is_empty(), "six phantoms from seed {seed}: {:?}", describe(&found));
    }
}

#[test]
fn no_repeated_patch_covers_most_of_the_image() {
    let settings = RepeatedPatchSettings::default();
    // Hillmoor: the frame is the same in every image, but it is a border band (found image by
    // image), not a patch; the tag's static "HM" is the one patch.
    let hm = phantoms(Site::Hillmoor, 12, 9000);
    let found = find_repeated_patches(&hm, &settings).unwrap();
    eprintln!("hillmoor: {:?}", describe(&found));
    let truth = render(&PhantomSpec::new(9000, Site::Hillmoor, true));
    let tag = mask_bbox(&truth.tag_mask).unwrap();
    assert_eq!(found.len(), 1, "{:?}", describe(&found));
    assert!(box_iou(found[0].bbox, tag) >= 0.5, "{:?} against the tag {tag:?}", found[0].bbox);
    let (h, w) = hm[0].dim();
    for r in &found {
        let side = (r.bbox[2] - r.bbox[0]).max(r.bbox[3] - r.bbox[1]);
        assert!(side * 5 <= h.min(w) * 2 && r.area() * 4 < h * w, "{:?}", r.bbox);
    }
    // A folder of empty ground-truth masks (all zero, as a sweep of a demo folder's masks/
    // reads them): one value everywhere is not a patch.
    let empty = vec![Array2::<f32>::zeros((128, 128)); 8];
    assert!(find_repeated_patches(&empty, &settings).unwrap().is_empty());
    // Letterboxed photographs: the same black bands in every image, and a black corner block.
    let mut boxed = photos();
    for im in &mut boxed {
        im.slice_mut(s![..12, ..]).fill(0.0);
        im.slice_mut(s![84.., ..]).fill(0.0);
        im.slice_mut(s![..30, 70..]).fill(0.0);
    }
    let found = find_repeated_patches(&boxed, &settings).unwrap();
    assert!(found.is_empty(), "letterbox: {:?}", describe(&found));
    // Film that saturates: a broad bright swelling clipped at one value in every image, its rim
    // varying with the grain as film does.
    let mut bright = phantoms(Site::NorthQuay, 12, 3300);
    for im in &mut bright {
        for ((y, x), v) in im.indexed_iter_mut() {
            let d2 = (y as f32 - 150.0).powi(2) + (x as f32 - 128.0).powi(2);
            if d2 < 1600.0 {
                *v = (*v + 0.35 * (1.0 - d2 / 1600.0)).min(0.94);
            }
        }
    }
    let found = find_repeated_patches(&bright, &settings).unwrap();
    assert!(found.is_empty(), "saturated film: {:?}", describe(&found));
}
