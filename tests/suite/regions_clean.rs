//! False positives of the region finders on real photographs and scans that carry no burned-in
//! marks and no border bands: the test images shipped by scikit-image 0.26.0 (skimage.data) and
//! pydicom 3.0.2 (CT_small.dcm, MR_small.dcm), shrunk to at most 256 px by
//! tests/fixtures/regions/make_clean_fixtures.py (sources and versions in SOURCES.txt there).
//! Every region found on them is a false positive.

use std::path::PathBuf;

use spurion::regions::{FinderSettings, RegionKind, find_regions, load_luminance};

#[test]
fn clean_real_images_give_few_false_positives() {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/regions");
    let settings = FinderSettings::default();
    let (mut bands, mut marks) = (0, 0);
    for f in crate::common::clean_grey_photos() {
        let img = load_luminance(&dir.join(f)).unwrap();
        let found = find_regions(&img, &settings);
        let b = found.iter().filter(|r| r.kind == RegionKind::BorderBand).count();
        let m = found.iter().filter(|r| r.kind == RegionKind::BurnedInMark).count();
        eprintln!("{f}: {b} border band(s), {m} burned-in mark(s)");
        for r in &found {
            eprintln!("    {} {:?}: {}", r.label(), r.bbox, r.reason);
        }
        bands += b;
        marks += m;
    }
    eprintln!("total false positives: {bands} border bands, {marks} burned-in marks over {} images", crate::common::clean_grey_photos().count());
    assert_eq!(bands + marks, 0, "false positives on clean images (see the list above)");
}
