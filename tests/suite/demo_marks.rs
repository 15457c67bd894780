//! The demo world's later marks: Fellbrook's bare side letter and ruler, the Hillmoor reader's
//! ring or arrow. Asking for them changes no other image and no other pixel; each mask is
//! exactly the pixels its mark changes; the manifest and the mask files say what was drawn.

use std::path::Path;

use ndarray::Array2;
use spurion::control::Control;
use spurion::demo::{
    self, ANNOTATION_LEVEL, Annotation, Corner, Edge, FILM_MAX, FILM_MIN, LETTER_LEVEL, Marks, Mix, PhantomSpec, Planted, PlantedKind,
    RULER_LEVEL, SetSpec, Site,
};
use spurion::regions::mask_bbox;

fn diff(a: &Array2<u8>, b: &Array2<u8>) -> Array2<bool> {
    ndarray::Zip::from(a).and(b).map_collect(|x, y| x != y)
}

fn or(a: &Array2<bool>, b: &Array2<bool>) -> Array2<bool> {
    ndarray::Zip::from(a).and(b).map_collect(|x, y| *x || *y)
}

fn count(m: &Array2<bool>) -> usize {
    m.iter().filter(|&&v| v).count()
}

#[test]
fn asking_for_the_later_marks_leaves_every_other_image_as_it_was() {
    let plain = SetSpec { count: 60, seed: 1, ..SetSpec::default() };
    let later = SetSpec { fellbrook: 12, reader_marks: true, ..plain.clone() };
    assert_eq!(later.total(), 72);
    let mut annotated = 0;
    for i in 0..plain.count {
        let (a, b) = (plain.phantom(i), later.phantom(i));
        // The same image; only a Hillmoor positive may gain the reader's mark.
        assert_eq!(PhantomSpec { annotation: Annotation::None, ..b.clone() }, a, "image {i}");
        assert!(!b.letter && !b.ruler, "image {i}");
        let (pa, pb) = (demo::render(&a), demo::render(&b));
        if b.annotation == Annotation::None {
            assert_eq!(pa.image, pb.image, "image {i}");
            assert_eq!(plain.stem(i, a.site), later.stem(i, b.site));
        } else {
            assert!(b.site == Site::Hillmoor && b.finding, "image {i}");
            assert_eq!(diff(&pa.image, &pb.image), pb.annotation_mask, "image {i}: only the reader's mark changed");
            annotated += 1;
        }
    }
    assert!(annotated > 0, "some Hillmoor positives carry the reader's mark");
    for i in plain.count..later.total() {
        let s = later.phantom(i);
        assert_eq!(s.site, Site::Fellbrook);
        assert!(s.letter && !s.tag && !s.frame && s.annotation == Annotation::None, "image {i}: {s:?}");
    }
    // Without the habits, no later mark at all.
    let none = SetSpec { marks: Marks::None, ..later.clone() };
    assert!((0..none.total()).map(|i| none.phantom(i)).all(|s| !s.letter && !s.ruler && s.annotation == Annotation::None));
}

