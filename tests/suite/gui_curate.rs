//! The curator's work in the inspector, driven headless (egui_kittest) as a person would: the
//! sweep view (start, cancel, resume, the table), the ledger's keys 1–4 and note (shown in the
//! table, on disk, and again after the inspector is closed and opened anew), a failing save
//! (told, kept, saved once the disk allows), and a drawn region (in the ledger, in the figures,
//! matching `spurion explain --ledger`).
//!
//! Readings here use the gradient method (one pass an image) or few fixed IG steps, so the
//! sweeps stay small in a debug build.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;

use spurion::gui::state::NoteKind;
use spurion::gui::{GuiOptions, Inspector, InspectorConfig};
use spurion::ledger::{Ledger, Status, Verdict};
use spurion::methods::MethodKind;
use spurion::regions::RegionKind;

use crate::gui_inspector::{drive, model_path, root, wait_for};

/// Copies demo images into `dir/images/SITE/NAME`, as a cooperative's folders are laid out.
pub(crate) fn site_folder(dir: &Path, names: &[&str]) -> PathBuf {
    let images = dir.join("images");
    for n in names {
        let site = n.split_once('-').map(|(_, s)| s.trim_end_matches(".png")).unwrap();
        std::fs::create_dir_all(images.join(site)).unwrap();
        std::fs::copy(root().join("assets/demo").join(n), images.join(site).join(n)).unwrap();
    }
    images
}

pub(crate) fn inspector(paths: Vec<PathBuf>, ledger: Option<PathBuf>, config_dir: &Path, method: MethodKind) -> Harness<'static, Inspector> {
    let mut app = Inspector::new(
        egui::Context::default(),
        GuiOptions { model: Some(model_path()), paths, ledger },
        InspectorConfig::headless(config_dir),
    );
    app.form.method = method;
    // Few fixed steps when integrated gradients are asked for: the sweep must stay small.
    app.form.steps = 8;
    app.form.refine = false;
    let mut h = drive(app);
    wait_until(&mut h, "the model and the ledger", 120, |a| a.session.is_some() && a.ledger.store.is_some());
    h
}

/// Steps the UI until `done` holds (errors in the notes are allowed: some tests cause them).
pub(crate) fn wait_until(h: &mut Harness<'_, Inspector>, what: &str, secs: u64, done: impl Fn(&Inspector) -> bool) {
    let start = Instant::now();
    while !done(h.state()) {
        h.step();
        assert!(start.elapsed() < Duration::from_secs(secs), "timed out waiting for {what}; notes: {:?}", notes(h.state()));
        std::thread::sleep(Duration::from_millis(15));
    }
}

/// Clicks the widget labelled `label` once it stands still: a widget that moved in the last
/// frame (a panel below grew, a row of buttons changed) would be clicked where it was.
fn click(h: &mut Harness<'_, Inspector>, label: &str) {
    let mut at = None;
    for _ in 0..20 {
        let now = h.query_by_label(label).map(|n| n.rect());
        if now.is_some() && now == at {
            break;
        }
        at = now;
        h.step();
    }
    h.get_by_label(label).click();
    h.run_steps(1);
}

pub(crate) fn notes(a: &Inspector) -> Vec<String> {
    a.notes.iter().map(|n| n.text.clone()).collect()
}

fn sweep_rows(a: &Inspector) -> usize {
    a.sweep.result.as_ref().map_or(0, |r| r.rows.len())
}

/// Starts the sweep from its tab, as a person would, and waits for its table.
pub(crate) fn run_sweep(h: &mut Harness<'_, Inspector>, rows: usize) {
    if h.state().sweep.tab != spurion::gui::sweep::BottomTab::Sweep {
        click(h, "Sweep");
    }
    let before = h.state().next_sweep;
    click(h, "Start sweep");
    assert_eq!(h.state().next_sweep, before + 1, "the click started a sweep; notes: {:?}", notes(h.state()));
    wait_until(h, "the sweep", 300, |a| a.next_sweep > before && a.sweep.job.is_none() && a.sweep.result.as_ref().is_some_and(|r| r.id == a.next_sweep));
    assert_eq!(sweep_rows(h.state()), rows, "{:?}", notes(h.state()));
    h.run_steps(2);
}

pub(crate) fn saved(a: &Inspector) -> bool {
    a.ledger.status() == Some(Status::Saved)
}

