//! The recurring hotspots in the inspector's sweep view, driven headless as a person would:
//! after a sweep of Hillmoor's and North Quay's images the tag's cluster is listed with its
//! exemplars, and one click on its "accept as mark" marks every image of it in the ledger, on
//! disk.

use egui_kittest::kittest::Queryable;
use spurion::ledger::{Ledger, Verdict};
use spurion::methods::MethodKind;

use crate::gui_curate::{inspector, notes, run_sweep, saved, site_folder, wait_until};

#[test]
fn accepting_a_recurring_hotspot_marks_all_its_images_in_the_ledger() {
    let tmp = tempfile::tempdir().unwrap();
    let names = [
        "0002-hillmoor.png",
        "0005-hillmoor.png",
        "0008-hillmoor.png",
        "0011-hillmoor.png",
        "0014-hillmoor.png",
        "0017-hillmoor.png",
        "0000-north-quay.png",
        "0003-north-quay.png",
        "0006-north-quay.png",
    ];
    let images = site_folder(tmp.path(), &names);
    let mut h = inspector(vec![images.clone()], None, &tmp.path().join("config"), MethodKind::Gradient);
    run_sweep(&mut h, names.len());
    let r = h.state().sweep.result.clone().unwrap();
    for (c, pics) in &r.recurring {
        eprintln!("cluster {}: {} images {:?} at {:?}, {} exemplar pictures", c.id, c.images, c.groups, c.place, pics.len());
    }
    let k = r
        .recurring
        .iter()
        .position(|(c, _)| c.groups.get("hillmoor").copied().unwrap_or(0) * 2 > c.images && c.place[0] < 0.2 && c.place[1] < 0.2)
        .expect("the tag's cluster is listed");
    let (tag, pics) = &r.recurring[k];
    assert!(!pics.is_empty() && pics.len() == tag.exemplars.len(), "its exemplars are drawn");
    assert_eq!(h.state().sweep.recurring_tex.len(), r.recurring.len());
    // The k-th "accept as mark" button is the tag's.
    let buttons: Vec<_> = h.query_all_by_label("accept as mark").collect();
    assert_eq!(buttons.len(), r.recurring.len());
    buttons[k].click();
    h.run_steps(2);
    wait_until(&mut h, "the ledger saved", 60, saved);
    assert!(notes(h.state()).iter().any(|n| n.contains(&format!("recurring hotspot {}", tag.id))), "{:?}", notes(h.state()));
    // On disk, read afresh: every image of the cluster is marked and carries its box.
    let l = Ledger::open(&images.join("spurion-ledger.json")).unwrap();
    for m in &tag.members {
        let key = l.key_for(&images.join(&m.path)).unwrap();
        let e = l.entry(&key).unwrap_or_else(|| panic!("{key} is in the ledger"));
        assert_eq!(e.verdict, Some(Verdict::Marked), "{key}");
        assert!(e.drawn.iter().any(|d| d.label == format!("recurring hotspot {}", tag.id)), "{key}");
    }
    assert_eq!(l.len(), tag.images, "no other image was touched");
    // The table shows the verdicts at once.
    assert_eq!(h.query_all_by_label("marked").count(), tag.images);
}
