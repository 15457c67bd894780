use std::io;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use super::*;
use crate::regions::RegionKind;
use crate::regions::drawn::Shape;

fn at(ms: i64) -> Stamp {
    Stamp::from_millis(1_780_000_000_000 + ms)
}

fn change(image: &str, ms: i64, edit: Edit) -> Change {
    Change { image: image.into(), at: at(ms), edit }
}

fn rect(label: &str, b: [f64; 4]) -> DrawnShape {
    DrawnShape { label: label.into(), shape: Shape::Rect { bbox: b } }
}

/// A ledger with every kind of content, including notes that CSV and JSON must quote.
fn sample(path: &Path) -> Ledger {
    let mut l = Ledger::new(path, None).unwrap();
    for c in [
        change("hillmoor/0005.png", 1, Edit::Verdict(Some(Verdict::Marked))),
        change("hillmoor/0005.png", 2, Edit::Note("tag, top-left; \"TL\" glyph\nsecond line".into())),
        change("hillmoor/0005.png", 3, Edit::AddDrawn { shapes: vec![rect("tag", [2.0, 2.0, 30.5, 14.0])], image_size: Some([128, 128]) }),
        change("north-quay/0000.png", 4, Edit::Verdict(Some(Verdict::Clean))),
        change("saltmarsh/0001.png", 5, Edit::Note("NA".into())),
        change("saltmarsh/0004.png", 6, Edit::Verdict(Some(Verdict::Exclude))),
        change("saltmarsh/0004.png", 7, Edit::Note("=1+1, ünïcode – ✓".into())),
        change("x/poly.png", 8, Edit::SetDrawn {
            shapes: vec![DrawnShape { label: String::new(), shape: Shape::Polygon { points: vec![[0.0, 0.0], [9.0, 0.0], [0.0, 7.25]] } }],
            image_size: Some([16, 12]),
        }),
        change("x/unsure.png", 9, Edit::Verdict(Some(Verdict::Unsure))),
    ] {
        c.check().unwrap();
        l.apply(&c);
    }
    l
}

/// A writer that fails with `kind` while `fail` is set, and writes durably otherwise.
fn switchable(fail: Arc<AtomicBool>, kind: io::ErrorKind) -> Box<dyn Writer> {
    Box::new(move |p: &Path, b: &[u8]| if fail.load(Ordering::SeqCst) { Err(io::Error::from(kind)) } else { replace_locked(p, b) })
}

fn ledger_path(dir: &tempfile::TempDir) -> PathBuf {
    dir.path().join(DEFAULT_NAME)
}

#[test]
fn verdicts_parse_by_name_and_by_key() {
    for (i, v) in Verdict::ALL.iter().enumerate() {
        assert_eq!(v.key() as usize, i + 1);
        assert_eq!(Verdict::from_key(v.key()), Some(*v));
        assert_eq!(Verdict::parse(v.name()).unwrap(), Some(*v));
        assert_eq!(Verdict::parse(&(i + 1).to_string()).unwrap(), Some(*v));
    }
    assert_eq!(Verdict::parse("none").unwrap(), None);
    assert_eq!(Verdict::parse(" Marked ").unwrap(), Some(Verdict::Marked));
    assert!(Verdict::parse("5").is_err() && Verdict::parse("maybe").is_err());
    assert_eq!(Verdict::from_key(0), None);
}

#[test]
fn a_ledger_reads_back_equal_to_what_was_written() {
    let dir = tempfile::tempdir().unwrap();
    let path = ledger_path(&dir);
    let l = sample(&path);
    let text = l.to_json().unwrap();
    // Plain JSON with the format and version, one line per image.
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    assert_eq!((v["format"].as_str(), v["version"].as_u64()), (Some(FORMAT), Some(VERSION as u64)));
    assert_eq!(text.lines().filter(|t| t.starts_with("    \"")).count(), l.len());
    assert_eq!(Ledger::from_json(&path, &text).unwrap(), l);
    // An empty ledger too.
    let e = Ledger::new(&path, None).unwrap();
    assert_eq!(Ledger::from_json(&path, &e.to_json().unwrap()).unwrap(), e);
    assert_eq!(l.counts(), Counts { images: 6, clean: 1, marked: 1, unsure: 1, exclude: 1, no_verdict: 2, with_drawn_regions: 2 });
}