#[test]
fn a_verdict_given_with_a_key_shows_in_the_table_and_survives_closing_and_reopening() {
    let tmp = tempfile::tempdir().unwrap();
    let images = site_folder(tmp.path(), &["0000-north-quay.png", "0003-north-quay.png", "0002-hillmoor.png", "0005-hillmoor.png"]);
    let config = tmp.path().join("config");
    let mut h = inspector(vec![images.clone()], None, &config, MethodKind::Gradient);
    // With no ledger named, the one in the folder opened; the sweep's folders beside it.
    let ledger_file = images.join("spurion-ledger.json");
    assert_eq!(h.state().ledger.path.as_deref(), Some(ledger_file.as_path()));
    assert_eq!(h.state().sweep.out_field, tmp.path().join("images-sweep").display().to_string());

    run_sweep(&mut h, 4);
    assert!(h.query_by_label("hillmoor/0005-hillmoor.png").is_some(), "the table lists the image");
    assert_eq!(h.query_all_by_label("none yet").count(), 4, "no verdict yet in any row");

    // A click on a row opens its image in the slide; key 2 marks it.
    let marked = images.join("hillmoor/0005-hillmoor.png");
    click(&mut h, "hillmoor/0005-hillmoor.png");
    assert_eq!(h.state().current_image().map(|e| e.path.clone()), Some(marked.clone()));
    wait_for(&mut h, "the image", 60, |a| a.current_prepared().is_some());
    h.key_press(egui::Key::Num2);
    h.run_steps(2);
    assert_eq!(h.state().ledger.verdict_of(&marked), Some(Verdict::Marked), "at once, before the disk has it");
    assert_eq!(h.query_all_by_label("marked").count(), 1, "the table's verdict column shows it");
    assert_eq!(h.query_all_by_label("none yet").count(), 3);
    // A note, typed and left with Enter.
    h.get_by_label("note").focus();
    h.run_steps(1);
    h.get_by_label("note").type_text("corner tag");
    h.key_press(egui::Key::Enter);
    h.run_steps(2);
    wait_until(&mut h, "the ledger to be saved", 30, saved);
    assert!(h.query_all_by_label("ledger saved (1 image)").count() >= 1, "the save status is on screen");
    let on_disk = Ledger::open(&ledger_file).unwrap();
    let entry = on_disk.entry("hillmoor/0005-hillmoor.png").expect("the entry is on disk");
    assert_eq!((entry.verdict, entry.note.as_str()), (Some(Verdict::Marked), "corner tag"));

    // Close the inspector (the ledger's thread stops after its last save) and open it anew.
    assert_eq!(h.state_mut().close_ledger(), None, "nothing left unsaved");
    drop(h);
    let mut h = inspector(vec![images.clone()], None, &config, MethodKind::Gradient);
    assert_eq!(h.state().ledger.verdict_of(&marked), Some(Verdict::Marked));
    // The sweep's own files, shown again, carry the verdict as the ledger holds it now.
    click(&mut h, "Sweep");
    let before = h.state().next_sweep;
    click(&mut h, "Show files");
    wait_until(&mut h, "the sweep's files", 120, |a| a.next_sweep > before && a.sweep.result.as_ref().is_some_and(|r| r.from_files));
    h.run_steps(2);
    assert_eq!(sweep_rows(h.state()), 4);
    assert_eq!(h.query_all_by_label("marked").count(), 1, "after reopening, the table shows the verdict");

    // Exclude another image with key 4 and sweep again leaving excluded images out: the rows
    // and the report's table carry the verdicts, and the excluded image is not read.
    click(&mut h, "north-quay/0000-north-quay.png");
    h.key_press(egui::Key::Num4);
    h.run_steps(2);
    click(&mut h, "leave out images marked exclude");
    assert!(h.state().sweep.leave_out_excluded);
    run_sweep(&mut h, 3);
    let r = h.state().sweep.result.clone().unwrap();
    assert_eq!(r.left_out, 1);
    assert!(!r.rows.iter().any(|x| x.path == "north-quay/0000-north-quay.png"));
    let csv = std::fs::read_to_string(r.out.join("sweep.csv")).unwrap();
    let line = csv.lines().find(|l| l.starts_with("hillmoor/0005-hillmoor.png,")).unwrap();
    assert!(line.contains(",marked,"), "the report's table has the verdict: {line}");
    assert_eq!(r.cached, 3, "the images read before come from the shared cache");
}