#[test]
fn later_mark_masks_are_exactly_the_pixels_the_marks_change() {
    let n = demo::DEFAULT_SIZE;
    let mut corners = std::collections::BTreeSet::new();
    let mut edges = std::collections::BTreeSet::new();
    for seed in 0..24u64 {
        // Fellbrook with letter and ruler, and with the tag and frame too (the `all` rule):
        // the letter keeps out of the tag's corner and no two marks share a pixel.
        for tagged in [false, true] {
            let full = PhantomSpec { ruler: true, tag: tagged, frame: tagged, ..PhantomSpec::new(seed, Site::Fellbrook, seed % 2 == 0) };
            let bare = PhantomSpec { letter: false, ruler: false, ..full.clone() };
            let (f, b) = (demo::render(&full), demo::render(&bare));
            assert_eq!(diff(&f.image, &b.image), or(&f.letter_mask, &f.ruler_mask), "seed {seed}");
            let corner = f.row.letter.expect("a letter was written");
            assert!(!(tagged && corner == Corner::TopLeft), "seed {seed}: the letter sits on the tag");
            corners.insert(corner.name());
            edges.insert(f.row.ruler.expect("a ruler was laid").name());
            let masks = f.masks();
            for (i, (a, ma)) in masks.iter().enumerate() {
                for (b, mb) in &masks[i + 1..] {
                    if *a != "finding" && *b != "finding" {
                        assert!(!ndarray::Zip::from(*ma).and(*mb).any(|x, y| *x && *y), "seed {seed}: {a} and {b} overlap");
                    }
                }
            }
            for ((px, &l), &r) in f.image.iter().zip(&f.letter_mask).zip(&f.ruler_mask) {
                match (l, r) {
                    (true, _) => assert_eq!(*px, LETTER_LEVEL),
                    (_, true) => assert_eq!(*px, RULER_LEVEL),
                    _ => {}
                }
            }
            // The letter is bare and small, in its corner; the ruler lies along its edge.
            let [x0, y0, x1, y1] = mask_bbox(&f.letter_mask).unwrap();
            let near = |lo: usize, hi: usize| hi <= n * 16 / 100 || lo >= n - n * 16 / 100;
            assert!(near(x0, x1) && near(y0, y1), "seed {seed}: letter at {:?} is not in a corner", [x0, y0, x1, y1]);
            assert_eq!(matches!(corner, Corner::TopLeft | Corner::BottomLeft), x1 <= n / 2, "seed {seed}");
            assert_eq!(matches!(corner, Corner::TopLeft | Corner::TopRight), y1 <= n / 2, "seed {seed}");
            let [rx0, ry0, rx1, ry1] = mask_bbox(&f.ruler_mask).unwrap();
            let depth = match f.row.ruler.unwrap() {
                Edge::Top => ry1,
                Edge::Bottom => n - ry0,
                Edge::Left => rx1,
                Edge::Right => n - rx0,
            };
            assert!(depth <= n / 10, "seed {seed}: ruler {:?} lies {depth} px deep", [rx0, ry0, rx1, ry1]);
            assert!((rx1 - rx0).max(ry1 - ry0) >= n / 4, "seed {seed}: the ruler is a long thin mark");
            // Ticks: the ruler's mask is far from solid.
            assert!(count(&f.ruler_mask) * 3 < (rx1 - rx0) * (ry1 - ry0), "seed {seed}");
        }
        // The reader's ring or arrow, around or at the finding.
        for what in [Annotation::Ring, Annotation::Arrow] {
            let marked = PhantomSpec { annotation: what, ..PhantomSpec::new(seed, Site::Hillmoor, true) };
            let bare = PhantomSpec { annotation: Annotation::None, ..marked.clone() };
            let (m, b) = (demo::render(&marked), demo::render(&bare));
            assert_eq!(m.row.annotation, what);
            assert_eq!(diff(&m.image, &b.image), m.annotation_mask, "seed {seed} {what}");
            assert!(count(&m.annotation_mask) > 40, "seed {seed} {what}: {} pixels", count(&m.annotation_mask));
            assert!(m.image.iter().zip(&m.annotation_mask).all(|(&p, &a)| !a || p == ANNOTATION_LEVEL));
            // Close to a finding: the mark's box and the finding's box are near each other.
            let (a, f) = (mask_bbox(&m.annotation_mask).unwrap(), mask_bbox(&m.finding_mask).unwrap());
            let gap = |lo0: usize, hi0: usize, lo1: usize, hi1: usize| lo1.saturating_sub(hi0).max(lo0.saturating_sub(hi1));
            assert!(gap(a[0], a[2], f[0], f[2]) <= 8 && gap(a[1], a[3], f[1], f[3]) <= 8, "seed {seed} {what}: {a:?} far from {f:?}");
            if what == Annotation::Ring {
                // A ring is centred on a finding and is thin.
                let (cx, cy) = ((a[0] + a[2]) / 2, (a[1] + a[3]) / 2);
                assert!(m.finding_mask[(cy, cx)], "seed {seed}: the ring's centre ({cx}, {cy}) is not on the finding");
                assert!(count(&m.annotation_mask) * 4 < (a[2] - a[0]) * (a[3] - a[1]), "seed {seed}: the ring is thin");
            }
            // Every other pixel is film.
            assert!(m.image.iter().zip(&m.annotation_mask).zip(&m.tag_mask).zip(&m.frame_mask).all(|(((&p, &a), &t), &fr)| a
                || t
                || fr
                || (FILM_MIN as u8..=FILM_MAX as u8).contains(&p)));
        }
        // A negative has no finding to mark: nothing is drawn.
        let neg = demo::render(&PhantomSpec { annotation: Annotation::Ring, ..PhantomSpec::new(seed, Site::Hillmoor, false) });
        assert_eq!(count(&neg.annotation_mask), 0);
        assert_eq!(neg.row.annotation, Annotation::None);
    }
    assert!(corners.len() >= 3, "the letter's corner changes from image to image: {corners:?}");
    assert!(edges.len() >= 3, "the ruler's edge changes: {edges:?}");
}