#[test]
fn an_entry_left_with_nothing_is_dropped() {
    let dir = tempfile::tempdir().unwrap();
    let mut l = sample(&ledger_path(&dir));
    l.apply(&change("north-quay/0000.png", 20, Edit::Verdict(None)));
    assert!(l.entry("north-quay/0000.png").is_none());
    l.apply(&change("hillmoor/0005.png", 21, Edit::Forget));
    assert!(l.entry("hillmoor/0005.png").is_none());
    assert!(l.is_excluded("saltmarsh/0004.png") && !l.is_excluded("x/unsure.png"));
}

#[test]
fn damaged_newer_and_foreign_ledgers_are_refused_and_left_as_they_are() {
    let dir = tempfile::tempdir().unwrap();
    let path = ledger_path(&dir);
    let good = sample(&path).to_json().unwrap();
    let cases = [
        (good[..good.len() / 2].to_string(), "not a readable spurion ledger"),
        (String::new(), "not a readable spurion ledger"),
        (good.replace("\"version\": 1", "\"version\": 2").replace("\"root\"", "\"colour\": 1, \"root\""), "newer spurion"),
        (good.replace(FORMAT, "some-other-format"), "\"format\" is \"some-other-format\""),
        (good.replace("\"marked\"", "\"markd\""), "markd"),
        (good.replace("hillmoor/0005.png", "../0005.png"), "not an image path relative"),
    ];
    for (text, says) in cases {
        std::fs::write(&path, &text).unwrap();
        let e = format!("{:#}", load(&path).unwrap_err());
        assert!(e.contains(says) && e.contains(&path.display().to_string()), "{says}: {e}");
        // A writer must not replace a file it could not read.
        let r = commit(&path, None, &mut DiskWriter, |l| l.apply(&Change::verdict("a.png", Some(Verdict::Clean))));
        let err = r.unwrap_err();
        assert!(err.to_string().contains(&path.display().to_string()), "{err}");
        assert_eq!(std::fs::read_to_string(&path).unwrap(), text, "the file was changed");
        // Nor may a store open it.
        assert!(Store::open(&path).is_err());
    }
}

#[test]
fn a_failing_writer_keeps_the_verdict_in_memory_tells_the_user_and_saves_once_it_works() {
    let dir = tempfile::tempdir().unwrap();
    let path = ledger_path(&dir);
    for kind in [io::ErrorKind::StorageFull, io::ErrorKind::ReadOnlyFilesystem, io::ErrorKind::PermissionDenied] {
        std::fs::remove_file(&path).ok();
        let fail = Arc::new(AtomicBool::new(true));
        let mut store = Store::open_with(&path, None, switchable(fail.clone(), kind)).unwrap();
        store.change(Change::verdict("a.png", Some(Verdict::Marked))).unwrap();
        assert_eq!(store.ledger().verdict("a.png"), Some(Verdict::Marked), "shown at once");
        let p = store.pending().expect("the failed save is pending");
        let msg = p.message();
        let advice = match kind {
            io::ErrorKind::StorageFull => "disk is full",
            io::ErrorKind::ReadOnlyFilesystem => "read-only file system",
            _ => "may not write",
        };
        for says in [path.display().to_string().as_str(), advice, "kept in memory", "a.png", "1 change"] {
            assert!(msg.contains(says), "{kind:?}: message lacks {says:?}: {msg}");
        }
        assert!(load(&path).unwrap().is_none(), "nothing may reach the disk through a failing writer");
        // Another change while the disk still fails: both kept.
        store.change(Change::note("b.png", "later")).unwrap();
        assert_eq!(store.pending().unwrap().changes, 2);
        assert!(store.retry().is_err());
        // The disk works again: the next retry saves both.
        fail.store(false, Ordering::SeqCst);
        store.retry().unwrap();
        assert!(store.pending().is_none());
        let disk = Ledger::open(&path).unwrap();
        assert_eq!((disk.verdict("a.png"), disk.entry("b.png").map(|e| e.note.as_str())), (Some(Verdict::Marked), Some("later")));
        // And the next change saves what failed before it, without a retry.
        fail.store(true, Ordering::SeqCst);
        store.change(Change::verdict("c.png", Some(Verdict::Clean))).unwrap();
        fail.store(false, Ordering::SeqCst);
        store.change(Change::verdict("d.png", Some(Verdict::Unsure))).unwrap();
        assert!(store.pending().is_none());
        let disk = Ledger::open(&path).unwrap();
        assert_eq!((disk.verdict("c.png"), disk.verdict("d.png")), (Some(Verdict::Clean), Some(Verdict::Unsure)));
    }
}

