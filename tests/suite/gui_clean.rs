//! The sweep view's "Clean marked images", driven headless (egui_kittest) as a curator would:
//! after a sweep, with one image marked in the ledger, the click cleans on a worker with
//! progress, the folder is left as it was, and the cleaned copy of the image on the slide opens
//! beside its original.

use egui_kittest::kittest::Queryable;
use spurion::ledger::Verdict;
use spurion::methods::MethodKind;

use crate::gui_curate::{click, inspector, notes, run_sweep, saved, site_folder, wait_until};
use crate::gui_inspector::wait_for;

#[test]
fn the_marked_images_of_a_sweep_are_cleaned_and_the_copy_opens_beside_the_original() {
    let tmp = tempfile::tempdir().unwrap();
    let images = site_folder(tmp.path(), &["0000-north-quay.png", "0003-north-quay.png", "0002-hillmoor.png", "0005-hillmoor.png"]);
    let before: Vec<Vec<u8>> = ["north-quay/0000-north-quay.png", "hillmoor/0002-hillmoor.png"].iter().map(|f| std::fs::read(images.join(f)).unwrap()).collect();
    let mut h = inspector(vec![images.clone()], None, &tmp.path().join("config"), MethodKind::Gradient);
    run_sweep(&mut h, 4);
    // Mark one Hillmoor image with key 2, as a curator would, and let the ledger save it.
    let marked = images.join("hillmoor/0002-hillmoor.png");
    click(&mut h, "hillmoor/0002-hillmoor.png");
    wait_for(&mut h, "the image", 60, |a| a.current_prepared().is_some());
    h.key_press(egui::Key::Num2);
    h.run_steps(2);
    assert_eq!(h.state().ledger.verdict_of(&marked), Some(Verdict::Marked));
    wait_until(&mut h, "the ledger to be saved", 30, saved);

    click(&mut h, "Clean marked images");
    assert!(h.state().sweep.clean.job.is_some(), "the click started the cleaning; notes: {:?}", notes(h.state()));
    wait_until(&mut h, "the cleaning", 120, |a| a.sweep.clean.job.is_none());
    let said = notes(h.state());
    assert!(said.iter().any(|n| n.contains("images cleaned")), "{said:?}");
    let out = tmp.path().join("images-clean");
    let copy = out.join("hillmoor/0002-hillmoor.png");
    assert_eq!(h.state().current_image().map(|e| e.path.clone()), Some(copy.clone()), "the cleaned copy is on the slide");
    assert!(h.state().images.iter().any(|e| e.path == marked), "its original stays in the list beside it");
    assert_ne!(std::fs::read(&copy).unwrap(), before[1], "the marked image was painted");
    let after: Vec<Vec<u8>> = ["north-quay/0000-north-quay.png", "hillmoor/0002-hillmoor.png"].iter().map(|f| std::fs::read(images.join(f)).unwrap()).collect();
    assert_eq!(after, before, "the folder itself is never written");
    let manifest = std::fs::read_to_string(out.join("spurion-clean.csv")).unwrap();
    assert!(manifest.lines().any(|l| l.starts_with("hillmoor/0002-hillmoor.png,cleaned,") && l.contains("ledger verdict marked")), "{manifest}");
    h.run_steps(2);
    assert!(h.query_by_label("Clean marked images").is_some(), "the button is back once the job ends");

    // Another image marked: the ledger changed, so the next cleaning is a new copy beside the
    // first, which is kept as it was.
    let first = std::fs::read_to_string(out.join("spurion-clean.csv")).unwrap();
    click(&mut h, "hillmoor/0005-hillmoor.png");
    h.key_press(egui::Key::Num2);
    h.run_steps(2);
    wait_until(&mut h, "the ledger to be saved", 30, saved);
    click(&mut h, "Clean marked images");
    wait_until(&mut h, "the second cleaning", 120, |a| a.sweep.clean.job.is_none());
    let second = tmp.path().join("images-clean-2");
    let manifest = std::fs::read_to_string(second.join("spurion-clean.csv")).unwrap_or_else(|e| panic!("{e}; notes: {:?}", notes(h.state())));
    assert!(manifest.lines().any(|l| l.starts_with("hillmoor/0005-hillmoor.png,cleaned,")), "{manifest}");
    assert_eq!(std::fs::read_to_string(out.join("spurion-clean.csv")).unwrap(), first);
    assert_eq!(h.state().current_image().map(|e| e.path.clone()), Some(second.join("hillmoor/0005-hillmoor.png")));
}