#[test]
fn starting_and_cancelling_a_sweep_keeps_what_was_read_and_a_new_start_goes_on() {
    let tmp = tempfile::tempdir().unwrap();
    let names = ["0000-north-quay.png", "0003-north-quay.png", "0006-north-quay.png", "0002-hillmoor.png", "0005-hillmoor.png", "0008-hillmoor.png"];
    let images = site_folder(tmp.path(), &names);
    // Integrated gradients with 8 steps: about a second an image here, so the cancel lands mid-way.
    let mut h = inspector(vec![images.clone()], None, &tmp.path().join("config"), MethodKind::IntegratedGradients);
    click(&mut h, "Sweep");
    click(&mut h, "Start sweep");
    let job = h.state().sweep.job.expect("the sweep runs");
    let progress = |a: &Inspector| a.workers.running.iter().find(|r| r.id == job).map(|r| r.ctl.progress());
    wait_until(&mut h, "the first image read", 120, |a| progress(a).is_some_and(|(d, _)| d >= 1));
    let (done, total) = progress(h.state()).unwrap();
    assert_eq!(total, names.len() as u64);
    assert!(done < total, "the sweep ended before it could be cancelled ({done}/{total})");
    assert!(h.query_by_label_contains(&format!("/{total} images")).is_some(), "progress in images is shown");
    click(&mut h, "Cancel sweep");
    wait_until(&mut h, "the cancel", 120, |a| a.sweep.job.is_none());
    assert!(h.state().sweep.result.is_none(), "a cancelled sweep shows no table");
    let said = notes(h.state());
    assert!(said.last().is_some_and(|n| n.contains("sweep cancelled") && n.contains("cache")), "{said:?}");
    let out = tmp.path().join("images-sweep");
    assert!(!out.join("sweep.csv").exists(), "a cancelled sweep writes no table");
    let kept = walk(&out.join("cache")).iter().filter(|p| p.extension().is_some_and(|e| e == "json")).count();
    assert!(kept >= 1 && kept < names.len(), "{kept} images kept in the cache");

    run_sweep(&mut h, names.len());
    let r = h.state().sweep.result.clone().unwrap();
    assert_eq!((r.cached, r.computed), (kept, names.len() - kept), "the new start goes on where the cancel stopped");
    assert!(out.join("report.html").is_file());
}

fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut out = vec![];
    for e in std::fs::read_dir(dir).into_iter().flatten().flatten() {
        let p = e.path();
        if p.is_dir() { out.extend(walk(&p)) } else { out.push(p) }
    }
    out
}

#[test]
fn a_failing_ledger_save_is_shown_the_verdict_is_kept_and_saved_once_the_disk_allows() {
    let tmp = tempfile::tempdir().unwrap();
    let images = site_folder(tmp.path(), &["0002-hillmoor.png"]);
    let image = images.join("hillmoor/0002-hillmoor.png");
    let ledger_file = images.join("spurion-ledger.json");
    // The lock file's name taken by a folder: every save fails at its first step, as a real
    // failure of the file system (root may write anywhere, so a read-only folder would not do).
    let blocker = images.join("spurion-ledger.json.lock");
    std::fs::create_dir(&blocker).unwrap();
    let mut h = inspector(vec![image.clone()], Some(ledger_file.clone()), &tmp.path().join("config"), MethodKind::Gradient);
    wait_for(&mut h, "the image", 60, |a| a.current_prepared().is_some());
    h.key_press(egui::Key::Num3);
    h.run_steps(1);
    wait_until(&mut h, "the failed save", 30, |a| matches!(a.ledger.status(), Some(Status::Unsaved(_))));
    h.run_steps(1);
    assert_eq!(h.state().ledger.verdict_of(&image), Some(Verdict::Unsure), "the verdict is kept in memory");
    let told = h.query_all_by_label_contains("ledger NOT saved").count();
    assert!(told >= 1, "the failure is on screen");
    let (said, bad) = h.state().ledger.status_line();
    assert!(bad && h.query_all_by_label_contains(&said).count() >= 1, "the whole reason is on screen: {said}");
    assert!(said.contains(&ledger_file.display().to_string()) && said.contains("kept in memory"), "{said}");
    assert!(!ledger_file.exists(), "nothing was written");

    // Asked to close now, the window stays open and says what is not saved.
    h.input_mut().viewports.entry(egui::ViewportId::ROOT).or_default().events.push(egui::ViewportEvent::Close);
    h.run_steps(4);
    assert!(h.state().closing && h.state().ledger.store.is_some(), "the inspector did not close over an unsaved verdict");
    assert!(h.query_by_label("Keep the inspector open").is_some());

    // Once the disk allows, the retry saves it by itself, and the window closes.
    std::fs::remove_dir(&blocker).unwrap();
    wait_until(&mut h, "the retry", 30, |a| a.ledger.store.is_none() && !a.closing);
    assert_eq!(Ledger::open(&ledger_file).unwrap().verdict("hillmoor/0002-hillmoor.png"), Some(Verdict::Unsure));
}