#[test]
fn save_as_moves_an_unsavable_ledger_elsewhere_with_its_unsaved_changes() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::create_dir(dir.path().join("data")).unwrap();
    let path = dir.path().join("data").join(DEFAULT_NAME);
    let fail = Arc::new(AtomicBool::new(true));
    let mut store = Store::open_with(&path, None, switchable(fail.clone(), io::ErrorKind::ReadOnlyFilesystem)).unwrap();
    store.change(Change::verdict("a.png", Some(Verdict::Marked))).unwrap();
    assert!(store.pending().is_some());
    fail.store(false, Ordering::SeqCst);
    let elsewhere = dir.path().join("elsewhere.json");
    store.save_as(&elsewhere).unwrap();
    assert!(store.pending().is_none());
    let moved = Ledger::open(&elsewhere).unwrap();
    assert_eq!(moved.verdict("a.png"), Some(Verdict::Marked));
    // Its root still names the data folder, so keys mean the same images.
    assert_eq!(key::absolute(&moved.root_dir()).unwrap(), key::absolute(&dir.path().join("data")).unwrap());
    assert!(store.save_as(&elsewhere).is_err(), "a place that holds a ledger is refused");
}

#[test]
fn concurrent_writers_never_lose_each_others_changes() {
    let dir = tempfile::tempdir().unwrap();
    let path = ledger_path(&dir);
    let mut a = Store::open(&path).unwrap();
    let mut b = Store::open(&path).unwrap();
    a.change(Change::verdict("a.png", Some(Verdict::Clean))).unwrap();
    b.change(Change::verdict("b.png", Some(Verdict::Marked))).unwrap();
    assert_eq!(b.ledger().verdict("a.png"), Some(Verdict::Clean), "b's save re-read a's change");
    // Threads, each its own commits on its own images, all at once: the lock serialises them.
    let threads: Vec<_> = (0..4)
        .map(|t| {
            let path = path.clone();
            std::thread::spawn(move || {
                for i in 0..8 {
                    commit(&path, None, &mut DiskWriter, |l| l.apply(&Change::verdict(format!("t{t}/{i}.png"), Some(Verdict::Unsure)))).unwrap();
                }
            })
        })
        .collect();
    threads.into_iter().for_each(|t| t.join().unwrap());
    let disk = Ledger::open(&path).unwrap();
    assert_eq!(disk.len(), 2 + 4 * 8, "every commit is in the file");
}

#[test]
fn a_killed_writers_temporary_file_is_replaced_by_the_next_writer() {
    let dir = tempfile::tempdir().unwrap();
    let path = ledger_path(&dir);
    let stray = file::temp_path(&path);
    assert_eq!(stray, dir.path().join(format!(".{DEFAULT_NAME}.tmp")));
    std::fs::write(&stray, b"{\"format\": \"spurion-le").unwrap();
    commit(&path, None, &mut DiskWriter, |l| l.apply(&Change::verdict("a.png", Some(Verdict::Clean)))).unwrap();
    assert!(!stray.exists());
    assert_eq!(Ledger::open(&path).unwrap().verdict("a.png"), Some(Verdict::Clean));
}