#[test]
fn a_written_set_with_the_later_marks_has_their_manifest_columns_and_masks() {
    let dir = tempfile::tempdir().unwrap();
    let spec = SetSpec { count: 12, seed: 8, mix: Mix::Pooled, fellbrook: 10, reader_marks: true, by_site: true, ..SetSpec::default() };
    demo::write_demo_set(dir.path(), &spec, &Control::new()).unwrap();
    let rows = demo::read_manifest(&dir.path().join("manifest.csv")).unwrap();
    assert_eq!(rows.len(), 22);
    let read = |p: &Path| {
        let g = image::open(p).unwrap_or_else(|e| panic!("{}: {e}", p.display())).to_luma8();
        Array2::from_shape_fn((g.height() as usize, g.width() as usize), |(y, x)| g.get_pixel(x as u32, y as u32)[0] == 255)
    };
    let mut rulers = 0;
    for (i, r) in rows.iter().enumerate() {
        assert_eq!(r.spec(), spec.phantom(i), "row {i}");
        let p = demo::render(&r.spec());
        assert_eq!((r.letter, r.ruler, r.annotation), (p.row.letter, p.row.ruler, p.row.annotation));
        assert_eq!(r.letter.is_some(), r.site == Site::Fellbrook, "{}", r.file);
        assert!(r.file.starts_with(&format!("images/{}/", r.site.name())), "{}", r.file);
        rulers += r.ruler.is_some() as usize;
        let stem = Path::new(&r.file).file_stem().unwrap().to_string_lossy().to_string();
        for (what, m) in p.masks() {
            let on_disk = read(&dir.path().join(format!("masks/{stem}.{what}.png")));
            assert_eq!(&on_disk, m, "{stem}.{what}");
        }
        assert_eq!(count(&p.letter_mask) > 0, r.letter.is_some());
        assert_eq!(count(&p.ruler_mask) > 0, r.ruler.is_some());
        assert_eq!(count(&p.annotation_mask) > 0, r.annotation != Annotation::None);
    }
    assert!(rulers > 0 && rulers < 10, "a ruler on some of Fellbrook's images, not all: {rulers} of 10");
}

#[test]
fn a_planted_mark_follows_the_label_and_changes_only_its_own_pixels() {
    // `--plant KIND:POS:NEG`: the mark on a share of each class, on any site; shares 0 and 0
    // give the very images of a set without it, and a marked image differs from its bare twin
    // exactly on the mark's mask. A ring or arrow on a negative goes around a place in a lung.
    let plain = SetSpec { count: 12, seed: 77, mix: Mix::Even, ..SetSpec::default() };
    for kind in PlantedKind::ALL {
        let with = |positive, negative| SetSpec { planted: Some(Planted { kind, positive, negative }), ..plain.clone() };
        let (shortcut, bare, every) = (with(1.0, 0.0), with(0.0, 0.0), with(1.0, 1.0));
        let mut negatives_marked = 0;
        for i in 0..plain.count {
            let p = demo::render(&plain.phantom(i));
            let b = demo::render(&bare.phantom(i));
            assert_eq!(p.image, b.image, "{kind} image {i}: shares 0:0 draw the set as it was");
            let s = demo::render(&shortcut.phantom(i));
            let e = demo::render(&every.phantom(i));
            let mask = |ph: &demo::Phantom| match kind {
                PlantedKind::Letter => ph.letter_mask.clone(),
                PlantedKind::Ruler => ph.ruler_mask.clone(),
                PlantedKind::Ring | PlantedKind::Arrow => ph.annotation_mask.clone(),
            };
            assert_eq!(count(&mask(&s)) > 0, p.row.finding, "{kind} image {i}: on every positive, on no negative");
            assert!(count(&mask(&e)) > 0, "{kind} image {i}: shares 1:1 mark every image");
            assert_eq!(diff(&p.image, &e.image), mask(&e), "{kind} image {i}: only the mark's pixels change");
            negatives_marked += (!p.row.finding) as usize;
            // The manifest row draws the marked image again.
            assert_eq!(demo::render(&e.row.spec()).image, e.image, "{kind} image {i}");
        }
        assert!(negatives_marked > 0);
    }
    assert!("ring:0.9:0.1".parse::<Planted>().is_ok());
    for bad in ["ring", "ring:2:0", "spot:0.5:0.5", "ring:0.5"] {
        assert!(bad.parse::<Planted>().is_err(), "{bad}");
    }
}