#[test]
fn a_drawn_region_is_kept_in_the_ledger_changes_the_figures_and_matches_explain() {
    let tmp = tempfile::tempdir().unwrap();
    // A North Quay image: no finder finds a region in it, so before drawing there are no figures.
    let images = site_folder(tmp.path(), &["0003-north-quay.png"]);
    let image = images.join("north-quay/0003-north-quay.png");
    // Opened alone, an image keeps its verdicts in the ledger of its own folder.
    let ledger_folder = images.join("north-quay");
    let mut h = inspector(vec![image.clone()], None, &tmp.path().join("config"), MethodKind::Gradient);
    wait_for(&mut h, "the reading", 120, |a| a.current_shown().is_some());
    let before = h.state().current_shown().unwrap().1;
    assert!(before.assessment.regions.is_empty(), "{:?}", before.assessment.regions.iter().map(|r| &r.label).collect::<Vec<_>>());

    // Draw a box by dragging over the image, in box mode.
    click(&mut h, "box");
    let place = h.state().slide_place.unwrap();
    let (a, b) = (place.to_screen([100.3, 60.2]), place.to_screen([170.6, 140.9]));
    h.drag_at(a);
    h.run_steps(1);
    for t in 1..=5 {
        h.hover_at(a + (b - a) * (t as f32 / 5.0));
        h.run_steps(1);
    }
    h.drop_at(b);
    h.run_steps(2);
    let drawn = h.state().ledger.drawn_of(&image);
    assert_eq!(drawn.shapes().len(), 1, "{:?}", notes(h.state()));
    let spurion::regions::Shape::Rect { bbox } = drawn.shapes()[0].shape.clone() else { panic!("a box was drawn") };
    // Corners snap outward to pixel edges: [100.3, 60.2] → [100, 60], [170.6, 140.9] → [171, 141].
    assert_eq!(bbox, [100.0, 60.0, 171.0, 141.0]);
    assert_eq!(drawn.shapes()[0].label, "mark");
    // Esc leaves the drawing mode (dragging pans again).
    assert_eq!(h.state().draw.mode, spurion::gui::state::DrawMode::Box);
    h.key_press(egui::Key::Escape);
    h.run_steps(1);
    assert_eq!(h.state().draw.mode, spurion::gui::state::DrawMode::Off);

    // The figures are computed again with the drawn region, from the same map.
    wait_for(&mut h, "the figures with the drawn region", 120, |a| a.current_shown().is_some_and(|(k, _)| !k.drawn.is_empty()));
    let after = h.state().current_shown().unwrap().1;
    assert!(std::sync::Arc::ptr_eq(&before.reading, &after.reading), "no new map for a drawn region");
    assert_eq!(after.assessment.regions.len(), 1);
    let region = &after.assessment.regions[0];
    assert_eq!(region.kind, RegionKind::DrawnRegion);
    assert!(after.assessment.all_regions.as_ref().and_then(|f| f.mark_share).is_some(), "mark share on all regions, now that there is one");
    h.run_steps(1);
    assert!(h.query_by_label_contains("drawn region (mark): mark share ").is_some(), "the figures list the drawn region");

    // `spurion explain --ledger` reads the same region from the ledger file: the same figures.
    wait_until(&mut h, "the ledger to be saved", 30, saved);
    let out = tmp.path().join("cli");
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_spurion"))
        .args(["explain", "--model", model_path().to_str().unwrap(), "--image", image.to_str().unwrap(), "--method", "gradient"])
        .args(["--ledger", ledger_folder.to_str().unwrap(), "--quiet", "--out", out.to_str().unwrap()])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let cli: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
    let cr = &cli["regions"][0];
    assert_eq!(cr["kind"], "drawn-region");
    assert_eq!(cr["box"], serde_json::json!([100, 60, 171, 141]));
    let close = |g: Option<f64>, c: &serde_json::Value| (g.unwrap() - c.as_f64().unwrap()).abs() <= 1e-6;
    assert!(close(region.figures.mark_share, &cr["mark_share"]), "mark share: inspector {:?}, explain {}", region.figures.mark_share, cr["mark_share"]);
    assert!(close(region.figures.lift, &cr["lift"]), "lift: inspector {:?}, explain {}", region.figures.lift, cr["lift"]);
    let removal = region.removal.as_ref().expect("the drawn region is painted out too");
    assert!(close(Some(removal.probability_drop), &cr["removal"]["probability_drop"]), "removal: {removal:?} vs {}", cr["removal"]);
    assert_eq!(cli["suspect"].as_bool(), Some(after.assessment.suspect));

    // Deleted from the list, the region leaves the ledger and the figures.
    click(&mut h, "delete");
    assert!(h.state().ledger.drawn_of(&image).is_empty());
    wait_for(&mut h, "the figures without it", 60, |a| a.current_shown().is_some_and(|(_, s)| s.assessment.regions.is_empty()));
    assert!(!h.state().notes.iter().any(|n| n.kind == NoteKind::Error));
}