#[test]
fn the_background_store_never_waits_on_the_disk_and_resumes_saving_by_itself() {
    let dir = tempfile::tempdir().unwrap();
    let path = ledger_path(&dir);
    let hold = Arc::new(AtomicBool::new(true));
    let fail = Arc::new(AtomicBool::new(false));
    let (h, f) = (hold.clone(), fail.clone());
    let writer = Box::new(move |p: &Path, b: &[u8]| {
        while h.load(Ordering::SeqCst) {
            std::thread::sleep(Duration::from_millis(2));
        }
        if f.load(Ordering::SeqCst) { Err(io::Error::from(io::ErrorKind::StorageFull)) } else { replace_locked(p, b) }
    });
    let mut bg = BackgroundStore::spawn(Store::open_with(&path, None, writer).unwrap(), || {});
    // The disk is stuck: the change still shows at once and the call returns.
    let started = Instant::now();
    bg.change(Change::verdict("a.png", Some(Verdict::Marked))).unwrap();
    assert!(started.elapsed() < Duration::from_millis(500));
    assert_eq!(bg.ledger().verdict("a.png"), Some(Verdict::Marked));
    assert_eq!(bg.status(), Status::Saving { changes: 1 });
    hold.store(false, Ordering::SeqCst);
    let wait_for = |bg: &mut BackgroundStore, want: &dyn Fn(&Status) -> bool| {
        let deadline = Instant::now() + Duration::from_secs(20);
        while !want(&bg.status()) {
            assert!(Instant::now() < deadline, "status stayed {:?}", bg.status());
            bg.poll();
            std::thread::sleep(Duration::from_millis(5));
        }
    };
    wait_for(&mut bg, &|s| *s == Status::Saved);
    assert_eq!(Ledger::open(&path).unwrap().verdict("a.png"), Some(Verdict::Marked));
    // A full disk: told, kept, and saved by the thread's own retry once there is room.
    fail.store(true, Ordering::SeqCst);
    bg.change(Change::verdict("b.png", Some(Verdict::Clean))).unwrap();
    wait_for(&mut bg, &|s| matches!(s, Status::Unsaved(u) if u.message().contains("disk is full")));
    assert_eq!(bg.ledger().verdict("b.png"), Some(Verdict::Clean));
    fail.store(false, Ordering::SeqCst);
    wait_for(&mut bg, &|s| *s == Status::Saved);
    assert_eq!(Ledger::open(&path).unwrap().verdict("b.png"), Some(Verdict::Clean));
    bg.change(Change::note("c.png", "last")).unwrap();
    assert_eq!(bg.close(), None, "closing waits for the last save");
    assert_eq!(Ledger::open(&path).unwrap().entry("c.png").map(|e| e.note.clone()), Some("last".into()));
}

#[test]
fn csv_export_and_import_give_the_same_ledger() {
    let dir = tempfile::tempdir().unwrap();
    let l = sample(&ledger_path(&dir));
    let csv_path = dir.path().join("ledger.csv");
    let mut bytes = Vec::new();
    write_csv(&l, &mut bytes).unwrap();
    std::fs::write(&csv_path, &bytes).unwrap();
    let rows = read_csv(&csv_path).unwrap();
    assert_eq!(rows.len(), l.len());
    let mut back = Ledger::new(&dir.path().join("other.json"), None).unwrap();
    let r = import_rows(&mut back, &rows, Prefer::Newer, Stamp::now());
    assert_eq!(r.added.len(), l.len());
    assert_eq!(back.entries().collect::<Vec<_>>(), l.entries().collect::<Vec<_>>());
    // Into the ledger it came from: nothing to do.
    let mut same = l.clone();
    let r = import_rows(&mut same, &rows, Prefer::Newer, Stamp::now());
    assert_eq!((r.unchanged, same), (l.len(), l));
}

fn write(dir: &tempfile::TempDir, name: &str, text: &str) -> PathBuf {
    let p = dir.path().join(name);
    std::fs::write(&p, text).unwrap();
    p
}

