//! The inspector's layout on the screens people have (issue 26): at 1280×800, at 1920×1080,
//! and at the size the window opens at on a 1280×800 screen, the controls a user needs are
//! inside the window, the Export buttons are whole, each image's verdict is beside it in the
//! list, the Sweep tab leaves the slide room for its picture, and the review runs on one click
//! and shows the caution once. Driven headless (egui_kittest); what only the eye can judge is in
//! the screenshots of `scripts/screenshot.sh`.

use std::path::{Path, PathBuf};

use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;

use spurion::gui::{GuiOptions, Inspector, InspectorConfig};
use spurion::methods::MethodKind;

use crate::gui_inspector::{model_path, root, wait_for};

/// A flat folder of four demo images, Hillmoor's first positive among them.
fn folder(dir: &Path) -> PathBuf {
    let images = dir.join("images");
    std::fs::create_dir_all(&images).unwrap();
    for n in ["0000-north-quay.png", "0002-hillmoor.png", "0003-north-quay.png", "0005-hillmoor.png"] {
        std::fs::copy(root().join("assets/demo").join(n), images.join(n)).unwrap();
    }
    images
}

fn harness(size: egui::Vec2, dir: &Path) -> (Harness<'static, Inspector>, PathBuf) {
    let images = folder(dir);
    let mut app = Inspector::new(
        egui::Context::default(),
        GuiOptions { model: Some(model_path()), paths: vec![images.clone()], ledger: None },
        InspectorConfig::headless(&dir.join("config")),
    );
    // One pass an image: the layout, not the method, is under test.
    app.form.method = MethodKind::Gradient;
    let first = images.join("0005-hillmoor.png");
    app.select_path(&first);
    let h = Harness::builder().with_size(size).build_ui_state(|ui, app: &mut Inspector| app.frame(ui), app);
    (h, first)
}

/// The node labelled `label` (the first, if several), with its place on screen.
fn rect_of(h: &Harness<'_, Inspector>, label: &str) -> egui::Rect {
    h.query_all_by_label(label).next().unwrap_or_else(|| panic!("no control labelled {label:?} on screen")).rect()
}

fn assert_inside(h: &Harness<'_, Inspector>, size: egui::Vec2, label: &str) {
    let r = rect_of(h, label);
    let window = egui::Rect::from_min_size(egui::Pos2::ZERO, size).expand(0.5);
    assert!(window.contains_rect(r), "at {}×{}: {label:?} at {r:?} is not inside the window", size.x, size.y);
}

/// Controls that sit in fixed places (bars, the verdict bar above the slide, the tabs).
const FIXED: &[&str] = &[
    "Model…",
    "Images…",
    "Folder…",
    "Open",
    "Review",
    "About",
    "1 clean",
    "2 marked",
    "3 unsure",
    "4 exclude",
    "0 clear",
    "box",
    "outline",
    "fit",
    "1:1",
    "Baseline strip",
    "Sweep",
    "Compute strip",
];

/// The export buttons, pinned under the right-hand panel's scrolled settings: whole, and
/// above the bottom panel (at 1360×860 they sat half under the panel's fold).
const EXPORT: &[&str] = &["view PNG", "strip PNG", "reading JSON"];

fn check_layout(size: egui::Vec2) {
    let tmp = tempfile::tempdir().unwrap();
    let (mut h, first) = harness(size, tmp.path());
    wait_for(&mut h, "the first reading", 120, |a| a.current_shown().is_some() && a.ledger.store.is_some());
    h.run_steps(3);
    for l in FIXED {
        assert_inside(&h, size, l);
    }
    // The slide's header: the reading's request is cut short before the zoom buttons.
    let describe = h.state().wanted_key().unwrap().request.describe();
    let (d, zoom) = (rect_of(&h, &describe), rect_of(&h, "1:1"));
    assert!(d.right() <= zoom.left() + 0.5, "at {}×{}: the request {d:?} runs under the zoom buttons {zoom:?}", size.x, size.y);
    let fold = rect_of(&h, "Baseline strip").top();
    for l in EXPORT {
        assert_inside(&h, size, l);
        let r = rect_of(&h, l);
        assert!(r.bottom() <= fold, "at {}×{}: {l:?} at {r:?} runs under the bottom panel (from y {fold})", size.x, size.y);
    }

    // Key 2 marks the slide's image: the image list says so beside its name.
    h.key_press(egui::Key::Num2);
    h.run_steps(3);
    let listed = h.query_by_label_contains("0005-hillmoor.png · marked").expect("the verdict beside the image's name").rect();
    assert!(egui::Rect::from_min_size(egui::Pos2::ZERO, size).contains_rect(listed), "{listed:?}");
    assert!(h.query_by_label_contains("0002-hillmoor.png ·").is_none(), "an image without a verdict shows its name alone");

    // The Sweep tab leaves the slide room for its picture: at least a quarter of the window's
    // height (it had 21 % at 1280×800 before issue 26; our bar).
    let picture = |a: &Inspector| {
        let p = a.current_prepared().unwrap();
        a.slide_place.map(|s| s.zoom * p.picture.height() as f32).unwrap_or(0.0)
    };
    let with_strip = picture(h.state());
    h.get_by_label("Sweep").click();
    h.run_steps(4);
    assert_inside(&h, size, "Start sweep");
    let with_sweep = picture(h.state());
    assert!(with_sweep >= 0.25 * size.y, "at {}×{}: the picture is {with_sweep:.0} points high with the Sweep tab open ({with_strip:.0} with the strip)", size.x, size.y);
    h.get_by_label("Baseline strip").click();
    h.run_steps(2);

    // One click on Review runs it; the caution is said once, on the status bar.
    h.get_by_label("Review").click();
    h.run_steps(2);
    assert!(h.state().review.open && h.state().review_running(), "the review runs on the click that opens it");
    assert_eq!(h.query_all_by_label(spurion::CAUTION).count(), 1, "the caution once");
    assert_inside(&h, size, "Back to the slide");
    assert_inside(&h, size, "Cancel review");
    h.get_by_label("Cancel review").click();
    wait_for(&mut h, "the review to stop", 60, |a| !a.review_running());
    drop(first);
}

#[test]
fn the_inspector_fits_a_1280_by_800_screen() {
    check_layout(egui::vec2(1280.0, 800.0));
}

#[test]
fn the_inspector_fits_a_1920_by_1080_screen() {
    check_layout(egui::vec2(1920.0, 1080.0));
}

#[test]
fn the_window_opens_fitted_to_its_monitor_and_its_controls_fit_it() {
    // On a 1280×800 screen the window leaves room for a title bar and a task bar; on a large
    // one it takes its preferred size; without a known monitor, it fits 1280×800.
    let small = spurion::gui::window_size_for(Some(egui::vec2(1280.0, 800.0)));
    assert!(small.x <= 1280.0 && small.y <= 800.0 - 60.0, "{small:?}");
    assert_eq!(spurion::gui::window_size_for(None), small);
    assert_eq!(spurion::gui::window_size_for(Some(egui::vec2(2560.0, 1440.0))), spurion::gui::PREFERRED_WINDOW);
    assert_eq!(spurion::gui::window_size_for(Some(egui::vec2(640.0, 480.0))), spurion::gui::MIN_WINDOW);
    check_layout(small);
}
