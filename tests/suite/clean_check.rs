//! `spurion clean --check` on the demo cooperative: painting Hillmoor's tag and frame out of its
//! images takes away what the shortcut sample model decides by, and leaves the control model
//! (trained where the marks say nothing) about where it was. The figures are compared with the
//! same phantoms generated without any mark (the demo draws the same images whatever the
//! marks rule), which is the ground truth a cleaning should come close to.
//!
//! The bounds below were chosen on the demo: they are a regression check of the whole loop
//! (ledger → finders → fills → the model), not evidence that cleaning works on other data.

use std::path::{Path, PathBuf};

use spurion::clean::check::{CheckResult, CheckSetup, GroupCheck, check};
use spurion::clean::{self, Job, LedgerRegions, LedgerSource};
use spurion::control::Control;
use spurion::demo::{Marks, Mix, SetSpec, write_demo_set};
use spurion::feed::{FeedCard, OpenOptions};
use spurion::ledger::{Change, Ledger, Verdict, commit};
use spurion::model::{LoadOptions, Model};
use spurion::regions::RegionKind;
use spurion::sweep::Groups;

fn load(name: &str) -> (Model, FeedCard) {
    let path = crate::common::root().join("sample-models").join(format!("{name}.onnx"));
    (Model::load(&path, &LoadOptions::default()).unwrap(), FeedCard::for_model(&path).unwrap().unwrap())
}

fn group<'a>(r: &'a CheckResult, name: &str) -> &'a GroupCheck {
    r.groups.iter().find(|g| g.group == name).unwrap()
}

fn run_check(model: &Model, card: &FeedCard, root: &Path, original: &Path, copy: &Path, painted: &(dyn Fn(&str) -> bool + Sync)) -> CheckResult {
    let setup = CheckSetup {
        model,
        card,
        open: OpenOptions::default(),
        groups: Groups::Folders,
        exclude: vec![],
        labels: Some((root.join("manifest.csv"), "label".into())),
    };
    check(&setup, original, copy, painted, &Control::new()).unwrap()
}

fn say(what: &str, g: &GroupCheck) {
    let p = |i: &Option<spurion::sweep::stats::Interval>| i.map(|i| format!("{:.1} % ({:.1}–{:.1})", 100.0 * i.estimate, 100.0 * i.low, 100.0 * i.high)).unwrap_or_default();
    eprintln!(
        "{what}: {} images, accuracy {} → {}, change {}, predictions changed {}",
        g.images,
        p(&g.accuracy_before),
        p(&g.accuracy_after),
        p(&g.accuracy_change),
        p(&g.changed_share)
    );
}

#[test]
fn cleaning_hillmoors_marks_takes_the_shortcut_models_accuracy_away() {
    let dir = tempfile::tempdir().unwrap();
    // The model cards' held-out seed (303) and mix (pooled), by site so the groups are the sites.
    let spec = |marks| SetSpec { count: 240, seed: 303, mix: Mix::Pooled, marks, masks: false, by_site: true, ..SetSpec::default() };
    let marked: PathBuf = dir.path().join("marked");
    let unmarked: PathBuf = dir.path().join("unmarked");
    write_demo_set(&marked, &spec(Marks::BySite), &Control::new()).unwrap();
    write_demo_set(&unmarked, &spec(Marks::None), &Control::new()).unwrap();
    let src = marked.join("images");
    let hill: Vec<String> = std::fs::read_dir(src.join("hillmoor")).unwrap().map(|e| format!("hillmoor/{}", e.unwrap().file_name().to_string_lossy())).collect();
    let led = dir.path().join("spurion-ledger.json");
    commit(&led, Some(&src), &mut spurion::ledger::DiskWriter, |l: &mut Ledger| {
        for f in &hill {
            l.apply(&Change::verdict(f.clone(), Some(Verdict::Marked)));
        }
    })
    .unwrap();
    let source = LedgerSource::open(&led, vec![Verdict::Marked], LedgerRegions::Found, Default::default()).unwrap();
    let out = dir.path().join("clean");
    let job = Job {
        images: src.clone(),
        out: out.clone(),
        exclude: vec![],
        sources: vec![&source],
        open: OpenOptions::default(),
        kinds: vec![RegionKind::BorderBand, RegionKind::BurnedInMark],
        min_confidence: 0.0,
    };
    let o = clean::run(&job, &Control::new()).unwrap();
    assert_eq!(o.cleaned, hill.len(), "every Hillmoor image had its marks found and painted");
    let records = clean::records(&out).unwrap();
    let painted = |rel: &str| records.get(rel).is_some_and(|r| r.action == clean::Action::Cleaned);

    let (shortcut, sc) = load("shortcut");
    let (control, cc) = load("control");
    let s = run_check(&shortcut, &sc, &marked, &src, &out, &painted);
    let c = run_check(&control, &cc, &marked, &src, &out, &painted);
    // Ground truth: the same phantoms drawn with no mark at all.
    let s_none = run_check(&shortcut, &sc, &marked, &src, &unmarked.join("images"), &|_| false);
    let c_none = run_check(&control, &cc, &marked, &src, &unmarked.join("images"), &|_| false);
    for (what, r) in [("shortcut, cleaned", &s), ("shortcut, never marked", &s_none), ("control, cleaned", &c), ("control, never marked", &c_none)] {
        say(&format!("{what}, hillmoor"), group(r, "hillmoor"));
        say(&format!("{what}, all"), &r.all);
    }
    let (sh, sh_none, ch) = (group(&s, "hillmoor"), group(&s_none, "hillmoor"), group(&c, "hillmoor"));
    let acc = |g: &GroupCheck| (g.accuracy_before.unwrap().estimate, g.accuracy_after.unwrap().estimate);
    // The shortcut model loses most of its Hillmoor accuracy, and the interval says so.
    assert!(acc(sh).0 - acc(sh).1 > 0.3, "shortcut Hillmoor accuracy {:?}", acc(sh));
    assert!(sh.accuracy_change.unwrap().high < 0.0);
    // ... ending near where it stands on the same images never marked.
    assert!((acc(sh).1 - acc(sh_none).1).abs() < 0.1, "cleaned {:?} against never marked {:?}", acc(sh), acc(sh_none));
    // The control model hardly moves.
    assert!((acc(ch).0 - acc(ch).1).abs() < 0.05, "control Hillmoor accuracy {:?}", acc(ch));
    // Only Hillmoor's images were painted, so the other sites' predictions stay as they were.
    for g in s.groups.iter().filter(|g| g.group != "hillmoor") {
        assert_eq!((g.cleaned, g.changed), (0, 0), "{}", g.group);
    }
}