#[test]
fn import_merges_by_the_rule_asked() {
    let dir = tempfile::tempdir().unwrap();
    let base = sample(&ledger_path(&dir));
    let t_old = at(0).to_string();
    let t_new = at(100).to_string();
    let csv = write(
        &dir,
        "in.csv",
        &format!(
            "image,verdict,changed\n\
             hillmoor/0005.png,clean,{t_old}\n\
             north-quay/0000.png,marked,{t_new}\n\
             new/one.png,unsure,\n\
             x/unsure.png,,{t_new}\n"
        ),
    );
    let rows = read_csv(&csv).unwrap();
    let now = at(1000);
    let mut l = base.clone();
    let r = import_rows(&mut l, &rows, Prefer::Newer, now);
    assert_eq!(r.kept, vec!["hillmoor/0005.png"], "the ledger's entry changed later");
    assert_eq!(r.replaced, vec!["north-quay/0000.png"]);
    assert_eq!(r.added, vec!["new/one.png"]);
    assert_eq!(r.removed, vec!["x/unsure.png"], "a row that leaves nothing removes the image");
    assert_eq!(l.verdict("north-quay/0000.png"), Some(Verdict::Marked));
    assert_eq!(l.entry("new/one.png").unwrap().changed, now, "a row without a time counts as changed now");
    // Columns the file lacks are left as they were: the note and the drawn regions stay.
    let h = l.entry("hillmoor/0005.png").unwrap();
    assert!(h.note.starts_with("tag") && h.drawn.len() == 1);
    let mut l = base.clone();
    let r = import_rows(&mut l, &rows, Prefer::Csv, now);
    assert_eq!(r.kept.len(), 0);
    let h = l.entry("hillmoor/0005.png").unwrap();
    assert_eq!((h.verdict, h.drawn.len(), h.note.starts_with("tag")), (Some(Verdict::Clean), 1, true));
    let mut l = base.clone();
    let r = import_rows(&mut l, &rows, Prefer::Ledger, now);
    assert_eq!((r.kept.len(), r.added.len()), (3, 1));
}

#[test]
fn import_errors_name_the_file_the_line_and_the_column() {
    let dir = tempfile::tempdir().unwrap();
    let cases = [
        ("image,verdict\na.png,clean\nb.png,maybe\n", "line 3, column `verdict`"),
        ("image,verdict\n../a.png,clean\n", "line 2, column `image`"),
        ("image,verdict\na.png,clean\na.png,marked\n", "on line 2 too"),
        ("picture,verdict\na.png,clean\n", "no `image` column"),
        ("image,drawn_regions\na.png,[{\"shape\": \"rect\"}]\n", "column `drawn_regions`"),
        ("image,drawn_regions\na.png,\"[{\"\"shape\"\": \"\"polygon\"\", \"\"points\"\": [[0,0],[1,1]]}]\"\n", "at least 3 points"),
        ("image,changed\na.png,last tuesday\n", "column `changed`"),
    ];
    for (text, says) in cases {
        let p = write(&dir, "bad.csv", text);
        let e = format!("{:#}", read_csv(&p).unwrap_err());
        assert!(e.contains(says) && e.contains("bad.csv"), "{says}: {e}");
    }
}

#[test]
fn drawn_regions_come_out_as_regions_on_the_image_grid() {
    let dir = tempfile::tempdir().unwrap();
    let mut l = Ledger::new(&ledger_path(&dir), None).unwrap();
    l.apply(&change("a.png", 1, Edit::AddDrawn { shapes: vec![rect("ruler", [2.0, 1.0, 6.0, 3.0])], image_size: Some([10, 8]) }));
    let r = l.drawn_regions_for("a.png", 8, 10).unwrap();
    assert_eq!(r.len(), 1);
    assert_eq!((r[0].kind, r[0].bbox, r[0].area(), r[0].detail.as_str()), (RegionKind::DrawnRegion, [2, 1, 6, 3], 8, "ruler"));
    let e = format!("{:#}", l.drawn_regions_for("a.png", 16, 16).unwrap_err());
    assert!(e.contains("10×8") && e.contains("a.png"), "{e}");
    assert!(l.drawn_regions_for("nothing.png", 8, 10).unwrap().is_empty());
    // Regions drawn on another size of the image belong to another version of it.
    l.apply(&change("a.png", 2, Edit::AddDrawn { shapes: vec![rect("", [0.0, 0.0, 4.0, 4.0])], image_size: Some([16, 16]) }));
    let e = l.entry("a.png").unwrap();
    assert_eq!((e.drawn.len(), e.image_size), (1, Some([16, 16])));
    assert!(Change::now("a.png", Edit::AddDrawn { shapes: vec![rect("", [f64::NAN, 0.0, 1.0, 1.0])], image_size: None }).check().is_err());
}
